"""Durations and as-soon-as-possible placement."""

import math

import numpy as np
import pytest

from compiler import program as P
from compiler.check import check
from compiler.device import load_device_text
from compiler.device.exchange import j_of_v
from compiler.errors import ScheduleError
from compiler.expand import expand
from compiler.parse import parse_text
from compiler.schedule import schedule
from compiler import shapes

DEVICE = """
name: test pair
field: 500 mT
temperature: 50 mK
rotation: {mode: amplitude, shape: square, amplitude: 200 mV, sigmas: 4, edge: 10 ns}
readout: {marker: M1, duration: 1 us, trigger_marker: M2}
dots:
  A: {g: 2.0, t1: 1 ms, t2: 50 us, t2_star: 5 us, drive: {line: mw, rabi_per_volt: 10 MHz/V}, plunger: P_A}
  B: {g: 2.0004, t1: 1 ms, t2: 50 us, t2_star: 5 us, drive: {line: mw, rabi_per_volt: 10 MHz/V}, plunger: P_B}
  C: {g: 2.0008, t1: 1 ms, t2: 50 us, t2_star: 5 us, drive: {line: mw2, rabi_per_volt: 10 MHz/V}, plunger: P_C}
couplings:
  - {dots: [A, B], barrier: B_AB, exchange: {model: exponential, j0: 20 kHz, v0: 40 mV}, pulse_voltage: 300 mV}
  - {dots: [A, C], barrier: B_AC, exchange: {model: exponential, j0: 20 kHz, v0: 40 mV}, pulse_voltage: 300 mV, detune: {B: 20 mV}}
channels:
  mw:  {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], lo: 14 GHz, if_band: [-300 MHz, 300 MHz]}
  mw2: {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], lo: 14 GHz, if_band: [-300 MHz, 300 MHz]}
  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}
  P_B: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}
  P_C: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}
  B_AB: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}
  B_AC: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}
  M1: {kind: marker, sample_rate: 1 GS/s}
  M2: {kind: marker, sample_rate: 1 GS/s}
"""
DEV = load_device_text(DEVICE, "test.yaml")


def timeline(src: str):
    ex = expand(parse_text(src, "t.dotseq"))
    check(ex, DEV)
    return schedule(ex.runs[0], DEV)


def test_square_pi_pulse_lasts_half_a_rabi_period():
    # on resonance a square burst at Rabi frequency f turns the spin by 2πft:
    # π needs t = 1/(2f) (Rabi, Phys. Rev. 51, 652 (1937))
    tl = timeline("rot A x 180 deg\n")
    f = 10e6 * 0.2
    assert tl.slots[0].duration == pytest.approx(1 / (2 * f), rel=1e-12)
    assert tl.slots[0].level == pytest.approx(0.2)


@pytest.mark.parametrize("shape", ["square", "gauss", "flattop"])
@pytest.mark.parametrize("angle", [30, 90, 180, 270])
def test_envelope_area_sets_the_angle(shape, angle):
    # the angle is 2π·r·A·∫e dt whatever the shape (Abragam 1961); the area is
    # integrated here numerically, independently of shapes.area
    tl = timeline(f"rot A x {angle} deg shape={shape}\n")
    s = tl.slots[0]
    t = np.linspace(0, s.duration, 200_001)
    e = shapes.envelope(shape, t, s.duration, sigmas=4, edge=10e-9)
    theta = 2 * math.pi * 10e6 * s.level * np.trapezoid(e, t)
    assert theta == pytest.approx(math.radians(angle), rel=1e-6)


def test_fixed_duration_sets_the_amplitude():
    tl = timeline("rot A x 90 deg duration=100 ns\n")
    s = tl.slots[0]
    assert s.duration == 100e-9
    # square: θ = 2π·r·A·T  ->  A = θ/(2π r T)
    assert s.level == pytest.approx((math.pi / 2) / (2 * math.pi * 10e6 * 100e-9))


def test_burst_beyond_the_line_range_is_an_error_naming_the_step():
    with pytest.raises(ScheduleError) as info:
        timeline("wait 1 ns\nrot A x 180 deg duration=5 ns\n")
    p = info.value.first
    assert p.span.line == 2 and "beyond the ±500 mV range of line 'mw'" in p.message


def test_sqrtswap_accumulates_a_quarter_turn_of_exchange():
    # √SWAP when ∫J dt/ħ = π/2, i.e. ∫(J/h) dt = 1/4 (Loss & DiVincenzo, PRA 57, 120 (1998))
    tl = timeline("sqrtswap A B\nswap A B\nisqrtswap A B duration=50 ns\n")
    sq, sw, isq = tl.slots
    j = j_of_v(DEV.coupling("A", "B").exchange, 0.3)
    assert 2 * math.pi * j * sq.duration == pytest.approx(math.pi / 2, rel=1e-12)
    assert 2 * math.pi * j * sw.duration == pytest.approx(math.pi, rel=1e-12)
    j3 = j_of_v(DEV.coupling("A", "B").exchange, isq.level)
    assert 2 * math.pi * j3 * 50e-9 == pytest.approx(3 * math.pi / 2, rel=1e-9)


def test_as_soon_as_possible_placement():
    tl = timeline("rot A x 90 deg\nwait 30 ns on C\nrot B x 90 deg\nrot C x 90 deg\n"
                  "sqrtswap A B\ntrigger\nwait 10 ns on A\n")
    s = {i: slot for i, slot in enumerate(tl.slots)}
    pi2 = 1 / (4 * 2e6)
    assert s[0].start == 0
    assert s[1].start == 0                      # C is free
    assert s[2].start == pytest.approx(pi2)     # B shares line mw with A: after A's burst
    assert s[3].start == pytest.approx(30e-9)   # C is on its own line, after its wait
    assert s[4].start == pytest.approx(2 * pi2)  # exchange waits for both dots
    trig = s[5]
    assert trig.start == pytest.approx(max(x.end for x in tl.slots[:5]))  # trigger waits for all
    assert s[6].start == pytest.approx(trig.start)


def test_together_overlaps_bursts_on_one_line():
    tl = timeline("together { rot A x 90 deg ; rot B x 180 deg }\n")
    a, b = tl.slots
    assert a.start == b.start == 0 and a.group == b.group >= 0
    assert tl.total == pytest.approx(b.duration)


def test_long_range_exchange_occupies_the_detuned_dot():
    tl = timeline("sqrtswap A C\nrot B x 90 deg\n")
    ex, rb = tl.slots
    assert "dot:B" in ex.resources and "ch:P_B" in ex.resources
    assert rb.start == pytest.approx(ex.end)


def test_frame_rotation_takes_no_time():
    tl = timeline("rot A z 90 deg\nrot A x 90 deg\n")
    assert tl.slots[0].duration == 0 and tl.slots[1].start == 0


def test_zeeman_difference_warning():
    # J(300 mV) ≈ 36 MHz; ΔEz(A,C) = 0.0008·μB·B/h ≈ 5.6 MHz: J/ΔEz < 10 -> warn
    tl = timeline("sqrtswap A C\n")
    assert tl.warnings and "not well above the Zeeman difference" in tl.warnings[0].message
    assert not timeline("sqrtswap A B\n").warnings
