"""The fast cluster engine against qutip's mesolve (the reference, tolerances
tightened), and its own building blocks: the Pauli basis, the batched
exponential, cluster splitting, lazy idle channels and the content cache."""

import sys
from pathlib import Path

import numpy as np
import pytest
from scipy.linalg import expm

from compiler import load
from compiler.simulate import fidelity as F
from compiler.simulate.engines import pauli as PL
from compiler.simulate.engines import FastEngine, ReferenceEngine
from compiler import compile, compile_run
from compiler.simulate.build import build_model
from compiler.simulate.model import NoisePoint, noise_points
from compiler.simulate.run import end_sample
from conftest import SEQUENCES

sys.path.insert(0, str(Path(__file__).parent / "benchmarks"))
from workloads import write_case  # noqa: E402

TIGHT = dict(rtol=1e-11, atol=1e-13)     # mesolve tolerances for the comparisons


def _rand_rho(rng, d):
    a = rng.standard_normal((d, d)) + 1j * rng.standard_normal((d, d))
    r = a @ a.conj().T
    return r / np.trace(r)


# ------------------------------------------------------------------ Pauli basis

@pytest.mark.parametrize("n", [1, 2, 3])
def test_pauli_round_trip_and_transfer_matrices(n):
    # definitions of the Pauli transfer matrix: common practice, no source
    rng = np.random.default_rng(n)
    d = 2 ** n
    rho = _rand_rho(rng, d)
    r = PL.rho_to_pauli(rho)
    assert r[0] == pytest.approx(1.0)                      # Tr ρ
    assert np.allclose(PL.pauli_to_rho(r, n), rho, atol=1e-14)
    h = rng.standard_normal((d, d)) + 1j * rng.standard_normal((d, d))
    u = expm(-1j * (h + h.conj().T))
    R = PL.unitary_ptm(u)
    assert np.allclose(R @ r, PL.rho_to_pauli(u @ rho @ u.conj().T), atol=1e-13)
    assert np.allclose(R.T @ R, np.eye(4 ** n), atol=1e-12)   # unitary channels are orthogonal
    S = F.super_unitary(u)
    assert np.allclose(PL.super_to_ptm(S), R, atol=1e-13)
    assert np.allclose(PL.ptm_to_super(R), S, atol=1e-13)


def test_batched_exponential_matches_scipy():
    # scaling and squaring with a Taylor series (Moler & Van Loan, SIAM Review 45, 3 (2003));
    # scipy's Padé expm is the reference
    rng = np.random.default_rng(3)
    for k in (4, 16):
        A = rng.standard_normal((200, k, k)) * rng.choice([1e-4, 0.05, 0.5, 4.0], size=(200, 1, 1)) / k
        E = PL.expm_batch(A)
        ref = np.stack([expm(a) for a in A])
        # both methods round at this level (squaring amplifies it for the larger norms)
        assert np.max(np.abs(E - ref) / np.maximum(1, np.abs(ref).max(axis=(1, 2), keepdims=True))) < 1e-12
    # expm_any takes the batched series for 64 × 64 too when every 1-norm is at
    # most 0.02 (the weak exchange's chunk corrections), scipy above
    A = rng.standard_normal((30, 64, 64))
    A *= 0.02 / np.abs(A).sum(axis=-2).max(axis=-1)[:, None, None]
    for B in (A, A * 50):
        assert np.max(np.abs(PL.expm_any(B) - np.stack([expm(b) for b in B]))) < 1e-13


# ------------------------------------------------------------------ against mesolve

def _model(seq_path, run=0, stop=None):
    c = load(seq_path)
    cr = compile_run(c.expanded.runs[run], c.device)
    return c, build_model(cr.waveforms, cr.device, m=2, stop=stop or end_sample(cr.timeline))


