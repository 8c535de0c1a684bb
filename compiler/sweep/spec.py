"""Reading ``--vary`` and ``--set`` arguments (the edge: text in, SI out).

Syntax (docs/sweep.md)::

    --vary NAME=START:STOP:POINTS        evenly spaced, both ends included
    --vary NAME=START:STOP:POINTS:log    logarithmically spaced
    --vary NAME=V1,V2,V3                 the values listed, in this order
    --set  NAME=VALUE                    one fixed value

Every value carries its unit (``0.5T``, ``10 us``, ``40MHz/V``); plain
numbers only for dimensionless parameters (a g-factor, ``j_scale``).  The
text is split here (:func:`split_arg`); the values are read with
:func:`compiler.units.parse_quantity` once the parameter, and so its
dimension, is known (:func:`to_spec`).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from ..errors import UsageError
from ..units import (ANGLE, ENERGY, FIELD, FIELD_PER_VOLT, FREQ_PER_VOLT, FREQUENCY, NONE,
                     TEMPERATURE, TIME, VOLTAGE, Dim, EXAMPLE_UNIT, UnitError, parse_quantity)
from .types import VarySpec

MAX_AXIS_POINTS = 10_000
MAX_POINTS = 100_000

VARY_SYNTAX = ("--vary NAME=START:STOP:POINTS (e.g. --vary field=0.5T:1.5T:11), "
               "NAME=START:STOP:POINTS:log, or NAME=V1,V2,V3")
SET_SYNTAX = "--set NAME=VALUE (e.g. --set A.t2=40us)"

_NAME_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*(?:-[A-Za-z_][A-Za-z0-9_]*)?"
                      r"(?:\.[A-Za-z_][A-Za-z0-9_]*)*$")

_SI_SYMBOL = {TIME: "s", FREQUENCY: "Hz", VOLTAGE: "V", FIELD: "T", TEMPERATURE: "K",
              ENERGY: "eV", ANGLE: "rad", NONE: "", FREQ_PER_VOLT: "Hz/V",
              FIELD_PER_VOLT: "T/V"}


def si_symbol(dim: Dim) -> str:
    """The SI unit symbol tables use for a dimension (``""`` when plain)."""
    return _SI_SYMBOL.get(dim, dim.symbol())


@dataclass(frozen=True)
class RawArg:
    """A ``--vary``/``--set`` argument split into its parts, values still text."""
    flag: str                  # "--vary" or "--set"
    text: str                  # the whole argument
    name: str
    form: str                  # "range", "list" or "value"
    values: tuple[str, ...]    # range: (start, stop); list: the items; value: (v,)
    points: int = 0            # range only
    spacing: str = "lin"       # range: "lin" or "log"; list: "list"


def _bad(flag: str, text: str, why: str) -> UsageError:
    syntax = VARY_SYNTAX if flag == "--vary" else SET_SYNTAX
    return UsageError(f"{flag} '{text}': {why}", hint=f"write {syntax}; every value with its "
                      "unit, no spaces unless quoted")


def split_arg(text: str, flag: str = "--vary") -> RawArg:
    """Split ``NAME=...`` into name and value texts (no units read yet).

    Raises
    ------
    UsageError
        Naming the argument, with the syntax as a hint.
    """
    if "=" not in text:
        raise _bad(flag, text, "no '=' between the name and the values")
    name, _, rest = text.partition("=")
    name, rest = name.strip(), rest.strip()
    if not name:
        raise _bad(flag, text, "the parameter name before '=' is missing")
    if not _NAME_RE.match(name):
        raise _bad(flag, text, f"'{name}' is not a parameter name (letters, digits, '_'; "
                               "a dot before a dot's or coupling's setting: A.t2, A-B.j_scale)")
    if not rest:
        raise _bad(flag, text, "no value after '='")
    if flag == "--set":
        if ":" in rest or "," in rest:
            raise _bad(flag, text, "--set takes one value; sweep with --vary")
        return RawArg(flag, text, name, "value", (rest,))
    if ":" in rest:
        parts = [p.strip() for p in rest.split(":")]
        if len(parts) not in (3, 4) or any(not p for p in parts):
            raise _bad(flag, text, "a range needs START:STOP:POINTS (or START:STOP:POINTS:log)")
        spacing = "lin"
        if len(parts) == 4:
            if parts[3].lower() not in ("log", "lin"):
                raise _bad(flag, text, f"unknown spacing '{parts[3]}' (use log, or leave it out "
                                       "for even spacing)")
            spacing = parts[3].lower()
        try:
            n = int(parts[2])
        except ValueError:
            raise _bad(flag, text, f"the number of points '{parts[2]}' is not a whole "
                                   "number") from None
        if n < 1:
            raise _bad(flag, text, f"the number of points must be at least 1, got {n}")
        if n > MAX_AXIS_POINTS:
            raise _bad(flag, text, f"{n} points is above the limit of {MAX_AXIS_POINTS} per "
                                   "parameter")
        return RawArg(flag, text, name, "range", (parts[0], parts[1]), n, spacing)
    items = [p.strip() for p in rest.split(",")]
    if any(not p for p in items):
        raise _bad(flag, text, "an empty value in the list")
    if len(items) > MAX_AXIS_POINTS:
        raise _bad(flag, text, f"{len(items)} values is above the limit of {MAX_AXIS_POINTS}")
    return RawArg(flag, text, name, "list", tuple(items), len(items), "list")


def _quantity(raw: RawArg, item: str, dim: Dim, what: str) -> float:
    try:
        return parse_quantity(item, dim, f"{raw.flag} {raw.name} {what}")
    except UnitError as e:
        ex = EXAMPLE_UNIT.get(dim, "")
        unit_hint = f"{raw.name} is {dim.name()}" + (f", e.g. {ex.replace(' ', '')}" if ex else
                                                      " (a plain number)")
        syntax = VARY_SYNTAX if raw.flag == "--vary" else SET_SYNTAX
        raise UsageError(f"{raw.flag} '{raw.text}': {e}",
                         hint=f"{unit_hint}; write {syntax}") from None


def grid_values(start: float, stop: float, n: int, spacing: str) -> tuple[float, ...]:
    """``n`` values from ``start`` to ``stop`` (both included): evenly spaced
    (``lin``) or evenly spaced in log (``log``); the ends are exact."""
    if n == 1:
        return (float(start),)
    if spacing == "log":
        a, b = math.log(abs(start)), math.log(abs(stop))
        sign = 1.0 if start > 0 else -1.0
        vals = [sign * math.exp(a + (b - a) * k / (n - 1)) for k in range(n)]
    else:
        vals = [start + (stop - start) * k / (n - 1) for k in range(n)]
    vals[0], vals[-1] = float(start), float(stop)
    return tuple(float(v) for v in vals)


def to_spec(raw: RawArg, name: str, kind: str, dim: Dim) -> VarySpec:
    """The values of ``raw`` in SI for a parameter of dimension ``dim``.

    Raises
    ------
    UsageError
        A value without its unit or with the wrong one, one point spanning
        a range, a log range through zero.
    """
    if raw.form == "value":
        values = (_quantity(raw, raw.values[0], dim, "value"),)
    elif raw.form == "list":
        values = tuple(_quantity(raw, v, dim, f"value {i + 1}") for i, v in enumerate(raw.values))
    else:
        a = _quantity(raw, raw.values[0], dim, "start")
        b = _quantity(raw, raw.values[1], dim, "stop")
        if raw.points == 1 and a != b:
            raise _bad(raw.flag, raw.text, "one point cannot span a range: give 2 or more "
                                           "points, or make START and STOP equal")
        if raw.spacing == "log" and (a == 0 or b == 0 or (a > 0) != (b > 0)):
            raise _bad(raw.flag, raw.text, "a log range needs START and STOP of the same sign, "
                                           "neither zero")
        values = grid_values(a, b, raw.points, raw.spacing)
    return VarySpec(name, kind, values, dim, si_symbol(dim), raw.text, raw.spacing)
