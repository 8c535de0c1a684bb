"""A noise spectrum split into bands for one simulated window.

The spectrum of a dot's Larmor frequency, S(f) = S₁/f^β + S_white
(:class:`compiler.spectra.Spectrum`, Hz²/Hz), is split for a window of
length T (the stretch the engine integrates: a whole run, or one step for
the per-step fidelities) into

* a **quasi-static band** [f_low, f_qs], f_qs = ``QS_FRACTION``/T: one
  Gaussian detuning held for the window, of variance ∫ S df over the band,
  averaged by the model's quadrature.  Over the window such noise turns its
  phase by at most 2π·0.1, so the filter functions there equal their
  zero-frequency values to within (π·f·T)²/3 ≈ 3 %;
* a **gate band** [f_qs, f_hi], f_hi = ``GATE_CYCLES``/T: ``MODES_PER_DECADE``
  random-phase sinusoids per decade, δf(t) = Σ_j a_j·cos(2πf_j t) + b_j·sin(2πf_j t)
  with a_j, b_j independent Gaussians of variance ∫_bin S df (logarithmic bins,
  f_j the geometric centre).  For Gaussian dephasing this gives exactly
  χ = ½(2π)²·Σ_j σ_j²·|Y(f_j)|², a midpoint rule (in log f) for the
  filter-function integral of the as-played control, whatever the control
  is; the engine integrates each mode on the played waveforms;
* a **fast band** above f_hi and the white part: Lindblad dephasing.  White
  noise S_w is exactly Markovian: √r·σz with 2r = π²·S_w.  The power law
  above f_hi is given the rate that reproduces its free-induction χ over the
  window, χ_fast = ∫ S/f² df (|Y|² averaged to 1/(2π²f²)); for the
  power laws here that is below 1/(2·GATE_CYCLES²) of the band's variance
  weight and negligible against the other bands (docs/simulate.md).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..spectra import Spectrum

QS_FRACTION = 0.1        # quasi-static below QS_FRACTION / window
GATE_CYCLES = 64.0       # gate band up to GATE_CYCLES / window
MODES_PER_DECADE = 4     # gate-band sinusoids per decade above LINEAR_CYCLES/T
LINEAR_CYCLES = 10.0     # below LINEAR_CYCLES/T the bins are LINEAR_STEP/T wide
LINEAR_STEP = 0.5


@dataclass(frozen=True)
class Bands:
    f_qs: float                          # Hz, top of the quasi-static band
    f_hi: float                          # Hz, top of the gate band
    static_rms: float                    # Hz, rms of the quasi-static detuning
    modes: tuple[tuple[float, float], ...]   # (f_j Hz, σ_j Hz) of the gate band
    fast_rate: float                     # 1/s: rate r of √r·σz (white + fast band)


def split(sp: Spectrum, window: float) -> Bands:
    """The three bands of ``sp`` for a window of ``window`` seconds."""
    if window <= 0:
        return Bands(0.0, 0.0, 0.0, (), math.pi ** 2 * sp.white_level() / 2)
    white = sp.white_level()
    if sp.is_white:
        return Bands(0.0, 0.0, 0.0, (), math.pi ** 2 * white / 2)
    f_qs = max(sp.f_low, QS_FRACTION / window)
    f_hi = min(sp.f_high, GATE_CYCLES / window)
    static = sp.band_variance(sp.f_low, f_qs, white=False)
    modes = []
    if f_hi > f_qs:
        # bins of width 1/(2T) up to LINEAR_CYCLES/T (the filter functions of a
        # window of length T vary on the scale 1/T: narrow CPMG peaks must be
        # resolved), then MODES_PER_DECADE logarithmic bins up to f_hi
        f_lin = min(f_hi, max(f_qs, LINEAR_CYCLES / window))
        lin = np.arange(f_qs, f_lin, LINEAR_STEP / window)
        edges = list(lin) + [f_lin]
        if f_hi > f_lin:
            n = max(1, int(math.ceil(MODES_PER_DECADE * math.log10(f_hi / f_lin))))
            edges += list(np.geomspace(f_lin, f_hi, n + 1)[1:])
        for a, b in zip(edges[:-1], edges[1:]):
            var = sp.band_variance(a, b, white=False)
            if var > 0 and b > a:
                # the bin's frequency: its spectral centroid ∫fS/∫S (midpoint for white)
                fc = _centroid(sp, a, b)
                modes.append((fc, math.sqrt(var)))
    # power law above f_hi: rate matching its free-induction χ over the window
    chi_fast = 0.0
    lo = max(f_hi, sp.f_low)
    if sp.f_high > lo and sp.s1 > 0:
        from ..spectra import power_integral
        chi_fast = power_integral(sp.s1, sp.beta + 2, lo, sp.f_high)
    rate = math.pi ** 2 * white / 2 + chi_fast / (2 * window)
    return Bands(f_qs, f_hi, math.sqrt(static), tuple(modes), rate)


def _centroid(sp: Spectrum, a: float, b: float) -> float:
    """∫ f·S df / ∫ S df over [a, b] (power-law part)."""
    from ..spectra import power_integral
    num = power_integral(sp.s1, sp.beta - 1, a, b)
    den = power_integral(sp.s1, sp.beta, a, b)
    return num / den if den > 0 else math.sqrt(a * b)


def mode_shapes(f: float, sigma: float, k: int, h: float, chunk: int) -> tuple[np.ndarray, np.ndarray]:
    """σ·cos(2πft) and σ·sin(2πft) (t from the window start) as their exact
    means over chunks of ``chunk`` sub-steps of length h, repeated per
    sub-step: shape (k,) each.  Chunks keep runs of equal sub-steps for the
    fast engine; their means keep ∫δf dt exact."""
    nc = -(-k // chunk)
    a = np.arange(nc) * chunk * h
    b = np.minimum((np.arange(nc) + 1) * chunk, k) * h
    w = 2 * math.pi * f
    c = sigma * (np.sin(w * b) - np.sin(w * a)) / (w * (b - a))
    s = sigma * (np.cos(w * a) - np.cos(w * b)) / (w * (b - a))
    return np.repeat(c, chunk)[:k], np.repeat(s, chunk)[:k]
