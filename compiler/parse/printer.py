"""Print a parsed tree back as canonical sequence text.

``parse_text(format_source(tree))`` gives the same tree (spans aside); the
tests rely on that identity.  Included files are printed as their include
statement, not inlined.
"""

from __future__ import annotations

from . import tree as T

_PREC = {"+": 1, "-": 1, "*": 2, "/": 2, "^": 4}


def format_expr(e: T.Expr, parent: int = 0, right: bool = False) -> str:
    if isinstance(e, T.Num):
        return e.text + (f" {e.unit}" if e.unit else "")
    if isinstance(e, T.Name):
        return e.id
    if isinstance(e, T.Call):
        return f"{e.func}(" + ", ".join(format_expr(a) for a in e.args) + ")"
    if isinstance(e, T.WithUnit):
        return f"({format_expr(e.expr)}) {e.unit}"
    if isinstance(e, T.Unary):
        s = e.op + format_expr(e.operand, 3)
        return f"({s})" if parent >= 3 else s
    if isinstance(e, T.Binary):
        p = _PREC[e.op]
        if e.op == "^":   # right associative; base binds tighter than unary
            s = f"{format_expr(e.left, 5)} ^ {format_expr(e.right, 3)}"
        else:
            s = f"{format_expr(e.left, p)} {e.op} {format_expr(e.right, p + 1)}"
        return f"({s})" if parent > p else s
    raise TypeError(f"not an expression: {e!r}")


def _opts(opts: tuple[T.Option, ...]) -> str:
    out = []
    for o in opts:
        v = o.value.name if isinstance(o.value, T.Ident) else format_expr(o.value)
        out.append(f" {o.key}={v}")
    return "".join(out)


def _names(idents) -> str:
    return " ".join(i.name for i in idents)


def format_stmt(s: T.Stmt, indent: str = "") -> list[str]:
    if isinstance(s, T.DeviceStmt):
        return [f'{indent}device "{s.path}"']
    if isinstance(s, T.Include):
        return [f'{indent}include "{s.path}"']
    if isinstance(s, T.Let):
        return [f"{indent}let {s.name} = {format_expr(s.expr)}"]
    if isinstance(s, T.SweepRange):
        return [f"{indent}sweep {s.name} from {format_expr(s.start)} to {format_expr(s.stop)}"
                f" in {format_expr(s.count)}"]
    if isinstance(s, T.SweepList):
        return [f"{indent}sweep {s.name} over [" + ", ".join(format_expr(v) for v in s.values) + "]"]
    if isinstance(s, T.Prepare):
        return [f"{indent}prepare {_names(s.qubits)} {s.state}"]
    if isinstance(s, T.Rot):
        a = s.axis
        if a.kind == "phase":
            axis = f"phase({format_expr(a.phase)})"
        else:
            axis = ("-" if a.negative else "") + a.kind
        return [f"{indent}rot {s.qubit.name} {axis} {format_expr(s.angle)}{_opts(s.options)}"]
    if isinstance(s, T.Exchange):
        angle = f" {format_expr(s.angle)}" if s.angle is not None else ""
        return [f"{indent}{s.kind} {s.a.name} {s.b.name}{angle}{_opts(s.options)}"]
    if isinstance(s, T.Wait):
        on = f" on {_names(s.qubits)}" if s.qubits else ""
        return [f"{indent}wait {format_expr(s.duration)}{on}"]
    if isinstance(s, T.Read):
        return [f"{indent}read {_names(s.qubits)}"]
    if isinstance(s, T.Move):
        return [f"{indent}move {s.point.name}{_opts(s.options)}"]
    if isinstance(s, T.Trigger):
        return [f'{indent}trigger "{s.label}"' if s.label else f"{indent}trigger"]
    if isinstance(s, T.Do):
        return [f"{indent}do {s.name}(" + ", ".join(format_expr(a) for a in s.args) + ")"]
    if isinstance(s, T.Together):
        return _braced(f"{indent}together", s.body, indent)
    if isinstance(s, T.Repeat):
        return _braced(f"{indent}repeat {format_expr(s.count)}", s.body, indent)
    if isinstance(s, T.BlockDef):
        return _braced(f"{indent}block {s.name}(" + ", ".join(s.params) + ")", s.body, indent)
    raise TypeError(f"not a statement: {s!r}")


def _braced(head: str, body, indent: str) -> list[str]:
    lines = [head + " {"]
    for b in body:
        lines.extend(format_stmt(b, indent + "    "))
    lines.append(indent + "}")
    return lines


def format_source(src: T.SourceFile) -> str:
    lines: list[str] = []
    for s in src.body:
        lines.extend(format_stmt(s))
    return "\n".join(lines) + "\n"
