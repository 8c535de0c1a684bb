"""Weak residual exchange on the general-levels path (dots of any number of levels).

The treatment of :mod:`.weak` (the Pauli path) for :class:`.levels.LevelsPath`:
where an idle barrier leaves more exchange than dropping can take within the
accuracy (1 Hz…1 kHz), the pair's dots keep their own exact one-dot channels
and the exchange enters per *chunk* as exp(Ω), Ω = ∫E₀⁻¹·B·E₀ dt the first
Magnus term in the interaction picture of the dots' own evolution E₀
(docs/simulate.md, "Weak exchange").  Without it such a pair joins its two
four-level dots into one 256 × 256 cluster for the whole run, with a
256 × 256 exponential per distinct sub-step.

Representation.  Each dot's channels are real d² × d² matrices in the
orthonormal Hermitian basis of :func:`.levels._hermitian_basis` (the basis
the levels path already uses for its exponentials); a pair's maps are real
d_a²·d_b² matrices in the product of the two dots' bases, so that a product
of one-dot maps S_a ⊗ S_b is ``np.kron(S_a, S_b)``.  The pair's Hamiltonian
(:class:`.model.LevelPair`: the ν = 0 part c₀·O₀ and c·O + c*·O† for every
part turning at ν > 0; :class:`.model.Pair`: J·z z/4 and the flip-flop) is
Σ_m c_m(t)·H_m with Hermitian H_m and real coefficients c_m per sub-step.
Every H_m is expanded in the Hermitian product basis, H_m = Σ_ij h_m,ij
G_i ⊗ G'_j, reduced to the smallest sets of one-dot operators that span all
of them (a singular value decomposition of the stacked coefficient
matrices), and −i·2π[G ⊗ G', ·] = ½(C(G) ⊗ N(G') + N(G) ⊗ C(G')), with
C(G) = −i·2π[G, ·] and N(G) = {G, ·} (both real in the Hermitian basis).  So
Ω of a chunk is Σ over quadrature nodes of products of one-dot maps
transformed by each dot's own prefix channel, P⁻¹·X·P, summed as one
product of a (d²)² × (nodes·maps) and a (nodes·maps) × (d²)² matrix, and
exp(Ω) is one (d_a·d_b)² matrix per pair and chunk.

Quadrature.  Inside a single sub-step (a burst: every sub-step different)
Simpson's rule, as in :mod:`.weak`; a run of equal sub-steps (an idle
stretch) takes composite Simpson on panels short enough that its error term
(2‖A‖p)⁴/2880 stays within :data:`SIMPSON_TOL` (the exact block-exponential
integral of :mod:`.weak` would need a 2(d_a d_b)² = 512-wide exponential per
run and chunk here, far dearer than the panels).  The error of each panel,
κ·x·(2‖A‖p)⁴/2880 (x its share of y), is added to the bound.

Bound (the notes of :mod:`.weak`; common practice, no source for the
combination): y = κ·∫‖B‖◇dt per chunk with ‖B‖◇ ≤ 2π(λ_max − λ_min) of H_pair and
κ = exp(‖L_D‖◇τ) ≤ 1.1 (chunks at most τ_max long); chunks of y ≤ y*
(:meth:`.fast.FastEngine._weak_masks`) so that Σ 2(e^y − 1 − y) is within
the accuracy dropping left (0.9·¾·(budget − dropped phase), as the
two-level path); the fidelity bound is :func:`.weak.weak_bound`
of the chunks' y and quadrature errors; λ_max − λ_min per sub-step from
:func:`spread_bound` (J for a spin–valley pair, as for J·S₁·S₂).  exp(Ω) is
a Taylor polynomial of the order that brings its remainder,
at most y'^(m+1)/(m+1)!·e^y' (y' = y + the quadrature error), below
:data:`TAYLOR_TOL` or 1e-4 of the chunk's own e^y − 1 − y; the remainder
is added to the bound too.
"""

from __future__ import annotations

import itertools
import math

import numpy as np

from ..model import LevelPair, dot_operator
from . import pauli as PL
from . import weak as weak_mod
from .clusters import clusters

KAPPA = 1.1                 # chunks short enough that ‖E₀⁻¹‖◇ ≤ 1.1 (as the Pauli path)
SIMPSON_TOL = 1e-9          # Simpson panels on runs of equal sub-steps: (2‖A‖p)⁴/2880 ≤ this
QUAD_SHARE = 0.02           # midpoint rule on sub-steps while its errors stay within this share
TAYLOR_TOL = 1e-17          # exp(Ω) as a Taylor polynomial: remainder at most this, or
TAYLOR_REL = 1e-4           # this fraction of the chunk's Magnus term e^y − 1 − y (added)
GRID = math.log1p(1e-6)     # |c_k| rounded up to this logarithmic grid for the norm bound


# ------------------------------------------------------------------ operators of one pair

