"""Number formats shared by every text and figure dotseq writes (check
summary, report, sweep): fidelities, infidelities, ratios, shares, times in
a display unit, sweep values with their SI prefix, figure axis scales.

Pure functions of numbers; units come from :mod:`compiler.units`.
"""

from __future__ import annotations

import math
from typing import Sequence

from .units import (ANGLE, DIM_NAMES, FIELD, FREQUENCY, NONE, TEMPERATURE, TIME, VOLTAGE, Dim,
                    format_quantity, lookup_unit)

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
