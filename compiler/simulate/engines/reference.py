"""The reference engine: qutip's general Lindblad solver ``mesolve``.

The piecewise-constant model is handed to ``mesolve`` (adaptive ODE
integration, step coefficients, the step bounded by the sub-step so no
coefficient change is skipped).  It is slow and is the reference the fast
engine is checked against.  qutip's default multistep (Adams) method is
tried first; at the tight tolerances it can give up on a model whose
coefficients jump every sub-step (a change of 1e-15 in a burst's samples
decided it, measured), and then the run is solved again with BDF (one-step
restarts cope with the jumps; about twice as slow), counted in
``stats()["bdf_retries"]``.  It reads only the :class:`~..model.Model` and
builds every operator from the dots' own operators, so it works for any
number of levels per dot.
"""

from __future__ import annotations

import math
import time
import warnings

import numpy as np

from ..model import LevelPair, Model, NoisePoint, dot_operator, embed_pair
from ..types import Evolution


class ReferenceEngine:
    """qutip ``mesolve`` on the model (tolerances tightened: rtol 1e-10,
    atol 1e-12 by default; the step is bounded by the sub-step)."""

    name = "reference"

    def __init__(self, rtol: float = 1e-10, atol: float = 1e-12):
        self.rtol, self.atol = rtol, atol
        self.calls = 0
        self.bdf_retries = 0

    def _mesolve(self, H, state, times, c_ops, opts):
        """``mesolve`` with qutip's default method, and with BDF when that one
        gives up (module notes)."""
        import qutip as qt
        from qutip.solver.integrator import IntegratorException
        try:
            with warnings.catch_warnings():       # its own notice of giving up: handled here
                warnings.filterwarnings("ignore", ".*Repeated error test failures", UserWarning)
                return qt.mesolve(H, state, times, c_ops, options=opts)
        except IntegratorException:
            self.bdf_retries += 1
            return qt.mesolve(H, state, times, c_ops, options={**opts, "method": "bdf"})

    @staticmethod
    def _embedder(model: Model):
        """at(operator name, dot) -> the operator on the whole register."""
        import qutip as qt
        eyes = [qt.qeye(lv) for lv in model.levels]

        def at(name: str, k: int):
            o = qt.Qobj(dot_operator(model.dots[k], name))
            return qt.tensor([o if i == k else eyes[i] for i in range(model.n)])
        return at, qt.tensor(eyes)

    def evolve(self, model: Model, point: NoisePoint, *, rho0: np.ndarray | None = None,
               process: bool = False, trace_points: int = 0) -> Evolution:
        import qutip as qt
        t0 = time.perf_counter()
        n = model.n
        at, ident = self._embedder(model)
        K, h = model.k, model.h
        edges = np.arange(K + 1) * h
        two_pi = 2 * math.pi
        H = []
        static = 0 * ident

        def coef(arr):
            return qt.coefficient(np.append(arr, arr[-1] if len(arr) else 0), tlist=edges, order=0)

        for k, c in model.drive.items():
            H.append([two_pi * at("raise", k), coef(c)])
            H.append([two_pi * at("lower", k), coef(np.conj(c))])
        for k, terms in model.drive_terms.items():
            for name, c in terms:
                o = at(name, k)
                H.append([two_pi * o, coef(c)])
                H.append([two_pi * o.dag(), coef(np.conj(c))])
        for k, d in enumerate(point.detuning):
            if d:
                static = static + two_pi * d / 2 * at("z", k)
            prof = model.detuning_profile(k, point.modes) if point.modes else None
            if prof is not None:                    # gate-band modes: detuning in time
                H.append([two_pi * at("z", k) / 2, coef(prof.astype(complex))])
        dims = [list(model.levels), list(model.levels)]
        for i, p in enumerate(model.pairs):
            if isinstance(p, LevelPair):
                _, Fs = p.coefficients(point.dv[i] if point.dv else 0.0)
                for (nu, M), F in zip(p.parts, Fs):
                    o = qt.Qobj(embed_pair(M, p.a, p.b, model.levels), dims=dims)
                    if nu == 0:
                        H.append([two_pi * o, coef(F.real)])
                    else:
                        H.append([two_pi * o, coef(F)])
                        H.append([two_pi * o.dag(), coef(np.conj(F))])
                continue
            J, F = p.coefficients(point.dv[i] if point.dv else 0.0)
            H.append([two_pi * at("z", p.a) * at("z", p.b) / 4, coef(J)])
            H.append([two_pi * at("raise", p.a) * at("lower", p.b) / 2, coef(F)])
            H.append([two_pi * at("lower", p.a) * at("raise", p.b) / 2, coef(np.conj(F))])
        Hevo = qt.QobjEvo([static] + H) if H else static
        c_ops = [math.sqrt(d.rate) * at(d.operator, d.dot) for d in model.dissipators]
        opts = {"rtol": self.rtol, "atol": self.atol, "max_step": h, "nsteps": 10 ** 9,
                "progress_bar": False}
        T = K * h
        S = rho = None
        traces: dict = {}
        if process:
            S0 = qt.to_super(ident)
            res = self._mesolve(Hevo, S0, [0.0, T], c_ops, opts)
            S = res.states[-1].full()
            self.calls += 1
        if rho0 is not None:
            times = np.linspace(0.0, T, max(trace_points, 2))
            dims = list(model.levels)
            r0 = qt.Qobj(rho0, dims=[dims, dims])
            res = self._mesolve(Hevo, r0, times, c_ops, opts)
            rho = res.states[-1].full()
            self.calls += 1
            if trace_points:
                traces["t"] = model.t0 + times
                for k in range(n):
                    up = at("up", k)
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
        return {"solver_calls": self.calls, "bdf_retries": self.bdf_retries}
