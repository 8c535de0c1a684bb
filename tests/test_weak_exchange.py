"""Weak residual exchange in the fast engine (compiler/simulate/engines/weak.py):
the interaction-picture treatment against the exact one (exchange kept on),
its building blocks, and the refusal of a cluster that cannot fit in memory."""

import sys
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import quad_vec
from scipy.linalg import expm

from compiler import compile_run, load
from compiler.cli import main
from compiler.simulate import fidelity as F
from compiler.simulate.build import build_model
from compiler.simulate.engines import ClusterTooLarge, FastEngine, ReferenceEngine
from compiler.simulate.engines import weak as W
from compiler.simulate.model import NoisePoint, noise_points
from compiler.simulate.run import end_sample

sys.path.insert(0, str(Path(__file__).parent / "benchmarks"))
from workloads import write_case  # noqa: E402

# idle barrier voltages of the benchmark line (J = 150 MHz·e^{V/20 mV}, invented device)
IDLE = {"1 Hz": "-376 mV", "1 kHz": "-238 mV", "1 MHz": "-100 mV"}
THREE_PI = "rot D0 x 180 deg\nrot D1 x 180 deg\nrot D2 x 180 deg\n"


def _case(tmp_path, n, idle, body, *, long_range=False):
    seq = write_case(tmp_path, n, 3, long_range=long_range, charge_noise="10 uV")
    dev = tmp_path / "device.yaml"
    dev.write_text(dev.read_text().replace("idle_voltage: -600 mV", f"idle_voltage: {idle}"))
    dots = " ".join(f"D{k}" for k in range(n))
    seq.write_text(f'device "device.yaml"\nprepare {dots} down\n{body}read {dots}\n')
    return seq


def _model(seq):
    c = load(seq)
    cr = compile_run(c.expanded.runs[0], c.device)
    return c, cr, build_model(cr.waveforms, cr.device, m=2, stop=end_sample(cr.timeline))


def _fidelity(ev, cr, c):
    dots = tuple(c.device.dots)
    U = F.ideal_unitary([s for s in c.expanded.runs[0].steps if s.kind != "read"], dots)
    frames = [cr.timeline.frames[q] for q in dots]
    return F.process_fidelity(F.to_qubit_frames(ev.superop, [0.0] * len(dots), frames), U)


# ------------------------------------------------------------------ building blocks

@pytest.mark.parametrize("swapped", [False, True])
def test_pair_generator_splits_into_one_dot_maps(swapped):
    # −i[A⊗B, ρ] = ½(−i[A, ·]⊗{B, ·} + {A, ·}⊗−i[B, ·]) (algebra: common practice,
    # no source); the sum of the terms is the engine's own pair generator
    from compiler.simulate.engines import pauli as PL
    Z = PL.SIGMA[3]
    sp = np.array([[0, 1], [0, 0]], complex)
    sm = sp.T.copy()
    a, b = (1, 0) if swapped else (0, 1)              # positions of the pair's first and second dot

    def at(o, k):
        return np.kron(o, np.eye(2)) if k == 0 else np.kron(np.eye(2), o)
    spm, smp = at(sp, a) @ at(sm, b), at(sm, a) @ at(sp, b)
    ref = (PL.hamiltonian_generator(at(Z, a) @ at(Z, b) / 4),
           PL.hamiltonian_generator((spm + smp) / 2),
           PL.hamiltonian_generator(1j * (spm - smp) / 2))
    terms = W.kron_terms(swapped)
    for k, G in enumerate(ref):
        c = np.zeros(3)
        c[k] = 1.0
        assert np.allclose(W.pair_generator(terms, *c), G, atol=1e-12)


def test_van_loan_integral_against_quadrature():
    # ∫_0^τ e^{−Au}·B·e^{Au} du from the block exponential (Van Loan, IEEE Trans.
    # Autom. Control 23, 395 (1978)) against adaptive quadrature
    rng = np.random.default_rng(4)
    A = rng.standard_normal((16, 16))
    B = rng.standard_normal((16, 16))
    tau = 0.3
    got = W.van_loan(A[None], B[None], np.array([tau]))[0]
    ref, _ = quad_vec(lambda u: expm(-A * u) @ B @ expm(A * u), 0, tau, epsabs=1e-13)
    assert np.max(np.abs(got - ref)) < 1e-10


def test_chunks_respect_size_and_length():
    x = np.full(100, 0.1)
    st = W.chunk_cuts(x, 0.35, 50)
    sums = np.add.reduceat(x, st)
    assert st[0] == 0 and np.all(sums <= 0.35 + 1e-12) and len(st) == 34
    assert np.all(np.diff(np.append(st, 100)) <= 50)
    assert list(W.chunk_cuts(np.full(10, 1e-9), 1.0, 4)) == [0, 4, 8]


# ------------------------------------------------------------------ against the exact treatment

