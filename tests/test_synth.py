"""Waveform synthesis: what the generators play, checked against physics.

Propagation uses tests/reference.py (dense matrix exponentials on a fine grid,
written independently of the compiler's pulse design)."""

import math

import numpy as np
import pytest

from compiler import analog, compile_file, load
from compiler.check import check
from compiler.device import load_device, load_device_text
from compiler.errors import SynthesisError
from compiler.expand import expand
from compiler.parse import parse_text
from compiler.steps import SQRT_SWAP
from compiler.schedule import schedule
from compiler.synth import as_played, synthesize
from conftest import SEQUENCES
from reference import I2, gate_fidelity, propagate, rotation, rz

CNOT = np.eye(4, dtype=complex)[[0, 1, 3, 2]]   # control A, target B; |0> = spin up


def device_text(*, g_b="2.0", lo_a="LO_A", lo_b="LO_B", rise="0 ns", bits=16, b_line="mwB",
                shape="square", mode="amplitude", amp="200 mV", dur="100 ns", field="500 mT",
                g_a="2.0", extra_mw=""):
    """Two dots; by default each on its own microwave line with LO = its Larmor
    frequency (IF = 0) and ideal channels, so that hold and filter effects vanish."""
    from compiler.physics import larmor_frequency
    B = float(field.split()[0]) * 1e-3
    fa = larmor_frequency(float(g_a), B)
    fb = larmor_frequency(float(g_b), B)
    lo_a = f"{fa:.0f} Hz" if lo_a == "LO_A" else lo_a
    lo_b = f"{fb:.0f} Hz" if lo_b == "LO_B" else lo_b
    return f"""
name: synthetic pair
field: {field}
temperature: 50 mK
rotation: {{mode: {mode}, shape: {shape}, amplitude: {amp}, duration: {dur}, sigmas: 4, edge: 10 ns}}
readout: {{marker: M1, duration: 100 ns, trigger_marker: M2}}
dots:
  A: {{g: {g_a}, t1: 1 ms, t2: 100 us, t2_star: 10 us, drive: {{line: mwA, rabi_per_volt: 10 MHz/V}}, plunger: P_A}}
  B: {{g: {g_b}, t1: 1 ms, t2: 100 us, t2_star: 10 us, drive: {{line: {b_line}, rabi_per_volt: 10 MHz/V}}, plunger: P_B}}
couplings:
  - {{dots: [A, B], barrier: B_AB, exchange: {{model: exponential, j0: 20 kHz, v0: 40 mV}}, idle_voltage: -400 mV, pulse_voltage: 300 mV}}
channels:
  mwA: {{kind: iq, sample_rate: 1 GS/s, bits: {bits}, range: [-500 mV, 500 mV], rise_time: {rise}, lo: {lo_a}, if_band: [-300 MHz, 300 MHz]{extra_mw}}}
  mwB: {{kind: iq, sample_rate: 1 GS/s, bits: {bits}, range: [-500 mV, 500 mV], rise_time: {rise}, lo: {lo_b}, if_band: [-300 MHz, 300 MHz]}}
  P_A: {{kind: gate, sample_rate: 1 GS/s, bits: {bits}, range: [-1 V, 1 V], rise_time: {rise}}}
  P_B: {{kind: gate, sample_rate: 1 GS/s, bits: {bits}, range: [-1 V, 1 V], rise_time: {rise}}}
  B_AB: {{kind: gate, sample_rate: 1 GS/s, bits: {bits}, range: [-1 V, 1 V], rise_time: {rise}, min_length: 256, granularity: 64}}
  M1: {{kind: marker, sample_rate: 1 GS/s}}
  M2: {{kind: marker, sample_rate: 1 GS/s}}
"""


def build(src: str, dev):
    ex = expand(parse_text(src, "t.dotseq"))
    check(ex, dev)
    tl = schedule(ex.runs[0], dev)
    return tl, synthesize(tl, dev)


def frame_unitary(wf, dev, **kw):
    """Played unitary seen in the qubit frames: Rz(F_final)·U_rotating."""
    stop = kw.pop("stop", None)
    U = propagate(wf, dev, stop=stop if stop is not None else wf.n_samples, **kw)
    return rz([wf.frames[q] for q in dev.dots]) @ U