def _compare(model, pts, *, process):
    n = model.n
    rng = np.random.default_rng(7)
    rho0 = _rand_rho(rng, 2 ** n)
    a = FastEngine().average(model, pts, process=process, rho0=rho0)
    b = ReferenceEngine(**TIGHT).average(model, pts, process=process, rho0=rho0)
    assert np.max(np.abs(a.rho - b.rho)) < 1e-7
    if process:
        assert np.max(np.abs(a.superop - b.superop)) < 1e-7
    return a, b


@pytest.mark.parametrize("name", ["gaas_rabi.dotseq"])
def test_examples_agree_with_mesolve(name):
    # whole run, three quadrature points: process and state to 1e-7 (mesolve rtol
    # 1e-11, atol 1e-13); cnot_pair and ramsey_pair: tests/test_simulate.py; the
    # ribbon: below (a window) and tests/benchmarks/bench_simulate.py (whole run)
    c, model = _model(SEQUENCES / name, run=len(load(SEQUENCES / name).expanded.runs) - 1)
    pts = noise_points(model, 3, "additive")
    a, b = _compare(model, pts[:3], process=True)
    U = np.eye(4)
    fa, fb = F.process_fidelity(a.superop, U), F.process_fidelity(b.superop, U)
    assert abs(fa - fb) < 1e-7


def test_ribbon_example_window_agrees_with_mesolve():
    # the four-dot ribbon: a window holding the long-range A-C exchange (with B
    # detuned), neighbouring bursts and idle dots, state of four dots to 1e-7;
    # the whole run is compared in tests/benchmarks/bench_simulate.py
    c = load(SEQUENCES / "ribbon_long_range.dotseq")
    cr = compile_run(c.expanded.runs[0], c.device)
    dev, tl, wf = cr.device, cr.timeline, cr.waveforms
    ac = next(s for s in tl.slots if s.kind == "sqrtswap")
    a = max(0, ac.start_sample - 300)
    model = build_model(wf, dev, m=2, start=a, stop=min(tl.n_samples, ac.end_sample + 600))
    assert model.n == 4
    _compare(model, noise_points(model, 1), process=False)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_random_small_cases_agree_with_mesolve(seed, tmp_path):
    # random mixes of rotations, together groups, exchange and waits on three
    # dots with a long-range coupling, at a random quadrature point
    rng = np.random.default_rng(seed)
    seq = write_case(tmp_path, 3, 6, charge_noise="20 uV")
    lines = seq.read_text().splitlines()
    body = [ln for ln in lines[2:-1]]
    rng.shuffle(body)
    seq.write_text("\n".join(lines[:2] + body + lines[-1:]) + "\n")
    c, model = _model(seq)
    pts = noise_points(model, 3, "tensor")
    pt = pts[int(rng.integers(len(pts)))]
    _compare(model, [NoisePoint(pt.detuning, pt.dv, 1.0)], process=False)


def test_two_dot_process_with_quadrature_agrees_with_mesolve(tmp_path):
    seq = write_case(tmp_path, 2, 5, charge_noise="20 uV")
    c, model = _model(seq)
    pts = noise_points(model, 3, "tensor")              # 27 points, weights sum to one
    assert sum(p.weight for p in pts) == pytest.approx(1.0)
    _compare(model, pts[::13], process=True)          # centre and two corners


# ------------------------------------------------------------------ structure

def test_closed_barriers_split_the_register_exactly(tmp_path):
    # dropping the closed pairs (budget) against keeping every pair on (budget 0)
    seq = write_case(tmp_path, 3, 12)
    c, model = _model(seq)
    rho0 = _rand_rho(np.random.default_rng(1), 8)
    pts = noise_points(model, 1)
    split = FastEngine()
    a = split.average(model, pts, rho0=rho0)
    b = FastEngine(exchange_budget=0.0).average(model, pts, rho0=rho0)
    # the dropped phase stays within the budget tied to the accuracy (4/3·1e-6 rad)
    assert 0 < split.neglected_exchange_rad <= 4 / 3 * 1e-6
    # the state moves by at most the diamond-norm bound 2·¾·φ of the dropped phase
    assert np.max(np.abs(a.rho - b.rho)) <= 1.5 * split.neglected_exchange_rad
    assert a.stats["largest_cluster"] == 2 and b.stats["largest_cluster"] == 3