@pytest.mark.parametrize("label, nodes", [("1 Hz", 1), ("1 kHz", 3)])
def test_weak_idle_exchange_costs_one_dot_clusters_within_the_bound(tmp_path, label, nodes):
    # three dots, three π bursts, idle barriers leaving J = 1 Hz or 1 kHz: too much
    # to drop within 1e-6, so before the weak treatment the dots formed one exact
    # three-dot cluster for the whole run.  Now every dot keeps its own channel,
    # and the process fidelity moves from the exact treatment (exchange kept on)
    # by less than the recorded bound, itself within the accuracy 1e-6 (bound:
    # Magnus remainder e^y − 1 − y per chunk and |ΔF| ≤ ½‖ΔE‖◇, common practice,
    # no source)
    c, cr, model = _model(_case(tmp_path, 3, IDLE[label], THREE_PI))
    pts = noise_points(model, nodes)
    a = FastEngine().average(model, pts, process=True)
    b = FastEngine(exchange_budget=0.0).average(model, pts, process=True)
    assert a.stats["largest_cluster"] == 1 and b.stats["largest_cluster"] == 3
    assert a.stats["weak_exchange_chunks"] >= 1
    bound = a.stats["exchange_error_bound"]
    assert 0 < bound <= 1e-6
    fa, fb = _fidelity(a, cr, c), _fidelity(b, cr, c)
    assert abs(fa - fb) <= bound + 1e-12
    # the channel itself within the diamond-norm bound (elements of the superoperator)
    assert np.max(np.abs(a.superop - b.superop)) <= 2 * bound


def test_exchange_pulses_waits_and_traces_with_weak_neighbours(tmp_path):
    # √SWAPs between neighbours whose other barrier idles at 1 kHz (during the
    # pulse its pair evolves exactly and the weak neighbour's exchange enters in
    # the interaction picture of that pair, so no three-dot cluster) and
    # a wait (runs of equal sub-steps: the block-exponential integral): the
    # state and the population traces against the exact treatment, within the bound
    body = ("rot D0 x 90 deg\nsqrtswap D0 D1\nwait 200 ns\nrot D2 y 90 deg\n"
            "sqrtswap D1 D2\nrot D1 x 180 deg\n")
    c, cr, model = _model(_case(tmp_path, 3, IDLE["1 kHz"], body))
    pt = noise_points(model, 3)[2]
    pts = [NoisePoint(pt.detuning, pt.dv, 1.0, pt.modes)]
    rng = np.random.default_rng(2)
    v = rng.standard_normal(8) + 1j * rng.standard_normal(8)
    rho0 = np.outer(v, v.conj()) / np.vdot(v, v).real
    a = FastEngine(quiet_exact=False).average(model, pts, rho0=rho0, trace_points=15)
    b = FastEngine(exchange_budget=0.0).average(model, pts, rho0=rho0, trace_points=15)
    # with quiet stretches taken exactly (the default) the same, within its bound
    q = FastEngine().average(model, pts, rho0=rho0, trace_points=15)
    assert np.max(np.abs(q.rho - b.rho)) <= 2 * q.stats["exchange_error_bound"]
    bound = a.stats["exchange_error_bound"]
    assert a.stats["weak_exchange_chunks"] > 1 and 0 < bound <= 1e-6
    # the pulse's pair is exact; its weak neighbour does not join it
    assert a.stats["largest_cluster"] == 2 and b.stats["largest_cluster"] == 3
    assert np.max(np.abs(a.rho - b.rho)) <= 2 * bound
    for q in range(3):
        assert np.max(np.abs(a.traces[q] - b.traces[q])) <= 2 * bound


@pytest.mark.parametrize("body, long_range, rule, force_simpson, acc", [
    # a long-range pulse D0–D2 across D1, whose barriers idle at 1 kHz: the weak
    # pairs act on (D0, D2) and D1 together, dots out of register order; the
    # midpoint rule fits its share of the accuracy; with no share kept for it
    # and chunks made dear, Simpson's rule is taken
    ("rot D1 x 90 deg\nsqrtswap D0 D2\nrot D1 x 90 deg\n", True, "midpoint", False, 1e-6),
    ("rot D1 x 90 deg\nsqrtswap D0 D2\nrot D1 x 90 deg\n", True, "simpson", True, 1e-6),
    # small rotations: the midpoint rule inside a sub-step is within its share
    ("rot D0 x 10 deg\nwait 50 ns\nrot D1 x 5 deg\n", False, "midpoint", False, 1e-6)])
def test_weak_pairs_beside_exact_ones_and_both_rules(tmp_path, monkeypatch, body, long_range,
                                                      rule, force_simpson, acc):
    # against the exact treatment (exchange kept on), within the recorded bound;
    # pieces in blocks of 16 (a tiny max_batch_bytes) give the same channel
    # (bound: Magnus remainder and quadrature error, common practice, no source)
    if force_simpson:
        monkeypatch.setattr(W, "CHUNK_COST", 10 ** 9)
        monkeypatch.setattr(W, "QUAD_SHARE", 0.0)
    c, cr, model = _model(_case(tmp_path, 3, IDLE["1 kHz"], body, long_range=long_range))
    pts = noise_points(model, 1)
    a = FastEngine(exchange_accuracy=acc, quiet_exact=False).average(model, pts, process=True)
    b = FastEngine(exchange_budget=0.0).average(model, pts, process=True)
    blocks = FastEngine(exchange_accuracy=acc, max_batch_bytes=1,
                        quiet_exact=False).average(model, pts, process=True)
    assert rule in a.stats["weak_exchange_rule"]
    assert a.stats["largest_cluster"] < b.stats["largest_cluster"] == 3
    bound = a.stats["exchange_error_bound"]
    assert 0 < bound <= acc
    assert abs(_fidelity(a, cr, c) - _fidelity(b, cr, c)) <= bound
    assert np.max(np.abs(a.superop - b.superop)) <= 2 * bound
    assert np.max(np.abs(a.superop - blocks.superop)) < 1e-12


