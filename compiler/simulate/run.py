"""Simulate compiled runs: whole-run fidelities, per-step fidelities, the
error budget, and sweeps."""

from __future__ import annotations

import dataclasses
import math
import os
import time
from dataclasses import dataclass

import numpy as np

from .. import program as P
from ..device.model import Device
from ..errors import UsageError
from ..margin import coherence_margins
from ..schedule import schedule
from ..schedule.timeline import Timeline
from ..synth import synthesize
from ..synth.types import Waveforms
from . import fidelity as F
from .engines import FastEngine, ReferenceEngine
from .model import ALL_OFF, Switches, build_model, noise_points
from .types import BudgetLine, RunResult, SimulationResult, StepFidelity

MAX_PROCESS_QUBITS = 5
BUDGET_SOURCES = (
    # name, switch, counterfactual compile options, note
    ("T1 relaxation", "t1", {}, "Lindblad relaxation with thermal excitation at the device temperature"),
    ("pure dephasing (T2)", "t2", {}, "Markovian dephasing 1/T2 − 1/(2T1)"),
    ("quasi-static Zeeman noise (T2*)", "t2_star", {}, "Gaussian detuning, rms √2/T2*, by quadrature"),
    ("charge noise on exchange", "charge", {}, "quasi-static barrier offset of the device's rms, through J(V)"),
    ("drive crosstalk", "crosstalk", {"spectator_correction": False},
     "each dot driven only by its own bursts (and no light-shift corrections)"),
    ("finite bandwidth", "filters", {"ideal_bandwidth": True},
     "recompiled and played for channels without rise time"),
    ("quantisation", "quantised", {}, "unquantised samples"),
    ("bias tee", "bias_tee", {}, "no high-pass droop"),
)
ZEEMAN_LINE = ("Zeeman difference in exchange",
               "from the exchange frame model: Σ over exchange gates of the infidelity left "
               "after frame compensation (noise-free), not by switching off")


@dataclass(frozen=True)
class SimOptions:
    engine: str = "fast"          # "fast" or "reference"
    rwa: bool = True
    substeps: int = 2             # sub-steps per sample of the piecewise-constant model
    nodes: int = 5                # quadrature nodes per quasi-static noise variable
    quadrature: str = "auto"      # "tensor", "additive" or "auto"
    budget: bool = True
    steps: bool = True
    detail_run: int = 0           # run that gets per-step fidelities, budget and traces
    trace_points: int = 300
    max_step_entries: int = 200   # per-step fidelities for at most this many program steps
    sweep_nodes: int = 3          # quadrature nodes for the runs other than the detail run
    threads: int = 0              # threads for independent evaluations; 0: automatic

    def worker_threads(self) -> int:
        """``threads``, or automatically one per core (at most 4), and one
        when the process was told to keep to one thread (OMP_NUM_THREADS=1,
        as in a pool of sweep workers)."""
        if self.threads > 0:
            return self.threads
        if os.environ.get("OMP_NUM_THREADS", "").strip() == "1":
            return 1
        return max(1, min(4, os.cpu_count() or 1))

    def check(self) -> None:
        if self.engine not in ("fast", "reference"):
            raise UsageError(f"unknown engine '{self.engine}'", hint="use --engine fast or reference")
        if self.substeps < 1 or self.substeps > 64:
            raise UsageError(f"substeps {self.substeps} must be from 1 to 64")
        if self.nodes < 1 or self.nodes > 15:
            raise UsageError(f"nodes {self.nodes} must be from 1 to 15")
        if self.threads < 0 or self.threads > 256:
            raise UsageError(f"threads {self.threads} must be from 0 (automatic) to 256")
        if self.quadrature not in ("tensor", "additive", "auto"):
            raise UsageError(f"unknown quadrature '{self.quadrature}'",
                             hint="use tensor, additive or auto")
        if not self.rwa and self.substeps < 8:
            raise UsageError("without the rotating-wave approximation the sub-steps must resolve "
                             "twice the Larmor frequency", hint="give --substeps of at least 8 "
                             "per GHz of 2·f_L per sample period (about 64 or more for GHz "
                             "qubits at 1 GS/s); it is slow")


def _engine(name: str):
    return FastEngine() if name == "fast" else ReferenceEngine()