@pytest.mark.parametrize("idle, j_hz", [("-514 mV", 1e-3), ("-438 mV", 45e-3)])
def test_weak_idle_exchange_is_dropped_within_the_stated_accuracy(tmp_path, idle, j_hz):
    # three dots whose idle barriers leave mHz exchange (J = 150 MHz·e^{V/20 mV}):
    # the fast engine drops it (clusters of one dot, as with closed barriers),
    # and the process differs from the exact treatment (nothing dropped) by
    # less than the stated bound ¾·φ on the fidelity, within 1e-6.
    # (invented device; the bound from |ΔF| ≤ ½‖ΔE‖◇ and ‖J·S1·S2‖ = ¾J:
    # common practice, no source)
    from compiler.simulate import fidelity as F2
    seq = write_case(tmp_path, 3, 3, long_range=False, charge_noise="10 uV")
    dev = tmp_path / "device.yaml"
    dev.write_text(dev.read_text().replace("idle_voltage: -600 mV", f"idle_voltage: {idle}"))
    seq.write_text('device "device.yaml"\nprepare D0 D1 D2 down\nrot D0 x 180 deg\n'
                   'rot D1 x 180 deg\nrot D2 x 180 deg\nread D0 D1 D2\n')
    c, model = _model(seq)
    assert model.pairs[0].coefficients()[0].min() == pytest.approx(j_hz, rel=0.05)
    pts = noise_points(model, 3)
    fast = FastEngine()
    a = fast.average(model, pts, process=True)
    b = FastEngine(exchange_budget=0.0).average(model, pts, process=True)
    assert a.stats["largest_cluster"] == 1 and b.stats["largest_cluster"] == 3
    assert 0 < a.stats["neglected_exchange_rad"] <= 4 / 3 * 1e-6
    U = np.eye(8)
    fa = F2.process_fidelity(a.superop, U)
    fb = F2.process_fidelity(b.superop, U)
    assert abs(fa - fb) <= a.stats["exchange_error_bound"] + 1e-12
    assert abs(fa - fb) < 1e-6


def test_idle_dots_touch_the_state_once(tmp_path):
    # twenty rotations on D0 of a four-dot register with closed barriers: every
    # channel fuses into one pending channel per dot, applied once at the end
    seq = write_case(tmp_path, 4, 2)
    body = "\n".join(["rot D0 x 90 deg", "rot D0 y 45 deg"] * 10)
    seq.write_text(f'device "device.yaml"\nprepare D0 D1 D2 D3 down\n{body}\nread D0\n')
    c, model = _model(seq)
    eng = FastEngine()
    eng.average(model, noise_points(model, 1), rho0=np.diag([1.0] + [0.0] * 15).astype(complex))
    assert eng.applications == 4


def test_repeated_gates_hit_the_cache(tmp_path):
    seq = write_case(tmp_path, 2, 2)
    seq.write_text('device "device.yaml"\nprepare D0 D1 down\nrepeat 30 { sqrtswap D0 D1 ; '
                   'wait 200 ns }\nread D0\n')
    c, model = _model(seq)
    eng = FastEngine()
    eng.average(model, noise_points(model, 1), process=True)
    assert eng.cache_hits >= 25


def test_result_records_engine_statistics():
    from compiler.simulate import SimOptions, simulate
    c = load(SEQUENCES / "cnot_pair.dotseq")
    r = simulate(compile(c), SimOptions(nodes=1, budget=False, steps=False))
    for key in ("wall_s", "exponentials", "cache_hits", "channel_applications", "engine"):
        assert key in r.stats
    assert r.stats["engine"] == "fast" and r.stats["exponentials"] > 0