def herm_factor(O: np.ndarray) -> float:
    """f with ‖c·O + c*·O†‖ ≤ f·|c| for every complex c: ‖O‖ when the rows
    and columns O touches are disjoint sets of levels (c·O + c*·O† is then
    block off-diagonal), else 2‖O‖ (triangle)."""
    nz = np.abs(O) > 1e-15
    rows, cols = np.flatnonzero(nz.any(axis=1)), np.flatnonzero(nz.any(axis=0))
    n = float(np.linalg.norm(O, 2))
    return n if not np.intersect1d(rows, cols).size else 2 * n


def pair_hermitians(model, j: int):
    """The pair's Hamiltonian as Σ_m c_m·H_m: (d0, d1, H (M, D, D) Hermitian on
    (d0, d1), d0 the lower register index and the more significant factor,
    recipes ((kind, index, "re"/"im"), ...) for the coefficients)."""
    p = model.pairs[j]
    a, b = p.a, p.b
    da, db = model.levels[a], model.levels[b]
    Hs, rec = [], []
    if isinstance(p, LevelPair):
        for k, (nu, O) in enumerate(p.parts):
            O = np.asarray(O, dtype=complex)
            if nu == 0:
                Hs.append(O)
                rec.append(("part", k, "re"))
            else:
                Hs += [O + O.conj().T, 1j * (O - O.conj().T)]
                rec += [("part", k, "re"), ("part", k, "im")]
    else:
        za, zb = dot_operator(model.dots[a], "z"), dot_operator(model.dots[b], "z")
        spm = np.kron(dot_operator(model.dots[a], "raise"), dot_operator(model.dots[b], "lower")) / 2
        Hs += [np.kron(za, zb) / 4, spm + spm.conj().T, 1j * (spm - spm.conj().T)]
        rec += [("J", 0, "re"), ("F", 0, "re"), ("F", 0, "im")]
    if a > b:                                  # reorder the factors to (lower, higher) index
        Hs = [H.reshape(da, db, da, db).transpose(1, 0, 3, 2).reshape(da * db, da * db)
              for H in Hs]
    return min(a, b), max(a, b), np.stack(Hs), tuple(rec)


def coefficient_rows(coef, recipes, s: int, e: int) -> np.ndarray:
    """The real coefficients c_m on sub-steps [s, e), (M, e − s), of one charge
    offset's ``p.coefficients(dv)`` (J, F or J, parts)."""
    J, F = coef
    out = []
    for kind, k, part in recipes:
        c = F[k] if kind == "part" else (J if kind == "J" else F)
        c = np.asarray(c)[s:e]
        out.append(np.real(c) if part == "re" else np.imag(c))
    return np.stack(out)


def spread_bound(model, j: int, coefs: dict) -> np.ndarray:
    """Per sub-step a bound on λ_max − λ_min of H_pair (Hz) at the worst charge
    offset: ‖−i[H, ·]‖◇ ≤ λ_max − λ_min (:func:`.weak.spread`, the two-level
    path's bound).  For a :class:`.model.LevelPair`, λ_max − λ_min ≤
    2‖H − s·c₀·1‖ for any s, every matrix element of the pair operator
    belongs to one part (the turning parts are off the diagonal), so
    |H − s·c₀·1| ≤ |c₀|·|O₀ − s·1| + Σ_k |c_k|·(|O_k| + |O_k|ᵀ) entrywise and
    ‖H − s·c₀·1‖ is at most the Perron root of that non-negative matrix
    (monotone in the |c_k|, rounded up to a grid of relative step 1e-6 so
    that equal rows are found once); s runs over 0 and the diagonal values
    of O₀: J for a spin–valley pair in the valley-polarised limit (s = −¼),
    as the spread of J·S₁·S₂."""
    p = model.pairs[j]
    out = None
    if not isinstance(p, LevelPair):
        for J, F in coefs.values():
            b = weak_mod.spread(J, np.abs(F))
            out = b if out is None else np.maximum(out, b)
        return out
    D = p.parts[0][1].shape[0] if p.parts else 1
    zero = [i for i, (nu, _) in enumerate(p.parts) if nu == 0]
    O0 = np.asarray(p.parts[zero[0]][1]) if zero else np.zeros((D, D))
    shifts = np.unique(np.round(np.concatenate([[0.0], np.real(np.diag(O0))]), 12))
    rest = [np.abs(np.asarray(O)) + np.abs(np.asarray(O)).T for nu, O in p.parts if nu]
    for _, F in coefs.values():
        c = np.abs(np.stack([np.asarray(f) for f in F], axis=1))   # (K, parts)
        with np.errstate(divide="ignore"):
            g = np.where(c > 0, np.exp(np.ceil(np.log(np.where(c > 0, c, 1.0)) / GRID) * GRID), 0.0)
        rows, inv = np.unique(g, axis=0, return_inverse=True)
        c0 = rows[:, zero[0]] if zero else np.zeros(len(rows))
        cr = rows[:, [i for i in range(len(p.parts)) if i not in zero]]
        Nrest = np.einsum("rk,kij->rij", cr, np.stack(rest)) if rest else 0.0
        best = None
        for sh in shifts:
            N = c0[:, None, None] * np.abs(O0 - sh * np.eye(D)) + Nrest
            lam = np.linalg.eigvalsh(N)[:, -1]
            best = lam if best is None else np.minimum(best, lam)
        b = 2 * best * (1 + 1e-12)
        b = b[inv.reshape(-1)]
        out = b if out is None else np.maximum(out, b)
    return out


