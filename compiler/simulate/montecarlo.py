"""Monte-Carlo reference for noise spectra: trajectories δf(t) synthesised
in the time domain from S(f), each run through an engine, averaged with a
statistical error.  It cross-checks the band treatment (:mod:`.bands`) in
the tests, as ``mesolve`` cross-checks the fast engine.

Synthesis (spectral, in the spirit of Timmer & König, A&A 300, 707 (1995)):
δf(t) = Σ_j σ_j·(a_j·cos 2πf_j t + b_j·sin 2πf_j t) over ``bins_per_decade``
logarithmic bins from f_low to min(f_high, 1/(2h)), a_j, b_j ~ N(0, 1),
σ_j² = ∫_bin S df, and f_j drawn in its bin with density S(f)/σ_j², so that
the trajectories' covariance is ∫ S(f)·cos(2πfτ) df exactly (averaged over
the draws); each is averaged exactly over the model's sub-steps.  The white
part stays a Lindblad rate (exact for white noise).  Nothing is shared with
the band treatment except the spectrum.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..spectra import Spectrum
from .model import Model, NoisePoint, Profile


def _draw_in_bin(rng, a: float, b: float, beta: float, n: int) -> np.ndarray:
    """Frequencies in [a, b] with density ∝ f^−β (inverse CDF)."""
    u = rng.random(n)
    if abs(beta - 1) < 1e-12:
        return a * (b / a) ** u
    p = 1 - beta
    return (a ** p + u * (b ** p - a ** p)) ** (1 / p)


HELD = 1e-3        # below HELD/T a component is held constant over the window


def trajectories(sp: Spectrum, k: int, h: float, count: int, rng,
                 bins_per_decade: int = 12) -> np.ndarray:
    """``count`` trajectories of the power-law part of ``sp`` as means over k
    sub-steps of length h: shape (count, k), Hz.  Components below
    HELD/T (T = k·h) are one constant Gaussian (they turn by at most 2π·10⁻³
    over the window: relative error of their filter weight ≤ (π·10⁻³)²/3)."""
    window = k * h
    held = max(sp.f_low, HELD / window)
    hi = min(sp.f_high, 1 / (2 * h))
    out = np.zeros((count, k))
    if sp.s1 == 0 or sp.beta == 0:
        return out
    var0 = sp.band_variance(sp.f_low, held, white=False)
    out += math.sqrt(var0) * rng.standard_normal((count, 1))
    lo = held
    if hi <= lo:
        return out
    nb = max(1, int(math.ceil(bins_per_decade * math.log10(hi / lo))))
    edges = np.geomspace(lo, hi, nb + 1)
    ta = np.arange(k) * h
    tb = ta + h
    for a, b in zip(edges[:-1], edges[1:]):
        sig = math.sqrt(sp.band_variance(a, b, white=False))
        f = _draw_in_bin(rng, a, b, sp.beta, count)[:, None]
        w = 2 * math.pi * f
        c = (np.sin(w * tb) - np.sin(w * ta)) / (w * h)       # sub-step means of cos
        s = (np.cos(w * ta) - np.cos(w * tb)) / (w * h)       # and of sin
        out += sig * (rng.standard_normal((count, 1)) * c + rng.standard_normal((count, 1)) * s)
    return out


def monte_carlo(engine, model: Model, spectra: dict, count: int, *, seed: int = 0,
                rho0=None, process: bool = False, groups: int = 20,
                correlation: dict | None = None):
    """Average of ``count`` trajectories: per dot index in ``spectra`` a
    trajectory of its spectrum is added to the dot's detuning (the model's
    own noise variables, profiles and gate bands are replaced).  With
    ``correlation`` {(a, b): c} (dots of equal spectra), dot b's trajectory
    is c·x_a + √(1 − c²)·x_b (correlation c at every frequency).  The
    trajectories are run in ``groups`` batches (one engine call each); the
    statistical error is the standard error of the batch means.  Returns
    (mean, standard error) elementwise of the final ρ from ``rho0``, or of
    the superoperator with ``process``."""
    rng = np.random.default_rng(seed)
    base = dataclasses.replace(model, noise=(), gate_bands=())
    paths = {q: trajectories(sp, model.k, model.h, count, rng) for q, sp in spectra.items()}
    for (a, b), c in (correlation or {}).items():
        if spectra[a] != spectra[b]:
            raise ValueError("correlated trajectories need equal spectra")
        paths[b] = c * paths[a] + math.sqrt(1 - c * c) * paths[b]
    per = -(-count // groups)
    means = []
    for g in range(0, count, per):
        idx = range(g, min(count, g + per))
        prof = tuple(Profile("monte_carlo", q, p[i]) for i in idx for q, p in paths.items())
        m = dataclasses.replace(base, profiles=prof)
        nq = len(paths)
        pts = []
        for j in range(len(idx)):
            modes = [0.0] * len(prof)
            modes[j * nq:(j + 1) * nq] = [1.0] * nq
            pts.append(NoisePoint((0.0,) * model.n, (0.0,) * len(model.pairs), 1.0 / len(idx),
                                  tuple(modes)))
        ev = engine.average(m, pts, rho0=rho0, process=process)
        means.append(ev.superop if process else ev.rho)
    arr = np.array(means)
    return arr.mean(axis=0), arr.std(axis=0, ddof=1) / math.sqrt(len(arr))


def monte_carlo_barrier(engine, model: Model, spectra: dict, count: int, *, seed: int = 0,
                        rho0=None, process: bool = False, groups: int = 20):
    """Barrier-voltage noise: per pair index in ``spectra`` a trajectory δV(t)
    of its spectrum (V²/Hz, the power-law part) is added to the pair's played
    barrier voltage, so J(V + δV) follows the exchange model through the
    whole pulse; each trajectory is one engine run (the model's own noise
    variables, profiles and gate bands are dropped).  Returns (mean,
    standard error of ``groups`` batch means) of the final ρ from ``rho0``,
    or of the superoperator with ``process``."""
    rng = np.random.default_rng(seed)
    base = dataclasses.replace(model, noise=(), profiles=(), gate_bands=())
    paths = {i: trajectories(sp, model.k, model.h, count, rng) for i, sp in spectra.items()}
    point = NoisePoint((0.0,) * model.n, (0.0,) * len(model.pairs), 1.0)
    out = []
    for t in range(count):
        pairs = list(base.pairs)
        for i, p in paths.items():
            pairs[i] = dataclasses.replace(pairs[i], volts=pairs[i].volts + p[t][:, None])
        ev = engine.average(dataclasses.replace(base, pairs=tuple(pairs)), [point], rho0=rho0,
                            process=process)
        out.append(ev.superop if process else ev.rho)
    arr = np.array(out)
    per = -(-count // groups)
    means = np.array([arr[g:g + per].mean(axis=0) for g in range(0, count, per)])
    return arr.mean(axis=0), means.std(axis=0, ddof=1) / math.sqrt(len(means))
