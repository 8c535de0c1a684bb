"""What passes between the parts of a sweep (plain frozen data, SI floats).

``VarySpec`` (one ``--vary`` or ``--set``, read at the edge) ->
``SweepPlan`` (the axes and one ``PointTask`` per grid point, checked
before anything is simulated) -> ``PointResult`` (one per point, from the
worker) -> ``SweepTable`` (what is written as CSV, JSON and a figure).
``VarySpec``, ``PointResult`` and ``SweepTable`` live in
:mod:`compiler.sweeptable.types`, shared with the report's in-file sweeps.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from ..device.model import Device
from ..program import Run
from ..simulate.run import SimOptions
from ..synth.types import CompiledRun
# the table a sweep ends in is shared with the report's in-file sweeps
from ..sweeptable.types import (ERROR, INVALID, MISSING, OK, PointResult, SweepTable,  # noqa: F401
                                VarySpec)


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
    # the memory check (sweep/memory.py): the sweep's limit, the points computed
    # at once, each point's share and the largest point's estimate (bytes;
    # None when no point was estimated: reference engine, dots of four levels)
    memory: dict = field(default_factory=dict)

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(a.points for a in self.axes)

    @property
    def n_points(self) -> int:
        return len(self.tasks)