def _end_sample(tl: Timeline) -> int:
    """The simulated span: up to the start of the trailing readout(s), else the
    end of the last step."""
    steps = list(tl.run.steps)
    end = tl.n_samples
    trailing = set()
    while steps and isinstance(steps[-1], (P.Readout, P.Trigger)):
        trailing.add(id(steps.pop()))
    if trailing:
        starts = [s.start_sample for s in tl.slots if s.step is not None and id(s.step) in trailing]
        if starts:
            end = min(starts)
    return end


def _program_steps(tl: Timeline):
    steps = list(tl.run.steps)
    while steps and isinstance(steps[-1], (P.Readout, P.Trigger)):
        steps.pop()
    return steps


def _variant(device: Device, ideal_bandwidth: bool) -> Device:
    if not ideal_bandwidth:
        return device
    chans = {k: dataclasses.replace(c, rise_time=0.0) for k, c in device.channels.items()}
    return dataclasses.replace(device, channels=chans)


def compile_run(run: P.Run, device: Device, *, spectator_correction: bool = True,
                exchange_zeeman: bool = True, ideal_bandwidth: bool = False):
    dev = _variant(device, ideal_bandwidth)
    tl = schedule(run, dev, spectator_correction=spectator_correction,
                  exchange_zeeman=exchange_zeeman)
    wf = synthesize(tl, dev, per_dot=True)
    return dev, tl, wf


def _average(engine, model, pts, *, process: bool, rho0, traces: int = 0):
    ev = engine.average(model, pts, process=process, rho0=rho0, trace_points=traces)
    return ev.superop, ev.rho, ev.traces


@dataclass
class Whole:
    f_pro: float | None
    f_avg: float | None
    f_state: float
    pops: dict
    traces: dict
    duration: float

    @property
    def infidelity(self) -> float:
        return 1 - (self.f_avg if self.f_avg is not None else self.f_state)


def evaluate_whole(tl: Timeline, wf: Waveforms, device: Device, switches: Switches,
                   opts: SimOptions, engine, *, traces: int = 0) -> Whole:
    dots = tuple(device.dots)
    n = len(dots)
    stop = _end_sample(tl)
    model = build_model(wf, device, switches=switches, m=opts.substeps, start=0, stop=stop,
                        rwa=opts.rwa)
    pts = noise_points(model, opts.nodes, opts.quadrature)
    psi0 = F.initial_state(tl.run, dots, model.ground_up)
    rho0 = np.outer(psi0, psi0.conj())
    process = n <= MAX_PROCESS_QUBITS
    S, rho, tr = _average(engine, model, pts, process=process, rho0=rho0, traces=traces)
    U = F.ideal_unitary(_program_steps(tl), dots)
    frames = [tl.frames[q] for q in dots]
    f_pro = f_avg = None
    if process:
        Sq = F.to_qubit_frames(S, [0.0] * n, frames)
        f_pro = F.process_fidelity(Sq, U)
        f_avg = F.average_fidelity(f_pro, 2 ** n)
    rq = F.rho_to_qubit_frames(rho, frames)
    psi = U @ psi0
    f_state = float(np.real(psi.conj() @ rq @ psi))
    pops = {}
    for k, q in enumerate(dots):
        up = (np.eye(2 ** n) + F.op(F.SZ, k, n)) / 2
        pops[q] = float(np.real(np.trace(up @ rq)))
    named = {}
    if tr:
        named["t"] = tr["t"]
        for k, q in enumerate(dots):
            named[q] = tr[k]
    return Whole(f_pro, f_avg, f_state, pops, named, stop * tl.dt)