def test_budget_keeps_one_quadrature_rule(tmp_path):
    # switching charge noise off drops a quadrature variable; the budget must not
    # also move from the additive rule to the product grid (that difference was
    # once booked as 'charge noise'): a 10 µV offset on a 20 mV-per-e-fold
    # exchange changes J by 0.05 %, a phase error of order 1e-3 rad per gate, so
    # its line is of order 1e-6 (estimate, common practice, no source)
    from compiler.simulate import SimOptions, simulate
    from compiler.simulate.run import quadrature_rule
    seq = write_case(tmp_path, 2, 6, charge_noise="10 uV")
    c = load(seq)
    assert quadrature_rule(c.device, SimOptions(nodes=5)) == "additive"
    r = simulate(compile(c), SimOptions(nodes=5, steps=False))
    line = next(b for b in r.runs[0].budget if b.source.startswith("charge"))
    assert abs(line.infidelity) < 1e-5


def test_cluster_pieces_are_shared_between_engines_within_a_memory_cap(tmp_path, monkeypatch):
    # the generator pieces of a cluster are kept per process (fast._PIECES),
    # read-only, and never more than PIECES_BYTES of them (common practice,
    # no source)
    from compiler.simulate.engines import fast as FE
    seq = write_case(tmp_path, 3, 4, long_range=False)
    c, model = _model(seq)
    monkeypatch.setattr(FE, "_PIECES", {})
    monkeypatch.setattr(FE, "_PIECES_BYTES", [0])
    a = FastEngine()._cluster_pieces(model, (0, 1, 2), (0, 1))
    assert FastEngine()._cluster_pieces(model, (0, 1, 2), (0, 1)) is a
    assert not a.base.flags.writeable and not a.pair[0][1].flags.writeable
    one = FastEngine()._cluster_pieces(model, (0,), ())
    assert len(FE._PIECES) == 2
    # a cap below one three-dot cluster's pieces: those are not kept, a dot's are
    monkeypatch.setattr(FE, "PIECES_BYTES", 2 ** 16)
    FE._PIECES.clear()
    FE._PIECES_BYTES[0] = 0
    b = FastEngine()._cluster_pieces(model, (0, 1, 2), (0, 1))
    assert b is not a and len(FE._PIECES) == 0
    FastEngine()._cluster_pieces(model, (0,), ())
    assert len(FE._PIECES) == 1 and 0 < FE._PIECES_BYTES[0] <= 2 ** 16
    assert np.array_equal(b.base, a.base) and np.array_equal(one.base, FE._PIECES[
        next(iter(FE._PIECES))].base)


# ------------------------------------------------------------------ reused evaluations

def test_content_digest_follows_content():
    # equal content, equal digest; any changed byte, field or type, another;
    # content of an unknown kind: no digest (nothing is reused)
    from compiler.simulate.engines.memo import content_digest
    from compiler.simulate.model import Dissipator
    a = np.arange(12.0).reshape(3, 4)
    d = Dissipator("t1", 0, "lower", 5e3)
    k = content_digest(a, (d, {"x": 1.0}), [1, 2])
    assert k == content_digest(a.copy(), (Dissipator("t1", 0, "lower", 5e3), {"x": 1.0}), [1, 2])
    b = a.copy()
    b[2, 3] = np.nextafter(b[2, 3], 20.0)                  # one bit of one entry
    assert content_digest(b, (d, {"x": 1.0}), [1, 2]) != k
    assert content_digest(a.reshape(4, 3), (d, {"x": 1.0}), [1, 2]) != k
    assert content_digest(a.astype(np.float32), (d, {"x": 1.0}), [1, 2]) != k
    assert content_digest(a, (Dissipator("t1", 0, "lower", 5.0001e3), {"x": 1.0}), [1, 2]) != k
    assert content_digest(a, (d, {"x": 1}), [1, 2]) != k               # int, not float
    assert content_digest(a, (d, {"x": 1.0}), (1, 2)) != k             # tuple, not list
    assert content_digest(a, object()) is None


