"""Simulate compiled runs: whole-run fidelities, per-step fidelities, the
error budget, and sweeps.

Takes the compiler's result (:class:`compiler.Compiled`: per run a timeline
and its waveforms) and compiles nothing itself: the error budget's what-if
variants and the per-step renderings come through the
:class:`~compiler.synth.types.Recompiler` handed in with it, so this package
imports no compiler stage (only the synthesiser's data types).  The noise
sources, their switches and the budget's lines come from the registry
(:mod:`.sources`); the engines from :data:`.engines.ENGINES`."""

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
from ..limits import default_limit
from ..margin import coherence_margins
from ..runwarnings import merged
from ..synth.types import CompiledRun, Recompiler
from ..threads import one_thread
from . import fidelity as F
from . import toggling
from .build import build_model
from .engines import ENGINES, ClusterTooLarge, make_engine
from .memory import too_large_error
from .model import TRAPEZOID_FROM, TRAPEZOID_TAIL, dot_operator, embed, noise_points
from .observe import SCOPES, assess
from .sources import ALL_ON, SOURCES, Switches, compile_changes, floor
from .types import (BudgetLine, RunResult, SimulationResult, SpectrumBand, SpectrumSummary,
                    StepFidelity)

MAX_PROCESS_QUBITS = 5
MAX_SHOTS = 10 ** 12
MAX_NODES = 41                    # quadrature nodes per variable to start from, at most
MAX_REFINED_NODES = 129           # the refinement stops there (model.normal_rule: nested rules)
SLOW_BUDGET_S = 30.0              # s: an error budget expected to take longer says so before it starts


@dataclass(frozen=True)
class SimOptions:
    engine: str = "fast"          # "fast" or "reference"
    rwa: bool = True
    substeps: int = 2             # sub-steps per sample of the piecewise-constant model
    nodes: int = 5                # quadrature nodes per quasi-static noise variable to start from
    averaging_tolerance: float = 1e-4   # fidelity: refine the quadrature until two rules agree
    quadrature: str = "auto"      # "tensor", "additive" or "auto"
    budget: bool = True
    steps: bool = True
    detail_run: int = 0           # run that gets per-step fidelities, budget and traces
    trace_points: int = 300
    max_step_entries: int = 200   # per-step fidelities for at most this many program steps
    threads: int = 0              # threads for independent evaluations; 0: automatic
    fidelity_scope: str = "program"   # whole-run fidelities of the qubits the program acts on,
                                      # or "register" (docs/simulate.md, "Fidelity scope")
    shots: int = 0                # repetitions of the experiment (observables' counts, errors)
    exchange_accuracy: float = 1e-6   # fidelity: residual exchange dropped or treated as weak
    memory_limit: int = 0         # bytes; 0: half the memory available (compiler/limits.py)

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
        if self.engine not in ENGINES:
            raise UsageError(f"unknown engine '{self.engine}'",
                             hint=f"use --engine {' or '.join(ENGINES)}")
        if self.substeps < 1 or self.substeps > 64:
            raise UsageError(f"substeps {self.substeps} must be from 1 to 64")
        if self.nodes < 1 or self.nodes > MAX_NODES:
            raise UsageError(f"nodes {self.nodes} must be from 1 to {MAX_NODES}",
                             hint="the quadrature is refined from this many nodes until two "
                                  "rules agree within --averaging-tolerance; 1 switches the "
                                  "averaging over quasi-static noise off")
        if not (1e-12 <= self.averaging_tolerance <= 0.1):
            raise UsageError(f"averaging tolerance {self.averaging_tolerance:g} must be from "
                             "1e-12 to 0.1", hint="a fidelity difference, e.g. 1e-4 (default)")
        if self.threads < 0 or self.threads > 256:
            raise UsageError(f"threads {self.threads} must be from 0 (automatic) to 256")
        if self.fidelity_scope not in SCOPES:
            raise UsageError(f"unknown fidelity scope '{self.fidelity_scope}'",
                             hint=f"use {' or '.join(SCOPES)}")
        if not 0 <= self.shots <= MAX_SHOTS:
            raise UsageError(f"--shots {self.shots} must be from 1 to {MAX_SHOTS:.0e} "
                             "(0: no shot statistics)", hint="e.g. --shots 1000")
        if not 0 <= self.exchange_accuracy <= 1e-2:
            raise UsageError(f"exchange accuracy {self.exchange_accuracy:g} must be from 0 "
                             "(exact) to 1e-2", hint="a fidelity, e.g. 1e-6 (default)")
        if self.quadrature not in ("tensor", "additive", "auto"):
            raise UsageError(f"unknown quadrature '{self.quadrature}'",
                             hint="use tensor, additive or auto")
        if not self.rwa and self.substeps < 8:
            raise UsageError("without the rotating-wave approximation the sub-steps must resolve "
                             "twice the Larmor frequency", hint="give --substeps of at least 8 "
                             "per GHz of 2·f_L per sample period (about 64 or more for GHz "
                             "qubits at 1 GS/s); it is slow")


