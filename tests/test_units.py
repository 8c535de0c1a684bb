"""Units: parsing at the edge, SI inside, printing back."""

import math

import pytest
from hypothesis import given, strategies as st

from compiler.units import (ANGLE, ENERGY, FIELD, FREQ_PER_VOLT, FREQUENCY, TEMPERATURE, TIME,
                            VOLTAGE, UnitError, format_quantity, parse_quantity)


@pytest.mark.parametrize("text, dim, value", [
    pytest.param("40 ns", TIME, 40e-9, id="ns"),
    pytest.param("1.5 us", TIME, 1.5e-6, id="us"),
    pytest.param("2 µs", TIME, 2e-6, id="micro-sign"),
    pytest.param("3 ms", TIME, 3e-3, id="ms"),
    pytest.param("14.05 GHz", FREQUENCY, 14.05e9, id="GHz"),
    pytest.param("-300 MHz", FREQUENCY, -300e6, id="negative-MHz"),
    pytest.param("1 GS/s", FREQUENCY, 1e9, id="samples-per-second"),
    pytest.param("250 mV", VOLTAGE, 0.25, id="mV"),
    pytest.param("500 mT", FIELD, 0.5, id="mT"),
    pytest.param("90 deg", ANGLE, math.pi / 2, id="deg"),
    pytest.param("40 mK", TEMPERATURE, 0.04, id="mK"),
    pytest.param("10 ueV", ENERGY, 10e-6, id="ueV"),
    pytest.param("40 MHz/V", FREQ_PER_VOLT, 40e6, id="compound"),
    pytest.param("1e-3 s", TIME, 1e-3, id="exponent"),
])
def test_parse(text, dim, value):
    assert parse_quantity(text, dim) == pytest.approx(value, rel=1e-15)


def test_prefixes_are_applied_exactly():
    # decimal prefixes are applied in decimal, so 100 ns is the float nearest 1e-7
    assert parse_quantity("100 ns", TIME) == 1e-7
    assert parse_quantity("0.3 us", TIME) == 3e-7


@pytest.mark.parametrize("text, dim, fragment", [
    pytest.param("40", TIME, "needs a unit", id="bare-number"),
    pytest.param("40 MHz", TIME, "must be a time, but 'MHz' is a frequency", id="wrong-dim"),
    pytest.param("40 nss", TIME, "unknown unit 'nss'", id="unknown-unit"),
    pytest.param("nan", TIME, "finite", id="nan"),
    pytest.param("inf", TIME, "finite", id="inf"),
    pytest.param("forty ns", TIME, "cannot read", id="words"),
    pytest.param(True, TIME, "true/false", id="bool"),
])
def test_parse_errors(text, dim, fragment):
    with pytest.raises(UnitError) as info:
        parse_quantity(text, dim, "t1")
    assert fragment in str(info.value)


@pytest.mark.parametrize("value, dim, text", [
    (1.4e10, FREQUENCY, "14 GHz"), (40e-9, TIME, "40 ns"), (0.5, FIELD, "500 mT"),
    (math.pi, ANGLE, "180 deg"), (0.0, TIME, "0 s"), (-2.5e-3, VOLTAGE, "-2.5 mV"),
])
def test_format(value, dim, text):
    assert format_quantity(value, dim) == text


@given(st.floats(min_value=1e-12, max_value=1e11, allow_nan=False),
       st.sampled_from([TIME, FREQUENCY, VOLTAGE, FIELD, TEMPERATURE]))
def test_format_then_parse_round_trip(value, dim):
    # printing keeps 12 significant digits, so parsing back agrees to that precision
    text = format_quantity(value, dim, digits=12)
    assert parse_quantity(text, dim) == pytest.approx(value, rel=1e-11)


def test_format_distinct_adds_digits_until_the_values_differ():
    """Issue 12, item 11: 't2 = 600 ns is longer than 2·T1 = 600 ns'."""
    from compiler.units import TIME, FREQUENCY, NONE, format_distinct
    assert format_distinct(600.0000002e-9, 600e-9, TIME) == ("600.0000002 ns", "600 ns")
    assert format_distinct(600e-9, 600e-9, TIME) == ("600 ns", "600 ns")
    assert format_distinct(1.2e9, 1.3e9, FREQUENCY) == ("1.2 GHz", "1.3 GHz")
    assert format_distinct(1e-6, 999.9e-9, TIME) == ("1 us", "0.9999 us")     # one prefix
    a, b = format_distinct(1.0 + 2 ** -52, 1.0, NONE)
    assert a != b and float(a) == 1.0 + 2 ** -52


def test_sweep_constraints_print_the_digits_that_differ():
    """The sweep's own re-check of T2 ≤ 2·T1 (compiler/sweep/params.py)
    names two different numbers, not '400 us ... 400 us'."""
    import dataclasses
    from compiler.device import BUNDLED_DEFAULT, load_device
    from compiler.sweep.params import constraints
    d = load_device(BUNDLED_DEFAULT)
    q, dot = next(iter(d.dots.items()))
    bad = dataclasses.replace(d, dots={**d.dots, q: dataclasses.replace(dot, t2=2 * dot.t1 * (1 + 1e-9))})
    (ident, message, _), = constraints(bad)
    left, right = message.split(" is longer than 2·T1 = ")
    assert ident == f"{q}.t2>2t1" and left.split(" = ")[1] != right, message
