"""Integrators for the register model.

``ReferenceEngine`` hands the piecewise-constant model to qutip's general
Lindblad solver ``mesolve`` (adaptive ODE integration, step coefficients,
the step bounded by the sub-step so no coefficient change is skipped).  It
is slow and is the reference the fast engine is checked against.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np

from .model import Model, NoisePoint


@dataclass
class Evolution:
    superop: np.ndarray | None      # d²×d² channel (column stacking), rotating frames
    rho: np.ndarray | None          # final density matrix, rotating frames
    traces: dict                    # {"t": times (s, from the run start), dot: P(up)(t)}
    stats: dict


class ReferenceEngine:
    """qutip ``mesolve`` on the model (tolerances tightened: rtol 1e-10,
    atol 1e-12 by default; the step is bounded by the sub-step)."""

    name = "reference"

    def __init__(self, rtol: float = 1e-10, atol: float = 1e-12):
        self.rtol, self.atol = rtol, atol
        self.calls = 0

    def _operators(self, n: int):
        import qutip as qt
        I = qt.qeye(2)
        sp = qt.Qobj(np.array([[0, 1], [0, 0]], dtype=complex))
        sz = qt.Qobj(np.diag([1.0, -1.0]).astype(complex))

        def at(o, k):
            return qt.tensor([o if i == k else I for i in range(n)])
        return ([at(sp, k) for k in range(n)], [at(sp.dag(), k) for k in range(n)],
                [at(sz, k) for k in range(n)], qt.tensor([I] * n))

    def evolve(self, model: Model, point: NoisePoint, *, rho0: np.ndarray | None = None,
               process: bool = False, trace_points: int = 0) -> Evolution:
        import qutip as qt
        t0 = time.perf_counter()
        n = model.n
        splus, sminus, sz, ident = self._operators(n)
        K, h = model.k, model.h
        edges = np.arange(K + 1) * h
        two_pi = 2 * math.pi
        H = []
        static = 0 * ident

        def coef(arr):
            return qt.coefficient(np.append(arr, arr[-1] if len(arr) else 0), tlist=edges, order=0)

        for k, c in model.drive.items():
            H.append([two_pi * splus[k], coef(c)])
            H.append([two_pi * sminus[k], coef(np.conj(c))])
        for k, d in enumerate(point.detuning):
            if d:
                static = static + two_pi * d / 2 * sz[k]
        for i, p in enumerate(model.pairs):
            J, F = p.coefficients(point.dv[i] if point.dv else 0.0)
            H.append([two_pi * sz[p.a] * sz[p.b] / 4, coef(J)])
            H.append([two_pi * splus[p.a] * sminus[p.b] / 2, coef(F)])
            H.append([two_pi * sminus[p.a] * splus[p.b] / 2, coef(np.conj(F))])
        Hevo = qt.QobjEvo([static] + H) if H else static
        c_ops = []
        for k, (down, up, gphi) in enumerate(model.relax):
            to_ground = splus[k] if model.ground_up[k] else sminus[k]
            if down > 0:
                c_ops.append(math.sqrt(down) * to_ground)
            if up > 0:
                c_ops.append(math.sqrt(up) * to_ground.dag())
            if gphi > 0:
                c_ops.append(math.sqrt(gphi / 2) * sz[k])
        opts = {"rtol": self.rtol, "atol": self.atol, "max_step": h, "nsteps": 10 ** 9,
                "progress_bar": False}
        T = K * h
        S = rho = None
        traces: dict = {}
        if process:
            S0 = qt.to_super(ident)
            res = qt.mesolve(Hevo, S0, [0.0, T], c_ops, options=opts)
            S = res.states[-1].full()
            self.calls += 1
        if rho0 is not None:
            times = np.linspace(0.0, T, max(trace_points, 2))
            r0 = qt.Qobj(rho0, dims=[[2] * n, [2] * n])
            res = qt.mesolve(Hevo, r0, times, c_ops, options=opts)
            rho = res.states[-1].full()
            self.calls += 1
            if trace_points:
                traces["t"] = model.t0 + times
                for k in range(n):
                    up = (ident + sz[k]) / 2
                    traces[k] = np.array([qt.expect(up, s) for s in res.states])
        return Evolution(S, rho, traces, {"wall_s": time.perf_counter() - t0})


class FastEngine:
    """Exact propagation of the piecewise-constant model: on every sub-step
    the Lindblad generator L is constant, so the state is multiplied by
    exp(L·h).  Identical sub-steps (idle stretches, repeated pulses) share one
    exponential, and runs of an identical sub-step are taken by repeated
    squaring.  Agrees with :class:`ReferenceEngine` to the reference solver's
    tolerance (tests/test_simulate.py)."""

    name = "fast"

    def __init__(self):
        self.calls = 0
        self.exponentials = 0
        self.cache_hits = 0

    @staticmethod
    def _ops(n: int):
        from .fidelity import SP, SM, SZ, op
        return ([op(SP, k, n) for k in range(n)], [op(SM, k, n) for k in range(n)],
                [op(SZ, k, n) for k in range(n)])

    def _generator_parts(self, model: Model, point: NoisePoint):
        """Operators and per-sub-step coefficients of H, and the dissipator."""
        n = model.n
        sp, sm, sz = self._ops(n)
        d = 2 ** n
        ops, coefs = [], []
        for k, c in model.drive.items():
            ops += [sp[k], sm[k]]
            coefs += [c, np.conj(c)]
        static = np.zeros((d, d), dtype=complex)
        for k, det in enumerate(point.detuning):
            if det:
                static += det / 2 * sz[k]
        for i, p in enumerate(model.pairs):
            J, F = p.coefficients(point.dv[i] if point.dv else 0.0)
            ops += [sz[p.a] @ sz[p.b] / 4, sp[p.a] @ sm[p.b] / 2, sm[p.a] @ sp[p.b] / 2]
            coefs += [J.astype(complex), F, np.conj(F)]
        eye = np.eye(d, dtype=complex)
        D = np.zeros((d * d, d * d), dtype=complex)
        for k, (down, up, gphi) in enumerate(model.relax):
            to_ground = sp[k] if model.ground_up[k] else sm[k]
            for rate, c in ((down, to_ground), (up, to_ground.conj().T), (gphi / 2, sz[k])):
                if rate > 0:
                    cdc = c.conj().T @ c
                    D += rate * (np.kron(c.conj(), c) - 0.5 * np.kron(eye, cdc) - 0.5 * np.kron(cdc.T, eye))
        return ops, (np.array(coefs).T if coefs else np.zeros((model.k, 0))), static, D

    def _liouvillian(self, H: np.ndarray, D: np.ndarray) -> np.ndarray:
        d = H.shape[-1]
        eye = np.eye(d, dtype=complex)
        # vec(Hρ) = (1 ⊗ H)vec ρ, vec(ρH) = (Hᵀ ⊗ 1)vec ρ  (column stacking)
        return -2j * math.pi * (np.kron(eye, H) - np.kron(H.T, eye)) + D

    def evolve(self, model: Model, point: NoisePoint, *, rho0: np.ndarray | None = None,
               process: bool = False, trace_points: int = 0) -> Evolution:
        from scipy.linalg import expm
        t0 = time.perf_counter()
        ops, C, static, D = self._generator_parts(model, point)
        d = 2 ** model.n
        K, h = model.k, model.h
        # stretches of equal consecutive sub-steps; each distinct sub-step is
        # exponentiated once, all of them in one batched call
        if C.shape[1]:
            change = np.ones(K, dtype=bool)
            change[1:] = np.any(C[1:] != C[:-1], axis=1)
            starts = np.flatnonzero(change)
            rows = C[starts]
            uniq, inverse = np.unique(rows, axis=0, return_inverse=True)
            inverse = inverse.ravel()
        else:
            starts = np.array([0])
            uniq = np.zeros((1, 0))
            inverse = np.zeros(1, dtype=int)
        lengths = np.diff(np.append(starts, K))
        Hs = np.broadcast_to(static, (len(uniq), d, d)).copy()
        if C.shape[1]:
            O = np.stack(ops)                                   # (terms, d, d)
            Hs += np.einsum("ut,tij->uij", uniq, O)
        eye = np.eye(d, dtype=complex)
        Ls = (-2j * math.pi * (np.einsum("ij,ukl->uikjl", eye, Hs).reshape(len(uniq), d * d, d * d)
                               - np.einsum("ulk,ij->ukilj", Hs, eye).reshape(len(uniq), d * d, d * d))
              + D[None])
        props = expm(Ls * h)
        self.exponentials += len(uniq)
        self.cache_hits += len(starts) - len(uniq)
        S = np.eye(d * d, dtype=complex) if process else None
        rho_vec = None if rho0 is None else rho0.reshape(-1, order="F").astype(complex)
        marks = (np.unique(np.linspace(0, K, max(trace_points, 2)).round().astype(int))
                 if trace_points and rho0 is not None else np.array([], dtype=int))
        trace_t, trace_rho = [0.0], [None if rho_vec is None else rho_vec.copy()]
        mi = 1 if len(marks) and marks[0] == 0 else 0
        pos = 0
        if not len(marks):
            # no intermediate states wanted: multiply the whole chain in a balanced
            # tree of batched products (later factors on the left)
            mats = props[inverse]
            long = np.flatnonzero(lengths > 1)
            if len(long):
                mats = mats.copy()
                for i in long:
                    mats[i] = np.linalg.matrix_power(mats[i], int(lengths[i]))
            while len(mats) > 1:
                if len(mats) % 2:
                    last = mats[-1:]
                    prod = np.matmul(mats[1:-1:2], mats[0:-1:2])
                    mats = np.concatenate([prod, last])
                else:
                    mats = np.matmul(mats[1::2], mats[0::2])
            total = mats[0]
            if S is not None:
                S = total @ S
            if rho_vec is not None:
                rho_vec = total @ rho_vec
            lengths = np.array([], dtype=int)
        for P, L in zip(props[inverse] if len(lengths) else [], lengths):
            L = int(L)
            while L:
                r = L
                if mi < len(marks) and marks[mi] <= pos + L:
                    r = int(marks[mi] - pos)
                if r:
                    Pr = P if r == 1 else np.linalg.matrix_power(P, r)
                    if S is not None:
                        S = Pr @ S
                    if rho_vec is not None:
                        rho_vec = Pr @ rho_vec
                    pos += r
                    L -= r
                if mi < len(marks) and marks[mi] == pos:
                    trace_t.append(pos * h)
                    trace_rho.append(rho_vec.copy())
                    mi += 1
        rho = None if rho_vec is None else rho_vec.reshape(d, d, order="F")
        traces: dict = {}
        if len(marks) and rho0 is not None:
            from .fidelity import SZ, op
            n = model.n
            traces["t"] = model.t0 + np.array(trace_t)
            R = np.stack([r.reshape(d, d, order="F") for r in trace_rho])
            for k in range(n):
                up = np.diag((np.eye(d) + op(SZ, k, n)) / 2).real
                traces[k] = np.real(np.einsum("nii,i->n", R, up))
        self.calls += 1
        return Evolution(S, rho, traces, {"wall_s": time.perf_counter() - t0,
                                          "exponentials": len(uniq), "stretches": len(starts)})