def test_units_go_out_with_the_last_pair_that_touches_them_in_any_pair_order(tmp_path):
    # a chunk's own channel of each dot goes out with the last weak pair's
    # correction that touches it; with the couplings listed D1–D2 first, the
    # first pair's lower dot (D1) waits for the second pair and only D2 goes
    # out with it.  Against the exact treatment within the recorded bound in
    # both orders (bound: Magnus remainder and quadrature error, common
    # practice, no source)
    for order in ("as written", "reversed"):
        folder = tmp_path / order.replace(" ", "_")
        folder.mkdir()
        seq = _case(folder, 3, IDLE["1 kHz"], THREE_PI)
        dev = folder / "device.yaml"
        lines = dev.read_text().splitlines(keepends=True)
        pairs = [i for i, ln in enumerate(lines) if ln.lstrip().startswith("- {dots: [D")]
        assert len(pairs) == 2
        if order == "reversed":
            lines[pairs[0]], lines[pairs[1]] = lines[pairs[1]], lines[pairs[0]]
            dev.write_text("".join(lines))
        c, cr, model = _model(seq)
        assert (model.pairs[0].a, model.pairs[0].b) == ((0, 1) if order == "as written" else (1, 2))
        pts = noise_points(model, 1)
        a = FastEngine(quiet_exact=False).average(model, pts, process=True)
        b = FastEngine(exchange_budget=0.0).average(model, pts, process=True)
        assert a.stats["largest_cluster"] == 1 and a.stats["weak_exchange_chunks"] > 1
        bound = a.stats["exchange_error_bound"]
        assert 0 < bound <= 1e-6
        assert np.max(np.abs(a.superop - b.superop)) <= 2 * bound


def test_a_pair_of_equal_zeeman_energies_integrates_its_idle_runs_exactly(tmp_path):
    # D1 and D2 at the same g: their flip-flop does not turn, so while D0 is
    # driven the pair (D1, D2) has runs of equal sub-steps (the exact block
    # integral) inside pieces that are single for the pair (D0, D1); against the
    # exact treatment within the bound (common practice, no source)
    seq = _case(tmp_path, 3, IDLE["1 kHz"], "rot D0 x 180 deg\nwait 30 ns\nrot D1 x 90 deg\n")
    dev = tmp_path / "device.yaml"
    dev.write_text(dev.read_text().replace("g: 2.0040", "g: 2.0020"))
    c, cr, model = _model(seq)
    pts = noise_points(model, 1)
    a = FastEngine(quiet_exact=False).average(model, pts, process=True)
    b = FastEngine(exchange_budget=0.0).average(model, pts, process=True)
    assert a.stats["largest_cluster"] == 1 and a.stats["weak_exchange_chunks"] >= 1
    bound = a.stats["exchange_error_bound"]
    assert 0 < bound <= 1e-6
    assert np.max(np.abs(a.superop - b.superop)) <= 2 * bound


def test_transformed_maps_and_inverses_against_dense_products():
    # P⁻¹·O·P for the one-dot maps embedded in one or two dots, with the node axes
    # last, against dense matrix products; the closed-form inverse of a
    # trace-preserving Pauli transfer matrix against numpy's (linear algebra,
    # common practice, no source)
    from compiler.simulate.engines import pauli as PL
    rng = np.random.default_rng(5)
    L = 0.4 * rng.standard_normal((3, 7, 4, 4))
    L[..., 0, :] = 0                                    # trace preserving
    for P, pos, c in ((PL.expm_batch(L), 0, 1),
                      (PL.expm_batch(0.3 * rng.standard_normal((2, 5, 16, 16))), 1, 2)):
        last = np.ascontiguousarray(P.transpose(2, 3, 0, 1))
        inv = W._inverse_last(last)
        assert np.max(np.abs(inv.transpose(2, 3, 0, 1) - np.linalg.inv(P))) < 1e-12
        O = np.stack([np.kron(np.eye(4), o) if pos else o for o in W.ONE_DOT])
        dense = (np.linalg.inv(P)[:, :, None] @ O) @ P[:, :, None]
        # the engine's layout: (variant, k, k, node) in, (variant, map, k², node) out
        got = W._transformed(P.transpose(0, 2, 3, 1), inv.transpose(2, 0, 1, 3),
                             W._embedded_nonzeros(pos, c))
        k = P.shape[-1]
        assert np.max(np.abs(dense.reshape(P.shape[:2] + (6, k * k)).transpose(0, 2, 3, 1)
                             - got)) < 1e-12


