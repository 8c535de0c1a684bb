"""The Pauli (transfer-matrix) representation the fast engine works in.

A density matrix of n dots is stored as its real Pauli coefficients
r[p1, …, pn] = Tr((σ_p1 ⊗ … ⊗ σ_pn)·ρ), p ∈ {I, X, Y, Z}: a real array of
shape (4,)*n, one axis per dot, so a channel on a few dots is a small real
matrix acting on their axes only (the Pauli transfer matrix; Greenbaum,
arXiv:1509.02921 (2015), section 3).  Every Hermiticity-preserving map is
real in this basis, which halves memory and arithmetic against complex
superoperators.

Conventions: register order = device dots, dot 0 is the most significant
axis; superoperators elsewhere in the package act on column-stacked density
matrices (vec(AρB) = (Bᵀ ⊗ A)·vec(ρ)).
"""

from __future__ import annotations

import math
from functools import lru_cache, reduce

import numpy as np

SIGMA = np.array([[[1, 0], [0, 1]], [[0, 1], [1, 0]], [[0, -1j], [1j, 0]], [[1, 0], [0, -1]]],
                 dtype=complex)
# r_p = Σ_ij σ_p[j, i]·ρ[i, j]: row p, column (i, j) -> 2i + j
TO_PAULI = np.stack([s.T.reshape(4) for s in SIGMA])
# ρ[i, j] = Σ_p r_p σ_p[i, j] / 2
FROM_PAULI = np.stack([s.reshape(4) for s in SIGMA], axis=1) / 2


def _interleave(n: int) -> list[int]:
    """Axis order (i1, j1, i2, j2, …) of a (2,)*2n density tensor (i…, j…)."""
    return [a for k in range(n) for a in (k, n + k)]


def rho_to_pauli(rho: np.ndarray) -> np.ndarray:
    """Pauli coefficients (4**n,) of a d×d density matrix (real)."""
    return np.ascontiguousarray(_to_pauli(rho).real)


def _to_pauli(rho: np.ndarray) -> np.ndarray:
    """Pauli coefficients of any d×d matrix (complex unless it is Hermitian)."""
    d = rho.shape[0]
    n = int(round(math.log2(d)))
    t = rho.reshape((2,) * (2 * n)).transpose(_interleave(n)).reshape((4,) * n)
    for k in range(n):
        t = np.moveaxis(np.tensordot(TO_PAULI, t, axes=([1], [k])), 0, k)
    return t.reshape(-1)


def product_state(states) -> np.ndarray:
    """Pauli coefficients of a product of one-dot state vectors (no dense
    density matrix is formed)."""
    out = np.ones(1)
    for psi in states:
        out = np.kron(out, rho_to_pauli(np.outer(psi, np.conj(psi))))
    return out


def pauli_to_rho(r: np.ndarray, n: int) -> np.ndarray:
    """Density matrix from Pauli coefficients (inverse of :func:`rho_to_pauli`)."""
    t = np.asarray(r, dtype=complex).reshape((4,) * n)
    for k in range(n):
        t = np.moveaxis(np.tensordot(FROM_PAULI, t, axes=([1], [k])), 0, k)
    inv = np.argsort(_interleave(n))
    return t.reshape((2,) * (2 * n)).transpose(inv).reshape(2 ** n, 2 ** n)


@lru_cache(maxsize=8)
def _basis(n: int) -> tuple[np.ndarray, np.ndarray]:
    """T (vec ρ -> r) and its inverse as dense d²×d² matrices (column stacking)."""
    d = 2 ** n
    eye = np.eye(d * d)
    T = np.stack([_to_pauli(e.reshape(d, d, order="F")) for e in eye], axis=1)
    Tinv = np.stack([pauli_to_rho(e, n).reshape(-1, order="F") for e in np.eye(d * d)], axis=1)
    return T, Tinv


def super_to_ptm(S: np.ndarray) -> np.ndarray:
    """Pauli transfer matrix of a column-stacked superoperator."""
    n = int(round(math.log2(S.shape[0]) / 2))
    T, Tinv = _basis(n)
    return np.real(T @ S @ Tinv)


def ptm_to_super(R: np.ndarray) -> np.ndarray:
    """Column-stacked superoperator of a Pauli transfer matrix."""
    n = int(round(math.log2(R.shape[0]) / 2))
    T, Tinv = _basis(n)
    return Tinv @ R @ T


def pauli_string(labels: str) -> np.ndarray:
    """σ_p1 ⊗ … ⊗ σ_pn for labels such as 'XZ' (I, X, Y, Z)."""
    return reduce(np.kron, [SIGMA["IXYZ".index(c)] for c in labels])


def _ptm_of_map(fn, n: int) -> np.ndarray:
    """R[P, Q] = Tr(σ_P·fn(σ_Q))/d for a linear map fn on d×d matrices."""
    d = 2 ** n
    basis = _pauli_basis(n)                                   # (4^n, d, d)
    imgs = np.stack([fn(sq) for sq in basis])
    # Tr(σ_P·M) = Σ_ij σ_P[i, j]·M[j, i]: one product for every (P, Q)
    return np.real(basis.reshape(len(basis), -1) @ imgs.transpose(0, 2, 1).reshape(len(basis), -1).T) / d