# ------------------------------------------------------------- bursts

@pytest.mark.parametrize("g_a", ["2.0", "-0.44"], ids=["g-positive", "g-negative"])
@pytest.mark.parametrize("shape", ["square", "gauss", "flattop"])
@pytest.mark.parametrize("axis, phase", [("x", 0.0), ("y", math.pi / 2), ("phase(30 deg)", math.pi / 6)])
def test_burst_gives_the_angle_through_the_rotating_frame(g_a, shape, axis, phase):
    # A burst compiled for θ about φ, played through hold + RC at an IF of
    # 83 MHz and propagated in the exact two-level rotating-frame Hamiltonian,
    # is the rotation exp(-iθ(cosφ σx + sinφ σy)/2) in the qubit's frame
    # (Rabi, Phys. Rev. 51, 652 (1937); Abragam, Principles of Nuclear Magnetism
    # (1961)); for negative g the rotation sense must not flip.
    from compiler.physics import larmor_frequency
    fa = larmor_frequency(float(g_a), 0.5)
    dev = load_device_text(device_text(g_a=g_a, g_b="2.0" if g_a == "-0.44" else "1.0",
                                       lo_a=f"{fa - 83e6:.0f} Hz", rise="1 ns", bits=16,
                                       shape=shape), "d.yaml")
    for theta in (90, 180, 33):
        tl, wf = build(f"rot A {axis} {theta} deg\n", dev)
        U = frame_unitary(wf, dev, m=16, ideal=True)
        T = np.kron(rotation(phase, math.radians(theta)), I2)
        assert 1 - gate_fidelity(U, T) < 2e-6, (theta, 1 - gate_fidelity(U, T))


def test_off_resonant_spectator_follows_the_detuned_rabi_formula():
    # A square burst on A also drives B on the same line, detuned by Δ:
    # P_flip = Ω²/(Ω²+Δ²)·sin²(√(Ω²+Δ²)·t/2) (Rabi 1937)
    from compiler.physics import larmor_frequency
    fa = larmor_frequency(2.0, 0.5)
    g_b = 2.0 + 4e6 / (larmor_frequency(1.0, 0.5))       # B sits 4 MHz above A
    dev = load_device_text(device_text(g_b=f"{g_b:.12f}", lo_a=f"{fa:.0f} Hz", b_line="mwA",
                                       shape="square"), "d.yaml")
    tl, wf = build("rot A x 180 deg duration=400 ns\n", dev)
    slot = tl.slots[0]
    U = propagate(wf, dev, stop=slot.end_sample, m=16, ideal=True)
    omega = 10e6 * slot.level                              # Rabi frequency, Hz
    delta = dev.larmor("B") - dev.larmor("A")
    t = slot.duration
    gen = math.hypot(omega, delta)
    expected = omega ** 2 / gen ** 2 * math.sin(math.pi * gen * t) ** 2
    # B flips from |↑↑> to |↑↓>... here from A up, B up: population of |B down>
    psi = U @ np.array([1, 0, 0, 0], dtype=complex)
    p_b_down = abs(psi[1]) ** 2 + abs(psi[3]) ** 2
    assert p_b_down == pytest.approx(expected, abs=2e-4)
    assert expected > 0.05                                 # the check is not trivial


def test_single_sideband_tone_lands_on_the_dot():
    # Up-convert I/Q numerically, V = I·cos(2π LO t) − Q·sin(2π LO t), and find
    # the tone at the dot's Larmor frequency LO + IF (common practice, no source)
    dev = load_device(SEQUENCES / "devices" / "demo_pair.yaml")
    for q in ("A", "B"):
        tl, wf = build(f"rot {q} x 180 deg duration=2 us\n", dev)
        i = wf.outputs["mw.I"].volts[:2000]
        qq = wf.outputs["mw.Q"].volts[:2000]
        lo = dev.channels["mw"].lo
        fs_rf = 64e9
        t = np.arange(int(2e-6 * fs_rf)) / fs_rf
        k = np.minimum((t * 1e9).astype(int), 1999)
        v = i[k] * np.cos(2 * np.pi * lo * t) - qq[k] * np.sin(2 * np.pi * lo * t)
        spec = np.abs(np.fft.rfft(v * np.hanning(len(v))))
        f = np.fft.rfftfreq(len(v), 1 / fs_rf)
        band = (f > lo - 300e6) & (f < lo + 300e6)
        peak = f[band][np.argmax(spec[band])]
        assert abs(peak - dev.larmor(q)) < 1e6, (q, peak, dev.larmor(q))


