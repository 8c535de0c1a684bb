"""Physical units: parsed at the edge, SI floats inside, printed back with units.

A :class:`Dim` is a vector of exponents over the base dimensions
(time, voltage, magnetic field, angle, temperature, energy).  Frequencies are
time^-1; exchange and Zeeman energies are stored as frequencies E/h in Hz.

Unit symbols accept the SI prefixes p, n, u (or µ), m, k, M, G.
"""

from __future__ import annotations

import math
import re
from decimal import Decimal
from dataclasses import dataclass

BASES = ("s", "V", "T", "rad", "K", "eV")


@dataclass(frozen=True)
class Dim:
    exps: tuple[int, ...] = (0, 0, 0, 0, 0, 0)

    def __mul__(self, other: "Dim") -> "Dim":
        return Dim(tuple(a + b for a, b in zip(self.exps, other.exps)))

    def __truediv__(self, other: "Dim") -> "Dim":
        return Dim(tuple(a - b for a, b in zip(self.exps, other.exps)))

    def __pow__(self, n: int) -> "Dim":
        return Dim(tuple(a * n for a in self.exps))

    @property
    def is_dimensionless(self) -> bool:
        return not any(self.exps)

    def name(self) -> str:
        return DIM_NAMES.get(self, self.symbol())

    def symbol(self) -> str:
        if self.is_dimensionless:
            return "1"
        num = [f"{b}" + (f"^{e}" if e != 1 else "") for b, e in zip(BASES, self.exps) if e > 0]
        den = [f"{b}" + (f"^{-e}" if e != -1 else "") for b, e in zip(BASES, self.exps) if e < 0]
        s = "*".join(num) or "1"
        if den:
            s += "/" + "/".join(den)
        return s


def _d(**kw: int) -> Dim:
    return Dim(tuple(kw.get(b, 0) for b in BASES))


NONE = Dim()
TIME = _d(s=1)
FREQUENCY = _d(s=-1)
VOLTAGE = _d(V=1)
FIELD = _d(T=1)
ANGLE = _d(rad=1)
TEMPERATURE = _d(K=1)
ENERGY = _d(eV=1)
FREQ_PER_VOLT = FREQUENCY / VOLTAGE
FIELD_PER_VOLT = FIELD / VOLTAGE
FREQ_NOISE = FREQUENCY ** 2 / FREQUENCY     # Hz²/Hz: spectral density of frequency noise
VOLT_NOISE = VOLTAGE ** 2 / FREQUENCY       # V²/Hz: spectral density of voltage noise

DIM_NAMES = {
    NONE: "a plain number", TIME: "a time", FREQUENCY: "a frequency",
    VOLTAGE: "a voltage", FIELD: "a magnetic field", ANGLE: "an angle",
    TEMPERATURE: "a temperature", ENERGY: "an energy",
    FREQ_PER_VOLT: "a frequency per volt", FIELD_PER_VOLT: "a field per volt",
    VOLT_NOISE: "a voltage noise density (V^2/Hz)",
}

# Example units, used in hints ("write it as 40 ns").
EXAMPLE_UNIT = {
    TIME: "40 ns", FREQUENCY: "10 MHz", VOLTAGE: "100 mV", FIELD: "500 mT",
    ANGLE: "90 deg", TEMPERATURE: "50 mK", ENERGY: "10 ueV",
    FREQ_PER_VOLT: "40 MHz/V", FIELD_PER_VOLT: "1 mT/V",
    VOLT_NOISE: "1e-12 V^2/Hz",
}

PREFIX_EXP = {"p": -12, "n": -9, "u": -6, "µ": -6, "μ": -6, "m": -3, "": 0, "k": 3, "M": 6, "G": 9}
PREFIXES = {p: 10.0 ** e for p, e in PREFIX_EXP.items()}

