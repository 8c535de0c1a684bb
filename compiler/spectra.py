"""Noise spectra and filter functions (pure functions, SI units).

A spectrum of a qubit's frequency fluctuations δf(t) (Hz) is

    S(f) = S₁/f^β + S_white,     f_low ≤ f ≤ f_high (sharp cut-offs),

a one-sided power spectral density in Hz²/Hz, so that the variance of δf
is ∫₀^∞ S(f) df.  Under Gaussian noise a coherence decays as exp(−χ) with

    χ = ½·(2π)²·∫₀^∞ S(f)·|Y(f)|² df,     Y(f) = ∫₀^t y(t′)·e^{i2πft′} dt′,

y the toggling function (±1, flipping sign at every π pulse) (Cywiński,
Lutchyn, Nave & Das Sarma, PRB 77, 174509 (2008); Biercuk, Doherty & Uys,
J. Phys. B 44, 154002 (2011)).  Convention checks: white noise S gives
χ = π²·S·t (exponential decay, 1/T2 = π²·S); quasi-static noise of
variance σ² gives χ = 2π²σ²t², i.e. T2* = √2/(2πσ) (Merkulov, Efros &
Rosen, PRB 65, 205309 (2002)).

Sequences (:func:`pulse_times`): ``"ramsey"`` (free induction, no pulse),
``"hahn"`` (one π pulse in the middle), ``"cpmg"`` with N pulses at
t·(k − ½)/N.  :func:`coherence_time` finds the 1/e time (χ = 1),
:func:`implied_times` the T2*, Hahn T2 and CPMG-N T2 of a spectrum, and
:func:`fit_spectrum` the inverse: S₁ and β from two measured times.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, replace

import numpy as np

from .roots import brentq

CPMG_NS = (1, 2, 4, 8, 16)      # the N of check's CPMG table


@dataclass(frozen=True)
class Spectrum:
    """S(f) = s1/f^beta + white on [f_low, f_high], one-sided, (unit)²/Hz."""
    s1: float                   # S at 1 Hz of the power-law part, unit²/Hz
    beta: float                 # exponent β (0: white)
    white: float = 0.0          # unit²/Hz
    f_low: float = 0.0          # Hz, sharp low cut-off (> 0 when β ≥ 1)
    f_high: float = math.inf    # Hz, sharp high cut-off

    def __post_init__(self):
        for name in ("s1", "white", "f_low"):
            v = getattr(self, name)
            if not (v >= 0 and math.isfinite(v)):
                raise ValueError(f"spectrum {name} {v!r} must be finite and ≥ 0")
        if not (math.isfinite(self.beta) and 0 <= self.beta < 4):
            raise ValueError(f"spectrum exponent {self.beta!r} must be from 0 to below 4")
        if not self.f_high > self.f_low:
            raise ValueError(f"f_high {self.f_high!r} Hz must exceed f_low {self.f_low!r} Hz")
        if self.s1 > 0 and self.beta >= 1 and self.f_low <= 0:
            raise ValueError("a spectrum 1/f^β with β ≥ 1 needs a low cut-off f_low > 0")
        if (self.white > 0 or (self.s1 > 0 and self.beta == 0)) and not math.isfinite(self.f_high):
            pass                # white noise: fine for dephasing (no finite variance needed)

    @property
    def is_white(self) -> bool:
        """Only white noise (the power law has exponent 0 or vanishes)."""
        return self.s1 == 0 or self.beta == 0

    def white_level(self) -> float:
        """The white part, unit²/Hz (S₁ counts as white when β = 0)."""
        return self.white + (self.s1 if self.beta == 0 else 0.0)

    def psd(self, f) -> np.ndarray:
        """S(f), unit²/Hz (zero outside [f_low, f_high])."""
        f = np.asarray(f, dtype=float)
        with np.errstate(divide="ignore"):
            s = self.s1 * np.power(np.where(f > 0, f, np.inf), -self.beta) + self.white
        return np.where((f >= self.f_low) & (f <= self.f_high) & (f > 0), s, 0.0)

    def shape(self, f) -> np.ndarray:
        """s1/f^β + white without the cut-offs (for grids already inside them)."""
        f = np.asarray(f, dtype=float)
        return self.s1 * np.power(f, -self.beta) + self.white

    def band_variance(self, fa: float, fb: float, *, white: bool = True) -> float:
        """∫ S df over [fa, fb] ∩ [f_low, f_high], unit² (``white=False``:
        the power-law part only)."""
        a, b = max(fa, self.f_low), min(fb, self.f_high)
        if not b > a:
            return 0.0
        out = power_integral(self.s1, self.beta, a, b) if self.beta != 0 else self.s1 * (b - a)
        if white and self.white:
            out += self.white * (b - a)
        return out

    def variance(self) -> float:
        """∫₀^∞ S df (infinite for white noise without f_high)."""
        return self.band_variance(0.0, self.f_high)

    def scaled(self, k: float) -> "Spectrum":
        return replace(self, s1=self.s1 * k, white=self.white * k)


def power_integral(s1: float, beta: float, a: float, b: float) -> float:
    """∫_a^b s1·f^−β df."""
    if s1 == 0 or b <= a:
        return 0.0
    if abs(beta - 1) < 1e-12:
        return s1 * math.log(b / a)
    if math.isinf(b):
        return s1 * a ** (1 - beta) / (beta - 1)
    return s1 * (b ** (1 - beta) - a ** (1 - beta)) / (1 - beta)


# ------------------------------------------------------------------ filter functions

def pulse_times(kind: str, t: float, n: int = 1) -> np.ndarray:
    """Times of the π pulses of a sequence of total length t (s)."""
    if kind == "ramsey":
        return np.zeros(0)
    if kind == "hahn":
        return np.array([t / 2])
    if kind == "cpmg":
        if n < 1:
            raise ValueError(f"CPMG needs N ≥ 1 pulses, not {n}")
        return t * (np.arange(1, n + 1) - 0.5) / n
    raise ValueError(f"unknown sequence '{kind}' (ramsey, hahn or cpmg)")


def filter_function(f, t: float, pulses=()) -> np.ndarray:
    """|Y(f)|² (s²) of the toggling function that starts at +1 and flips at
    each π pulse (times in (0, t)); closed form of the piecewise integral."""
    f = np.asarray(f, dtype=float)
    edges = np.concatenate([[0.0], np.asarray(pulses, dtype=float), [t]])
    signs = (-1.0) ** np.arange(len(edges) - 1)
    w = 2 * math.pi * f
    # Y = Σ_k y_k (e^{iω t_{k+1}} − e^{iω t_k})/(iω); at ω → 0 Y = Σ y_k (t_{k+1} − t_k)
    jumps = np.zeros(len(edges))
    jumps[:-1] -= signs
    jumps[1:] += signs
    small = np.abs(w) * t < 1e-6
    wsafe = np.where(small, 1.0, w)
    ph = np.exp(1j * np.multiply.outer(wsafe, edges))
    Y = (ph @ jumps) / (1j * wsafe)
    Y0 = float(np.sum(signs * np.diff(edges)))
    Y = np.where(small, Y0, Y)
    return np.abs(Y) ** 2


def cpmg_filter(f, t: float, n: int) -> np.ndarray:
    """|Y(f)|² (s²) of CPMG-N (pulses at t(k − ½)/N), the sum over pulses in
    closed form (geometric series; Cywiński et al., PRB 77, 174509 (2008))."""
    f = np.asarray(f, dtype=float)
    w = 2 * math.pi * f
    small = np.abs(w) * t < 1e-6
    ws = np.where(small, 1.0, w)
    q = -np.exp(1j * ws * t / n)                      # ratio of consecutive pulse terms
    near = np.abs(q - 1) < 1e-9
    qs = np.where(near, 0.5, q)
    geo = np.where(near, n, qs * (1 - qs ** n) / (1 - qs))   # Σ_{k=1..N} q^k
    total = 1 - (-1.0) ** n * np.exp(1j * ws * t) + 2 * np.exp(-1j * ws * t / (2 * n)) * geo
    Y2 = np.abs(total) ** 2 / ws ** 2
    y0 = 0.0 if n % 2 == 0 else 0.0                   # equal time in ±1 for every N
    return np.where(small, y0, Y2)


def _tail_weight(pulses) -> float:
    """Mean of |Y|²·ω² at high frequency: the squared jumps of y (start and
    end 1 each, every π pulse 2), s⁰."""
    return 2.0 + 4.0 * len(pulses)


def _filter(f, t, pulses):
    """|Y|² for the given pulses, by the CPMG closed form when they are CPMG's."""
    n = len(pulses)
    if n > 2 and np.allclose(pulses, pulse_times("cpmg", t, n), rtol=0, atol=1e-12 * t):
        return cpmg_filter(f, t, n)
    return filter_function(f, t, pulses)