# ------------------------------------------------------------- exchange and CNOT

def test_loss_divincenzo_cnot_ideally_propagated_is_exact():
    # CNOT from two √SWAPs and single-qubit rotations (Loss & DiVincenzo, PRA 57,
    # 120 (1998)) compiled for an ideal device (equal g, IF = 0, no rise time):
    # the compiled samples, propagated, give CNOT up to a global phase to 1e-9
    dev = load_device_text(device_text(), "ideal.yaml")
    src = (SEQUENCES / "lib" / "gates.dotseq").read_text() + (
        "do hadamard(B)\nsqrtswap A B\nrot A z -180 deg\nsqrtswap A B\n"
        "rot A z 90 deg\nrot B z -90 deg\ndo hadamard(B)\n")
    tl, wf = build(src, dev)
    assert any(s.kind == "zcorrect" for s in tl.slots)       # equal g: a physical z is needed
    U = frame_unitary(wf, dev, m=1, ideal=True)
    assert 1 - gate_fidelity(U, CNOT) < 1e-9


def test_demo_cnot_as_played_is_close_to_cnot():
    # The example sequence on the demo device, played through the full analog
    # model (codes, rise times, bias tee) with its 6.7 MHz Zeeman difference
    c = load(SEQUENCES / "cnot_pair.dotseq")
    wf = synthesize(c.timelines[0], c.device)
    stop = next(r.start for r in wf.steps if r.kind == "read")
    U = frame_unitary(wf, c.device, stop=stop, m=4)
    assert gate_fidelity(U, CNOT) > 0.999


def test_sqrtswap_with_zeeman_difference_matches_its_frame_model():
    # the compiler's own estimate of the compensated gate (pulses.pair_gate) agrees
    # with direct propagation in the rotating frames
    dev = load_device(SEQUENCES / "devices" / "demo_pair.yaml")
    tl, wf = build("rot A z 40 deg\nwait 37 ns\nsqrtswap A B\n", dev)
    ex = next(s for s in tl.slots if s.kind == "sqrtswap")
    U = frame_unitary(wf, dev, m=8, ideal=True)
    T = SQRT_SWAP @ np.kron(np.diag([np.exp(-0.5j * math.radians(40)), np.exp(0.5j * math.radians(40))]), I2)
    f = gate_fidelity(U, T)
    assert f == pytest.approx(ex.info.frame_fidelity, abs=2e-5)
    assert f > 0.9999


# ------------------------------------------------------------- samples

def test_grid_padding_and_lengths():
    dev = load_device_text(device_text(), "d.yaml")
    tl, wf = build("rot A x 90 deg\nwait 3 ns\n", dev)
    assert wf.n_samples >= 256 and wf.n_samples % 64 == 0       # B_AB: min 256, granularity 64
    pad = wf.steps[-1]
    assert pad.kind == "pad" and pad.start == tl.n_samples and pad.stop == wf.n_samples
    for out in wf.outputs.values():
        assert out.volts.shape == (wf.n_samples,)
    for r in wf.steps:
        assert 0 <= r.start <= r.stop <= wf.n_samples
        assert isinstance(r.start, int) and isinstance(r.stop, int)


def test_quantisation_error_is_at_most_half_an_lsb():
    dev = load_device(SEQUENCES / "devices" / "demo_pair.yaml")
    tl, wf = build("rot A x 77 deg\nsqrtswap A B\n", dev)
    for out in wf.outputs.values():
        if out.kind == "marker":
            continue
        assert np.max(np.abs(out.volts - out.ideal)) <= out.lsb / 2 * (1 + 1e-9)
        ch = dev.channels[out.channel]
        assert np.array_equal(out.volts, ch.v_min + out.codes * out.lsb)