@pytest.mark.parametrize("long_range", [False, True])
def test_quiet_stretches_are_exact_where_that_is_cheap(tmp_path, long_range):
    # a Hahn echo whose barriers idle at 1 kHz: inside the waits nothing changes
    # but the flip-flop's turn, which the exact cluster's rotating frames
    # cancel, so the waits are taken exactly (one exponential per wait and
    # noise point) and only the bursts weakly.  With a long-range D0–D2 pair
    # the three pairs make a loop (no frame cancels every flip-flop): the
    # waits stay weak.  Against the exact treatment within the recorded bound
    # (common practice, no source)
    body = "rot D0 x 90 deg\nwait 300 ns\nrot D0 x 180 deg\nwait 300 ns\nrot D0 x 90 deg\n"
    c, cr, model = _model(_case(tmp_path, 3, IDLE["1 kHz"], body, long_range=long_range))
    pts = noise_points(model, 1)
    eng = FastEngine()
    prep = eng._prepare(model, pts)
    weak_steps = sum(int(w.sum()) for w in prep["ip"])
    a = eng.average(model, pts, process=True)
    b = FastEngine(exchange_budget=0.0).average(model, pts, process=True)
    bound = a.stats["exchange_error_bound"]
    assert 0 < bound <= 1e-6
    assert np.max(np.abs(a.superop - b.superop)) <= 2 * bound
    assert abs(_fidelity(a, cr, c) - _fidelity(b, cr, c)) <= bound
    wait = int(300e-9 / model.h)
    if long_range:
        assert a.stats["largest_cluster"] == 1
        assert weak_steps >= len(model.pairs) * 2 * wait
    else:
        assert a.stats["largest_cluster"] == 3
        # the waits, but for the pulses' tails on either side, are exact
        assert weak_steps <= len(model.pairs) * (model.k - 2 * 0.9 * wait)
        # the exact cluster over a wait: one exponential per wait and noise point
        # (a pulse's decaying tail, 1e-45 Hz within the wait, is no change), and
        # far fewer chunks than with the waits in the weak treatment
        assert a.stats["exponentials"] <= 2 * len(pts) < b.stats["exponentials"]
        w = FastEngine(quiet_exact=False).average(model, pts, process=True)
        assert a.stats["weak_exchange_chunks"] < w.stats["weak_exchange_chunks"] / 3


def test_quiet_pair_beside_a_busy_weak_pair_stays_weak(tmp_path):
    # drive crosstalk off (the error budget's run): six π bursts on D0 (0.6 µs)
    # beside D1 and D2 idle at 1 kHz.  D1–D2 is quiet for the whole time, D0–D1 is busy (D0's
    # drive changes every sub-step, so that pair takes nodes).  Taking D1–D2
    # exactly there made a two-dot unit on which every node's transformed maps
    # were 16 × 16 (30× the closed-barrier time); it stays weak, every dot
    # keeps its own channel, and the result agrees with the exact treatment
    # within the recorded bound (common practice, no source)
    from compiler import CompileOptions
    from compiler.simulate.sources import Switches, compile_changes
    off = Switches().off("crosstalk")
    seq = _case(tmp_path, 3, IDLE["1 kHz"], "rot D0 x 180 deg\n" * 6)
    c = load(seq)
    cr = compile_run(c.expanded.runs[0], c.device, CompileOptions(**compile_changes(off)))
    model = build_model(cr.waveforms, cr.device, m=2, stop=end_sample(cr.timeline),
                        switches=off)
    pts = noise_points(model, 1)
    eng = FastEngine()
    prep = eng._prepare(model, pts)
    assert prep["ip"][0].any() and prep["ip"][1].any()      # both pairs weak in the burst
    a = eng.average(model, pts, process=True)
    assert a.stats["largest_cluster"] == 1
    b = FastEngine(exchange_budget=0.0).average(model, pts, process=True)
    bound = a.stats["exchange_error_bound"]
    assert 0 < bound <= 1e-6
    assert np.max(np.abs(a.superop - b.superop)) <= 2 * bound
    assert abs(_fidelity(a, cr, c) - _fidelity(b, cr, c)) <= bound


def test_estimate_counts_the_chunks_applied_to_the_register(tmp_path):
    # four dots on a line idling at 1 kHz (no quiet stretch can be exact: the
    # chain would be one four-dot cluster), a Hahn echo on D1: hundreds of
    # chunks, each applying every weak pair's 16 × 16 channel to the
    # 256 × 256 process.  The plan's count of chunks, Y_seg/y* per segment
    # (y ≤ y* in each), is a lower bound of the chunks cut and within 1.5× of
    # them, and the estimate holds their applications, 2·16·4ⁿ·4ⁿ flops per
    # pair, chunk and point (before, it left them out: 3× short on an
    # invented quadruple dot; operation counts: common practice, no source)
    body = "rot D1 x 90 deg\nwait 400 ns\nrot D1 x 180 deg\nwait 400 ns\nrot D1 x 90 deg\n"
    c, cr, model = _model(_case(tmp_path, 4, IDLE["1 kHz"], body))
    pts = noise_points(model, 1)
    eng = FastEngine()
    prep = eng._prepare(model, pts)
    b = prep["bounds"]
    planned, applied = 0, 0.0
    for s, e in zip(b[:-1], b[1:]):
        weak = eng._segment_split(model, prep, s)[1] if e > s else None
        if weak:
            k = eng._weak_chunks(model, prep, weak[0], s, e)
            planned += k
            applied += k * len(weak[0]) * 2 * 16 * 4 ** model.n * 4 ** model.n * len(pts)
    ev = FastEngine().average(model, pts, process=True)
    cut = ev.stats["weak_exchange_chunks"]
    assert 100 < planned <= cut <= 1.5 * planned
    assert ev.stats["estimate"]["weak_flops"] >= applied