def end_sample(tl) -> int:
    """The simulated span: up to the start of the trailing readout(s) or, when
    an operation that is not one of them ends later (a readout placed beside
    a burst on another dot), up to the end of that operation, so that no
    burst or exchange is cut off; without trailing readouts the end of the
    last step."""
    steps = list(tl.run.steps)
    end = tl.n_samples
    trailing = set()
    while steps and isinstance(steps[-1], (P.Readout, P.Trigger)):
        trailing.add(id(steps.pop()))
    if trailing:
        ends = [s.end_sample for s in tl.slots if id(s.step) not in trailing]
        starts = [s.start_sample for s in tl.slots if s.step is not None and id(s.step) in trailing]
        if starts:
            end = max([min(starts)] + ends)
        elif ends:
            end = max(ends)
    return end


def program_steps(tl):
    steps = list(tl.run.steps)
    while steps and isinstance(steps[-1], (P.Readout, P.Trigger)):
        steps.pop()
    return steps


def _average(engine, model, pts, *, process: bool, rho0, traces: int = 0, product: bool = True,
             correction=None):
    """The model averaged over its quadrature points.  Gate band: as a
    product of channel corrections (``product``, :func:`combine_modes`), or
    with ``correction`` (a superoperator found once for the whole run) applied
    to the average over the other variables, or else its modes one at a time
    in the points (the additive rule, exact to second order: the per-step
    fidelities of registers too large for :mod:`.toggling`)."""
    if has_gate_band(model) and process and correction is not None:
        const = [p for p in pts if not p.modes]
        ev = average_constant(engine, model, const, rho0=rho0, traces=traces)
        return _corrected(ev, correction, rho0)
    if has_gate_band(model) and process and product:
        return combine_modes(engine, model, pts, rho0=rho0, traces=traces)
    if process and product:
        ev = average_constant(engine, model, pts, rho0=rho0, traces=traces)
        return ev.superop, ev.rho, ev.traces
    ev = engine.average(model, _centre_first(pts) if traces else pts, process=process,
                        rho0=rho0, trace_points=traces)
    return ev.superop, ev.rho, ev.traces


def _centre_first(pts):
    """The points with the one nearest the centre of the noise (all offsets
    zero, or the smallest) first: the engine records the population traces
    of the first point, which would otherwise be an extreme node of the rule
    (−5σ for the equispaced ones)."""
    def size(p):
        return float(np.sum(np.abs(p.detuning)) + np.sum(np.abs(p.dv) * 1e6)
                     + np.sum(np.abs(p.modes) if p.modes else 0.0))
    k = min(range(len(pts)), key=lambda i: size(pts[i])) if pts else 0
    return pts if k == 0 else [pts[k]] + pts[:k] + pts[k + 1:]


@dataclass(frozen=True)
class _Averaged:
    superop: np.ndarray
    rho: np.ndarray | None
    traces: dict


CONDITION_LIMIT = 1e8     # R₀ worse conditioned than this: the sum is kept (see average_constant)


def _one_at_a_time(pts):
    """(centre point, [points of variable j, ...]) when ``pts`` is the
    one-variable-at-a-time rule of two or more variables (model.noise_points,
    "additive"), else None.  Points are grouped by the variable they move
    (``NoisePoint.variable``; a variable may move several dots at once: the
    independent combinations of correlated Zeeman noise), or, for points
    made without it, by the one coordinate they move."""
    centre, groups = None, {}
    for p in pts:
        if p.modes and any(p.modes):
            return None
        nz = [i for i, x in enumerate(tuple(p.detuning) + tuple(p.dv)) if x != 0.0]
        if not nz:
            if centre is not None:
                return None
            centre = p
        elif p.variable >= 0:
            groups.setdefault(("variable", p.variable), []).append(p)
        elif len(nz) == 1:
            groups.setdefault(("coordinate", nz[0]), []).append(p)
        else:
            return None
    if centre is None or len(groups) < 2:
        return None
    return centre, [groups[k] for k in sorted(groups)]


def evaluations(pts) -> list[tuple[list, bool]]:
    """The evaluations :func:`average_constant` asks of the engine when R₀
    is well conditioned, each as (its points, whether it evolves the
    initial state too): for the one-variable-at-a-time rule the centre
    (with the state) and each variable's points (the process alone), else
    all the points at once with the state (a sweep estimates them before it
    runs, :mod:`compiler.sweep.memory`)."""
    split = _one_at_a_time(pts)
    if split is None:
        return [(list(pts), True)]
    centre, groups = split
    return [([centre], True)] + [(list(g), False) for g in groups]


