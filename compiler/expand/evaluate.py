"""The project's own evaluator for sequence expressions, with units.

No Python ``eval``: the tree from the parser is walked here.  Every value is
a :class:`Quantity` (SI float plus dimension).  Costs are bounded: powers
need a plain exponent of at most ``MAX_EXPONENT`` in size, and any
non-finite result (overflow, division by zero) is an error naming the
expression.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

from ..errors import Span
from ..parse import tree as T
from ..units import ANGLE, NONE, Dim, UNITS, literal_to_si

MAX_EXPONENT = 1000


@dataclass(frozen=True, slots=True)
class Quantity:
    value: float
    dim: Dim


@dataclass(frozen=True, slots=True)
class QubitRef:
    """A block argument that names a qubit."""
    name: str
    span: Span


class EvalError(Exception):
    """Raised with a message, the span at fault and a hint."""

    def __init__(self, message: str, span: Span, hint: str = ""):
        super().__init__(message)
        self.message, self.span, self.hint = message, span, hint


class Pending:
    """Value of a name that depends on a swept parameter (sweep pre-pass)."""

    def __init__(self, sweep_name: str):
        self.sweep_name = sweep_name


Lookup = Callable[[T.Name], "Quantity | QubitRef | Pending"]


def _finite(v: float, span: Span, what: str) -> float:
    if not math.isfinite(v):
        raise EvalError(f"{what} gives a result that is not a finite number", span,
                        "check for division by zero or a value too large")
    return v


def _unit(symbol: str, span: Span) -> tuple[float, Dim]:
    u = UNITS.get(symbol)
    if u is None:  # the parser only lets known units through
        raise EvalError(f"unknown unit '{symbol}'", span)
    return u


def evaluate(e: T.Expr, lookup: Lookup) -> Quantity:
    """Value of an expression; names are resolved with ``lookup``."""
    if isinstance(e, T.Num):
        v = float(e.text)
        if not math.isfinite(v):
            raise EvalError(f"number '{e.text}' is too large", e.span)
        if e.unit:
            _, dim = _unit(e.unit, e.span)
            return Quantity(_finite(literal_to_si(e.text, e.unit), e.span, "this number"), dim)
        return Quantity(v, NONE)
    if isinstance(e, T.Name):
        if e.id == "pi":
            return Quantity(math.pi, NONE)
        v = lookup(e)
        if isinstance(v, QubitRef):
            raise EvalError(f"'{e.id}' stands for the qubit {v.name}, not a number", e.span,
                            "use it where a qubit is expected")
        if isinstance(v, Pending):
            raise _PendingUse(v.sweep_name, e.span)
        return v
    if isinstance(e, T.WithUnit):
        inner = evaluate(e.expr, lookup)
        if not inner.dim.is_dimensionless:
            raise EvalError(f"a unit can only follow a plain number, but this is {inner.dim.name()}",
                            e.span, "remove the unit")
        scale, dim = _unit(e.unit, e.span)
        return Quantity(_finite(inner.value * scale, e.span, "this value"), dim)
    if isinstance(e, T.Unary):
        v = evaluate(e.operand, lookup)
        return Quantity(-v.value if e.op == "-" else v.value, v.dim)
    if isinstance(e, T.Binary):
        a = evaluate(e.left, lookup)
        b = evaluate(e.right, lookup)
        if e.op in "+-":
            if a.dim != b.dim:
                raise EvalError(f"cannot {'add' if e.op == '+' else 'subtract'} "
                                f"{b.dim.name()} {'to' if e.op == '+' else 'from'} {a.dim.name()}",
                                e.span, "both sides need the same kind of unit")
            r = a.value + b.value if e.op == "+" else a.value - b.value
            return Quantity(_finite(r, e.span, "this sum"), a.dim)
        if e.op == "*":
            return Quantity(_finite(a.value * b.value, e.span, "this product"), a.dim * b.dim)
        if e.op == "/":
            if b.value == 0.0:
                raise EvalError("division by zero", e.right.span)
            return Quantity(_finite(a.value / b.value, e.span, "this division"), a.dim / b.dim)
        if e.op == "^":
            if not b.dim.is_dimensionless:
                raise EvalError("an exponent must be a plain number", e.right.span)
            if abs(b.value) > MAX_EXPONENT:
                raise EvalError(f"exponent {b.value:g} is beyond the limit of {MAX_EXPONENT}",
                                e.right.span, "dotseq bounds powers so evaluation stays fast")
            if not a.dim.is_dimensionless:
                if b.value != int(b.value):
                    raise EvalError(f"{a.dim.name()} can only be raised to a whole power",
                                    e.right.span)
                dim = a.dim ** int(b.value)
            else:
                dim = NONE
            if a.value == 0.0 and b.value < 0:
                raise EvalError("zero raised to a negative power", e.span)
            if a.value < 0 and b.value != int(b.value):
                raise EvalError("a negative number raised to a fractional power", e.span)
            try:
                r = a.value ** b.value
            except OverflowError:
                raise EvalError("this power is too large", e.span) from None
            return Quantity(_finite(float(r), e.span, "this power"), dim)
    if isinstance(e, T.Call):
        args = [evaluate(a, lookup) for a in e.args]
        return _call(e, args)
    raise EvalError("not an expression", getattr(e, "span", None))


def _call(e: T.Call, args: list[Quantity]) -> Quantity:
    f, x = e.func, args[0]
    if f in ("sin", "cos", "tan"):
        if x.dim == NONE:
            # a bare number would silently be radians: sin(30) is almost surely 30 deg
            raise EvalError(f"{f}() needs an angle with its unit, got a plain number",
                            e.args[0].span,
                            f"write e.g. {f}(30 deg), or {f}((2*pi*f*t) rad) for a phase "
                            "worked out in radians")
        if x.dim != ANGLE:
            raise EvalError(f"{f}() needs an angle, got {x.dim.name()}", e.span)
        v = getattr(math, f)(x.value)
        return Quantity(_finite(v, e.span, f"{f}()"), NONE)
    if f == "sqrt":
        if x.value < 0:
            raise EvalError("sqrt() of a negative value", e.span)
        if any(p % 2 for p in x.dim.exps):
            raise EvalError(f"sqrt() of {x.dim.name()} has no unit dotseq knows", e.span)
        return Quantity(math.sqrt(x.value), Dim(tuple(p // 2 for p in x.dim.exps)))
    if f in ("exp", "log"):
        if not x.dim.is_dimensionless:
            raise EvalError(f"{f}() needs a plain number, got {x.dim.name()}", e.span,
                            "divide by a unit first, e.g. exp(t / 1 us)")
        if f == "log" and x.value <= 0:
            raise EvalError("log() of a value that is not positive", e.span)
        if f == "exp" and x.value > 700:
            raise EvalError("exp() of this value is too large", e.span)
        return Quantity(math.exp(x.value) if f == "exp" else math.log(x.value), NONE)
    if f == "abs":
        return Quantity(abs(x.value), x.dim)
    if f == "round":
        if not x.dim.is_dimensionless:
            raise EvalError("round() needs a plain number", e.span)
        return Quantity(float(round(x.value)), NONE)
    if f in ("min", "max"):
        y = args[1]
        if x.dim != y.dim:
            raise EvalError(f"{f}() of {x.dim.name()} and {y.dim.name()}", e.span,
                            "both need the same kind of unit")
        return Quantity((min if f == "min" else max)(x.value, y.value), x.dim)
    raise EvalError(f"unknown function '{f}'", e.span)


class _PendingUse(Exception):
    def __init__(self, sweep_name: str, span: Span):
        self.sweep_name, self.span = sweep_name, span


def uses_pending(e: T.Expr, lookup: Lookup) -> str | None:
    """Name of the swept parameter an expression depends on, if any."""
    try:
        evaluate(e, lookup)
    except _PendingUse as p:
        return p.sweep_name
    except EvalError:
        return None
    return None
