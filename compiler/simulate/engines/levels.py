"""The fast engine's general path: dots with any number of levels.

Used by :class:`.fast.FastEngine` for models that hold a dot with other than
two levels (spin–valley dots).  The same method as the Pauli path, with
complex superoperators in the column-stacked basis instead of real Pauli
transfer matrices:

1. the Lindblad generator is constant on every sub-step, so a sub-step is the
   channel exp(L·h) exactly; runs of identical sub-steps take one
   exponential exp(L·h·n);
2. the run is cut into segments in which the set of exchange pairs that are
   on does not change; a closed barrier's residual exchange is dropped
   within the same phase budget as the Pauli path, or, when more is left
   (idle barriers at 1 Hz…1 kHz), treated as weak in the interaction
   picture of the dots' own channels with the same split of the accuracy
   and the same bound (:mod:`.levels_weak`: one (d_a·d_b)² exponential per
   pair and chunk); in a segment the register splits into clusters of
   dots joined by pairs kept exactly, and each cluster's channel is computed
   on its own dots only (16×16 for one four-level dot, 256×256 for a pair);
3. channels are cached by content (the same burst or wait again is one
   look-up) and applied to the state, a tensor with one row and one column
   axis per dot and a batch axis (the d² columns of the process, and the
   state), by one contraction over the cluster's axes.

Quadrature points are evolved one after another; a cluster's channel that
does not depend on a point's own noise values is found in the cache.
"""

from __future__ import annotations

import hashlib
import math
import time

import numpy as np

from ...pulses import ordered_product
from ..model import LevelPair, Model, dot_operator, embed_pair
from ..types import Evolution
from . import levels_weak as LW
from . import pauli as PL
from . import weak as weak_mod
from .clusters import clusters, noise_variants


def _ham(H: np.ndarray) -> np.ndarray:
    """Column-stacked superoperator of ρ -> −i·2π·[H, ρ] (H in Hz)."""
    d = H.shape[0]
    eye = np.eye(d)
    return -2j * math.pi * (np.kron(eye, H) - np.kron(H.T, eye))


def _diss(c: np.ndarray) -> np.ndarray:
    """Column-stacked superoperator of cρc† − ½{c†c, ρ}."""
    d = c.shape[0]
    eye = np.eye(d)
    cdc = c.conj().T @ c
    return np.kron(c.conj(), c) - 0.5 * (np.kron(eye, cdc) + np.kron(cdc.T, eye))


def _at(o: np.ndarray, k: int, dims: tuple[int, ...]) -> np.ndarray:
    out = np.eye(1, dtype=complex)
    for i, lv in enumerate(dims):
        out = np.kron(out, o if i == k else np.eye(lv))
    return out


def _hermitian_basis(D: int) -> np.ndarray:
    """T (D²×D², unitary): rows are vec(B_k)† of an orthonormal basis of
    Hermitian D×D matrices (E_ii; (E_ij + E_ji)/√2 and i(E_ij − E_ji)/√2 for
    i < j), column stacking.  A Hermiticity-preserving superoperator L is real
    in it: T·L·T† is real (so its exponential costs a quarter of the complex
    one)."""
    rows = []
    for i in range(D):
        m = np.zeros((D, D), dtype=complex)
        m[i, i] = 1
        rows.append(m)
    r2 = math.sqrt(0.5)
    for i in range(D):
        for j in range(i + 1, D):
            m = np.zeros((D, D), dtype=complex)
            m[i, j] = m[j, i] = r2
            rows.append(m)
            m = np.zeros((D, D), dtype=complex)
            m[i, j], m[j, i] = 1j * r2, -1j * r2
            rows.append(m)
    return np.stack([m.reshape(-1, order="F").conj() for m in rows])


_BASES: dict = {}


def _basis(D: int) -> np.ndarray:
    if D not in _BASES:
        _BASES[D] = _hermitian_basis(D)
    return _BASES[D]


