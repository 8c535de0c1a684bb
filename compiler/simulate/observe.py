"""What a lab records, and fidelities on the qubits a program acts on.

* :func:`observables`: per trailing ``read`` of a run, the probability each
  readout records (P(up) of a dot, P(singlet) of a pair under Pauli spin
  blockade, P(even) of a parity readout): from a perfect readout of the
  simulated state (``ideal``), with the device's preparation and readout
  errors (``measured``, :mod:`compiler.readout`), and from the ideal circuit
  (``target``); with ``shots`` the expected counts and the binomial error.
* :func:`acted_qubits` and :func:`restrict`: the whole-run fidelities on the
  qubits the program acts on (default), so that idle spectators do not
  dominate them (docs/simulate.md, "Fidelity scope").

Register conventions as :mod:`.fidelity`: two levels per qubit, |0⟩ = spin
up, dot 0 the most significant factor of the Kronecker products, column
stacking for superoperators.
"""

from __future__ import annotations

import math

import numpy as np

from .. import program as P
from .. import readout as RO
from . import fidelity as F
from .types import Observable

UP = np.array([1.0, 0.0], dtype=complex)
DOWN = np.array([0.0, 1.0], dtype=complex)
SINGLET = (np.kron(UP, DOWN) - np.kron(DOWN, UP)) / math.sqrt(2)
EVEN = np.diag([1.0, 0.0, 0.0, 1.0]).astype(complex)        # ↑↑ and ↓↓

SCOPES = ("program", "register")


# ---------------------------------------------------------------- subsystems

def _tensor(rho: np.ndarray, n: int) -> np.ndarray:
    return rho.reshape((2,) * (2 * n))


