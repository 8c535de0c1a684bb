"""What the simulator makes of the lab corrections of issue 19: the I/Q
mixer's image tone and the channel delays, seen through the as-played
outputs (compiler/simulate/build.py)."""

from __future__ import annotations

import math

import pytest

from compiler import CompileOptions, compile_run
from compiler.check import check
from compiler.device import load_device_text
from compiler.expand import expand
from compiler.parse import parse_text
from compiler.physics import larmor_frequency
from compiler.simulate import SimOptions
from compiler.simulate.sources import Switches
from compiler.simulate.engines.fast import FastEngine
from compiler.simulate.run import evaluate_whole

GAIN, SKEW_DEG = 1.3, 8.0
QUIET = Switches().off("t1", "t2", "t2_star", "charge")


def pair_at_image(mixer: str = f"{{gain_imbalance: {GAIN}, phase_skew: {SKEW_DEG} deg}}",
                  delays: dict | None = None) -> str:
    """Dots A (g 2.0) and B (g 2.02) on one line whose LO sits halfway
    between them, so that the image of a tone on A (LO − IF_A) is B's
    Larmor frequency; ideal channels."""
    fa, fb = larmor_frequency(2.0, 0.5), larmor_frequency(2.02, 0.5)
    d = {k: f", delay: {v}" for k, v in (delays or {}).items()}
    return f"""
name: image pair
field: 500 mT
temperature: 50 mK
rotation: {{mode: duration, shape: square, duration: 400 ns}}
dots:
  A: {{g: 2.0, t1: 1 ms, t2: 100 us, t2_star: 10 us, drive: {{line: mw, rabi_per_volt: 10 MHz/V}}, plunger: P_A}}
  B: {{g: 2.02, t1: 1 ms, t2: 100 us, t2_star: 10 us, drive: {{line: mw, rabi_per_volt: 10 MHz/V}}, plunger: P_B}}
couplings:
  - {{dots: [A, B], barrier: B_AB, exchange: {{model: exponential, j0: 20 kHz, v0: 40 mV}}, idle_voltage: -400 mV, pulse_voltage: 300 mV}}
channels:
  mw: {{kind: iq, sample_rate: 1 GS/s, bits: 16, range: [-500 mV, 500 mV], lo: {(fa + fb) / 2:.0f} Hz, if_band: [-300 MHz, 300 MHz], mixer: {mixer}{d.get("mw", "")}}}
  P_A: {{kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]{d.get("P_A", "")}}}
  P_B: {{kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]{d.get("P_B", "")}}}
  B_AB: {{kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]{d.get("B_AB", "")}}}
"""


def state_fidelity(src: str, dev, correct: bool, switches=QUIET) -> float:
    # the whole register: the disturbed dot B is not one the program acts on
    ex = expand(parse_text(src, "t.dotseq"))
    check(ex, dev)
    crun = compile_run(ex.runs[0], dev, CompileOptions(mixer_correction=correct))
    return evaluate_whole(crun, switches, SimOptions(nodes=1, steps=False, fidelity_scope="register"),
                          FastEngine()).f_state


def test_a_dot_at_the_image_frequency_is_driven_only_without_correction():
    """A π burst on A through a mixer with Q's gain 1.3 and 8° skew.

    Uncorrected, the mixer plays ½(1 + g·e^{iφ})·c + ½(1 − g·e^{iφ})·c*
    (the mixer model, common practice, no source): A turns by
    π·|1 + g·e^{iφ}|/2 and B, resonant with the image, by π·|1 − g·e^{iφ}|/2,
    so the state fidelity to (A up, B down) is sin²(θ_A/2)·cos²(θ_B/2)
    (resonant Rabi rotations; Rabi, Phys. Rev. 51, 652 (1937)).  Pre-distorted,
    neither happens."""
    dev = load_device_text(pair_at_image(), "pair.yaml")
    src = "prepare A B down\nrot A x 180 deg\n"
    z = GAIN * complex(math.cos(math.radians(SKEW_DEG)), math.sin(math.radians(SKEW_DEG)))
    th_a, th_b = math.pi * abs(1 + z) / 2, math.pi * abs(1 - z) / 2
    want = math.sin(th_a / 2) ** 2 * math.cos(th_b / 2) ** 2
    bad = state_fidelity(src, dev, correct=False)
    assert bad == pytest.approx(want, abs=3e-3)
    assert 1 - math.cos(th_b / 2) ** 2 > 0.05          # B visibly disturbed
    good = state_fidelity(src, dev, correct=True)
    assert good > 1 - 1e-4


def test_delays_do_not_change_what_is_simulated():
    """Delays shift what the generators play so that it arrives aligned; the
    simulator takes the outputs as they arrive, so the same run simulates
    the same with and without delays."""
    src = "prepare A B down\nrot A x 90 deg\nsqrtswap A B\nrot B y 90 deg\n"
    plain = load_device_text(pair_at_image(mixer="{}"), "pair.yaml")
    late = load_device_text(pair_at_image(mixer="{}", delays={"mw": "12 ns", "B_AB": "40 ns",
                                                               "P_A": "3 ns"}), "pair.yaml")
    a = state_fidelity(src, plain, correct=True)
    b = state_fidelity(src, late, correct=True)
    assert b == pytest.approx(a, abs=1e-9)


def _budget(src: str, dev, correct: bool) -> dict:
    from compiler import Checked, compile as compile_checked
    from compiler.schedule import schedule
    from compiler.simulate import simulate
    ex = expand(parse_text(src, "t.dotseq"))
    check(ex, dev)
    checked = Checked(ex, dev, tuple(schedule(r, dev) for r in ex.runs))
    r = simulate(compile_checked(checked, CompileOptions(mixer_correction=correct)),
                 SimOptions(nodes=1, steps=False, fidelity_scope="register")).runs[0]
    return {b.source: b.infidelity for b in r.budget}


def test_the_budget_shows_the_mixer_as_its_own_source():
    """Uncorrected, the image tone on B is the budget's 'I/Q mixer
    imbalance' line (the infidelity it adds over an ideal mixer); corrected,
    what the pre-distortion leaves is below 1e-5; a device without a mixer
    calibration has a line of exactly 0."""
    src = "prepare A B down\nrot A x 180 deg\n"
    dev = load_device_text(pair_at_image(), "pair.yaml")
    bad = _budget(src, dev, correct=False)["I/Q mixer imbalance"]
    good = _budget(src, dev, correct=True)["I/Q mixer imbalance"]
    assert bad > 0.05 and abs(good) < 1e-5
    plain = load_device_text(pair_at_image(mixer="{}"), "pair.yaml")
    assert _budget(src, plain, correct=True)["I/Q mixer imbalance"] == 0.0