def test_small_channels_after_a_large_pending_one_are_applied_not_multiplied_in(
        tmp_path, monkeypatch):
    # the cost rule of the pending channels (fast._fuses): multiplying a k × k
    # channel into a pending K × K one costs K³ per point, applying it by
    # itself 4ⁿ·B·k (common practice, no source: operation counts)
    from compiler.simulate.engines import fast as FE
    assert FE._fuses(4, 4, 3, 64) and FE._fuses(16, 4, 3, 64)
    assert not FE._fuses(64, 4, 3, 64) and not FE._fuses(64, 16, 3, 64)
    assert FE._fuses(64, 64, 3, 64)           # the process on a full-register cluster
    assert not FE._fuses(64, 64, 3, 1)        # a state: applied, never a 64³ product
    assert FE._fuses(4, 4, 12, 1)             # an idle dot of a long line: one pending channel
    # the echo of the test above at 1 kHz: the three-dot waits are followed by
    # the weak pairs' one- and two-dot channels, now applied after the wait
    # instead of multiplied into it; the same superoperator to rounding
    body = "rot D0 x 90 deg\nwait 300 ns\nrot D0 x 180 deg\nwait 300 ns\nrot D0 x 90 deg\n"
    c, cr, model = _model(_case(tmp_path, 3, IDLE["1 kHz"], body))
    pts = noise_points(model, 1)
    a = FastEngine()
    ra = a.average(model, pts, process=True)
    monkeypatch.setattr(FE, "_fuses", lambda K, k, n, cols: True)
    b = FastEngine()
    rb = b.average(model, pts, process=True)
    assert ra.stats["largest_cluster"] == 3
    assert a.applications > b.applications and a.fusions < b.fusions
    assert np.max(np.abs(ra.superop - rb.superop)) < 1e-12


def test_a_long_wait_in_an_exact_cluster_costs_a_few_exponentials(tmp_path, monkeypatch):
    # 100 µs of idle exchange at 1 MHz keep the three dots one exact cluster; in
    # its rotating frames every sub-step of the wait is the same, although the
    # frame angles reach 3·10⁴ rad (rounding of about ε·ϑ once made each
    # sub-step distinct: an exponential per sub-step).  Cut into blocks of
    # 1024 sub-steps (a tiny COEF_BLOCK_BYTES) the channel is the same to
    # 1e-8: each block's frame rotations round to about ε·ϑ ≈ 10⁻¹¹, composed
    # 200 times (measured 4.6e-10; composition of channels, common practice,
    # no source)
    import compiler.simulate.engines.fast as fast
    c, cr, model = _model(_case(tmp_path, 3, IDLE["1 MHz"], "rot D0 x 90 deg\nwait 100 us\n"
                                "rot D0 x 90 deg\n"))
    pts = noise_points(model, 1)
    a = FastEngine().average(model, pts, process=True)
    assert a.stats["largest_cluster"] == 3 and model.k > 2 * 10 ** 5
    assert a.stats["exponentials"] < 2000
    monkeypatch.setattr(fast, "COEF_BLOCK_BYTES", 1)
    b = FastEngine().average(model, pts, process=True)
    assert np.max(np.abs(a.superop - b.superop)) < 1e-8


def test_blocked_prefix_products_against_one_product_per_piece():
    # chunk_prefix in blocks of about √n pieces against the plain sequence of
    # products, with restarts anywhere (linear algebra, common practice, no source)
    rng = np.random.default_rng(11)
    for n in (1, 16, 17, 30, 101, 601):
        for k in (4, 16):
            M = rng.standard_normal((2, n, k, k)) / k
            for p in (0.0, 0.05, 0.5):
                first = rng.random(n) < p
                ref, cur = np.empty_like(M), None
                for i in range(n):
                    cur = M[:, i] if first[i] or cur is None else M[:, i] @ cur
                    ref[:, i] = cur
                assert np.allclose(W.chunk_prefix(M, first), ref, rtol=1e-10, atol=1e-13)