def _expm(A: np.ndarray) -> np.ndarray:
    if A.shape[-1] <= 64:
        return PL.expm_batch(A)
    from scipy.linalg import expm
    return np.stack([expm(a) for a in A.reshape((-1,) + A.shape[-2:])]).reshape(A.shape)


CACHE_BYTES = 1 << 28          # the channel cache is cleared when it would exceed this
# seconds per N³ (N × N channels) of one exact exponential and of one weak
# chunk's products per point, measured on one core here (LevelsPath._estimate)
EXP_S_PER_N3 = 7.7e-10
CHUNK_S_PER_N3 = 2.6e-10


class LevelsPath:
    """General-levels propagation for :class:`.fast.FastEngine` (module notes)."""

    def __init__(self, engine):
        self.engine = engine
        self._cache: dict = {}
        self._gens: dict = {}          # real generators per (model, cluster)
        self._weak_maps: dict = {}     # weak pairs' one-dot maps (levels_weak.PairMaps)

    # ------------------------------------------------------------------ public
    def average(self, model: Model, points, *, rho0=None, process=False, trace_points=0,
                slow_note_s: float = math.inf):
        eng = self.engine
        t0 = time.perf_counter()
        levels = model.levels
        n, d = model.n, model.dim
        K, h = model.k, model.h
        coefs = []
        jmax = []
        for i, p in enumerate(model.pairs):
            per = {}
            for dv in sorted({pt.dv[i] if pt.dv else 0.0 for pt in points}):
                per[dv] = p.coefficients(dv)
            coefs.append(per)
            jmax.append(np.max(np.abs(np.stack([c[0] for c in per.values()])), axis=0))
        # closed barriers: dropped, weak (interaction picture, .levels_weak) or exact
        on, wmask, wprep = LW.plan(eng, model, coefs, jmax, points)
        bounds = {0, K}
        for m in list(on) + list(wmask):
            bounds.update((np.flatnonzero(m[1:] != m[:-1]) + 1).tolist())
        marks = (np.unique(np.linspace(0, K, max(trace_points, 2)).round().astype(int))
                 if trace_points and rho0 is not None else np.zeros(0, int))
        bounds = sorted(bounds | set(int(x) for x in marks))
        S_sum = rho_sum = None
        traces: dict = {}
        wrun = LW.WeakRun(self, model, coefs, wprep, _basis, self._weak_maps) if wprep else None
        eng._estimate_now = self._estimate(model, coefs, on, wmask, wrun, bounds, points,
                                           slow_note_s)
        weak_y, weak_q = [], []
        for ip, pt in enumerate(points):
            cols = []
            if process:
                cols.append(np.eye(d * d, dtype=complex))
            if rho0 is not None:
                cols.append(np.asarray(rho0, dtype=complex).reshape(-1, order="F")[:, None])
            X = np.concatenate(cols, axis=1)
            B = X.shape[1]
            # vec index i + d·j -> tensor (rows…, cols…, batch)
            T = X.reshape(d, d, B, order="F").reshape(levels + levels + (B,))
            tt, tp = [], []

            def record(k, T=T):
                rho = T[..., -1].reshape(d, d)
                tt.append(k * h)
                tp.append([float(np.real(np.trace(
                    _at(dot_operator(model.dots[q], "up"), q, levels) @ rho))) for q in range(n)])

            if ip == 0 and 0 in set(marks.tolist()):
                record(0)
            for s, e in zip(bounds[:-1], bounds[1:]):
                if e <= s:
                    continue
                exact, weak = _segment_clusters(model, on, wmask, s)
                for dots, pairs in exact:
                    eng._largest_now = max(eng._largest_now, len(dots))
                    eng.largest_cluster = max(eng.largest_cluster, len(dots))
                    M = self._channel(model, coefs, dots, pairs, s, e, pt)
                    T = _apply(T, dots, M, levels)
                    eng.applications += 1
                if weak:
                    eng._largest_now = max(eng._largest_now, 1)
                    eng.largest_cluster = max(eng.largest_cluster, 1)
                    pushes, y, q = wrun.segment(s, e, weak[0], pt)
                    if ip == 0:
                        weak_y.append(y)
                        weak_q.append(q)
                    for dots, M in pushes:
                        T = _apply(T, dots, M, levels)
                        eng.applications += 1
                if ip == 0 and e in set(marks.tolist()):
                    record(e, T)
            out = T.reshape(d, d, B).reshape(d * d, B, order="F")
            w = pt.weight
            if process:
                S = out[:, :d * d]
                S_sum = w * S if S_sum is None else S_sum + w * S
            if rho0 is not None:
                r = out[:, -1].reshape(d, d, order="F")
                rho_sum = w * r if rho_sum is None else rho_sum + w * r
            if ip == 0 and tt:
                traces["t"] = model.t0 + np.array(tt)
                arr = np.array(tp)
                for q in range(n):
                    traces[q] = arr[:, q]
        if weak_y:
            # the chunks and their sizes are the same for every point (the plan's
            # worst-case norms), so the first point's bound holds for each
            y, q = np.concatenate(weak_y), np.concatenate(weak_q)
            eng._weak_bound_now = weak_mod.weak_bound(y, q)
            eng._weak_chunks_now = len(y)
            eng.weak_exchange_bound = max(eng.weak_exchange_bound, eng._weak_bound_now)
        if wrun is not None:
            eng.exponentials += wrun.exponentials
            eng._weak_rules_now = set(wrun.rules)
        return S_sum, rho_sum, traces, time.perf_counter() - t0

    # ------------------------------------------------------------------ estimate
    def _estimate(self, model: Model, coefs, on, wmask, wrun, bounds, points,
                  slow_note_s: float = math.inf) -> dict:
        """Time of this evaluation before any work, announced through the
        engine's ``notify`` when it is ``slow_note_s`` or more (the engine's
        :data:`.fast.SLOW_NOTE_S`).

        Exact clusters: one exponential of the cluster's N × N generator (N =
        (Π levels)²) per distinct sub-step of every segment and per distinct
        value of the cluster's own noise variables (the cache serves the
        rest); weak segments: per chunk and point a few N × N products on the
        pair.  Seconds = Σ count·N³·c with c measured on a 256 × 256 pair of
        four-level dots (:data:`EXP_S_PER_N3`, :data:`CHUNK_S_PER_N3`): 1828
        distinct sub-steps of an exchange pulse in 23.7 s with their product
        (scipy's expm: the other valley's levels, tens of GHz off in the
        qubit's frame, make every exponential one of a large norm), and
        8831 more weak chunks in 39 s (one point, single thread)."""
        n = model.n
        pt0 = points[0] if points else None
        exact: dict = {}
        weak_s = 0.0
        chunks = 0
        for s, e in zip(bounds[:-1], bounds[1:]):
            if e <= s or pt0 is None:
                continue
            exact_clusters, weak = _segment_clusters(model, on, wmask, s)
            for dots, pairs in exact_clusters:
                st = self._structure(model, dots, pairs)
                N = st["base"].shape[-1]
                if N < 64:
                    continue                  # a single dot's channels: cheap
                cols = [self._column(model, coefs, r, s, e, pt0) for r in st["recipe"]]
                C = np.stack(cols, axis=1) if cols else np.zeros((e - s, 0))
                rows = len(_run_starts(C))
                got = exact.setdefault((dots, pairs), {"dots": dots, "N": N, "rows": 0})
                got["rows"] += rows
            if weak and wrun is not None:
                for st in wrun._structure(s, e, tuple(weak[0])):
                    D = math.prod(model.levels[q] for q in st["dots"])
                    nc = int(st["nchunks"]) * len(st["pairs"])
                    chunks += nc
                    weak_s += nc * len(points) * float(D) ** 6 * CHUNK_S_PER_N3
        exact_s = 0.0
        largest = None
        for (dots, pairs), got in exact.items():
            got["variants"] = noise_variants(points, dots, pairs)
            got["seconds"] = got["variants"] * got["rows"] * float(got["N"]) ** 3 * EXP_S_PER_N3
            exact_s += got["seconds"]
            if largest is None or got["seconds"] > largest["seconds"]:
                largest = got
        est = {"seconds": exact_s + weak_s, "exact_seconds": exact_s, "weak_seconds": weak_s,
               "weak_chunks": chunks, "largest": None}
        if largest is not None:
            est["largest"] = {"dots": [model.dots[q].name for q in largest["dots"]],
                              "dimension": largest["N"], "distinct_substeps": largest["rows"],
                              "variants": largest["variants"]}
        notify = getattr(self.engine, "notify", None)
        if notify is not None and est["seconds"] >= slow_note_s:
            multi = [model.dots[q].name for q in range(n) if model.levels[q] > 2]
            if largest is not None and exact_s >= weak_s:
                N = largest["N"]
                why = (f"dots {', '.join(est['largest']['dots'])} form one exact cluster "
                       f"({N}×{N} channels, {largest['rows']} distinct sub-steps, "
                       f"{largest['variants']} noise variants)")
            else:
                why = (f"weak exchange in {chunks} chunks, each taken for every one of "
                       f"{len(points)} noise points")
            notify(f"slow: one evaluation will take roughly {est['seconds']:.0f} s (several per "
                   f"run): {why}; dots {', '.join(multi)} carry more than two levels (their "
                   "valley or spin–valley keys); where the other levels take no part in the "
                   "run (no spin–valley coupling, far above the qubit), describing those dots "
                   "without them makes each dot's channels 4 × 4 instead of 16 × 16; closing "
                   "idle barriers further, a looser --exchange-accuracy or fewer --nodes also "
                   "make it cheaper")
        return est

    # ------------------------------------------------------------------ channels
    def _structure(self, model: Model, dots, pairs):
        """What a cluster's channels are built from, found once per model and
        cluster (building it took most of a four-level run's time when it was
        redone for every segment): the dissipator sum and the detuning
        generator of each dot in the real Hermitian basis, and the list of
        time-dependent terms, each a real generator and a recipe for its
        coefficient column ``(kind, index, part)``."""
        ck = (id(model), dots, pairs)
        hit = self._gens.get(ck)
        if hit is not None and hit[0] is model:
            return hit[1]
        dims = tuple(model.levels[q] for q in dots)
        pos = {q: i for i, q in enumerate(dots)}
        base = np.zeros((math.prod(dims) ** 2,) * 2, dtype=complex)
        for q in dots:
            for dsp in model.dissipators_of(q):
                base += dsp.rate * _diss(_at(dot_operator(model.dots[q], dsp.operator), pos[q], dims))
        det = {q: _ham(_at(dot_operator(model.dots[q], "z"), pos[q], dims) / 2) for q in dots}
        gens, recipe = [], []

        def herm_pair(O, where):
            """c·O + c*·O†  =  Re c·(O + O†) + Im c·i(O − O†)."""
            gens.append(_ham(O + O.conj().T))
            recipe.append(where + ("re",))
            gens.append(_ham(1j * (O - O.conj().T)))
            recipe.append(where + ("im",))

        for q in dots:
            if q in model.drive:
                herm_pair(_at(dot_operator(model.dots[q], "raise"), pos[q], dims), ("drive", q))
            for k, (name, _) in enumerate(model.drive_terms.get(q, ())):
                herm_pair(_at(dot_operator(model.dots[q], name), pos[q], dims), ("term", q, k))
        for i in pairs:
            p = model.pairs[i]
            a, b = pos[p.a], pos[p.b]
            if isinstance(p, LevelPair):
                for k, (nu, M) in enumerate(p.parts):
                    O = embed_pair(M, a, b, dims)
                    if nu == 0:
                        gens.append(_ham(O))
                        recipe.append(("part", i, k, "re"))
                    else:
                        herm_pair(O, ("part", i, k))
            else:
                za = _at(dot_operator(model.dots[p.a], "z"), a, dims)
                zb = _at(dot_operator(model.dots[p.b], "z"), b, dims)
                gens.append(_ham(za @ zb / 4))
                recipe.append(("J", i, 0, "re"))
                spm = (_at(dot_operator(model.dots[p.a], "raise"), a, dims)
                       @ _at(dot_operator(model.dots[p.b], "lower"), b, dims))
                herm_pair(spm / 2, ("F", i, 0))
        # gate-band modes of a noise spectrum (bands.py): a detuning in time on
        # the dots that have profiles, one generator each whatever the point
        # (zero columns where the point's modes are zero), so that the
        # generators of a model and cluster stay the same for every point
        prof_dots = {p.dot for p in model.profiles}
        for q in dots:
            if q in prof_dots:
                gens.append(det[q])
                recipe.append(("profile", q))
        T = _basis(int(round(math.sqrt(base.shape[0]))))
        Th = T.conj().T
        real = lambda g: np.real(T @ g @ Th)          # noqa: E731
        G_r = np.stack([real(g) for g in gens]) if gens else np.zeros((0,) + base.shape)
        out = {"dims": dims, "T": T, "Th": Th, "base": real(base),
               "det": {q: real(g) for q, g in det.items()}, "G": G_r, "recipe": tuple(recipe),
               "sig": (tuple(model.dots[q] for q in dots),
                       tuple((x.operator, x.rate) for q in dots for x in model.dissipators_of(q)),
                       tuple(recipe))}
        if len(self._gens) > 64:
            self._gens.clear()
        self._gens[ck] = (model, out)
        return out

    @staticmethod
    def _column(model, coefs, recipe, s, e, pt) -> np.ndarray:
        """The coefficient of one term (a :meth:`_structure` recipe) on
        sub-steps s…e of the quadrature point ``pt``."""
        kind = recipe[0]
        part = recipe[-1]
        if kind == "drive":
            c = model.drive[recipe[1]][s:e]
        elif kind == "term":
            c = model.drive_terms[recipe[1]][recipe[2]][1][s:e]
        elif kind == "profile":
            prof = model.detuning_profile(recipe[1], pt.modes) if pt.modes else None
            return np.zeros(e - s) if prof is None else np.real(prof[s:e])
        else:
            i = recipe[1]
            dv = pt.dv[i] if pt.dv else 0.0
            J, F = coefs[i][dv]
            if kind == "part":
                c = F[recipe[2]][s:e]
            elif kind == "J":
                c = J[s:e]
            else:
                c = F[s:e]
        return np.real(c) if part == "re" else np.imag(c)

    def _channel(self, model, coefs, dots, pairs, s, e, pt):
        eng = self.engine
        st = self._structure(model, dots, pairs)
        cols = [self._column(model, coefs, r, s, e, pt) for r in st["recipe"]]
        dets = tuple(float(pt.detuning[q]) if pt.detuning else 0.0 for q in dots)
        C = np.stack(cols, axis=1) if cols else np.zeros((e - s, 0))
        key = (dots, pairs, st["dims"], model.h, dets, C.shape,
               hashlib.blake2b(np.ascontiguousarray(C).tobytes(), digest_size=16).digest(),
               st["sig"])
        got = self._cache.get(key)
        if got is not None:
            eng.cache_hits += 1
            return got
        n_sub = e - s
        starts = _run_starts(C)
        lengths = np.diff(np.append(starts, n_sub))
        # in a Hermitian basis every generator is real (a quarter of the work)
        static_r = st["base"].copy()
        for q, dq in zip(dots, dets):
            if dq:
                static_r += dq * st["det"][q]
        # generators and exponentials in batches of at most max_batch_bytes (about
        # six arrays of the batch's size alive at once): a long exact stretch of
        # a four-level pair (256 × 256 per distinct sub-step) took 21 GB at once
        k = static_r.shape[-1]
        block = max(1, int(eng.max_batch_bytes // (6 * 8 * k * k)))
        prod = None
        for lo in range(0, len(starts), block):
            hi = min(len(starts), lo + block)
            L = np.broadcast_to(static_r, (hi - lo,) + static_r.shape).copy()
            if C.shape[1]:
                L += np.einsum("rt,tij->rij", C[starts[lo:hi]], st["G"])
            mats = _expm(L * (model.h * lengths[lo:hi])[:, None, None])
            del L
            part = ordered_product(mats[None])[0]
            prod = part if prod is None else part @ prod
        eng.exponentials += len(starts)
        got = st["Th"] @ prod @ st["T"]
        # bounded in bytes as well as entries: a four-level pair's channel is 1 MB
        if (len(self._cache) > eng.cache_entries
                or (len(self._cache) + 1) * got.nbytes > CACHE_BYTES):
            self._cache.clear()
        self._cache[key] = got
        return got


def _segment_clusters(model, on, wmask, s: int):
    """The exact clusters (dots, pairs) of the segment starting at sub-step
    ``s`` that take their own channel, and its weak pairs with their dots
    (:func:`.levels_weak.split`; a dot of a weak pair gets its channel with
    the pair's corrections)."""
    active, weak = LW.split(model, on, wmask, s)
    exact = [(dots, pairs) for dots, pairs in
             clusters(model.n, [(model.pairs[i].a, model.pairs[i].b) for i in active], active)
             if not (len(dots) == 1 and weak and dots[0] in weak[1])]
    return exact, weak


def _run_starts(C: np.ndarray) -> np.ndarray:
    """Starts of the runs of equal sub-steps of the coefficients C (sub-steps,
    terms), equal to 1e-12 of each column's largest value."""
    n = C.shape[0]
    if not (C.shape[1] and n > 1):
        return np.zeros(1, dtype=int)
    scale = np.abs(C).max(axis=0)
    tol = 1e-12 * np.where(scale > 0, scale, 1.0)
    change = np.ones(n, dtype=bool)
    change[1:] = np.any(np.abs(C[1:] - C[:-1]) > tol, axis=1)
    return np.flatnonzero(change)


def _apply(T: np.ndarray, dots, M: np.ndarray, levels) -> np.ndarray:
    """(M on ``dots``) applied to the state tensor T (rows…, cols…, batch); M is
    column-stacked on the cluster: M[i' + D·j', i + D·j]."""
    n = len(levels)
    c = len(dots)
    dims = [levels[q] for q in dots]
    Mt = M.reshape(_mshape(dims))
    # Mt axes: j_out (c), i_out (c), j_in (c), i_in (c); labels above the state's 2n + 1
    jo = [2 * n + 1 + k for k in range(c)]
    io = [2 * n + 1 + c + k for k in range(c)]
    ji = [n + q for q in dots]
    ii = [q for q in dots]
    t_axes = list(range(2 * n + 1))
    out_axes = [io[dots.index(q)] if q in dots else q for q in range(n)] + \
               [jo[dots.index(q)] if q in dots else n + q for q in range(n)] + [2 * n]
    key = (tuple(levels), tuple(dots), T.shape[-1])
    path = _PATHS.get(key)
    if path is None:
        path = np.einsum_path(Mt, jo + io + ji + ii, T, t_axes, out_axes, optimize="greedy")[0]
        _PATHS[key] = path
    return np.einsum(Mt, jo + io + ji + ii, T, t_axes, out_axes, optimize=path)


_PATHS: dict = {}                # contraction orders of _apply, per register, cluster and batch


def _mshape(dims) -> tuple[int, ...]:
    """Shape of a column-stacked cluster superoperator split into per-dot axes:
    (j_out…, i_out…, j_in…, i_in…), each multi-index with the first dot most
    significant (vec index i + D·j, so j is the slower index)."""
    return tuple(dims) * 4