def partial_trace(rho: np.ndarray, keep, n: int) -> np.ndarray:
    """ρ of the qubits ``keep`` (register positions, in the order given)
    from a 2^n × 2^n density matrix."""
    keep = list(keep)
    t = _tensor(rho, n)
    rest = [k for k in range(n) if k not in keep]
    # trace out the others, highest first so the axis numbers stay valid
    for k in sorted(rest, reverse=True):
        t = np.trace(t, axis1=k, axis2=k + t.ndim // 2)
    m = len(keep)
    order = sorted(keep)
    perm = [order.index(k) for k in keep]
    t = t.transpose(perm + [m + p for p in perm])
    return t.reshape(2 ** m, 2 ** m)


def _place(rho_a: np.ndarray, sigma_b: np.ndarray, keep, n: int) -> np.ndarray:
    """ρ_A ⊗ σ_B with A on the register positions ``keep`` (sorted) and B on
    the others."""
    keep = sorted(keep)
    rest = [k for k in range(n) if k not in keep]
    t = np.kron(rho_a, sigma_b).reshape((2,) * (2 * n))
    order = keep + rest                      # axis j of t is register position order[j]
    inv = [order.index(k) for k in range(n)]
    return t.transpose(inv + [n + i for i in inv]).reshape(2 ** n, 2 ** n)


def restrict(S: np.ndarray | None, U: np.ndarray, rho: np.ndarray, rho0: np.ndarray,
             keep, n: int):
    """The channel, ideal unitary, final state and ideal final state on the
    qubits ``keep`` (sorted register positions), the others starting in
    their part of ``rho0`` (a product with the kept part) and traced out at
    the end: E_A(ρ_A) = Tr_B S(ρ_A ⊗ σ_B), U_A = ⟨σ_B|U|σ_B⟩ for
    U = U_A ⊗ 1_B.  Returns (S_A or None, U_A, ρ_A, ideal ρ_A)."""
    keep = sorted(keep)
    rest = [k for k in range(n) if k not in keep]
    m = len(keep)
    da = 2 ** m
    sigma_b = partial_trace(rho0, rest, n)
    # the spectators' ideal state is pure and untouched: take its vector
    w, v = np.linalg.eigh(sigma_b)
    psi_b = v[:, int(np.argmax(w))]
    eye_a = np.eye(da, dtype=complex)
    iso = _place_vector(eye_a, psi_b, keep, n)          # 2^n × da: |a⟩ ⊗ |ψ_B⟩
    U_a = iso.conj().T @ U @ iso
    S_a = None if S is None else reduce_channel(S, sigma_b, keep, n)
    ideal = U @ rho0 @ U.conj().T
    return S_a, U_a, partial_trace(rho, keep, n), partial_trace(ideal, keep, n)


def reduce_channel(S: np.ndarray, sigma_b: np.ndarray, keep, n: int) -> np.ndarray:
    """E_A(ρ_A) = Tr_B S(ρ_A ⊗ σ_B) as a (4^m × 4^m) superoperator (column
    stacking), A the sorted register positions ``keep``, by one tensor
    contraction of S over the spectators' indices."""
    keep = sorted(keep)
    rest = [k for k in range(n) if k not in keep]
    m, d = len(keep), 2 ** n
    letters = iter("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ")
    # T[i', j', i, j]: out row, out column, in row, in column; each split per dot
    groups = [[next(letters) for _ in range(n)] for _ in range(4)]
    for k in rest:                           # output: traced over the spectators
        groups[1][k] = groups[0][k]
    out = "".join(groups[g][k] for g in range(4) for k in keep)
    sig = "".join(groups[2][k] for k in rest) + "".join(groups[3][k] for k in rest)
    T = S.reshape((d, d, d, d), order="F").reshape((2,) * (4 * n))
    spec = "".join("".join(g) for g in groups) + ("," + sig if rest else "") + "->" + out
    args = [T] + ([sigma_b.reshape((2,) * (2 * len(rest)))] if rest else [])
    E = np.einsum(spec, *args, optimize=True)
    da = 2 ** m
    return E.reshape((da, da, da, da)).reshape((da * da, da * da), order="F")


def _place_vector(a_cols: np.ndarray, psi_b: np.ndarray, keep, n: int) -> np.ndarray:
    """Columns |a⟩ ⊗ |ψ_B⟩ with A on the positions ``keep`` (sorted)."""
    keep = sorted(keep)
    rest = [k for k in range(n) if k not in keep]
    order = keep + rest
    inv = [order.index(k) for k in range(n)]
    cols = []
    for c in range(a_cols.shape[1]):
        t = np.kron(a_cols[:, c], psi_b).reshape((2,) * n).transpose(inv)
        cols.append(t.reshape(-1))
    return np.stack(cols, axis=1)


def acted_qubits(run: P.Run, dots: tuple[str, ...]) -> tuple[str, ...]:
    """The dots the program acts on: those its steps name (rotations, frame
    updates, exchange, waits on named dots, reads) and the dots prepared in
    an entangled state, in register order."""
    named: set[str] = set()

    def visit(step):
        if isinstance(step, P.Parallel):
            for s in step.steps:
                visit(s)
        else:
            named.update(P.STEP_QUBITS[type(step)](step))

    for s in run.steps:
        visit(s)
    named.update(q for q, state, _ in run.prepare if state == "singlet")
    return tuple(q for q in dots if q in named)


# ---------------------------------------------------------------- observables

def trailing_reads(run: P.Run) -> list[tuple[str, ...]]:
    """The qubits of each ``read`` at the end of the run (after the last
    other step), in program order."""
    out = []
    for s in reversed(run.steps):
        if isinstance(s, P.Readout):
            out.append(tuple(s.qubits))
        elif not isinstance(s, P.Trigger):
            break
    return out[::-1]


def readouts(device, qubits: tuple[str, ...]) -> list[tuple[str, tuple[str, ...]]]:
    """What one ``read`` of ``qubits`` records: a pair whose coupling has a
    readout (both dots named) is read together (kind ``blockade`` or
    ``parity``); every other dot by its single-spin readout.  List of
    (kind, dots) in the order the dots are named."""
    out = []
    used: set[str] = set()
    for q in qubits:
        if q in used:
            continue
        pair = next((c for c in device.couplings if c.readout is not None and q in c.dots
                     and all(x in qubits and x not in used for x in c.dots)), None)
        if pair is not None:
            out.append((pair.readout.kind, tuple(pair.dots)))
            used.update(pair.dots)
        else:
            out.append(("spin", (q,)))
            used.add(q)
    return out


def _probability(kind: str, rho: np.ndarray, pos, n: int) -> float:
    if kind == "spin":
        r = partial_trace(rho, pos, n)
        return float(np.clip(np.real(r[0, 0]), 0.0, 1.0))
    r = partial_trace(rho, pos, n)
    if kind == "blockade":
        p = np.real(SINGLET.conj() @ r @ SINGLET)
    else:
        p = np.real(np.trace(EVEN @ r))
    return float(np.clip(p, 0.0, 1.0))


LABELS = {"spin": "P(up) {}", "blockade": "P(singlet) {}", "parity": "P(even) {}"}


def observables(run: P.Run, device, dots: tuple[str, ...], rho: np.ndarray,
                rho_prepared: np.ndarray, rho_target: np.ndarray,
                shots: int = 0) -> tuple[Observable, ...]:
    """The observables of a run's trailing reads.

    Parameters
    ----------
    rho, rho_prepared, rho_target : (2^n, 2^n) arrays, qubit frames
        The simulated final state from the declared initial state, the same
        from the initial state with the devices' preparation errors, and the
        ideal circuit's final state.
    shots : int
        Repetitions of the experiment (0: none given): expected counts
        N·p and the binomial standard deviation √(p(1−p)/N) of the recorded
        probability (common practice, no source).
    """
    n = len(dots)
    out = []
    for qubits in trailing_reads(run):
        for kind, group in readouts(device, qubits):
            pos = [dots.index(q) for q in group]
            ideal = _probability(kind, rho, pos, n)
            prepared = _probability(kind, rho_prepared, pos, n)
            target = _probability(kind, rho_target, pos, n)
            if kind == "spin":
                f_yes, f_no = RO.dot_fidelities(device, group[0])
                obs_kind = RO.SPIN
            else:
                f_yes, f_no = RO.pair_fidelities(device.coupling(*group))
                obs_kind = RO.OBSERVABLE_OF[kind]
            measured = RO.recorded(prepared, f_yes, f_no)
            label = LABELS[kind].format("-".join(group))
            counts = error = None
            if shots:
                counts = shots * measured
                error = math.sqrt(max(measured * (1 - measured), 0.0) / shots)
            out.append(Observable(label, obs_kind, tuple(group), ideal, measured, target,
                                  int(shots), counts, error))
    return tuple(out)


def prepared_state(rho0: np.ndarray, errors, n: int) -> np.ndarray:
    """The initial state with a preparation error p_k on each dot: the
    channel ρ -> (1 − p)·ρ + p·XρX applied per dot (a flip of the prepared
    spin with probability p; docs/device.md)."""
    X = np.array([[0.0, 1.0], [1.0, 0.0]], dtype=complex)
    rho = rho0
    for k, p in enumerate(errors):
        if p <= 0:
            continue
        Xk = np.kron(np.kron(np.eye(2 ** k), X), np.eye(2 ** (n - k - 1)))
        rho = (1 - p) * rho + p * (Xk @ rho @ Xk)
    return rho


# ---------------------------------------------------------------- one run, assessed

def assess(run: P.Run, device, dots: tuple[str, ...], S: np.ndarray | None, rho: np.ndarray,
           psi0: np.ndarray, U: np.ndarray, frames, *, scope: str = "program", shots: int = 0,
           rerun=None) -> dict:
    """The whole-run fidelities on the scope's qubits and the observables of
    one simulated run.

    Parameters
    ----------
    S : (4^n, 4^n) array or None
        The run's channel on the qubit levels, in the rotating frames
        (None above five qubits).
    rho : (2^n, 2^n) array
        The final state from ``psi0``, rotating frames.
    psi0 : (2^n,) array
        The declared initial state.
    U : (2^n, 2^n) array
        The ideal circuit, qubit frames.
    frames : sequence of float
        The qubits' frame angles at the end of the run.
    scope : "program" or "register"
        Fidelities of the qubits the program acts on (:func:`acted_qubits`;
        the whole register when it acts on all or none), or of the whole
        register.
    rerun : callable, optional
        ``rerun(rho0)`` -> final state (rotating frames) from another
        initial state: needed for the preparation errors when ``S`` is None.

    Returns
    -------
    dict
        ``f_pro`` (None without ``S``), ``f_avg``, ``f_state``,
        ``qubits`` (the scope's dots), ``observables``.
    """
    if scope not in SCOPES:
        raise ValueError(f"unknown fidelity scope {scope!r}; use {' or '.join(SCOPES)}")
    n = len(dots)
    rho0 = np.outer(psi0, psi0.conj())
    rq = F.rho_to_qubit_frames(rho, frames)
    Sq = None if S is None else F.to_qubit_frames(S, [0.0] * n, frames)
    acted = acted_qubits(run, dots) if scope == "program" else dots
    keep = [dots.index(q) for q in acted]
    if 0 < len(keep) < n:
        S_a, U_a, rho_a, ideal_a = restrict(Sq, U, rq, rho0, keep, n)
        qubits = tuple(acted)
    else:
        S_a, U_a, rho_a, ideal_a = Sq, U, rq, U @ rho0 @ U.conj().T
        qubits = tuple(dots)
    f_pro = f_avg = None
    if S_a is not None:
        f_pro = F.process_fidelity(S_a, U_a)
        f_avg = F.average_fidelity(f_pro, U_a.shape[0])
    f_state = float(np.real(np.trace(ideal_a @ rho_a)))
    obs = ()
    if trailing_reads(run):
        errors = [RO.preparation_error(device, q) for q in dots]
        if any(p > 0 for p in errors):
            rho0p = prepared_state(rho0, errors, n)
            if S is not None:
                d = rho0p.shape[0]
                rho_p = (S @ rho0p.reshape(-1, order="F")).reshape(d, d, order="F")
            elif rerun is not None:
                rho_p = rerun(rho0p)
            else:
                raise ValueError("preparation errors above five qubits need rerun")
            rqp = F.rho_to_qubit_frames(rho_p, frames)
        else:
            rqp = rq
        obs = observables(run, device, dots, rq, rqp, U @ rho0 @ U.conj().T, shots)
    return {"f_pro": f_pro, "f_avg": f_avg, "f_state": f_state, "qubits": qubits,
            "observables": obs}
