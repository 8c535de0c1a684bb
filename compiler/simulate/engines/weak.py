"""Weak exchange in the interaction picture of the dots' own evolution.

Used by :class:`.fast.FastEngine` for stretches where a pair's exchange is
far too weak to matter at full strength but too strong to be dropped within
the accuracy (docs/simulate.md, "Weak exchange").  Keeping such a pair on
exactly joins its dots into one cluster for the whole stretch (64 × 64
Pauli transfer matrices for three dots, an exponential per distinct
sub-step); here every *unit* keeps its own exact channel and the exchange
enters as a small correction on its pair.  A unit is a single dot, or the
exact cluster of an exchange pulse beside which the weak pair sits (the
pulse's pair evolves exactly, its neighbour's residual exchange is weak):
the correction then acts on the unit and the other dot together (at most
:data:`MAX_UNION` = 4³, so no three-dot cluster is ever formed for it).

Method.  On a stretch the generator is L(t) = L₀(t) + B(t): L₀ the sum of
the dots' own generators (drive, detuning, relaxation, dephasing), B the
weak pairs' exchange J·σzσz/4 + flip-flop (both parts kept).  With
E₀(t) = T exp∫L₀, the channel is E = E₀(T)·V, V = T exp∫B_I(t)dt,
B_I = E₀(t)⁻¹·B(t)·E₀(t) (the interaction picture; E₀ is a product of one-dot
channels, so B_I of a pair acts on the pair's two dots only).  The stretch
is cut into *chunks*; on each, V is replaced by Π_p exp(Ω_p) with Ω_p =
∫B_p,I dt over the chunk (first Magnus term, one 16 × 16 exponential per
pair and chunk).  Ω_p is computed on one-dot matrices: every two-dot term
is a sum of products of one-dot maps (``pauli.anticommutator_map``), so
∫E₀⁻¹(O_a⊗O_b)E₀ = ∫(E₀ₐ⁻¹O_aE₀ₐ)⊗(E₀_b⁻¹O_bE₀_b).  Sub-steps whose
coefficients differ (a burst) take Simpson's rule inside the sub-step;
runs of equal sub-steps (idle) take the exact integral of the block
exponential exp([[A, B], [0, A]]τ) (Van Loan, IEEE Trans. Autom. Control
23, 395 (1978)).

Error bound (diamond norm ‖·‖◇, common practice, no source for the
combination): with y = ∫‖B_I‖◇ dt over a chunk, T exp∫B_I and
Π_p exp(Ω_p) both equal 1 + Σ_pΩ_p up to a remainder of at most
e^y − 1 − y, so they differ by at most 2(e^y − 1 − y) ≈ y²; the
chunk's channel E₀·V moves by no more (E₀ is a channel, norm 1).
‖B_p‖◇ ≤ 2π·(λ_max − λ_min of H_p) (:func:`spread`; 2πJ for J·S₁·S₂) and
‖E₀⁻¹‖◇ ≤ exp(‖L_D‖◇·τ) over a chunk of length τ (the dissipators' norm
‖L_D‖◇ ≤ Σ 2γ‖c‖²), so y ≤ κ·∫2π·spread dt with κ = exp(‖L_D‖◇τ).  Simpson's rule on a
sub-step of length h adds at most κ·x·(2‖A‖h)⁴/2880 to ‖Ω‖ (x the
sub-step's share of y, ‖A‖ the units' generator norm, exchange inside a
unit included); the midpoint rule (one node per sub-step) adds at most
κ·x·(2‖A‖h)²/24 and is taken instead when that, summed over the stretch,
is within a tenth of the accuracy given to this treatment (slow drive).
The nodes' transformed maps are kept with the node axis last, so the
elementwise work runs along long rows.  Chunks are cut so
that y ≤ y* with Σ y = Y over the run: Σ(e^y − 1 − y) ≤ ½y*(1 + y*)·Y,
within the accuracy given to this treatment.  The change of the average
gate fidelity is at most half the change of the channel (|ΔF| ≤ ½‖ΔE‖◇).
"""

from __future__ import annotations

import math

import numpy as np

from . import pauli as PL

_SIG = {"x": PL.SIGMA[1], "y": PL.SIGMA[2], "z": PL.SIGMA[3]}
# one-dot maps: −i·2π[σ, ·] (0..2) and {σ, ·} (3..5) for σ = x, y, z
ONE_DOT = np.stack([PL.hamiltonian_generator(_SIG[c]) for c in "xyz"]
                   + [PL.anticommutator_map(_SIG[c]) for c in "xyz"])