def average_constant(engine, model, pts, *, rho0=None, traces: int = 0):
    """The whole-run channel averaged over the quasi-static variables.

    For the one-variable-at-a-time rule the per-variable averages are
    combined as a product of channel corrections, S = R₀·Π_j R₀⁻¹·R_j (R₀ the
    run at the centre, R_j the average over variable j alone, in the order
    of the model's variables), not as the sum R₀ + Σ_j (R_j − R₀).  Both are
    exact to second order in the noise; the product is also exact whenever
    the corrections commute (independent dephasing of different dots, or
    of one dot's coherences), where the sum makes a coherence 1 − Σ(1 − c_j)
    instead of Π c_j and goes negative once several dots are dephased (the
    ribbon example's whole-run fidelity came out −0.03 with the sum).
    Where R₀ is ill conditioned (cond > :data:`CONDITION_LIMIT`: relaxation
    that empties levels within the run) the sum is kept.  Other rules (the
    product grid, one variable): the weighted sum."""
    split = _one_at_a_time(pts)
    if split is not None:
        centre, groups = split
        ev0 = engine.average(model, [dataclasses.replace(centre, weight=1.0)], process=True,
                             rho0=rho0, trace_points=traces)
        R0 = ev0.superop
        if np.linalg.cond(R0) < CONDITION_LIMIT:
            X = np.eye(len(R0), dtype=R0.dtype)
            for grp in groups:
                wsum = sum(p.weight for p in grp)
                # the variable's own rule: its nodes off zero, and its node at zero
                # (folded into the centre by noise_points) with the rest of the weight
                Rj = engine.average(model, grp, process=True).superop + (1.0 - wsum) * R0
                X = X @ np.linalg.solve(R0, Rj)
            S = R0 @ X
            return _Averaged(S, _final_state(S, rho0), ev0.traces)
    ev = engine.average(model, _centre_first(pts) if traces else pts, process=True, rho0=rho0,
                        trace_points=traces)
    return _Averaged(ev.superop, ev.rho, ev.traces)


def has_gate_band(model) -> bool:
    """Whether the model holds a gate band (modes or bands)."""
    return bool(model.profiles or model.gate_bands)


def combine_modes(engine, model, pts, *, rho0=None, traces: int = 0, parts: dict | None = None):
    """The gate band applied as a channel correction after the average over
    the constant noise variables: S = S_c·C, S_c the engine's average over the
    points without ``modes``, C = :func:`gate_correction`.
    Returns (superoperator, final ρ from ``rho0``, traces); with ``parts``
    given, C is left in ``parts["correction"]``."""
    const = [p for p in pts if not p.modes]
    ev = average_constant(engine, model, const, rho0=rho0, traces=traces)
    corr = gate_correction(engine, model)
    if corr is None:
        return ev.superop, ev.rho, ev.traces
    if parts is not None:
        parts["correction"] = GateCorrection(gate_key(model), corr)
    return _corrected(ev, corr, rho0)


@dataclass(frozen=True, eq=False)
class GateCorrection:
    """A gate-band correction with the gate bands it is of (:func:`gate_key`)."""
    key: tuple
    matrix: np.ndarray


def gate_key(model) -> tuple:
    """Which gate bands (and modes) a model holds: sources and targets."""
    return (tuple((b.source, b.moves, b.target) for b in model.gate_bands)
            + tuple(sorted({(p.source, p.dot) for p in model.profiles})))


def gate_correction(engine, model):
    """The channel correction of the model's gate band (column-stacked
    superoperator), or None without one.

    Registers of dimension up to :data:`.toggling.MAX_DIM`: the band's
    second-order cumulant in the toggling frame of the noise-free control,
    from its covariance (:func:`.toggling.correction`; one propagation, no
    engine evaluation).  Larger ones: the engine's modes, combined as a
    product C = exp(Σ_j log(R₀⁻¹·R_j)), R₀ the run without noise variables,
    R_j the average over mode j's nodes: equal to the additive rule to second
    order in the mode amplitudes, and exact when the corrections commute
    (pure dephasing: χ adds over the modes, so decays to 1/e come out as
    exp(−Σχ_j) instead of 1 − Σ(1 − e^{−χ_j}))."""
    if toggling.applies(model):
        return toggling.correction(model)
    if not model.profiles:
        return None
    from scipy.linalg import expm, logm
    pts = [p for p in noise_points(model, 1) if p.modes]
    centre = [p for p in pts if not any(p.modes)]
    zero = dataclasses.replace(centre[0], weight=1.0)
    R0 = engine.average(model, [zero], process=True).superop
    groups: dict = {}
    for p in pts:
        if any(p.modes):
            j = next(i for i, x in enumerate(p.modes) if x)
            groups.setdefault(j, []).append(p)
    R0inv = np.linalg.inv(R0)
    gen = np.zeros_like(R0)
    for j, grp in groups.items():
        wsum = sum(p.weight for p in grp)
        Rj = engine.average(model, [dataclasses.replace(p, weight=p.weight / wsum) for p in grp],
                            process=True).superop
        X = R0inv @ Rj - np.eye(len(R0))
        nx = np.linalg.norm(X, 2)
        gen += (X - X @ X / 2 + X @ X @ X / 3) if nx < 0.05 else logm(np.eye(len(R0)) + X)
    return expm(gen)


def _corrected(ev, corr, rho0):
    """(S·corr, the final ρ of ``rho0`` under it, traces) of an average ``ev``."""
    S = ev.superop @ corr
    return S, _final_state(S, rho0), ev.traces


def _final_state(S, rho0):
    """The final ρ of ``rho0`` under the column-stacked channel S (None without ``rho0``)."""
    if rho0 is None:
        return None
    d = rho0.shape[0]
    return (S @ rho0.reshape(-1, order="F")).reshape(d, d, order="F")


