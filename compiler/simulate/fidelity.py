"""Ideal operations, superoperators and fidelities on the register.

Conventions: basis |0> = spin up (σz = +1), register order = device dots;
superoperators act on column-stacked density matrices (vec(AρB) =
(Bᵀ ⊗ A)·vec(ρ)), the convention of qutip's ``to_super``.
"""

from __future__ import annotations

import math
from functools import lru_cache, reduce

import numpy as np
from scipy.linalg import expm

from .. import program as P
from ..steps import EXCHANGE_GATES, KINDS

SX = np.array([[0, 1], [1, 0]], dtype=complex)
SY = np.array([[0, -1j], [1j, 0]], dtype=complex)
SZ = np.diag([1.0, -1.0]).astype(complex)
SP = np.array([[0, 1], [0, 0]], dtype=complex)      # σ+ = |↑><↓|
SM = SP.T.copy()
I2 = np.eye(2, dtype=complex)

STATES = {
    "up": np.array([1, 0], dtype=complex),
    "down": np.array([0, 1], dtype=complex),
    "xplus": np.array([1, 1], dtype=complex) / math.sqrt(2),
    "xminus": np.array([1, -1], dtype=complex) / math.sqrt(2),
    "yplus": np.array([1, 1j], dtype=complex) / math.sqrt(2),
    "yminus": np.array([1, -1j], dtype=complex) / math.sqrt(2),
}


def op(single: np.ndarray, k: int, n: int) -> np.ndarray:
    """A one-dot operator placed at register position k of n."""
    return reduce(np.kron, [single if i == k else I2 for i in range(n)])


def rz_register(frames) -> np.ndarray:
    """⊗_q exp(−i F_q σz/2): the map from rotating frames to qubit frames."""
    return reduce(np.kron, [np.diag([np.exp(-0.5j * f), np.exp(0.5j * f)]) for f in frames])


def rotation(phase: float, angle: float) -> np.ndarray:
    """exp(−iθ(cosφ σx + sinφ σy)/2)."""
    n = math.cos(phase) * SX + math.sin(phase) * SY
    return math.cos(angle / 2) * I2 - 1j * math.sin(angle / 2) * n


@lru_cache(maxsize=256)
def exchange_unitary(gate: str, a: int, b: int, n: int, angle: float = 0.0) -> np.ndarray:
    """A swap-regime gate: exp(−i·2π·x·S_a·S_b) with x = ∫(J/h)dt of the gate
    (1/4 for √SWAP); a controlled phase: CPHASE(angle) = diag(1, 1, 1, e^{iθ})
    on dots a, b (phase on ↓↓, |0> = up).  Cached, returned read-only."""
    g = EXCHANGE_GATES[gate]
    if g.regime == "phase":
        phase = g.target_for(angle)[3, 3]
        down_a = np.kron(np.kron(np.ones(2 ** a), [0, 1]), np.ones(2 ** (n - a - 1)))
        down_b = np.kron(np.kron(np.ones(2 ** b), [0, 1]), np.ones(2 ** (n - b - 1)))
        u = np.diag(np.where((down_a * down_b) > 0, phase, 1.0 + 0j))
    else:
        s1s2 = sum(op(P_, a, n) @ op(P_, b, n) for P_ in (SX, SY, SZ)) / 4
        u = expm(-2j * math.pi * g.integral * s1s2)
    u.flags.writeable = False
    return u


def _parallel(step: P.Parallel, dots: tuple[str, ...]) -> np.ndarray:
    u = np.eye(2 ** len(dots), dtype=complex)
    for s in step.steps:
        u = step_unitary(s, dots) @ u
    return u


# The ideal operation of each kind of step, by its ``ideal`` in compiler.steps.KINDS.
IDEAL_OPS = {
    "rotation": lambda s, dots: op(rotation(s.phase, s.angle), dots.index(s.qubit), len(dots)),
    "frame": lambda s, dots: op(np.diag([np.exp(-0.5j * s.angle), np.exp(0.5j * s.angle)]),
                                dots.index(s.qubit), len(dots)),
    "exchange": lambda s, dots: exchange_unitary(s.gate, dots.index(s.a), dots.index(s.b),
                                                 len(dots), s.angle),
    "identity": lambda s, dots: np.eye(2 ** len(dots), dtype=complex),  # waits, readout, triggers
    "product": _parallel,
}


