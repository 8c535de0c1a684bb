"""The gate band of a noise spectrum as a filter-function correction: the
second-order cumulant of Gaussian noise in the toggling frame of the
noise-free control, from the band's covariance.

A noise ξ(t) (a dot's detuning in Hz, or a barrier voltage in V) enters the
Hamiltonian as ξ(t)·G(t) (G = σz/2 of the dot, or ∂H/∂V of the pair's
exchange terms on sub-step k, which follows the as-played barrier pulse).
In the toggling frame of the noise-free run, G̃(t) = U(t)†·G(t)·U(t), the
averaged evolution of Gaussian noise of covariance C(t, t') is, to second
order in the noise (the cumulant expansion; for commuting G̃ exact),

    ρ̃(T) = exp(𝒦)·ρ(0),   𝒦 = −(2π)² ∫₀^T dt ∫₀^t dt' C(t, t')·ad G̃(t)·ad G̃(t'),

ad X = [X, ·] (Cywiński, Lutchyn, Nave & Das Sarma, PRB 77, 174509 (2008):
for G̃ = y(t)σz/2 this is coherence decay exp(−χ), χ = ½(2π)²∫S|Y|² df;
Green, Sastrawan, Uys & Biercuk, New J. Phys. 15, 095004 (2013) for the
general control).  The whole run's channel is then S = S_c·exp(𝒦), S_c the
engine's average over the other noise (the same composition as the product
of mode corrections in :func:`.run.combine_modes`).

Discretisation and its error (docs/simulate.md, "Noise spectra"):

* U(t) is the exact propagator of the model's piecewise-constant noise-free
  Hamiltonian (the same terms the engines integrate; the dissipators are
  left out of the frame: an error of order χ_gate·Γ·T, Γ the largest
  dissipation rate, e.g. 2·10⁻⁵·χ_gate for W2's 3 µs at T1 = 200 µs);
  ∫G̃ dt over each sub-step is exact (the eigenbasis of the sub-step's H).
* the noise is held on chunks (at most ``CHUNKS`` per window, as the
  engine's modes were): C is the exact covariance of chunk means,
  C̄(m) = ∫ S(f)·sinc²(fτ)·cos(2πf·mτ) df over the band, integrated with
  8-point Gauss–Legendre panels at most 1/(4T) wide (relative error below
  10⁻⁹); holding the noise on a chunk τ misses, at the band's top f_hi, a
  relative (π f_hi τ)²/3 of that frequency's weight (1.3 % at 64/T and
  1024 chunks, < 0.04 % below 10/T, where most of χ is);
* within a chunk the time order of the noise is dropped (½·C̄_cc·(ad A_c)²):
  an error of order C̄_cc·τ³·‖H‖, below the above.

No gate-band modes (and so no engine evaluations) are needed: the band is
integrated, not sampled, and its cost is one propagation of the noise-free
Hamiltonian plus a (chunks × chunks) matrix product.  Used for registers
of dimension at most :data:`MAX_DIM`; larger ones keep the engine's modes.
"""

from __future__ import annotations

import functools
import math
import numpy as np

from .model import GateBand, LevelPair, Model, dot_operator, embed, embed_pair  # noqa: F401

CHUNKS = 1024          # the noise is held on at most this many chunks per window
MAX_DIM = 16           # Hilbert-space dimension up to which the correction is formed here
BLOCK = 4096           # sub-steps propagated at a time
DV = 1e-5              # V, step of the central difference ∂H/∂V of a pair


def applies(model: Model) -> bool:
    """Whether the correction is formed here (the register small enough)."""
    return bool(model.gate_bands) and model.dim <= MAX_DIM


@functools.lru_cache(maxsize=256)
def band_covariance(sp, f_lo: float, f_hi: float, tau: float, lags: int,
                    white: bool = False) -> np.ndarray:
    """C̄(m) = ∫_{f_lo}^{f_hi} S(f)·sinc²(fτ)·cos(2πf·mτ) df for m = 0 … lags − 1:
    the covariance of the means over chunks of length τ of noise whose
    spectrum is S restricted to the band (unit²).  The white part of S is in
    the band only with ``white`` (Zeeman noise: it is a Lindblad rate)."""
    a, b = max(f_lo, sp.f_low), min(f_hi, sp.f_high)
    if not b > a or lags <= 0:
        return np.zeros(max(lags, 0))
    T = lags * tau
    # geometric panels (ratio ≤ 1.5) up to 1/T, then panels at most 1/(4T) wide
    top = min(b, 1 / T)
    edges = [a]
    while 0 < edges[-1] < top:             # (from zero: linear panels only)
        edges.append(min(edges[-1] * 1.5, top))
    if b > edges[-1]:
        lin_top = min(b, edges[-1] + 200000 / (4 * T))
        n = int(math.ceil((lin_top - edges[-1]) * 4 * T))
        edges += list(np.linspace(edges[-1], lin_top, n + 1)[1:])
        if b > lin_top:            # a band reaching far above 1/T: log panels there
            edges += list(np.geomspace(lin_top, b, 64)[1:])
    e = np.asarray(edges)
    x, w = np.polynomial.legendre.leggauss(8)
    lo, hi = e[:-1], e[1:]
    f = ((hi - lo)[:, None] * (x[None, :] + 1) / 2 + lo[:, None]).ravel()
    wf = ((hi - lo)[:, None] * w[None, :] / 2).ravel()
    if sp.beta > 0:
        level = sp.s1 * f ** (-sp.beta)
    else:                                   # β = 0: S₁ is white noise
        level = np.full_like(f, sp.s1 if white else 0.0)
    if white:
        level = level + sp.white
    g = wf * level * np.sinc(f * tau) ** 2
    m = np.arange(lags)
    out = np.zeros(lags)
    for i in range(0, len(f), 2048):                 # bounded memory
        out += np.cos(2 * math.pi * np.outer(m * tau, f[i:i + 2048])) @ g[i:i + 2048]
    out.setflags(write=False)          # cached: shared between callers
    return out


