"""The work of ``dotseq rb``: plan, generate, simulate, fit, compare.

Each generated sequence is an ordinary ``.dotseq`` file; a worker loads it
with :func:`compiler.load`, compiles it with :func:`compiler.compile` and
simulates it with :func:`compiler.simulate.simulate` (the full model: the device's T1 at its
temperature, T2, quasi-static Zeeman and charge noise, crosstalk, the
generators' bandwidth and quantisation).  The survival probability is the
population of the prepared state |0> = spin up on the benchmarked qubits at
the end, in the qubits' own frames: one qubit: P(up) of that dot; two
qubits: the state fidelity of the whole register (equal to P(up, up) when
the device has no other dots; a spectator's own loss of its ground state
would count, see docs/rb.md).  The device format has no readout or
preparation error, so none is added.

Per-step fidelities: one more file (``steps.dotseq``) plays each distinct
physical step of the decomposition once; the simulator's per-step average
gate fidelities (on the whole register) give an independent prediction of
the error per native step, set against the RB figure in ``rb.json``.
"""

from __future__ import annotations

import hashlib
import math
import os
import time
import traceback
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import DotseqError, UsageError
from .fit import analyse, interleaved_error
from .native import decomposition, DECOMPOSITIONS
from .sequences import Interleaved, interleaved, make_sequences, sequence_text

MAX_LENGTH = 5000
MAX_SEQUENCES = 10000
DEVICE_COPY = "device.yaml"
STEPS_FILE = "steps.dotseq"


@dataclass(frozen=True)
class RBSettings:
    """What to benchmark and how to simulate it."""
    qubits: tuple[str, ...]
    lengths: tuple[int, ...]
    sequences: int = 20
    seed: int = 0
    decomposition: str = "virtual-z"
    interleave: str | None = None
    engine: str = "fast"
    nodes: int = 5
    quadrature: str = "auto"
    substeps: int = 2
    resamples: int = 200

    def check(self) -> None:
        n = len(self.qubits)
        if n not in (1, 2):
            raise UsageError(f"--qubits {' '.join(self.qubits)}: give one or two qubits",
                             hint="e.g. --qubits A, or --qubits A B for two-qubit RB")
        if n == 2 and self.qubits[0] == self.qubits[1]:
            raise UsageError(f"--qubits {' '.join(self.qubits)}: name two different qubits")
        if len(set(self.lengths)) < 3:
            raise UsageError(f"--lengths {','.join(map(str, self.lengths))}: give at least three "
                             "different lengths (the fit A·p^m + B has three parameters)",
                             hint="e.g. --lengths 1,2,4,8,16,32")
        bad = [m for m in self.lengths if not 1 <= m <= MAX_LENGTH]
        if bad:
            raise UsageError(f"--lengths: {bad[0]} is not from 1 to {MAX_LENGTH} Cliffords",
                             hint="e.g. --lengths 1,2,4,8,16,32")
        if not 2 <= self.sequences <= MAX_SEQUENCES:
            raise UsageError(f"--sequences {self.sequences}: give from 2 to {MAX_SEQUENCES} per "
                             "length (the spread over sequences gives the intervals)",
                             hint="e.g. --sequences 20")
        if self.decomposition not in DECOMPOSITIONS[n]:
            raise UsageError(f"--decomposition {self.decomposition} is not offered on {n} "
                             f"qubit(s)", hint="use " + " or ".join(DECOMPOSITIONS[n]))
        if not 20 <= self.resamples <= 100000:
            raise UsageError(f"--resamples {self.resamples}: give from 20 to 100000")
        if not 0 <= self.seed < 2 ** 63:
            raise UsageError(f"--seed {self.seed}: give a whole number from 0 to 2^63 - 1")


def parse_lengths(text: str) -> tuple[int, ...]:
    """``1,2,4,8`` -> (1, 2, 4, 8), sorted, duplicates removed."""
    out = []
    for part in text.split(","):
        part = part.strip()
        if not part.isdigit():
            raise UsageError(f"--lengths {text}: '{part}' is not a whole number of Cliffords",
                             hint="give them separated by commas, e.g. --lengths 1,2,4,8,16")
        out.append(int(part))
    return tuple(sorted(set(out)))


