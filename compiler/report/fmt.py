"""Numbers and choices shared by the text and the figures of a report:
number formats, display units, which run the details are shown for, the
sweep's best run, and the error budget as rows with shares.

All pure functions of the result.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from ..physics import COHERENCE_RULE
from ..simulate.types import RunResult, SimulationResult
from ..units import ANGLE, DIM_NAMES, FIELD, FREQUENCY, NONE, TEMPERATURE, TIME, VOLTAGE, Dim, \
    format_quantity, lookup_unit

__all__ = ["fmt_fidelity", "fmt_population", "fmt_ratio", "fmt_infidelity", "fmt_sci", "fmt_percent", "time_unit",
           "dim_for", "fmt_value", "axis_scale", "detail_index", "traces_index",
           "sweep_metric", "best_index", "BudgetRow", "budget_rows", "budget_mismatch",
           "has_budget", "trace_series", "COHERENCE_RULE", "is_below"]

MICRO = "µ"


# ---------------------------------------------------------------- numbers

def fmt_fidelity(f: float | None) -> str:
    """A fidelity with six significant digits: ``0.998765``; ``n/a`` for None.

    Fixed six decimals from 0.1 up (so a column of fidelities lines up),
    six significant digits below.
    """
    if f is None:
        return "n/a"
    f = float(f)
    if not math.isfinite(f):
        return str(f)
    if 0.1 <= abs(f) < 10.0:
        return f"{f:.6f}"
    return f"{f:#.6g}"


def fmt_population(p: float | None) -> str:
    """A probability with six decimals: ``0.012346``; ``n/a`` for None."""
    if p is None:
        return "n/a"
    p = float(p)
    return f"{p:.6f}" if math.isfinite(p) else str(p)


def fmt_ratio(r: float) -> str:
    """A coherence ratio: three significant digits below 100, whole numbers
    in groups of three up to ten million (``50 000``), then ``2.5e+07``."""
    r = float(r)
    if not math.isfinite(r):
        return str(r)
    if abs(r) < 100:
        return f"{r:.3g}"
    if abs(r) < 1e7:
        return f"{r:,.0f}".replace(",", " ")
    return f"{r:.2e}"


def fmt_sci(x: float | None, digits: int = 3) -> str:
    """A small number in scientific notation with ``digits`` significant
    digits: ``1.24e-03``; ``0`` for exactly zero, ``n/a`` for None."""
    if x is None:
        return "n/a"
    x = float(x)
    if x == 0.0:
        return "0"
    if not math.isfinite(x):
        return str(x)
    return f"{x:.{digits - 1}e}"


def fmt_infidelity(f: float | None) -> str:
    """``1 − f`` in scientific notation (:func:`fmt_sci`); ``n/a`` for None."""
    return "n/a" if f is None else fmt_sci(1.0 - float(f))


def fmt_percent(p: float | None) -> str:
    """A share in percent: one decimal (``64.5 %``), two below 1 % (``0.04 %``);
    ``n/a`` for None."""
    if p is None or not math.isfinite(p):
        return "n/a"
    return f"{p:.1f} %" if abs(p) >= 1.0 or p == 0.0 else f"{p:.2f} %"


def time_unit(longest: float, micro: str = MICRO) -> tuple[float, str]:
    """Display unit for times up to ``longest`` seconds.

    Returns
    -------
    (float, str)
        Seconds per unit and the unit: ns below 10 µs, µs below 10 ms, ms
        below 10 s, else s.  ``micro`` is the micro sign to use (``u`` for
        plain-text output).
    """
    longest = abs(float(longest)) if math.isfinite(longest) else 0.0
    if longest < 10e-6:
        return 1e-9, "ns"
    if longest < 10e-3:
        return 1e-6, f"{micro}s"
    if longest < 10.0:
        return 1e-3, "ms"
    return 1.0, "s"


def fmt_time_number(seconds: float, scale: float) -> str:
    """A time as a plain number in the unit ``scale`` (s per unit): up to six
    significant digits, ``120``, ``12.5``, ``0.25``."""
    return f"{seconds / scale:.6g}"


# ---------------------------------------------------------------- sweep units

_SYMBOL_DIMS: dict[str, Dim] = {d.symbol(): d for d in DIM_NAMES}
_SYMBOL_DIMS.update({"s": TIME, "Hz": FREQUENCY, "V": VOLTAGE, "T": FIELD, "K": TEMPERATURE,
                     "rad": ANGLE, "deg": ANGLE, "": NONE, "1": NONE})


def dim_for(symbol: str) -> Dim | None:
    """The dimension of a sweep axis' unit symbol (``"s"``, ``"Hz"``,
    ``"1/s"``, ``"V"``, ``"ns"``, ...), or None when it is not a known unit."""
    symbol = (symbol or "").strip()
    if symbol in _SYMBOL_DIMS:
        return _SYMBOL_DIMS[symbol]
    found = lookup_unit(symbol)
    return found[1] if found else None


def fmt_value(value: float, symbol: str, digits: int = 4, micro: str = MICRO) -> str:
    """A sweep value (SI) with its unit and an SI prefix: ``200 ns``,
    ``14.05 GHz``, ``90 deg``; a value of an unknown unit is printed with
    the symbol as given."""
    dim = dim_for(symbol)
    if dim is None:
        return f"{float(value):.{digits}g} {symbol}".rstrip()
    text = format_quantity(float(value), dim, digits)
    number, sep, unit = text.rpartition(" ")
    if sep and unit.startswith("u") and len(unit) > 1:
        text = f"{number} {micro}{unit[1:]}"
    return text


_PREFIXES = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, MICRO),
             (1e-9, "n"), (1e-12, "p"))


def axis_scale(values: Sequence[float], symbol: str) -> tuple[float, str]:
    """How to show SI values on a figure axis: divide by the returned factor
    and write the returned unit.

    Parameters
    ----------
    values : sequence of float
        The axis values, SI.
    symbol : str
        Their unit symbol as the sweep gives it.

    Returns
    -------
    (float, str)
        e.g. ``(1e-9, "ns")`` for times up to a few µs, ``(1e6, "MHz")``,
        ``(pi/180, "deg")`` for angles; ``(1.0, "")`` for plain numbers.
    """
    dim = dim_for(symbol)
    if dim is None:
        return 1.0, symbol
    if dim == ANGLE:
        return math.pi / 180.0, "deg"
    if dim.is_dimensionless:
        return 1.0, ""
    base = format_quantity(1.0, dim).rpartition(" ")[2]
    finite = [abs(float(v)) for v in values if math.isfinite(float(v))]
    mag = max(finite, default=0.0)
    if mag == 0.0:
        return 1.0, base
    for scale, p in _PREFIXES:
        if mag >= scale * 0.9995:
            return scale, p + base
    return _PREFIXES[-1][0], _PREFIXES[-1][1] + base


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
