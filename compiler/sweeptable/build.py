"""Building the shared sweep table: the ranking metric of a set of points,
and the table of a simulation whose sequence sweeps (the report's in-file
sweeps; ``dotseq sweep`` builds its own in ``compiler.sweep.table``)."""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..numfmt import dim_for
from ..units import NONE
from .types import OK, PointResult, SweepTable, VarySpec

AVERAGE, STATE = "average gate fidelity", "state fidelity"


def with_metric(points) -> tuple[str, tuple[PointResult, ...]]:
    """The metric a table ranks by (the average gate fidelity when every
    computed point has it, else the state fidelity) and the points with
    ``fidelity``/``infidelity`` set to it."""
    pts = tuple(points)
    ok = [p for p in pts if p.status == OK]
    if all(p.average_fidelity is not None for p in ok):
        return AVERAGE, pts
    return STATE, tuple(
        p if p.status != OK or p.state_fidelity is None else
        dataclasses.replace(p, fidelity=p.state_fidelity, infidelity=1 - p.state_fidelity)
        for p in pts)


def grid_positions(result) -> list[tuple[int, ...]] | None:
    """Grid index (one per axis) of every run of a ``SimulationResult``: by
    its sweep values, else row-major by position (first axis outermost);
    None when neither fits."""
    axes = result.axes
    shape = tuple(len(v) for _, v, _ in axes)
    out: list[tuple[int, ...]] = []
    for r in result.runs:
        sw = dict(r.sweep)
        idx = []
        for name, values, _ in axes:
            if name not in sw:
                break
            hits = [k for k, v in enumerate(values)
                    if math.isclose(float(v), float(sw[name]), rel_tol=1e-9, abs_tol=1e-300)]
            if len(hits) != 1:
                break
            idx.append(hits[0])
        if len(idx) != len(axes):
            out = []
            break
        out.append(tuple(idx))
    if out and len(set(out)) == len(out):
        return out
    if shape and len(result.runs) == int(np.prod(shape)):
        return [tuple(int(x) for x in np.unravel_index(k, shape)) for k in range(len(result.runs))]
    return None


def _axis(name: str, values, unit: str) -> VarySpec:
    return VarySpec(name, "sequence", tuple(float(v) for v in values), dim_for(unit) or NONE,
                    unit, text="", spacing="lin", source="file")


def _point(index: int, coords, run, coherence) -> PointResult:
    budget = tuple((b.source, float(b.infidelity)) for b in run.budget)
    pops = tuple((q, float(p)) for q, p in run.populations.items()
                 if isinstance(p, (int, float)))
    fid = run.average_fidelity if run.average_fidelity is not None else run.state_fidelity
    return PointResult(
        index, tuple(coords), OK, "", fid, None if fid is None else 1 - fid,
        run.process_fidelity, run.average_fidelity, run.state_fidelity, pops, run.duration,
        coherence, budget, run.budget_floor if budget else None,
        run.budget_remainder if budget else None, float(run.stats.get("wall_s", 0.0)),
        averaging_error=run.averaging_error,
        observables=tuple(getattr(run, "observables", ()) or ()))


def from_result(result) -> SweepTable | None:
    """The sweep table of a ``SimulationResult`` whose sequence sweeps (None
    without sweep axes).  Runs are placed on the grid by their sweep values
    (else row-major); when neither fits, along one axis by position."""
    if not result.axes or not result.runs:
        return None
    coherence = tuple((q, float(t2), float(g), float(r)) for q, t2, g, r, _ in result.coherence)
    pos = grid_positions(result)
    if pos is not None:
        axes = tuple(_axis(n, v, u) for n, v, u in result.axes)
        shape = tuple(a.points for a in axes)
        points = []
        for run, idx in zip(result.runs, pos):
            k = int(np.ravel_multi_index(idx, shape))
            points.append(_point(k, [a.values[i] for a, i in zip(axes, idx)], run, coherence))
        n_points = int(np.prod(shape))
    else:
        axes = (_axis("run position", range(len(result.runs)), ""),)
        points = [_point(k, (float(k),), run, coherence) for k, run in enumerate(result.runs)]
        n_points = len(points)
    metric, pts = with_metric(sorted(points, key=lambda p: p.index))
    s = result.settings
    options = {"engine": result.engine, "nodes": s.get("quadrature_nodes"),
               "quadrature": s.get("quadrature"), "substeps": s.get("substeps_per_sample"),
               "rwa": result.rwa}
    return SweepTable({}, result.sequence, result.device_name, axes, (), pts, n_points, options,
                      metric, any(r.budget for r in result.runs), tuple(result.warnings),
                      dict(result.stats), {}, str(s.get("fidelity_scope", "")))
