"""Benchmark: the fast cluster engine against the qutip mesolve route, on the
same work in the same process; then scaling to 12 dots.

    python tests/benchmarks/bench_simulate.py [--quick]

W2  two graphene-preset dots, 40 steps (Gaussian bursts, two-tone 'together'
    groups, square roots of SWAP with finite rise time), T1 at temperature,
    T2, charge noise on exchange, T2* by Gauss–Hermite quadrature with 5
    nodes per dot (the tool's automatic quadrature: one variable at a time,
    13 points).  Work: whole-run process fidelity.  The mesolve route is the
    reference engine (one mesolve of the superoperator per quadrature point,
    rtol 1e-10, atol 1e-12).  Also: the full report (per-step fidelities and
    error budget) of W2 with the default options.
W4  four dots in a line with a long-range D0-D2 coupling, 60 steps, no
    quadrature.  Work: final state fidelity.
Weak exchange  three dots on one line, idle barriers at 1 mHz … 1 kHz against
    fully closed: three π bursts (key weak_exchange_ratio) and a 2.4 µs Hahn
    echo (key weak_exchange_echo_ratio), each against the exact treatment;
    both as the whole-run evaluation `simulate` makes (refined averaging,
    traces, one engine and its caches; keys weak_exchange_evaluation_ratio,
    weak_exchange_echo_evaluation_ratio) and as the whole `dotseq simulate`
    command, closed against 1 kHz (keys weak_exchange_command_ratio,
    weak_exchange_echo_command_ratio).
Scaling  the W4 pattern on a line of N = 4 … 12 dots, 100 steps, state
    evolution only, each N in a fresh process: seconds of the evolution and
    the process's peak resident memory.  At N = 12 one channel application
    (a two-dot exchange channel in the middle of the line) is timed against
    a plain numpy copy of the same state array.

The mesolve route runs once (it takes minutes); the fast route is the median
of several runs.  The last line printed is one JSON object.
"""

from __future__ import annotations

import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parents[1]))

from workloads import write_case  # noqa: E402


def median_time(fn, repeats: int) -> tuple[float, object]:
    times, out = [], None
    for _ in range(repeats):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times), out


def prepared(seq: Path, nodes: int):
    from compiler import load
    from compiler.simulate import fidelity as F
    from compiler import compile_run
    from compiler.simulate.build import build_model
    from compiler.simulate.model import noise_points
    from compiler.simulate.run import end_sample, program_steps
    c = load(seq)
    run = c.expanded.runs[0]
    cr = compile_run(run, c.device)
    dev, tl, wf = cr.device, cr.timeline, cr.waveforms
    model = build_model(wf, dev, m=2, stop=end_sample(tl))
    pts = noise_points(model, nodes, "auto")
    dots = tuple(dev.dots)
    U = F.ideal_unitary(program_steps(tl), dots)
    psi0 = F.initial_state(run, dots, model.ground_up)
    frames = [tl.frames[q] for q in dots]
    return c, model, pts, U, psi0, frames


def process_fidelity(S, U, frames):
    from compiler.simulate import fidelity as F
    return F.process_fidelity(F.to_qubit_frames(S, [0.0] * len(frames), frames), U)


def state_fidelity(rho, U, psi0, frames):
    from compiler.simulate import fidelity as F
    psi = U @ psi0
    return float(np.real(psi.conj() @ F.rho_to_qubit_frames(rho, frames) @ psi))


