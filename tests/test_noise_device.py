"""Noise spectra in the device file (zeeman_noise, barrier_noise,
acquisition_time) and what `dotseq check` prints of them."""

from __future__ import annotations

import json
import math

import pytest

from compiler import spectra
from compiler.cli import main
from compiler.device import load_device_text
from compiler.errors import DeviceError
from compiler.units import FREQ_NOISE, VOLT_NOISE, UnitError, parse_quantity
from test_device import BASE_LINES, problem_with


def spectral(**lines: str) -> str:
    """BASE with dot A's t2/t2_star replaced by a spectrum, plus acquisition_time."""
    out = list(BASE_LINES)
    out[7] = "    zeeman_noise: {at_1hz: 4e8 Hz^2/Hz, exponent: 1}"      # line 9 below
    out[8] = "    # (no t2_star: the spectrum implies it)"               # line 10
    out.insert(3, "acquisition_time: 600 s")                             # line 4
    for key, text in lines.items():
        out[int(key[1:]) - 1] = text
    return "\n".join(out) + "\n"


def test_noise_density_units():
    assert parse_quantity("1 MHz^2/Hz", FREQ_NOISE) == pytest.approx(1e12)
    assert parse_quantity("4e8 Hz^2/Hz", FREQ_NOISE) == 4e8
    assert parse_quantity("1 uV^2/Hz", VOLT_NOISE) == pytest.approx(1e-12)   # (1 µV)²/Hz
    with pytest.raises(UnitError, match="voltage noise density"):
        parse_quantity("1 uV^2/Hz", FREQ_NOISE)


def test_spectrum_replaces_t2_and_t2_star():
    dev = load_device_text(spectral(), "spec.yaml")
    a = dev.dots["A"]
    assert a.zeeman_noise == spectra.Spectrum(4e8, 1.0, 0.0, 1 / 600)
    assert dev.acquisition_time == 600
    # the dot's T2* and T2 are the times the spectrum implies
    assert a.t2_star == pytest.approx(spectra.coherence_time(a.zeeman_noise), rel=1e-9)
    assert a.t2 == pytest.approx(spectra.coherence_time(a.zeeman_noise, "hahn"), rel=1e-9)
    assert dev.dots["B"].zeeman_noise is None                 # old keys stay valid


def test_f_low_given_and_white_part():
    text = spectral(l9="    zeeman_noise: {at_1hz: 1e8 Hz^2/Hz, exponent: 0.8, white: 100 Hz^2/Hz, "
                       "f_low: 1 mHz, f_high: 10 MHz}")
    sp = load_device_text(text, "s.yaml").dots["A"].zeeman_noise
    assert (sp.s1, sp.beta, sp.white, sp.f_low, sp.f_high) == (1e8, 0.8, 100.0, 1e-3, 1e7)


def test_barrier_noise():
    out = list(BASE_LINES)
    out.insert(21, "    barrier_noise: {at_1hz: 1e-12 V^2/Hz, exponent: 1, f_low: 1 mHz}")
    dev = load_device_text("\n".join(out) + "\n", "b.yaml")
    assert dev.couplings[0].barrier_noise == spectra.Spectrum(1e-12, 1.0, 0.0, 1e-3)


@pytest.mark.parametrize("edit,fragment,line", [
    # a spectrum and the old keys at once
    (dict(l10="    t2_star: 2 us"), "gives both 't2_star' and 'zeeman_noise'", 10),
    # no low cut-off anywhere
    (dict(l4="notes: x"), "needs a low cut-off", 9),
    # a density written as a frequency
    (dict(l9="    zeeman_noise: {at_1hz: 4e8 Hz, exponent: 1}"), "spectral density", 9),
    (dict(l9="    zeeman_noise: {at_1hz: 4e8 Hz^2/Hz, exponent: 5}"), "below 4", 9),
    (dict(l9="    zeeman_noise: {at_1hz: 4e8 Hz^2/Hz}"), "missing the required key 'exponent'", 9),
])
def test_bad_spectra(edit, fragment, line):
    with pytest.raises(DeviceError) as exc:
        load_device_text(spectral(**edit), "bad.yaml")
    p = problem_with(exc.value, fragment)
    assert p.span.line == line


def test_misspelled_spectrum_key_suggests():
    with pytest.raises(DeviceError) as exc:
        load_device_text(spectral(l9="    zeeman_noise: {at_1hz: 4e8 Hz^2/Hz, exponnent: 1}"), "x")
    p = problem_with(exc.value, "unknown key 'exponnent'")
    assert "exponent" in p.hint and p.span.line == 9
    with pytest.raises(DeviceError) as exc:
        load_device_text(spectral(l9="    zeeman_nosie: {at_1hz: 4e8 Hz^2/Hz, exponent: 1}"), "x")
    assert "zeeman_noise" in problem_with(exc.value, "zeeman_nosie").hint