@dataclass
class Whole:
    f_pro: float | None
    f_avg: float | None
    f_state: float
    pops: dict
    traces: dict
    duration: float
    dim: int = 0                 # dimension of the qubits the fidelities are of (2^n)
    nodes: int = 1               # quadrature nodes per noise variable of the figures
    averaging_error: float | None = 0.0   # |F(nodes) − F(compared)|; None: not averaged
    quadrature: str = ""         # the rule: tensor or additive
    compared: int = 0            # nodes of the coarser rule compared with
    leakage: float = 0.0         # population outside the qubit levels at the end
    observables: tuple = ()      # what each trailing read records (observe.observables)
    qubits: tuple = ()           # the qubits the fidelities are of (the scope)

    @property
    def infidelity(self) -> float:
        return 1 - (self.f_avg if self.f_avg is not None else self.f_state)


def evaluate_whole(crun: CompiledRun, switches: Switches, opts: SimOptions, engine, *,
                   traces: int = 0, nodes: int | None = None, correction=None,
                   parts: dict | None = None) -> Whole:
    """The whole run (to the start of its final readout) with the given
    sources switched on, averaged over the quadrature points.

    With ``nodes`` given, that rule (the budget's what-if
    runs use the rule of the total).  Otherwise the average is refined:
    rules of ``opts.nodes − 2`` and ``opts.nodes`` nodes per variable (then
    2n − 1 nodes at a time, up to :data:`MAX_REFINED_NODES`) until the fidelities of
    two successive rules agree within ``opts.averaging_tolerance``; the
    finer one is kept and their difference is the stated averaging error
    (``Whole.averaging_error``; it exceeds the tolerance only when
    :data:`MAX_REFINED_NODES` was reached).  The kind of rule follows the node count
    (:func:`quadrature_rule`: the product grid while it has at most 27
    points, then one variable at a time), so that refining never costs more
    than 27 points or 2·``MAX_REFINED_NODES`` per variable (Gauss–Hermite rules
    below 17 nodes, equispaced ones from 17: :func:`.model.normal_rule`); when two successive rules
    are of different kinds their difference, the stated error, includes the
    difference of the kinds.

    Gate-band modes: ``correction`` (the total's, found once) is applied to
    the average over the other variables; otherwise, with ``parts`` given,
    the modes are combined as a product (:func:`combine_modes`) and the
    finest rule's correction is left in ``parts["correction"]``."""
    need = compile_changes(switches)
    wrong = {k: v for k, v in need.items() if getattr(crun.options, k) != v}
    if wrong:
        raise ValueError(f"run {crun.index} was compiled without {wrong}, which these switches "
                         "need (the sources' compile_off options)")
    tl, wf, device = crun.timeline, crun.waveforms, crun.device
    stop = end_sample(tl)
    model = build_model(wf, device, switches=switches, m=opts.substeps, start=0, stop=stop,
                        rwa=opts.rwa)
    def rule(n: int) -> str:
        return quadrature_rule(device, dataclasses.replace(opts, nodes=n))

    noisy = any(v.rms > 0 for v in model.noise)
    if has_gate_band(model) and len(device.dots) <= MAX_PROCESS_QUBITS:
        # the gate band's correction does not depend on the quadrature rule:
        # found once here, reused by every rule of the refinement; one handed
        # in (the total's, for the budget) is reused while it is of the same
        # gate bands (switching one of two gate sources off changes it)
        key = gate_key(model)
        if isinstance(correction, GateCorrection):
            correction = correction.matrix if correction.key == key else None
        if correction is None:
            correction = gate_correction(engine, model)
        if parts is not None and correction is not None:
            parts["correction"] = GateCorrection(key, correction)
    elif isinstance(correction, GateCorrection):
        correction = None
    if nodes is not None or not noisy or opts.nodes <= 1:
        n = opts.nodes if nodes is None else nodes
        t0 = time.perf_counter()
        w = _evaluate(crun, model, n, rule(n), engine, traces, correction, parts, opts)
        if parts is not None:
            parts["final_s"] = time.perf_counter() - t0
        # nothing to average: exact; averaging switched off (one node) or a
        # fixed rule asked for by the caller: not estimated here
        err = 0.0 if not noisy else None
        return dataclasses.replace(w, nodes=n, averaging_error=err, quadrature=rule(n))
    coarse_n = max(1, opts.nodes - 2)
    coarse = _evaluate(crun, model, coarse_n, rule(coarse_n), engine, 0, correction, None, opts)
    fine_n = opts.nodes
    while True:
        t0 = time.perf_counter()
        fine = _evaluate(crun, model, fine_n, rule(fine_n), engine, traces, correction, parts,
                         opts)
        if parts is not None:     # the wall time of the kept rule (the budget's runs take it)
            parts["final_s"] = time.perf_counter() - t0
        diff = max(abs(fine.f_state - coarse.f_state),
                   abs((fine.f_avg or 0.0) - (coarse.f_avg or 0.0)))
        if fine_n >= TRAPEZOID_FROM:
            diff += 2 * TRAPEZOID_TAIL       # the equispaced rules' cut tails (model.normal_rule)
        if diff <= opts.averaging_tolerance or fine_n >= MAX_REFINED_NODES:
            return dataclasses.replace(fine, nodes=fine_n, averaging_error=float(diff),
                                       quadrature=rule(fine_n), compared=coarse_n)
        # nearly doubled each time (5, 9, 17, 33, 65, 129): a handful of rules, the
        # stated error compares rules far enough apart to mean something, and from
        # 17 nodes on the rules are nested (model.normal_rule)
        coarse, coarse_n, fine_n = fine, fine_n, min(2 * fine_n - 1, MAX_REFINED_NODES)