def bench_w2(folder: Path, quick: bool) -> dict:
    from compiler import compile
    from compiler.simulate import SimOptions, simulate
    from compiler.simulate.engines import FastEngine, ReferenceEngine
    seq = write_case(folder / "w2", 2, 40, charge_noise="10 uV")
    c, model, pts, U, psi0, frames = prepared(seq, 5)
    ref_pts = pts[:3] if quick else pts
    t_fast, ev = median_time(lambda: FastEngine().average(model, ref_pts, process=True), 5)
    t0 = time.perf_counter()
    ev_ref = ReferenceEngine().average(model, ref_pts, process=True)
    t_ref = time.perf_counter() - t0
    f_fast = process_fidelity(ev.superop, U, frames)
    f_ref = process_fidelity(ev_ref.superop, U, frames)
    t_report, r = median_time(lambda: simulate(compile(c), SimOptions()), 3)
    out = {"w2_points": len(ref_pts), "w2_sub_steps": model.k, "w2_fast_s": t_fast,
           "w2_reference_s": t_ref, "w2_ratio": t_ref / t_fast,
           "w2_process_fidelity": f_fast, "w2_max_abs_diff": abs(f_fast - f_ref),
           "w2_superop_max_abs_diff": float(np.max(np.abs(ev.superop - ev_ref.superop))),
           "w2_full_report_s": t_report,
           "w2_report_average_fidelity": r.runs[0].average_fidelity}
    print(f"W2: {len(ref_pts)} quadrature points, {model.k} sub-steps: fast {t_fast:.3f} s, "
          f"mesolve {t_ref:.1f} s, ratio {t_ref / t_fast:.0f}x; process fidelity "
          f"{f_fast:.9f} vs {f_ref:.9f} (|diff| {abs(f_fast - f_ref):.1e}); full report "
          f"{t_report:.2f} s", flush=True)
    return out


# an invented 1/f spectrum with about the preset's T2* (bilayer_graphene: T2* 1 us assumed)
W2_SPECTRUM = "{at_1hz: 1e9 Hz^2/Hz, exponent: 1}"


def bench_w2_spectral(folder: Path) -> dict:
    """The W2 full report with a 1/f Zeeman-noise spectrum on both dots
    instead of T2/T2* (the spectrum's three bands; docs/simulate.md)."""
    from compiler import compile, load
    from compiler.simulate import SimOptions, simulate
    seq = write_case(folder / "w2s", 2, 40, charge_noise="10 uV", zeeman_noise=W2_SPECTRUM)
    c = load(seq)
    t_report, r = median_time(lambda: simulate(compile(c), SimOptions()), 3)
    print(f"W2 with a 1/f spectrum: full report {t_report:.2f} s, average fidelity "
          f"{r.runs[0].average_fidelity:.6f}", flush=True)
    return {"w2_spectral_report_s": t_report,
            "w2_spectral_average_fidelity": r.runs[0].average_fidelity}


def bench_w4(folder: Path, quick: bool) -> dict:
    from compiler.simulate.engines import FastEngine, ReferenceEngine
    seq = write_case(folder / "w4", 4, 60)
    c, model, pts, U, psi0, frames = prepared(seq, 1)
    rho0 = np.outer(psi0, psi0.conj())
    t_fast, ev = median_time(lambda: FastEngine().average(model, pts, rho0=rho0), 5)
    t0 = time.perf_counter()
    ev_ref = ReferenceEngine().average(model, pts, rho0=rho0)
    t_ref = time.perf_counter() - t0
    fa, fb = state_fidelity(ev.rho, U, psi0, frames), state_fidelity(ev_ref.rho, U, psi0, frames)
    print(f"W4: {model.k} sub-steps: fast {t_fast:.3f} s, mesolve {t_ref:.1f} s, ratio "
          f"{t_ref / t_fast:.0f}x; state fidelity {fa:.9f} vs {fb:.9f}", flush=True)
    return {"w4_fast_s": t_fast, "w4_reference_s": t_ref, "w4_ratio": t_ref / t_fast,
            "w4_state_fidelity": fa, "w4_max_abs_diff": abs(fa - fb)}


def ev_of(model, pts):
    from compiler.simulate.engines import FastEngine
    return FastEngine().average(model, pts, process=True)


THREE_PI = "rot D0 x 180 deg\nrot D1 x 180 deg\nrot D2 x 180 deg\n"
# a Hahn echo on D0 with a π on D1 at its centre, 1 µs waits
ECHO = ("rot D0 x 90 deg\nwait 1 us\nrot D0 x 180 deg\nrot D1 x 180 deg\nwait 1 us\n"
        "rot D0 x 90 deg\n")


# idle barrier voltages of the weak-exchange line (J = 150 MHz·e^{V/20 mV},
# invented device): the idle exchange each gives
WEAK_IDLES = {"closed": "-600 mV", "1 mHz": "-514 mV", "45 mHz": "-438 mV", "1 Hz": "-376 mV",
              "1 kHz": "-238 mV"}