def chi(spec: Spectrum, t: float, pulses=(), *, points_per_lobe: int = 16,
        lobes: float = 40.0) -> float:
    """χ(t) = ½(2π)²∫ S|Y|² df (dimensionless) for a spectrum of frequency
    noise (Hz²/Hz).  Integrated numerically: Simpson on a logarithmic grid
    below 1/t, on a linear grid resolving the lobes of |Y|² up to
    ``lobes``·(N + 1)/t, and the remaining tail in closed form with |Y|²
    replaced by its mean (jumps²/ω²)."""
    from scipy.integrate import simpson
    if t <= 0:
        return 0.0
    pulses = np.asarray(pulses, dtype=float)
    lo, hi = spec.f_low, spec.f_high
    f1 = 1.0 / t
    F = lobes * (len(pulses) + 1) / t
    total = 0.0
    # white part over [f_low, f_high] handled exactly where possible
    if lo < f1:
        a = max(lo, 1e-30 if lo == 0 else lo)
        if lo == 0:
            a = min(f1 * 1e-12, f1)           # power law with β < 1 is integrable at 0
        b = min(f1, hi)
        if b > a:
            u = np.linspace(math.log(a), math.log(b), 1601)
            f = np.exp(u)
            total += simpson(spec.shape(f) * _filter(f, t, pulses) * f, x=u)
    a, b = max(lo, f1), min(F, hi)
    if b > a:
        n = int(max(200, points_per_lobe * (b - a) * t)) | 1
        f = np.linspace(a, b, n)
        total += simpson(spec.shape(f) * _filter(f, t, pulses), x=f)
    a = max(lo, F)
    if hi > a:
        jw = _tail_weight(pulses) / (4 * math.pi ** 2)        # |Y|² ≈ jw/f²
        total += jw * (power_integral(spec.s1, spec.beta + 2, a, hi)
                       + (spec.white * (1 / a - (1 / hi if math.isfinite(hi) else 0.0))))
    return 2 * math.pi ** 2 * total