@dataclass(frozen=True)
class RBTask:
    """One simulation for a worker: a sequence file (or the per-step file).
    ``text`` and ``device_text`` travel with the task, so a worker that does
    not see ``path`` (a Dask worker on another machine) writes them into a
    temporary folder of its own."""
    index: int
    name: str
    path: str
    qubits: tuple[str, ...]
    options: dict
    steps: bool = False            # the per-step fidelity file
    text: str = ""
    device_text: bytes = b""


def simulate_task(task: RBTask) -> dict:
    """Load and simulate one generated file (one BLAS thread); never raises
    for the file's own trouble (``status`` invalid or error, with the reason)."""
    from ..threads import one_thread
    t0, c0 = time.perf_counter(), time.process_time()
    try:
        with one_thread():
            out = _simulate(task, t0)
        out["cpu_s"] = time.process_time() - c0     # this process's CPU: where the work ran
        return out
    except DotseqError as e:
        p = e.first
        return {"name": task.name, "status": "invalid", "wall_s": time.perf_counter() - t0,
                "message": f"{e.stage}: {p.span}: {p.message}" if p.span else p.message}
    except Exception as e:  # noqa: BLE001 - reported with the task, never lost
        tb = traceback.extract_tb(e.__traceback__)
        at = f" at {os.path.basename(tb[-1].filename)}:{tb[-1].lineno}" if tb else ""
        return {"name": task.name, "status": "error", "wall_s": time.perf_counter() - t0,
                "message": f"{type(e).__name__}: {e}{at}"}


def _load_task(task: RBTask):
    """The checked file of ``task``: from its path when this worker sees the
    same file, else from the text it carries (in a temporary folder laid
    out like the output folder)."""
    import tempfile
    from .. import load
    p = Path(task.path)
    try:
        same = not task.text or (p.is_file() and p.read_text(encoding="utf-8") == task.text)
    except OSError:
        same = False
    if same:
        return load(p)
    with tempfile.TemporaryDirectory(prefix="dotseq-rb-task-") as tmp:
        Path(tmp, DEVICE_COPY).write_bytes(task.device_text)
        sub = Path(tmp) if task.steps else Path(tmp, "sequences")
        sub.mkdir(exist_ok=True)
        local = sub / p.name
        local.write_text(task.text, encoding="utf-8")
        return load(local)


def _simulate(task: RBTask, t0: float) -> dict:
    from ..simulate import SimOptions
    checked = _load_task(task)
    opts = SimOptions(budget=False, steps=task.steps, trace_points=0, threads=1,
                      max_step_entries=10000, **task.options)
    run = _simulated(checked, opts)
    out = {"name": task.name, "status": "ok", "wall_s": time.perf_counter() - t0,
           "duration": run.duration}
    if task.steps:
        out["steps"] = _step_rows(run)
        out["register"] = list(run.dots)
        spectators = [q for q in checked.device.dots if q not in task.qubits]
        if spectators:
            out["steps_quiet_spectators"] = _step_rows(_simulated(_quiet(checked, spectators),
                                                                  opts))
        return out
    if len(task.qubits) == 1:
        out["survival"] = float(run.populations[task.qubits[0]])
    else:
        out["survival"] = float(run.state_fidelity)
    out["state_fidelity"] = float(run.state_fidelity)
    return out


QUIET_TIME = 1000.0     # s: T1, T2, T2* of a spectator made quiet for the comparison


def _simulated(checked, opts):
    """The one run of a checked file, compiled and simulated (the public path)."""
    from .. import compile as compile_checked
    from ..simulate import simulate
    return simulate(compile_checked(checked), opts).runs[0]


def _step_rows(run) -> list[dict]:
    return [{"label": s.label, "kind": s.kind, "qubits": list(s.qubits),
             "duration": s.duration, "fidelity": s.fidelity} for s in run.steps]


def _quiet(checked, spectators):
    """``checked`` on a copy of its device whose spectators neither relax
    nor dephase (T1 = T2 = T2* = 1000 s): the per-step fidelities then hold
    the benchmarked qubits' own errors (and the crosstalk on the spectators)."""
    from .. import Checked
    from ..sweep.params import apply_device
    dev = apply_device(checked.device, {f"{q}.{k}": QUIET_TIME for q in spectators
                                        for k in ("t1", "t2", "t2_star")})
    # coherence times do not enter the schedule: the timelines stay valid
    return Checked(checked.expanded, dev, checked.timelines)