@lru_cache(maxsize=8)
def _pauli_basis(n: int) -> np.ndarray:
    """σ_P for every Pauli string of n dots, in the PTM order (read only)."""
    labels = ["".join(p) for p in _products(n)]
    out = np.stack([pauli_string(s) if n else np.eye(1, dtype=complex) for s in labels])
    out.flags.writeable = False
    return out


def _products(n: int):
    import itertools
    return itertools.product("IXYZ", repeat=n)


def hamiltonian_generator(H: np.ndarray) -> np.ndarray:
    """PTM of ρ -> −i·2π·[H, ρ] (H in Hz): real and antisymmetric."""
    n = int(round(math.log2(H.shape[0])))
    return _ptm_of_map(lambda r: -2j * math.pi * (H @ r - r @ H), n)


def anticommutator_map(A: np.ndarray) -> np.ndarray:
    """PTM of ρ -> {A, ρ} = Aρ + ρA (A Hermitian): real.  With it a two-dot
    Hamiltonian generator splits into products of one-dot maps:
    −i[A⊗B, ·] = ½(−i[A, ·] ⊗ {B, ·} + {A, ·} ⊗ −i[B, ·])."""
    n = int(round(math.log2(A.shape[0])))
    return _ptm_of_map(lambda r: A @ r + r @ A, n)


def dissipator_generator(c: np.ndarray) -> np.ndarray:
    """PTM of the Lindblad dissipator cρc† − ½{c†c, ρ}."""
    n = int(round(math.log2(c.shape[0])))
    cdc = c.conj().T @ c
    return _ptm_of_map(lambda r: c @ r @ c.conj().T - 0.5 * (cdc @ r + r @ cdc), n)


def unitary_ptm(u: np.ndarray) -> np.ndarray:
    """PTM of ρ -> UρU†."""
    n = int(round(math.log2(u.shape[0])))
    return _ptm_of_map(lambda r: u @ r @ u.conj().T, n)


# ------------------------------------------------------------------ exponentials

TAYLOR_TERMS = 18          # ‖A‖₁ ≤ 1 after scaling: truncation error ≤ 1/19! ≈ 8e-18


def _taylor_terms(theta: float) -> int:
    """Fewest terms m whose remainder θ^(m+1)/(m+1)! is below the double-precision unit."""
    m, term = 1, theta
    while m < TAYLOR_TERMS and term * theta / (m + 1) > 2.0 ** -53:
        m += 1
        term *= theta / m
    return m


def expm_any(A: np.ndarray, small: int = 16) -> np.ndarray:
    """exp(A) for a stack of matrices: up to ``small`` × ``small`` by
    :func:`expm_batch` (faster there), larger ones by scipy unless every
    1-norm is at most 0.02 (a few Taylor terms, no squaring: the weak
    exchange's chunk corrections, 3-6x faster than scipy on stacks of
    64 x 64, measured)."""
    if A.shape[-1] <= small or (A.size and float(np.abs(A).sum(axis=-2).max()) <= 0.02):
        return expm_batch(A)
    from scipy.linalg import expm
    return expm(A)


def expm_batch(A: np.ndarray) -> np.ndarray:
    """exp(A) for a stack of small real or complex matrices (..., k, k), by
    scaling and squaring with a truncated Taylor series evaluated in Horner
    form, vectorised over the stack (Moler & Van Loan, SIAM Review 45, 3
    (2003), method 3).  Each matrix is scaled by its own 2^s so that its
    1-norm θ is at most 1, and the series is cut where its remainder
    θ^(m+1)/(m+1)! falls below the rounding unit of double precision
    (matrices are grouped by θ so that small ones take few terms)."""
    A = np.asarray(A)
    shape = A.shape
    k = shape[-1]
    A = A.reshape(-1, k, k)
    if not len(A):
        return A.reshape(shape).copy()
    norm = np.abs(A).sum(axis=-2).max(axis=-1)
    s = np.maximum(0, np.ceil(np.log2(np.maximum(norm, 1e-300))).astype(int))
    scale = np.ldexp(1.0, s)
    As = A / scale[:, None, None]
    theta = norm / scale
    out = np.empty_like(As)
    diag = np.arange(k)
    for lo, hi in ((-1.0, 0.02), (0.02, 0.2), (0.2, 2.0)):
        sel = (theta > lo) & (theta <= hi)
        if not sel.any():
            continue
        X = As[sel] if not sel.all() else As
        m = _taylor_terms(float(theta[sel].max()))
        E = X / m
        E[:, diag, diag] += 1
        for j in range(m - 1, 0, -1):
            E = np.matmul(X, E)
            E /= j
            E[:, diag, diag] += 1
        out[sel] = E
    E = out
    for j in range(int(s.max(initial=0))):
        sel = s > j
        if sel.all():
            E = np.matmul(E, E)
        else:
            E[sel] = np.matmul(E[sel], E[sel])
    return E.reshape(shape)
