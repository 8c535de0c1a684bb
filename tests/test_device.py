"""Tests of the device description: loader, validation, presets, exchange models.

Physics checks name their source beside them, or say "common practice, no
source" / "value from memory".
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import constants as sc

from compiler import physics
from compiler.device import BUNDLED_DEFAULT, PRESETS, load_device, load_device_text
from compiler.device import exchange as xch
from compiler.device.exchange import Exponential, Hubbard, Table
from compiler.errors import DeviceError, Problem

ROOT = Path(__file__).resolve().parents[1]
DEVICE_FILES = sorted((ROOT / "sequences" / "devices").glob("*.yaml"))

# A small valid device; the bad-input cases below edit single lines of it,
# so the expected line numbers refer to this listing.
BASE_LINES = [
    'name: "test pair"',                                            # 1
    "field: 500 mT",                                                # 2
    "temperature: 40 mK",                                           # 3
    "dots:",                                                        # 4
    "  A:",                                                         # 5
    "    g: 2.0",                                                   # 6
    "    t1: 1 ms",                                                 # 7
    "    t2: 20 us",                                                # 8
    "    t2_star: 2 us",                                            # 9
    "    drive: {line: mw, rabi_per_volt: 10 MHz/V}",               # 10
    "    plunger: P_A",                                             # 11
    "  B:",                                                         # 12
    "    preset: graphene",                                         # 13 (a spin-1/2 preset)
    "    g: 2.02",                                                  # 14
    "    drive: {line: mw, b1_per_volt: 1 mT/V}",                   # 15
    "    plunger: P_B",                                             # 16
    "couplings:",                                                   # 17
    "  - dots: [A, B]",                                             # 18
    "    barrier: B_AB",                                            # 19
    "    exchange: {model: exponential, j0: 20 kHz, v0: 40 mV}",    # 20
    "    idle_voltage: 0 mV",                                       # 21
    "    pulse_voltage: 250 mV",                                    # 22
    "channels:",                                                    # 23
    "  mw: {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], "
    "lo: 14.05 GHz, if_band: [-300 MHz, 300 MHz]}",                 # 24
    "  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}",  # 25
    "  P_B: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}",  # 26
    "  B_AB: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}",  # 27
    "  M1: {kind: marker, sample_rate: 1 GS/s}",                    # 28
]
BASE = "\n".join(BASE_LINES) + "\n"


def edited(**lines: str) -> str:
    """BASE with some lines replaced: edited(l7="    t1: 5")."""
    out = list(BASE_LINES)
    for key, text in lines.items():
        out[int(key[1:]) - 1] = text
    return "\n".join(out) + "\n"


def problem_with(err: DeviceError, fragment: str) -> Problem:
    for p in err.problems:
        if fragment in p.message or fragment in p.hint:
            return p
    raise AssertionError(f"no problem mentions {fragment!r}:\n{err}")


# ------------------------------------------------------------ valid files

@pytest.mark.parametrize("path", DEVICE_FILES + [BUNDLED_DEFAULT],
                         ids=lambda p: Path(p).name)
def test_device_files_load(path):
    dev = load_device(path)
    assert dev.dots and dev.channels
    for name, dot in dev.dots.items():
        line = dev.channels[dot.drive.line]
        if_needed = dev.larmor(name) - line.lo
        # f_L = LO + IF with IF inside the band and below Nyquist (common practice, no source)
        assert line.if_min <= if_needed <= line.if_max
        assert abs(if_needed) < line.sample_rate / 2
        assert dot.t2_star <= dot.t2 <= 2 * dot.t1
    for c in dev.couplings:
        assert xch.j_of_v(c.exchange, c.idle_voltage) < xch.j_of_v(c.exchange, c.pulse_voltage)
    if Path(path).name == "demo_si_hotspot.yaml":
        # the demo of the relaxation hotspot sits near it on purpose
        assert dev.warnings and all("hotspot" in w.message for w in dev.warnings)
    else:
        assert dev.warnings == ()


def test_demo_files_present():
    names = {p.name for p in DEVICE_FILES}
    assert {"demo_pair.yaml", "demo_ribbon.yaml", "demo_gaas_pair.yaml"} <= names
    assert BUNDLED_DEFAULT.is_file()


def test_ribbon_long_range_coupling():
    dev = load_device(ROOT / "sequences" / "devices" / "demo_ribbon.yaml")
    assert list(dev.dots) == ["A", "B", "C", "D"]
    ac = dev.coupling("C", "A")
    assert ac is not None and ac.detune == (("B", -0.040),)
    assert {c.key for c in dev.couplings} == {frozenset(p) for p in ("AB", "BC", "CD", "AC")}


def test_base_values_in_si():
    dev = load_device_text(BASE, "base.yaml")
    assert dev.field == pytest.approx(0.5)
    assert dev.temperature == pytest.approx(0.040)
    a, b = dev.dots["A"], dev.dots["B"]
    assert (a.t1, a.t2, a.t2_star) == pytest.approx((1e-3, 20e-6, 2e-6))
    assert a.preset == "" and a.sources == ()
    mw = dev.channels["mw"]
    assert (mw.sample_rate, mw.lo, mw.if_min, mw.if_max) == pytest.approx((1e9, 14.05e9, -3e8, 3e8))
    assert (mw.v_min, mw.v_max, mw.bits) == (pytest.approx(-0.5), pytest.approx(0.5), 14)
    # preset fills what the dot does not give, and records where it came from
    p = PRESETS["graphene"]
    assert b.g == 2.02 and b.preset == "graphene" and not b.spin_valley
    assert (b.t1, b.t2, b.t2_star) == (p.t1, p.t2, p.t2_star)
    assert any(s.startswith("t1: assumed") for s in b.sources)
    assert not any(s.startswith("g:") for s in b.sources)
    assert dev.dots["A"].span.line == 5 and dev.dots["A"].span.col == 3
    assert dev.couplings[0].span.line == 18


def test_b1_per_volt_converted_with_dot_g():
    # f_Rabi = |g|·μB·B1/(2h), linear drive under the rotating-wave
    # approximation (Abragam, Principles of Nuclear Magnetism, 1961)
    dev = load_device_text(BASE)
    mu_b = sc.physical_constants["Bohr magneton"][0]
    expected = 2.02 * mu_b * 1e-3 / (2 * sc.h)
    assert dev.dots["B"].drive.rabi_per_volt == pytest.approx(expected, rel=1e-12)


def test_bandwidth_gives_rise_time():
    # t_rise = 0.35 / f_3dB of a first-order response (common practice, no source)
    text = edited(l28="  M1: {kind: marker, sample_rate: 1 GS/s, bandwidth: 350 MHz}")
    assert load_device_text(text).channels["M1"].rise_time == pytest.approx(1e-9)


def test_hubbard_energies_converted_to_hz():
    text = edited(l20="    exchange: {model: hubbard, t0: 2 ueV, vt: 150 mV, u: 1 meV, "
                      "detuning: 100 GHz}")
    m = load_device_text(text).couplings[0].exchange
    # E/h with CODATA e and h via scipy.constants
    assert m.t0 == pytest.approx(2e-6 * sc.e / sc.h, rel=1e-12)
    assert m.u == pytest.approx(1e-3 * sc.e / sc.h, rel=1e-12)
    assert m.detuning == pytest.approx(100e9)


def test_idle_exchange_warning():
    dev = load_device_text(edited(l21="    idle_voltage: 200 mV"))
    w = problem_with(DeviceError(list(dev.warnings)), "exchange at idle")
    assert (w.span.line, w.span.col) == (21, 19)


# ------------------------------------------------------------ physics

def test_free_electron_larmor_at_one_tesla():
    # 28.0249514 GHz/T: CODATA 2018/2022 via scipy.constants (the two differ
    # in the 9th digit, hence rtol 1e-8)
    assert physics.larmor_frequency(physics.G_FREE, 1.0) == pytest.approx(28.0249514e9, rel=1e-8)


def test_rabi_from_b1_factor_two():
    # only half of a linear drive co-rotates: f_Rabi = g·μB·B1/(2h)
    # (Abragam, Principles of Nuclear Magnetism, 1961)
    for g in (2.0, -0.44):
        assert physics.rabi_from_b1(g, 1e-3) == pytest.approx(
            physics.larmor_frequency(g, 1e-3) / 2, rel=1e-14)


def test_presets_consistent_and_sourced():
    assert set(PRESETS) == {"graphene", "graphene_edge", "bilayer_graphene", "gaas", "si_natural",
                            "si28"}
    for p in PRESETS.values():
        # T2* <= T2 <= 2 T1 (Bloch relaxation; common practice, no source)
        assert 0 < p.t2_star <= p.t2 <= 2 * p.t1, p.name
        valley = {k for k in ("spin_orbit", "valley_splitting", "valley_g", "valley_t1")
                  if p.extra(k) is not None}
        assert set(p.sources) == {"g", "t1", "t2", "t2_star"} | valley
        assert all(len(s) > 5 for s in p.sources.values())
    # REFERENCES: no published bilayer-graphene T2*/Hahn -> "assumed"
    assert "assumed" in PRESETS["bilayer_graphene"].source("t2")
    assert "assumed" in PRESETS["bilayer_graphene"].source("t2_star")
    # Koppens, Nowack & Vandersypen, PRL 100, 236802 (2008): T2* ≈ 37 ns, Hahn ≈ 0.5 us
    assert PRESETS["gaas"].t2_star == pytest.approx(37e-9)
    assert PRESETS["gaas"].t2 == pytest.approx(0.5e-6)
    assert PRESETS["gaas"].g < 0
    # Kawakami et al., Nat. Nanotechnol. 9, 666 (2014): T2* ≈ 1 us, Hahn ≈ 40 us
    assert (PRESETS["si_natural"].t2_star, PRESETS["si_natural"].t2) == pytest.approx((1e-6, 40e-6))
    # Veldhorst et al., Nat. Nanotechnol. 9, 981 (2014): T2* ≈ 120 us
    assert PRESETS["si28"].t2_star == pytest.approx(120e-6)
    # spin–valley values (issue 15): Banszerus et al., PRL 124, 177701 (2020): Δ_SO 40–80 µeV;
    # Kurzmann et al., PRL 123, 026803 (2019): g_v ≈ 36; Yang et al., Nat. Commun. 4, 2069
    # (2013): E_v 0.3–0.8 meV in Si-MOS
    from compiler.physics import energy_to_frequency as ef
    assert ef(40e-6) <= PRESETS["bilayer_graphene"].spin_orbit <= ef(80e-6)
    assert PRESETS["bilayer_graphene"].valley_g == 36.0
    assert ef(0.3e-3) <= PRESETS["si28"].valley_splitting <= ef(0.8e-3)
    assert PRESETS["graphene"].spin_orbit is None          # spin-1/2 as before


# ------------------------------------------------------------ exchange models

EXP = Exponential(j0=2e4, v0=0.04)
HUB = Hubbard(t0=5e8, vt=0.15, u=2.4e11, detuning=6e10)
TAB = Table(volts=(0.0, 0.05, 0.1, 0.15, 0.2),
            joules=(1e4, 5e4, 4e5, 2e6, 1e7))


def test_exponential_values_and_inverse():
    # J = j0·exp(V/v0) (common practice, no source)
    v = np.linspace(-0.1, 0.3, 9)
    np.testing.assert_allclose(xch.j_of_v(EXP, v), 2e4 * np.exp(v / 0.04), rtol=1e-14)
    np.testing.assert_allclose(xch.v_of_j(EXP, xch.j_of_v(EXP, v)), v, atol=1e-15)
    np.testing.assert_allclose(xch.dj_dv(EXP, v), 2e4 * np.exp(v / 0.04) / 0.04, rtol=1e-14)
    assert isinstance(xch.j_of_v(EXP, 0.0), float)
    assert xch.v_range(EXP) == (-math.inf, math.inf)


def test_hubbard_against_formula_written_out():
    # J = 4 t² U / (U² − ε²), t = t0·exp(V/vt)
    # (Burkard, Loss & DiVincenzo, PRB 59, 2070 (1999))
    v = np.linspace(-0.3, 0.3, 7)
    t0, vt, u, eps = 5e8, 0.15, 2.4e11, 6e10
    t = t0 * np.exp(v / vt)
    expected = 4.0 * t * t * u / (u * u - eps * eps)
    np.testing.assert_allclose(xch.j_of_v(HUB, v), expected, rtol=1e-13)
    np.testing.assert_allclose(xch.v_of_j(HUB, expected), v, atol=1e-14)
    # at ε = 0 it is the familiar 4t²/U (same source)
    sym = Hubbard(t0=t0, vt=vt, u=u)
    assert xch.j_of_v(sym, 0.0) == pytest.approx(4 * t0 ** 2 / u, rel=1e-14)
    # dJ/dV = 2J/vt, against a central difference (common practice, no source)
    h = 1e-6
    num = (xch.j_of_v(HUB, 0.1 + h) - xch.j_of_v(HUB, 0.1 - h)) / (2 * h)
    assert xch.dj_dv(HUB, 0.1) == pytest.approx(num, rel=1e-6)


def test_hubbard_rejects_detuning_beyond_u():
    with pytest.raises(ValueError, match="detuning"):
        xch.j_of_v(Hubbard(t0=1e8, vt=0.1, u=1e11, detuning=1e11), 0.0)


def test_table_passes_through_points_and_inverts():
    np.testing.assert_allclose(xch.j_of_v(TAB, np.array(TAB.volts)), TAB.joules, rtol=1e-12)
    v = np.linspace(0.0, 0.2, 41)
    np.testing.assert_allclose(xch.v_of_j(TAB, xch.j_of_v(TAB, v)), v, atol=1e-12)
    assert xch.v_range(TAB) == (0.0, 0.2)


def test_table_pchip_monotone_no_overshoot():
    # PCHIP keeps monotone data monotone (Fritsch & Carlson, SIAM J. Numer.
    # Anal. 17, 238 (1980)): no wiggles, no overshoot between points
    v = np.linspace(0.0, 0.2, 2001)
    j = xch.j_of_v(TAB, v)
    assert np.all(np.diff(j) > 0)
    assert np.all(xch.dj_dv(TAB, v) >= 0)
    for k in range(len(TAB.volts) - 1):
        inside = (v >= TAB.volts[k]) & (v <= TAB.volts[k + 1])
        assert np.all(j[inside] >= TAB.joules[k] * (1 - 1e-12))
        assert np.all(j[inside] <= TAB.joules[k + 1] * (1 + 1e-12))


@pytest.mark.parametrize("call", [
    pytest.param(lambda: xch.j_of_v(TAB, 0.25), id="j_above"),
    pytest.param(lambda: xch.j_of_v(TAB, np.array([0.1, -0.01])), id="j_below_array"),
    pytest.param(lambda: xch.dj_dv(TAB, 0.21), id="slope_above"),
    pytest.param(lambda: xch.v_of_j(TAB, 2e7), id="v_of_j_above"),
    pytest.param(lambda: xch.v_of_j(TAB, 1e3), id="v_of_j_below"),
    pytest.param(lambda: xch.v_of_j(EXP, 0.0), id="v_of_zero_j"),
])
def test_table_never_extrapolates(call):
    with pytest.raises(ValueError):
        call()


@settings(max_examples=60, deadline=None)
@given(st.floats(min_value=0.0, max_value=0.2))
def test_table_round_trip_property(v):
    assert xch.v_of_j(TAB, xch.j_of_v(TAB, v)) == pytest.approx(v, abs=1e-11)


# ------------------------------------------------------------ bad inputs

BAD = [
    pytest.param(edited(l9="    t2_str: 2 us"), "unknown key 't2_str' in dots.A", 9, 5,
                 id="unknown_key"),
    pytest.param(edited(l9="    t2_str: 2 us"), "did you mean 't2_star'?", 9, 5,
                 id="unknown_key_did_you_mean"),
    pytest.param(edited(l11="    # plunger removed"),
                 "dots.A is missing the required key 'plunger'", 5, 3, id="missing_key"),
    pytest.param(edited(l1="# no name"), "missing the required key 'name'", 2, 1,
                 id="missing_top_key"),
    pytest.param(edited(l7="    t1: 5"), "dots.A.t1 needs a unit", 7, 9, id="bare_number"),
    pytest.param(edited(l2="field: 500 mV"), "field must be a magnetic field, but 'mV' is a voltage",
                 2, 8, id="wrong_unit"),
    pytest.param(edited(l8="    t2: .nan"), "dots.A.t2 must be a finite number", 8, 9, id="nan"),
    pytest.param(edited(l3="temperature: .inf"), "temperature must be a finite number", 3, 14,
                 id="inf"),
    pytest.param(edited(l9="    t2_star: -2 us"), "dots.A.t2_star must be greater than zero", 9, 14,
                 id="negative_time"),
    pytest.param(edited(l25="  P_A: {kind: gate, sample_rate: 0 GS/s, bits: 16, range: [-1 V, 1 V]}"),
                 "channels.P_A.sample_rate must be greater than zero", 25, 34,
                 id="zero_sample_rate"),
    pytest.param(edited(l8="    t2: 5 ms"), "dots.A.t2 = 5 ms is longer than 2·T1 = 2 ms", 8, 9,
                 id="t2_above_2t1"),
    pytest.param(edited(l9="    t2_star: 30 us"), "longer than the Hahn-echo T2", 9, 14,
                 id="t2star_above_t2"),
    # issue 12, item 11: the two values compared get the digits that tell them apart
    pytest.param(edited(l7="    t1: 9.9999999 us"),
                 "dots.A.t2 = 20 us is longer than 2·T1 = 19.9999998 us", 8, 9,
                 id="t2_just_above_2t1"),
    pytest.param(edited(l9="    t2_star: 20.000001 us"),
                 "t2_star = 20.000001 us is longer than the Hahn-echo T2 = 20 us", 9, 14,
                 id="t2star_just_above_t2"),
    pytest.param(edited(l3="temperature: -" + "9" * 300 + " mK"),
                 "got '-999999999999...999999 (300 digits) mK'", 3, 14, id="long_number_shortened"),
    pytest.param(edited(l14="    g: 2.2"), "not reachable on line 'mw'", 15, 19,
                 id="larmor_unreachable"),
    pytest.param(edited(l24="  mw: {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], "
                            "lo: 14.05 GHz, if_band: [-300 MHz, 600 MHz]}"),
                 "not below the Nyquist frequency", 24, 99, id="if_band_above_nyquist"),
    pytest.param(edited(l24="  mw: {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], "
                            "lo: 14.05 GHz, if_band: [300 MHz, -300 MHz]}"),
                 "low end must be below the high end", 24, 99, id="if_band_reversed"),
    pytest.param(edited(l20="    exchange: {model: table, points: [[0 mV, 10 kHz], [100 mV, 5 kHz]]}"),
                 "J table is not monotonic", 20, 64, id="non_monotonic_table"),
    pytest.param(edited(l20="    exchange: {model: table, points: [[0 mV, 10 kHz], [0 mV, 50 kHz]]}"),
                 "is not above the previous point's", 20, 56, id="table_voltage_repeated"),
    pytest.param(edited(l20="    exchange: {model: table, points: [[0 mV, 10 kHz], [100 mV, 50 kHz]]}"),
                 "outside the exchange table", 22, 20, id="pulse_outside_table"),
    pytest.param(edited(l18="  - dots: [A, Q]"), "names the dot 'Q', which is not in dots", 18, 15,
                 id="coupling_unknown_dot"),
    pytest.param(edited(l18="  - dots: [A, A]"), "couples dot 'A' to itself", 18, 15,
                 id="coupling_self"),
    pytest.param(edited(l10="    drive: {line: mx, rabi_per_volt: 10 MHz/V}"),
                 "names the channel 'mx', which is not in channels", 10, 19,
                 id="drive_unknown_channel"),
    pytest.param(edited(l10="    drive: {line: P_A, rabi_per_volt: 10 MHz/V}"),
                 "must name a channel of kind 'iq', but 'P_A' is kind 'gate'", 10, 19,
                 id="drive_wrong_kind"),
    pytest.param(edited(l11="    plunger: M1"),
                 "must name a channel of kind 'gate', but 'M1' is kind 'marker'", 11, 14,
                 id="plunger_wrong_kind"),
    pytest.param(edited(l7="    t1: 1 ms\n    t1: 2 ms"), "duplicate key 't1' in dots.A", 8, 5,
                 id="duplicate_key"),
    pytest.param(edited(l10="    drive: {line: mw, rabi_per_volt: 10 MHz/V"),
                 "YAML syntax error", 11, 12, id="yaml_syntax"),
    pytest.param(edited(l6="\tg: 2.0"), "YAML syntax error", 6, 1, id="yaml_tab"),
    pytest.param(edited(l22="    pulse_voltage: 250 mV\n    detune: {Z: 10 mV}"),
                 "detune names the dot 'Z', which is not in dots", 23, 14,
                 id="detune_unknown_dot"),
    pytest.param(edited(l22="    pulse_voltage: 250 mV\n    detune: {B: 10 mV}"),
                 "'B' is one of the coupled pair", 23, 14, id="detune_pair_dot"),
    pytest.param(edited(l22="    pulse_voltage: 1.5 V"), "outside the range of barrier channel", 22, 20,
                 id="pulse_outside_barrier_range"),
    pytest.param(edited(l22="    pulse_voltage: -50 mV"), "is not above idle_voltage", 22, 20,
                 id="pulse_below_idle"),
    pytest.param(edited(l25="  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 40, range: [-1 V, 1 V]}"),
                 "channels.P_A.bits must be from 1 to 24", 25, 48, id="bits_out_of_range"),
    pytest.param(edited(l28="  M1: {kind: marker, sample_rate: 1 GS/s, rise_time: 1 ns, bandwidth: 1 GHz}"),
                 "gives both rise_time and bandwidth", 28, 60, id="rise_and_bandwidth"),
    pytest.param(edited(l28="  M1: {kind: marker, sample_rate: 1 GS/s, lo: 1 GHz}"),
                 "applies only to channels of kind iq", 28, 43, id="lo_on_marker"),
    pytest.param(edited(l13="    preset: bilayer_grapene"), "did you mean 'bilayer_graphene'?", 13, 13,
                 id="unknown_preset"),
    pytest.param(edited(l20="    exchange: {model: hubbard, t0: 2 ueV, vt: 150 mV, u: 1 meV, "
                            "detuning: 2 meV}"),
                 "is not below the charging energy", 20, 75, id="hubbard_detuning_beyond_u"),
    pytest.param(edited(l20="    exchange: {model: exponential, j0: 20 kHz, v0: 40 mV, u: 1 meV}"),
                 "is not a parameter of the exponential model", 20, 59, id="exchange_wrong_param"),
    pytest.param(edited(l16="    plunger: P_A"), "is already the plunger of dot 'A'", 16, 14,
                 id="shared_plunger"),
    pytest.param(edited(l10="    drive: {line: mw}"),
                 "needs 'rabi_per_volt'", 10, 5, id="drive_without_calibration"),
    pytest.param(edited(l5="  1A:"), "'1A' is not a valid dot name", 5, 3, id="bad_dot_name"),
    pytest.param(BASE + "  M1: {kind: marker, sample_rate: 2 GS/s}\n", "duplicate key 'M1'", 29, 3,
                 id="duplicate_channel"),
    pytest.param(BASE + "rotation: {mode: duration, shape: square}\n",
                 "rotation.duration is missing", 29, 1, id="rotation_duration_missing"),
    pytest.param(BASE + "readout: {marker: P_A, duration: 2 us}\n",
                 "must name a channel of kind 'marker'", 29, 19, id="readout_marker_kind"),
    pytest.param(BASE + "readout: {marker: M1, duration: 0 us}\n",
                 "readout.duration must be greater than zero", 29, 33, id="readout_zero_duration"),
    pytest.param(BASE + "rotation: {amplitude: 2 V}\n",
                 "above the range of drive line 'mw'", 29, 23, id="rotation_amplitude_too_big"),
    pytest.param("- just\n- a list\n", "must be a mapping", 1, 1, id="top_level_list"),
    # non-finite, zero, negative and unit-less values: each names its key
    pytest.param(edited(l2="field: 1e999 mT"), "field must be a finite number", 2, 8, id="overflow"),
    pytest.param(edited(l25="  P_A: {kind: gate, sample_rate: -1 GS/s, bits: 16, range: [-1 V, 1 V]}"),
                 "channels.P_A.sample_rate must be greater than zero, got '-1 GS/s'", 25, 34,
                 id="negative_sample_rate"),
    pytest.param(edited(l3="temperature: 0 mK"), "temperature must be greater than zero", 3, 14,
                 id="zero_temperature"),
    pytest.param(BASE + "rotation: {mode: duration, duration: -40 ns}\n",
                 "rotation.duration must be greater than zero", 29, 38, id="negative_duration"),
    pytest.param(edited(l27="  B_AB: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], "
                            "bias_tee: .nan}"), "channels.B_AB.bias_tee must be a finite number", 27, 83,
                 id="nan_bias_tee"),
    pytest.param(edited(l27="  B_AB: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], "
                            "rise_time: -.inf}"), "channels.B_AB.rise_time must be a finite number",
                 27, 84, id="minus_inf_rise_time"),
    pytest.param(edited(l6="    g: .nan"), "dots.A.g must be a finite number", 6, 8, id="nan_g"),
    pytest.param(edited(l10="    drive: {line: mw, rabi_per_volt: 10}"),
                 "dots.A.drive.rabi_per_volt needs a unit", 10, 38, id="unitless_rabi"),
    pytest.param(edited(l1='name: !!python/object:os.system "echo"'),
                 "could not determine a constructor for the tag", 1, 7, id="python_tag"),
    # generator memory, delays and the I/Q mixer (issue 19)
    pytest.param(edited(l25="  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], "
                            "memory: 64 MB}"), "channels.P_A.memory must be a number of samples",
                 25, 80, id="memory_in_bytes"),
    pytest.param(edited(l25="  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], "
                            "memory: 1.5}"), "must be a whole number of samples", 25, 80,
                 id="memory_fraction"),
    pytest.param(edited(l25="  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], "
                            "memory: 0}"), "channels.P_A.memory must be from 1 to", 25, 80,
                 id="memory_zero"),
    pytest.param(edited(l25="  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], "
                            "memory: 10, min_length: 64}"), "is below the channel's min_length",
                 25, 80, id="memory_below_min_length"),
    pytest.param(edited(l25="  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], "
                            "delay: -3 ns}"), "channels.P_A.delay must not be negative", 25, 79,
                 id="negative_delay"),
    pytest.param(edited(l25="  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], "
                            "delay: 20 V}"), "channels.P_A.delay", 25, 79, id="delay_not_a_time"),
    pytest.param(edited(l25="  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], "
                            "delay: 1 s}"), "above 16,777,216", 25, 79, id="delay_too_long"),
    pytest.param(edited(l25="  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], "
                            "mixer: {gain_imbalance: 1.1}}"),
                 "channels.P_A.mixer applies only to channels of kind iq", 25, 72,
                 id="mixer_on_gate"),
    pytest.param(edited(l24='  mw: {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], lo: 14.05 GHz, if_band: [-300 MHz, 300 MHz], '
                        "mixer: {gain_imbalance: -1}}"),
                 "channels.mw.mixer.gain_imbalance must be greater than zero", 24, 144,
                 id="mixer_negative_gain"),
    pytest.param(edited(l24='  mw: {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], lo: 14.05 GHz, if_band: [-300 MHz, 300 MHz], '
                        "mixer: {phase_skew: 95 deg}}"),
                 "channels.mw.mixer.phase_skew = 95 deg is not within ±90°", 24, 140,
                 id="mixer_skew_beyond_90"),
    pytest.param(edited(l24='  mw: {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], lo: 14.05 GHz, if_band: [-300 MHz, 300 MHz], '
                        "mixer: {phase_skew: 2 mV}}"),
                 "channels.mw.mixer.phase_skew", 24, 140, id="mixer_skew_not_an_angle"),
    pytest.param(edited(l24='  mw: {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], lo: 14.05 GHz, if_band: [-300 MHz, 300 MHz], '
                        "mixer: {offset_i: 3 V}}"),
                 "channels.mw.mixer.offset_i = 3 V is larger than the channel's whole range",
                 24, 138, id="mixer_offset_too_big"),
    pytest.param(edited(l24='  mw: {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], lo: 14.05 GHz, if_band: [-300 MHz, 300 MHz], '
                        "mixer: {gain: 1.02}}"),
                 "unknown key 'gain' in channels.mw.mixer", 24, 128, id="mixer_unknown_key"),
    pytest.param(edited(l24='  mw: {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], lo: 14.05 GHz, if_band: [-300 MHz, 300 MHz], '
                        "mixer: 1.02}"),
                 "channels.mw.mixer must be a mapping", 24, 127, id="mixer_not_a_mapping"),
]


@pytest.mark.parametrize("text, fragment, line, col", BAD)
def test_bad_device(text, fragment, line, col):
    with pytest.raises(DeviceError) as info:
        load_device_text(text, "bad.yaml")
    p = problem_with(info.value, fragment)
    assert (p.span.line, p.span.col) == (line, col), info.value.render()
    assert p.span.file == "bad.yaml"
    if "this is not a device file" in p.message:
        assert p.source_line == ""      # not a device file at all: its text is not shown
        assert text.splitlines()[0] not in p.render()
    else:
        assert p.source_line == text.splitlines()[line - 1]
        assert "^" in p.render()


def test_many_problems_reported_at_once():
    text = edited(l2="field: 500", l7="    t1: 5", l18="  - dots: [A, Q]")
    with pytest.raises(DeviceError) as info:
        load_device_text(text)
    lines = [p.span.line for p in info.value.problems]
    assert lines == sorted(lines) and {2, 7, 18} <= set(lines)


def test_empty_file(tmp_path):
    f = tmp_path / "empty.yaml"
    f.write_text("# only a comment\n")
    with pytest.raises(DeviceError, match="empty"):
        load_device(f)


def test_missing_file_and_directory(tmp_path):
    with pytest.raises(DeviceError, match="no such file") as info:
        load_device(tmp_path / "nope.yaml")
    assert str(tmp_path / "nope.yaml") in info.value.render()
    with pytest.raises(DeviceError, match="directory"):
        load_device(tmp_path)


def test_not_utf8(tmp_path):
    f = tmp_path / "latin1.yaml"
    f.write_bytes(BASE.replace("test pair", "t\xe9st").encode("latin-1"))
    with pytest.raises(DeviceError, match="not UTF-8") as info:
        load_device(f)
    assert info.value.first.span.line == 1


def test_error_file_positions_from_disk(tmp_path):
    f = tmp_path / "dev.yaml"
    f.write_text(edited(l8="    t2: 5 ms"), encoding="utf-8")
    with pytest.raises(DeviceError) as info:
        load_device(f)
    p = info.value.first
    assert (p.span.file, p.span.line, p.span.col) == (str(f), 8, 9)
    assert "dots.A.t2" in p.message


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(0, len(BASE) - 1), st.integers(0, 40),
       st.text(alphabet=st.sampled_from(list(" :-[]{},#&*!|>'\"%@`0123456789.eEnaV\t\n")),
                max_size=6))
def test_mutated_input_never_crashes(pos, cut, junk):
    text = BASE[:pos] + junk + BASE[pos + cut:]
    try:
        load_device_text(text)
    except DeviceError as exc:
        assert exc.problems and all(isinstance(p, Problem) for p in exc.problems)
        exc.render()


def test_docs_mention_every_key():
    from compiler.device import loader
    doc = (ROOT / "docs" / "device.md").read_text(encoding="utf-8")
    keys = set(loader.TOP_REQUIRED + loader.TOP_OPTIONAL + loader.DOT_KEYS + loader.DRIVE_KEYS
               + loader.CHANNEL_KEYS + loader.COUPLING_KEYS + loader.EXCHANGE_ALL
               + loader.ROTATION_KEYS + loader.READOUT_KEYS)
    missing = sorted(k for k in keys if f"`{k}`" not in doc)
    assert not missing, missing
    assert all(f"`{p}`" in doc for p in PRESETS)


# ------------------------------------------------------------ the rules, written once

def test_validate_returns_findings_the_loader_places():
    from compiler.device.rules import ERROR, validate
    import dataclasses
    dev = load_device_text(BASE, "ok.yaml")
    assert [f for f in validate(dev) if f.severity == ERROR] == []
    a = dataclasses.replace(dev.dots["A"], t2=2.5 * dev.dots["A"].t1)
    bad = dataclasses.replace(dev, dots={**dev.dots, "A": a})
    (f,) = [f for f in validate(bad) if f.severity == ERROR]
    # T2 <= 2 T1 (Bloch relaxation; common practice, no source)
    assert (f.key, f.rule, f.severity, f.id) == ("dots.A.t2", "t2>2t1", ERROR, "A.t2>2t1")
    assert "longer than 2·T1" in f.message and f.hint
    # the loader puts the same finding at the value in the file
    with pytest.raises(DeviceError) as info:
        load_device_text(edited(l8="    t2: 5 ms"), "bad.yaml")
    p = problem_with(info.value, "is longer than 2·T1")
    assert p.message.startswith("dots.A.t2 = 5 ms") and (p.span.line, p.span.col) == (8, 9)


@pytest.mark.parametrize("kind", sorted(xch.MODELS))
def test_every_exchange_model_has_the_whole_interface(kind):
    model = {"exponential": EXP, "hubbard": HUB, "table": TAB}[kind]
    assert type(model) is xch.MODELS[kind] and model.kind == kind
    lo, hi = model.v_range()
    v = np.linspace(max(lo, -0.1), min(hi, 0.2), 7)
    j = model.j(v)
    assert np.all(np.diff(j) > 0)                       # J rises with V
    np.testing.assert_allclose(model.v(j), v, atol=1e-11)
    # scaled(s) multiplies J by s at every voltage (what a sweep's j_scale does)
    np.testing.assert_allclose(model.scaled(1.7).j(v), 1.7 * j, rtol=1e-12)
    assert model.positive() and not model.scaled(0.0).positive()


def test_rule_on_a_default_value_says_the_default_applies():
    # A drive line of ±50 mV and no rotation section: the default burst
    # amplitude (100 mV) cannot be played; the loader says so (the same rule
    # as a rotation.amplitude written in the file), naming the default.
    text = edited(l24="  mw: {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-50 mV, 50 mV], "
                      "lo: 14.05 GHz, if_band: [-300 MHz, 300 MHz]}")
    with pytest.raises(DeviceError) as info:
        load_device_text(text, "bad.yaml")
    p = problem_with(info.value, "above the range of drive line 'mw'")
    assert "rotation.amplitude is not in the file: its default applies" in p.message