# ------------------------------------------------------------------ plan

@dataclass
class RBPlan:
    settings: RBSettings
    device_path: str | None        # None: the bundled default device
    device_text: bytes
    device_name: str
    register: tuple[str, ...]
    dec: object
    inter: Interleaved | None
    sequences: list = field(default_factory=list)
    step_texts: tuple[str, ...] = ()

    @property
    def d(self) -> int:
        return 2 ** len(self.settings.qubits)

    @property
    def key(self) -> dict:
        s = self.settings
        return {"qubits": list(s.qubits), "lengths": list(s.lengths), "sequences": s.sequences,
                "seed": s.seed, "decomposition": s.decomposition, "interleave": s.interleave,
                "engine": s.engine, "nodes": s.nodes, "quadrature": s.quadrature,
                "substeps": s.substeps,
                "device_sha256": hashlib.sha256(self.device_text).hexdigest(),
                "n_tasks": len(self.sequences) + 1}


def _device_source(source: str, device: str | None):
    """(path or None for the bundled device, Device) from a device file, a
    sequence file (its device statement) or ``--device``."""
    from .. import load
    from ..device import BUNDLED_DEFAULT, load_device
    if device is not None:
        return str(device), load_device(device)
    if str(source).lower().endswith((".yaml", ".yml")):
        return str(source), load_device(source)
    checked = load(source)
    path = checked.expanded.device_path
    return (str(path) if path is not None else str(BUNDLED_DEFAULT)), checked.device


def plan_rb(source: str, settings: RBSettings, device: str | None = None) -> RBPlan:
    """Check the arguments against the device and generate every sequence."""
    settings.check()
    path, dev = _device_source(source, device)
    names = tuple(dev.dots)
    for q in settings.qubits:
        if q not in dev.dots:
            from ..errors import suggest
            raise UsageError(f"--qubits: the device has no qubit '{q}'",
                             hint=suggest(q, names) or f"its qubits: {', '.join(names)}")
    if len(settings.qubits) == 2:
        a, b = settings.qubits
        if not any({a, b} == set(c.dots) for c in dev.couplings):
            raise UsageError(f"--qubits {a} {b}: the device has no exchange coupling between "
                             "them", hint="two-qubit RB needs a coupled pair (device couplings)")
    try:
        text = Path(path).read_bytes()
    except OSError as e:
        raise UsageError(f"cannot read the device file {path}: {e.strerror or e}") from None
    inter = None
    if settings.interleave is not None:
        try:
            inter = interleaved(settings.interleave, settings.qubits)
        except (ValueError, KeyError) as e:
            raise UsageError(f"--interleave '{settings.interleave}': {e}",
                             hint="e.g. --interleave 'rot A x 90' (or 'cz' on two qubits)") \
                from None
    dec = decomposition(len(settings.qubits), settings.decomposition)
    seqs = make_sequences(dec, settings.lengths, settings.sequences, settings.seed)
    if inter is not None:
        seqs += make_sequences(dec, settings.lengths, settings.sequences, settings.seed, inter)
    plan = RBPlan(settings, path, text, dev.name, names, dec, inter, seqs)
    plan.step_texts = _distinct_physical(plan)
    return plan


def _distinct_physical(plan: RBPlan) -> tuple[str, ...]:
    seen: dict[str, None] = {}
    words = list(plan.dec.words) + ([plan.inter.word] if plan.inter else [])
    for w in words:
        for s in w:
            if s.physical:
                seen.setdefault(s.text(plan.settings.qubits))
    return tuple(seen)


def step_frequencies(plan: RBPlan) -> dict[str, float]:
    """Mean number of each physical step per Clifford of the decomposition."""
    freq: dict[str, float] = {}
    for w in plan.dec.words:
        for s in w:
            if s.physical:
                t = s.text(plan.settings.qubits)
                freq[t] = freq.get(t, 0.0) + 1.0 / len(plan.dec.words)
    return freq