def weak_case(folder: Path, idle: str, body: str) -> Path:
    """Three dots on one line (charge noise 10 µV) with the barriers idling at
    ``idle`` and the steps ``body``; returns the sequence path."""
    seq = write_case(folder, 3, 3, long_range=False, charge_noise="10 uV")
    dev = seq.parent / "device.yaml"
    dev.write_text(dev.read_text().replace("idle_voltage: -600 mV", f"idle_voltage: {idle}"))
    seq.write_text('device "device.yaml"\nprepare D0 D1 D2 down\n' + body + 'read D0 D1 D2\n')
    return seq


def bench_weak_exchange(folder: Path, repeats: int = 11, body: str = THREE_PI,
                        key: str = "weak_exchange", labels=None) -> dict:
    """Three dots on one line, whole-run process with quadrature (``body``:
    three π bursts, or the Hahn echo ``ECHO``): idle barriers leaving J =
    1 mHz, 45 mHz, 1 Hz, 1 kHz against barriers fully closed (J ≈ 1e-5 Hz);
    the worst time ratio, the fidelity shift from the closed barriers, and the
    error against the exact treatment (exchange kept on:
    FastEngine(exchange_budget=0)) with the engine's stated bound."""
    from compiler.simulate.engines import FastEngine
    idles = WEAK_IDLES
    if labels is not None:
        idles = {k: v for k, v in idles.items() if k in labels}
    times, fids, notes, errs, bounds = {}, {}, {}, {}, {}
    cases = {}
    for label, idle in idles.items():
        cases[label] = prepared(weak_case(folder / f"{key}_{label.replace(' ', '')}", idle, body), 5)
    # interleaved repeats (the machine's load moves the same way for every case);
    # the median of each case
    # the cost is the process's CPU time (one thread: the engine runs under
    # one_thread), which other jobs on this shared machine disturb far less
    # than the wall time; both are reported
    runs: dict = {label: [] for label in idles}
    walls: dict = {label: [] for label in idles}
    # under one BLAS thread, as the command runs (compiler.threads): outside it
    # the small products after the engine's own block (the 64 × 64 transfer
    # matrix to superoperator) took 25–45 ms instead of 0.1 ms on a busy machine
    from compiler.threads import one_thread
    guard = one_thread()
    guard.__enter__()
    for _ in range(repeats):
        for label, (c, model, pts, U, psi0, frames) in cases.items():
            # warmed once: a run right after a bigger one pays the page faults of
            # freshly allocated memory (the first case of a round was up to 2× slower)
            FastEngine().average(model, pts, process=True)
            t, w = time.process_time(), time.perf_counter()
            FastEngine().average(model, pts, process=True)
            runs[label].append(time.process_time() - t)
            walls[label].append(time.perf_counter() - w)
    guard.__exit__(None, None, None)
    wall = {label: statistics.median(v) for label, v in walls.items()}
    for label, (c, model, pts, U, psi0, frames) in cases.items():
        t = times[label] = statistics.median(runs[label])
        ev = ev_of(model, pts)
        fids[label] = process_fidelity(ev.superop, U, frames)
        notes[label] = ev.stats["largest_cluster"]
        t_ex = time.perf_counter()
        exact = FastEngine(exchange_budget=0.0).average(model, pts, process=True)
        t_ex = time.perf_counter() - t_ex
        errs[label] = abs(fids[label] - process_fidelity(exact.superop, U, frames))
        bounds[label] = ev.stats["exchange_error_bound"]
        print(f"{key} {label:>6}: {t:.3f} s CPU ({t / times['closed']:.2f}x closed; wall "
              f"{wall[label]:.3f} s, {wall[label] / wall['closed']:.2f}x; exact "
              f"treatment {t_ex:.2f} s), largest cluster {notes[label]}, process fidelity "
              f"{fids[label]:.9f}, |F - F_exact| {errs[label]:.1e} (bound {bounds[label]:.1e})",
              flush=True)
    worst = max(v for k, v in times.items() if k != "closed")
    return {f"{key}_ratio": worst / times["closed"],
            f"{key}_ratios": {k: v / times["closed"] for k, v in times.items()},
            f"{key}_times_s": times,
            f"{key}_wall_ratios": {k: v / wall["closed"] for k, v in wall.items()},
            f"{key}_max_fidelity_shift": max(abs(f - fids["closed"]) for f in fids.values()),
            f"{key}_max_error_vs_exact": max(errs.values()),
            f"{key}_max_bound": max(bounds.values())}