# their entries (two each, in op order): rows, columns, values
_NZ = [np.argwhere(np.abs(o) > 1e-12) for o in ONE_DOT]
assert all(len(z) == 2 for z in _NZ)
_NZ_J = np.array([j for z in _NZ for j, _ in z])
_NZ_K = np.array([k for z in _NZ for _, k in z])
_NZ_V = np.array([ONE_DOT[i][j, k] for i, z in enumerate(_NZ) for j, k in z])
_H = {"x": 0, "y": 1, "z": 2}
_A = {"x": 3, "y": 4, "z": 5}
# H_pair = J·ZZ/4 + Re F·(XX + YY)/4 + Im F·(XY − YX)/4 (model.Pair's generators);
# coefficient kind (0: J, 1: Re F, 2: Im F), factor, σ on the first and second dot
_PAIR_TERMS = (("J", 0.25, "z", "z"), ("Fr", 0.25, "x", "x"), ("Fr", 0.25, "y", "y"),
               ("Fi", 0.25, "x", "y"), ("Fi", -0.25, "y", "x"))
_KIND = {"J": 0, "Fr": 1, "Fi": 2}


def kron_terms(swapped: bool) -> tuple[tuple[int, float, int, int], ...]:
    """The pair generator as Σ c_kind·factor·(O_first ⊗ O_second) with one-dot
    maps of :data:`ONE_DOT`: (kind, factor, index on the lower register
    dot, index on the higher one); ``swapped`` when the pair's first dot is
    the higher register index."""
    out = []
    for kind, f, sa, sb in _PAIR_TERMS:
        if swapped:
            sa, sb = sb, sa
        # −i[σa⊗σb, ·] = ½(−i[σa, ·]⊗{σb, ·} + {σa, ·}⊗−i[σb, ·])
        out.append((_KIND[kind], 0.5 * f, _H[sa], _A[sb]))
        out.append((_KIND[kind], 0.5 * f, _A[sa], _H[sb]))
    return tuple(out)


def pair_generator(terms, cJ: float, cFr: float, cFi: float) -> np.ndarray:
    """The 16 × 16 generator Σ c·factor·(O_a ⊗ O_b) of a pair of single dots
    (:func:`pair_generator_on` with units of one dot)."""
    one = _embedded_nonzeros(0, 1)
    return pair_generator_on(terms, (cJ, cFr, cFi), one, one, 4, 4)


def chunk_cuts(x: np.ndarray, ystar: float, max_len: int) -> np.ndarray:
    """Starts of consecutive chunks of the sub-steps (weights ``x`` ≥ 0) so
    that each chunk's sum stays within ``ystar`` and its length within
    ``max_len`` sub-steps (at least one sub-step per chunk)."""
    cum = np.concatenate([[0.0], np.cumsum(x)])
    starts = [0]
    n = len(x)
    while True:
        s = starts[-1]
        e = int(np.searchsorted(cum, cum[s] + ystar, side="right")) - 1
        e = min(max(e, s + 1), s + max_len)
        if e >= n:
            return np.array(starts)
        starts.append(e)


def van_loan(A: np.ndarray, B: np.ndarray, tau) -> np.ndarray:
    """∫_0^τ e^{−Au}·B·e^{Au} du for stacks of A, B (…, k, k): the top right
    block of exp([[A, B], [0, A]]τ) is ∫ e^{A(τ−u)}Be^{Au}du (Van Loan 1978),
    taken back by e^{−Aτ}."""
    k = A.shape[-1]
    lead = np.broadcast_shapes(A.shape[:-2], B.shape[:-2])
    big = np.zeros(lead + (2 * k, 2 * k))
    big[..., :k, :k] = A
    big[..., :k, k:] = B
    big[..., k:, k:] = A
    E = PL.expm_batch(big * np.asarray(tau, dtype=float)[..., None, None])
    return np.linalg.solve(E[..., :k, :k], E[..., :k, k:])


def weak_bound(y: np.ndarray, q: np.ndarray) -> float:
    """Bound on the change of the average gate fidelity of a run of chunks with
    first-order sizes ``y`` and quadrature errors ``q`` (module notes): half
    the summed diamond-norm errors, with the composition factor."""
    y = np.asarray(y, dtype=float)
    q = np.asarray(q, dtype=float)
    d = 2 * (np.expm1(y) - y) + q * np.exp(y + q)
    return float(0.5 * d.sum() * math.exp(d.sum()))