def file_header(plan: RBPlan, seq) -> str:
    s = plan.settings
    kind = f"interleaved with '{plan.inter.text}'" if seq.interleaved else "reference"
    return (f"Randomized benchmarking of {' '.join(s.qubits)} on {plan.device_name}: "
            f"{seq.length} random Cliffords then the inverse ({kind}),\n"
            f"sequence {seq.number}, seed {s.seed}, decomposition {s.decomposition}; "
            f"written by dotseq rb.\nCliffords (element numbers, inverse last): "
            f"{' '.join(map(str, seq.cliffords))}")


def steps_text(plan: RBPlan) -> str:
    qs = " ".join(plan.settings.qubits)
    body = "\n".join(plan.step_texts)
    return (f"# Each distinct physical step of the RB decomposition, once, for its simulated\n"
            f"# average gate fidelity (dotseq rb).\ndevice \"{DEVICE_COPY}\"\nprepare {qs} up\n"
            f"{body}\nread {qs}\n")


# ------------------------------------------------------------------ analysis

def _ci(pair):
    return [float(pair[0]), float(pair[1])]


def analysis_dict(plan: RBPlan, results: dict[str, dict]) -> dict:
    """What ``rb.json`` holds, from the finished simulations."""
    s = plan.settings
    d = plan.d
    out: dict = {"format": "dotseq-rb", "format_version": 1,
                 "qubits": list(s.qubits), "device": plan.device_name, "register": list(plan.register),
                 "dimension": d, "seed": s.seed, "sequences_per_length": s.sequences,
                 "decomposition": s.decomposition, "lengths": list(s.lengths)}

    def block(interleaved_: bool) -> dict:
        seqs = [q for q in plan.sequences if q.interleaved == interleaved_]
        m = [q.length for q in seqs]
        y = [results[q.name]["survival"] for q in seqs]
        a = analyse(m, y, d, plan.dec.native_per_clifford, resamples=s.resamples, seed=s.seed)
        surv = {str(L): [results[q.name]["survival"] for q in seqs if q.length == L]
                for L in s.lengths}
        return {"analysis": a, "p": a.fit.p, "p_interval": _ci(a.p_interval),
                "fit": {"A": a.fit.a, "p": a.fit.p, "B": a.fit.b},
                "error_per_clifford": a.fit.r, "error_per_clifford_interval": _ci(a.r_interval),
                "survival": surv,
                "mean": {k: float(np.mean(v)) for k, v in surv.items()},
                "std": {k: float(np.std(v, ddof=1)) if len(v) > 1 else 0.0
                        for k, v in surv.items()},
                "bootstrap_resamples": a.resamples,
                "duration_s": {str(L): float(np.mean([results[q.name]["duration"] for q in seqs
                                                      if q.length == L])) for L in s.lengths}}

    ref = block(False)
    a = ref.pop("analysis")
    out.update(ref)
    out["native_per_clifford"] = plan.dec.native_per_clifford
    out["error_per_native"] = a.error_per_native
    out["error_per_native_interval"] = _ci(a.native_interval)
    out["confidence"] = 0.95
    if plan.inter is not None:
        ib = block(True)
        ib.pop("analysis")
        r_g, bound = interleaved_error(a.fit.p, ib["p"], d)
        out["interleaved"] = {"step": plan.inter.text, **ib, "error": r_g,
                              "error_bounds": [max(0.0, r_g - bound), min(1.0, r_g + bound)]}
    longest = max(r["duration"] for k, r in results.items() if k != "steps")
    out["step_fidelities"], out["comparison"] = compare(plan, results.get("steps"), a, longest)
    return out


SLOW_NOISE_SHARE = 0.01    # T2* shorter than 100 longest sequences: slow noise is named