def test_a_turning_flip_flop_over_a_run_in_closed_form():
    # Σ_k z^k·E^−k·X·E^k by doubling against the plain sum; the run's integral
    # (J part over the run, flip-flop F₀z^k per sub-step) against the sum of
    # one-sub-step block-exponential integrals (Van Loan, IEEE Trans. Autom.
    # Control 23, 395 (1978)) conjugated to each sub-step's start
    rng = np.random.default_rng(3)
    R, K, h = 4, 16, 0.05
    A = 0.3 * rng.standard_normal((R, K, K))
    E = np.stack([expm(a) for a in A])
    Ei = np.linalg.inv(E)
    X = rng.standard_normal((R, K, K)) + 1j * rng.standard_normal((R, K, K))
    z, n = np.exp(1j * rng.uniform(0, 6, R)), np.array([1, 2, 7, 37])
    got = W.conj_geometric(E, Ei, X, z, n)
    for r in range(R):
        ref = sum(z[r] ** k * np.linalg.matrix_power(Ei[r], k) @ X[r]
                  @ np.linalg.matrix_power(E[r], k) for k in range(n[r]))
        assert np.max(np.abs(got[r] - ref)) < 1e-12 * np.max(np.abs(ref))
    Gs = [rng.standard_normal((K, K)) for _ in range(3)]
    cl, zz, ln = rng.standard_normal((3, R)), np.exp(0.7j), np.array([4, 5, 9, 20])
    got = W.run_integral(A, cl, Gs, zz, h, ln)
    for r in range(R):
        tot = 0
        for k in range(ln[r]):
            F = (cl[1, r] + 1j * cl[2, r]) * zz ** k
            B = cl[0, r] * Gs[0] + F.real * Gs[1] + F.imag * Gs[2]
            Ek = expm(A[r] * k * h)
            tot = tot + np.linalg.inv(Ek) @ W.van_loan(A[r][None], B[None], np.array([h]))[0] @ Ek
        assert np.max(np.abs(got[r] - tot)) < 1e-12 * np.max(np.abs(tot))
    # what the closed form leaves out of coefficients that are not quite a run
    co = np.stack([np.full(6, 2.0), 1.5 * np.cos(0.7 * np.arange(6)),
                   1.5 * np.sin(0.7 * np.arange(6))])
    assert W.run_deviation(co, zz, h, 0, 6) < 1e-12
    co[0, 3] += 0.1
    assert W.run_deviation(co, zz, h, 0, 6) == pytest.approx(2 * np.pi * h * 0.1 / 2)


def test_the_midpoint_bound_on_the_second_derivative():
    # the midpoint rule's bound uses ‖ad_A²(B)‖◇ ≤ (2π·s_H + 3‖L_D‖◇)²·‖B‖◇ for
    # the pair's Hamiltonian generator B (ad_{L_H}(L_X) = L_{−i2π[H, X]},
    # ‖[H, X]‖ ≤ spread(H)·‖X‖; common practice, no source): checked on random
    # two-dot generators with an ancilla, against the induced trace norm of
    # ad_A²(B) on random inputs (a lower bound of its diamond norm)
    from compiler.simulate.engines import pauli as PL
    rng = np.random.default_rng(13)
    Z = PL.SIGMA[3]

    def herm(d):
        a = rng.standard_normal((d, d)) + 1j * rng.standard_normal((d, d))
        return (a + a.conj().T) / 2

    def lind(H, cs):                 # column-stacked superoperator of −i2π[H,·] + Σ D[c]
        d = H.shape[0]
        eye = np.eye(d)
        L = -2j * np.pi * (np.kron(eye, H) - np.kron(H.T, eye))
        for c in cs:
            cdc = c.conj().T @ c
            L += np.kron(c.conj(), c) - 0.5 * (np.kron(eye, cdc) + np.kron(cdc.T, eye))
        return L
    for _ in range(5):
        H = herm(4)
        Hp = np.kron(Z, Z) / 4 * rng.uniform(0.5, 2) + herm(4) * 0.2
        cs = [np.sqrt(rng.uniform(0, 3)) * np.kron(np.array([[0, 1], [0, 0]]), np.eye(2))]
        A, B = lind(H, cs), lind(Hp, [])
        ad2 = A @ (A @ B - B @ A) - (A @ B - B @ A) @ A
        ev = np.linalg.eigvalsh(H)
        s_h = 2 * np.pi * (ev[-1] - ev[0])
        dn = sum(2 * np.linalg.norm(c, 2) ** 2 for c in cs)
        evp = np.linalg.eigvalsh(Hp)
        bound = (s_h + 3 * dn) ** 2 * 2 * np.pi * (evp[-1] - evp[0])
        for _ in range(20):                              # with a four-level ancilla
            v = rng.standard_normal(16) + 1j * rng.standard_normal(16)
            rho = np.outer(v, v.conj()) / np.vdot(v, v).real
            # (ad2 ⊗ 1) on the joint state, column stacked by blocks
            out = _apply_with_ancilla(ad2, rho)
            assert np.abs(np.linalg.eigvals(out)).sum() <= bound * (1 + 1e-9)
        # and the bound is 4× below the older (2‖A‖)² for a pure Hamiltonian
        assert (s_h + 3 * dn) ** 2 <= (2 * (s_h + dn)) ** 2