def _evaluate(crun: CompiledRun, model, nodes: int, rule: str, engine, traces: int,
              correction=None, parts: dict | None = None, opts: SimOptions | None = None
              ) -> Whole:
    """One quadrature rule over the model of one run; ``opts`` gives the
    fidelity scope and the shots (default: the qubits the program acts on,
    no shots)."""
    opts = opts or SimOptions()
    tl, device = crun.timeline, crun.device
    dots = tuple(device.dots)
    n = len(dots)
    pts = noise_points(model, nodes, rule)
    psi0 = F.initial_state(tl.run, dots, model.ground_up)
    V = F.qubit_isometry(model.levels)
    rho0 = np.outer(psi0, psi0.conj())
    if V is not None:
        rho0 = V @ rho0 @ V.conj().T
    process = n <= MAX_PROCESS_QUBITS
    if parts is not None and has_gate_band(model) and process and correction is None:
        S, rho, tr = combine_modes(engine, model, pts, rho0=rho0, traces=traces, parts=parts)
    else:
        S, rho, tr = _average(engine, model, pts, process=process, rho0=rho0, traces=traces,
                              correction=correction if has_gate_band(model) else None)
    leakage = 0.0
    if V is not None:
        # fidelities on the qubit levels, leakage counted as error
        S = F.restrict_channel(S, V) if S is not None else None
        rho = V.conj().T @ rho @ V
        leakage = float(1.0 - np.real(np.trace(rho)))
    U = F.ideal_unitary(program_steps(tl), dots)
    frames = [tl.frames[q] for q in dots]

    def rerun(rho0_other):
        """The final state from another initial state (preparation errors
        above five qubits, where the channel is not kept), on the qubit levels."""
        r0 = rho0_other if V is None else V @ rho0_other @ V.conj().T
        r = _average(engine, model, pts, process=False, rho0=r0)[1]
        return r if V is None else V.conj().T @ r @ V

    view = assess(tl.run, device, dots, S if process else None, rho, psi0, U, frames,
                  scope=opts.fidelity_scope, shots=opts.shots, rerun=rerun)
    f_pro, f_avg, f_state = view["f_pro"], view["f_avg"], view["f_state"]
    rq = F.rho_to_qubit_frames(rho, frames)
    pops = {}
    for k, q in enumerate(dots):
        if V is None:
            up = embed(dot_operator(model.dots[k], "up"), k, model.levels)
        else:
            up = F.op(np.diag([1.0, 0.0]).astype(complex), k, n)
        pops[q] = float(np.real(np.trace(up @ rq)))
    named = {}
    if tr:
        named["t"] = tr["t"]
        for k, q in enumerate(dots):
            named[q] = tr[k]
    # the dimension the fidelities are of (the scope's qubits)
    return Whole(f_pro, f_avg, f_state, pops, named, end_sample(tl) * tl.dt,
                 2 ** len(view["qubits"]), nodes, observables=view["observables"],
                 qubits=view["qubits"], leakage=leakage)


def step_fidelities(crun: CompiledRun, opts: SimOptions, engine,
                    part) -> tuple[StepFidelity, ...]:
    """Each logged top-level step (or group) simulated alone on the whole
    register; ``part`` renders a subset of the run's slots (the recompiler's)."""
    tl, device = crun.timeline, crun.device
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
        wf = part(crun, tuple(slots), after)
        model = build_model(wf, device, m=opts.substeps, start=a, stop=b_sim, rwa=opts.rwa)
        pts = noise_points(model, opts.nodes, opts.quadrature)
        # the gate band: the toggling-frame correction where it applies, else
        # its modes one at a time (small errors of a step)
        S, _, _ = _average(engine, model, pts, process=True, rho0=None,
                           product=toggling.applies(model))
        V = F.qubit_isometry(model.levels)
        leak = 0.0
        if V is not None:
            S = F.restrict_channel(S, V)
            leak = F.leakage_of(S)
        Sq = F.to_qubit_frames(S, [before[q] for q in dots], [after[q] for q in dots])
        U = F.step_unitary(step, dots)
        fid = F.average_fidelity(F.process_fidelity(Sq, U), 2 ** n)
        kind = step.kind
        qubits = tuple(dict.fromkeys(q for s in slots for q in s.qubits))
        label = _label(step)
        src = f"{step.span.file}:{step.span.line}:{step.span.col}" if step.span else ""
        out.append(StepFidelity(entry_no, kind, qubits, label, src, a * dt, (b - a) * dt, fid,
                                leak))
    return tuple(out)