def compare(plan: RBPlan, steps_result: dict | None, a, longest: float = 0.0) -> tuple[list, dict]:
    """The simulator's per-step fidelities against RB's error per native step,
    and why they may differ (``longest``: the longest sequence, s).

    The per-step fidelities are of the whole register (dimension D); each is
    turned into the average infidelity in the benchmarked qubits' dimension d
    through the process fidelity, weighted by how often the decomposition
    uses the step.  ``agree_within_factor_1_5`` judges the figure with the
    spectators quiet when there are spectators."""
    if not steps_result or steps_result.get("status") != "ok":
        return [], {"note": "per-step fidelities not available"}
    freq = step_frequencies(plan)
    rows = []
    fid = {}
    for text, st in zip(plan.step_texts, steps_result["steps"]):
        fid[text] = st["fidelity"]
        rows.append({"step": text, "label": st["label"], "duration": st["duration"],
                     "average_fidelity": st["fidelity"], "per_clifford": freq.get(text, 0.0)})
    total = sum(freq.values())

    D = 2 ** len(steps_result.get("register", plan.register))
    d = plan.d

    def on_qubits(f_avg: float) -> float:
        # register average fidelity -> process fidelity -> average infidelity
        # in the benchmarked qubits' dimension d (F_avg = (D·F_pro + 1)/(D + 1):
        # Horodecki et al., PRA 60, 1888 (1999); Nielsen, PLA 303, 249 (2002))
        f_pro = ((D + 1) * f_avg - 1) / D
        return d / (d + 1) * (1 - f_pro)

    def weighted(fids: dict) -> float:
        return sum(f * on_qubits(fids.get(t, math.nan)) for t, f in freq.items()) / total \
            if total else math.nan
    predicted = weighted(fid)
    quiet = steps_result.get("steps_quiet_spectators")
    quiet_pred = None
    if quiet:
        qfid = {}
        for text, st, row in zip(plan.step_texts, quiet, rows):
            qfid[text] = st["fidelity"]
            row["average_fidelity_quiet_spectators"] = st["fidelity"]
        quiet_pred = weighted(qfid)
    infids = [1 - fid[t] for t in freq if t in fid]
    reasons = []
    extra = [q for q in plan.register if q not in plan.settings.qubits]
    if extra:
        reasons.append(f"spectators ({', '.join(extra)}): per-step fidelities are of the whole "
                       "register, so a spectator's dephasing during each step counts there; in RB "
                       "the spectator stays in its ground state and does not feel it"
                       + (f" (with the spectators quiet the steps give {quiet_pred:.2e} per native "
                          "step)" if quiet_pred is not None else ""))
    if infids and max(infids) > 2 * max(min(infids), 1e-15):
        reasons.append("gate-dependent noise: the step errors differ by more than a factor 2 "
                       f"({min(infids):.2e} to {max(infids):.2e}); RB averages them with the "
                       "decomposition's weights and the twirl, the figures agree only on average")
    from ..device import load_device
    dev = load_device(Path(plan.device_path)) if plan.device_path else None
    if dev is not None:
        slow = [q for q in plan.settings.qubits
                if 0 < dev.dots[q].t2_star and longest > SLOW_NOISE_SHARE * dev.dots[q].t2_star]
        charge = len(plan.settings.qubits) == 2 and any(
            c.charge_noise > 0 and set(c.dots) == set(plan.settings.qubits) for c in dev.couplings)
        if slow or charge:
            reasons.append("slow noise: quasi-static Zeeman (T2*) or charge noise stays the same "
                           "through a whole sequence, so errors of successive steps add "
                           "coherently within a Clifford and RB is not a product of independent "
                           "per-step channels")
    reasons.append("leakage: none in this model (each dot is a two-level spin), so it cannot "
                   "cause a difference here")
    ratio = a.error_per_native / predicted if predicted and predicted > 0 else math.nan
    best = quiet_pred if quiet_pred is not None else predicted
    best_ratio = a.error_per_native / best if best and best > 0 else math.nan
    agree = bool(math.isfinite(best_ratio) and 0.67 <= best_ratio <= 1.5)
    out = {"error_per_native_rb": a.error_per_native, "error_per_native_from_steps": predicted,
           "ratio": ratio, "agree_within_factor_1_5": agree, "possible_reasons": reasons}
    if quiet_pred is not None:
        out["error_per_native_from_steps_quiet_spectators"] = quiet_pred
        out["ratio_quiet_spectators"] = (a.error_per_native / quiet_pred if quiet_pred > 0
                                         else math.nan)
    return rows, out


# ------------------------------------------------------------------ execution

@dataclass
class RBOutcome:
    status: str                    # complete, interrupted, failed, invalid
    data: dict | None
    folder: Path
    simulated: int
    resumed: int
    wall_s: float
    problems: list = field(default_factory=list)
    backend: dict = field(default_factory=dict)


