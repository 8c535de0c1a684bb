"""Named voltage points (device key ``points``) and the ``move`` step: the
device file, the sequence, the played levels, the bias-tee checks and what
the simulation makes of a barrier held at a point."""

import math

import numpy as np
import pytest

from compiler import CompileOptions, compile_run
from compiler.check import check
from compiler.device import load_device_text
from compiler.errors import (CheckError, DeviceError, ScheduleError, SequenceError,
                             SequenceSyntaxError)
from compiler.expand import expand
from compiler.parse import format_source, parse_text
from compiler.parse.tree import strip_spans
from compiler.schedule import schedule
from test_device import BASE, problem_with

POINTS = """points:
  load: {P_A: 20 mV, P_B: -10 mV}
  manipulate: {P_A: 0 mV, P_B: 0 mV}
  measure: {P_A: 12 mV, B_AB: 100 mV}
"""
DEVICE = BASE + POINTS          # points on lines 29-32


def device(extra: str = POINTS):
    return load_device_text(BASE + extra, "d.yaml")


def run_of(src: str, dev):
    ex = expand(parse_text(src, "t.dotseq"))
    check(ex, dev)
    return ex.runs[0]


def test_points_are_read_with_their_levels():
    dev = device()
    assert list(dev.points) == ["load", "manipulate", "measure"]
    assert dev.points["load"].levels == (("P_A", 0.02), ("P_B", -0.01))
    assert dev.point_channels == ("P_A", "P_B", "B_AB")
    assert dev.rest_level("B_AB") == 0.0 and dev.rest_level("P_A") == 0.0


@pytest.mark.parametrize("extra, fragment, line, col", [
    pytest.param("points:\n  load: {P_C: 20 mV}\n", "names the channel 'P_C'", 30, 10,
                 id="unknown-channel"),
    pytest.param("points:\n  load: {mw: 20 mV}\n", "must name a channel of kind 'gate'", 30, 10,
                 id="not-a-gate"),
    pytest.param("points:\n  load: {P_A: 2 V}\n", "the generator would play 2 V", 30, 15,
                 id="beyond-range"),
    pytest.param("points:\n  load: {P_A: 20 ns}\n", "must be a voltage", 30, 15,
                 id="not-a-voltage"),
    pytest.param("points:\n  load: {}\n", "points.load must be a mapping", 30, 9,
                 id="empty-point"),
    pytest.param("points:\n  2load: {P_A: 1 mV}\n", "'2load' is not a valid voltage point", 30, 3,
                 id="bad-name"),
    pytest.param("points: 3\n", "points must be a mapping", 29, 1, id="not-a-mapping"),
])
def test_bad_points(extra, fragment, line, col):
    with pytest.raises(DeviceError) as info:
        load_device_text(BASE + extra, "bad.yaml")
    p = problem_with(info.value, fragment)
    assert (p.span.line, p.span.col) == (line, col), info.value.render()
    assert p.hint or fragment in ("must be a voltage", "must name a channel of kind 'gate'")


def test_a_point_behind_a_bias_tee_is_checked_against_the_dc_level():
    # behind a bias tee the generator plays V − V_DC (the DC level of a barrier
    # is its idle level): a level within the range but 1.2 V from it is refused
    text = (BASE.replace("  B_AB: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}",
                         "  B_AB: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], "
                         "bias_tee: 1 ms}")
            .replace("    idle_voltage: 0 mV", "    idle_voltage: -500 mV")
            + "points:\n  measure: {B_AB: 700 mV}\n")
    with pytest.raises(DeviceError) as info:
        load_device_text(text, "bad.yaml")
    p = problem_with(info.value, "minus the DC level -500 mV behind the bias tee")
    assert "would play 1.2 V" in p.message and p.span.line == 30


NEW_FORMS = "move load\nmove measure ramp=100 ns\nmove manipulate ramp=t\n"


def test_move_prints_back():
    tree = parse_text(NEW_FORMS)
    assert format_source(tree) == NEW_FORMS
    assert strip_spans(parse_text(format_source(tree))) == strip_spans(tree)


@pytest.mark.parametrize("src, cls, line, col, fragment, hint", [
    pytest.param("move lod", CheckError, 1, 6, "no voltage point 'lod'", "did you mean 'load'",
                 id="misspelt-point"),
    pytest.param("move load ramp=-5 ns", SequenceError, 1, 16, "the ramp is negative", "a jump",
                 id="negative-ramp"),
    pytest.param("move load ramp=5 mV", SequenceError, 1, 16, "must be a time", "",
                 id="ramp-unit"),
    pytest.param("move load speed=1 ns", SequenceSyntaxError, 1, 11, "unknown option 'speed'", "ramp",
                 id="unknown-option"),
    pytest.param("together { move load }", SequenceSyntaxError, 1, 12, "cannot run inside 'together'",
                 "", id="move-in-together"),
    pytest.param("move", SequenceSyntaxError, 1, 5, "expected the name of a voltage point", "move measure",
                 id="no-point"),
])
def test_bad_moves(src, cls, line, col, fragment, hint):
    dev = device()
    with pytest.raises(cls) as info:
        run_of(src + "\n", dev)
    p = next(p for p in info.value.problems if fragment in p.message)
    assert (p.span.line, p.span.col) == (line, col), info.value.render()
    assert hint in p.hint