def test_check_prints_implied_times(tmp_path, capsys):
    dev = tmp_path / "spec.yaml"
    dev.write_text(spectral())
    seq = tmp_path / "r.dotseq"
    seq.write_text(f'device "{dev}"\nprepare A down\nrot A x 90 deg\nwait 1 us on A\n'
                   "rot A x 90 deg\n")
    assert main(["check", str(seq)]) == 0
    text = capsys.readouterr().out
    assert "Zeeman noise 4e+08 Hz^2/Hz/f^1" in text and "CPMG-N T2: N=1" in text
    assert main(["check", "--json", str(seq)]) == 0
    got = json.loads(capsys.readouterr().out)
    a = next(q for q in got["qubits"] if q["name"] == "A")
    sp = spectra.Spectrum(4e8, 1.0, 0.0, 1 / 600)
    assert set(a["t2_cpmg_s"]) == {"1", "2", "4", "8", "16"}
    assert a["t2_cpmg_s"]["8"] == pytest.approx(spectra.coherence_time(sp, "cpmg", 8), rel=1e-9)
    assert a["t2_s"] == pytest.approx(a["t2_cpmg_s"]["1"])
    assert a["t2_star_s"] < a["t2_s"] < a["t2_cpmg_s"]["16"]
    b = next((q for q in got["qubits"] if q["name"] == "B"), None)
    assert b is None or b["t2_cpmg_s"] is None


def test_sweep_refuses_t2_of_a_spectral_dot(tmp_path, capsys):
    # varying T2* of a dot whose noise is a spectrum would change nothing simulated
    dev = tmp_path / "spec.yaml"
    dev.write_text(spectral())
    seq = tmp_path / "r.dotseq"
    seq.write_text(f'device "{dev}"\nprepare A down\nrot A x 90 deg\nwait 1 us on A\n'
                   "rot A x 90 deg\n")
    code = main(["sweep", str(seq), "--vary", "A.t2_star=2us:5us:2", "-o", str(tmp_path / "o")])
    assert code == 2
    assert "zeeman_noise" in capsys.readouterr().err


# ------------------------------------------------------------------ correlated Zeeman noise

def _line_device(correlation: str) -> tuple[str, int]:
    """The benchmark line of three dots, each with a 1/f Zeeman spectrum, and a
    zeeman_correlation section; the file line where the section starts."""
    import sys
    from pathlib import Path
    sys.path.insert(0, str(Path(__file__).parent / "benchmarks"))
    from workloads import line_device
    text = line_device(3, zeeman_noise="{at_1hz: 1e9 Hz^2/Hz, exponent: 1}")
    return text + "zeeman_correlation:\n" + correlation, text.count("\n") + 1


def test_zeeman_correlation_is_read():
    text, _ = _line_device("  - {dots: [D0, D1], coefficient: 0.8}\n"
                           "  - {dots: [D2, D1], coefficient: -0.3}\n")
    dev = load_device_text(text, "c.yaml")
    assert dev.zeeman_correlation == (("D0", "D1", 0.8), ("D2", "D1", -0.3))


@pytest.mark.parametrize("body,fragment,row", [
    ("  - {dots: [D0, D1], coefficient: 1.5}\n", "must be from -1 to 1", 1),
    ("  - {dots: [D0, D0], coefficient: 0.5}\n", "names 'D0' twice", 1),
    ("  - {dots: [D0, D9], coefficient: 0.5}\n", "not in dots", 1),
    ("  - {dots: [D0, D1], coefficient: 0.5}\n  - {dots: [D1, D0], coefficient: 0.2}\n",
     "already given at zeeman_correlation[0]", 2),
    # three dots cannot all be anticorrelated: the matrix has eigenvalue 1 − 2·0.9 < 0
    ("  - {dots: [D0, D1], coefficient: -0.9}\n  - {dots: [D1, D2], coefficient: -0.9}\n"
     "  - {dots: [D0, D2], coefficient: -0.9}\n", "not positive semidefinite", 0),
    ("  - {dots: [D0, D1]}\n", "missing the required key 'coefficient'", 1),
])
def test_bad_zeeman_correlation(body, fragment, row):
    # a correlation matrix must be symmetric (by construction here), have entries in
    # [−1, 1] and be positive semidefinite (common practice, no source)
    text, start = _line_device(body)
    with pytest.raises(DeviceError) as exc:
        load_device_text(text, "c.yaml")
    p = problem_with(exc.value, fragment)
    assert p.span.line == start + row, (p.span.line, start)
    assert p.hint


def test_zeeman_correlation_needs_spectra():
    text = spectral() + "zeeman_correlation:\n  - {dots: [A, B], coefficient: 0.5}\n"
    with pytest.raises(DeviceError) as exc:
        load_device_text(text, "c.yaml")
    p = problem_with(exc.value, "dot 'B' has no zeeman_noise")
    assert "dots.B.zeeman_noise" in p.hint