def spread(J, F) -> np.ndarray:
    """λ_max − λ_min of H = J·σzσz/4 + flip-flop of modulus |F| (Hz): its
    eigenvalues are J/4 (twice) and −J/4 ± |F|/2.  ‖−i[H, ·]‖◇ ≤ λ_max −
    λ_min (shift H by the middle of its spectrum: ‖[H', ρ]‖₁ ≤ 2‖H'‖·‖ρ‖₁,
    with an ancilla alike), 1.5× below 2‖H‖ for the isotropic J·S₁·S₂."""
    J = np.asarray(J, dtype=float)
    F = np.abs(np.asarray(F, dtype=float))
    hi = np.maximum(J / 4, -J / 4 + F / 2)
    lo = np.minimum(J / 4, -J / 4 - F / 2)
    return hi - lo


def diss_norm(rates_ops) -> float:
    """‖Σ γ·D[c]‖◇ ≤ Σ 2γ‖c‖² (D[c]ρ = cρc† − ½{c†c, ρ})."""
    return float(sum(2 * g * np.linalg.norm(c, 2) ** 2 for g, c in rates_ops))


def one_dot_norms(re: np.ndarray | None, im: np.ndarray | None, det: float,
                  prof: np.ndarray | None, D: float, n: int) -> np.ndarray:
    """Per sub-step bound on ‖A‖◇ of one dot's generator: 2·2π‖H‖ + ‖L_D‖◇ with
    H = Re c·σx − Im c·σy + (detuning + profile)·σz/2."""
    h = np.full(n, abs(det) / 2)
    if re is not None:
        h = h + np.hypot(re, im)
    if prof is not None:
        h = h + np.abs(prof) / 2
    return 4 * math.pi * h + D


MAX_UNION = 64          # largest channel (4^dots) a weak pair's correction may act on


def _embedded_nonzeros(pos: int, c: int):
    """The entries of every one-dot map of :data:`ONE_DOT` on position ``pos``
    of ``c`` dots (identity on the others): (rows (6, m), columns (6, m),
    values (6, m)), m = 2·4^(c−1)."""
    rows, cols, vals = [], [], []
    for o in range(6):
        big = np.eye(1)
        for i in range(c):
            big = np.kron(big, ONE_DOT[o] if i == pos else np.eye(4))
        nz = np.argwhere(np.abs(big) > 1e-12)
        rows.append(nz[:, 0])
        cols.append(nz[:, 1])
        vals.append(big[nz[:, 0], nz[:, 1]])
    return np.array(rows), np.array(cols), np.array(vals)


def _transformed_last(Pn: np.ndarray, Pi: np.ndarray, nz) -> np.ndarray:
    """P⁻¹·O·P for the six embedded one-dot maps O (entries ``nz``) at every
    node, node axes last: (k, k, …) -> (6, k², …); O = Σ o_jk·e_j e_kᵀ, so
    P⁻¹OP = Σ o_jk·P⁻¹[:, j] ⊗ P[k, :]."""
    rows, cols, vals = nz
    k = Pn.shape[0]
    lead = Pn.shape[2:]
    out = np.zeros((6, k, k) + lead)
    for o in range(6):
        for r, c_, v in zip(rows[o], cols[o], vals[o]):
            out[o] += (v * Pi[:, r])[:, None] * Pn[c_][None, :]
    return out.reshape((6, k * k) + lead)


def _inverse_last(P: np.ndarray) -> np.ndarray:
    """Inverse of channels with the stack axes last (k, k, …).  One dot's
    trace-preserving Pauli transfer matrix is [[1, 0], [t, R]] (first row
    e₀ exactly: the generator's first row is zero), with inverse
    [[1, 0], [−R⁻¹t, R⁻¹]]; R⁻¹ from cross products (rows a, b, c: columns
    b×c, c×a, a×b over a·(b×c))."""
    k = P.shape[0]
    if k == 4 and not np.any(P[0, 1:]) and np.all(P[0, 0] == 1):
        a, b, c = P[1, 1:], P[2, 1:], P[3, 1:]
        bc, ca, ab = np.cross(b, c, axis=0), np.cross(c, a, axis=0), np.cross(a, b, axis=0)
        det = (a * bc).sum(axis=0)
        if np.all(np.abs(det) > 1e-8):
            out = np.zeros_like(P)
            out[0, 0] = 1
            Ri = np.stack([bc, ca, ab], axis=1) / det
            out[1:, 1:] = Ri
            out[1:, 0] = -(Ri * P[None, 1:, 0]).sum(axis=1)
            return out
    moved = np.moveaxis(np.moveaxis(P, 0, -1), 0, -1)     # (…, k, k)
    return np.moveaxis(np.moveaxis(np.linalg.inv(moved), -1, 0), -1, 0)


