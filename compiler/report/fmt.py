"""Choices shared by the text and the figures of a report: which run the
details are shown for, the sweep's best run, and the error budget as rows
with shares.  The number formats are :mod:`compiler.numfmt`'s (re-exported
here for the report's modules).

All pure functions of the result.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..numfmt import (axis_scale, dim_for, fmt_fidelity, fmt_infidelity, fmt_percent,
                      fmt_population, fmt_ratio, fmt_sci, fmt_value, time_unit)
from ..physics import COHERENCE_RULE
from ..simulate.types import RunResult, SimulationResult

__all__ = ["fmt_fidelity", "fmt_population", "fmt_ratio", "fmt_infidelity", "fmt_sci", "fmt_percent", "time_unit",
           "dim_for", "fmt_value", "axis_scale", "detail_index", "traces_index",
           "sweep_metric", "best_index", "BudgetRow", "budget_rows", "budget_mismatch",
           "has_budget", "trace_series", "COHERENCE_RULE", "is_below"]

# ---------------------------------------------------------------- which run

def has_budget(run: RunResult) -> bool:
    """Whether the run carries an error budget."""
    return bool(run.budget) or run.budget_total != 0.0


def detail_index(result: SimulationResult) -> int | None:
    """Position in ``result.runs`` of the run whose steps and budget the
    report details: the first run with a budget, else the first with
    per-step fidelities, else the first run; None without runs."""
    if not result.runs:
        return None
    for pick in (has_budget, lambda r: bool(r.steps)):
        for i, r in enumerate(result.runs):
            if pick(r):
                return i
    return 0


def traces_index(result: SimulationResult) -> int | None:
    """Position of the run whose traces are drawn: the detail run when it
    has traces, else the first run that has; None when no run has."""
    d = detail_index(result)
    if d is not None and trace_series(result.runs[d]):
        return d
    for i, r in enumerate(result.runs):
        if trace_series(r):
            return i
    return None


def trace_series(run: RunResult) -> tuple[np.ndarray, list[tuple[str, np.ndarray]]] | None:
    """The time axis (s) and the P(up) series of a run's traces, dots in
    register order first; None when there is nothing to draw.

    Series whose length differs from the time axis are left out.
    """
    tr = run.traces or {}
    if "t" not in tr:
        return None
    t = np.asarray(tr["t"], dtype=float).reshape(-1)
    if t.size < 2:
        return None
    names = [d for d in run.dots if d in tr] + sorted(k for k in tr if k != "t" and k not in run.dots)
    series = []
    for n in names:
        try:
            y = np.asarray(tr[n], dtype=float).reshape(-1)
        except (TypeError, ValueError):
            continue
        if y.shape == t.shape:
            series.append((str(n), y))
    return (t, series) if series else None


def sweep_metric(result: SimulationResult) -> tuple[str, np.ndarray]:
    """The figure of merit a sweep is ranked by, and its value per run.

    Returns
    -------
    (str, numpy.ndarray)
        ``"process"`` when every run has a process fidelity, else
        ``"average"`` when every run has an average gate fidelity, else
        ``"state"``; one value per run (NaN where missing).
    """
    runs = result.runs
    if runs and all(r.process_fidelity is not None for r in runs):
        return "process", np.array([float(r.process_fidelity) for r in runs])
    if runs and all(r.average_fidelity is not None for r in runs):
        return "average", np.array([float(r.average_fidelity) for r in runs])
    return "state", np.array([float(r.state_fidelity) for r in runs], dtype=float)


def best_index(result: SimulationResult) -> int | None:
    """Position of the run with the highest :func:`sweep_metric` (the first
    of equals); None without runs or when every value is NaN."""
    _, v = sweep_metric(result)
    if v.size == 0 or np.all(np.isnan(v)):
        return None
    return int(np.nanargmax(v))


def is_below(ratio: float, flagged: bool) -> bool:
    """Whether a coherence margin T2 / longest gate is below the rule of
    thumb (:data:`compiler.physics.COHERENCE_RULE`, 1e4) or flagged so by
    the simulator."""
    return bool(flagged) or not (float(ratio) >= COHERENCE_RULE)


# ---------------------------------------------------------------- error budget

@dataclass(frozen=True)
class BudgetRow:
    """One line of the error budget as shown."""

    label: str
    value: float              # infidelity contribution
    share: float | None       # percent of the total infidelity (None when the total is 0)
    kind: str                 # "source", "other", "floor" or "remainder"
    note: str = ""


FLOOR_LABEL = "floor (every listed source off)"
REMAINDER_LABEL = "interaction remainder"


def budget_rows(run: RunResult, top: int | None = None) -> tuple[BudgetRow, ...]:
    """The budget of a run as rows: sources by contribution (largest first),
    the rest merged into one ``other`` row, then the floor and the
    interaction remainder.

    Parameters
    ----------
    run : RunResult
    top : int, optional
        Sources shown one by one; default all.

    Returns
    -------
    tuple of BudgetRow
        Shares are ``100 · value / run.budget_total``; with the floor and
        the remainder they add up to 100 % when the budget is consistent
        (see :func:`budget_mismatch`).
    """
    total = float(run.budget_total)

    def share(v: float) -> float | None:
        return 100.0 * v / total if total != 0.0 and math.isfinite(total) else None

    lines = sorted(run.budget, key=lambda b: (-float(b.infidelity), b.source))
    n = len(lines) if top is None else max(int(top), 0)
    rows = [BudgetRow(b.source, float(b.infidelity), share(float(b.infidelity)), "source", b.note)
            for b in lines[:n]]
    rest = lines[n:]
    if rest:
        v = float(sum(float(b.infidelity) for b in rest))
        rows.append(BudgetRow(f"other ({len(rest)} source{'s' * (len(rest) != 1)})", v, share(v),
                              "other", ", ".join(b.source for b in rest)))
    rows.append(BudgetRow(FLOOR_LABEL, float(run.budget_floor), share(float(run.budget_floor)),
                          "floor", "what is left with every listed source switched off"))
    rows.append(BudgetRow(REMAINDER_LABEL, float(run.budget_remainder),
                          share(float(run.budget_remainder)), "remainder",
                          "total − floor − sum of contributions: sources acting together"))
    return tuple(rows)


def budget_mismatch(run: RunResult) -> float:
    """``total − floor − Σ contributions − remainder``: zero (to rounding)
    for a consistent budget."""
    return float(run.budget_total) - float(run.budget_floor) - float(run.budget_remainder) - \
        float(sum(float(b.infidelity) for b in run.budget))