def _apply_with_ancilla(S: np.ndarray, rho: np.ndarray) -> np.ndarray:
    """(S ⊗ id)(ρ) for a column-stacked superoperator S on a 4-level system and
    a 4-level ancilla (ρ on system ⊗ ancilla, 16 × 16)."""
    t = rho.reshape(4, 4, 4, 4)                     # (s, a, s', a')
    out = np.zeros_like(t)
    for a in range(4):
        for b in range(4):
            block = t[:, a, :, b]                   # 4 × 4 on the system
            out[:, a, :, b] = (S @ block.reshape(-1, order="F")).reshape(4, 4, order="F")
    return out.reshape(16, 16)


def test_zero_accuracy_keeps_everything_exact(tmp_path):
    c, cr, model = _model(_case(tmp_path, 3, IDLE["1 kHz"], THREE_PI))
    pts = noise_points(model, 1)
    a = FastEngine(exchange_accuracy=0.0).average(model, pts, process=True)
    b = FastEngine(weak_exchange=False, exchange_budget=0.0).average(model, pts, process=True)
    assert a.stats["largest_cluster"] == 3 and a.stats["exchange_error_bound"] == 0
    assert np.array_equal(a.superop, b.superop)


def test_batched_exponentials_in_small_batches_are_the_same(tmp_path):
    # the exact three-dot cluster with its exponentials cut into batches of one
    # sub-step (a tiny max_batch_bytes) gives the same channel
    c, cr, model = _model(_case(tmp_path, 3, IDLE["1 kHz"], THREE_PI))
    pts = noise_points(model, 1)
    a = FastEngine(exchange_budget=0.0).average(model, pts, process=True)
    b = FastEngine(exchange_budget=0.0, max_batch_bytes=1).average(model, pts, process=True)
    assert np.max(np.abs(a.superop - b.superop)) < 1e-12


def test_weak_exchange_against_mesolve(tmp_path):
    # two dots, a π burst and a wait with 1 kHz idle exchange: the fast engine's
    # weak treatment against qutip's mesolve on the same piecewise-constant model
    # (rtol 1e-11): the state within the bound plus the reference's 1e-7
    c, cr, model = _model(_case(tmp_path, 2, IDLE["1 kHz"], "rot D0 x 180 deg\nwait 100 ns\n"))
    pts = noise_points(model, 1)
    rho0 = np.zeros((4, 4), complex)
    rho0[3, 3] = 1
    a = FastEngine().average(model, pts, rho0=rho0)
    r = ReferenceEngine(rtol=1e-11, atol=1e-13).average(model, pts, rho0=rho0)
    assert a.stats["weak_exchange_chunks"] >= 1
    assert np.max(np.abs(a.rho - r.rho)) <= 2 * a.stats["exchange_error_bound"] + 1e-7


# ------------------------------------------------------------------ memory: refuse before running

def test_a_cluster_over_the_memory_limit_is_refused_before_any_work(tmp_path):
    # five dots whose barriers idle at 1 MHz: one five-dot cluster (1024 × 1024
    # channels) the whole run; with a 100 MB limit the engine refuses at once
    c, cr, model = _model(_case(tmp_path, 5, IDLE["1 MHz"], "rot D0 x 180 deg\n"))
    eng = FastEngine(memory_limit=100 * 10 ** 6)
    with pytest.raises(ClusterTooLarge) as e:
        eng.average(model, noise_points(model, 1), rho0=np.eye(32) / 32)
    info = e.value.info
    assert info["dots"] == ["D0", "D1", "D2", "D3", "D4"] and info["dimension"] == 1024
    assert info["bytes"] > info["limit"] and len(info["pairs"]) == 4
    assert info["pairs"][0]["j_min"] == pytest.approx(1.011e6, rel=0.01)
    assert eng.exponentials == 0
    # without a limit the estimate is recorded and the run goes ahead
    assert FastEngine()._estimate_now == {}


@pytest.mark.parametrize("command", ["simulate", "run"])
def test_cli_refuses_a_too_large_cluster_naming_it(tmp_path, command, capsys):
    seq = _case(tmp_path, 5, IDLE["1 MHz"], "rot D0 x 180 deg\n")
    out = tmp_path / "out"
    code = main([command, str(seq), "-o", str(out), "--memory-limit", "200MB", "--nodes", "1"])
    err = capsys.readouterr().err
    assert code == 2
    assert not out.exists()                                 # nothing written
    for part in ("dots D0, D1, D2, D3, D4 form one cluster of 5 dots", "1024×1024",
                 "D0-D1 (J = 1.01", "MHz at -100 mV on its barrier", "from 0 s to",
                 "idle_voltage", "--exchange-accuracy", "--nodes", "--memory-limit"):
        assert part in err, part
    assert "shorten" not in err.lower()


def test_the_weak_treatment_is_in_the_estimate_and_announced(tmp_path, monkeypatch):
    # at 1 kHz every dot keeps its own channel (no exact cluster to estimate): the
    # weak treatment's work is in the estimate and an announcement above the
    # threshold says what makes it slow (common practice, no source)
    import compiler.simulate.engines.fast as fast
    c, cr, model = _model(_case(tmp_path, 3, IDLE["1 kHz"], THREE_PI))
    said = []
    eng = FastEngine()
    eng.notify = said.append
    ev = eng.average(model, noise_points(model, 3), process=True)
    est = ev.stats["estimate"]
    assert est["weak_flops"] > 0 and est["flops"] == est["weak_flops"] and said == []
    monkeypatch.setattr(fast, "SLOW_NOTE_S", 0.0)
    eng.average(model, noise_points(model, 3), process=True)
    assert said == []               # the same evaluation again is reused: nothing to announce
    eng = FastEngine()
    eng.notify = said.append
    eng.average(model, noise_points(model, 3), process=True)
    assert len(said) == 1
    assert "noise points each take the weak-exchange treatment" in said[0]
    assert "--exchange-accuracy" in said[0]


