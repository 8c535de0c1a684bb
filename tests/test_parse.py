"""Parser: the tree, its spans, and the print-back identity."""

from pathlib import Path

import pytest
from hypothesis import given, settings, strategies as st

from compiler.parse import format_source, parse_path, parse_text, tree as T
from compiler.parse.tree import strip_spans
from conftest import SEQUENCES

SEQUENCE_FILES = sorted(SEQUENCES.rglob("*.dotseq"))


def test_there_are_examples():
    assert len(SEQUENCE_FILES) >= 4


@pytest.mark.parametrize("path", SEQUENCE_FILES, ids=lambda p: str(p.relative_to(SEQUENCES)))
def test_examples_print_back_to_the_same_tree(path):
    tree = parse_path(path)
    text = format_source(tree)
    again = parse_text(text, str(path))
    # printing is canonical: a second print is identical text
    assert format_source(again) == text
    # includes are printed as statements, so compare top-level trees without include bodies
    def shallow(src):
        return tuple(T.Include(s.path, "", (), None) if isinstance(s, T.Include) else s
                     for s in strip_spans(src).body)
    assert shallow(again) == shallow(tree)


def test_spans_point_at_the_text():
    src = "let a = 3 ns\nrot A  x 90 deg shape=gauss\n"
    tree = parse_text(src, "f.dotseq")
    rot = tree.body[1]
    assert isinstance(rot, T.Rot)
    assert (rot.span.line, rot.span.col) == (2, 1)
    assert (rot.axis.span.line, rot.axis.span.col) == (2, 8)
    assert rot.angle == T.Num("90", "deg", rot.angle.span)
    assert (rot.angle.span.col, rot.angle.span.end_col) == (10, 16)
    opt = rot.options[0]
    assert opt.key == "shape" and opt.value.name == "gauss"


def test_nodes_are_immutable():
    tree = parse_text("wait 1 ns\n")
    with pytest.raises(Exception):
        tree.body[0].duration = None


def test_statement_forms():
    src = """
device "d.yaml"
let t = 2 * (3 ns + 1 ns) / 4
sweep a from 0 mV to 10 mV in 3
sweep b over [1 ns, 2 ns]
prepare A B singlet
rot A phase(30 deg) (pi / 4) rad
rot A -z 45 deg
sqrtswap_inv A B duration=20 ns
swap A B amplitude=100 mV
wait t on A B
read A
trigger "go"
together { rot A x 90 deg; wait 5 ns on B }
repeat 3 { wait 1 ns }
block b2(q, x) { rot q y x }
do b2(A, 90 deg)
"""
    kinds = [type(s).__name__ for s in parse_text(src).body]
    assert kinds == ["DeviceStmt", "Let", "SweepRange", "SweepList", "Prepare", "Rot", "Rot",
                     "Exchange", "Exchange", "Wait", "Read", "Trigger", "Together", "Repeat",
                     "BlockDef", "Do"]


def test_operator_precedence():
    e = parse_text("let x = 1 + 2 * 3 ^ 2 ^ 2\n").body[0].expr
    # ^ is right associative and binds tighter than *, which binds tighter than +
    assert format_source(parse_text("let x = 1 + 2 * 3 ^ 2 ^ 2\n")).strip() == "let x = 1 + 2 * 3 ^ 2 ^ 2"
    assert e.op == "+" and e.right.op == "*" and e.right.right.op == "^"
    assert e.right.right.right.op == "^"


# ---- property: printing any expression and parsing it back gives the same tree

_names = st.sampled_from(["a", "tau", "amp", "x1"])
_units = st.sampled_from([None, "ns", "us", "MHz", "mV", "deg", "rad", "mT"])
_numbers = st.builds(lambda i, f: f"{i}" if f is None else f"{i}.{f}",
                     st.integers(0, 10_000), st.one_of(st.none(), st.integers(0, 999)))


def _exprs():
    leaf = st.one_of(
        st.builds(lambda n, u: T.Num(n, u, None), _numbers, _units),
        st.builds(lambda n: T.Name(n, None), _names),
    )
    return st.recursive(leaf, lambda inner: st.one_of(
        st.builds(lambda o, a, b: T.Binary(o, a, b, None), st.sampled_from("+-*/^"), inner, inner),
        st.builds(lambda a: T.Unary("-", a, None), inner),
        st.builds(lambda a: T.Call("sqrt", (a,), None), inner),
        st.builds(lambda a, b: T.Call("max", (a, b), None), inner, inner),
        st.builds(lambda a, u: T.WithUnit(a, u, None), inner, st.sampled_from(["ns", "deg"])),
    ), max_leaves=12)


@settings(max_examples=300, deadline=None)
@given(_exprs())
def test_expression_round_trip(expr):
    src = T.SourceFile("", (T.Let("v", expr, None),))
    text = format_source(src)
    back = strip_spans(parse_text(text))
    assert back == strip_spans(src), text


NEW_STEP_FORMS = """rot A x 90 deg detuning=-2.5 MHz
rot A y 180 deg duration=100 ns detuning=d
cz A B
cz A B duration=300 ns
cphase A B 90 deg
cphase A B -(pi / 4) rad amplitude=200 mV
cphase A B theta duration=t
together {
    cz A B
    rot C x 90 deg
}
"""


def test_new_step_forms_print_back():
    tree = parse_text(NEW_STEP_FORMS)
    text = format_source(tree)
    assert text == NEW_STEP_FORMS
    assert strip_spans(parse_text(text)) == strip_spans(tree)
    cp = tree.body[4]
    assert cp.kind == "cphase" and cp.angle == T.Num("90", "deg", cp.angle.span)
    assert tree.body[2].angle is None
    assert tree.body[0].options[0].key == "detuning"


@settings(max_examples=100, deadline=None)
@given(_exprs())
def test_cphase_angle_round_trip(expr):
    a, b = T.Ident("A", None), T.Ident("B", None)
    src = T.SourceFile("", (T.Exchange("cphase", a, b, (), None, expr),))
    text = format_source(src)
    assert strip_spans(parse_text(text)) == strip_spans(src), text