# base symbol -> (scale to SI, dimension, accepts prefixes)
_BASE_UNITS = {
    "s": (1.0, TIME, True),
    "Hz": (1.0, FREQUENCY, True),
    "S/s": (1.0, FREQUENCY, True),  # samples per second
    "V": (1.0, VOLTAGE, True),
    "T": (1.0, FIELD, True),
    "rad": (1.0, ANGLE, True),
    "deg": (math.pi / 180.0, ANGLE, False),
    "K": (1.0, TEMPERATURE, True),
    "eV": (1.0, ENERGY, True),
}


def _build_table() -> tuple[dict[str, tuple[float, Dim]], dict[str, tuple[float, int]]]:
    table: dict[str, tuple[float, Dim]] = {}
    parts: dict[str, tuple[float, int]] = {}
    for sym, (scale, dim, prefixed) in _BASE_UNITS.items():
        for p, e in (PREFIX_EXP.items() if prefixed else [("", 0)]):
            table[p + sym] = (scale * 10.0 ** e, dim)
            parts[p + sym] = (scale, e)
    return table, parts


UNITS, _UNIT_PARTS = _build_table()


def literal_to_si(number: str, unit: str) -> float:
    """SI value of a number written with a unit, with the decimal prefix
    applied exactly: '100' 'ns' -> 1e-07 (not 100 * 1e-9 = 1.0000000000000001e-07)."""
    base, exp = _UNIT_PARTS[unit]
    try:
        return float(Decimal(number).scaleb(exp)) * base
    except ArithmeticError:  # exponent beyond Decimal's range: report as non-finite
        return math.inf
UNIT_WORDS = frozenset(UNITS)


def lookup_unit(symbol: str) -> tuple[float, Dim] | None:
    """Scale to SI and dimension of a unit symbol, possibly compound 'a/b'."""
    if symbol in UNITS:
        return UNITS[symbol]
    if "^2/" in symbol:
        # a squared unit per unit (noise densities): 'kHz^2/Hz', 'uV^2/Hz'
        head, _, tail = symbol.partition("^2/")
        a, b = UNITS.get(head), UNITS.get(tail)
        if a and b:
            return a[0] ** 2 / b[0], a[1] ** 2 / b[1]
        return None
    if "/" in symbol:
        head, _, tail = symbol.partition("/")
        a, b = UNITS.get(head), UNITS.get(tail)
        if a and b:
            return a[0] / b[0], a[1] / b[1]
    return None


_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_QUANTITY_RE = re.compile(rf"^\s*({_NUMBER})\s*([A-Za-zµμ/]+(?:\^2/[A-Za-zµμ]+)?)?\s*$")


class UnitError(ValueError):
    """A quantity string that cannot be read; the message says why."""


def parse_quantity(text: str | float | int, expected: Dim, what: str = "value",
                   allow_bare_zero: bool = False) -> float:
    """Read '40 MHz/V' style text into an SI float of the expected dimension.

    A bare number is accepted only for dimensionless quantities (and a bare 0
    when ``allow_bare_zero``).  Raises :class:`UnitError` with a message that
    names ``what`` and shows an example.
    """
    example = EXAMPLE_UNIT.get(expected, "")
    if isinstance(text, bool):
        raise UnitError(f"{what} must be {expected.name()}, got a true/false value")
    if isinstance(text, (int, float)):
        value = float(text)
        if not math.isfinite(value):
            raise UnitError(f"{what} must be a finite number, got {text}")
        if expected.is_dimensionless or (allow_bare_zero and value == 0.0):
            return value
        raise UnitError(f"{what} needs a unit: it must be {expected.name()}"
                        + (f", e.g. '{example}'" if example else ""))
    if not isinstance(text, str):
        raise UnitError(f"{what} must be {expected.name()}, got {type(text).__name__}")
    m = _QUANTITY_RE.match(text)
    if not m:
        low = text.strip().lower()
        if low in ("nan", "inf", "+inf", "-inf", "infinity", ".nan", ".inf", "-.inf"):
            raise UnitError(f"{what} must be a finite number, got '{text.strip()}'")
        raise UnitError(f"cannot read '{text}' as {expected.name()}"
                        + (f"; write it like '{example}'" if example else ""))
    value = float(m.group(1))
    unit = m.group(2)
    if not math.isfinite(value):
        raise UnitError(f"{what} must be a finite number, got '{text}'")
    if unit is None:
        if expected.is_dimensionless or (allow_bare_zero and value == 0.0):
            return value
        raise UnitError(f"{what} needs a unit: it must be {expected.name()}"
                        + (f", e.g. '{example}'" if example else ""))
    found = lookup_unit(unit)
    if found is None:
        from .errors import suggest
        raise UnitError(f"unknown unit '{unit}' in {what}. " + suggest(unit, UNITS))
    scale, dim = found
    if unit in _UNIT_PARTS:
        scale = None
    if dim != expected:
        raise UnitError(f"{what} must be {expected.name()}, but '{unit}' is {dim.name()}"
                        + (f"; e.g. '{example}'" if example else ""))
    result = literal_to_si(m.group(1), unit) if scale is None else value * scale
    if not math.isfinite(result):
        raise UnitError(f"{what} is too large: '{text}'")
    return result