def _kron_pair(Z: np.ndarray, k0: int, k1: int) -> np.ndarray:
    """Σ vec(A)·vec(B)ᵀ (rows (i_a, j_a), columns (i_b, j_b)) -> Σ A ⊗ B
    for A of k0 × k0 and B of k1 × k1."""
    lead = Z.shape[:-2]
    return (Z.reshape(lead + (k0, k0, k1, k1)).swapaxes(-3, -2)
            .reshape(lead + (k0 * k1, k0 * k1)))


def _to_sorted(M: np.ndarray, order: tuple[int, ...]) -> np.ndarray:
    """A channel (…, K, K) on dots in ``order`` (4 levels each) with its axes
    put in ascending register order."""
    perm = sorted(range(len(order)), key=lambda i: order[i])
    if perm == list(range(len(order))):
        return M
    c = len(order)
    lead = M.shape[:-2]
    t = M.reshape(lead + (4,) * (2 * c))
    nl = len(lead)
    t = t.transpose(list(range(nl)) + [nl + p for p in perm] + [nl + c + p for p in perm])
    return t.reshape(M.shape)


def weak_segment(eng, model, prep, s: int, e: int, pairs, units, points, idx, emit):
    """Channels of the weak pairs ``pairs`` (indices) and of the *units* they
    join (``units``: exact clusters (dots, pairs), often single dots) over
    sub-steps [s, e), handed to ``emit(dots, channels (V, k, k), point ->
    variant)`` in time order as each chunk is done (so only the chunks under
    way are held); returns the chunks' first-order sizes and quadrature
    errors (module notes) and the rule inside single sub-steps.  Each unit evolves exactly (its own generator,
    exchange inside it included); each weak pair adds Π exp(Ω) per chunk on
    the dots of its two units."""
    h = model.h
    n = e - s
    unit_of = {q: u for u, (dots, _) in enumerate(units) for q in dots}
    # ---- each unit's own generator per sub-step and variant, in the model's
    # frame (no rotating frames: the transformed one-dot maps need the channel
    # of the model itself at every node)
    gens, which_u, anorm, kdim = [], [], [], []
    for dots, upairs in units:
        pc = _frameless(eng, model, dots, upairs)
        statics, G, C, _, which, _ = eng._segment_terms(model, prep, pc, s, e, points, idx)
        gens.append((statics, G, C))
        which_u.append(which)
        a = sum(prep["anorm"][q][s:e] for q in dots)
        for j in upairs:
            a = a + prep["xn"][j][s:e] / h
        anorm.append(a)
        kdim.append(4 ** len(dots))
    # ---- the pairs' coefficients per variant: (unit-a variant, unit-b variant, dv)
    pinfo = []
    for j in pairs:
        p = model.pairs[j]
        d0, d1 = sorted((p.a, p.b))
        ua, ub = unit_of[d0], unit_of[d1]
        combos, which = {}, []
        for i in idx:
            pt = points[i]
            dv = pt.dv[j] if pt.dv else 0.0
            key = (int(which_u[ua][len(which)]), int(which_u[ub][len(which)]), dv)
            which.append(combos.setdefault(key, len(combos)))
        coef = np.stack([np.stack([c[s:e] for c in prep["pairs"][j][k[2]]]) for k in combos])
        pinfo.append((j, d0, d1, ua, ub, tuple(combos), np.array(which), coef,
                      kron_terms(swapped=p.a > p.b), prep["xn"][j][s:e]))
    # ---- where each unit's generator and each pair's coefficients change
    def changes(arr):                        # (n, columns) -> change before each sub-step
        ch = np.ones(n, dtype=bool)
        if n > 1 and arr.shape[1]:
            scale = np.abs(arr).max(axis=0)
            tol = 1e-12 * np.where(scale > 0, scale, 1.0)
            ch[1:] = np.any(np.abs(arr[1:] - arr[:-1]) > tol, axis=1)
        return ch
    unit_change = [changes(C.transpose(1, 0, 2).reshape(n, -1)) for _, _, C in gens]
    pair_change = [changes(pi[7].transpose(2, 0, 1).reshape(n, -1)) for pi in pinfo]
    # ---- chunks: first-order size within y*
    x = sum(pi[9] for pi in pinfo)
    max_len = max(1, int(prep["tau_max"] / h)) if math.isfinite(prep["tau_max"]) else n
    cstart = chunk_cuts(prep["kappa"] * x, prep["ystar"], max_len)
    ncs = len(cstart)
    is_cstart = np.zeros(n, dtype=bool)
    is_cstart[cstart] = True

    def runs(change):                       # sub-steps in runs of < 4 equal ones; runs of ≥ 4
        rs = np.flatnonzero(change | is_cstart)
        rl = np.diff(np.append(rs, n))
        short = np.repeat(rl < 4, rl)
        return short, rs[rl >= 4], rl[rl >= 4]
    # each pair: its own runs (its two units and its coefficients): single
    # sub-steps take nodes, runs of ≥ 4 the exact integral (Van Loan)
    pair_short, pair_long = [], []
    for pc_, pi in zip(pair_change, pinfo):
        short, ls, ll = runs(unit_change[pi[3]] | unit_change[pi[4]] | pc_)
        pair_short.append(short)
        pair_long.append((ls, ll))
    # global pieces (every unit's prefix is kept at their starts): single
    # sub-steps, or runs of ≥ 4 equal ones
    gshort, run_start, run_len = runs(np.any(unit_change + pair_change, axis=0))
    long_run = np.zeros(n, dtype=bool)
    long_run[run_start] = True
    piece_start = np.flatnonzero(gshort | long_run)
    starts = piece_start
    lens = np.ones(len(starts), dtype=int)
    is_long = long_run[starts] & ~gshort[starts]
    lens[is_long] = run_len
    npc = len(starts)
    chunk_of = np.searchsorted(cstart, starts, side="right") - 1
    first = np.zeros(npc, dtype=bool)
    first[np.searchsorted(starts, cstart)] = True
    single = lens == 1
    # per pair: which pieces take nodes (its short sub-steps; they are single
    # pieces), and its long runs as (piece index, length)
    ps = [short[starts] & single for short in pair_short]
    pl = [(np.searchsorted(starts, ls), ll) for ls, ll in pair_long]
    # ---- the rule inside a single sub-step: the midpoint rule where its error
    # (2‖A‖h)²/24 of the sub-step's share (‖A‖ of the pair's two units),
    # summed, stays within a tenth of the accuracy given to this treatment;
    # Simpson's rule otherwise
    clen = np.diff(np.append(cstart, n))
    kap = np.exp(prep["dnorm"] * clen * h)
    q_mid = np.zeros(ncs)
    q_simp = np.zeros(ncs)
    for short, pi in zip(pair_short, pinfo):
        a2 = 2 * (anorm[pi[3]] + anorm[pi[4]]) * h
        xs = np.where(short, pi[9], 0.0)
        q_mid += np.add.reduceat(xs * a2 ** 2 / 24, cstart) * kap
        q_simp += np.add.reduceat(xs * a2 ** 4 / 2880, cstart) * kap
    simpson = q_mid.sum() > 0.1 * prep["eps"]
    q_rule = q_simp if simpson else q_mid
    # node pieces: single pieces that take nodes for some pair; with Simpson
    # the end of one merged into the start of the next of the same chunk
    any_ps = np.any(ps, axis=0) if ps else np.zeros(npc, dtype=bool)
    nxt_single = (np.append(any_ps[1:], False)
                  & np.append(chunk_of[1:] == chunk_of[:-1], False) & any_ps)
    prev_single = np.append(False, nxt_single[:-1])
    # ---- transformed one-dot maps needed: (unit, dot) of every pair end
    ends = sorted({(pi[3], pi[1]) for pi in pinfo} | {(pi[4], pi[2]) for pi in pinfo})
    nzs = {(u, q): _embedded_nonzeros(units[u][0].index(q), len(units[u][0])) for u, q in ends}
    # ---- accumulators: Ω of the chunks under way, per pair (chunk -> (M, K, K));
    # a chunk's channels are handed to ``emit`` as soon as its last piece is done
    Om = []
    for j, d0, d1, ua, ub, combos, which, coef, terms, xn in pinfo:
        base, ratio = _scaled_combos(combos, coef)
        calc = np.flatnonzero(base == np.arange(len(combos)))
        Om.append((base, ratio, calc, {}))

    def acc(store, c, m, K):
        got = store.get(c)
        if got is None:
            got = store[c] = np.zeros((m, K, K))
        return got
    last_of_chunk = np.append(np.flatnonzero(first)[1:], npc) - 1
    pair_gens = [[pair_generator_on(terms, e3, nzs[(ua, d0)], nzs[(ub, d1)], kdim[ua], kdim[ub])
                  for e3 in np.eye(3)] for j, d0, d1, ua, ub, _, _, _, terms, _ in pinfo]
    carry = [None] * len(units)
    # ---- pieces in blocks (memory): prefix channels, nodes, contributions
    per_piece = sum(g[0].shape[0] * k * k * 8 * (10 + 3 * 7 * sum(u == ue for ue, _ in ends))
                    for u, (g, k) in enumerate(zip(gens, kdim)))
    per_piece += sum(len(o[2]) * (3 * 6 * kdim[pi[4]] ** 2 + 2 * (kdim[pi[3]] * kdim[pi[4]]) ** 2)
                     * 8 for o, pi in zip(Om, pinfo))
    block = max(16, int(eng.max_batch_bytes // 2 // max(per_piece, 1)))
    for b0 in range(0, npc, block):
        b1 = min(npc, b0 + block)
        sl = slice(b0, b1)
        sing = single[sl]
        fst = first[sl]
        cont = carry[0] is not None and not fst[0]   # the first chunk began in an earlier block
        upto = int(np.argmax(fst)) if fst.any() else b1 - b0
        P, Pm, Pe, Lb = [], [], [], []
        for u, ((statics, G, C), k) in enumerate(zip(gens, kdim)):
            Lp = np.broadcast_to(statics[:, None], (statics.shape[0], b1 - b0, k, k)).copy()
            if G.shape[0]:
                Lp += np.einsum("vrt,tij->vrij", C[:, starts[sl]], G)
            Mh = _expm_runs(Lp[:, sing], np.full(int(sing.sum()), h / 2))
            Mp = np.empty_like(Lp)
            Mp[:, sing] = Mh @ Mh
            if not sing.all():
                Mp[:, ~sing] = _expm_runs(Lp[:, ~sing], h * lens[sl][~sing])
            pref = chunk_prefix(Mp, fst)
            if cont:
                pref[:, :upto] = pref[:, :upto] @ carry[u][:, None]
            before = np.empty_like(pref)
            before[:, 1:] = pref[:, :-1]
            before[:, fst] = np.eye(k)
            if cont:
                before[:, 0] = carry[u]
            carry[u] = pref[:, -1]
            P.append(before)
            Pm.append(Mh @ before[:, sing])
            Pe.append(pref)
            Lb.append(Lp)
        # nodes of the pieces that take nodes for some pair: (piece in block,
        # kind 0 start / 1 middle / 2 end)
        sing_idx = np.flatnonzero(sing)
        sp = np.flatnonzero(any_ps[sl])
        if simpson:
            cnt = 2 + (~nxt_single[b0 + sp]).astype(int)
            node_piece = np.repeat(sp, cnt)
            node_kind = np.arange(cnt.sum()) - np.repeat(np.cumsum(cnt) - cnt, cnt)
        else:
            node_piece, node_kind = sp, np.ones(len(sp), dtype=int)
        node_sing = np.searchsorted(sing_idx, node_piece)     # index among the block's singles
        node_chunk = chunk_of[b0 + node_piece]
        # transformed one-dot maps with the node axis last (long contiguous
        # rows for the elementwise work): (6, k², V, nodes)
        T = {}
        if len(node_piece):
            for u, q in ends:
                k = kdim[u]
                Pn = np.empty((k, k, P[u].shape[0], len(node_piece)))
                for kind, src in ((0, P[u]), (1, Pm[u]), (2, Pe[u])):
                    sel = node_kind == kind
                    if sel.any():
                        Pn[..., sel] = src[:, (node_sing if kind == 1 else node_piece)[sel]
                                           ].transpose(2, 3, 0, 1)
                T[(u, q)] = _transformed_last(Pn, _inverse_last(Pn), nzs[(u, q)])
        for (base, ratio, calc, Omp), (j, d0, d1, ua, ub, combos, which, coef, terms, xn), Gs, \
                psp, (lpi, lpl) in zip(Om, pinfo, pair_gens, ps, pl):
            k0, k1 = kdim[ua], kdim[ub]
            gp = b0 + node_piece
            if len(node_piece):
                own = psp[gp]
                prev = np.zeros(len(gp), dtype=bool)
                if simpson:
                    prev = (node_kind == 0) & prev_single[gp] & psp[np.maximum(gp - 1, 0)]
                selp = own | prev
            else:
                selp = np.zeros(0, dtype=bool)
            if selp.any():
                nk, g = node_kind[selp], gp[selp]
                c_here = coef[calc][:, :, starts[g]] * own[selp]         # (M, 3, nodes)
                if simpson:
                    Wn = c_here * np.where(nk == 1, 4 * h / 6, h / 6)
                    pv = prev[selp]
                    if pv.any():
                        Wn[:, :, pv] += h / 6 * coef[calc][:, :, starts[g[pv] - 1]]
                else:
                    Wn = c_here * h
                nch = node_chunk[selp]
                cuts = np.searchsorted(nch, np.arange(ncs + 1))
                # Y = Σ_terms w·factor·T_b: one per distinct (dot-b variant, charge
                # offset), shared by the combinations that differ only on dot a
                ykeys = {}
                yidx = np.array([ykeys.setdefault(combos[i][1:], len(ykeys)) for i in calc])
                ym = [int(np.argmax(yidx == u)) for u in range(len(ykeys))]
                every = bool(selp.all())
                tb = T[(ub, d1)][:, :, np.array([combos[calc[m]][1] for m in ym])]
                tb = tb if every else tb[..., selp]
                Wy = Wn[ym]                                            # (U, 3, nodes)
                Y = np.zeros(tb.shape)                                 # (6, k1², U, nodes)
                for kind, f, ia, ib in terms:
                    Y[ia] += (f * Wy[:, kind]) * tb[ib]
                va = np.array([combos[i][0] for i in calc])
                ta_all = T[(ua, d0)] if every else T[(ua, d0)][..., selp]  # (6, k0², V_a, nodes)
                for c in np.unique(nch):
                    lo, hi = cuts[c], cuts[c + 1]
                    # Σ_(node, α) vec T_a ⊗ vec Y: (M, 6, k0², k1²) summed over α
                    ta = ta_all[:, :, va, lo:hi].transpose(2, 0, 1, 3)
                    Z = np.matmul(ta, Y[:, :, yidx, lo:hi].transpose(2, 0, 3, 1)).sum(axis=1)
                    acc(Omp, c, len(calc), k0 * k1)[...] += _kron_pair(Z, k0, k1)
            # the pair's runs of ≥ 4 equal sub-steps that start in this block:
            # the exact integral (Van Loan)
            inb = (lpi >= b0) & (lpi < b1)
            if inb.any():
                lp = lpi[inb] - b0
                ln = lpl[inb]
                for m, ci in enumerate(calc):
                    va, vb, _ = combos[ci]
                    A = (np.kron(Lb[ua][va][lp], np.eye(k1)) + np.kron(np.eye(k0), Lb[ub][vb][lp]))
                    cl = coef[ci][:, starts[b0 + lp]]
                    B = sum(cl[t][:, None, None] * Gs[t] for t in range(3))
                    I = van_loan(A, B, h * ln)
                    Pr = np.einsum("kab,kcd->kacbd", P[ua][va][lp],
                                   P[ub][vb][lp]).reshape(-1, k0 * k1, k0 * k1)
                    contrib = np.linalg.solve(Pr, I @ Pr)
                    cl_of = chunk_of[b0 + lp]
                    for c in np.unique(cl_of):
                        acc(Omp, c, len(calc), k0 * k1)[m] += contrib[cl_of == c].sum(axis=0)
        # ---- the chunks that end in this block, in time order: the pairs'
        # corrections, then the units' own channels
        lasts = last_of_chunk[(last_of_chunk >= b0) & (last_of_chunk < b1)]
        done = [int(chunk_of[last]) for last in lasts]
        corr = []                               # per pair: (dots, (chunks, V, K, K), which)
        for (base, ratio, calc, Omp), (j, d0, d1, ua, ub, combos, which, *_r) in \
                zip(Om, pinfo):
            K = kdim[ua] * kdim[ub]
            full = np.zeros((len(done), len(combos), K, K))
            for i, c in enumerate(done):
                full[i, calc] = Omp.pop(c, 0.0)
            full = full[:, base] * ratio[:, None, None]
            order = units[ua][0] + units[ub][0]
            corr.append((tuple(sorted(order)), _to_sorted(PL.expm_any(full), order), which))
        for i, last in enumerate(lasts):
            for dots, Wc, which in corr:
                emit(dots, Wc[i], which)
            for u, (dots, _) in enumerate(units):
                emit(dots, Pe[u][:, last - b0].copy(), which_u[u])
    # ---- sizes and quadrature errors per chunk, each with its own κ
    y = np.add.reduceat(x, cstart) * kap
    return y, q_rule, "simpson" if simpson else "midpoint"


def _frameless(eng, model, dots, upairs):
    """The cluster's generator pieces without rotating frames (kept per model
    on the engine: building them is not free)."""
    import dataclasses
    store = getattr(eng, "_frameless", None)
    if store is None or store[0] is not model:
        store = eng._frameless = (model, {})
    got = store[1].get((dots, upairs))
    if got is None:
        pc = eng._cluster_pieces(model, dots, upairs)
        got = store[1][(dots, upairs)] = dataclasses.replace(pc, w={q: 0.0 for q in dots})
    return got


def pair_generator_on(terms, kind_coef, nza, nzb, k0: int, k1: int) -> np.ndarray:
    """The pair generator Σ c_kind·factor·(O_a ⊗ O_b) with the one-dot maps
    embedded in their units (entries ``nza``, ``nzb``): (k0·k1)²."""
    out = np.zeros((k0 * k1, k0 * k1))
    for kind, f, ia, ib in terms:
        if kind_coef[kind] == 0:
            continue
        Oa = np.zeros((k0, k0))
        Oa[nza[0][ia], nza[1][ia]] = nza[2][ia]
        Ob = np.zeros((k1, k1))
        Ob[nzb[0][ib], nzb[1][ib]] = nzb[2][ib]
        out += kind_coef[kind] * f * np.kron(Oa, Ob)
    return out


def chunk_prefix(M: np.ndarray, first: np.ndarray) -> np.ndarray:
    """Ordered prefix products of the pieces (V, npc, k, k), restarting at
    every piece marked ``first``: one product per piece in sequence (a
    doubling scan takes log₂(npc) passes over the whole array, 1.7× slower
    for one dot and 12× for a pair's 16 × 16 channels, measured)."""
    out = np.empty_like(M)
    cur = None
    for i in range(M.shape[1]):
        cur = M[:, i] if first[i] or cur is None else np.matmul(M[:, i], cur)
        out[:, i] = cur
    return out


def _expm_runs(L: np.ndarray, t: np.ndarray) -> np.ndarray:
    """exp(L·t) for (V, n, k, k) generators and (n,) times, one exponential
    per run of equal consecutive (generator, time)."""
    V, n = L.shape[:2]
    if n == 0:
        return L.copy()
    flat = L.transpose(1, 0, 2, 3).reshape(n, -1)
    change = np.ones(n, dtype=bool)
    change[1:] = np.any(flat[1:] != flat[:-1], axis=1) | (t[1:] != t[:-1])
    first = np.flatnonzero(change)
    E = PL.expm_batch(L[:, first] * t[first][None, :, None, None])
    return E[:, np.cumsum(change) - 1]


def _scaled_combos(combos, coef: np.ndarray):
    """For every combo (dot variants, charge offset) the combo it copies
    (itself if none) and the factor: same dot variants, coefficients equal
    to a constant multiple (to 1e-13) of the copied one's."""
    base = np.arange(len(combos))
    ratio = np.ones(len(combos))
    for i, (va, vb, _) in enumerate(combos):
        for j in range(i):
            if base[j] != j or combos[j][:2] != (va, vb):
                continue
            ref, c = coef[j], coef[i]
            k = np.argmax(np.abs(ref[0]))
            if ref[0, k] == 0:
                continue
            r = c[0, k] / ref[0, k]
            if np.all(np.abs(c - r * ref) <= 1e-13 * np.abs(c).max()):
                base[i], ratio[i] = j, r
                break
    return base, ratio
