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
coefficients differ (a burst) take the midpoint or Simpson's rule inside
the sub-step; runs of equal sub-steps (idle) take the exact integral of the
block exponential exp([[A, B], [0, A]]τ) (Van Loan, IEEE Trans. Autom.
Control 23, 395 (1978)).  In the model's frame a pair's flip-flop turns at
its frequency δ (F of a sub-step is the one before times z = e^{i2πδh}), so
an idle run is equal but for that turn: there B_k = J₀·G_J + Re(F₀z^k·G₋),
G₋ = G_Re − i·G_Im, and its integral is the J part over the run plus
Re(F₀·Σ_k z^k·e^{−Akh}·I₋·e^{Akh}), I₋ the block-exponential integral of G₋
over one sub-step, the geometric sum by doubling (:func:`run_integral`;
runs of at least :data:`ROT_RUN_MIN` sub-steps, where it is cheaper than
nodes).  Runs are found to 1e-9 of the coefficients' scale (the phases'
rounding); what the closed form leaves out of the sub-steps' own
coefficients (:func:`run_deviation`, in the diamond norm) is added to the
chunk's quadrature error.

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
unit included; ‖ad_A‖ ≤ 2‖A‖).  The midpoint rule (one node per sub-step)
adds at most κ·x·(a·h)²/24, h³/24 times the second derivative of
E₀⁻¹·B·E₀, ad_A²(B): for a Hamiltonian generator, ad_{L_H}(L_X) =
L_{−i2π[H, X]} and ‖[H, X]‖ ≤ spread(H)·‖X‖, so ‖ad_{L_H}²(B)‖◇ ≤
(2π·spread H)²·‖B‖◇ (B is the pair's Hamiltonian generator); with the
dissipators' part ‖ad_{L_D}‖ ≤ 2‖L_D‖◇ the mixed terms sum to at most
(2π·spread H + 3‖L_D‖◇)²‖B‖◇, so a = ‖A_H‖ + 3‖L_D‖◇ of the pair's two
units (4× below (2‖A‖)² for a pure Hamiltonian; checked numerically in
tests/test_weak_exchange.py).  It is taken when its error, summed over the
segment, fits the segment's part of :data:`QUAD_SHARE` of the accuracy, or
when shrinking the chunks' part to make room for it costs less (fewer
nodes against more chunks, :data:`CHUNK_COST`); Simpson's rule otherwise.
The nodes' transformed maps are kept with the node axis last, so the
elementwise work runs along long rows.  Chunks are cut so
that y ≤ y* with Σ y = Y over the run: Σ(e^y − 1 − y) ≤ ½y*(1 + y*)·Y,
within the accuracy given to this treatment.  The change of the average
gate fidelity is at most half the change of the channel (|ΔF| ≤ ½‖ΔE‖◇).
"""

from __future__ import annotations

import functools
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


def van_loan(A: np.ndarray, B: np.ndarray, tau, with_exp: bool = False):
    """∫_0^τ e^{−Au}·B·e^{Au} du for stacks of A, B (…, k, k): the top right
    block of exp([[A, B], [0, A]]τ) is ∫ e^{A(τ−u)}Be^{Au}du (Van Loan 1978),
    taken back by e^{−Aτ}; with ``with_exp`` also e^{Aτ}."""
    k = A.shape[-1]
    lead = np.broadcast_shapes(A.shape[:-2], B.shape[:-2])
    big = np.zeros(lead + (2 * k, 2 * k))
    big[..., :k, :k] = A
    big[..., :k, k:] = B
    big[..., k:, k:] = A
    E = PL.expm_batch(big * np.asarray(tau, dtype=float)[..., None, None])
    I = np.linalg.solve(E[..., :k, :k], E[..., :k, k:])
    return (I, E[..., :k, :k]) if with_exp else I


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


# the cost of one more chunk (its corrections' exponentials and their
# applications to the register) in nodes of the interaction picture, measured
# on the three-dot benchmark (tests/benchmarks/bench_simulate.py): it decides
# between the midpoint rule with smaller chunks and Simpson's rule
CHUNK_COST = 20
# the part of the weak treatment's accuracy kept for the rule inside single
# sub-steps (the chunks take the rest, module notes)
QUAD_SHARE = 0.1
# shortest run of equal sub-steps (but for the flip-flop's turn) that takes
# the closed form of :func:`run_integral` instead of nodes (cost, measured)
ROT_RUN_MIN = 16
MAX_UNION = 64          # largest channel (4^dots) a weak pair's correction may act on


@functools.lru_cache(maxsize=None)
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
    out = (np.array(rows), np.array(cols), np.array(vals))
    for a in out:
        a.flags.writeable = False         # kept (lru_cache): shared by every call
    return out


def _transformed(Pn: np.ndarray, Pi: np.ndarray, nz) -> np.ndarray:
    """P⁻¹·O·P for the six embedded one-dot maps O (entries ``nz``) at every
    node: channels (V, k, k, nodes) -> (V, 6, k², nodes), the node axis last
    (long contiguous rows for the elementwise work); O = Σ o_jk·e_j e_kᵀ, so
    P⁻¹OP = Σ o_jk·P⁻¹[:, j] ⊗ P[k, :] (one pass per entry, written in
    place: no temporary of the whole result per entry)."""
    rows, cols, vals = nz
    V, k = Pn.shape[:2]
    N = Pn.shape[3:]
    out = np.empty((V, 6, k, k) + N)
    tmp = np.empty((V, k, k) + N) if rows.shape[1] > 1 else None
    for o in range(6):
        for e in range(rows.shape[1]):
            a = (Pi[:, :, rows[o, e]] * vals[o, e])[:, :, None]    # (V, k, 1, …)
            b = Pn[:, cols[o, e]][:, None]                         # (V, 1, k, …)
            if e == 0:
                np.multiply(a, b, out=out[:, o])
            else:
                np.multiply(a, b, out=tmp)
                out[:, o] += tmp
    return out.reshape((V, 6, k * k) + N)


def _inverse_last(P: np.ndarray) -> np.ndarray:
    """Inverse of channels with the stack axes last (k, k, …).  One dot's
    trace-preserving Pauli transfer matrix is [[1, 0], [t, R]] (first row
    e₀ exactly: the generator's first row is zero), with inverse
    [[1, 0], [−R⁻¹t, R⁻¹]]; R⁻¹ from cross products (rows a, b, c: columns
    b×c, c×a, a×b over a·(b×c))."""
    k = P.shape[0]
    if k == 4 and not np.any(P[0, 1:]) and np.all(P[0, 0] == 1):
        (a1, a2, a3), (b1, b2, b3), (c1, c2, c3) = P[1, 1:], P[2, 1:], P[3, 1:]
        bc = (b2 * c3 - b3 * c2, b3 * c1 - b1 * c3, b1 * c2 - b2 * c1)
        ca = (c2 * a3 - c3 * a2, c3 * a1 - c1 * a3, c1 * a2 - c2 * a1)
        ab = (a2 * b3 - a3 * b2, a3 * b1 - a1 * b3, a1 * b2 - a2 * b1)
        det = a1 * bc[0] + a2 * bc[1] + a3 * bc[2]
        if np.all(np.abs(det) > 1e-8):
            out = np.zeros_like(P)
            out[0, 0] = 1
            inv_det = 1.0 / det
            t1, t2, t3 = P[1, 0], P[2, 0], P[3, 0]
            for i in range(3):
                r = (bc[i] * inv_det, ca[i] * inv_det, ab[i] * inv_det)
                out[1 + i, 1], out[1 + i, 2], out[1 + i, 3] = r
                out[1 + i, 0] = -(r[0] * t1 + r[1] * t2 + r[2] * t3)
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
    gens, which_u, anorm, kdim, unit_d = [], [], [], [], []
    for dots, upairs in units:
        unit_d.append(sum(prep["dn"][q] for q in dots))
        pc = _frameless(eng, model, dots, upairs)
        # variants that differ in detuning alone share their coefficients (C, cmap)
        statics, G, C, cmap, _, which, _ = eng._segment_terms(model, prep, pc, s, e, points, idx)
        gens.append((statics, G, C, cmap))
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
        # (combination, J / Re F / Im F, sub-step): one stack per charge offset
        dvs = {dv: i for i, dv in enumerate(dict.fromkeys(k[2] for k in combos))}
        per_dv = np.stack([np.stack([c[s:e] for c in prep["pairs"][j][dv]]) for dv in dvs])
        coef = per_dv[[dvs[k[2]] for k in combos]]
        pinfo.append((j, d0, d1, ua, ub, tuple(combos), np.array(which), coef,
                      kron_terms(swapped=p.a > p.b), prep["xn"][j][s:e]))
    # ---- where each unit's generator and each pair's coefficients change
    def changes(arr, rel=1e-12):             # (n, columns) -> change before each sub-step
        ch = np.ones(n, dtype=bool)
        if n > 1 and arr.shape[1]:
            scale = np.abs(arr).max(axis=0)
            tol = rel * np.where(scale > 0, scale, 1.0)
            ch[1:] = np.any(np.abs(arr[1:] - arr[:-1]) > tol, axis=1)
        return ch
    unit_change = [changes(C.transpose(1, 0, 2).reshape(n, -1)) for _, _, C, _ in gens]
    # a pair's flip-flop turns at its frequency δ in the model's frame (F of
    # sub-step k is that of k − 1 times z = e^{i2πδh} when J stays): its runs
    # are found on the coefficients taken back by z^k, to a relative 1e-9
    # (the phases' rounding); what the run's closed form leaves out of the
    # actual coefficients is added to the chunk's quadrature error
    zs = [np.exp(2j * math.pi * model.pairs[pi[0]].delta * h) for pi in pinfo]
    dem = [_demodulated(pi[7], z) for pi, z in zip(pinfo, zs)]
    pair_change = [changes(d.transpose(2, 0, 1).reshape(n, -1), rel=1e-9) for d in dem]
    # a turning flip-flop's closed form (three block exponentials and a
    # geometric sum per run) pays from ROT_RUN_MIN sub-steps on: shorter runs
    # take nodes
    for i, (pi, z) in enumerate(zip(pinfo, zs)):
        if z != 1:
            ch = unit_change[pi[3]] | unit_change[pi[4]] | pair_change[i]
            rs = np.flatnonzero(ch)
            rl = np.diff(np.append(rs, n))
            pair_change[i] = pair_change[i] | np.repeat(rl < ROT_RUN_MIN, rl)
    # ---- the rule inside a single sub-step, and the chunks: first-order
    # size within y*.  The midpoint rule errs by at most κ·x·(a·h)²/24 per
    # sub-step, a = ‖A_H‖ + 3‖L_D‖ of the pair's two units (module notes);
    # it is taken when that, summed over the segment (every sub-step counted:
    # an upper bound), fits this segment's share of the tenth of the accuracy
    # kept for quadrature, or when the share of the chunks can be shrunk to
    # make room for it at a lower cost (fewer nodes against more chunks);
    # Simpson's rule otherwise
    x = sum(pi[9] for pi in pinfo)
    kx = prep["kappa"] * x
    max_len = max(1, int(prep["tau_max"] / h)) if math.isfinite(prep["tau_max"]) else n
    ystar = prep["ystar"]
    y_seg = float(kx.sum())
    a_mid = [(anorm[pi[3]] + anorm[pi[4]] + 2 * (unit_d[pi[3]] + unit_d[pi[4]])) * h
             for pi in pinfo]
    q_ub = prep["kappa"] * float(sum((pi[9] * a ** 2).sum() for pi, a in zip(pinfo, a_mid))) / 24
    # QUAD_SHARE·eps of the run for quadrature, by this segment's share of Y
    # (y*·Y = 1.9·eps for the chunks)
    share = QUAD_SHARE * ystar * y_seg / 1.9
    simpson = q_ub > share
    cstart = chunk_cuts(kx, ystar, max_len)
    if simpson:
        y_mid = ystar * (1 + QUAD_SHARE / 1.9) - q_ub / y_seg
        if y_mid > 0:
            c_mid = chunk_cuts(kx, y_mid, max_len)
            nodes = max(1, int(np.count_nonzero(np.any(unit_change + pair_change, axis=0))))
            if nodes + CHUNK_COST * len(c_mid) < 2 * nodes + CHUNK_COST * len(cstart):
                simpson, cstart = False, c_mid
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
    # ---- the quadrature error of the rule taken, per chunk (module notes):
    # midpoint κ·x·(a·h)²/24, Simpson κ·x·(2‖A‖h)⁴/2880
    clen = np.diff(np.append(cstart, n))
    kap = np.exp(prep["dnorm"] * clen * h)
    q_rule = np.zeros(ncs)
    for short, pi, am in zip(pair_short, pinfo, a_mid):
        xs = np.where(short, pi[9], 0.0)
        if simpson:
            q_rule += np.add.reduceat(xs * (2 * (anorm[pi[3]] + anorm[pi[4]]) * h) ** 4 / 2880,
                                      cstart) * kap
        else:
            q_rule += np.add.reduceat(xs * am ** 2 / 24, cstart) * kap
    for (ls, ll), pi, z in zip(pair_long, pinfo, zs):
        for st, ln in zip(ls, ll):
            c = int(np.searchsorted(cstart, st, side="right")) - 1
            q_rule[c] += kap[c] * max(run_deviation(co, z, h, int(st), int(ln)) for co in pi[7])
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
    pair_gens = [_pair_gens(terms, units[ua][0].index(d0), len(units[ua][0]),
                            units[ub][0].index(d1), len(units[ub][0]))
                 for j, d0, d1, ua, ub, _, _, _, terms, _ in pinfo]
    carry = [None] * len(units)
    # each unit's own channel of a chunk goes out with the correction of the
    # last pair that touches it (E₀ ⊗ … · exp(Ω), one channel on the pair's
    # dots): by then every correction on the unit is out, and the ones after
    # act on other dots and commute with it (fewer, larger channels for the
    # register: five became two on a line of three dots)
    absorb = {}
    for pos, pi in enumerate(pinfo):
        absorb[pi[3]] = absorb[pi[4]] = pos
    alone = [u for u in range(len(units)) if u not in absorb]
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
        for u, ((statics, G, C, cmap), k) in enumerate(zip(gens, kdim)):
            Lp = np.broadcast_to(statics[:, None], (statics.shape[0], b1 - b0, k, k)).copy()
            if G.shape[0]:
                Lp += np.einsum("urt,tij->urij", C[:, starts[sl]], G)[cmap]
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
        # the nodes each pair takes (its own single pieces, and with Simpson's
        # rule the start node shared with its previous single piece)
        gp = b0 + node_piece
        sels = []
        for psp in ps:
            if len(node_piece):
                own = psp[gp]
                prev = np.zeros(len(gp), dtype=bool)
                if simpson:
                    prev = (node_kind == 0) & prev_single[gp] & psp[np.maximum(gp - 1, 0)]
                sels.append((own, prev, own | prev))
            else:
                sels.append((None, None, np.zeros(0, dtype=bool)))
        # transformed one-dot maps with the node axis last (long contiguous
        # rows for the elementwise work): (V, 6, k², nodes), at the nodes of
        # the pairs that end on that dot only (a pair idle beside a burst on
        # another pair takes its runs' exact integrals, not nodes)
        need = {end: np.zeros(len(node_piece), dtype=bool) for end in ends}
        for pi, (_, _, selp) in zip(pinfo, sels):
            need[(pi[3], pi[1])] |= selp
            need[(pi[4], pi[2])] |= selp
        T = {}
        for u, q in ends:
            nd = need[(u, q)]
            if not nd.any():
                continue
            k = kdim[u]
            nkind = node_kind[nd]
            Pn = np.empty((P[u].shape[0], k, k, len(nkind)))
            for kind, src in ((0, P[u]), (1, Pm[u]), (2, Pe[u])):
                sel = nkind == kind
                if sel.any():
                    Pn[..., sel] = src[:, (node_sing if kind == 1 else node_piece)[nd][sel]
                                       ].transpose(0, 2, 3, 1)
            Pi = np.moveaxis(_inverse_last(np.moveaxis(Pn, 0, 2)), 2, 0)
            T[(u, q)] = _transformed(Pn, Pi, nzs[(u, q)])
        roles: dict = {}

        def role_b(u, q):                  # (V, 6, nodes, k²)
            got = roles.get((u, q))
            if got is None:
                got = roles[(u, q)] = np.ascontiguousarray(T[(u, q)].transpose(0, 1, 3, 2))
            return got
        for (base, ratio, calc, Omp), (j, d0, d1, ua, ub, combos, which, coef, terms, xn), Gs, \
                (own, prev, selp), (lpi, lpl), z in zip(Om, pinfo, pair_gens, sels, pl, zs):
            k0, k1 = kdim[ua], kdim[ub]
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
                # offset), shared by the combinations that differ only on dot a,
                # laid out (U, 6, nodes, k1²); T_a is (V_a, 6, k0², nodes): a
                # chunk's sum over (α, node) is one product (k0² × 6·nodes)·
                # (6·nodes × k1²) per group of combinations
                ykeys = {}
                yidx = np.array([ykeys.setdefault(combos[i][1:], len(ykeys)) for i in calc])
                ym = [int(np.argmax(yidx == u)) for u in range(len(ykeys))]
                tb = role_b(ub, d1)
                vb_of = np.array([combos[calc[m]][1] for m in ym])
                if not np.array_equal(vb_of, np.arange(tb.shape[0])):
                    tb = tb[vb_of]
                mb = selp[need[(ub, d1)]]                              # this pair's among the end's
                tb = tb if mb.all() else tb[:, :, mb]                  # (U, 6, nodes, k1²)
                Wy = Wn[ym]                                            # (U, 3, nodes)
                Y = np.empty(tb.shape)
                tmp = np.empty(tb.shape[:1] + tb.shape[2:])
                written = set()
                for kind, f, ia, ib in terms:
                    if ia not in written:
                        np.multiply((f * Wy[:, kind])[:, :, None], tb[:, ib], out=Y[:, ia])
                        written.add(ia)
                    else:
                        np.multiply((f * Wy[:, kind])[:, :, None], tb[:, ib], out=tmp)
                        Y[:, ia] += tmp
                for ia in set(range(6)) - written:
                    Y[:, ia] = 0.0
                va = np.array([combos[i][0] for i in calc])
                ta_all = T[(ua, d0)]                                   # (V_a, 6, k0², nodes)
                ma = selp[need[(ua, d0)]]
                ta_all = ta_all if ma.all() else ta_all[..., ma]
                groups = _pair_groups(va, yidx)
                for c in np.unique(nch):
                    lo, hi = cuts[c], cuts[c + 1]
                    w = hi - lo
                    Z = np.empty((len(calc), k0 * k0, k1 * k1))
                    for ms, a_sel, y_sel in groups:
                        ta = ta_all[a_sel, :, :, lo:hi].transpose(0, 2, 1, 3)
                        Z[ms] = np.matmul(ta.reshape(ta.shape[0], k0 * k0, 6 * w),
                                          Y[y_sel, :, lo:hi].reshape(-1, 6 * w, k1 * k1))
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
                    I = run_integral(A, cl, Gs, z, h, ln)
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
        for pos, ((base, ratio, calc, Omp), (j, d0, d1, ua, ub, combos, which, *_r)) in \
                enumerate(zip(Om, pinfo)):
            k0, k1 = kdim[ua], kdim[ub]
            K = k0 * k1
            full = np.zeros((len(done), len(combos), K, K))
            for i, c in enumerate(done):
                full[i, calc] = Omp.pop(c, 0.0)
            full = full[:, base] * ratio[:, None, None]
            Wc = PL.expm_any(full)                                # (chunks, combos, K, K)
            own = [absorb[ua] == pos, absorb[ub] == pos]
            if any(own):
                # E_a ⊗ E_b of these chunks per combination (1 for a unit that
                # goes out with a later pair)
                ops, subs = [], []
                for side, (u, kk, sa) in enumerate(((ua, k0, "ab"), (ub, k1, "de"))):
                    if own[side]:
                        vs = np.array([cb[side] for cb in combos])
                        ops.append(Pe[u][vs][:, lasts - b0].swapaxes(0, 1))
                        subs.append("nc" + sa)
                    else:
                        ops.append(np.eye(kk))
                        subs.append(sa)
                loc = np.einsum(f"{subs[0]},{subs[1]}->ncadbe", *ops).reshape(Wc.shape)
                Wc = np.matmul(loc, Wc)
            order = units[ua][0] + units[ub][0]
            corr.append((tuple(sorted(order)), _to_sorted(Wc, order), which))
        for i, last in enumerate(lasts):
            for dots, Wc, which in corr:
                emit(dots, Wc[i], which)
            for u in alone:
                emit(units[u][0], Pe[u][:, last - b0].copy(), which_u[u])
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


@functools.lru_cache(maxsize=None)
def _pair_gens(terms, pos_a: int, ca: int, pos_b: int, cb: int) -> tuple:
    """The pair generators of J, Re F and Im F on its two units (dot
    ``pos_a`` of ``ca`` and ``pos_b`` of ``cb``), kept: they depend on the
    layout alone."""
    nza, nzb = _embedded_nonzeros(pos_a, ca), _embedded_nonzeros(pos_b, cb)
    out = tuple(pair_generator_on(terms, e3, nza, nzb, 4 ** ca, 4 ** cb) for e3 in np.eye(3))
    for g in out:
        g.flags.writeable = False
    return out


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
    every piece marked ``first``.  In blocks of b ≈ √npc pieces: the prefixes
    inside every block at once (b batched products), the carries from block
    to block in sequence, then one product for the pieces before a block's
    first restart: about 2√npc numpy calls instead of npc (a doubling scan
    takes log₂(npc) passes over the whole array: 1.7× slower than one product
    per piece for one dot and 12× for a pair's 16 × 16 channels, measured)."""
    V, n = M.shape[:2]
    k = M.shape[-1]
    if n <= 16:
        out = np.empty_like(M)
        cur = None
        for i in range(n):
            cur = M[:, i] if first[i] or cur is None else np.matmul(M[:, i], cur)
            out[:, i] = cur
        return out
    b = int(math.ceil(math.sqrt(n)))
    nb = -(-n // b)
    pad = nb * b - n
    Mp = M if not pad else np.concatenate([M, np.broadcast_to(np.eye(k), (V, pad, k, k))], axis=1)
    Mp = Mp.reshape(V, nb, b, k, k)
    fp = np.concatenate([np.asarray(first, dtype=bool), np.zeros(pad, dtype=bool)]).reshape(nb, b)
    loc = np.empty_like(Mp)
    cur = Mp[:, :, 0]
    loc[:, :, 0] = cur
    for i in range(1, b):
        prod = np.matmul(Mp[:, :, i], cur)
        cur = np.where(fp[:, i, None, None], Mp[:, :, i], prod) if fp[:, i].any() else prod
        loc[:, :, i] = cur
    # carry into block j ≥ 1: the whole prefix at the end of block j − 1
    restart = fp.any(axis=1)
    carry = np.empty((V, nb, k, k))
    has = np.arange(nb) > 0
    if nb > 1:
        carry[:, 1] = loc[:, 0, -1]
    for j in range(2, nb):
        carry[:, j] = (loc[:, j - 1, -1] if restart[j - 1]
                       else np.matmul(loc[:, j - 1, -1], carry[:, j - 1]))
    before_restart = np.cumsum(fp, axis=1) == 0                   # (nb, b)
    sel = before_restart & has[:, None]
    if sel.any():
        loc[:, sel] = np.matmul(loc[:, sel], np.broadcast_to(
            carry[:, :, None], (V, nb, b, k, k))[:, sel])
    return loc.reshape(V, nb * b, k, k)[:, :n]


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


def _demodulated(coef: np.ndarray, z: complex) -> np.ndarray:
    """Pair coefficients (…, 3, n) (J, Re F, Im F per sub-step) with F taken
    back by z^k (k the sub-step from the first): constant along a run where J
    stays and the flip-flop turns at its frequency."""
    n = coef.shape[-1]
    F = (coef[..., 1, :] + 1j * coef[..., 2, :]) * np.exp(-1j * np.angle(z) * np.arange(n))
    return np.stack([coef[..., 0, :], F.real, F.imag], axis=-2)


def run_deviation(coef: np.ndarray, z: complex, h: float, start: int, length: int) -> float:
    """Σ 2π·h·spread(J_k − J₀, F_k − F₀z^k) over a run (coefficients (3, n)):
    how far the run's closed form (J₀ and F₀z^k) is from the sub-steps'
    own exchange, in the diamond norm (:func:`spread`)."""
    c = coef[:, start:start + length]
    k = np.arange(length)
    F = c[1] + 1j * c[2]
    dF = F - F[0] * np.exp(1j * np.angle(z) * k)
    return float((2 * math.pi * h * spread(c[0] - c[0, 0], np.abs(dF))).sum())


def conj_geometric(E: np.ndarray, Ei: np.ndarray, X: np.ndarray, z: np.ndarray,
                   n: np.ndarray) -> np.ndarray:
    """Σ_{k<n} z^k·Ei^k·X·E^k for stacks E, Ei = E⁻¹, X (R, K, K), z (R,) and
    n (R,) ≥ 1, by doubling: blocks of m = 1, 2, 4, … terms, S_2m = S_m +
    z^m·Ei^m·S_m·E^m, added at the offset a of the terms already summed
    (about 2·log₂n products instead of n)."""
    R, K = X.shape[0], X.shape[-1]
    out = np.zeros(X.shape, dtype=complex)
    Ea = np.broadcast_to(np.eye(K), (R, K, K)).astype(complex)
    Eia = Ea.copy()
    za = np.ones(R, dtype=complex)
    Sm, Em, Eim, zm = X.astype(complex), E.astype(complex), Ei.astype(complex), z.astype(complex)
    n = np.asarray(n, dtype=np.int64).copy()
    while n.any():
        bit = (n & 1).astype(bool)
        if bit.any():
            out[bit] += za[bit, None, None] * (Eia[bit] @ Sm[bit] @ Ea[bit])
            Ea[bit] = Em[bit] @ Ea[bit]
            Eia[bit] = Eim[bit] @ Eia[bit]
            za[bit] = za[bit] * zm[bit]
        n >>= 1
        if n.any():
            Sm = Sm + zm[:, None, None] * (Eim @ Sm @ Em)
            Em, Eim, zm = Em @ Em, Eim @ Eim, zm * zm
    return out


def run_integral(A: np.ndarray, cl: np.ndarray, Gs, z: complex, h: float,
                 ln: np.ndarray) -> np.ndarray:
    """∫ E₀⁻¹·B·E₀ over runs of ``ln`` equal sub-steps of the units' generator
    A (R, K, K), from the run's start, with the pair's exchange J₀ constant
    and its flip-flop F₀z^k in sub-step k (``cl`` (3, R): J₀, Re F₀, Im F₀;
    ``Gs`` the pair generators of J, Re F and Im F).  B_k = J₀·G_J +
    Re(F_k·G₋), G₋ = G_Re − i·G_Im: the J part by the block exponential over
    the whole run (Van Loan 1978), the flip-flop by the block exponential over
    one sub-step, I₋, and the geometric sum Σ z^k·e^{−Akh}·I₋·e^{Akh}
    (:func:`conj_geometric`)."""
    J0 = cl[0][:, None, None] * Gs[0]
    if z == 1:
        return van_loan(A, J0 + cl[1][:, None, None] * Gs[1] + cl[2][:, None, None] * Gs[2],
                        h * ln)
    R = A.shape[0]
    B = np.stack([J0, np.broadcast_to(Gs[1], J0.shape), np.broadcast_to(Gs[2], J0.shape)], axis=1)
    tau = np.stack([h * ln, np.full(R, h), np.full(R, h)], axis=1).astype(float)
    I, E = van_loan(A[:, None], B, tau, with_exp=True)
    Ei = np.linalg.inv(E[:, 1])
    S = conj_geometric(E[:, 1], Ei, I[:, 1] - 1j * I[:, 2], np.full(R, z), ln)
    F0 = cl[1] + 1j * cl[2]
    return I[:, 0] + (F0[:, None, None] * S).real


def _pair_groups(va: np.ndarray, yi: np.ndarray) -> list:
    """The combinations (dot-a variant ``va``, Y index ``yi``) in groups that
    each take one batched product with one side shared (broadcast, no copy):
    those of the most common dot-a variant, then the rest by Y index (with
    noise one variable at a time: the centre's dot-a variant with every Y,
    then the other dot-a variants with the centre's Y).  Returns (combination
    indices, dot-a index, Y index) per group, each index an array or a slice
    of one."""
    out = []
    vals, counts = np.unique(va, return_counts=True)
    a_top = vals[np.argmax(counts)]
    first = np.flatnonzero(va == a_top)
    out.append((first, slice(int(a_top), int(a_top) + 1), yi[first]))
    rest = np.flatnonzero(va != a_top)
    for y in np.unique(yi[rest]):
        ms = rest[yi[rest] == y]
        out.append((ms, va[ms], slice(int(y), int(y) + 1)))
    return out


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