def step_fidelities(run: P.Run, device: Device, opts: SimOptions, engine) -> tuple[StepFidelity, ...]:
    tl = schedule(run, device, record_frames=True)
    dots = tuple(device.dots)
    n = len(dots)
    out = []
    dt = tl.dt
    for entry_no, (step, idx, before, after) in enumerate(tl.frame_log[:opts.max_step_entries]):
        if isinstance(step, (P.Readout, P.Trigger, P.FrameRotation)):
            continue
        slots = [tl.placed[i] for i in idx]
        if not slots or max(s.end_sample for s in slots) == min(s.start_sample for s in slots):
            continue
        a = min(s.start_sample for s in slots)
        b = max(s.end_sample for s in slots)
        taus = [device.channels[c].rise_time for s in slots for c in
                ([device.dots[s.qubits[0]].drive.line] if s.burst is not None else [])]
        margin = max([int(math.ceil(12 * t / math.log(9) / dt)) for t in taus if t > 0] + [0])
        b_sim = min(b + margin, tl.n_samples)
        sub = Timeline(run, tuple(slots), tl.n_samples, dt, after)
        wf = synthesize(sub, device, per_dot=True)
        model = build_model(wf, device, m=opts.substeps, start=a, stop=b_sim, rwa=opts.rwa)
        pts = noise_points(model, opts.nodes, opts.quadrature)
        S, _, _ = _average(engine, model, pts, process=True, rho0=None)
        Sq = F.to_qubit_frames(S, [before[q] for q in dots], [after[q] for q in dots])
        U = F.step_unitary(step, dots)
        fid = F.average_fidelity(F.process_fidelity(Sq, U), 2 ** n)
        kind = step.kind
        qubits = tuple(dict.fromkeys(q for s in slots for q in s.qubits))
        label = _label(step)
        src = f"{step.span.file}:{step.span.line}:{step.span.col}" if step.span else ""
        out.append(StepFidelity(entry_no, kind, qubits, label, src, a * dt, (b - a) * dt, fid))
    return tuple(out)


def _label(step) -> str:
    if isinstance(step, P.Parallel):
        return "together { " + " ; ".join(_label(s) for s in step.steps) + " }"
    if isinstance(step, P.Rotation):
        ph = math.degrees(step.phase) % 360
        axis = {0: "x", 90: "y", 180: "-x", 270: "-y"}.get(round(ph, 9), f"phase({ph:g}°)")
        return f"rot {step.qubit} {axis} {math.degrees(step.angle):g}°"
    if isinstance(step, P.ExchangeGate):
        return f"{step.gate} {step.a} {step.b}"
    if isinstance(step, P.Idle):
        return f"wait {step.duration * 1e9:g} ns" + (f" on {' '.join(step.qubits)}" if step.qubits else "")
    return step.kind


def quadrature_rule(device: Device, opts: SimOptions) -> str:
    """The rule ``auto`` resolves to with every noise on: the product grid up
    to 27 points, else one variable at a time (as :func:`noise_points`)."""
    if opts.quadrature != "auto":
        return opts.quadrature
    n_vars = sum(1 for q in device.dots.values() if q.t2_star > 0) + \
        sum(1 for c in device.couplings if c.charge_noise > 0)
    return "tensor" if opts.nodes ** n_vars <= 27 else "additive"


def error_budget(run: P.Run, device: Device, opts: SimOptions, engine, total: Whole,
                 progress=None, compiled: dict | None = None):
    """Contribution of each source: total infidelity minus the infidelity with
    that source switched off (recompiled where the source shapes the pulses).
    ``compiled`` may hold compilations already made, keyed by their sorted
    option items (``()`` for the default).  The evaluations are independent
    and run on ``opts.worker_threads()`` threads."""
    compiled = dict(compiled or {})      # one compilation per distinct set of options
    # every evaluation uses the quadrature rule of the total: switching a noise
    # off must not also switch between the product grid and the additive rule
    opts = dataclasses.replace(opts, quadrature=quadrature_rule(device, opts))

    def compiled_with(**comp):
        key = tuple(sorted(comp.items()))
        if key not in compiled:
            compiled[key] = compile_run(run, device, **comp)
        return compiled[key]

    jobs = []
    for name, switch, comp, note in BUDGET_SOURCES:
        jobs.append((compiled_with(**comp), Switches().off(switch)))
    floor_sw = ALL_OFF.__class__(**{**vars(ALL_OFF), "exchange_zeeman": True})
    jobs.append((compiled_with(spectator_correction=False, ideal_bandwidth=True), floor_sw))
    if progress:
        progress(f"error budget: {len(jobs)} evaluations")

    def work(job):
        (dev, tl, wf), sw = job
        return evaluate_whole(tl, wf, dev, sw, opts, engine).infidelity

    threads = opts.worker_threads()
    if threads > 1:
        from concurrent.futures import ThreadPoolExecutor
        with ThreadPoolExecutor(threads) as pool:
            infid = list(pool.map(work, jobs))
    else:
        infid = [work(j) for j in jobs]
    lines = [BudgetLine(name, total.infidelity - f, note)
             for (name, _, _, note), f in zip(BUDGET_SOURCES, infid)]
    # the Zeeman difference shapes the exchange gates themselves: switching it off
    # would change the schedule, so its share comes from the gates' own model
    tl = compiled_with()[1]
    d = 2 ** len(device.dots)
    zeeman = 0.0
    for s in tl.slots:
        f = getattr(s.info, "frame_fidelity", None)      # exchange slots
        if f is not None:
            f_pro = (5 * f - 1) / 4                       # pair average -> process fidelity
            zeeman += (1 - f_pro) * d / (d + 1)
    lines.append(BudgetLine(ZEEMAN_LINE[0], zeeman, ZEEMAN_LINE[1]))
    floor = infid[-1] - zeeman
    lines.sort(key=lambda b: -b.infidelity)
    remainder = total.infidelity - floor - sum(b.infidelity for b in lines)
    return tuple(lines), floor, remainder


