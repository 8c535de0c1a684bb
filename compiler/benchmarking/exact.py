"""Survival probabilities of Clifford sequences under small exact noise
models (superoperators on 1 or 2 qubits), without a device: the checks of
the fit and of interleaved RB against closed forms.

Superoperators act on column-stacked density matrices, as in
:mod:`compiler.simulate.fidelity` (S_U = conj(U) ⊗ U).
"""

from __future__ import annotations

import numpy as np

from ..simulate.fidelity import super_unitary
from .group import CliffordGroup


def amplitude_damping(gamma: float) -> np.ndarray:
    """One qubit relaxing towards |0> with probability ``gamma`` (Kraus
    operators [[1, 0], [0, √(1−γ)]] and [[0, √γ], [0, 0]])."""
    k0 = np.array([[1, 0], [0, np.sqrt(1 - gamma)]], dtype=complex)
    k1 = np.array([[0, np.sqrt(gamma)], [0, 0]], dtype=complex)
    return sum(np.kron(k.conj(), k) for k in (k0, k1))


def depolarizing(lam: float, d: int) -> np.ndarray:
    """ρ → λρ + (1 − λ)·Tr(ρ)·I/d.  Its average fidelity is λ + (1 − λ)/d
    (Nielsen, Phys. Lett. A 303, 249 (2002), with F_pro = λ + (1 − λ)/d²)."""
    vec_i = np.eye(d).reshape(-1)
    return lam * np.eye(d * d) + (1 - lam) * np.outer(vec_i / d, vec_i)


def _survival(rho0: np.ndarray, ops) -> float:
    v = rho0.reshape(-1, order="F").astype(complex)
    for S in ops:
        v = S @ v
    rho = v.reshape(rho0.shape, order="F")
    return float(np.real(np.vdot(rho0.reshape(-1), rho.reshape(-1))))


def ground(d: int) -> np.ndarray:
    rho = np.zeros((d, d), dtype=complex)
    rho[0, 0] = 1
    return rho


def survival_cliffords(group: CliffordGroup, applied, noise=None, actual=None) -> float:
    """Survival of |0…0> after the Cliffords ``applied`` (element numbers in
    order); the k-th is played as ``actual(k, element)`` (a unitary; None or
    no function: the ideal one) and followed by ``noise(k, element)`` (a
    superoperator; None or no function: nothing)."""
    ops = []
    for k, c in enumerate(applied):
        u = actual(k, c) if actual is not None else None
        ops.append(super_unitary(group.unitaries[c] if u is None else u))
        extra = noise(k, c) if noise is not None else None
        if extra is not None:
            ops.append(extra)
    return _survival(ground(group.dim), ops)


def survival_steps(steps, n: int, noise=None, actual=None) -> float:
    """Survival of |0…0> after native ``steps``, each played as
    ``actual(step)`` (a unitary; default the ideal one) then followed by
    ``noise(step)`` (a superoperator, or None)."""
    ops = []
    for s in steps:
        u = actual(s) if actual is not None else None
        ops.append(super_unitary(s.unitary(n) if u is None else u))
        extra = noise(s) if noise is not None else None
        if extra is not None:
            ops.append(extra)
    return _survival(ground(2 ** n), ops)