def _label(step) -> str:
    if isinstance(step, P.Parallel):
        return "together { " + " ; ".join(_label(s) for s in step.steps) + " }"
    if isinstance(step, P.Rotation):
        ph = math.degrees(step.phase) % 360
        axis = {0: "x", 90: "y", 180: "-x", 270: "-y"}.get(round(ph, 9), f"phase({ph:g}°)")
        det = f" detuning {step.detuning / 1e6:g} MHz" if step.detuning else ""
        return f"rot {step.qubit} {axis} {math.degrees(step.angle):g}°{det}"
    if isinstance(step, P.ExchangeGate):
        if step.gate == "cphase":
            return f"cphase {step.a} {step.b} {math.degrees(step.angle):g}°"
        return f"{step.gate} {step.a} {step.b}"
    if isinstance(step, P.Move):
        return f"move {step.point}" + (f" ramp {step.ramp * 1e9:g} ns" if step.ramp else "")
    if isinstance(step, P.Idle):
        return f"wait {step.duration * 1e9:g} ns" + (f" on {' '.join(step.qubits)}" if step.qubits else "")
    return step.kind


def quadrature_rule(device: Device, opts: SimOptions) -> str:
    """The rule ``auto`` resolves to with every noise on: the product grid up
    to 27 points, else one variable at a time (as :func:`noise_points`)."""
    if opts.quadrature != "auto":
        return opts.quadrature
    n_vars = sum(1 for src in SOURCES.values() if src.noise is not None
                 for _, _, rms in src.noise(device) if rms > 0)
    # the held band of a spectrum (its gate-band modes are always one at a time)
    n_vars += sum(1 for src in SOURCES.values() if src.window is not None
                  for item in src.window(device, 1e-6)
                  if item[0] in ("detuning", "barrier", "detuning_vector") and item[2] > 0)
    return "tensor" if opts.nodes ** n_vars <= 27 else "additive"


def format_duration(s: float) -> str:
    """A wall time for a person: seconds below two minutes, then minutes."""
    return f"{s:.0f} s" if s < 120 else f"{s / 60:.0f} min"


def error_budget(base: CompiledRun, opts: SimOptions, engine, total: Whole,
                 recompile, progress=None, correction=None, each_s: float = 0.0):
    """Contribution of each registry source with ``budget="switch"``: total
    infidelity minus the infidelity with that source switched off (the run
    recompiled through ``recompile`` under the source's ``compile_off``
    options when it shapes what is played); the floor has every source off
    that is ``in_floor``.  The evaluations are independent and run on
    ``opts.worker_threads()`` threads."""
    device = base.device
    compiled = {(): base}             # one compilation per distinct set of options
    # every evaluation uses the quadrature rule of the total (its kind and its
    # nodes): switching a noise off must not also switch between the product
    # grid and the additive rule
    opts = dataclasses.replace(opts, quadrature=total.quadrature or quadrature_rule(device, opts))

    def compiled_for(switches: Switches) -> CompiledRun:
        changes = compile_changes(switches)
        key = tuple(sorted(changes.items()))
        if key not in compiled:
            compiled[key] = recompile(base, dataclasses.replace(base.options, **changes))
        return compiled[key]

    switched = [src for src in SOURCES.values() if src.budget == "switch"]
    jobs = [ALL_ON.off(src.key) for src in switched] + [floor()]
    jobs = [(compiled_for(sw), sw) for sw in jobs]
    if progress:
        # each runs the total's rule with some sources off (no more noise
        # variables than the total), so the total's last evaluation bounds
        # it about; the floor is run twice (the second at twice the sub-steps)
        threads = opts.worker_threads()
        upto = each_s * (len(jobs) + 2) / threads
        progress(f"error budget: {len(jobs)} evaluations"
                 + (f", up to about {format_duration(upto)} on {threads} thread"
                    f"{'s' * (threads != 1)} (the whole run's last evaluation took "
                    f"{format_duration(each_s)})" if upto >= SLOW_BUDGET_S else ""))

    absent = {s.key for s in switched if s.applies is not None and not s.applies(device)}

    def work(job):
        # the gate-band correction of the total is reused: switching another
        # source off changes it only through cross terms of fourth order
        crun, sw = job
        if sw.off_keys and sw.off_keys <= absent:
            return total.infidelity        # a source the device does not have: 0
        return evaluate_whole(crun, sw, opts, engine, nodes=total.nodes,
                              correction=correction).infidelity

    threads = opts.worker_threads()
    if threads > 1:
        from concurrent.futures import ThreadPoolExecutor
        with ThreadPoolExecutor(threads) as pool:
            infid = list(pool.map(work, jobs))
    else:
        infid = [work(j) for j in jobs]
    lines = [BudgetLine(src.name, total.infidelity - f, src.note)
             for src, f in zip(switched, infid)]
    # the Zeeman difference shapes the exchange gates themselves: switching it off
    # would change the schedule, so its share comes from the gates' own model
    zeeman_src = SOURCES["exchange_zeeman"]
    d = total.dim

    def zeeman_share(tl) -> float:
        out = 0.0
        for s in tl.slots:
            f = getattr(s.info, "frame_fidelity", None)  # exchange slots
            if f is not None:
                f_pro = (5 * f - 1) / 4                   # pair average -> process fidelity
                out += (1 - f_pro) * d / (d + 1)
        return out

    zeeman = zeeman_share(base.timeline)
    lines.append(BudgetLine(zeeman_src.name, zeeman, zeeman_src.note))
    # the floor run is played as compiled under the floor's options (ideal
    # bandwidth, no spectator correction, ...), whose exchange pulses differ:
    # subtract the Zeeman share of *that* timeline, not of the total's (the
    # mismatch made the demo CNOT's floor −1.55e-5, a fidelity above 1)
    floor_infidelity = infid[-1] - zeeman_share(jobs[-1][0].timeline)
    lines.sort(key=lambda b: -b.infidelity)
    remainder = total.infidelity - floor_infidelity - sum(b.infidelity for b in lines)
    # the floor is a small difference of two estimates (the run with everything
    # off but the Zeeman difference, minus the exchange frame model's share);
    # its numerical error is dominated by the sub-step model, O((ω·h)²): the
    # floor run again with twice the sub-steps, Richardson's 4/3·|F(m) − F(2m)|,
    # plus the fast engine's stated bound on dropped exchange
    crun_floor, sw_floor = jobs[-1]
    fine = evaluate_whole(crun_floor, sw_floor, dataclasses.replace(opts, substeps=2 * opts.substeps),
                          engine, nodes=total.nodes, correction=correction)
    numerical = (4 / 3 * abs(fine.infidelity - infid[-1])
                 + opts.exchange_accuracy * (opts.engine == "fast"))
    return tuple(lines), floor_infidelity, remainder, numerical