class Progress:
    """A tqdm bar on a terminal, else a line about every tenth; nothing when
    not ``enabled``."""

    def __init__(self, enabled: bool = True, stream=None):
        import sys
        self.enabled, self.stream = enabled, stream or sys.stderr
        self.bar = None
        self.done = self.total = self.next_line = 0

    def start(self, total: int, done: int) -> None:
        self.total, self.done = total, done
        if not self.enabled or done >= total:
            return
        if getattr(self.stream, "isatty", lambda: False)():
            from tqdm import tqdm
            self.bar = tqdm(total=total, initial=done, unit="seq", desc="rb", file=self.stream,
                            smoothing=0.1, dynamic_ncols=True)
        else:
            self.next_line = done + max(1, total // 10)

    def advance(self) -> None:
        self.done += 1
        if self.bar is not None:
            self.bar.update(1)
        elif self.enabled and self.done >= self.next_line:
            print(f"rb: {self.done}/{self.total} simulations", file=self.stream, flush=True)
            self.next_line = self.done + max(1, self.total // 10)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None


def preflight(plan: RBPlan) -> None:
    """Compile every distinct physical step once (``steps.dotseq`` in a
    temporary folder) before anything is written: a step the device cannot
    play (a burst above the channel's range, say) is refused at once, as
    ``dotseq compile`` would refuse it, not after the first simulations."""
    import tempfile
    from .. import compile_file
    with tempfile.TemporaryDirectory(prefix="dotseq-rb-") as tmp:
        Path(tmp, DEVICE_COPY).write_bytes(plan.device_text)
        path = Path(tmp, STEPS_FILE)
        path.write_text(steps_text(plan))
        try:
            compile_file(path)
        except DotseqError as e:
            p = e.first
            raise UsageError(f"the device cannot play a native step of the RB decomposition: "
                             f"{p.message}", hint=p.hint or "check the device's rotation "
                             "settings and channel ranges (dotseq compile on a file with that "
                             "step shows the same)") from None


def run_rb(plan: RBPlan, out, *, workers: int = 1, resume: bool = False,
           progress: Progress | None = None, cluster=None) -> RBOutcome:
    """Write the sequences, simulate the missing ones (``workers`` local
    processes, this process when 1, or a Dask ``cluster`` connection from
    :func:`compiler.sweep.execute.connect`), fit and write ``rb.json`` and
    ``rb.png``.  Ctrl-C keeps every finished simulation and re-raises."""
    import json
    from ..sweep.execute import run_dask, run_pool, run_serial
    from .figure import decay_png
    from .store import RBFolder
    t0 = time.perf_counter()
    progress = progress or Progress(False)
    preflight(plan)
    folder = RBFolder(out, plan.key, resume)
    try:
        folder.write(DEVICE_COPY, plan.device_text)
        s = plan.settings
        options = {"engine": s.engine, "nodes": s.nodes, "quadrature": s.quadrature,
                   "substeps": s.substeps}
        tasks = []
        ship = cluster is not None          # Dask workers may not see this folder
        for i, q in enumerate(plan.sequences):
            rel = f"sequences/{q.name}.dotseq"
            text = sequence_text(q, s.qubits, f"../{DEVICE_COPY}", header=file_header(plan, q))
            path = folder.path / rel
            if not path.is_file() or path.read_text() != text:
                folder.write(rel, text.encode("utf-8"))
            if q.name not in folder.done or folder.done[q.name].get("status") != "ok":
                tasks.append(RBTask(i, q.name, str(path), s.qubits, options, False,
                                    text if ship else "", plan.device_text if ship else b""))
        stext = steps_text(plan)
        folder.write(STEPS_FILE, stext.encode("utf-8"))
        if "steps" not in folder.done or folder.done["steps"].get("status") != "ok":
            tasks.insert(0, RBTask(len(plan.sequences), "steps", str(folder.path / STEPS_FILE),
                                   s.qubits, options, True, stext if ship else "",
                                   plan.device_text if ship else b""))
        results = {k: v for k, v in folder.done.items() if v.get("status") == "ok"}
        resumed = len(results)
        problems: list = []
        progress.start(len(plan.sequences) + 1, resumed)

        def on_result(r: dict) -> None:
            folder.append(r)
            if r.get("status") == "ok":
                results[r["name"]] = r
            else:
                problems.append(r)
            progress.advance()

        def on_failure(index: int, reason: str) -> None:
            problems.append({"name": str(index), "status": "error", "message": reason})

        try:
            if cluster is not None:
                backend = run_dask(tasks, on_result, on_failure, cluster, point_fn=simulate_task)
            elif workers > 1 and len(tasks) > 1:
                backend = run_pool(tasks, on_result, min(workers, len(tasks)),
                                   point_fn=simulate_task)
            else:
                backend = run_serial(tasks, on_result, point_fn=simulate_task)
        finally:
            progress.close()
        simulated = len(results) - resumed
        if problems:
            status = "invalid" if all(p.get("status") == "invalid" for p in problems) else "failed"
            return RBOutcome(status, None, folder.path, simulated, resumed,
                             time.perf_counter() - t0, problems)
        data = analysis_dict(plan, results)
        data["timing"] = {"wall_s": time.perf_counter() - t0, "simulated": simulated,
                          "resumed": resumed, "backend": backend.get("backend"),
                          "workers": backend.get("workers"),
                          "mean_simulation_s": float(np.mean([r["wall_s"] for r in
                                                              results.values()])),
                          "simulation_cpu_s": float(sum(r.get("cpu_s", 0.0) for r in
                                                        results.values()))}
        data["files"] = {"sequences": "sequences/", "device": DEVICE_COPY, "steps": STEPS_FILE,
                         "figure": "rb.png", "state": "survival.jsonl"}
        from ..report.data import jsonable
        folder.write("rb.png", decay_png(data))
        folder.write("rb.json", (json.dumps(jsonable(data), indent=1, allow_nan=False)
                                 + "\n").encode("utf-8"))
        return RBOutcome("complete", data, folder.path, simulated, resumed,
                         time.perf_counter() - t0, [], backend)
    finally:
        folder.close()


def summary_lines(o: RBOutcome) -> list[str]:
    """What ``dotseq rb`` prints when it is done."""
    d = o.data
    if d is None:
        lines = [f"rb: {o.status}: {len(o.problems)} simulation(s) failed; nothing fitted"]
        for p in o.problems[:5]:
            lines.append(f"  {p.get('name')}: {p.get('message')}")
        return lines
    lo, hi = d["error_per_clifford_interval"]
    nlo, nhi = d["error_per_native_interval"]
    lines = [f"RB of {' '.join(d['qubits'])} on {d['device']} ({len(d['lengths'])} lengths x "
             f"{d['sequences_per_length']} sequences, seed {d['seed']})",
             f"  p = {d['p']:.6f}  [{d['p_interval'][0]:.6f}, {d['p_interval'][1]:.6f}] (95 %)",
             f"  error per Clifford r = {d['error_per_clifford']:.3e}  [{lo:.2e}, {hi:.2e}]",
             f"  native steps per Clifford = {d['native_per_clifford']:.4f} "
             f"({d['decomposition']}; frame updates not counted)",
             f"  error per native step = {d['error_per_native']:.3e}  [{nlo:.2e}, {nhi:.2e}]"]
    if "interleaved" in d:
        i = d["interleaved"]
        lines.append(f"  interleaved '{i['step']}': p = {i['p']:.6f}, error {i['error']:.3e} "
                     f"(true error between {i['error_bounds'][0]:.2e} and "
                     f"{i['error_bounds'][1]:.2e})")
    c = d["comparison"]
    if "error_per_native_from_steps" in c:
        q = c.get("error_per_native_from_steps_quiet_spectators")
        lines.append(f"  per-step simulated fidelities give {c['error_per_native_from_steps']:.3e}"
                     f" per native step (RB/steps = {c['ratio']:.2f})"
                     + (f"; with the spectators quiet {q:.3e} (RB/steps = "
                        f"{c['ratio_quiet_spectators']:.2f})" if q is not None else "")
                     + ("; they agree within a factor 1.5" if c["agree_within_factor_1_5"]
                        else "; they disagree"))
        for r in c["possible_reasons"]:
            lines.append(f"    - {r}")
    lines.append(f"  wrote {o.folder}/rb.json, rb.png and {len(d['survival']) * d['sequences_per_length']}"
                 f"{' x 2' if 'interleaved' in d else ''} sequences in sequences/ "
                 f"({o.simulated} simulated, {o.resumed} kept, {o.wall_s:.1f} s)")
    return lines