class PairMaps:
    """One pair's one-dot maps (module notes): ``CA, NA`` (r_a, d_a², d_a²) and
    ``CB, NB`` (r_b, ...) real, the coefficient matrices ``hm`` (M, r_a, r_b),
    the recipes of the c_m and the register dots (d0, d1)."""

    def __init__(self, model, j: int, basis):
        d0, d1, Hs, rec = pair_hermitians(model, j)
        da, db = model.levels[d0], model.levels[d1]
        Ta, Tb = basis(da), basis(db)
        Ga = np.stack([r.conj().reshape(da, da, order="F") for r in Ta])    # orthonormal Hermitian
        Gb = np.stack([r.conj().reshape(db, db, order="F") for r in Tb])
        # h_m[k, l] = Tr((G_k ⊗ G'_l)·H_m), real
        h = np.real(np.einsum("kab,lcd,mbdac->mkl", Ga, Gb,
                              Hs.reshape(len(Hs), da, db, da, db)))
        ua, sa, _ = np.linalg.svd(np.concatenate(list(h), axis=1))
        _, sb, vb = np.linalg.svd(np.concatenate(list(h), axis=0))
        ra = max(1, int(np.count_nonzero(sa > 1e-12 * max(sa[0], 1e-300))))
        rb = max(1, int(np.count_nonzero(sb > 1e-12 * max(sb[0], 1e-300))))
        Ua, Vb = ua[:, :ra], vb[:rb].T
        self.hm = np.einsum("ki,mkl,lj->mij", Ua, h, Vb)
        self.recipes = rec
        self.dots = (d0, d1)
        self.dims = (da, db)

        def maps(T, G, U):
            d = G.shape[-1]
            eye = np.eye(d)
            Th = T.conj().T
            Gp = np.einsum("ki,kab->iab", U, G)
            C = np.stack([np.real(T @ (-2j * math.pi * (np.kron(eye, g) - np.kron(g.T, eye))) @ Th)
                          for g in Gp])
            N = np.stack([np.real(T @ (np.kron(eye, g) + np.kron(g.T, eye)) @ Th) for g in Gp])
            return C, N

        self.CA, self.NA = maps(Ta, Ga, Ua)
        self.CB, self.NB = maps(Tb, Gb, Vb)
        # real product basis (rows vec(G_k ⊗ G'_l)†) -> column-stacked superoperators
        D = da * db
        Tp = np.stack([np.kron(ga, gb).reshape(-1, order="F").conj() for ga in Ga for gb in Gb])
        self.Tp, self.Tph = Tp, Tp.conj().T
        self.bases = (Ta, Tb)
        self.D = D
        # Tp = (Ta ⊗ Tb)[:, perm]: vec(A ⊗ B) = (vec A ⊗ vec B)[perm] (column stacking)
        idx = np.arange(da * da * db * db).reshape(da, da, db, db)     # (j_a, i_a, j_b, i_b)
        self.perm = idx.transpose(0, 2, 1, 3).reshape(-1)
        assert np.allclose(np.kron(Ta, Tb)[:, self.perm], Tp)

    def to_column_stacked(self, M: np.ndarray) -> np.ndarray:
        """A real map in the product basis as the column-stacked complex
        superoperator on (d0, d1): Tp†·M·Tp, by one-dot factors."""
        Ta, Tb = self.bases
        X = _kron_apply(Ta.conj().T, Tb.conj().T, M.astype(complex))
        X = _kron_apply(Ta.T, Tb.T, X.T).T
        return X[np.ix_(self.perm, self.perm)]


def one_dot_norm(model, q: int, drive: dict, det: float, prof, dn: float, K: int) -> np.ndarray:
    """Per sub-step bound on ‖A‖◇ of dot q's own generator: 4π‖H‖ + ‖L_D‖◇, with
    ‖H‖ ≤ Σ |c|·f (:func:`herm_factor`) over the drive terms + |δf|·‖z‖/2."""
    dot = model.dots[q]
    h = np.zeros(K)
    if q in model.drive:
        h = h + np.abs(model.drive[q]) * herm_factor(dot_operator(dot, "raise"))
    for name, c in model.drive_terms.get(q, ()):
        h = h + np.abs(c) * herm_factor(dot_operator(dot, name))
    z = float(np.linalg.norm(dot_operator(dot, "z"), 2))
    h = h + abs(det) * z / 2
    if prof is not None:
        h = h + np.abs(prof) * z / 2
    return 4 * math.pi * h + dn


# ------------------------------------------------------------------ plan