def simulate(compiled, opts: SimOptions = SimOptions(), progress=None, *,
             recompiler: Recompiler | None = None) -> SimulationResult:
    """Simulate every run of a compiled file (:class:`compiler.Compiled`, all
    runs; see module notes).  ``recompiler`` defaults to the one handed in
    with ``compiled``.  ``progress``, if given, is called with a short text
    before each long piece of work."""
    opts.check()
    with one_thread():
        try:
            return _simulate(compiled, opts, progress, recompiler or compiled.recompiler)
        except ClusterTooLarge as e:            # refused before any work (memory.py)
            raise too_large_error(e.info) from None


def _simulate(compiled, opts: SimOptions, progress, recompiler: Recompiler) -> SimulationResult:
    t_start = time.perf_counter()
    checked = compiled.checked
    device = checked.device
    engine = make_engine(opts.engine, exchange_accuracy=opts.exchange_accuracy,
                         memory_limit=opts.memory_limit or default_limit())
    if progress:
        said: set = set()

        def once(text: str) -> None:          # the engine's estimate, each text once
            if text not in said:
                said.add(text)
                progress(text)
        engine.notify = once
    runs = []
    n_runs = len(checked.expanded.runs)
    if len(compiled.runs) != n_runs:
        raise ValueError("simulate needs every run compiled")
    detail = opts.detail_run if 0 <= opts.detail_run < n_runs else 0
    for i, crun in enumerate(compiled.runs):
        run = crun.run
        t0 = time.perf_counter()
        if progress:
            progress(f"run {i + 1}/{n_runs}")
        is_detail = i == detail
        # every run averaged to the same stated accuracy (evaluate_whole refines)
        parts: dict = {}
        whole = evaluate_whole(crun, ALL_ON, opts, engine,
                               traces=opts.trace_points if is_detail else 0, parts=parts)
        steps = budget = ()
        floor = remainder = numerical = 0.0
        if is_detail and opts.steps:
            if progress:
                progress(f"per-step fidelities of run {i}")
            steps = step_fidelities(crun, opts, engine, recompiler.part)
        if is_detail and opts.budget:
            budget, floor, remainder, numerical = error_budget(
                crun, opts, engine, whole, recompiler.run, progress, parts.get("correction"),
                parts.get("final_s", 0.0))
        runs.append(RunResult(run.index, run.sweep, tuple(device.dots), whole.duration, whole.f_pro,
                              whole.f_avg, whole.f_state, whole.pops, steps, budget,
                              whole.infidelity if budget else 0.0, floor, remainder,
                              whole.traces, {"wall_s": time.perf_counter() - t0},
                              whole.averaging_error, whole.nodes, numerical,
                              whole.compared, whole.leakage, whole.observables, whole.qubits))
    axes = tuple((a.name, a.values, a.dim.symbol()) for a in checked.expanded.axes)
    coherence = _coherence(checked)
    warnings = tuple(sorted(merged([tl.warnings for tl in checked.timelines])))
    stats = {"wall_s": time.perf_counter() - t_start, "engine": engine.name, **engine.stats()}
    settings = {"substeps_per_sample": opts.substeps, "quadrature_nodes": opts.nodes,
                "quadrature": opts.quadrature, "rwa": opts.rwa, "detail_run": detail,
                "averaging_tolerance": opts.averaging_tolerance,
                "fidelity_metric": "budget and totals: 1 - average gate fidelity of the whole "
                                   "run (1 - state fidelity above 5 dots)",
                "fidelity_scope": _scope_text(opts, runs[detail] if runs else None),
                "shots": opts.shots}
    spectra = _noise_spectra(device, compiled.runs[detail], runs[detail])
    summaries = spectrum_summaries(device, runs[detail].duration if runs else 0.0)
    return SimulationResult(checked.expanded.file, device.name, engine.name, opts.rwa,
                            tuple(runs), axes, coherence, settings, warnings, stats, spectra,
                            summaries)


