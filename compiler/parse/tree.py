"""The parsed program: immutable nodes, each with its source span.

This is the output of :func:`compiler.parse.parse_text` and the input of the
expansion stage.  Nothing here is evaluated yet: numbers keep the text and
unit they were written with, names are unresolved, blocks are not expanded.
``spans`` take part in equality only through :func:`strip_spans`, which the
round-trip tests use.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Union

from ..errors import Span

# ---------------------------------------------------------------- expressions


@dataclass(frozen=True, slots=True)
class Num:
    text: str                 # the number as written, e.g. "90", "1.5e-3"
    unit: str | None          # unit symbol as written, e.g. "deg", "ns"
    span: Span


@dataclass(frozen=True, slots=True)
class Name:
    id: str
    span: Span


@dataclass(frozen=True, slots=True)
class Unary:
    op: str                   # "-" or "+"
    operand: "Expr"
    span: Span


@dataclass(frozen=True, slots=True)
class Binary:
    op: str                   # "+", "-", "*", "/", "^"
    left: "Expr"
    right: "Expr"
    span: Span


@dataclass(frozen=True, slots=True)
class Call:
    func: str
    args: tuple["Expr", ...]
    span: Span


@dataclass(frozen=True, slots=True)
class WithUnit:
    """A parenthesised expression followed by a unit: ``(pi/2) rad``."""
    expr: "Expr"
    unit: str
    span: Span


Expr = Union[Num, Name, Unary, Binary, Call, WithUnit]

# ---------------------------------------------------------------- statements


@dataclass(frozen=True, slots=True)
class Ident:
    """A qubit (dot) name, or a block parameter standing for one."""
    name: str
    span: Span


@dataclass(frozen=True, slots=True)
class Axis:
    """Rotation axis: 'x', 'y', 'z' (with sign) or 'phase' with an angle."""
    kind: str                 # "x", "y", "z", "phase"
    negative: bool
    phase: Expr | None
    span: Span


@dataclass(frozen=True, slots=True)
class Option:
    key: str
    value: Union[Expr, Ident]   # Ident for word values such as shape=gauss
    span: Span


@dataclass(frozen=True, slots=True)
class DeviceStmt:
    path: str
    span: Span


@dataclass(frozen=True, slots=True)
class Include:
    path: str                 # as written
    file: str                 # resolved path that was read
    body: tuple["Stmt", ...]
    span: Span


@dataclass(frozen=True, slots=True)
class Let:
    name: str
    expr: Expr
    span: Span


@dataclass(frozen=True, slots=True)
class SweepRange:
    name: str
    start: Expr
    stop: Expr
    count: Expr
    span: Span


@dataclass(frozen=True, slots=True)
class SweepList:
    name: str
    values: tuple[Expr, ...]
    span: Span


@dataclass(frozen=True, slots=True)
class Prepare:
    qubits: tuple[Ident, ...]
    state: str                # up, down, xplus, xminus, yplus, yminus, singlet
    span: Span


@dataclass(frozen=True, slots=True)
class Rot:
    qubit: Ident
    axis: Axis
    angle: Expr
    options: tuple[Option, ...]
    span: Span


@dataclass(frozen=True, slots=True)
class Exchange:
    kind: str                 # "sqrtswap", "sqrtswap_inv", "swap", "cz", "cphase"
    a: Ident
    b: Ident
    options: tuple[Option, ...]
    span: Span
    angle: Expr | None = None  # cphase: the conditional phase; None for the others


@dataclass(frozen=True, slots=True)
class Wait:
    duration: Expr
    qubits: tuple[Ident, ...]  # empty: every qubit
    span: Span


@dataclass(frozen=True, slots=True)
class Read:
    qubits: tuple[Ident, ...]
    span: Span


@dataclass(frozen=True, slots=True)
class Trigger:
    label: str
    span: Span


@dataclass(frozen=True, slots=True)
class Move:
    """``move POINT [ramp=TIME]``: the gates to a voltage point of the device."""
    point: Ident
    options: tuple[Option, ...]
    span: Span


@dataclass(frozen=True, slots=True)
class Together:
    body: tuple["Stmt", ...]
    span: Span


@dataclass(frozen=True, slots=True)
class Repeat:
    count: Expr
    body: tuple["Stmt", ...]
    span: Span


@dataclass(frozen=True, slots=True)
class BlockDef:
    name: str
    params: tuple[str, ...]
    body: tuple["Stmt", ...]
    span: Span


@dataclass(frozen=True, slots=True)
class Do:
    name: str
    args: tuple[Expr, ...]
    span: Span


Stmt = Union[DeviceStmt, Include, Let, SweepRange, SweepList, Prepare, Rot, Exchange,
             Wait, Read, Trigger, Move, Together, Repeat, BlockDef, Do]


@dataclass(frozen=True, slots=True)
class SourceFile:
    """One parsed sequence file."""
    file: str
    body: tuple[Stmt, ...]


STATES = ("up", "down", "xplus", "xminus", "yplus", "yminus", "singlet")


def strip_spans(node):
    """A copy of a tree with every span (and resolved include path) blanked,
    so two trees parsed from differently laid-out text compare equal."""
    if isinstance(node, tuple):
        return tuple(strip_spans(n) for n in node)
    if dataclasses.is_dataclass(node) and not isinstance(node, type):
        changes = {}
        for f in dataclasses.fields(node):
            v = getattr(node, f.name)
            if isinstance(v, Span):
                changes[f.name] = None
            elif f.name == "file" and isinstance(node, (Include, SourceFile)):
                changes[f.name] = ""
            else:
                changes[f.name] = strip_spans(v)
        return dataclasses.replace(node, **changes)
    return node
