"""The one table of a sweep, for in-file sweeps (the report) and ``--vary``
sweeps (``dotseq sweep``) alike: plain frozen data, SI floats.

A :class:`SweepTable` has the axes (first outermost, one :class:`VarySpec`
each) and one :class:`PointResult` per computed grid point, in row-major
order.  ``compiler.sweep.table.make_table`` builds it from a sweep's points,
:func:`compiler.sweeptable.build.from_result` from a simulation's runs;
:mod:`.write` writes it as CSV and JSON and :mod:`.figure` draws it.
"""

from __future__ import annotations

from dataclasses import dataclass, field

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
    # what each read records (compiler.simulate.types.Observable), in read order
    observables: tuple = ()

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
    # which qubits the whole-run fidelities are of (docs/simulate.md, "Fidelity scope")
    scope: str = ""

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
