"""Noise spectra and filter functions (compiler/spectra.py) against closed forms."""

import math

import numpy as np
import pytest

from compiler import spectra as S


def test_white_noise_decays_exponentially_at_pi2_S():
    # white one-sided S: χ = π²·S·t for any sequence of π pulses (Cywiński et al.,
    # PRB 77, 174509 (2008): the filter function's integral is t/2, Parseval)
    sp = S.Spectrum(0.0, 0.0, white=2.0e4)
    for t in (1e-5, 1e-4):
        for kind, n in (("ramsey", 1), ("hahn", 1), ("cpmg", 4), ("cpmg", 16)):
            assert S.chi(sp, t, S.pulse_times(kind, t, n)) == pytest.approx(
                math.pi ** 2 * 2.0e4 * t, rel=1e-4)
    assert S.coherence_time(sp) == pytest.approx(1 / (math.pi ** 2 * 2.0e4), rel=1e-5)
    # exponent 0 is white noise too
    assert S.coherence_time(S.Spectrum(2.0e4, 0.0)) == pytest.approx(1 / (math.pi ** 2 * 2.0e4),
                                                                     rel=1e-5)


def test_quasi_static_limit_gives_gaussian_t2_star():
    # all noise far below 1/t: exp(−(t/T2*)²), T2* = √2/(2πσ) (Merkulov, Efros &
    # Rosen, PRB 65, 205309 (2002))
    sp = S.Spectrum(1e6, 1.0, 0.0, f_low=1e-4, f_high=1e-2)
    sigma = math.sqrt(sp.variance())
    assert sp.variance() == pytest.approx(1e6 * math.log(100))
    t2s = math.sqrt(2) / (2 * math.pi * sigma)
    assert S.coherence_time(sp) == pytest.approx(t2s, rel=1e-4)
    for x in (0.3, 1.0, 2.0):
        assert S.coherence(sp, x * t2s) == pytest.approx(math.exp(-x * x), rel=1e-4, abs=1e-12)
    # a Hahn echo refocuses quasi-static noise (same source)
    assert S.chi(sp, t2s, S.pulse_times("hahn", t2s)) < 1e-6


def test_one_over_f_ramsey_depends_on_acquisition_time():
    # β = 1, f_high = ∞: χ = 2π²S₁t²·[ln(1/(π f_low t)) + 3/2 − γ − ln 2]
    # (∫_a^∞ sin²x/x³ dx = ln(1/a) + 3/2 − γ − ln 2; value checked against
    # scipy quad; the logarithmic dependence on the acquisition time as in
    # Struck et al., npj Quantum Inf. 6, 40 (2020))
    s1 = 1e6
    for acq in (1.0, 100.0, 1e4):
        sp = S.Spectrum(s1, 1.0, 0.0, f_low=1 / acq)
        for t in (1e-5, 1e-4):
            expect = 2 * math.pi ** 2 * s1 * t * t * (math.log(acq / (math.pi * t)) + 1.5
                                                       - np.euler_gamma - math.log(2))
            assert S.chi(sp, t) == pytest.approx(expect, rel=2e-4)
    t_short = S.coherence_time(S.Spectrum(s1, 1.0, 0.0, f_low=1 / 1.0))
    t_long = S.coherence_time(S.Spectrum(s1, 1.0, 0.0, f_low=1 / 1e4))
    assert t_long < t_short * 0.85          # longer acquisition, shorter T2*


@pytest.mark.parametrize("beta", [1.0, 2.6])
def test_cpmg_scaling_in_the_many_pulse_limit(beta):
    # T2(N) ∝ N^(β/(1+β)) for many pulses (Cywiński et al., PRB 77, 174509 (2008);
    # Medford et al., PRL 108, 086802 (2012))
    sp = S.Spectrum(1e6, beta, 0.0, f_low=1e-2)
    t = {n: S.coherence_time(sp, "cpmg", n) for n in (64, 128)}
    assert t[128] / t[64] == pytest.approx(2 ** (beta / (1 + beta)), rel=3e-3)
    # at small N the exact filter-function values differ from the power law, but
    # the coherence time still grows with N
    small = [S.coherence_time(sp, "cpmg", n) for n in S.CPMG_NS]
    assert all(b > a for a, b in zip(small, small[1:]))


def test_filter_functions_closed_forms():
    # FID |Y|² = sin²(πft)/(πf)²; Hahn 4·sin⁴(πft/2)/(πf)² (Cywiński et al. 2008)
    t = 1e-5
    f = np.linspace(1e3, 3e6, 500)
    assert np.allclose(S.filter_function(f, t), np.sin(np.pi * f * t) ** 2 / (np.pi * f) ** 2,
                       rtol=1e-9)
    assert np.allclose(S.filter_function(f, t, S.pulse_times("hahn", t)),
                       4 * np.sin(np.pi * f * t / 2) ** 4 / (np.pi * f) ** 2, rtol=1e-9)
    for n in (1, 3, 8):
        assert np.allclose(S.cpmg_filter(f, t, n),
                           S.filter_function(f, t, S.pulse_times("cpmg", t, n)),
                           rtol=1e-8, atol=1e-12 * t * t)


@pytest.mark.parametrize("beta,second", [(0.7, ("hahn", 1)), (1.0, ("cpmg", 8)),
                                         (2.0, ("hahn", 1))])
def test_fit_spectrum_inverts_the_implied_times(beta, second):
    sp = S.Spectrum(3e6, beta, 0.0, f_low=1e-2)
    measured = {("ramsey", 1): S.coherence_time(sp),
                second: S.coherence_time(sp, *second)}
    got = S.fit_spectrum(measured, f_low=1e-2)
    assert got.beta == pytest.approx(beta, abs=1e-4)
    assert got.s1 == pytest.approx(3e6, rel=1e-3)


def test_implied_times_table():
    got = S.implied_times(S.Spectrum(1e6, 1.0, 0.0, f_low=1e-2))
    assert set(got["t2_cpmg_s"]) == {1, 2, 4, 8, 16}
    assert got["t2_cpmg_s"][1] == pytest.approx(got["t2_s"], rel=1e-9)   # CPMG-1 is the echo
    assert got["t2_star_s"] < got["t2_s"]


def test_bad_spectra_refused():
    with pytest.raises(ValueError, match="low cut-off"):
        S.Spectrum(1.0, 1.0)
    with pytest.raises(ValueError, match="exponent"):
        S.Spectrum(1.0, -1.0, f_low=1.0)
    with pytest.raises(ValueError, match="f_high"):
        S.Spectrum(1.0, 1.0, f_low=10.0, f_high=1.0)
