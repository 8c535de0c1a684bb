"""Planned runs at scale: how does the fidelity change when a device
parameter (field, a dot's g or T2, a coupling's J, the drive) or a
parameter of the sequence (a ``let`` or ``sweep``) changes?

The stage, in its parts (plain frozen data between them, :mod:`.types`)::

    --vary/--set text --spec--> VarySpec --plan--> SweepPlan (checked up front)
        --execute (this process | local processes | Dask cluster)--> PointResult
        --table/figure--> OUT/sweep.csv, sweep.json, sweep.png  (+ points.jsonl)

>>> from compiler.sweep import plan_sweep, run_sweep            # doctest: +SKIP
>>> plan = plan_sweep("sequences/ramsey_single.dotseq", ["A.t2_star=2us:5us:4"])
>>> outcome = run_sweep(plan, "out/t2star", workers=2)
>>> outcome.table.complete, outcome.files["csv"]

Every point is a pure function of its task (a fresh engine, one BLAS
thread), so the numbers do not depend on where it ran.  See docs/sweep.md.
"""

from __future__ import annotations

import importlib

# name -> submodule; imported on first use, so a worker process that needs only
# .point does not load the table, figure and plotting code
_EXPORTS = {
    "plan_sweep": "plan", "run_sweep": "run", "SweepOutcome": "run",
    "SweepPlan": "types", "SweepTable": "types", "PointTask": "types", "PointResult": "types",
    "VarySpec": "types", "SweepError": "errors", "evaluate_point": "point",
    "simulate_point": "point", "split_arg": "spec", "to_spec": "spec", "best_point": "table",
    "csv_text": "table", "json_text": "table", "document": "table", "make_table": "table",
    "local_cores": "execute", "CLUSTER_VARIABLE": "execute",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    if name in _EXPORTS:
        return getattr(importlib.import_module(f".{_EXPORTS[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
