"""Stage 6: simulate what the generators play and estimate how good the
planned run will be, and why (fidelities and an error budget).

Layout (docs/simulate.md):

* :mod:`.sources`: the registry of noise sources and the switches keyed by it;
* :mod:`.model`: the :class:`~.model.Model` as data (dots and their levels,
  Hamiltonian terms, dissipators, quasi-static noise variables) and the
  quadrature over the noise;
* :mod:`.build`: the model from a compiled run's as-played waveforms;
* :mod:`.engines`: the engines behind one protocol, chosen from ``ENGINES``
  (``fast``: exact cluster propagation; ``reference``: qutip ``mesolve``);
* :mod:`.fidelity`: ideal operations and fidelities;
* :mod:`.run`: whole-run and per-step fidelities, the error budget;
* :mod:`.types`: what the engines and the simulation return.
"""

from .run import SimOptions, simulate
from .types import BudgetLine, Evolution, RunResult, SimulationResult, StepFidelity

__all__ = ["simulate", "SimOptions", "SimulationResult", "RunResult", "StepFidelity", "BudgetLine",
           "Evolution"]