def plan(eng, model, coefs: list, jmax: list, points):
    """(on, weak, prep): the sub-steps of each pair kept on (not dropped) and
    those of them treated as weak, as :meth:`.fast.FastEngine._weak_plan` for
    the Pauli path (the same split of the accuracy, masks and y*), with the
    general-levels norms; ``prep`` holds what :func:`segment` needs, or is
    None without weak exchange.  Sets the engine's dropped phase."""
    K, h = model.k, model.h
    eng._weak_bound_now = 0.0
    eng._weak_chunks_now = 0
    eng._weak_rules_now = set()
    on, total = eng._drop(jmax, h, K, eng.exchange_budget)
    weak = [np.zeros(K, dtype=bool) for _ in jmax]
    if not eng.weak_exchange or not K or not jmax or eng.exchange_budget <= 0:
        eng._set_neglected(total)
        return on, weak, None
    eps = 0.75 * eng.exchange_budget / 2             # fidelity for the weak treatment
    # ‖B‖◇ ≤ 2π·(spread of H's eigenvalues) per pair and sub-step (spread_bound)
    xn = [2 * math.pi * spread_bound(model, j, coefs[j]) * h for j in range(len(jmax))]
    dn = {q: weak_mod.diss_norm([(d.rate, dot_operator(model.dots[q], d.operator))
                                 for d in model.dissipators_of(q)]) for q in range(model.n)}
    dnorm = 2 * max(dn.values(), default=0.0)
    tau_max = math.log(KAPPA) / dnorm if dnorm > 0 else math.inf
    kmax = min(KAPPA, math.exp(dnorm * K * h))
    w, ystar = eng._weak_masks(on, xn, kmax, eps)
    if w is None:
        eng._set_neglected(total)
        return on, weak, None
    on, total = eng._drop(jmax, h, K, eng.exchange_budget / 2)
    # what dropping left of the accuracy (a tenth kept for quadrature and
    # composition), as the two-level path: ¾·φ + bound ≤ accuracy
    eps = 0.9 * 0.75 * (eng.exchange_budget - total)
    w, ystar = eng._weak_masks(on, xn, kmax, eps)
    eng._set_neglected(total)
    if w is None:
        return on, weak, None
    anorm = {}
    for q in range(model.n):
        det = max((abs(pt.detuning[q]) if pt.detuning else 0.0) for pt in points)
        prof = None
        for pt in points:
            d = model.detuning_profile(q, pt.modes) if pt.modes else None
            if d is not None:
                prof = np.abs(d) if prof is None else np.maximum(prof, np.abs(d))
        anorm[q] = one_dot_norm(model, q, model.drive, det, prof, dn[q], K)
    prep = {"xn": xn, "ystar": ystar, "eps": eps, "dnorm": dnorm, "anorm": anorm, "kappa": kmax,
            "tau_max": tau_max, "on": on, "ip": w}
    return on, w, prep


def split(model, on: list, weak: list, s: int):
    """The pairs of the segment starting at sub-step ``s`` kept exactly, and the
    weak ones with their dots ((pairs, dots) or None).  A weak pair touching a
    dot of an exact cluster of two or more is kept exactly too (its dots must
    be clusters of one here; an exchange pulse's neighbour joins the pulse)."""
    exact = [i for i, (m, w) in enumerate(zip(on, weak)) if m[s] and not w[s]]
    wk = [i for i, w in enumerate(weak) if w[s]]
    while wk:
        big = set()
        for dots, _ in clusters(model.n, [(model.pairs[i].a, model.pairs[i].b) for i in exact],
                                exact):
            if len(dots) > 1:
                big.update(dots)
        move = [i for i in wk if model.pairs[i].a in big or model.pairs[i].b in big]
        if not move:
            break
        exact += move
        wk = [i for i in wk if i not in move]
    if not wk:
        return exact, None
    return exact, (tuple(wk), tuple(sorted({q for i in wk for q in (model.pairs[i].a,
                                                                    model.pairs[i].b)})))


# ------------------------------------------------------------------ weak segments

CACHE_BYTES = 1 << 28          # the per-dot and Ω caches are cleared when they would exceed this
TRANSFORM_BYTES = 1 << 26      # a dot's transformed maps at every node kept up to this size
NODE_BLOCK = 4096              # otherwise made for this many nodes at a time