def bench_weak_exchange_echo(folder: Path, repeats: int = 7) -> dict:
    """The Hahn echo (``ECHO``, 2.4 µs) at closed barriers, 1 Hz and 1 kHz:
    key ``weak_exchange_echo_ratio``.  The waits are quiet stretches (taken
    exactly, docs/simulate.md); the exact treatment takes about a minute per
    case here."""
    return bench_weak_exchange(folder, repeats, ECHO, "weak_exchange_echo",
                               ("closed", "1 Hz", "1 kHz"))


def bench_weak_exchange_evaluation(folder: Path, repeats: int = 3) -> dict:
    """The whole-run evaluation as ``simulate`` makes it (compiler.simulate.run.
    evaluate_whole: the averaging refined rule after rule, the detail run's
    population traces, one engine shared by all of it, so the engine's caches
    act as they do in the command) on the two weak-exchange workloads, closed
    barriers against 1 kHz idle exchange, interleaved, one thread; medians of
    the CPU time (keys weak_exchange_evaluation_ratio and
    weak_exchange_echo_evaluation_ratio; the same without the traces:
    ..._untraced_ratio).  Unlike the engine keys above, the closed run here
    takes its single-dot chains from the engine's cache in every rule after
    the first, which the weak treatment's corrections cannot."""
    from compiler import compile as compile_all, load
    from compiler.simulate import SimOptions
    from compiler.simulate.engines import FastEngine
    from compiler.simulate.run import ALL_ON, evaluate_whole
    from compiler.threads import one_thread
    idles = {k: WEAK_IDLES[k] for k in ("closed", "1 kHz")}
    opts = SimOptions()
    cases = {}
    for body, key in ((THREE_PI, "weak_exchange"), (ECHO, "weak_exchange_echo")):
        for label, idle in idles.items():
            c = load(weak_case(folder / f"ev_{key}_{label.replace(' ', '')}", idle, body))
            cases[(key, label)] = compile_all(c).runs[0]
    cpu: dict = {(k, t): [] for k in cases for t in (True, False)}
    fid: dict = {}
    with one_thread():
        for _ in range(repeats):
            for k, crun in cases.items():
                for traced in (True, False):
                    t = time.process_time()
                    w = evaluate_whole(crun, ALL_ON, opts, FastEngine(),
                                       traces=opts.trace_points if traced else 0)
                    cpu[(k, traced)].append(time.process_time() - t)
                    fid[k] = (w.f_avg, w.nodes, w.averaging_error)
    out = {}
    for key in ("weak_exchange", "weak_exchange_echo"):
        med = {(lb, tr): statistics.median(cpu[((key, lb), tr)]) for lb in idles
               for tr in (True, False)}
        r, ru = (med[("1 kHz", tr)] / med[("closed", tr)] for tr in (True, False))
        f0, f1 = fid[(key, "closed")], fid[(key, "1 kHz")]
        print(f"{key} whole-run evaluation (refined to {f1[1]} nodes): closed "
              f"{med[('closed', True)]:.2f} s CPU, 1 kHz {med[('1 kHz', True)]:.2f} s: {r:.2f}x "
              f"({ru:.2f}x without the population traces: {med[('closed', False)]:.2f} s and "
              f"{med[('1 kHz', False)]:.2f} s); average gate fidelity {f0[0]:.7f} closed, "
              f"{f1[0]:.7f} at 1 kHz", flush=True)
        out[f"{key}_evaluation_ratio"] = r
        out[f"{key}_evaluation_untraced_ratio"] = ru
        out[f"{key}_evaluation_s"] = {"closed": med[("closed", True)], "1 kHz": med[("1 kHz", True)]}
    return out