def _hamiltonian_terms(model: Model, detuning=None, dv=None):
    """The Hamiltonian without the gate band as (operator d×d, coefficient per
    sub-step) terms (Hz), exactly as the engines take the model, at a point
    of the constant noise variables (``detuning`` Hz per dot, ``dv`` V per
    pair; zero when not given); and per pair a function of the barrier
    offset giving its terms (for ∂H/∂V)."""
    lv = model.levels
    terms = []
    for k, d in enumerate(detuning or ()):
        if d:
            terms.append((embed(dot_operator(model.dots[k], "z"), k, lv) / 2,
                          np.full(model.k, float(d))))
    for k, c in model.drive.items():
        r = embed(dot_operator(model.dots[k], "raise"), k, lv)
        terms.append((r, c))
        terms.append((r.conj().T, np.conj(c)))
    for k, tt in model.drive_terms.items():
        for name, c in tt:
            o = embed(dot_operator(model.dots[k], name), k, lv)
            terms.append((o, c))
            terms.append((o.conj().T, np.conj(c)))
    pair_terms = []
    for p in model.pairs:
        pair_terms.append(lambda x, p=p: _pair_terms(model, p, x))
    for i, f in enumerate(pair_terms):
        terms += f(dv[i] if dv else 0.0)
    return terms, pair_terms


def _pair_terms(model: Model, p, dv: float):
    lv = model.levels
    if isinstance(p, LevelPair):
        _, Fs = p.coefficients(dv)
        out = []
        for (nu, M), F in zip(p.parts, Fs):
            o = embed_pair(M, p.a, p.b, lv)
            if nu == 0:
                out.append((o, F.real))
            else:
                out += [(o, F), (o.conj().T, np.conj(F))]
        return out
    J, F = p.coefficients(dv)
    za = embed(dot_operator(model.dots[p.a], "z"), p.a, lv)
    zb = embed(dot_operator(model.dots[p.b], "z"), p.b, lv)
    rl = (embed(dot_operator(model.dots[p.a], "raise"), p.a, lv)
          @ embed(dot_operator(model.dots[p.b], "lower"), p.b, lv))
    return [(za @ zb / 4, J), (rl / 2, F), (rl.conj().T / 2, np.conj(F))]


def _assemble(terms, s: int, e: int, d: int) -> np.ndarray:
    H = np.zeros((e - s, d, d), dtype=complex)
    for o, c in terms:
        cc = np.asarray(c)[s:e]
        if np.any(cc):
            H += cc[:, None, None] * o[None]
    return H


def _prefix(M: np.ndarray) -> np.ndarray:
    """P_k = M_k·…·M_0 for a stack M (B, d, d) (a log-depth scan)."""
    P = M.copy()
    step = 1
    while step < len(P):
        P[step:] = P[step:] @ P[:-step]
        step *= 2
    return P


