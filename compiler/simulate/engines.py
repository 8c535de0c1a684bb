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
    ptm: np.ndarray | None = None   # the channel as a Pauli transfer matrix (fast engine)
    pauli: np.ndarray | None = None  # the state's Pauli coefficients (fast engine)


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

    def average(self, model: Model, points, *, rho0=None, process=False, trace_points=0):
        """Weighted sum over quadrature points, one ``mesolve`` per point (and
        per state or process); populations against time for the first point."""
        S = rho = None
        traces: dict = {}
        t0 = time.perf_counter()
        for i, p in enumerate(points):
            ev = self.evolve(model, p, process=process, rho0=rho0,
                             trace_points=trace_points if i == 0 else 0)
            if process:
                S = p.weight * ev.superop if S is None else S + p.weight * ev.superop
            if rho0 is not None:
                rho = p.weight * ev.rho if rho is None else rho + p.weight * ev.rho
            if i == 0:
                traces = ev.traces
        return Evolution(S, rho, traces, {"wall_s": time.perf_counter() - t0})

    def stats(self) -> dict:
        return {"solver_calls": self.calls}


from .cluster import FastEngine  # noqa: E402,F401  (the default engine, re-exported)