def test_exchange_accuracy_option_is_checked(tmp_path, capsys):
    seq = _case(tmp_path, 3, IDLE["1 Hz"], THREE_PI)
    code = main(["simulate", str(seq), "-o", str(tmp_path / "o"), "--exchange-accuracy", "0.5"])
    assert code == 2
    assert "exchange accuracy 0.5 must be from 0" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


def test_a_slow_evaluation_is_announced_with_its_cluster(tmp_path, monkeypatch):
    # three dots at 1 MHz idle exchange form one exact cluster (64 × 64): the
    # engine's estimate (made before any work) is announced when above the
    # threshold, naming the cluster and the fixes; below it, nothing is said
    # (common practice, no source)
    import compiler.simulate.engines.fast as fast
    c, cr, model = _model(_case(tmp_path, 3, IDLE["1 MHz"], THREE_PI))
    said = []
    eng = FastEngine()
    eng.notify = said.append
    eng.average(model, noise_points(model, 1), process=True)
    assert said == []                                       # estimated well under 20 s
    monkeypatch.setattr(fast, "SLOW_NOTE_S", 0.0)
    eng = FastEngine()                  # a new engine: the same one would reuse its result
    eng.notify = said.append
    eng.average(model, noise_points(model, 1), process=True)
    assert len(said) == 1
    for part in ("slow: one evaluation will take roughly", "dots D0, D1, D2 form one exact "
                 "cluster (64×64 channels", "distinct sub-steps", "--exchange-accuracy"):
        assert part in said[0], part


def test_the_spread_bounds_the_commutator_in_the_diamond_norm():
    # ‖−i[H, ·]‖◇ ≤ λ_max − λ_min (common practice, no source): the spread from
    # the closed form against the eigenvalues of H, and the superoperator norm of
    # the commutator on random Hermitian inputs (with an ancilla) below it
    from compiler.simulate.engines import pauli as PL
    rng = np.random.default_rng(7)
    sp = np.array([[0, 1], [0, 0]], complex)
    Z = PL.SIGMA[3]
    for J, F in ((1.0, 1.0), (2.0, 0.3 + 0.4j), (-1.0, 2.0j), (0.5, 0.0)):
        H = (J * np.kron(Z, Z) / 4 + (F * np.kron(sp, sp.T) + np.conj(F) * np.kron(sp.T, sp)) / 2)
        ev = np.linalg.eigvalsh(H)
        assert W.spread(J, abs(F)) == pytest.approx(ev[-1] - ev[0], abs=1e-12)
        big = np.kron(H, np.eye(4))
        for _ in range(50):
            A = rng.standard_normal((16, 16)) + 1j * rng.standard_normal((16, 16))
            rho = A + A.conj().T
            lhs = np.abs(np.linalg.eigvalsh(big @ rho - rho @ big)).sum()
            assert lhs <= (ev[-1] - ev[0]) * np.abs(np.linalg.eigvalsh(rho)).sum() + 1e-12


def test_variants_of_one_detuning_share_their_coefficients(tmp_path, monkeypatch):
    # an echo at 1 kHz (three-dot exact waits, weak bursts) over one dot's T2*
    # points: the variants differ only in the static detuning, so the sub-steps'
    # coefficients are built, compared and hashed once; the channels are those
    # of one array per variant, bit for bit (common practice, no source)
    from compiler.simulate.engines import fast as FE
    body = "rot D0 x 90 deg\nwait 300 ns\nrot D0 x 180 deg\nwait 300 ns\nrot D0 x 90 deg\n"
    c, cr, model = _model(_case(tmp_path, 3, IDLE["1 kHz"], body))
    pts = [p for p in noise_points(model, 5) if p.detuning[0] != 0.0]
    assert len(pts) == 4 and all(not any(p.dv) for p in pts)
    orig = FE.FastEngine._segment_terms
    shapes = []

    def spy(self, *a):
        got = orig(self, *a)
        shapes.append((got[0].shape[0], got[2].shape[0]))
        return got
    monkeypatch.setattr(FE.FastEngine, "_segment_terms", spy)
    shared = FastEngine().average(model, pts, process=True)
    assert (4, 1) in shapes and shared.stats["largest_cluster"] == 3

    def one_each(self, *a):
        st, G, C, cmap, combos, which, theta = orig(self, *a)
        return st, G, C[cmap], np.arange(len(cmap)), combos, which, theta
    monkeypatch.setattr(FE.FastEngine, "_segment_terms", one_each)
    each = FastEngine().average(model, pts, process=True)
    assert np.array_equal(shared.superop, each.superop)