def simulate(checked, opts: SimOptions = SimOptions(), progress=None) -> SimulationResult:
    """Simulate every run of a checked file (see module notes).  ``progress``,
    if given, is called with a short text before each long piece of work."""
    opts.check()
    from .cluster import single_threaded
    with single_threaded():
        return _simulate(checked, opts, progress)


def _simulate(checked, opts: SimOptions, progress) -> SimulationResult:
    t_start = time.perf_counter()
    device = checked.device
    engine = _engine(opts.engine)
    runs = []
    n_runs = len(checked.expanded.runs)
    detail = opts.detail_run if 0 <= opts.detail_run < n_runs else 0
    for i, run in enumerate(checked.expanded.runs):
        t0 = time.perf_counter()
        if progress:
            progress(f"run {i + 1}/{n_runs}")
        dev, tl, wf = compile_run(run, device)
        is_detail = i == detail
        run_opts = opts if is_detail else dataclasses.replace(
            opts, nodes=min(opts.nodes, opts.sweep_nodes), quadrature="additive")
        whole = evaluate_whole(tl, wf, dev, Switches(), run_opts, engine,
                               traces=opts.trace_points if is_detail else 0)
        steps = budget = ()
        floor = remainder = 0.0
        if is_detail and opts.steps:
            if progress:
                progress(f"per-step fidelities of run {i}")
            steps = step_fidelities(run, device, opts, engine)
        if is_detail and opts.budget:
            budget, floor, remainder = error_budget(run, device, opts, engine, whole, progress,
                                                    compiled={(): (dev, tl, wf)})
        runs.append(RunResult(run.index, run.sweep, tuple(device.dots), whole.duration, whole.f_pro,
                              whole.f_avg, whole.f_state, whole.pops, steps, budget,
                              whole.infidelity if budget else 0.0, floor, remainder,
                              whole.traces, {"wall_s": time.perf_counter() - t0}))
    axes = tuple((a.name, a.values, a.dim.symbol()) for a in checked.expanded.axes)
    coherence = _coherence(checked)
    warnings = tuple(sorted({w.render() for tl in checked.timelines for w in tl.warnings}))
    stats = {"wall_s": time.perf_counter() - t_start, "engine": engine.name, **engine.stats()}
    settings = {"substeps_per_sample": opts.substeps, "quadrature_nodes": opts.nodes,
                "quadrature": opts.quadrature, "rwa": opts.rwa, "detail_run": detail,
                "sweep_quadrature": f"additive, {min(opts.nodes, opts.sweep_nodes)} nodes "
                                    "(runs other than the detail run)" if n_runs > 1 else "",
                "fidelity_metric": "budget and totals: 1 - average gate fidelity of the whole "
                                   "run (1 - state fidelity above 5 dots)"}
    return SimulationResult(checked.expanded.file, device.name, engine.name, opts.rwa,
                            tuple(runs), axes, coherence, settings, warnings, stats)


def _coherence(checked):
    return tuple(m.as_tuple() for m in coherence_margins(checked.timelines, checked.device))