class WeakRun:
    """The weak segments of one evaluation (one ``average`` call), computed
    for each quadrature point with caches the points share: the segment's
    pieces, chunks and quadrature nodes (the same for every point), each dot's
    node channels and transformed maps per value of its own noise variables
    (its T2* detuning, its gate-band modes), and each pair's Ω per chunk for
    one pair of dot values, reused, scaled, for a charge offset that only
    scales the pair's coefficients (an exponential J(V))."""

    def __init__(self, lp, model, coefs: list, prep: dict, basis, known: dict | None = None):
        self.lp, self.model, self.coefs, self.prep, self.basis = lp, model, coefs, prep, basis
        # the pairs' maps, also from ``known`` (id(pair) -> (pair, PairMaps), kept by the caller)
        self.known = {} if known is None else known
        self.maps: dict = {}
        for j, p in enumerate(model.pairs):
            hit = self.known.get(id(p))
            if hit is not None and hit[0] is p:
                self.maps[j] = hit[1]
        self._struct: dict = {}
        self._dots: dict = {}
        self._dot_bytes = 0
        self._omega: dict = {}
        self._omega_bytes = 0
        self._scaled: dict = {}
        self.exponentials = 0
        self.rules: set = set()        # quadrature rules used inside sub-steps

    # -------------------------------------------------------------- public
    def segment(self, s: int, e: int, pairs, pt):
        """The channels of the weak ``pairs`` and their dots over sub-steps
        [s, e) for the point ``pt``: a list, in time order, of (dots,
        column-stacked complex channel), and the chunks' first-order sizes y
        and quadrature (and Taylor) errors q.  A weak component of one pair
        (the usual case) comes as one channel over the whole segment; the dots
        of a component of several pairs receive each chunk's maps in turn."""
        out, ys, qs = [], [], []
        for st in self._structure(s, e, tuple(pairs)):
            out.append(self._channels(st, pt))
            ys.append(st["y"])
            qs.append(st["q"])
        return itertools.chain.from_iterable(out), np.concatenate(ys), np.concatenate(qs)

    # -------------------------------------------------------------- structure (point-independent)
    def _structure(self, s, e, pairs):
        key = (s, e, pairs)
        got = self._struct.get(key)
        if got is None:
            got = self._struct[key] = [self._component(s, e, cp, cd)
                                       for cp, cd in _components(self.model, pairs)]
        return got

    def _component(self, s, e, cpairs, cdots):
        model, prep, h = self.model, self.prep, self.model.h
        n = e - s
        for j in cpairs:
            if j not in self.maps:
                self.maps[j] = PairMaps(model, j, self.basis)
                if len(self.known) > 64:
                    self.known.clear()
                self.known[id(model.pairs[j])] = (model.pairs[j], self.maps[j])
        # runs of equal sub-steps in every point: drive, drive terms and
        # profiles of the dots, every charge offset's pair coefficients
        cols = []
        for q in cdots:
            if q in model.drive:
                c = model.drive[q][s:e]
                cols += [c.real, c.imag]
            for _, c in model.drive_terms.get(q, ()):
                cols += [np.real(c[s:e]), np.imag(c[s:e])]
            cols += [p.shape[s:e] for p in model.profiles if p.dot == q]
        for j in cpairs:
            for coef in self.coefs[j].values():
                cols += list(coefficient_rows(coef, self.maps[j].recipes, s, e))
        change = np.ones(n, dtype=bool)
        if n > 1 and cols:
            allc = np.stack(cols, axis=1)
            scale = np.abs(allc).max(axis=0)
            tol = 1e-12 * np.where(scale > 0, scale, 1.0)
            change[1:] = np.any(np.abs(allc[1:] - allc[:-1]) > tol, axis=1)
        # chunks: first-order size within y*, length within τ_max
        x = sum(prep["xn"][j][s:e] for j in cpairs)
        max_len = max(1, int(prep["tau_max"] / h)) if math.isfinite(prep["tau_max"]) else n
        cstart = weak_mod.chunk_cuts(prep["kappa"] * x, prep["ystar"], max_len)
        nch = len(cstart)
        clen = np.diff(np.append(cstart, n))
        kap = np.exp(prep["dnorm"] * clen * h)
        y = np.add.reduceat(x, cstart) * kap
        # pieces: runs of equal sub-steps cut at the chunk starts; composite
        # Simpson on m panels (one for a single sub-step)
        is_c = np.zeros(n, dtype=bool)
        is_c[cstart] = True
        starts = np.flatnonzero(change | is_c)
        lens = np.diff(np.append(starts, n))
        a2 = np.maximum.reduceat(sum(prep["anorm"][q][s:e] for q in cdots), starts)
        theta = (2880 * SIMPSON_TOL) ** 0.25
        m = np.where(lens > 1, np.minimum(lens, np.ceil(2 * a2 * lens * h / theta)), 1)
        m = np.maximum(m, 1).astype(int)
        panel = lens * h / m
        chunk_of = np.searchsorted(cstart, starts, side="right") - 1
        xs = kap[chunk_of] * np.add.reduceat(x, starts)                  # κ·x per piece
        qp = xs * (2 * a2 * panel) ** 4 / 2880                           # Simpson's error
        # a single sub-step may take the midpoint rule instead (one node, error
        # κ·x·(2‖A‖h)²/24): those of the smallest errors, while their sum stays
        # within QUAD_SHARE of the weak treatment's accuracy (idle sub-steps
        # whose pair coefficients turn; a burst at 1 Hz)
        qm = np.where(lens == 1, xs * (2 * a2 * panel) ** 2 / 24, np.inf)
        srt = np.argsort(qm, kind="stable")
        k_mid = int(np.searchsorted(np.cumsum(qm[srt]), QUAD_SHARE * prep["eps"], side="right"))
        mid = np.zeros(len(starts), dtype=bool)
        mid[srt[:k_mid]] = True
        qp = np.where(mid, qm, qp)
        q = np.bincount(chunk_of, weights=qp, minlength=nch)
        order, rem = _taylor_orders(y + q)
        q = q + rem
        # quadrature nodes (j counts half-panels from the piece's start): a
        # Simpson piece j = 0..2m−1, and its end (j = 2m) unless the next piece
        # of its chunk is a Simpson one, whose start node then takes the end's
        # weight (the same channel); a midpoint piece j = 1 alone
        npc = len(starts)
        first = np.r_[True, chunk_of[1:] != chunk_of[:-1]]
        last_in_chunk = np.r_[first[1:], True]
        nxt_simpson = np.r_[~mid[1:], False]
        merged = np.flatnonzero(~mid & ~last_in_chunk & nxt_simpson)
        ends = np.flatnonzero(~mid & (last_in_chunk | ~nxt_simpson))
        cnt = np.where(mid, 1, 2 * m)
        piece = np.repeat(np.arange(npc), cnt)
        jj = np.arange(len(piece)) - np.repeat(np.cumsum(cnt) - cnt, cnt)
        jj = np.where(mid[piece], 1, jj)
        wgt = np.where(jj == 0, 1.0, np.where(jj % 2 == 1, 4.0, 2.0)) * panel[piece] / 6
        wgt = np.where(mid[piece], panel[piece], wgt)
        node_piece = np.concatenate([piece, ends])
        node_j = np.concatenate([jj, 2 * m[ends]])
        node_w = np.concatenate([wgt, panel[ends] / 6])
        o = np.lexsort((node_j, node_piece))
        node_piece, node_j, node_w = node_piece[o], node_j[o], node_w[o]
        node_chunk = chunk_of[node_piece]
        cuts = np.searchsorted(node_chunk, np.arange(nch + 1))
        self.rules.update(["midpoint"] if mid.any() else [])
        self.rules.update(["simpson"] if not mid.all() else [])
        return {"s": s, "e": e, "pairs": cpairs, "dots": cdots, "y": y, "q": q, "order": order,
                "starts": starts, "m": m, "panel": panel, "first": first,
                "last": np.flatnonzero(last_in_chunk), "merged": merged,
                "node_piece": node_piece, "node_j": node_j, "node_w": node_w,
                "start_node": np.searchsorted(node_piece, np.arange(npc)), "cuts": cuts,
                "nchunks": nch}

    # -------------------------------------------------------------- one dot
    def _dot(self, st, q, pt):
        """Dot q's own channels on the segment for this point's values of its
        variables: piece ends (prefix from the chunk start) and, per pair of
        the component, the transformed maps P⁻¹·C·P and P⁻¹·N·P at the nodes."""
        model = self.model
        det = pt.detuning[q] if pt.detuning else 0.0
        modes = (tuple(x for x, p in zip(pt.modes, model.profiles) if p.dot == q)
                 if pt.modes else ())
        key = (st["s"], st["e"], st["pairs"], q, det, modes)
        got = self._dots.get(key)
        if got is not None:
            return got
        s, e = st["s"], st["e"]
        lp = self.lp
        sq = lp._structure(model, (q,), ())
        cols = [lp._column(model, self.coefs, r, s, e, pt) for r in sq["recipe"]]
        starts = st["starts"]
        C = np.stack(cols, axis=1)[starts] if cols else np.zeros((len(starts), 0))
        static = sq["base"] + (det * sq["det"][q] if det else 0.0)
        Lp = np.broadcast_to(static, (len(starts),) + static.shape).copy()
        if C.shape[1]:
            Lp += np.einsum("kt,tij->kij", C, sq["G"])
        Eh, ne = _expm_real(Lp, st["panel"] / 2)
        self.exponentials += ne
        Ep = Eh @ Eh
        for i in np.flatnonzero(st["m"] > 1):
            Ep[i] = np.linalg.matrix_power(Ep[i], int(st["m"][i]))
        after = weak_mod.chunk_prefix(Ep[None], st["first"])[0]
        before = np.empty_like(after)
        before[1:] = after[:-1]
        before[st["first"]] = np.eye(after.shape[-1])
        # node channels Eh^j · before (j ≤ 2m)
        npce, nj = st["node_piece"], st["node_j"]
        Pn = before[npce].copy()
        cur = Eh[npce]
        for jv in range(1, int(nj.max()) + 1):
            sel = np.flatnonzero(nj >= jv)
            Pn[sel] = cur[sel] @ Pn[sel]
        # the transformed maps at every node, kept when they are small enough;
        # otherwise made per block of nodes where they are used (_omegas)
        sides = {j: self.maps[j].dots.index(q) for j in st["pairs"] if q in self.maps[j].dots}
        k2 = Pn.shape[-1] ** 2
        tbytes = sum(2 * 8 * len(Pn) * k2 * (self.maps[j].CA if sd == 0 else self.maps[j].CB).shape[0]
                     for j, sd in sides.items())
        maps = None
        if tbytes <= TRANSFORM_BYTES:
            Pi = np.linalg.inv(Pn)
            maps = {j: _transforms(Pi, Pn, self.maps[j], sd) for j, sd in sides.items()}
        got = {"after": after[st["last"]], "maps": maps, "Pn": Pn, "sides": sides, "key": key}
        size = Pn.nbytes + got["after"].nbytes + (tbytes if maps is not None else 0)
        if self._dot_bytes + size > CACHE_BYTES:
            self._dots.clear()
            self._dot_bytes = 0
        self._dots[key] = got
        self._dot_bytes += size
        return got

    # -------------------------------------------------------------- Ω and channels
    def _scale_of(self, st, j, dv):
        """(base charge offset, factor): the pair's coefficients on the segment at
        ``dv`` are factor × those at the base (to 1e-13), or (dv, 1)."""
        key = (st["s"], st["e"], j, dv)
        got = self._scaled.get(key)
        if got is None:
            pm = self.maps[j]
            c = coefficient_rows(self.coefs[j][dv], pm.recipes, st["s"], st["e"])
            got = (dv, 1.0)
            for base in sorted(self.coefs[j]):
                if base == dv:
                    break
                ref = coefficient_rows(self.coefs[j][base], pm.recipes, st["s"], st["e"])
                k = np.unravel_index(np.argmax(np.abs(ref)), ref.shape)
                if ref[k] == 0:
                    continue
                r = c[k] / ref[k]
                if np.all(np.abs(c - r * ref) <= 1e-13 * np.abs(c).max()):
                    got = (base, float(r))
                    break
            self._scaled[key] = got
        return got

    def _omegas(self, st, j, da, db, dv):
        """Ω of pair j per chunk for the dots' data ``da``, ``db`` at charge
        offset dv: a function of the chunk giving the powers [Ω, Ω², …] up to
        its Taylor order (real (d_a d_b)² matrices in the product basis).  They
        are kept, for the charge offsets that only scale Ω (exp(rΩ) =
        Σ r^k Ω^k/k!: one product per chunk and point instead of one per
        order), when all chunks' powers fit in half of CACHE_BYTES; otherwise
        made chunk by chunk as they are used (memory)."""
        key = (j, da["key"], db["key"], dv)
        got = self._omega.get(key)
        if got is not None:
            return got.__getitem__
        pm = self.maps[j]
        c = coefficient_rows(self.coefs[j][dv], pm.recipes, st["s"], st["e"])[:, st["starts"]]
        npce, w = st["node_piece"], st["node_w"]
        W = c[:, npce] * w
        mg = st["merged"]
        np.add.at(W, (slice(None), st["start_node"][mg + 1]), c[:, mg] * st["panel"][mg] / 6)
        Wc = np.einsum("mn,mij->nij", W, pm.hm) / 2                     # (N, r_a, r_b)
        cuts, order = st["cuts"], st["order"]

        def chunk(ch):
            Z = None
            for lo in range(cuts[ch], cuts[ch + 1], NODE_BLOCK):
                hi = min(cuts[ch + 1], lo + NODE_BLOCK)
                TCa, TNa = _node_maps(da, j, pm, lo, hi)
                TCb, TNb = _node_maps(db, j, pm, lo, hi)
                n_, rb, kb = TNb.shape[0], TNb.shape[1], TNb.shape[-1]
                ka = TCa.shape[-1]
                YN = (Wc[lo:hi] @ TNb.reshape(n_, rb, kb * kb)).reshape(n_, -1, kb * kb)
                YC = (Wc[lo:hi] @ TCb.reshape(n_, rb, kb * kb)).reshape(n_, -1, kb * kb)
                A_ = np.concatenate([TCa.reshape(n_, -1, ka * ka), TNa.reshape(n_, -1, ka * ka)],
                                    axis=1)
                Y_ = np.concatenate([YN, YC], axis=1)
                part = A_.reshape(-1, ka * ka).T @ Y_.reshape(-1, kb * kb)
                Z = part if Z is None else Z + part
            Om = Z.reshape(ka, ka, kb, kb).transpose(0, 2, 1, 3).reshape(ka * kb, ka * kb)
            pw = [Om]                                   # Ω, Ω², … to the chunk's Taylor order
            for _ in range(int(order[ch]) - 1):
                pw.append(pw[-1] @ Om)
            return pw

        size = int(order.sum()) * 8 * pm.D ** 4
        if size > CACHE_BYTES // 2:
            return chunk
        if self._omega_bytes + size > CACHE_BYTES:
            self._omega.clear()
            self._omega_bytes = 0
        out = [chunk(ch) for ch in range(st["nchunks"])]
        self._omega[key] = out
        self._omega_bytes += size
        return out.__getitem__

    def _channels(self, st, pt):
        dd = {q: self._dot(st, q, pt) for q in st["dots"]}
        oms = {}
        for j in st["pairs"]:
            a, b = self.maps[j].dots
            dv = pt.dv[j] if pt.dv else 0.0
            base, r = self._scale_of(st, j, dv)
            oms[j] = (self._omegas(st, j, dd[a], dd[b], base), r)
        if len(st["pairs"]) == 1:
            (j,) = st["pairs"]
            pm = self.maps[j]
            a, b = pm.dots
            M = None
            for c in range(st["nchunks"]):
                E = _taylor(oms[j][0](c), oms[j][1])
                M = E if M is None else E @ M
                M = _kron_apply(dd[a]["after"][c], dd[b]["after"][c], M)
            return [((a, b), pm.to_column_stacked(M))]
        return self._chunk_pushes(st, dd, oms)

    def _chunk_pushes(self, st, dd, oms):
        """A component of several pairs: per chunk each pair's exp(Ω), then each
        dot's own channel over the chunk, made as they are applied."""
        for c in range(st["nchunks"]):
            for j in st["pairs"]:
                pm = self.maps[j]
                yield pm.dots, pm.to_column_stacked(_taylor(oms[j][0](c), oms[j][1]))
            for q in st["dots"]:
                T = _dot_basis({j: self.maps[j] for j in st["pairs"]}, q)
                yield (q,), T.conj().T @ dd[q]["after"][c] @ T


