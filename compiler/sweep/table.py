"""The results table of a ``--vary`` sweep, built from the sweep's points
(:func:`make_table`).  The table type, ``sweep.csv``, ``sweep.json`` and
``sweep.png`` are the shared ones of :mod:`compiler.sweeptable`, which also
hold the report's in-file sweeps."""

from __future__ import annotations

from ..sweeptable.build import with_metric
from ..sweeptable.write import (FORMAT_NAME, FORMAT_VERSION, METRIC_TEXT, best_point,  # noqa: F401
                                csv_text, document, grid, json_text, values_text)
from .types import SweepPlan, SweepTable


def make_table(plan: SweepPlan, points, stats: dict | None = None) -> SweepTable:
    """The table of a sweep's points (any order; complete or partial)."""
    metric, pts = with_metric(sorted(points, key=lambda p: p.index))
    options = dict(plan.key.get("options", {}))
    return SweepTable(plan.key, plan.sequence, plan.device_name, plan.axes, plan.fixed, pts,
                      plan.n_points, options, metric, plan.budget, plan.warnings,
                      dict(stats or {}), dict(plan.point_warnings),
                      SCOPE_TEXT.get(plan.options.fidelity_scope, ""))


SCOPE_TEXT = {"program": "the qubits the program acts on", "register": "the whole register"}
