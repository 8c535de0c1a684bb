"""What passes between the parts of a sweep (plain frozen data, SI floats).

``VarySpec`` (one ``--vary`` or ``--set``, read at the edge) ->
``SweepPlan`` (the axes and one ``PointTask`` per grid point, checked
before anything is simulated) -> ``PointResult`` (one per point, from the
worker) -> ``SweepTable`` (what is written as CSV, JSON and a figure).
"""

from __future__ import annotations

from dataclasses import dataclass, field

from ..device.model import Device
from ..program import Run
from ..simulate.run import SimOptions
from ..synth.types import CompiledRun
from ..units import Dim

# point status
OK = "ok"            # simulated
INVALID = "invalid"  # the inputs of this point are refused by a stage (message says why)
ERROR = "error"      # an internal error while simulating this point (a bug): not kept
MISSING = "missing"  # not computed (yet): only in partial tables


@dataclass(frozen=True)
class VarySpec:
    """One swept (or, with one value, pinned) parameter, in SI units.

    ``name`` is the canonical name (``field``, ``A.t2``, ``A-B.j_scale``,
    ``tau``); ``kind`` says whether it belongs to the device description or
    to the sequence file; ``unit`` is the SI symbol of ``dim`` used in tables
    (``s``, ``T``, ``Hz/V``, ``""`` for plain numbers).
    """
    name: str
    kind: str                      # "device" or "sequence"
    values: tuple[float, ...]      # SI, in sweep order
    dim: Dim
    unit: str
    text: str = ""                 # the argument as given, e.g. "field=0.5T:1.5T:11"
    spacing: str = "lin"           # "lin", "log" or "list"
    source: str = "cli"            # "cli" (--vary/--set) or "file" (a sweep of the sequence)

    @property
    def start(self) -> float:
        return self.values[0]

    @property
    def stop(self) -> float:
        return self.values[-1]

    @property
    def points(self) -> int:
        return len(self.values)


@dataclass(frozen=True)
class PointTask:
    """Everything a worker needs for one point; no file is read on the worker."""
    index: int                     # position in the row-major grid
    coords: tuple[float, ...]      # one SI value per axis
    run: Run
    device: Device
    options: SimOptions
    budget: bool
    # the point compiled when the plan checked it (None: compiled where it is
    # simulated; the plan keeps at most plan.KEEP_COMPILED_BYTES of samples)
    compiled: CompiledRun | None = None


@dataclass(frozen=True)
class SweepPlan:
    """A sweep checked up front: axes (first outermost), fixed settings, and
    one task per grid point in row-major order."""
    sequence: str                  # the sequence file as given
    device_name: str
    device_path: str
    axes: tuple[VarySpec, ...]
    fixed: tuple[VarySpec, ...]    # --set values (one value each)
    tasks: tuple[PointTask, ...]
    options: SimOptions
    budget: bool
    key: dict = field(default_factory=dict)      # what must match for --resume
    warnings: tuple[str, ...] = ()
    # per grid index: the warnings of that point's compiled run, worst first
    # (as `dotseq check` words them), each (severity, text)
    point_warnings: dict = field(default_factory=dict)

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(a.points for a in self.axes)

    @property
    def n_points(self) -> int:
        return len(self.tasks)


@dataclass(frozen=True)
class PointResult:
    """One simulated point.  Fidelities are of the whole run (up to the start
    of its trailing readout) against the ideal circuit (docs/simulate.md);
    ``fidelity`` is the average gate fidelity, or the state fidelity above
    five dots (``SweepTable.metric`` says which)."""
    index: int
    coords: tuple[float, ...]
    status: str                               # OK or INVALID (ERROR is never stored)
    message: str = ""                         # why INVALID / ERROR
    fidelity: float | None = None
    infidelity: float | None = None
    process_fidelity: float | None = None
    average_fidelity: float | None = None
    state_fidelity: float | None = None
    populations: tuple[tuple[str, float], ...] = ()      # P(spin up) per dot at the end
    duration: float | None = None                        # s, simulated span
    coherence: tuple[tuple[str, float, float, float], ...] = ()  # dot, T2, longest gate, ratio
    budget: tuple[tuple[str, float], ...] = ()           # source, infidelity contribution
    budget_floor: float | None = None
    budget_remainder: float | None = None
    wall_s: float = 0.0
    averaging_error: float | None = None     # |F(n) − F(m)| of the last two quadrature rules (fidelity)

    @property
    def margin(self) -> float | None:
        """The smallest coherence margin T2 / longest gate over the dots."""
        return min((c[3] for c in self.coherence), default=None)


@dataclass(frozen=True)
class SweepTable:
    """The results of a sweep, complete or partial (``missing`` lists the
    indices of points not computed)."""
    plan_key: dict
    sequence: str
    device_name: str
    axes: tuple[VarySpec, ...]
    fixed: tuple[VarySpec, ...]
    points: tuple[PointResult, ...]           # computed points, by index
    n_points: int
    options: dict
    metric: str                                # "average gate fidelity" or "state fidelity"
    budget: bool
    warnings: tuple[str, ...] = ()
    stats: dict = field(default_factory=dict)
    point_warnings: dict = field(default_factory=dict)   # index -> ((severity, text), ...)

    @property
    def missing(self) -> tuple[int, ...]:
        have = {p.index for p in self.points}
        return tuple(i for i in range(self.n_points) if i not in have)

    @property
    def complete(self) -> bool:
        return len(self.points) == self.n_points

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(a.points for a in self.axes)
