"""What `dotseq check` finds before anything is simulated (issue 14, item 5):
crosstalk of bursts on a shared line, equal or near-equal frequencies on a
line, tones summed beyond a line's range."""

import math
from pathlib import Path

import numpy as np
import pytest
from scipy.linalg import expm

from compiler import check_file
from compiler.check.lines import CROSSTALK_WARN
from compiler.device.model import RotationDefaults
from compiler.errors import CheckError
from compiler.pulses import design_burst, spectator_flip

DEMO_PAIR = (Path(__file__).parent.parent / "sequences" / "devices" / "demo_pair.yaml").resolve()
DEFAULT = (Path(__file__).parent.parent / "compiler" / "device" / "bundled" /
           "default_pair.yaml").resolve()
SX = np.array([[0, 1], [1, 0]], complex)
SY = np.array([[0, -1j], [1j, 0]])


@pytest.mark.parametrize("rabi, delta, t", [(2e6, 4.2e6, 250e-9), (5e6, 1e6, 100e-9),
                                            (1e6, 20e6, 500e-9), (3e6, 0.0, 167e-9)])
def test_square_burst_crosstalk_is_the_off_resonant_rabi_formula(rabi, delta, t):
    # P = Ω²/(Ω²+Δ²)·sin²(√(Ω²+Δ²)·t/2), Ω and Δ angular (Rabi, Phys. Rev. 51, 652 (1937))
    dt = 1e-9
    rot = RotationDefaults(mode="duration", shape="square", duration=t)
    b = design_burst(math.pi, 0.0, 1.0, dt, rot)       # 1 Hz/V: amplitude = Rabi frequency
    b = type(b)(b.n, rabi, b.shape, b.envelope, b.angle, b.phase)
    W, D = 2 * math.pi * rabi, 2 * math.pi * delta
    T = b.n * dt
    want = W ** 2 / (W ** 2 + D ** 2) * math.sin(math.sqrt(W ** 2 + D ** 2) * T / 2) ** 2
    # the estimate holds the tone's phase over quarter samples: 1e-4 relative at 20 MHz
    assert spectator_flip(b, 1.0, delta, dt) == pytest.approx(want, rel=1e-3, abs=1e-12)


def _exact_flip(env, amp, rabi_per_volt, delta, dt, sub=16):
    """Independent propagation: H/h = r·A·e(t)/2·(cos(2πΔt)σx + sin(2πΔt)σy),
    e held per sample, 16 matrix exponentials (scipy expm) per sample."""
    U = np.eye(2, dtype=complex)
    h = dt / sub
    for k, e in enumerate(env):
        for j in range(sub):
            t = k * dt + (j + 0.5) * h
            om = rabi_per_volt * amp * e
            H = om / 2 * (math.cos(2 * math.pi * delta * t) * SX + math.sin(2 * math.pi * delta * t) * SY)
            U = expm(-2j * math.pi * H * h) @ U
    return abs(U[1, 0]) ** 2


@pytest.mark.parametrize("delta", [1.3e6, 4.2e6, 9e6])
def test_gaussian_burst_crosstalk_matches_an_exact_propagation(delta):
    dt = 1e-9
    rot = RotationDefaults(mode="duration", shape="gauss", duration=200e-9, sigmas=4)
    b = design_burst(math.pi, 0.0, 7e6, dt, rot)
    want = _exact_flip(b.envelope, b.amplitude, 7e6, delta, dt)
    got = spectator_flip(b, 7e6, delta, dt)
    assert got == pytest.approx(want, rel=2e-3, abs=1e-9)


def _device(tmp_path, src: Path, old: str, new: str) -> Path:
    """``src`` with ``old`` replaced by ``new``; the bundled pair's dots as
    spin-1/2 (the 'graphene' preset, no field tilt), whose qubit frequency is
    g·μB·B/h, so that the detunings below follow from the g-factors alone."""
    text = src.read_text()
    if src == DEFAULT:
        text = text.replace("preset: bilayer_graphene", "preset: graphene")
        text = "\n".join(x for x in text.split("\n") if not x.startswith("field_tilt:"))
        text = text.replace("lo: 20.55 GHz", "lo: 14.05 GHz")
    assert old in text
    p = tmp_path / "dev.yaml"
    p.write_text(text.replace(old, new))
    return p


def test_check_warns_of_crosstalk_between_dots_4_MHz_apart(write, tmp_path):
    # the bundled pair with dot B moved to 4.2 MHz from A (square 250 ns π bursts,
    # 2 MHz Rabi frequency): the Rabi formula gives 0.044 per burst
    dev = _device(tmp_path, DEFAULT, "g: 2.02 ", "g: 2.0006 ")
    p = write("x.dotseq", f'device "{dev}"\nrot A x 180 deg\nrot B x 180 deg\n')
    s = check_file(p)
    w = [x for x in s.warnings if "also flips" in x]
    assert len(w) == 2, s.warnings
    assert "x.dotseq:2:1" in w[0] and "flips B, 4.199 MHz away" in w[0] and "0.044" in w[0]
    assert "x.dotseq:3:1" in w[1] and "flips A" in w[1]