def coherence(spec: Spectrum, t: float, kind: str = "ramsey", n: int = 1) -> float:
    """exp(−χ(t)) of a sequence (Gaussian noise)."""
    return math.exp(-chi(spec, t, pulse_times(kind, t, n)))


def coherence_time(spec: Spectrum, kind: str = "ramsey", n: int = 1) -> float:
    """The 1/e time (χ = 1), s."""
    if spec.s1 == 0 and spec.white == 0:
        return math.inf

    def g(logt):
        t = math.exp(logt)
        return math.log(chi(spec, t, pulse_times(kind, t, n)))

    # bracket in log t from the white or quasi-static estimate
    var = spec.band_variance(spec.f_low, min(spec.f_high, 1e15))
    guess = 1.0 / (math.sqrt(2) * math.pi * math.sqrt(var)) if var > 0 else 1.0
    if spec.white_level() > 0:
        guess = min(guess, 1.0 / (math.pi ** 2 * spec.white_level()))
    lo, hi = math.log(guess) - 2, math.log(guess) + 2
    for _ in range(60):
        if g(lo) < 0:
            break
        lo -= 2
    for _ in range(60):
        if g(hi) > 0:
            break
        hi += 2
    return math.exp(brentq(g, lo, hi, xtol=1e-8))


def implied_times(spec: Spectrum, ns=CPMG_NS) -> dict:
    """The T2* (Ramsey), Hahn T2 and CPMG-N T2 (1/e times, s) a spectrum of
    frequency noise implies: ``{"t2_star_s", "t2_s", "t2_cpmg_s": {N: T2}}``
    (remembered per spectrum: a pure function of it)."""
    star, hahn, cpmg = _implied(spec, tuple(int(n) for n in ns))
    return {"t2_star_s": star, "t2_s": hahn, "t2_cpmg_s": dict(cpmg)}


@functools.lru_cache(maxsize=64)
def _implied(spec: Spectrum, ns: tuple[int, ...]):
    hahn = coherence_time(spec, "hahn")
    # CPMG-1 is the Hahn echo (one π pulse in the middle)
    return (coherence_time(spec, "ramsey"), hahn,
            tuple((n, hahn if n == 1 else coherence_time(spec, "cpmg", n)) for n in ns))


def fit_spectrum(measured: dict, *, f_low: float, f_high: float = math.inf,
                 beta_range: tuple[float, float] = (0.05, 3.5)) -> Spectrum:
    """S₁ and β of a power law S₁/f^β from two measured coherence times.

    ``measured``: two entries among ``("ramsey", 1)``, ``("hahn", 1)``,
    ``("cpmg", N)`` -> the 1/e time in s.  For a trial β, S₁ follows from
    the first time (χ is linear in S₁: S₁ = 1/χ₁(t₁) with χ₁ the value for
    S₁ = 1); β is then the root of log(T₂(β)/t₂) (brentq)."""
    if len(measured) != 2:
        raise ValueError("give exactly two measured coherence times")
    (k1, t1), (k2, t2) = measured.items()

    def spectrum(beta):
        unit = Spectrum(1.0, beta, 0.0, f_low, f_high)
        return unit.scaled(1.0 / chi(unit, t1, pulse_times(k1[0], t1, k1[1])))

    def g(beta):
        return math.log(coherence_time(spectrum(beta), k2[0], k2[1]) / t2)

    lo, hi = beta_range
    if g(lo) * g(hi) > 0:
        raise ValueError(f"no exponent in {beta_range} gives the two times {k1}: {t1:.4g} s "
                         f"and {k2}: {t2:.4g} s")
    return spectrum(brentq(g, lo, hi, xtol=1e-6))