def test_a_device_without_points_says_so():
    with pytest.raises(CheckError) as info:
        run_of("move load\n", load_device_text(BASE, "d.yaml"))
    assert "has no points: section" in info.value.problems[0].hint


def test_exchange_needs_its_barrier_at_rest():
    dev = device()
    with pytest.raises(ScheduleError) as info:
        schedule(run_of("move measure\nsqrtswap A B\n", dev), dev)
    p = info.value.problems[0]
    assert "holds B_AB at 100 mV" in p.message and (p.span.line, p.span.col) == (2, 1)
    # a point that leaves the barrier at rest is fine
    schedule(run_of("move load\nsqrtswap A B\n", dev), dev)


def test_played_levels_jump_ramp_and_hold():
    # a jump sets the level from its sample on; a ramp of n samples plays the
    # continuous linear ramp's mean over each sample, old + (new − old)(k + ½)/n;
    # gates a point does not name return to rest (common practice, no source)
    dev = device()
    src = "move load\nwait 30 ns\nmove measure ramp=10 ns\nwait 40 ns\nmove manipulate\nwait 5 ns\n"
    cr = compile_run(run_of(src, dev), dev, CompileOptions())
    out = cr.waveforms.outputs
    pa, pb, bar = out["P_A"].volts, out["P_B"].volts, out["B_AB"].volts
    Q = out["P_A"].lsb / 2 + 1e-15                  # half a code: 16 bits over 2 V

    def same(x, v):
        return np.allclose(x, v, rtol=0, atol=Q)

    assert same(pa[:30], 0.02) and same(pb[:30], -0.01) and same(bar[:30], 0.0)
    k = np.arange(10)
    assert same(pa[30:40], 0.02 + (0.012 - 0.02) * (k + 0.5) / 10)
    assert same(pb[30:40], -0.01 + (0.0 + 0.01) * (k + 0.5) / 10)       # back to rest
    assert same(bar[30:40], 0.1 * (k + 0.5) / 10)
    assert same(pa[40:80], 0.012) and same(bar[40:80], 0.1) and same(pb[40:80], 0.0)
    assert same(pa[80:], 0.0) and same(bar[80:], 0.0)
    rec = [r for r in cr.waveforms.steps if r.kind == "move"]
    assert [r.params["point"] for r in rec] == ["load", "measure", "manipulate"]
    assert rec[1].params["ramp_s"] == pytest.approx(10e-9)


def test_bias_tee_droop_warning_against_the_integral():
    # droop of a first-order high-pass: ΔV = (1/τ)·∫(V − V_DC)dt (common
    # practice, REFERENCES.md); 20 mV held 1 µs on τ = 10 µs droops 2 mV > 1 %
    text = DEVICE.replace("  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}",
                          "  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], "
                          "bias_tee: 10 us}")
    dev = load_device_text(text, "d.yaml")
    tl = schedule(run_of("move load\nwait 1 us\nmove manipulate\n", dev), dev)
    w = [w for w in tl.warnings if "droops" in w.message]
    assert len(w) == 1 and "droops by 2 mV" in w[0].message and "--predistort" in w[0].message
    tl = schedule(run_of("move load\nwait 10 ns\nmove manipulate\n", dev), dev)
    assert not [w for w in tl.warnings if "droops" in w.message]      # 20 µV: below 1 %


def test_a_barrier_held_at_a_point_exchanges_in_the_simulation():
    # A barrier held at V for t with no Zeeman difference swaps |↑↓> into |↓↑>
    # with probability sin²(π·J·t) (H = J·S1·S2, J/h in Hz; Loss & DiVincenzo,
    # PRA 57, 120 (1998)); the move gives timing, the barrier gives J(V)
    from compiler.device.exchange import j_of_v
    from compiler.simulate.build import build_model
    from compiler.simulate.engines import FastEngine
    from compiler.simulate.model import noise_points
    from compiler.simulate.sources import all_off, compile_changes
    dev = load_device_text(BASE.replace("    g: 2.02", "    g: 2.0") + POINTS, "d.yaml")
    tl = schedule(run_of("move measure\nwait 500 ns\nmove manipulate\n", dev), dev)
    assert any("raises the barrier B_AB" in w.message for w in tl.warnings)
    off = all_off().back_on("exchange_zeeman")
    cr = compile_run(run_of("move measure\nwait 500 ns\nmove manipulate\n", dev), dev,
                     CompileOptions(**compile_changes(off)))
    model = build_model(cr.waveforms, cr.device, switches=off, m=4)
    rho0 = np.zeros((4, 4), complex)
    rho0[1, 1] = 1                                               # |↑↓>
    ev = FastEngine().evolve(model, noise_points(model, 1)[0], rho0=rho0)
    J = float(j_of_v(dev.coupling("A", "B").exchange, 0.1))
    expected = math.sin(math.pi * J * 500e-9) ** 2
    assert expected > 0.1
    assert np.real(ev.rho[2, 2]) == pytest.approx(expected, abs=1e-9)