def test_no_crosstalk_warning_far_apart(write):
    # the bundled pair: 140 MHz apart, nothing near the 1e-3 level
    s = check_file(write("x.dotseq", f'device "{DEFAULT}"\nrot A x 180 deg\nrot B x 180 deg\n'))
    assert not any("also flips" in x or "apart in Larmor" in x for x in s.warnings), s.warnings
    assert CROSSTALK_WARN == 1e-3


def test_equal_frequencies_on_one_line_are_a_warning(write, tmp_path):
    dev = _device(tmp_path, DEFAULT, "g: 2.02 ", "g: 2.0 ")
    s = check_file(write("x.dotseq", f'device "{dev}"\nrot A x 90 deg\nrot B x 90 deg\n'))
    assert any("A and B have the same Larmor frequency" in x for x in s.warnings), s.warnings


def test_near_equal_frequencies_on_one_line_are_a_warning(write, tmp_path):
    # 1.4 MHz apart against 1/(250 ns) = 4 MHz of spectral width
    dev = _device(tmp_path, DEFAULT, "g: 2.02 ", "g: 2.0002 ")
    s = check_file(write("x.dotseq", f'device "{dev}"\nrot A x 180 deg\nrot B x 180 deg\n'))
    assert any("A and B on line 'mw' are only 1.4 MHz apart" in x for x in s.warnings), s.warnings


def test_summed_tones_beyond_the_range_are_refused_by_check(write):
    # two 270 mV Gaussian tones together on the ±500 mV line of the demo pair
    p = write("x.dotseq", f'device "{DEMO_PAIR}"\nwait 10 ns\n'
              "together { rot A x 180 deg duration=300 ns ; rot B x 180 deg duration=300 ns }\n")
    with pytest.raises(CheckError) as info:
        check_file(p)
    q = info.value.first
    assert q.span.line == 3 and "2 bursts played together on line 'mw'" in q.message
    assert "beyond the line's range" in q.message and "nothing is clipped" in q.hint


def test_summed_tones_within_the_range_pass(write):
    p = write("x.dotseq", f'device "{DEMO_PAIR}"\n'
              "together { rot A x 90 deg ; rot B x 90 deg }\n")
    check_file(p)


def test_image_frequency_on_another_dot_is_a_warning(write, tmp_path):
    """The bundled pair with the LO halfway between the two Larmor
    frequencies: the image of A's burst, LO − IF_A = 2·LO − f_A, lands on B
    (common practice, no source: an I/Q mixer's image is the tone mirrored
    about the LO)."""
    from compiler.physics import larmor_frequency
    f_a, f_b = larmor_frequency(2.0, 0.5), larmor_frequency(2.02, 0.5)
    lo = (f_a + f_b) / 2
    dev = _device(tmp_path, DEFAULT, "lo: 14.05 GHz", f"lo: {lo:.0f} Hz")
    s = check_file(write("x.dotseq", f'device "{dev}"\nrot A x 180 deg\nrot B x 180 deg\n'))
    w = [x for x in s.warnings if "image of this" in x]
    assert len(w) == 2, s.warnings
    assert "x.dotseq:2:1" in w[0] and "burst on A" in w[0] and "from B on line 'mw'" in w[0]
    assert "no mixer calibration" in w[0]
    # with a calibration the warning says how strong the uncorrected image would be
    text = dev.read_text().replace("if_band: [-300 MHz, 300 MHz]",
                                   "if_band: [-300 MHz, 300 MHz], mixer: {gain_imbalance: 1.06, "
                                   "phase_skew: 4 deg}", 1)
    dev.write_text(text)
    s = check_file(write("y.dotseq", f'device "{dev}"\nrot A x 180 deg\n'))
    w = [x for x in s.warnings if "image of this" in x]
    assert len(w) == 1 and "uncorrected it would be -27 dB below the tone" in w[0], s.warnings


def test_no_image_warning_when_images_miss_the_dots(write):
    # the bundled pair: A's image at 14.104 GHz, 32 MHz from B, against 4 MHz of width
    s = check_file(write("x.dotseq", f'device "{DEFAULT}"\nrot A x 180 deg\nrot B x 180 deg\n'))
    assert not any("image of this" in x for x in s.warnings), s.warnings


def test_summed_tones_are_checked_after_mixer_correction(write, tmp_path):
    """Two 700 ns π bursts together fit the demo pair's ±500 mV line; with a
    mixer whose Q path has 0.55 of I's gain, Q is played 1/0.55 larger and
    the sum leaves the range: check refuses what compile would play."""
    src = ('wait 10 ns\n'
           "together { rot A x 180 deg duration=700 ns ; rot B x 180 deg duration=700 ns }\n")
    check_file(write("ok.dotseq", f'device "{DEMO_PAIR}"\n' + src))
    dev = _device(tmp_path, DEMO_PAIR, "if_band: [-250 MHz, 250 MHz]}",
                  "if_band: [-250 MHz, 250 MHz], mixer: {gain_imbalance: 0.55}}")
    with pytest.raises(CheckError) as info:
        check_file(write("x.dotseq", f'device "{dev}"\n' + src))
    assert "2 bursts played together on line 'mw'" in info.value.first.message