# Preferred display unit per dimension (base symbol, prefixes allowed)
_DISPLAY = {
    TIME: "s", FREQUENCY: "Hz", VOLTAGE: "V", FIELD: "T", TEMPERATURE: "K",
    ENERGY: "eV", FREQ_PER_VOLT: "Hz/V", FIELD_PER_VOLT: "T/V",
    VOLT_NOISE: "V^2/Hz",
}
_PREFIX_STEPS = [(1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"),
                 (1e-6, "u"), (1e-9, "n"), (1e-12, "p")]


def format_quantity(value: float, dim: Dim, digits: int = 4) -> str:
    """SI float back to text with a readable prefix: 1.4e10 Hz -> '14 GHz'."""
    if dim == ANGLE:
        return f"{_g(math.degrees(value), digits)} deg"
    if dim.is_dimensionless:
        return _g(value, digits)
    unit = _DISPLAY.get(dim, dim.symbol())
    if value == 0 or not math.isfinite(value):
        return f"{_g(value, digits)} {unit}"
    if dim == VOLT_NOISE:
        # a prefix would square with the unit (1 uV^2/Hz = 1e-12 V^2/Hz): none
        return f"{value:.{digits}g} {unit}"
    mag = abs(value)
    for scale, p in _PREFIX_STEPS:
        if mag >= scale * 0.9995:
            return f"{_g(value / scale, digits)} {p}{unit}"
    scale, p = _PREFIX_STEPS[-1]
    return f"{_g(value / scale, digits)} {p}{unit}"


def format_distinct(a: float, b: float, dim: Dim, digits: int = 4) -> tuple[str, str]:
    """Two values compared in a message, each with its unit, in one prefix,
    with digits added (up to 17) until their texts differ when the values
    do: 600.0000001 ns against 600 ns is not '600 ns' against '600 ns'."""
    if dim == ANGLE:
        a, b, unit, scale = math.degrees(a), math.degrees(b), "deg", 1.0
    elif dim.is_dimensionless:
        unit, scale = "", 1.0
    else:
        unit = _DISPLAY.get(dim, dim.symbol())
        mag = max(abs(a), abs(b))
        scale, p = next(((sc, p) for sc, p in _PREFIX_STEPS if mag >= sc * 0.9995),
                        _PREFIX_STEPS[-1])
        if mag == 0 or not math.isfinite(mag):
            scale, p = 1.0, ""
        unit = p + unit
    for d in range(digits, 18):
        ta, tb = _g(a / scale, d), _g(b / scale, d)
        if ta != tb or a == b:
            break
    return (f"{ta} {unit}", f"{tb} {unit}") if unit else (ta, tb)


def _g(x: float, digits: int) -> str:
    s = f"{x:.{digits}g}"
    if "e" in s:
        return s
    return s