def test_multitone_beyond_range_is_an_error_naming_step_and_time():
    dev = load_device(SEQUENCES / "devices" / "demo_pair.yaml")
    with pytest.raises(SynthesisError) as info:
        build("wait 10 ns\ntogether { rot A x 180 deg duration=300 ns ; rot B x 180 deg duration=300 ns }\n", dev)
    p = info.value.first
    assert "output 'mw." in p.message and "at t = " in p.message and "nothing is clipped" in p.hint
    assert p.span.line == 2


def test_synthesis_is_deterministic():
    a = compile_file(SEQUENCES / "ribbon_long_range.dotseq")
    b = compile_file(SEQUENCES / "ribbon_long_range.dotseq")
    for wa, wb in zip(a.waveforms, b.waveforms):
        for name in wa.outputs:
            assert np.array_equal(wa.outputs[name].codes if wa.outputs[name].codes is not None
                                  else wa.outputs[name].volts,
                                  wb.outputs[name].codes if wb.outputs[name].codes is not None
                                  else wb.outputs[name].volts)


def test_markers():
    dev = load_device_text(device_text(), "d.yaml")
    tl, wf = build("trigger\nrot A x 90 deg\nread A\n", dev)
    m1, m2 = wf.outputs["M1"].volts, wf.outputs["M2"].volts
    read = next(r for r in wf.steps if r.kind == "read")
    assert m1[read.start:read.stop].all() and m1.sum() == read.stop - read.start
    assert m2[:20].all() and m2.sum() == 20                  # 20 ns trigger at t = 0


def test_frame_updates_inside_repeat_shift_later_bursts():
    dev = load_device_text(device_text(), "d.yaml")
    tl, wf = build("repeat 3 { rot A z 30 deg }\nrot A x 90 deg\n", dev)
    burst = next(s for s in tl.slots if s.kind == "rot")
    assert burst.play_phase == pytest.approx(-math.pi / 2)
    U = frame_unitary(wf, dev, m=1, ideal=True)
    rz90 = np.diag([np.exp(-0.25j * math.pi), np.exp(0.25j * math.pi)])   # Rz(α) = exp(−iασz/2)
    T = np.kron(rotation(0, math.pi / 2) @ rz90, I2)
    assert 1 - gate_fidelity(U, T) < 1e-12


def test_long_echo_train_keeps_its_phase():
    # zero-order-hold timing: an off-by-one sample would show as a growing phase
    # error on a long train; here 20 echoes on a line at 61 MHz IF must stay exact
    # (the reference propagator's own error at m = 16 sub-steps is ~5e-7 here)
    from compiler.physics import larmor_frequency
    fa = larmor_frequency(2.0, 0.5)
    dev = load_device_text(device_text(lo_a=f"{fa - 61e6:.0f} Hz", rise="0 ns", bits=16,
                                       mode="duration", dur="120 ns", amp="300 mV"), "d.yaml")
    src = "rot A x 90 deg\nrepeat 20 { wait 37 ns on A ; rot A y 180 deg ; wait 37 ns on A }\nrot A x 90 deg\n"
    tl, wf = build(src, dev)
    U = frame_unitary(wf, dev, m=16, ideal=True)
    T = np.kron(rotation(0, math.pi / 2) @ np.linalg.matrix_power(rotation(math.pi / 2, math.pi), 20)
                @ rotation(0, math.pi / 2), I2)
    assert 1 - gate_fidelity(U, T) < 2e-6