def toggled_chunks(model: Model, ops: list, chunk: int, terms=None) -> list[np.ndarray]:
    """For each noise operator (a constant d×d matrix, or a callable giving the
    (B, d, d) operators of sub-steps [s, e)): A_c = ∫_chunk U(t)†·G·U(t) dt
    per chunk of ``chunk`` sub-steps (s), shape (chunks, d, d), with U the
    propagator of the noise-free Hamiltonian from the window start."""
    d, K, h = model.dim, model.k, model.h
    if terms is None:
        terms, _ = _hamiltonian_terms(model)
    nc = -(-K // chunk)
    out = [np.zeros((nc, d, d), dtype=complex) for _ in ops]
    U = np.eye(d, dtype=complex)
    for s in range(0, K, BLOCK):
        e = min(K, s + BLOCK)
        H = _assemble(terms, s, e, d)
        H = (H + H.conj().transpose(0, 2, 1)) / 2
        w, V = np.linalg.eigh(H)                                   # Hz
        step = V * np.exp(-2j * math.pi * w * h)[:, None, :] @ V.conj().transpose(0, 2, 1)
        P = _prefix(step) @ U                                      # U at each sub-step's end
        before = np.concatenate([U[None], P[:-1]])                 # and at its start
        dw = w[:, :, None] - w[:, None, :]
        phase = h * np.exp(1j * math.pi * dw * h) * np.sinc(dw * h)   # ∫₀^h e^{i2πΔτ} dτ
        W = V.conj().transpose(0, 2, 1) @ before                   # V†·U(start)
        idx = np.arange(s, e) // chunk
        for o, G in zip(out, ops):
            g = G(s, e) if callable(G) else G
            Gp = V.conj().transpose(0, 2, 1) @ g @ V               # in the sub-step's eigenbasis
            A = W.conj().transpose(0, 2, 1) @ (Gp * phase) @ W     # ∫ U(t)† G U(t) dt
            np.add.at(o, idx, A)
        U = P[-1]
    return out


def _ad_pair(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """Σ_c ad(A_c)·ad(B_c) as a superoperator on column-stacked ρ (d² × d²):
    ad X = I⊗X − Xᵀ⊗I, so ad A·ad B = I⊗AB − Bᵀ⊗A − Aᵀ⊗B + (BA)ᵀ⊗I."""
    n, d, _ = A.shape
    eye = np.eye(d)
    AB = np.einsum("cij,cjk->ik", A, B)
    BA = np.einsum("cij,cjk->ik", B, A)

    def kron_sum(X, Y):            # Σ_c Xᵀ_c ⊗ Y_c
        M = X.reshape(n, d * d).T @ Y.reshape(n, d * d)            # [(j,i),(k,l)] = X_ji·Y_kl
        return M.reshape(d, d, d, d).transpose(1, 2, 0, 3).reshape(d * d, d * d)
    return np.kron(eye, AB) - kron_sum(B, A) - kron_sum(A, B) + np.kron(BA.T, eye)


def correction(model: Model, detuning=None, dv=None) -> np.ndarray:
    """exp(𝒦) of the model's gate bands (column-stacked superoperator, d² × d²)
    in the toggling frame of the run at a point of the constant noise
    variables (``detuning`` Hz per dot, ``dv`` V per pair; zero when not
    given): the channel to apply before the engine's channel at that point."""
    from scipy.linalg import expm
    K, h, d = model.k, model.h, model.dim
    chunk = max(1, -(-K // CHUNKS))
    nc = -(-K // chunk)
    ops = []
    terms, pair_terms = _hamiltonian_terms(model, detuning, dv)
    for b in model.gate_bands:
        if b.moves == "detuning":
            ops.append(embed(dot_operator(model.dots[b.target], "z"), b.target, model.levels) / 2)
        elif b.moves == "barrier":
            x = dv[b.target] if dv else 0.0
            plus, minus = pair_terms[b.target](x + DV), pair_terms[b.target](x - DV)
            ops.append(lambda s, e, plus=plus, minus=minus: (
                _assemble(plus, s, e, d) - _assemble(minus, s, e, d)) / (2 * DV))
        else:
            raise ValueError(f"gate band of {b.source}: unknown target kind {b.moves!r}")
    chunks = toggled_chunks(model, ops, chunk, terms)
    gen = np.zeros((d * d, d * d), dtype=complex)
    tau = chunk * h
    lag = np.arange(nc)[:, None] - np.arange(nc)[None, :]

    def ordered(cov):
        # the time-ordered weights: C̄(c − c') below the diagonal, ½C̄(0) on it
        return np.where(lag > 0, cov[np.abs(lag)], 0.0) + np.diag(np.full(nc, cov[0] / 2))

    for b, A in zip(model.gate_bands, chunks):
        cov = band_covariance(b.spectrum, b.f_lo, b.f_hi, tau, nc, b.moves == "barrier")
        if not np.any(cov):
            continue
        gen += _ad_pair(A, np.tensordot(ordered(cov), A, axes=(1, 0)))
    # correlated Zeeman noise of two dots: the cross covariance
    # c·∫√(S_a S_b)·sinc²·cos df (a frequency-independent coherence c) in both orders
    found = {(b.moves, b.target): (b, A) for b, A in zip(model.gate_bands, chunks)}
    for b, A in zip(model.gate_bands, chunks):
        for other, c in b.partners:
            if other < b.target or ("detuning", other) not in found:
                continue                            # each pair once
            b2, A2 = found[("detuning", other)]
            cov = c * band_covariance(_geometric_mean(b.spectrum, b2.spectrum),
                                      max(b.f_lo, b2.f_lo), min(b.f_hi, b2.f_hi), tau, nc)
            if not np.any(cov):
                continue
            W = ordered(cov)
            gen += (_ad_pair(A, np.tensordot(W, A2, axes=(1, 0)))
                    + _ad_pair(A2, np.tensordot(W, A, axes=(1, 0))))
    return expm(-(2 * math.pi) ** 2 * gen)


def _geometric_mean(a, b):
    """√(S_a·S_b) of two power laws (their white parts are Lindblad rates)."""
    from ..spectra import Spectrum
    lo, hi = max(a.f_low, b.f_low), min(a.f_high, b.f_high)
    if a.is_white or b.is_white or not hi > lo:
        return Spectrum(0.0, 0.0, 0.0, 0.0, 1.0)
    return Spectrum(math.sqrt(a.s1 * b.s1), (a.beta + b.beta) / 2, 0.0, lo, hi)
