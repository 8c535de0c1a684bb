"""The fast engine: exact propagation of the piecewise-constant model, split
into clusters of dots that interact.

This is the fast path for two levels per dot (the Pauli representation of
:mod:`.pauli`); a model with other level counts (spin–valley dots) takes the
general path of :mod:`.levels` (the same method with complex
superoperators), and the reference engine (:mod:`.reference`) takes any.

Method (docs/simulate.md, "The fast engine"):

1. The model's Hamiltonian is constant on every sub-step, so the Lindblad
   generator is too and a sub-step is the channel exp(L·h), exactly.
2. The run is cut into *segments* in which the set of exchange pairs that are
   on does not change.  In a segment the register splits into *clusters*:
   connected groups of dots joined by pairs that are on; a dot that only
   idles or is only driven is a cluster of one.  Drive never joins dots (each
   dot sees the shared line through its own rotating frame), so clusters come
   from exchange alone.  A closed barrier still leaves a small exchange,
   treated within the accuracy ``exchange_accuracy`` (default 1e-6 in
   average gate fidelity; 0 keeps it on, exact):
   (a) *dropped* on the sub-steps where it is weakest, weakest first, while
   the phase φ = 2π∫J dt summed over every dropped sub-step stays within
   (4/3)·accuracy: ‖J·S1·S2‖ = ¾J, so dropping it changes the channel by at
   most 2·¾·φ in diamond norm and the average gate fidelity by at most ¾·φ
   (Duhamel; |ΔF| ≤ ½‖ΔE‖◇);
   (b) when more is left than that (idle barriers at 1 Hz…1 kHz), the
   accuracy is split in halves, one for dropping, one for the *weak*
   treatment of :mod:`.weak`: the pair's dots keep their own exact channels
   (or, beside an exchange pulse, the channel of the pulse's exact pair)
   and the exchange enters per chunk to first order in the interaction
   picture (error second order per chunk, bound Σ(e^y − 1 − y); module notes
   there), so a weak neighbour never joins a pulse's cluster;
   (c) what is neither stays on exactly (the pair's dots form one cluster).
   The dropped phase and the bounds are recorded in the statistics
   (``neglected_exchange_rad``, ``weak_exchange_bound``,
   ``exchange_error_bound`` = ¾·φ + weak bound).  Before any work every exact
   cluster's memory and time are estimated (statistics ``estimate``); one
   over ``memory_limit`` raises :class:`ClusterTooLarge`.
3. Each cluster's channel over a segment is a small real Pauli transfer
   matrix (4^c × 4^c for c dots): runs of identical sub-steps take a single
   exponential exp(L·h·n) (or powers by squaring); identical contents across
   the run (the same gate 100 times, every wait) hit a cache; all
   exponentials of a segment are taken in one batched call.  An exchange
   pair's flip-flop term turns at the Zeeman difference δ in the rotating
   frames; the cluster is taken into frames turning with it (z rotations,
   which commute with everything else in the generator), where a flat-top
   pulse is constant, and rotated back at the segment's ends (exact).
4. Channels are not applied to the register state at once: each group of
   dots keeps a *pending* channel, and a new channel on the same dots (or a
   subset) is multiplied into it when that costs less than applying it to
   the state by itself (K³ against 4^N·B·k for a k × k channel into a
   K × K one, B the state's columns).  A pending channel is applied only
   when a channel on an overlapping but different group arrives, when a
   much smaller one would cost more to multiply in, when populations are
   recorded, or at the end; so an idle dot's channel touches the state
   once.  Channels on disjoint dots commute, so this is exact.
5. The state (or, for the process, the identity map as a batch of states) is
   a real array of Pauli coefficients with one axis of 4 per dot; applying a
   channel is one matrix product on a reshaped view, never a 4^N × 4^N
   matrix.  Noise quadrature points are a leading batch axis: a cluster's
   channel is computed once per distinct value of *its own* noise variables
   (the T2* detuning of its dots, the charge offset of its pairs).
"""

from __future__ import annotations

import hashlib
import math
import time
import dataclasses
from dataclasses import dataclass

import numpy as np

from ...pulses import ordered_product
from ...threads import one_thread
from ..model import Model, NoisePoint, dot_operator
from ..types import Evolution
from . import memo
from . import pauli as PL
from . import weak as weak_mod
from .clusters import clusters, noise_variants

KAPPA = 1.1                    # weak exchange: chunks short enough that ‖E₀⁻¹‖◇ ≤ 1.1 (weak.py)
FLOP_RATE = 2e10               # flop/s the estimate assumes (see _check_plan)
COEF_BLOCK_BYTES = 64 * 2 ** 20  # exact path: a segment's coefficients in blocks of this size
QUIET_MIN = 16                 # weak exchange: quiet stretches at least this long are exact
SLOW_NOTE_S = 20.0             # an evaluation estimated at least this long is announced (notify)
SMALL = 16                     # exponentials up to this size by our batched Taylor series (faster here)


def _expm(A: np.ndarray) -> np.ndarray:
    return PL.expm_any(A, SMALL)


# ------------------------------------------------------------------ one-dot and two-dot operators

_X, _Y, _Z = PL.SIGMA[1], PL.SIGMA[2], PL.SIGMA[3]
_SP = np.array([[0, 1], [0, 0]], dtype=complex)
_SM = _SP.T.copy()
_I2 = np.eye(2, dtype=complex)


def _at(o: np.ndarray, k: int, c: int) -> np.ndarray:
    out = np.eye(1, dtype=complex)
    for i in range(c):
        out = np.kron(out, o if i == k else _I2)
    return out


@dataclass
class _Pieces:
    """Generator pieces of one cluster, real PTMs of size 4^c."""
    dots: tuple[int, ...]
    pairs: tuple[int, ...]
    drive: dict                 # dot -> (G_x, G_y): generators of σx and σy
    det: dict                   # dot -> G of σz/2
    pair: dict                  # pair -> (G_zz/4, G_A1, G_A2)
    base: np.ndarray            # dissipator sum
    zrot: dict                  # dot -> Z_q, generator of a z rotation: exp(ϑ·Z_q) = Rz(ϑ) on q
    s_drive: float = 1.0        # R(ϑ)⁻¹·G_x·R(ϑ) = cos(sϑ)G_x + sin(sϑ)G_y
    s_pair: float = 1.0         # R(ϑ_a)⁻¹·G_A1·R(ϑ_a) = cos(sϑ_a)G_A1 + sin(sϑ_a)G_A2
    w: dict = None              # dot -> frame frequency (Hz) that makes the flip-flops static
    zone: np.ndarray = None     # one dot's 4×4 z-rotation generator


# clusters' generator pieces by what they are built from (the dots, their
# dissipators, the pairs and their Zeeman differences): shared by every
# engine of the process (a report's evaluations, a sweep's points), so a
# three-dot cluster's 64 × 64 pieces (about 25 ms) are built once; at most
# PIECES_KEPT clusters and PIECES_BYTES of arrays (a five-dot cluster's
# pieces are about 200 MB: not kept), emptied when full
_PIECES: dict = {}
_PIECES_BYTES = [0]
PIECES_KEPT = 256
PIECES_BYTES = 128 * 2 ** 20


def _rotation_sign(G1: np.ndarray, G2: np.ndarray, Z: np.ndarray) -> float:
    """s such that R⁻¹·G1·R = cos(sϑ)G1 + sin(sϑ)G2 for R = exp(ϑZ) (checked)."""
    from scipy.linalg import expm
    th = 0.3
    R = expm(th * Z)
    X = np.linalg.solve(R, G1 @ R)
    c = np.sum(X * G1) / np.sum(G1 * G1)
    sn = np.sum(X * G2) / np.sum(G2 * G2)
    sign = 1.0 if sn >= 0 else -1.0
    assert abs(c - math.cos(th)) < 1e-9 and abs(abs(sn) - math.sin(th)) < 1e-9, "not a rotation"
    X2 = np.linalg.solve(R, G2 @ R)
    assert np.allclose(X2, -math.sin(sign * th) * G1 + math.cos(sign * th) * G2, atol=1e-9)
    return sign


class ClusterTooLarge(Exception):
    """A run whose largest cluster would not fit the memory limit: ``info``
    names its dots, the pairs that join them (J and barrier voltage), its
    dimension, noise variants, bytes, the limit and the time it forms
    (:func:`compiler.simulate.run.simulate` turns it into the user's error)."""

    def __init__(self, info: dict):
        self.info = info
        super().__init__(f"cluster of {len(info['dots'])} dots needs {info['bytes']} bytes, "
                         f"above the limit of {info['limit']}")