WORST_STEPS = 3


def _scope_text(opts: SimOptions, run: RunResult | None) -> str:
    """What the whole-run fidelities are of, for the settings and the tables."""
    if run is None:
        return ""
    q = ", ".join(run.fidelity_qubits)
    if opts.fidelity_scope == "register" or set(run.fidelity_qubits) >= set(run.dots):
        return f"the whole register ({q})"
    return f"the qubits the program acts on ({q})"


def _noise_spectra(device: Device, crun: CompiledRun, result: RunResult) -> tuple:
    """Per dot with a Zeeman-noise spectrum, the filter functions to overlay:
    the detail run's (its π rotations on the dot as the toggling function's
    flips) and free evolution over each of the dot's WORST_STEPS worst steps."""
    out = []
    tl = crun.timeline
    stop = end_sample(tl) * tl.dt
    for q, d in device.dots.items():
        if d.zeeman_noise is None:
            continue
        flips = sorted(s.start + s.duration / 2 for s in tl.slots
                       if isinstance(s.step, P.Rotation) and q in s.qubits
                       and abs(abs(math.remainder(s.step.angle, 2 * math.pi)) - math.pi) < 1e-6)
        filters = [(f"run {result.run_index} ({len(flips)} π pulses)", stop,
                    tuple(t for t in flips if 0 < t < stop))]
        mine = sorted((s for s in result.steps if q in s.qubits), key=lambda s: s.fidelity)
        filters += [(f"{s.label} (worst step {k + 1})", s.duration, ())
                    for k, s in enumerate(mine[:WORST_STEPS]) if s.duration > 0]
        out.append((q, d.zeeman_noise, tuple(filters)))
    return tuple(out)


def spectrum_summaries(device: Device, window: float) -> tuple[SpectrumSummary, ...]:
    """Every spectrum of the device (Zeeman noise per dot, barrier noise per
    coupling): its parameters, the bands it is split into for a window of
    ``window`` seconds (:func:`.bands.split`, as the simulation splits it)
    and, for Zeeman noise, the T2*, Hahn T2 and CPMG-N T2 it implies."""
    from ..spectra import implied_times
    from .bands import GATE_CYCLES, QS_FRACTION, split
    out = []
    items = [(q, "zeeman", "Hz^2/Hz", d.zeeman_noise) for q, d in device.dots.items()
             if d.zeeman_noise is not None]
    items += [("-".join(c.dots), "barrier", "V^2/Hz", c.barrier_noise) for c in device.couplings
              if c.barrier_noise is not None]
    for target, quantity, unit, sp in items:
        b = split(sp, window)
        bands = []
        if not sp.is_white:
            zeeman = quantity == "zeeman"
            bands.append(SpectrumBand("quasi-static", sp.f_low, b.f_qs,
                                      sp.band_variance(sp.f_low, b.f_qs, white=False),
                                      f"below {QS_FRACTION:g}/T: a Gaussian offset held for the "
                                      "window, by quadrature"))
            if b.f_hi > b.f_qs:
                bands.append(SpectrumBand("gate", b.f_qs, b.f_hi,
                                          sp.band_variance(b.f_qs, b.f_hi, white=False),
                                          f"{QS_FRACTION:g}/T to {GATE_CYCLES:g}/T: filter-function "
                                          "correction on the played control"))
            top = max(b.f_hi, sp.f_low)
            if sp.f_high > top:
                bands.append(SpectrumBand("fast", top, sp.f_high,
                                          sp.band_variance(top, sp.f_high, white=False),
                                          f"above {GATE_CYCLES:g}/T: Lindblad dephasing" if zeeman
                                          else "not simulated"))
        white = sp.white_level()
        if white > 0:
            bands.append(SpectrumBand("white", sp.f_low, sp.f_high,
                                      white * (sp.f_high - sp.f_low),
                                      "Lindblad dephasing" if quantity == "zeeman" else
                                      f"in the gate band up to {GATE_CYCLES:g}/T, not simulated "
                                      "above"))
        times = implied_times(sp) if quantity == "zeeman" else {}
        out.append(SpectrumSummary(target, quantity, unit, sp.s1 if sp.beta else 0.0, sp.beta,
                                   white, sp.f_low, sp.f_high, window, tuple(bands),
                                   times.get("t2_star_s"), times.get("t2_s"),
                                   dict(times.get("t2_cpmg_s", {}))))
    return tuple(out)


def _coherence(checked):
    return tuple(m.as_tuple() for m in coherence_margins(checked.timelines, checked.device))