def bench_weak_exchange_command(folder: Path, repeats: int = 3) -> dict:
    """What a user waits for: the whole ``dotseq simulate`` command (start-up,
    compilation, the whole-run evaluation, per-step fidelities, the 15
    evaluations of the error budget on two threads, the report and its
    figures) on the two weak-exchange workloads, closed barriers against
    1 kHz idle exchange, in fresh processes, interleaved; medians of the
    wall time and of the child's CPU time (keys weak_exchange_command_ratio
    and weak_exchange_echo_command_ratio, CPU over closed)."""
    idles = {k: WEAK_IDLES[k] for k in ("closed", "1 kHz")}
    seqs = {(key, label): weak_case(folder / f"cmd_{key}_{label.replace(' ', '')}", idle, body)
            for body, key in ((THREE_PI, "weak_exchange"), (ECHO, "weak_exchange_echo"))
            for label, idle in idles.items()}
    cpu: dict = {k: [] for k in seqs}
    wall: dict = {k: [] for k in seqs}
    for r in range(repeats):
        for (key, label), seq in seqs.items():
            out = seq.parent / f"report{r}"
            before = resource.getrusage(resource.RUSAGE_CHILDREN)
            t = time.perf_counter()
            subprocess.run([sys.executable, "-m", "compiler", "simulate", str(seq), "-o", str(out)],
                           check=True, capture_output=True, cwd=str(HERE.parents[1]))
            wall[(key, label)].append(time.perf_counter() - t)
            after = resource.getrusage(resource.RUSAGE_CHILDREN)
            cpu[(key, label)].append(after.ru_utime + after.ru_stime
                                     - before.ru_utime - before.ru_stime)
    out = {}
    for key in ("weak_exchange", "weak_exchange_echo"):
        c0, c1 = (statistics.median(cpu[(key, lb)]) for lb in idles)
        w0, w1 = (statistics.median(wall[(key, lb)]) for lb in idles)
        print(f"{key} whole command: closed {w0:.1f} s wall ({c0:.1f} s CPU), 1 kHz {w1:.1f} s "
              f"wall ({c1:.1f} s CPU): {c1 / c0:.2f}x CPU, {w1 / w0:.2f}x wall", flush=True)
        out[f"{key}_command_ratio"] = c1 / c0
        out[f"{key}_command_wall_ratio"] = w1 / w0
        out[f"{key}_command_s"] = {"closed": w0, "1 kHz": w1}
    return out


def one_size(n: int, steps: int, folder: str) -> dict:
    """Run in a fresh process: compile, then time the state evolution alone."""
    from compiler.simulate.engines.fast import _apply
    from compiler.threads import one_thread as single_threaded
    from compiler.simulate.engines import FastEngine
    seq = write_case(Path(folder) / f"n{n}", n, steps)
    c, model, pts, U, psi0, frames = prepared_large(seq)
    rss_before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    eng = FastEngine()
    t0 = time.perf_counter()
    ev = eng.average(model, pts, pauli0=psi0)
    seconds = time.perf_counter() - t0
    out = {"n": n, "seconds": seconds,
           "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
           "peak_mib_before_evolution": rss_before, "sub_steps": model.k,
           "channel_applications": eng.applications, "exponentials": eng.exponentials,
           "trace": float(ev.pauli[0])}
    if n == 12:
        src = np.zeros((1, 4 ** n, 1))
        src[0, :, 0] = ev.pauli
        dst = np.empty_like(src)
        rng = np.random.default_rng(0)
        M2 = rng.standard_normal((1, 16, 16))
        M1 = rng.standard_normal((1, 4, 4))
        with single_threaded():
            np.copyto(dst, src)
            t_copy = statistics.median(_timed(lambda: np.copyto(dst, src)) for _ in range(7))
            t_two = statistics.median(_timed(lambda: _apply(src, dst, (5, 6), M2, n)) for _ in range(7))
            t_one = statistics.median(_timed(lambda: _apply(src, dst, (5,), M1, n)) for _ in range(7))
            t_end = statistics.median(_timed(lambda: _apply(src, dst, (10, 11), M2, n)) for _ in range(7))
        gb = 2 * src.nbytes / 1e9                      # read and write
        out.update(copy_gb_per_s=gb / t_copy, two_dot_gb_per_s=gb / t_two,
                   bandwidth_fraction=t_copy / t_two, bandwidth_fraction_one_dot=t_copy / t_one,
                   bandwidth_fraction_two_dot_at_end=t_copy / t_end)
    return out