class FastEngine:
    """Exact cluster propagation of the piecewise-constant model (module notes)."""

    name = "fast"

    def __init__(self, exchange_accuracy: float = 1e-6, max_batch_bytes: int = 512 * 2 ** 20,
                 cache_entries: int = 20000, *, exchange_budget: float | None = None,
                 weak_exchange: bool = True, memory_limit: int = 0, quiet_exact: bool = True):
        # memory_limit: bytes a run may take (0: not checked; the simulation
        # gives half the memory available, compiler.limits); a run whose
        # largest cluster would not fit raises ClusterTooLarge before any work
        self.memory_limit = memory_limit
        # the summed phase of dropped exchange, rad: |ΔF_avg| ≤ ¾·phase (module notes)
        self.exchange_accuracy = exchange_accuracy
        self.exchange_budget = (4.0 / 3.0 * exchange_accuracy if exchange_budget is None
                                else exchange_budget)
        self.max_batch_bytes = max_batch_bytes
        self.cache_entries = cache_entries
        self.calls = 0
        self.exponentials = 0
        self.cache_hits = 0
        self.applications = 0
        self.fusions = 0
        self.neglected_exchange_rad = 0.0
        self.weak_exchange_bound = 0.0
        self.exchange_bound_max = 0.0
        self.largest_cluster = 0
        self.weak_exchange = weak_exchange
        # quiet stretches of weak pairs exactly where that is cheaper (_quiet_exact);
        # False keeps them in the weak treatment (to compare the two)
        self.quiet_exact = quiet_exact
        self._weak_bound_now = 0.0
        self._weak_chunks_now = 0
        self._weak_rules_now = set()
        self._estimate_now = {}
        self._cache: dict = {}
        self._memo = memo.Memo()
        self.reused = 0

    # -------------------------------------------------------------- public

    def stats(self) -> dict:
        return {"solver_calls": self.calls, "exponentials": self.exponentials,
                "cache_hits": self.cache_hits, "channel_applications": self.applications,
                "channel_fusions": self.fusions, "largest_cluster": self.largest_cluster,
                "reused_evaluations": self.reused,
                "neglected_exchange_rad": self.neglected_exchange_rad,
                "weak_exchange_bound": self.weak_exchange_bound,
                # the largest of the evaluations' own sums (the sum of the two
                # maxima could pair one evaluation's dropped phase with another's
                # weak bound and exceed the accuracy that every evaluation kept)
                "exchange_error_bound": self.exchange_bound_max}

    def evolve(self, model: Model, point: NoisePoint, *, rho0=None, process=False, trace_points=0):
        return self.average(model, [NoisePoint(point.detuning, point.dv, 1.0, point.modes)], rho0=rho0,
                            process=process, trace_points=trace_points)

    def average(self, model: Model, points, *, rho0=None, process=False, trace_points=0,
                pauli0=None):
        """Weighted sum over quadrature points of the evolved state and/or
        process (the weights sum to one), with populations against time for
        the first point.  ``pauli0`` (Pauli coefficients, shape (4**n,)) may
        replace ``rho0`` for registers too large for a dense density matrix;
        the result then holds only ``pauli``.

        An evaluation of the same content as an earlier one of this engine
        (model, points, initial state, options, the engine's settings) is
        handed out again as a copy (:mod:`.memo`; statistic
        ``reused_evaluations``)."""
        key = memo.content_digest("fast", model, list(points), rho0, process, trace_points,
                                  pauli0, self._settings())
        got = self._memo.get(key)
        if got is not None:
            return self._reused(got)
        ev = self._average(model, points, rho0=rho0, process=process,
                           trace_points=trace_points, pauli0=pauli0)
        self._memo.put(key, ev)
        return ev

    def _settings(self) -> tuple:
        """What an evaluation depends on besides its arguments (the memo's key)."""
        return (self.exchange_accuracy, self.exchange_budget, self.weak_exchange,
                self.quiet_exact, self.memory_limit, self.max_batch_bytes)

    def _reused(self, ev: Evolution) -> Evolution:
        """A kept evaluation again: no work done, so its counters are zero."""
        self.reused += 1
        st = dict(ev.stats)
        for k in ("solver_calls", "exponentials", "cache_hits", "channel_applications",
                  "channel_fusions"):
            if k in st:
                st[k] = 0
        st["reused"] = True
        st["wall_s"] = 0.0
        return dataclasses.replace(ev, stats=st)

    def _average(self, model: Model, points, *, rho0, process, trace_points, pauli0):
        if any(lv != 2 for lv in model.levels):
            return self._levels_average(model, points, rho0=rho0, process=process,
                                        trace_points=trace_points, pauli0=pauli0)
        if pauli0 is not None:
            rho0 = np.asarray(pauli0, dtype=float)
        t0 = time.perf_counter()
        stats0 = self.stats()
        n = model.n
        width = (4 ** n if process else 0) + (1 if rho0 is not None else 0)
        per_point = 8 * 4 ** n * max(width, 1)
        chunk = max(1, int(self.max_batch_bytes // max(per_point, 1)))
        R_sum = r_sum = None
        traces: dict = {}
        self._largest_now = 0
        with one_thread():
            prep = self._prepare(model, points)
            self._check_plan(model, prep, points, 8 * 4 ** n * max(width, 1) * 2)
            for lo in range(0, len(points), chunk):
                idx = list(range(lo, min(len(points), lo + chunk)))
                state = self._initial(n, len(idx), process, rho0)
                marks = (np.unique(np.linspace(0, model.k, max(trace_points, 2)).round().astype(int))
                         if trace_points and rho0 is not None and lo == 0 else np.zeros(0, int))
                state, tr = self._run(model, prep, idx, state, marks)
                if lo == 0:
                    traces = tr
                w = np.array([points[i].weight for i in idx])
                # weighted sum over points; the state's columns: process block then rho
                acc = np.tensordot(w, state, axes=(0, 0))
                if process:
                    R = acc[:, :4 ** n]
                    R_sum = R if R_sum is None else R_sum + R
                if rho0 is not None:
                    r = acc[:, -1]
                    r_sum = r if r_sum is None else r_sum + r
        S = PL.ptm_to_super(R_sum) if process else None
        rho = PL.pauli_to_rho(r_sum, n) if rho0 is not None and pauli0 is None else None
        self.calls += 1
        now = self.stats()
        st = {k: now[k] - stats0[k] for k in now}
        st["largest_cluster"] = self._largest_now
        st["neglected_exchange_rad"] = self._neglected_now
        st["weak_exchange_bound"] = self._weak_bound_now
        st["weak_exchange_chunks"] = self._weak_chunks_now
        st["weak_exchange_rule"] = " and ".join(sorted(self._weak_rules_now)) or "none"
        st["estimate"] = self._estimate_now
        st["exchange_error_bound"] = 0.75 * self._neglected_now + self._weak_bound_now
        self.exchange_bound_max = max(self.exchange_bound_max, st["exchange_error_bound"])
        st["wall_s"] = time.perf_counter() - t0
        return Evolution(S, rho, traces, st, R_sum, r_sum)

    def _levels_average(self, model, points, *, rho0, process, trace_points, pauli0):
        """Models with dots of other than two levels: the general path (.levels)."""
        if pauli0 is not None:
            raise NotImplementedError("Pauli coefficients are for two-level dots only")
        from .levels import LevelsPath
        if getattr(self, "_levels", None) is None:
            self._levels = LevelsPath(self)
        stats0 = self.stats()
        self._largest_now = 0
        self._neglected_now = 0.0
        with one_thread():
            S, rho, traces, wall = self._levels.average(model, points, rho0=rho0,
                                                        process=process,
                                                        trace_points=trace_points,
                                                        slow_note_s=SLOW_NOTE_S)
        self.calls += 1
        now = self.stats()
        st = {k: now[k] - stats0[k] for k in now}
        st["largest_cluster"] = self._largest_now
        st["neglected_exchange_rad"] = self._neglected_now
        st["weak_exchange_bound"] = self._weak_bound_now
        st["weak_exchange_chunks"] = self._weak_chunks_now
        st["weak_exchange_rule"] = " and ".join(sorted(self._weak_rules_now)) or "none"
        st["exchange_error_bound"] = 0.75 * self._neglected_now + self._weak_bound_now
        self.exchange_bound_max = max(self.exchange_bound_max, st["exchange_error_bound"])
        st["estimate"] = self._estimate_now
        st["wall_s"] = wall
        return Evolution(S, rho, traces, st)

    # -------------------------------------------------------------- preparation

    def _prepare(self, model: Model, points) -> dict:
        """Coefficients per sub-step and the on/off pattern of every pair."""
        K, h = model.k, model.h
        drive = {q: (np.ascontiguousarray(c.real), np.ascontiguousarray(-c.imag))
                 for q, c in model.drive.items()}
        pair_coef: list[dict] = []
        jmax = []
        for i, p in enumerate(model.pairs):
            dvs = sorted({pt.dv[i] if pt.dv else 0.0 for pt in points})
            coefs = {}
            for dv in dvs:
                J, F = p.coefficients(dv)
                coefs[dv] = (np.ascontiguousarray(J), np.ascontiguousarray(F.real),
                             np.ascontiguousarray(F.imag))
            pair_coef.append(coefs)
            jmax.append(np.max(np.abs(np.stack([c[0] for c in coefs.values()])), axis=0))
        prep = {"drive": drive, "pairs": pair_coef, "points": list(points)}
        on, ip = self._weak_plan(model, prep, jmax, h, K)
        bounds = {0, K}
        for m in list(on) + list(ip):
            bounds.update((np.flatnonzero(m[1:] != m[:-1]) + 1).tolist())
        prep.update({"on": on, "ip": ip, "bounds": sorted(bounds)})
        return prep

    def _weak_plan(self, model: Model, prep: dict, jmax: list, h: float, K: int):
        """Which sub-steps of each pair are dropped, treated as weak (the
        interaction picture of :mod:`.weak`) or kept exactly: (on, weak)
        masks, weak ⊆ on.  The weakest exchange is dropped within the budget
        as before; when what is left holds exchange weak enough for the
        interaction picture, the accuracy is split in two halves, one for
        dropping and one for the weak treatment (module notes, point 2)."""
        on, total = self._drop(jmax, h, K, self.exchange_budget)
        ip = [np.zeros(K, dtype=bool) for _ in jmax]
        self._weak_bound_now = 0.0
        self._weak_chunks_now = 0
        self._weak_rules_now = set()
        if not self.weak_exchange or not K or not jmax or self.exchange_budget <= 0:
            self._set_neglected(total)
            return on, ip
        eps = 0.75 * self.exchange_budget / 2          # fidelity for the weak treatment
        # ‖B‖◇ ≤ 2π·(spread of H's eigenvalues) per pair and sub-step, at the worst
        # charge offset (weak.spread)
        xn = []
        for coefs in prep["pairs"]:
            nrm = np.max(np.stack([weak_mod.spread(J, np.hypot(Fr, Fi))
                                   for J, Fr, Fi in coefs.values()]), axis=0)
            xn.append(2 * math.pi * nrm * h)
        dn = {q: weak_mod.diss_norm([(d.rate, dot_operator(model.dots[q], d.operator))
                                     for d in model.dissipators_of(q)]) for q in range(model.n)}
        # a weak pair's correction acts on at most three dots (weak.MAX_UNION)
        dnorm = sum(sorted(dn.values())[-3:])
        # chunks last at most τ_max, so that ‖E₀⁻¹‖◇ ≤ κ = exp(‖L_D‖◇·τ_max) ≤ 1.1
        tau_max = math.log(KAPPA) / dnorm if dnorm > 0 else math.inf
        kmax = min(KAPPA, math.exp(dnorm * K * h))
        weak, ystar = self._weak_masks(on, xn, kmax, eps)
        if weak is None:
            self._set_neglected(total)
            return on, ip
        on, total = self._drop(jmax, h, K, self.exchange_budget / 2)
        # the weak treatment takes what dropping left of the accuracy (a tenth
        # kept for its quadrature and composition factors): ¾·φ + bound ≤ accuracy
        eps = 0.9 * 0.75 * (self.exchange_budget - total)
        weak, ystar = self._weak_masks(on, xn, kmax, eps)
        if weak is None:
            self._set_neglected(total)
            return on, ip
        # quiet stretches (nothing changes but the flip-flop's turn) are cheaper
        # exactly: the chosen sub-steps leave the weak set, and y* follows the
        # smaller sum Y of what stays (each sub-step still fits: y* only grows)
        if self.quiet_exact:
            weak = self._quiet_exact(model, prep, on, weak, K)
        Y = sum(float(x[w].sum()) for x, w in zip(xn, weak)) * kmax
        if Y <= 0:
            self._set_neglected(total)
            return on, ip
        ystar = 1.9 * eps / Y
        self._set_neglected(total)
        dets = {q: max((abs(pt.detuning[q]) if pt.detuning else 0.0) for pt in prep["points"])
                for q in range(model.n)}
        anorm = {}
        for q in range(model.n):
            re, im = prep["drive"].get(q, (None, None))
            prof = None
            for pt in prep["points"]:
                d = model.detuning_profile(q, pt.modes) if pt.modes else None
                if d is not None:
                    prof = np.abs(d) if prof is None else np.maximum(prof, np.abs(d))
            anorm[q] = weak_mod.one_dot_norms(re, im, dets[q], prof, dn[q], K)
        prep.update({"xn": xn, "ystar": ystar, "dnorm": dnorm, "anorm": anorm, "eps": eps,
                     "dn": dn,
                     "kappa": kmax, "tau_max": tau_max})
        return on, weak

    def _quiet_exact(self, model: Model, prep: dict, on: list, weak: list, K: int) -> list:
        """The weak masks without the *quiet stretches* that are cheaper taken
        exactly: runs of at least :data:`QUIET_MIN` sub-steps in which a weak
        pair's two dots keep their drive and detuning and the pair its J and
        |F| (its flip-flop only turns at δ, which the exact cluster's rotating
        frames cancel).  There the exact cluster takes one exponential per
        stretch and noise variant, where the weak treatment takes chunks of
        y ≤ y* (their number grows as the square of the exchange phase).
        Kept weak where that would make a cluster of more than three dots
        (:data:`.weak.MAX_UNION`) or one with a loop of pairs (a flip-flop
        no frame cancels: every sub-step distinct), and where a weak pair
        that is not quiet there shares a dot with it: that pair takes nodes
        in every sub-step, and on an exact cluster of two dots each node's
        transformed maps are 16 × 16 instead of 4 × 4 (≥ 16× the work: a
        burst on one dot beside two idle ones, as in the error budget's run
        with drive crosstalk off, took 30× the closed-barrier time)."""
        if K < QUIET_MIN:
            return weak
        same = {}
        pts = prep["points"]
        for q in range(model.n):
            # equal to 1e-12 of the largest value, as the exact path's runs
            # (_run_starts): a pulse's tail of 1e-45 Hz is a quiet sub-step
            ch = np.zeros(K, dtype=bool)
            ch[1:] = self._drive_changes(prep, q, 0, K)
            for pt in pts:
                d = model.detuning_profile(q, pt.modes) if pt.modes else None
                if d is not None:
                    ch[1:] |= np.abs(d[1:] - d[:-1]) > 1e-12 * float(np.abs(d).max())
            same[q] = ~ch
        cand = []
        for j, w in enumerate(weak):
            p = model.pairs[j]
            st = same[p.a] & same[p.b]
            st[1:] &= ~self._pair_changes(prep, j, 0, K)
            st[0] = False
            # runs of equal sub-steps: the first (where it changed) and the rest
            start = np.flatnonzero(~st)
            length = np.diff(np.append(start, K))
            long = length >= QUIET_MIN
            c = np.repeat(long, length) & w
            cand.append(c)
        # a pair that stays weak and is not quiet in a sub-step takes nodes
        # there: a quiet pair sharing a dot with it stays weak too (a quiet weak
        # pair takes its runs' exact integrals, no nodes, so nothing cascades)
        busy = [w & ~c for w, c in zip(weak, cand)]
        for j, c in enumerate(cand):
            p = model.pairs[j]
            for i, b in enumerate(busy):
                q = model.pairs[i]
                if i != j and {p.a, p.b} & {q.a, q.b}:
                    c &= ~b
        if not any(c.any() for c in cand):
            return weak
        # the clusters each distinct pattern of exact pairs would make
        exact = np.stack([m & ~(w & ~c) for m, w, c in zip(on, weak, cand)])
        if len(weak) <= 62:
            # each sub-step's pattern as one integer (a unique over the
            # columns of a boolean array sorts them as records: 5 ms for 4800)
            bit = np.arange(len(weak), dtype=np.int64)[:, None]
            ucode, inv = np.unique((exact.astype(np.int64) << bit).sum(axis=0), return_inverse=True)
            pats = ((ucode[None, :] >> bit) & 1).astype(bool)
        else:
            pats, inv = np.unique(exact, axis=1, return_inverse=True)
        bad = np.zeros(pats.shape[1], dtype=bool)
        for col in range(pats.shape[1]):
            act = [j for j in range(len(weak)) if pats[j, col]]
            edges = [(model.pairs[j].a, model.pairs[j].b) for j in act]
            for dots, prs in clusters(model.n, edges, act):
                if 4 ** len(dots) > weak_mod.MAX_UNION or len(prs) > len(dots) - 1:
                    if any(cand[j][inv == col].any() for j in prs):
                        bad[col] = True
        keep = ~bad[np.ravel(inv)]
        return [w & ~(c & keep) for w, c in zip(weak, cand)]

    @staticmethod
    def _weak_masks(on: list, xn: list, kappa: float, eps: float):
        """Sub-steps that stay on and are weak enough for the interaction
        picture, weakest first: the largest set whose every first-order size
        κ·x, summed over the pairs weak in one sub-step, is within y* =
        1.9·eps/Y, Y = Σκ·x over the set (then
        Σ(e^y − 1 − y) ≤ ½y*(1 + y*)·Y ≤ eps for chunks of size ≤ y*):
        (masks, y*) or (None, 0) when there are none."""
        vals = np.concatenate([x[m] for x, m in zip(xn, on)]) * kappa if xn else np.zeros(0)
        if not len(vals) or not vals.any():
            return None, 0.0
        srt = np.sort(vals)
        cum = np.cumsum(srt)
        n_ok = int(np.count_nonzero(srt * cum <= 1.9 * eps))      # srt·cum grows with the index
        while n_ok:
            thr = srt[n_ok - 1]
            weak = [m & (x * kappa <= thr) for x, m in zip(xn, on)]
            Y = sum(float(x[w].sum()) for x, w in zip(xn, weak)) * kappa
            if Y <= 0:
                return None, 0.0
            # a chunk holds at least one sub-step: every sub-step's sum over the
            # pairs weak there must fit y* too
            smax = float(np.max(sum(np.where(w, x, 0.0) for x, w in zip(xn, weak)))) * kappa
            if smax * Y <= 1.9 * eps:
                return weak, 1.9 * eps / Y
            n_ok = int(np.searchsorted(srt, thr, side="left"))      # ties over: leave them out
        return None, 0.0

    def _set_neglected(self, total: float) -> None:
        self.neglected_exchange_rad = max(self.neglected_exchange_rad, total)
        self._neglected_now = total

    def _on_masks(self, jmax: list, h: float, K: int) -> list:
        """Dropping alone, within the whole budget (the general-levels path)."""
        on, total = self._drop(jmax, h, K, self.exchange_budget)
        self._set_neglected(total)
        return on

    def _drop(self, jmax: list, h: float, K: int, budget: float):
        """Sub-steps where each pair must be kept.  Every sub-step of every
        pair is a candidate for dropping; they are dropped weakest first
        (by J, over all pairs together) while the phase 2π∫J dt summed over
        everything dropped stays within ``exchange_budget`` radians, so
        what is dropped is the weakest exchange of the run wherever it is
        (an idle barrier's plateau, a drooping or filtered tail), never a
        pulse.  Bound on the change of the average gate fidelity: ¾ of the
        dropped phase (module notes)."""
        on = [np.ones(K, dtype=bool) for _ in jmax]
        if not K or not jmax:
            return on, 0.0
        J = np.stack([np.abs(j) for j in jmax])              # (pairs, K)
        order = np.argsort(J, axis=None, kind="stable")
        phase = np.cumsum(2 * math.pi * J.ravel()[order] * h)
        n_drop = int(np.searchsorted(phase, budget, side="right"))
        # never split a pair inside a run of equal J: keep ties together
        if 0 < n_drop < len(order):
            j_last = J.ravel()[order[n_drop - 1]]
            while n_drop > 0 and J.ravel()[order[n_drop]] == j_last and \
                    J.ravel()[order[n_drop - 1]] == j_last:
                n_drop -= 1
        total = float(phase[n_drop - 1]) if n_drop else 0.0
        flat = np.ones(J.size, dtype=bool)
        flat[order[:n_drop]] = False
        flat = flat.reshape(J.shape)
        for i in range(len(jmax)):
            on[i] = flat[i]
        return on, total

    def _cluster_pieces(self, model: Model, dots: tuple[int, ...], pairs: tuple[int, ...]) -> _Pieces:
        key = (dots, pairs, tuple(d for q in dots for d in model.dissipators_of(q)),
               tuple(model.dots[q] for q in dots),
               tuple((model.pairs[i].a, model.pairs[i].b, model.pairs[i].delta) for i in pairs))
        got = _PIECES.get(key)
        if got is not None:
            return got
        c = len(dots)
        pos = {q: i for i, q in enumerate(dots)}
        drive = {q: (PL.hamiltonian_generator(_at(_X, pos[q], c)),
                     PL.hamiltonian_generator(_at(_Y, pos[q], c))) for q in dots}
        det = {q: PL.hamiltonian_generator(_at(_Z, pos[q], c) / 2) for q in dots}
        zrot = {q: det[q] / (2 * math.pi) for q in dots}
        pr = {}
        for i in pairs:
            p = model.pairs[i]
            a, b = pos[p.a], pos[p.b]
            spm = _at(_SP, a, c) @ _at(_SM, b, c)
            smp = _at(_SM, a, c) @ _at(_SP, b, c)
            pr[i] = (PL.hamiltonian_generator(_at(_Z, a, c) @ _at(_Z, b, c) / 4),
                     PL.hamiltonian_generator((spm + smp) / 2),
                     PL.hamiltonian_generator(1j * (spm - smp) / 2))
        base = np.zeros((4 ** c, 4 ** c))
        for q in dots:
            for d in model.dissipators_of(q):
                base += d.rate * PL.dissipator_generator(
                    _at(dot_operator(model.dots[q], d.operator), pos[q], c))
        q0 = dots[0]
        s_drive = _rotation_sign(*drive[q0], zrot[q0])
        s_pair = 1.0
        w = {q: 0.0 for q in dots}
        if pairs:
            p0 = model.pairs[pairs[0]]
            s_pair = _rotation_sign(pr[pairs[0]][1], pr[pairs[0]][2], zrot[p0.a])
            # frame frequencies along a spanning tree: the flip-flop phase 2πδt of
            # every tree pair is cancelled (w_a − w_b = −s·δ)
            seen = {q0}
            todo = [q0]
            while todo:
                x = todo.pop()
                for i in pairs:
                    p = model.pairs[i]
                    if p.a == x and p.b not in seen:
                        w[p.b] = w[x] + s_pair * p.delta
                        seen.add(p.b)
                        todo.append(p.b)
                    elif p.b == x and p.a not in seen:
                        w[p.a] = w[x] - s_pair * p.delta
                        seen.add(p.a)
                        todo.append(p.a)
        zone = PL.hamiltonian_generator(_Z / 2) / (2 * math.pi)
        got = _Pieces(dots, pairs, drive, det, pr, base, zrot, s_drive, s_pair, w, zone)
        arrays = [*(g for v in drive.values() for g in v), *det.values(), *zrot.values(),
                  *(g for v in pr.values() for g in v), base, zone]
        for a in arrays:
            a.flags.writeable = False          # shared by every engine (_PIECES)
        size = sum(a.nbytes for a in arrays)
        if len(_PIECES) >= PIECES_KEPT or _PIECES_BYTES[0] + size > PIECES_BYTES:
            _PIECES.clear()
            _PIECES_BYTES[0] = 0
        if size <= PIECES_BYTES:
            _PIECES[key] = got
            _PIECES_BYTES[0] += size
        return got

    # -------------------------------------------------------------- plan

    def _check_plan(self, model: Model, prep: dict, points, state_bytes: int) -> None:
        """Time and memory of every exact cluster before any work: its
        dimension k = 4^c, the distinct values V of its own noise variables,
        the distinct sub-steps R of each segment and its generators T.  The
        least memory a cluster needs is its generators, the static parts and
        one batch of exponentials of every variant (8·k²·(T + 2 + 7·V)
        bytes; larger batches are cut to fit); the time is about
        24·V·R·k³ flops for the exponentials (a 12-term series) and 2^(7c)
        for building the generators.  A cluster over the limit is refused
        with what forms it (ClusterTooLarge); with no limit only the estimate
        is recorded (statistics ``estimate``)."""
        limit = self.memory_limit
        seen: dict = {}
        weak_flops = 0.0
        bounds = prep["bounds"]
        for s, e in zip(bounds[:-1], bounds[1:]):
            if e <= s:
                continue
            exact, weak = self._segment_split(model, prep, s)
            if weak:
                weak_flops += self._weak_flops(model, prep, points, weak, s, e,
                                               state_bytes / (16.0 * 4 ** model.n))
            for dots, pairs in clusters(model.n, [(model.pairs[i].a, model.pairs[i].b)
                                                  for i in exact], exact):
                c = len(dots)
                if c == 1 or (weak and (dots, pairs) in weak[1]):
                    continue
                rows = self._distinct_rows(model, prep, dots, pairs, s, e)
                got = seen.get((dots, pairs))
                if got is None:
                    V = noise_variants(points, dots, pairs)
                    T = (2 * sum(q in prep["drive"] for q in dots) + 3 * len(pairs)
                         + sum(any(p.dot == q for p in model.profiles) for q in dots))
                    k = 4 ** c
                    got = seen[(dots, pairs)] = {"dots": dots, "pairs": pairs, "dimension": k,
                                                 "variants": V, "generators": T, "rows": 0,
                                                 "bytes": 8 * k * k * (T + 2 + 7 * V),
                                                 "start": s, "end": e}
                got["rows"] += rows
                if limit and got["bytes"] + state_bytes > limit:
                    raise self._too_large(model, prep, got, limit, state_bytes)
        est = {"clusters": len(seen), "bytes": state_bytes, "flops": weak_flops,
               "weak_flops": weak_flops, "largest": None}
        for got in seen.values():
            k, c = got["dimension"], len(got["dots"])
            flops = 24.0 * got["variants"] * got["rows"] * k ** 3 + 2.0 ** (7 * c)
            est["flops"] += flops
            if est["largest"] is None or got["bytes"] > est["largest"]["bytes"]:
                est["largest"] = {"dots": [model.dots[q].name for q in got["dots"]],
                                  "dimension": k, "bytes": got["bytes"],
                                  "distinct_substeps": got["rows"],
                                  "variants": got["variants"]}
            est["bytes"] = max(est["bytes"], got["bytes"] + state_bytes)
        # about 20 Gflop/s on one core for these batched products: measured on a
        # three-dot 64×64 cluster of 7637 distinct sub-steps, 26 s and 40 s for
        # estimates of 26 s and 50 s at this rate (1 Gflop/s had overstated them 20×)
        est["seconds"] = est["flops"] / FLOP_RATE
        self._estimate_now = est
        notify = getattr(self, "notify", None)
        if notify is not None and est["seconds"] >= SLOW_NOTE_S and (est["largest"]
                                                                   or weak_flops):
            L = est["largest"]
            if L and 24.0 * L["variants"] * L["distinct_substeps"] * L["dimension"] ** 3 \
                    >= weak_flops:
                k = L["dimension"]
                why = (f"dots {', '.join(L['dots'])} form one exact cluster ({k}×{k} channels, "
                       f"{L['distinct_substeps']} distinct sub-steps, {L['variants']} noise "
                       "variants)")
            else:
                why = (f"{len(points)} noise points each take the weak-exchange treatment at "
                       "every sub-step whose drive or exchange changes")
            notify(f"slow: one evaluation will take roughly {est['seconds']:.0f} s (about "
                   f"{FLOP_RATE / 1e9:.0f} Gflop/s assumed; several per run): {why}; closing "
                   "idle barriers further, a looser --exchange-accuracy or fewer --nodes make "
                   "it cheaper")

    def _weak_flops(self, model, prep, points, weak, s: int, e: int,
                    cols: float = 1.0) -> float:
        """Rough work of the weak treatment of [s, e) (weak.weak_segment): per
        sub-step whose drive or exchange changes, every unit's channel,
        inverse and transformed maps for each of its noise variants
        (about 240·k³) and every pair's contraction for each noise point
        (about 100·k_a²·k_b²); constants fitted to a triple dot beside an 11 µs
        exchange pulse (6.2 s CPU for 11 points, estimated 5.8 s); small runs
        are dominated by fixed costs the estimate leaves out.  Plus the
        chunks: each applies every weak pair's channel (k_a·k_b square) to
        the register of ``cols`` columns per noise point, 2·k_a·k_b·4ⁿ·cols
        flops, and a segment holds at least Y_seg/y* chunks (y ≤ y* each)
        and one per τ_max.  On four dots in a line idling at 130–390 Hz
        (a 3.9 µs run, 791 chunks) these applications were half the time
        and the estimate without them 3× short (4.9 s against 14.7 s for
        29 noise points; 12 s with them)."""
        pairs, units = weak
        dots = tuple(sorted(q for d, _ in units for q in d))
        inner = tuple(sorted(set(j for _, ps in units for j in ps) | set(pairs)))
        rows = self._distinct_rows(model, prep, dots, inner, s, e)
        if any(ps for _, ps in units):
            rows = e - s              # in the model's frame a pulse's flip-flop turns every sub-step
        unit_of = {q: d for d, _ in units for q in d}
        per_row = 0.0
        for d, ps in units:
            V = len({(tuple(pt.detuning[q] if pt.detuning else 0.0 for q in d),
                      tuple(pt.dv[j] if pt.dv else 0.0 for j in ps)) for pt in points})
            per_row += 240.0 * V * 4.0 ** (3 * len(d))
        for j in pairs:
            p = model.pairs[j]
            per_row += 100.0 * len(points) * 16.0 ** (len(unit_of[p.a]) + len(unit_of[p.b]))
        chunks = self._weak_chunks(model, prep, pairs, s, e)
        apply = sum(2.0 * 4.0 ** (len(unit_of[model.pairs[j].a]) + len(unit_of[model.pairs[j].b]))
                    * 4.0 ** model.n * cols for j in pairs)
        return rows * per_row + chunks * apply * len(points)

    @staticmethod
    def _weak_chunks(model, prep, pairs, s: int, e: int) -> int:
        """The fewest chunks weak.weak_segment can cut [s, e) into: each holds
        y ≤ y* of the segment's Y_seg = κ·Σ x, and lasts at most τ_max."""
        y_seg = prep["kappa"] * sum(float(prep["xn"][j][s:e].sum()) for j in pairs)
        chunks = max(math.ceil(y_seg / prep["ystar"]) if prep["ystar"] > 0 else 1, 1)
        if math.isfinite(prep["tau_max"]) and prep["tau_max"] > 0:
            chunks = max(chunks, math.ceil((e - s) * model.h / prep["tau_max"]))
        return chunks

    def _distinct_rows(self, model, prep, dots, pairs, s: int, e: int) -> int:
        """Sub-steps of [s, e) whose drive or exchange differs from the one before."""
        if e - s < 2:
            return 1
        # as the exact path finds its runs: to 1e-12 of each coefficient's
        # largest value (a pulse's decaying tail is no change), and a
        # flip-flop by its modulus (the cluster's frames cancel its turn)
        change = np.zeros(e - s - 1, dtype=bool)
        for q in dots:
            change |= self._drive_changes(prep, q, s, e)
        for j in pairs:
            change |= self._pair_changes(prep, j, s, e)
        return 1 + int(change.sum())

    @staticmethod
    def _scale(prep, key) -> float:
        """Largest |value| over the whole run of a dot's drive (("d", dot)) or
        of a pair's exchange (("p", pair): J at every charge offset, which
        bounds |F|), kept in ``prep``."""
        sc = prep.setdefault("scales", {})
        if key not in sc:
            kind, i = key
            arrs = prep["drive"].get(i, ()) if kind == "d" else \
                [c[0] for c in prep["pairs"][i].values()]
            sc[key] = max((float(np.abs(a).max()) for a in arrs), default=0.0)
        return sc[key]

    def _drive_changes(self, prep, q: int, s: int, e: int) -> np.ndarray:
        """Sub-steps s+1 … e−1 whose drive on dot q differs from the one
        before by more than 1e-12 of its largest value over the run (a
        pulse's decaying tail is no change), as the exact path finds runs."""
        change = np.zeros(max(e - s - 1, 0), dtype=bool)
        tol = 1e-12 * self._scale(prep, ("d", q))
        for arr in prep["drive"].get(q, ()):
            change |= np.abs(arr[s + 1:e] - arr[s:e - 1]) > tol
        return change

    def _pair_changes(self, prep, j: int, s: int, e: int) -> np.ndarray:
        """The same for pair j's J and |F| at every charge offset (a flip-flop
        by its modulus: the exact cluster's frames cancel its turn)."""
        change = np.zeros(max(e - s - 1, 0), dtype=bool)
        tol = 1e-12 * self._scale(prep, ("p", j))
        for J, Fr, Fi in prep["pairs"][j].values():
            F = np.hypot(Fr[s:e], Fi[s:e])
            change |= (np.abs(J[s + 1:e] - J[s:e - 1]) > tol) | (np.abs(F[1:] - F[:-1]) > tol)
        return change

    def _too_large(self, model, prep, got, limit: int, state_bytes: int) -> "ClusterTooLarge":
        pairs = []
        for j in got["pairs"]:
            p = model.pairs[j]
            J = np.max(np.abs(np.stack([c[0] for c in prep["pairs"][j].values()])), axis=0)
            seg = J[got["start"]:got["end"]]
            at = got["start"] + int(np.argmin(seg))
            pairs.append({"name": p.name, "j_min": float(seg.min()), "j_max": float(seg.max()),
                          "volts": float(np.mean(p.volts[at]))})
        return ClusterTooLarge({
            "dots": [model.dots[q].name for q in got["dots"]], "pairs": pairs,
            "dimension": got["dimension"], "variants": got["variants"],
            "bytes": got["bytes"] + state_bytes, "limit": limit,
            "start_s": model.t0 + got["start"] * model.h,
            "end_s": model.t0 + got["end"] * model.h})

    def _segment_split(self, model: Model, prep: dict, s: int):
        """The pairs of the segment starting at sub-step ``s`` taken exactly,
        and the weak ones with the *units* they join ((pairs, units) or
        None): a unit is an exact cluster (dots, pairs), of one dot or more,
        that holds a weak pair's dot; it evolves exactly and the weak pair's
        correction acts on its two units together.  A weak pair is taken
        exactly after all when both its dots are in one unit (it joins no
        one) or when its two units together would exceed
        :data:`.weak.MAX_UNION` (4^3: an exchange pulse's cluster of two and
        one weak neighbour)."""
        exact = [i for i, (m, w) in enumerate(zip(prep["on"], prep["ip"])) if m[s] and not w[s]]
        weak = [i for i, w in enumerate(prep["ip"]) if w[s]]
        while weak:
            edges = [(model.pairs[i].a, model.pairs[i].b) for i in exact]
            unit = {}
            for dots, pairs in clusters(model.n, edges, exact):
                for q in dots:
                    unit[q] = (dots, pairs)
            move = []
            for i in weak:
                ua, ub = unit[model.pairs[i].a], unit[model.pairs[i].b]
                if ua == ub or 4 ** (len(ua[0]) + len(ub[0])) > weak_mod.MAX_UNION:
                    move.append(i)
            if not move:
                units = sorted({unit[q] for i in weak for q in (model.pairs[i].a,
                                                                 model.pairs[i].b)})
                return exact, (tuple(weak), tuple(units))
            exact += move
            weak = [i for i in weak if i not in move]
        return exact, None

    # -------------------------------------------------------------- channels

    def _segment_channels(self, model, prep, pc: _Pieces, s: int, e: int, points, idx):
        """The cluster's channel over sub-steps [s, e) for every distinct value
        of its own noise variables: (channels (V, k, k), point -> variant)."""
        # the coefficients (variants × sub-steps × columns, and about three
        # temporaries of that size) in blocks of at most COEF_BLOCK_BYTES: a
        # 500 µs wait is 10⁶ sub-steps, and whole it took gigabytes per
        # evaluation; the blocks' channels compose (later on the left)
        cols = 2 * len(pc.dots) + 3 * len(pc.pairs) + len(pc.dots)
        step = max(1024, int(COEF_BLOCK_BYTES // (4 * 8 * max(1, len(idx)) * max(1, cols))))
        chans = which = None
        for a in range(s, e, step):
            b = min(e, a + step)
            statics, G, Cs, cmap, combos, which, theta = self._segment_terms(
                model, prep, pc, a, b, points, idx)
            got = self._chain(statics, G, Cs, model.h, pc, combos, theta,
                              self._column_floor(prep, pc, Cs.shape[-1]), cmap=cmap)
            chans = got if chans is None else np.matmul(got, chans)
        return chans, which

    @staticmethod
    def _column_floor(prep, pc: _Pieces, T: int) -> np.ndarray:
        """Per column of the segment's coefficients (drive I and Q per driven
        dot, J, Re F, Im F per pair, then detuning profiles): 1e-12 of that
        coefficient's largest value over the whole run.  Runs of equal
        sub-steps are found to at least this (_run_starts): a pulse's
        decaying tail (1e-45 Hz a few hundred ns on) is no change, although
        it is on the scale of the segment's own values."""
        floor = []
        for q in pc.dots:
            if q in prep["drive"]:
                floor += [FastEngine._scale(prep, ("d", q))] * 2
        for j in pc.pairs:
            floor += [FastEngine._scale(prep, ("p", j))] * 3
        floor += [0.0] * (T - len(floor))
        return 1e-12 * np.array(floor[:T])

    def _segment_terms(self, model, prep, pc: _Pieces, s: int, e: int, points, idx):
        """The cluster's generator over sub-steps [s, e) as L_k = static_v +
        Σ_t C_(u(v))kt·G_t for every distinct value v of its own noise
        variables, the coefficients given once for variants that differ
        only in their dots' detunings (which go into the statics; the
        sixteen detunings of one dot's T2* rule are sixteen variants and one
        array of coefficients): (statics (V, k, k), G (T, k, k), C (U, e − s, T),
        u: variant -> row of C (V,), variant keys, point -> variant, frame
        angles or None)."""
        combos: dict = {}
        which = []
        # the gate-band profiles on the cluster's dots (time-dependent detuning)
        prof = [j for j, p in enumerate(model.profiles) if p.dot in pc.dots]
        prof_dots = tuple(q for q in pc.dots if any(model.profiles[j].dot == q for j in prof))
        for i in idx:
            pt = points[i]
            key = (tuple(pt.detuning[q] if pt.detuning else 0.0 for q in pc.dots)
                   + tuple(pt.dv[j] if pt.dv else 0.0 for j in pc.pairs)
                   + tuple(pt.modes[j] if pt.modes else 0.0 for j in prof))
            which.append(combos.setdefault(key, len(combos)))
        # frame angles ϑ_q(k) = 2π·w_q·t_k at the sub-step centres (module notes)
        t = model.t0 + (np.arange(s, e) + 0.5) * model.h
        theta = {q: 2 * math.pi * pc.w[q] * t for q in pc.dots}
        rotating = any(pc.w[q] for q in pc.dots)
        gens, cols_fixed = [], []
        for q in pc.dots:
            if q in prep["drive"]:
                re, im = prep["drive"][q]
                gens += list(pc.drive[q])
                a, b = re[s:e], im[s:e]
                if rotating and pc.w[q]:
                    ang = pc.s_drive * theta[q]
                    cs, sn = np.cos(ang), np.sin(ang)
                    a, b = a * cs - b * sn, a * sn + b * cs
                cols_fixed += [a, b]
        for j in pc.pairs:
            gens += list(pc.pair[j])
        gens += [pc.det[q] for q in prof_dots]
        G = np.stack(gens) if gens else np.zeros((0,) + pc.base.shape)
        # the flip-flops' frame rotation, the same for every variant
        turn = {}
        if rotating:
            for j in pc.pairs:
                p = model.pairs[j]
                ang = pc.s_pair * (theta[p.a] - theta[p.b])
                turn[j] = (np.cos(ang), np.sin(ang))
        nd = len(pc.dots)
        statics, Cs, cmap, rows_of = [], [], [], {}
        for key in combos:
            dets = key[:nd]
            static = pc.base.copy()
            for q, d in zip(pc.dots, dets):
                if d:
                    static += d * pc.det[q]
            statics.append(static)
            rest = key[nd:]                     # charge offsets and gate-band modes
            u = rows_of.get(rest)
            if u is None:
                u = rows_of[rest] = len(Cs)
                dvs = rest[:len(pc.pairs)]
                cols = list(cols_fixed)
                for j, dv in zip(pc.pairs, dvs):
                    J, Fr, Fi = prep["pairs"][j][dv]
                    Fr, Fi = Fr[s:e], Fi[s:e]
                    if rotating:
                        cs, sn = turn[j]
                        Fr, Fi = Fr * cs - Fi * sn, Fr * sn + Fi * cs
                    cols += [J[s:e], Fr, Fi]
                if prof_dots:
                    modes = [0.0] * len(model.profiles)
                    for j, x in zip(prof, rest[len(pc.pairs):]):
                        modes[j] = x
                    for q in prof_dots:
                        d = model.detuning_profile(q, modes)
                        cols.append(np.zeros(e - s) if d is None else d[s:e])
                Cs.append(np.stack(cols, axis=1) if cols else np.zeros((e - s, 0)))
            cmap.append(u)
        return (np.stack(statics), G, np.stack(Cs), np.array(cmap), tuple(combos),
                np.array(which), theta if rotating else None)

    def _rz(self, pc: _Pieces, angles: dict) -> np.ndarray:
        """exp(Σ_q ϑ_q·Z_q): z rotations of the cluster's dots, in closed form
        (Z_q³ = −Z_q, so exp(ϑZ) = 1 + sinϑ·Z + (1 − cosϑ)·Z²)."""
        z = pc.zone
        z2 = z @ z
        out = np.eye(1)
        for q in pc.dots:
            th = angles[q]
            r = np.eye(4) + math.sin(th) * z + (1 - math.cos(th)) * z2
            # out ⊗ r by one broadcast product (np.kron's own overhead was
            # most of this function's time: 7000 calls per whole-run average
            # of three dots in one cluster)
            a = out.shape[0]
            out = (out[:, None, :, None] * r[None, :, None, :]).reshape(4 * a, 4 * a)
        return out

    def _chain(self, static, G, C, h, pc, key, theta, floor=None, cmap=None) -> np.ndarray:
        """Ordered products over the sub-steps of exp(L_k·h), L_k = static + Σ_t C_kt·G_t,
        for a batch of variants: static (V, k, k), C (U, n, T) with variant v
        on row ``cmap[v]`` of C (default: U = V, one each) -> (V, k, k).

        With frame angles ϑ(k) (linear in k) the rows of C are already those
        of L'_k = R_k⁻¹·L_k·R_k; with D = R_k⁻¹·R_(k+1) the product is
        R(ϑ_last + Δ)·Π_k(D⁻¹·exp(L'_k·h))·R(ϑ_first)⁻¹ (exact: the z
        rotations commute with the dissipators, the detunings and σzσz)."""
        V = static.shape[0]
        cmap = np.arange(V) if cmap is None else np.asarray(cmap)
        n = C.shape[1]
        starts = self._run_starts(C, G, pc, theta, floor)
        lengths = np.diff(np.append(starts, n))
        rows = C[:, starts]                                   # (U, R, T)
        # cache per variant, by what its product is made of: its static part,
        # its runs' rows and lengths, the frame angles at the start and their
        # step (hashing the runs, not every sub-step)
        ends = None if theta is None else tuple(round(float(v[0]), 12) for v in theta.values())
        step = None if theta is None else tuple(float(pc.w[q]) for q in pc.dots)
        lb = lengths.tobytes()
        rk = [hashlib.blake2b(rows[u].tobytes() + lb, digest_size=16).digest()
              for u in range(C.shape[0])]
        keys = [(pc.dots, pc.pairs, kv, static[v].tobytes(), rows.shape[1:], h, ends, step,
                 rk[cmap[v]]) for v, kv in enumerate(key)]
        found = [self._cache.get(k) for k in keys]
        missing = [v for v, f in enumerate(found) if f is None]
        self.cache_hits += len(keys) - len(missing)
        if missing:
            new = self._chain_compute(static[missing], G, rows, cmap[missing], lengths, n, h,
                                      pc, theta)
            if len(self._cache) + len(missing) > self.cache_entries:
                self._cache.clear()
            for v, m in zip(missing, new):
                self._cache[keys[v]] = m
                found[v] = m
        return np.stack(found)

    @staticmethod
    def _run_starts(C, G, pc, theta, floor=None) -> np.ndarray:
        """Starts of the runs of equal sub-steps of every row of C (U, n, T)."""
        U, n, T = C.shape
        if not (T and n > 1):
            return np.zeros(1, dtype=int)
        # runs of equal rows in every variant (equal to 1e-12 of each column's
        # scale: the frame rotation leaves rounding-level differences on a flat top)
        scale = np.abs(C).max(axis=(0, 1))
        # the two parts of one complex coefficient (a drive's I and Q, a
        # flip-flop's Re F and Im F) share their scale: in a rotating frame
        # one part of a constant coefficient is rounding noise alone
        flat = G.reshape(T, -1)
        for g0, g1 in ([pc.drive[q] for q in pc.dots if q in pc.drive]
                       + [pc.pair[j][1:] for j in pc.pairs]):
            # the columns whose generator is g0 or g1: candidates by one entry
            # (the largest of each), then compared whole (comparing every
            # column whole took most of this function's time on 64 × 64)
            cols = []
            for g in (g0, g1):
                gf = g.reshape(-1)
                i = int(np.argmax(np.abs(gf)))
                cols += [c for c in np.flatnonzero(flat[:, i] == gf[i])
                         if np.array_equal(flat[c], gf)]
            if cols:
                scale[cols] = scale[cols].max()
        rel = 1e-12
        if theta is not None:
            # a frame's rotation by ϑ rounds to about ε·|ϑ| of the value
            # (the flip-flop's own phase 2πδt alike): after 500 µs at 56 MHz
            # that is 2·10⁻¹¹, over 1e-12, and every sub-step of a wait
            # differed (778 000 exponentials of 64 × 64)
            big = max(float(np.abs(v).max()) for v in theta.values()) if theta else 0.0
            rel = max(rel, 16 * np.finfo(float).eps * 2 * big)
        tol = rel * np.where(scale > 0, scale, 1.0)
        if floor is not None:
            tol = np.maximum(tol, floor)
        change = np.ones(n, dtype=bool)
        D = np.diff(C, axis=1)
        np.abs(D, out=D)
        # the last axis first, then the variants (one reduction over two
        # axes of a 3-D array with a short last axis was 3x slower)
        change[1:] = (D > tol).any(axis=2).any(axis=0)
        return np.flatnonzero(change)

    def _chain_compute(self, static, G, rows, cmap, lengths, n, h, pc, theta) -> np.ndarray:
        """The products of :meth:`_chain` for variants with statics ``static``
        (V, k, k) and the runs' rows ``rows[cmap[v]]`` (R, T) of the given
        ``lengths`` (summing to ``n`` sub-steps)."""
        V = static.shape[0]
        k = static.shape[-1]
        R = rows.shape[1]
        T = rows.shape[2]
        if theta is not None:
            step = {q: float(theta[q][1] - theta[q][0]) if n > 1 else 0.0 for q in pc.dots}
            Dinv = self._rz(pc, {q: -v for q, v in step.items()})
        # exponentials in batches of at most max_batch_bytes (about six arrays of
        # the batch's size are alive at once), at least one sub-step per batch
        per_row = 6 * 8 * V * k * k
        block = max(1, int(self.max_batch_bytes // per_row))
        # the sum over generators once per distinct row of coefficients
        used, inv = np.unique(cmap, return_inverse=True)
        got = None
        for lo in range(0, R, block):
            hi = min(R, lo + block)
            L = np.broadcast_to(static[:, None], (V, hi - lo, k, k)).copy()
            if T:
                L += np.einsum("urt,tij->urij", rows[used, lo:hi], G)[inv]
            if theta is None:
                # no frame: a run of n equal sub-steps is one exponential exp(L·h·n)
                mats = _expm(L * (h * lengths[lo:hi])[None, :, None, None])
            else:
                mats = np.matmul(Dinv, _expm(L * h))
                for i in np.flatnonzero(lengths[lo:hi] > 1):
                    mats[:, i] = np.linalg.matrix_power(mats[:, i], int(lengths[lo + i]))
            del L
            part = ordered_product(mats)           # later sub-steps on the left
            got = part if got is None else np.matmul(part, got)
        self.exponentials += V * R
        if theta is not None:
            last = {q: float(v[-1]) + step[q] for q, v in theta.items()}
            first = {q: -float(v[0]) for q, v in theta.items()}
            got = self._rz(pc, last) @ got @ self._rz(pc, first)
        return got

    # -------------------------------------------------------------- state

    @staticmethod
    def _initial(n: int, P: int, process: bool, rho0) -> np.ndarray:
        cols = []
        if process:
            cols.append(np.eye(4 ** n))
        if rho0 is not None:
            cols.append((rho0 if rho0.ndim == 1 else PL.rho_to_pauli(rho0))[:, None])
        block = np.concatenate(cols, axis=1)
        return np.broadcast_to(block, (P,) + block.shape).copy()

    def _run(self, model, prep, idx, state, marks):
        n = model.n
        pending: dict = {}          # frozenset(dots) -> (dots tuple, (V, k, k) or (P, k, k))
        owner: dict = {}
        work = [state, np.empty_like(state)]
        bounds = sorted(set(prep["bounds"]) | set(int(m) for m in marks))
        trace_t, trace_p = [], []

        def apply(dots, M):
            src = work[0]
            dst = work[1]
            _apply(src, dst, dots, M, n)
            work[0], work[1] = dst, src
            self.applications += 1

        def flush(group):
            dots, M = pending.pop(group)
            for q in dots:
                owner.pop(q, None)
            apply(dots, M)

        cols = state.shape[2]

        def push(dots, M):
            cset = frozenset(dots)
            groups = {owner[q] for q in dots if q in owner}
            if len(groups) == 1:
                (g,) = groups
                if cset <= g:
                    gd, gm = pending[g]
                    if _fuses(gm.shape[-1], M.shape[-1], n, cols):
                        pending[g] = (gd, np.matmul(_embed(M, dots, gd), gm))
                        self.fusions += 1
                        return
                    flush(g)
                    groups = set()
            for g in groups:
                if not g <= cset or not _fuses(M.shape[-1], pending[g][1].shape[-1], n, cols):
                    flush(g)
            new = M
            for g in [g for g in groups if g in pending]:
                gd, gm = pending.pop(g)
                new = np.matmul(new, _embed(gm, gd, dots))
                self.fusions += 1
            pending[cset] = (dots, new)
            for q in dots:
                owner[q] = cset

        def record(k):
            for g in list(pending):
                flush(g)
            r = work[0][0, :, -1]
            trace_t.append(k * model.h)
            trace_p.append([(1 + r[3 * 4 ** (n - 1 - q)] / r[0]) / 2 for q in range(n)])

        mark_set = set(int(m) for m in marks)
        if 0 in mark_set:
            record(0)
        pts = prep["points"]
        weak_y, weak_q = [], []
        for s, e in zip(bounds[:-1], bounds[1:]):
            if e <= s:
                continue
            exact, weak = self._segment_split(model, prep, s)
            for dots, pairs in clusters(n, [(model.pairs[i].a, model.pairs[i].b) for i in exact],
                                         exact):
                if weak and (dots, pairs) in weak[1]:
                    continue                       # its own channel comes with the weak pairs
                pc = self._cluster_pieces(model, dots, pairs)
                self._largest_now = max(self._largest_now, len(dots))
                self.largest_cluster = max(self.largest_cluster, len(dots))
                chans, which = self._segment_channels(model, prep, pc, s, e, pts, idx)
                M = chans if len(chans) == 1 else chans[which]
                push(dots, M)
            if weak:
                big = max(len(dots) for dots, _ in weak[1])
                self._largest_now = max(self._largest_now, big)
                self.largest_cluster = max(self.largest_cluster, big)
                y, q, rule = weak_mod.weak_segment(
                    self, model, prep, s, e, weak[0], weak[1], pts, idx,
                    lambda dots, chans, which: push(dots, chans if len(chans) == 1
                                                    else chans[which]))
                self._weak_rules_now.add(rule)
                weak_y.append(y)
                weak_q.append(q)
            if e in mark_set:
                record(e)
        if weak_y:
            y, q = np.concatenate(weak_y), np.concatenate(weak_q)
            self._weak_bound_now = max(self._weak_bound_now, weak_mod.weak_bound(y, q))
            self._weak_chunks_now = max(self._weak_chunks_now, len(y))
            self.weak_exchange_bound = max(self.weak_exchange_bound, self._weak_bound_now)
        for g in list(pending):
            flush(g)
        traces = {}
        if trace_t:
            traces["t"] = model.t0 + np.array(trace_t)
            arr = np.array(trace_p)
            for q in range(n):
                traces[q] = arr[:, q]
        return work[0], traces


# ------------------------------------------------------------------ helpers

def _embed(M: np.ndarray, dots: tuple[int, ...], into: tuple[int, ...]) -> np.ndarray:
    """A channel on ``dots`` as a channel on the superset ``into`` (identity
    on the others), both sorted by register index; batch axis first.  M ⊗ 1
    by one broadcast product (np.kron of a stack took twice as long), then
    the axes put in register order where the extra dots are not all last."""
    if dots == into:
        return M
    c, C = len(dots), len(into)
    m = 4 ** (C - c)
    B, k = M.shape[0], M.shape[-1]
    big = (M[:, :, None, :, None] * np.eye(m)[:, None, :]).reshape(B, k * m, k * m)
    order = list(dots) + [q for q in into if q not in dots]
    perm = [order.index(q) for q in into]
    if perm == list(range(C)):
        return big
    t = big.reshape((B,) + (4,) * (2 * C))
    t = t.transpose([0] + [1 + p for p in perm] + [1 + C + p for p in perm])
    return t.reshape(B, 4 ** C, 4 ** C)


def _fuses(K: int, k: int, n: int, cols: int) -> bool:
    """Whether a channel of k × k is multiplied into a pending one of K × K
    (K ≥ k) rather than the pending one applied first: the product costs
    about K³ per point, applying the smaller one to a state of n dots and
    ``cols`` columns by itself 4ⁿ·cols·k.  A small channel after a large
    pending one (a weak pair's correction after a three-dot wait: 64³
    against 64·64·4 for the process) flushes the large one, which is
    applied once either way."""
    return K ** 3 <= 4 ** n * cols * k


def _apply(src: np.ndarray, dst: np.ndarray, dots: tuple[int, ...], M: np.ndarray, n: int) -> None:
    """dst = (M on ``dots``) · src for a state of shape (P, 4^n, B) and M of
    shape (P or 1, k, k)."""
    P, _, B = src.shape
    c = len(dots)
    k = 4 ** c
    if M.shape[0] != P:
        M = np.broadcast_to(M, (P, k, k))
    if dots == tuple(range(dots[0], dots[0] + c)):
        L = 4 ** dots[0]
        RB = 4 ** (n - dots[-1] - 1) * B
        if L == 1:
            np.matmul(M, src.reshape(P, k, RB), out=dst.reshape(P, k, RB))
        elif RB == 1:
            np.matmul(src.reshape(P, L, k), M.transpose(0, 2, 1), out=dst.reshape(P, L, k))
        else:
            np.matmul(M[:, None], src.reshape(P, L, k, RB), out=dst.reshape(P, L, k, RB))
        return
    # dots not adjacent (a long-range coupling): contract on their axes
    t = src.reshape((P,) + (4,) * n + (B,))
    Mt = M.reshape((P,) + (4,) * (2 * c))
    # sublist labels: 0 batch, 1..n register axes, 20+ new and 35+ old cluster axes, 51 columns
    out = np.einsum(Mt, [0] + list(range(20, 20 + c)) + list(range(35, 35 + c)),
                    t, [0] + [35 + dots.index(q) if q in dots else 1 + q for q in range(n)] + [51],
                    [0] + [20 + dots.index(q) if q in dots else 1 + q for q in range(n)] + [51],
                    optimize=True)
    dst[...] = out.reshape(dst.shape)


# ------------------------------------------------------------------ estimate only

def plan_estimate(model: Model, evaluations, *, process: bool,
                  exchange_accuracy: float = 1e-6, memory_limit: int = 0) -> dict | None:
    """What :meth:`FastEngine.average` would estimate before any work, without
    running, raising or printing: :meth:`FastEngine._check_plan` of a fresh
    engine for each evaluation of ``evaluations``, a list of (noise points,
    whether the initial state is evolved too), with the process when
    ``process``.  The drop and weak plan is made once, for all their points
    together: for one evaluation it is the engine's own, for several its
    clusters are at least as large as each one's own.  Returns
    ``{"estimate": ...`` (the statistics ``estimate`` of the evaluation
    needing the most memory), ``"too_large": ...`` (the
    :class:`ClusterTooLarge` information of the first cluster over
    ``memory_limit``, or None), ``"slow": ...`` (the engine's text for the
    slowest evaluation when it is estimated at ``SLOW_NOTE_S`` or more, or
    None), ``"seconds": ...`` (the slowest evaluation's estimate)``}``; None
    for models with dots of other than two levels (the general path makes
    no estimate).  Costs the plan alone: no exponential is taken."""
    if any(lv != 2 for lv in model.levels):
        return None
    eng = FastEngine(exchange_accuracy=exchange_accuracy, memory_limit=memory_limit)
    said: list = []
    eng.notify = said.append
    prep = eng._prepare(model, [p for pts, _ in evaluations for p in pts])
    out = {"estimate": None, "too_large": None, "slow": None, "seconds": 0.0}
    for pts, state in evaluations:
        width = (4 ** model.n if process else 0) + (1 if state else 0)
        said.clear()
        try:
            eng._check_plan(model, prep, pts, 8 * 4 ** model.n * max(width, 1) * 2)
        except ClusterTooLarge as e:
            out["too_large"] = e.info
            return out
        est = eng._estimate_now
        if out["estimate"] is None or est["bytes"] > out["estimate"]["bytes"]:
            out["estimate"] = est
        if est["seconds"] >= out["seconds"]:
            out["seconds"] = est["seconds"]
            out["slow"] = said[0] if said else out["slow"]
    return out
