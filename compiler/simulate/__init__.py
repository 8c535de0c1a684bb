"""Stage 6: simulate what the generators play and estimate how good the
planned run will be, and why (fidelities and an error budget).

The model (:mod:`.model`) is built from the as-played waveforms; the
reference engine is qutip's ``mesolve``, the fast engine propagates the same
piecewise-constant model exactly (:mod:`.engines`)."""

from .run import SimOptions, simulate
from .types import BudgetLine, RunResult, SimulationResult, StepFidelity

__all__ = ["simulate", "SimOptions", "SimulationResult", "RunResult", "StepFidelity", "BudgetLine"]