def _components(model, pairs):
    """The weak pairs grouped by the dots they join: [(pairs, dots), ...]."""
    comps: list = []
    for j in pairs:
        dd = {model.pairs[j].a, model.pairs[j].b}
        hit = [c for c in comps if c[1] & dd]
        for c in hit:
            comps.remove(c)
            dd |= c[1]
        comps.append(([j] + [i for c in hit for i in c[0]], dd))
    return [(tuple(sorted(p)), tuple(sorted(d))) for p, d in comps]


def _taylor_orders(yq: np.ndarray):
    """Per chunk the smallest order m ≥ 1 whose Taylor remainder of exp,
    y^(m+1)/(m+1)!·e^y (y the bound on ‖Ω‖◇), is within TAYLOR_TOL or
    TAYLOR_REL·(e^y − 1 − y), and that remainder."""
    orders = np.ones(len(yq), dtype=int)
    rems = np.zeros(len(yq))
    for i, y in enumerate(yq.tolist()):
        term, m = y, 1                                   # term = y^m/m!
        tol = max(TAYLOR_TOL, TAYLOR_REL * (math.expm1(y) - y))
        while True:
            rest = term * y / (m + 1) * math.exp(y)
            if rest <= tol or m >= 40:
                break
            m += 1
            term *= y / m
        orders[i], rems[i] = m, rest
    return orders, rems