def test_bias_tee_droop_and_predistortion():
    # A long flat pulse behind a bias tee droops by about t/τ (first-order
    # high-pass; common practice); pre-distortion V + (1/τ)∫V dt removes it
    text = device_text().replace("B_AB: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], rise_time: 0 ns",
                                 "B_AB: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], rise_time: 0 ns, bias_tee: 20 us")
    dev = load_device_text(text, "d.yaml")
    src = "sqrtswap A B duration=2 us\n"
    ex = expand(parse_text(src, "t.dotseq"))
    check(ex, dev)
    tl = schedule(ex.runs[0], dev)
    slot = next(s for s in tl.slots if s.exchange is not None)
    a, b = slot.start_sample + slot.exchange.pre, slot.start_sample + slot.exchange.pre + slot.exchange.n
    plain = as_played(synthesize(tl, dev), dev, "B_AB")[a:b]
    pre = as_played(synthesize(tl, dev, predistort=True), dev, "B_AB")[a:b]
    droop_plain = plain[0] - plain[-1]
    droop_pre = abs(pre[0] - pre[-1])
    height = plain[0] - slot.exchange.idle
    assert droop_plain / height == pytest.approx(2e-6 / 20e-6, rel=0.1)
    assert droop_pre < droop_plain / 100


# ------------------------------------------------------------- delays and the I/Q mixer (issue 19)

def _ribbon_with(**keys: str):
    """The demo ribbon with extra keys on some channel lines: P_B="delay: 37 ns"."""
    text = (SEQUENCES / "devices" / "demo_ribbon.yaml").read_text(encoding="utf-8")
    lines = text.splitlines()
    for name, extra in keys.items():
        i = next(i for i, line in enumerate(lines) if line.lstrip().startswith(f"{name}:")
                 and "kind:" in line)
        lines[i] = lines[i].replace("{kind:", f"{{{extra}, kind:", 1)
    return load_device_text("\n".join(lines) + "\n", "ribbon.yaml")


def _active(a: np.ndarray) -> tuple[int, int]:
    """First and one-past-last sample that differ from the first sample."""
    k = np.flatnonzero(a != a[0])
    return int(k[0]), int(k[-1]) + 1


def test_delays_make_exchange_pulse_and_plunger_detuning_arrive_together():
    """The A-C exchange across dot B needs B's plunger offset while the
    barrier S_AC is pulsed.  With 37 ns of cable on P_B, 5 ns on S_AC and
    12 ns on the microwave line, the outputs are shifted so that both arrive
    at the sample together: generator sample j of a channel arrives at
    j + its delay (common practice, no source)."""
    src = "rot A x 90 deg\nsqrtswap A C\nread A C\n"
    plain = _ribbon_with()
    dev = _ribbon_with(P_B="delay: 37 ns", S_AC="delay: 5 ns", mw="delay: 12 ns")
    assert dev.shifts["P_B"] == 0 and dev.shifts["S_AC"] == 32 and dev.shifts["mw"] == 25
    assert dev.shifts["P_A"] == 37 and dev.alignment == 37
    tl0, wf0 = build(src, plain)
    tl, wf = build(src, dev)
    # what arrives at the sample at t + 37 ns (the slowest path) is what the
    # timeline put at t, on every output: sample t + 37 − delay of the array
    n = tl.n_samples
    for name, o in wf.outputs.items():
        d = dev.channels[o.channel].delay_samples
        arrived = np.asarray(o.volts)[37 - d:37 - d + n]
        np.testing.assert_array_equal(arrived, np.asarray(wf0.outputs[name].volts)[:n], name)
    # so the barrier pulse arrives inside the plunger's detuning window
    d_b, d_p = dev.channels["S_AC"].delay_samples, dev.channels["P_B"].delay_samples
    b0, b1 = _active(wf.outputs["S_AC"].codes)
    p0, p1 = _active(wf.outputs["P_B"].codes)
    assert p0 + d_p <= b0 + d_b and b1 + d_b <= p1 + d_p
    # played straight, without the shifts, it would not: 32 ns early on the
    # barrier's 5 ns cable against the plunger's 37 ns
    q0, q1 = _active(wf0.outputs["S_AC"].codes)
    r0, r1 = _active(wf0.outputs["P_B"].codes)
    assert q0 + d_b < r0 + d_p
    # the arrays grow by the alignment, padded to the granularity; pad says why
    assert wf.n_samples == dev.padded_samples(tl.n_samples) >= tl.n_samples + 37
    assert "delays" in wf.steps[-1].params["reason"]
    # the simulator sees what arrives: as_played undoes the shift
    np.testing.assert_array_equal(as_played(wf, dev, "S_AC")[:tl.n_samples],
                                  as_played(wf0, plain, "S_AC")[:tl.n_samples])


