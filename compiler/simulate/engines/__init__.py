"""The engines that integrate a :class:`~compiler.simulate.model.Model`.

An engine reads only the model and a list of quadrature points
(:class:`~compiler.simulate.model.NoisePoint`); it knows nothing of devices,
waveforms or noise sources.  What an engine must implement
(:class:`Engine`):

* ``name``: the text the report prints (``"fast"``, ``"reference"``);
* ``average(model, points, *, rho0=None, process=False, trace_points=0)``
  -> :class:`~compiler.simulate.types.Evolution`: the weighted sum over
  the points (their weights sum to one) of the final state from the density
  matrix ``rho0`` (when given) and of the process (the d²×d² superoperator,
  column stacking, when ``process``), in the dots' rotating frames; with
  ``trace_points``, the populations of spin up of every dot at that many
  times for the first point (``traces``: ``"t"`` -> times from the start of
  the run, dot index -> values);
* ``evolve(model, point, ...)``: the same for one point;
* ``stats()`` -> dict of counters for the report (at least ``solver_calls``).

Engines are chosen by name from :data:`ENGINES`; a new engine is one module
here and one entry there.
"""

from __future__ import annotations

from typing import Protocol

from ..model import Model, NoisePoint
from ..types import Evolution
from .fast import ClusterTooLarge, FastEngine
from .reference import ReferenceEngine


class Engine(Protocol):
    name: str

    def average(self, model: Model, points, *, rho0=None, process: bool = False,
                trace_points: int = 0) -> Evolution: ...

    def evolve(self, model: Model, point: NoisePoint, *, rho0=None, process: bool = False,
               trace_points: int = 0) -> Evolution: ...

    def stats(self) -> dict: ...


ENGINES: dict[str, type] = {"fast": FastEngine, "reference": ReferenceEngine}


def make_engine(name: str, **options) -> Engine:
    """A fresh engine of the given name (a key of :data:`ENGINES`), with the
    ``options`` its constructor takes (others are for other engines)."""
    import inspect
    cls = ENGINES[name]
    params = inspect.signature(cls).parameters
    return cls(**{k: v for k, v in options.items() if k in params})


__all__ = ["ClusterTooLarge", "ENGINES", "Engine", "Evolution", "FastEngine", "ReferenceEngine", "make_engine"]