def step_unitary(step, dots: tuple[str, ...]) -> np.ndarray:
    """The ideal operation of one program step on the whole register."""
    return IDEAL_OPS[KINDS[step.kind].ideal](step, dots)


def ideal_unitary(steps, dots: tuple[str, ...]) -> np.ndarray:
    u = np.eye(2 ** len(dots), dtype=complex)
    for s in steps:
        u = step_unitary(s, dots) @ u
    return u


def initial_state(run: P.Run, dots: tuple[str, ...], ground_up: tuple[bool, ...]) -> np.ndarray:
    """State vector of the declared initial state; undeclared dots start in
    their ground state (spin down for g > 0, up for g < 0)."""
    declared = {q: s for q, s, _ in run.prepare}
    n = len(dots)
    if any(s == "singlet" for s in declared.values()):
        pair = [q for q, s in declared.items() if s == "singlet"]
        a, b = dots.index(pair[0]), dots.index(pair[1])
        psi = None
        singles = []
        for k, q in enumerate(dots):
            if k in (a, b):
                continue
            singles.append((k, _single(declared.get(q), ground_up[k])))
        # build |S>_ab ⊗ others by summing two product states
        up, dn = STATES["up"], STATES["down"]
        terms = []
        for sa, sb, sign in ((up, dn, 1), (dn, up, -1)):
            vecs = []
            for k in range(n):
                vecs.append(sa if k == a else sb if k == b else dict(singles)[k])
            terms.append(sign * reduce(np.kron, vecs))
        psi = (terms[0] + terms[1]) / math.sqrt(2)
        return psi
    return reduce(np.kron, [_single(declared.get(q), ground_up[k]) for k, q in enumerate(dots)])


def _single(state: str | None, ground_up: bool) -> np.ndarray:
    if state is None:
        return STATES["up"] if ground_up else STATES["down"]
    return STATES[state]


# ------------------------------------------------------------------ qubit subspace

def qubit_isometry(levels: tuple[int, ...]) -> np.ndarray | None:
    """V (d × 2^n): the qubit levels (0 and 1) of every dot inside the
    register's levels; None when every dot has two levels."""
    if all(lv == 2 for lv in levels):
        return None
    return reduce(np.kron, [np.eye(lv)[:, :2] for lv in levels]).astype(complex)


def restrict_channel(S: np.ndarray, V: np.ndarray) -> np.ndarray:
    """The channel from qubit states to the qubit block of the output,
    ρ_q -> V†·S(V ρ_q V†)·V (column stacking); population that leaves the
    qubit levels is lost, so fidelities count leakage as error (Wood &
    Gambetta, PRA 97, 032306 (2018))."""
    return np.kron(V.T, V.conj().T) @ S @ np.kron(V.conj(), V)


def leakage_of(Sq: np.ndarray) -> float:
    """Average leakage of a restricted channel: 1 − Tr S_q(1/d) (Wood &
    Gambetta 2018)."""
    d = int(round(math.sqrt(Sq.shape[0])))
    out = Sq @ (np.eye(d, dtype=complex) / d).reshape(-1, order="F")
    return float(1.0 - np.real(np.trace(out.reshape(d, d, order="F"))))


# ------------------------------------------------------------------ superoperators

def super_unitary(u: np.ndarray) -> np.ndarray:
    """Superoperator of ρ -> UρU† on column-stacked ρ: conj(U) ⊗ U."""
    return np.kron(np.conj(u), u)


def process_fidelity(S: np.ndarray, u: np.ndarray) -> float:
    """F_pro = Tr(S_U†·S)/d² of a channel S against a unitary U (equal to
    |Tr(U†V)|²/d² when S is the unitary V)."""
    d = u.shape[0]
    return float(np.real(np.trace(super_unitary(u).conj().T @ S))) / d ** 2


def average_fidelity(f_pro: float, d: int) -> float:
    """F_avg = (d·F_pro + 1)/(d + 1) (Horodecki et al., PRA 60, 1888 (1999);
    Nielsen, Phys. Lett. A 303, 249 (2002))."""
    return (d * f_pro + 1) / (d + 1)


def to_qubit_frames(S: np.ndarray, before, after) -> np.ndarray:
    """Channel in the qubit frames: S_Rz(F_after)·S·S_Rz(F_before)†."""
    return super_unitary(rz_register(after)) @ S @ super_unitary(rz_register(before)).conj().T


def rho_to_qubit_frames(rho: np.ndarray, frames) -> np.ndarray:
    r = rz_register(frames)
    return r @ rho @ r.conj().T