def test_manifest_records_delays_and_shifts(tmp_path):
    from compiler.export import read_bundle, write_bundle
    dev = _ribbon_with(P_B="delay: 37 ns", S_AC="delay: 5 ns")
    _, wf = build("sqrtswap A C\n", dev)
    m = read_bundle(write_bundle([wf], tmp_path / "b", source={}, segments=True))["manifest"]
    assert m["delays_s"]["P_B"] == 37e-9 and m["delays_s"]["S_AC"] == 5e-9
    assert m["delays_s"]["P_A"] == 0.0
    out = m["runs"][0]["outputs"]
    assert (out["P_B"]["shift_samples"], out["S_AC"]["shift_samples"],
            out["mw.Q"]["shift_samples"]) == (0, 32, 37)


def test_delay_off_the_sample_grid_is_a_warning_with_the_residual():
    dev = _ribbon_with(P_B="delay: 37.4 ns")
    w = [p for p in dev.warnings if "channels.P_B.delay" in p.message]
    assert w and "applied as 37" in w[0].message and "400 ps" in w[0].message
    assert dev.channels["P_B"].delay_samples == 37


MIXER = dict(gain=1.06, skew=math.radians(4.0), oi=0.006, oq=-0.004)
MIXER_KEY = "mixer: {gain_imbalance: 1.06, phase_skew: 4 deg, offset_i: 6 mV, offset_q: -4 mV}"


def _tone_powers(c: np.ndarray, f_if: float, fs: float = 1e9) -> tuple[float, float, float]:
    """Amplitudes of c at +IF (wanted), −IF (image) and 0 (LO leakage), by
    projection on each tone over a whole number of periods."""
    t = np.arange(len(c)) / fs
    amp = lambda f: abs(np.mean(c * np.exp(-2j * np.pi * f * t)))  # noqa: E731
    return amp(f_if), amp(-f_if), amp(0.0)


@pytest.mark.parametrize("correct", [True, False], ids=["pre-distorted", "uncorrected"])
def test_mixer_predistortion_suppresses_the_image_beyond_60_dB(correct):
    """A 2 us square burst at IF = +50 MHz through the mixer model
    (analog.mixer_output, gain 1.06, skew 4°, offsets 6 and −4 mV): the
    pre-distorted I/Q leave the image more than 60 dB below the tone, and no
    LO leakage beyond the DAC's resolution (calibrated mixers: common
    practice, no source).  Uncorrected, the image is what the model says:
    |1 − g·e^{iφ}|/|1 + g·e^{iφ}| of the tone (about −27 dB here)."""
    from compiler import CompileOptions, compile_run
    f_a = 2.0 * 9.2740100783e-24 * 0.5 / 6.62607015e-34
    dev = load_device_text(device_text(lo_a=f"{f_a - 50e6:.0f} Hz", extra_mw=", " + MIXER_KEY),
                           "mixer.yaml")
    assert dev.channels["mwA"].mixer.gain_imbalance == 1.06
    ex = expand(parse_text("rot A x 180 deg duration=2 us\n", "t.dotseq"))
    check(ex, dev)
    wf = compile_run(ex.runs[0], dev, CompileOptions(mixer_correction=correct)).waveforms
    f_if = dev.larmor("A") - dev.channels["mwA"].lo
    i, q = wf.outputs["mwA.I"].volts[:2000], wf.outputs["mwA.Q"].volts[:2000]
    c = analog.mixer_output(i, q, MIXER["gain"], MIXER["skew"], MIXER["oi"], MIXER["oq"])
    tone, image, leak = _tone_powers(c, f_if)
    if correct:
        assert 20 * math.log10(image / tone) < -60
        assert leak < 2 * dev.channels["mwA"].v_max / 2 ** 16      # within an LSB of 0
        # the offsets are cancelled outside the burst too
        assert wf.outputs["mwA.I"].volts[-1] == pytest.approx(-MIXER["oi"], abs=1e-4)
    else:
        expect = analog.image_ratio(MIXER["gain"], MIXER["skew"])
        assert image / tone == pytest.approx(expect, rel=0.01)
        # the same written out: |1 − g e^{iφ}|² = 1 + g² − 2g·cos φ
        g, phi = MIXER["gain"], MIXER["skew"]
        assert expect == pytest.approx(math.sqrt((1 + g * g - 2 * g * math.cos(phi))
                                                 / (1 + g * g + 2 * g * math.cos(phi))))
        assert 20 * math.log10(expect) == pytest.approx(-26.8, abs=0.1)