def _timed(fn) -> float:
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


def prepared_large(seq: Path):
    """Like :func:`prepared` without dense 2^n × 2^n objects."""
    from compiler import load
    from compiler.simulate import fidelity as F
    from compiler.simulate.engines import pauli as PL
    from compiler import compile_run
    from compiler.simulate.build import build_model
    from compiler.simulate.model import noise_points
    from compiler.simulate.run import end_sample
    c = load(seq)
    run = c.expanded.runs[0]
    cr = compile_run(run, c.device)
    dev, tl, wf = cr.device, cr.timeline, cr.waveforms
    model = build_model(wf, dev, m=2, stop=end_sample(tl))
    declared = {q: s for q, s, _ in run.prepare}
    psi0 = PL.product_state([F._single(declared.get(q), g) for q, g in zip(dev.dots, model.ground_up)])
    return c, model, noise_points(model, 1), None, psi0, None


def bench_scaling(folder: Path, sizes, steps: int) -> list[dict]:
    rows = []
    for n in sizes:
        cmd = [sys.executable, __file__, "--one-size", str(n), str(steps), str(folder)]
        res = subprocess.run(cmd, capture_output=True, text=True, env={**os.environ})
        if res.returncode != 0:
            print(res.stderr, file=sys.stderr)
            raise SystemExit(f"size {n} failed")
        row = json.loads(res.stdout.strip().splitlines()[-1])
        rows.append(row)
        growth = f", x{row['seconds'] / rows[-2]['seconds']:.1f} per dot" if len(rows) > 1 else ""
        print(f"N = {n:2d}: {row['seconds']:.3f} s evolution{growth}, peak {row['peak_mib']:.0f} MiB "
              f"({row['channel_applications']} channel applications)", flush=True)
    return rows


def main() -> None:
    if len(sys.argv) > 1 and sys.argv[1] == "--one-size":
        print(json.dumps(one_size(int(sys.argv[2]), int(sys.argv[3]), sys.argv[4])))
        return
    quick = "--quick" in sys.argv
    if "--spectral-only" in sys.argv:
        with tempfile.TemporaryDirectory() as tmp:
            out = bench_w2_spectral(Path(tmp))
        print(json.dumps({k: float(f"{v:.6g}") for k, v in out.items()}))
        return
    if "--weak-exchange" in sys.argv:            # only the weak-exchange workloads
        with tempfile.TemporaryDirectory() as tmp:
            out = bench_weak_exchange(Path(tmp))
            out.update(bench_weak_exchange_echo(Path(tmp)))
            out.update(bench_weak_exchange_evaluation(Path(tmp)))
            out.update(bench_weak_exchange_command(Path(tmp)))
        print(json.dumps({k: (float(f"{v:.6g}") if isinstance(v, float) else v)
                          for k, v in out.items()}))
        return
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        out = {}
        out.update(bench_w2(folder, quick))
        out.update(bench_w2_spectral(folder))
        out.update(bench_w4(folder, quick))
        out.update(bench_weak_exchange(folder))
        out.update(bench_weak_exchange_echo(folder))
        out.update(bench_weak_exchange_evaluation(folder))
        out.update(bench_weak_exchange_command(folder))
        sizes = (4, 6, 8) if quick else (4, 6, 8, 10, 12)
        rows = bench_scaling(folder, sizes, 100)
    big = rows[-1]
    out["scaling"] = [{"n": r["n"], "seconds": round(r["seconds"], 4),
                       "peak_mib": round(r["peak_mib"], 1)} for r in rows]
    out["scaling_growth_per_dot"] = [round((b["seconds"] / a["seconds"]) ** (1 / (b["n"] - a["n"])), 2)
                                     for a, b in zip(rows, rows[1:])]
    out["bandwidth_fraction"] = big.get("bandwidth_fraction")
    for k in ("bandwidth_fraction_one_dot", "bandwidth_fraction_two_dot_at_end", "copy_gb_per_s",
              "two_dot_gb_per_s"):
        if k in big:
            out[k] = big[k]
    print(json.dumps({k: (float(f"{v:.6g}") if isinstance(v, float) else v) for k, v in out.items()}))


if __name__ == "__main__":
    main()