def test_a_repeated_evaluation_is_reused_as_a_copy(tmp_path):
    # the same model, points and options on one engine: computed once, the
    # second answer equal and independent of the first; another rate, another
    # setting or another engine computes afresh (common practice, no source)
    import dataclasses
    seq = write_case(tmp_path, 2, 4, charge_noise="10 uV")
    c, model = _model(seq)
    pts = noise_points(model, 3)
    rho0 = _rand_rho(np.random.default_rng(5), 4)
    eng = FastEngine()
    a = eng.average(model, pts, process=True, rho0=rho0)
    n_exp = eng.exponentials
    b = eng.average(model, pts, process=True, rho0=rho0)
    assert eng.exponentials == n_exp and eng.stats()["reused_evaluations"] == 1
    assert b.stats["reused"] and b.stats["exponentials"] == 0
    assert np.array_equal(a.superop, b.superop) and np.array_equal(a.rho, b.rho)
    b.superop[:] = 0.0                                      # the kept result is a copy
    assert np.array_equal(eng.average(model, pts, process=True, rho0=rho0).superop, a.superop)
    slower = dataclasses.replace(model, dissipators=tuple(
        dataclasses.replace(d, rate=d.rate * 1.01) for d in model.dissipators))
    eng.average(slower, pts, process=True, rho0=rho0)
    eng.average(model, pts[:-1], process=True, rho0=rho0)
    eng.average(model, pts, process=True)
    eng.exchange_accuracy = 2e-6
    eng.average(model, pts, process=True, rho0=rho0)
    assert eng.stats()["reused_evaluations"] == 2 and eng.calls == 5


def test_the_budget_with_reused_evaluations_equals_the_budget_computed_afresh(tmp_path,
                                                                                monkeypatch):
    # sources that do not act on the run leave the total's model: their
    # evaluations are reused, and every number of the report is the same as
    # with nothing kept (common practice, no source)
    from compiler.simulate import SimOptions, simulate
    from compiler.simulate.engines import memo
    seq = write_case(tmp_path, 3, 4, charge_noise="10 uV", long_range=False)
    c = load(seq)
    opts = SimOptions(nodes=3, steps=False, threads=1)
    kept = simulate(compile(c), opts)
    monkeypatch.setattr(memo, "MEMO_BYTES", 0)
    fresh = simulate(compile(c), opts)
    assert kept.stats["reused_evaluations"] > 0 and fresh.stats["reused_evaluations"] == 0
    assert kept.stats["solver_calls"] < fresh.stats["solver_calls"]
    ra, rb = kept.runs[0], fresh.runs[0]
    assert [(x.source, x.infidelity) for x in ra.budget] == [(x.source, x.infidelity)
                                                             for x in rb.budget]
    assert (ra.average_fidelity, ra.state_fidelity, ra.budget_floor, ra.budget_remainder) == (
        rb.average_fidelity, rb.state_fidelity, rb.budget_floor, rb.budget_remainder)


def test_the_reference_solves_again_with_bdf_when_the_default_method_gives_up(tmp_path,
                                                                              monkeypatch):
    """qutip's default (Adams) method can give up at the tight tolerances on
    coefficients that jump every sub-step; the reference then solves the
    same run with BDF and counts it (common practice, no source)."""
    import qutip as qt
    from qutip.solver.integrator import IntegratorException
    seq = write_case(tmp_path, 2, 2)
    c, model = _model(seq)
    pts = noise_points(model, 1)
    rho0 = _rand_rho(np.random.default_rng(3), 4)
    real = qt.mesolve
    methods = []

    def picky(H, state, times, c_ops, options=None, **kw):
        methods.append(options.get("method", "default"))
        if options.get("method") != "bdf":
            raise IntegratorException("Repeated error test failures. (Check all input.)")
        return real(H, state, times, c_ops, options=options, **kw)
    monkeypatch.setattr(qt, "mesolve", picky)
    eng = ReferenceEngine(**TIGHT)
    got = eng.average(model, pts, rho0=rho0)
    assert methods == ["default", "bdf"] and eng.stats()["bdf_retries"] == 1
    monkeypatch.setattr(qt, "mesolve", real)
    fast = FastEngine().average(model, pts, rho0=rho0)
    assert np.max(np.abs(got.rho - fast.rho)) < 1e-7