def test_mixer_predistortion_inverts_the_model_exactly():
    rng = np.random.default_rng(3)
    c = rng.normal(size=50) + 1j * rng.normal(size=50)
    i, q = analog.mixer_predistort(c, 0.93, math.radians(-7), 0.01, 0.02)
    np.testing.assert_allclose(analog.mixer_output(i, q, 0.93, math.radians(-7), 0.01, 0.02), c,
                               rtol=0, atol=1e-12)
    assert analog.image_ratio(1.0, 0.0) == 0.0


def test_range_is_checked_after_mixer_correction():
    """Q is played 1/(g·cos φ) larger: a burst that fits an ideal mixer can
    leave the range once corrected, and is refused naming the output."""
    f_a = 2.0 * 9.2740100783e-24 * 0.5 / 6.62607015e-34
    text = device_text(lo_a=f"{f_a:.0f} Hz", extra_mw=", mixer: {gain_imbalance: 0.8}")
    dev = load_device_text(text, "mixer.yaml")
    with pytest.raises(SynthesisError, match="output 'mwA.Q' would need"):
        build("rot A y 180 deg amplitude=450 mV\n", dev)
    build("rot A y 180 deg amplitude=350 mV\n", dev)


def test_volt_range_is_the_volts_extremes_without_building_them():
    """dotseq compile prints each output's range: taken from the codes (one
    pass over int codes) it is exactly volts.min()/max(), and the float64
    volts array is not built."""
    dev = load_device(SEQUENCES / "devices" / "demo_pair.yaml")
    _, wf = build("rot A x 90 deg\nsqrtswap A B\nrot B y 45 deg\n", dev)
    for name, o in wf.outputs.items():
        if o.kind == "marker":
            continue
        fresh = type(o)(**{f: getattr(o, f) for f in o.__dataclass_fields__})
        lo, hi = fresh.volt_range()
        assert "volts" not in fresh.__dict__ or o.stored_volts is not None
        assert (lo, hi) == (float(o.volts.min()), float(o.volts.max())), name


# ------------------------------------------------- the analog path's recursion

def _recursion_by_samples(b, p, x, y0):
    """y_{k+1} = p·y_k + b·x_k, one sample after the other (the reference)."""
    x = np.asarray(x)
    y = np.broadcast_to(np.asarray(y0, dtype=complex), x.shape[:-1]).copy()
    out = np.empty(x.shape, dtype=complex)
    for k in range(x.shape[-1]):
        y = p * y + b * x[..., k]
        out[..., k] = y
    return out


@pytest.mark.parametrize("p", [0.0, 1e-120, 0.3, -0.5, 0.9, 0.999, 0.999999, 1.0, -0.9995,
                               0.97 * np.exp(0.3j), -0.9999 + 0.001j, 1.001],
                         ids=lambda p: f"{p:.6g}")
@pytest.mark.parametrize("n", [0, 1, 7, 255, 256, 257, 3000])
def test_first_order_recursion_agrees_with_the_sample_by_sample_one(p, n):
    """analog.first_order (blocks of partial sums) against the recursion run
    sample by sample: real and complex input, two leading axes, a start
    state per row; poles from 0 to beyond the unit circle, lengths around the
    block length (common practice, no source)."""
    rng = np.random.default_rng(n)
    y0 = rng.normal(size=(2, 3))
    for x in (rng.normal(size=(2, 3, n)), rng.normal(size=(2, 3, n)) + 1j * rng.normal(size=(2, 3, n))):
        got = analog.first_order(0.7, p, x, y0)
        want = _recursion_by_samples(0.7, p, x, y0)
        assert got.shape == x.shape
        if n:
            scale = np.max(np.abs(want))
            assert np.max(np.abs(got - want)) <= 1e-12 * scale, np.max(np.abs(got - want)) / scale