def _expm_real(A: np.ndarray, t: np.ndarray):
    """exp(A·t) for (n, k, k) real generators, one per run of equal (A, t):
    (exponentials, how many were taken)."""
    n = A.shape[0]
    if n == 0:
        return A.copy(), 0
    change = np.ones(n, dtype=bool)
    if n > 1:
        change[1:] = np.any((A[1:] != A[:-1]).reshape(n - 1, -1), axis=1) | (t[1:] != t[:-1])
    first = np.flatnonzero(change)
    if A.shape[-1] <= 16:
        E = PL.expm_batch(A[first] * t[first][:, None, None])
    else:
        from scipy.linalg import expm
        E = np.stack([expm(a * tt) for a, tt in zip(A[first], t[first])])
    return E[np.cumsum(change) - 1], len(first)


def _dot_basis(maps, q):
    """Dot q's Hermitian basis (rows vec(G_k)†), from a pair that holds it."""
    for pm in maps.values():
        if q in pm.dots:
            return pm.bases[pm.dots.index(q)]
    raise KeyError(q)


def _transforms(Pi, Pn, pm, side):
    """(P⁻¹·C·P, P⁻¹·N·P) of pair map set ``pm`` on its dot ``side`` at nodes."""
    Cm, Nm = (pm.CA, pm.NA) if side == 0 else (pm.CB, pm.NB)
    return _transform(Pi, Cm, Pn), _transform(Pi, Nm, Pn)


