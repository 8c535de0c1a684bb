"""The randomized-benchmarking decay fit and interleaved RB.

The mean survival over random Clifford sequences of length m decays as
A·p^m + B (Magesan, Gambetta, Emerson, PRL 106, 180504 (2011)) whatever the
(weakly gate-dependent) noise; the error per Clifford is
r = (d − 1)(1 − p)/d, the average gate infidelity of the noise averaged over
the group.  Interleaving a Clifford G gives p_G; its error is estimated as
r_G = (d − 1)(1 − p_G/p)/d, within ±E of the truth with

    E = min{ (d − 1)[|p − p_G/p| + (1 − p)]/d,
             2(d² − 1)(1 − p)/(p·d²) + 4·√(1 − p)·√(d² − 1)/p }

(Magesan et al., PRL 109, 080505 (2012) (m)).

Confidence intervals come from the spread over random sequences: the
sequences of each length are drawn again with replacement (a bootstrap,
seeded) and refitted; the interval is the central 95 % of the refits.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy.optimize import OptimizeWarning, curve_fit

CONFIDENCE = 0.95


def decay(m, a, p, b):
    """A·p^m + B."""
    return a * np.power(p, m) + b


def error_per_clifford(p: float, d: int) -> float:
    """r = (d − 1)(1 − p)/d (Magesan, Gambetta, Emerson, PRL 106, 180504 (2011))."""
    return (d - 1) * (1 - p) / d


@dataclass(frozen=True)
class DecayFit:
    a: float
    p: float
    b: float
    d: int

    @property
    def r(self) -> float:
        return error_per_clifford(self.p, self.d)


def _guess(m: np.ndarray, y: np.ndarray, d: int) -> tuple[float, float, float]:
    b = 1.0 / d
    lengths = np.unique(m)
    means = np.array([y[m == L].mean() for L in lengths])
    excess = np.clip(means - b, 1e-6, None)
    if len(lengths) >= 2 and np.ptp(lengths) > 0:
        slope = np.polyfit(lengths, np.log(excess), 1)[0]
        p = float(np.clip(math.exp(slope), 0.05, 1.0))
    else:
        p = 0.99
    a = float(np.clip(excess[0] / p ** lengths[0], 0, 1.5))
    return a, p, b


def fit_decay(lengths, survival, d: int) -> DecayFit:
    """Least-squares fit of A·p^m + B to every sequence's survival
    (``lengths[i]``, ``survival[i]``), with 0 ≤ p ≤ 1, 0 ≤ B ≤ 1.  Survival
    equal at every length (no decay to fit, e.g. an ideal device) gives
    p = 1."""
    m = np.asarray(lengths, dtype=float)
    y = np.asarray(survival, dtype=float)
    if m.shape != y.shape or m.size == 0:
        raise ValueError("one survival probability per sequence is needed")
    if len(np.unique(m)) < 3:
        raise ValueError("the fit A·p^m + B needs at least three different lengths")
    lengths = np.unique(m)
    means = np.array([y[m == L].mean() for L in lengths])
    if np.ptp(means) < 1e-12:
        return DecayFit(0.0, 1.0, float(means.mean()), d)
    p0 = _guess(m, y, d)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", OptimizeWarning)
        popt, _ = curve_fit(decay, m, y, p0=p0, bounds=([-1.5, 0.0, 0.0], [1.5, 1.0, 1.0]),
                            maxfev=20000)
    return DecayFit(float(popt[0]), float(popt[1]), float(popt[2]), d)


def bootstrap(lengths, survival, d: int, *, resamples: int = 200, seed: int = 0):
    """The fits to ``resamples`` bootstrap draws: the sequences of each length
    drawn again with replacement (seeded)."""
    m = np.asarray(lengths, dtype=float)
    y = np.asarray(survival, dtype=float)
    rng = np.random.default_rng([seed, 0xB007])
    groups = [np.flatnonzero(m == L) for L in np.unique(m)]
    fits = []
    for _ in range(resamples):
        idx = np.concatenate([rng.choice(g, size=g.size, replace=True) for g in groups])
        try:
            fits.append(fit_decay(m[idx], y[idx], d))
        except (RuntimeError, ValueError):      # a draw the fit cannot follow: left out
            continue
    return fits


def interval(values, confidence: float = CONFIDENCE) -> tuple[float, float]:
    """Central ``confidence`` interval of ``values``."""
    lo = (1 - confidence) / 2
    v = np.asarray(values, dtype=float)
    return float(np.quantile(v, lo)), float(np.quantile(v, 1 - lo))


def interleaved_error(p_ref: float, p_int: float, d: int) -> tuple[float, float]:
    """(r_G, E): the interleaved step's error estimate and the half-width of
    the interval that holds its true error (Magesan et al., PRL 109, 080505
    (2012) (m))."""
    r = (d - 1) * (1 - p_int / p_ref) / d
    if p_ref <= 0:
        return r, 1.0
    e1 = (d - 1) * (abs(p_ref - p_int / p_ref) + (1 - p_ref)) / d
    e2 = (2 * (d * d - 1) * (1 - p_ref) / (p_ref * d * d)
          + 4 * math.sqrt(max(1 - p_ref, 0.0)) * math.sqrt(d * d - 1) / p_ref)
    return r, min(e1, e2)


@dataclass(frozen=True)
class Analysis:
    """Everything ``rb.json`` reports about one set of sequences."""
    fit: DecayFit
    native_per_clifford: float
    p_interval: tuple[float, float]
    r_interval: tuple[float, float]
    resamples: int

    @property
    def error_per_native(self) -> float:
        """r divided by the physical steps per Clifford (first order in the
        error; frame updates counted as exact)."""
        return self.fit.r / self.native_per_clifford if self.native_per_clifford else float("nan")

    @property
    def native_interval(self) -> tuple[float, float]:
        n = self.native_per_clifford
        return (self.r_interval[0] / n, self.r_interval[1] / n) if n else (math.nan, math.nan)


def analyse(lengths, survival, d: int, native_per_clifford: float, *, resamples: int = 200,
            seed: int = 0) -> Analysis:
    fit = fit_decay(lengths, survival, d)
    fits = bootstrap(lengths, survival, d, resamples=resamples, seed=seed)
    ps = [f.p for f in fits] or [fit.p]
    p_iv = interval(ps)
    r_iv = (error_per_clifford(p_iv[1], d), error_per_clifford(p_iv[0], d))
    return Analysis(fit, native_per_clifford, p_iv, r_iv, len(fits))