def test_first_order_recursion_agrees_with_scipy_lfilter_on_a_long_line():
    """10^6 samples (three levels of blocks) of the tone-burst inversion's
    kind of pole, against scipy.signal.lfilter (an independent implementation
    of the same recursion), and the RC step response against 1 − e^{−t/τ}
    (common practice, no source)."""
    from scipy.signal import lfilter
    rng = np.random.default_rng(5)
    x = rng.normal(size=10**6) + 1j * rng.normal(size=10**6)
    for p in (0.995 * np.exp(0.2j), 0.99999, -0.9995):
        want, _ = lfilter([0.3], [1.0, -p], x, zi=[0.1 * p])
        got = analog.first_order(0.3, p, x, 0.1)
        assert np.max(np.abs(got - want)) <= 1e-11 * np.max(np.abs(want))
    dt, tau = 1e-9, 7.3e-9
    y = analog.rc_boundaries(np.ones(400), dt, tau)
    np.testing.assert_allclose(y, 1 - np.exp(-np.arange(401) * dt / tau), rtol=0, atol=1e-14)


# ------------------------------------------------- SWAP-like gates, run start

def test_a_swap_needs_no_phase_alignment_and_starts_where_it_is():
    """A SWAP's pre-phase moves only entries whose phases the post-gate frame
    updates absorb, so its compensated fidelity is the same at every
    differential phase: nothing is inserted before it (before, the argmax of a
    curve flat to 3e-16 chose a phase wait from rounding). Played at several
    start times (the first sample of the run included, where the barrier must
    still rise from its level before the run), the propagated gate matches the
    compiler's frame model and is the same at every start (compensated-gate
    model; common practice, no source)."""
    from compiler.steps import SWAP
    dev = load_device(SEQUENCES / "devices" / "demo_pair.yaml")
    fids = []
    for wait in (0, 1, 13, 37):
        tl, wf = build((f"wait {wait} ns\n" if wait else "") + "swap A B\n", dev)
        assert [s.kind for s in tl.slots] == ["wait"] * bool(wait) + ["swap"]
        ex = tl.slots[-1]
        assert ex.start == wait * 1e-9
        U = frame_unitary(wf, dev, m=8, ideal=True)
        fids.append(gate_fidelity(U, SWAP))
        assert fids[-1] == pytest.approx(ex.info.frame_fidelity, abs=2e-5)
    assert max(fids) - min(fids) < 1e-9 and min(fids) > 0.996


def test_the_simulator_takes_a_gate_line_at_its_level_before_the_run():
    """An exchange pulse on the run's first sample: the simulator's exchange
    follows the barrier's RC rise from the level before the run (the run's
    last sample), the same J(t) as the pulse played one sample later, shifted
    (common practice, no source)."""
    from compiler.simulate.build import build_model
    dev = load_device(SEQUENCES / "devices" / "demo_pair.yaml")
    J = []
    for src in ("swap A B\n", "wait 1 ns\nswap A B\n"):
        tl, wf = build(src, dev)
        model = build_model(wf, dev, m=4)
        J.append(np.asarray(model.pairs[0].coefficients(0.0)[0]))
    assert J[0][0] < 0.1 * J[0].max()                  # rising, not already at the level
    np.testing.assert_allclose(J[0][:200], J[1][4:204], rtol=1e-9, atol=1e-6 * J[0].max())
    # the as-played barrier (synth.as_played, the preview's and the bundle's
    # model) alike
    v = [as_played(build(src, dev)[1], dev, "B_AB", 4)
         for src in ("swap A B\n", "wait 1 ns\nswap A B\n")]
    np.testing.assert_allclose(v[0][:200], v[1][4:204], rtol=0, atol=1e-12)