def _node_maps(dd, j, pm, lo, hi):
    """The transformed maps of one dot's data ``dd`` at nodes [lo, hi) for pair j."""
    if dd["maps"] is not None:
        TC, TN = dd["maps"][j]
        return TC[lo:hi], TN[lo:hi]
    P = dd["Pn"][lo:hi]
    return _transforms(np.linalg.inv(P), P, pm, dd["sides"][j])


def _transform(Pinv, X, P):
    """P⁻¹·X_i·P for nodes (N, k, k) and maps X (r, k, k): (N, r, k, k)."""
    N, k = P.shape[0], P.shape[-1]
    r = X.shape[0]
    XP = (X.reshape(r * k, k) @ P.transpose(1, 0, 2).reshape(k, N * k)).reshape(r, k, N, k)
    XP = XP.transpose(2, 1, 0, 3).reshape(N, k, r * k)
    return (Pinv @ XP).reshape(N, k, r, k).transpose(0, 2, 1, 3)


def _taylor(powers: list, r: float) -> np.ndarray:
    """Σ_{k≤m} (rΩ)^k/k! from the powers [Ω, Ω², …, Ω^m]."""
    out = np.eye(powers[0].shape[0])
    f = 1.0
    for k, P in enumerate(powers, start=1):
        f *= r / k
        out += f * P
    return out


def _kron_apply(A: np.ndarray, B: np.ndarray, M: np.ndarray) -> np.ndarray:
    """(A ⊗ B)·M without forming A ⊗ B."""
    ka, kb = A.shape[0], B.shape[0]
    t = (A @ M.reshape(ka, -1)).reshape(ka, kb, -1)
    return np.matmul(B, t).reshape(ka * kb, -1)
