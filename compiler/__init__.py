"""dotseq: a pulse-sequence compiler for electron-spin qubits in quantum dots.

The pipeline, one subpackage per stage::

    text --parse--> tree --expand--> runs --check--> (against the device)
         --schedule--> timelines --synth--> waveforms --export--> bundle
                                                      --preview--> figure

The functions here chain the stages; the command line calls only these:
:func:`load` (parse, expand, device, check, schedule: once per command) and
:func:`compile` (synthesis under :class:`CompileOptions`), whose
:class:`Compiled` result export, preview and simulate all take.
"""

from __future__ import annotations

import dataclasses
import gc
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from . import limits
from .check import check
from .check.lines import summed_tone_problems
from .check.summary import Summary, summarize
from .device import device_of, load_device
from .device.model import Device
from .errors import CheckError, DotseqError, ProblemCap, SequenceError
from .expand import expand
from .parse import parse_path, parse_text
from .program import Expanded
from .schedule import Timeline, schedule
from .synth import Waveforms, synthesize
from .synth.types import CompiledRun, CompileOptions, Recompiler

__version__ = "0.1.0"


@dataclass(frozen=True)
class Checked:
    """A sequence file expanded, checked against its device and scheduled."""
    expanded: Expanded
    device: Device
    timelines: tuple[Timeline, ...]


@contextmanager
def _bulk():
    """Pause the cyclic garbage collector while a stage builds many small
    objects (its cost otherwise grows faster than the sequence)."""
    was = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was:
            gc.enable()


def load(path: str | Path, device: str | Path | None = None, *,
         memory_limit: int | None = None, confine: bool = False) -> Checked:
    """Parse, expand, load the device, check and schedule every run.

    ``device`` overrides the file's device statement.  ``memory_limit``
    (bytes, default half the memory available) bounds the text read and the
    steps expanded, estimated before they are allocated (:mod:`compiler.limits`).
    ``confine`` refuses includes and a device statement outside the folder
    tree of ``path`` (``--device`` is the user's own choice and not confined).
    Raises a :class:`~compiler.errors.DotseqError` subclass for any bad input.
    """
    budget = limits.budget(memory_limit)
    with _bulk():
        # the tree is dropped once expanded: its memory is reused by the schedule
        found: list = []
        expanded = expand(parse_path(path, budget=budget, confine=confine), budget=budget,
                          collect=found)
        # the problems of expansion, device, checking and scheduling in one round
        cap = ProblemCap()
        first: list = []

        seen: set = set()

        def note(err: DotseqError) -> None:
            first.append(type(err))
            for p in err.problems:          # a let is evaluated once per pass: report it once
                if (p.message, p.span) not in seen:
                    seen.add((p.message, p.span))
                    cap.add(p)
            cap.more += err.more

        if found:
            note(SequenceError(found))
        try:
            dev = device_of(expanded, device, confine=confine)
        except DotseqError as e:
            if not cap:
                raise
            note(e)
            _raise_collected(cap, first)
        try:
            check(expanded, dev)
            runs = expanded.runs
        except CheckError as e:
            note(e)
            # the steps check refused (unknown dots, uncoupled pairs, missing
            # markers) are left out; the rest is scheduled for its own problems
            runs = tuple(_checked_steps(r, dev) for r in expanded.runs)
        timelines: tuple = ()
        try:
            log = DEFAULT_OPTIONS.frame_log_steps
            timelines = tuple(schedule(r, dev, record_frames=log) for r in runs)
            check_timelines(timelines, dev)
        except DotseqError as e:
            note(e)
        if cap:
            _raise_collected(cap, first)
    return Checked(expanded, dev, timelines)


def _checked_steps(run, dev: Device):
    """``run`` without the steps :func:`check` refuses."""
    from dataclasses import replace
    from . import program as P

    def ok(s) -> bool:
        if not all(q in dev.dots for q in P.step_qubits(s)):
            return False
        if isinstance(s, P.ExchangeGate):
            return dev.coupling(s.a, s.b) is not None
        if isinstance(s, P.Readout):
            return bool(dev.readout.marker)
        if isinstance(s, P.Trigger):
            return bool(dev.readout.trigger_marker)
        if isinstance(s, P.Move):
            return s.point in dev.points
        return True

    steps = []
    for s in run.steps:
        if isinstance(s, P.Parallel):
            inner = tuple(m for m in s.steps if ok(m))
            if inner:
                steps.append(replace(s, steps=inner))
        elif ok(s):
            steps.append(s)
    return replace(run, steps=tuple(steps),
                   prepare=tuple(p for p in run.prepare if p[0] in dev.dots))


def _raise_collected(cap: ProblemCap, classes: list) -> None:
    """One error with every problem found (the class of the first stage that
    found one), capped like the parser's: MAX_SHOWN shown, the rest counted."""
    raise classes[0](cap.problems, more=cap.more, more_note="")


def check_timelines(timelines, device: Device) -> None:
    """Checks of the scheduled runs against the device: the peak of tones
    summed on one line (raises CheckError naming the group) and each
    channel's waveform memory (naming the run, the channel and the
    samples)."""
    from .errors import CheckError
    from .limits import generator_memory_problems
    problems: dict = {}
    for tl in timelines:
        for p in summed_tone_problems(tl, device) + generator_memory_problems(
                tl.run, tl.n_samples, device):
            problems.setdefault((p.message, p.span), p)
    if problems:
        raise CheckError(list(problems.values()))


def check_file(path: str | Path, device: str | Path | None = None, *,
               memory_limit: int | None = None, confine: bool = False) -> Summary:
    """What `dotseq check` prints: a :class:`Summary` of the checked file."""
    c = load(path, device, memory_limit=memory_limit, confine=confine)
    return summarize(c.expanded, c.device, list(c.timelines))


DEFAULT_OPTIONS = CompileOptions()


def _device_for(device: Device, options: CompileOptions) -> Device:
    if not options.ideal_bandwidth:
        return device
    chans = {k: dataclasses.replace(c, rise_time=0.0) for k, c in device.channels.items()}
    return dataclasses.replace(device, channels=chans)


def compile_run(run, device: Device, options: CompileOptions = CompileOptions(), *,
                index: int = 0, timeline: Timeline | None = None) -> CompiledRun:
    """Schedule (unless ``timeline`` is given) and synthesise one checked run
    (``index``: its position among the file's runs)."""
    dev = _device_for(device, options)
    if timeline is None:
        timeline = schedule(run, dev, spectator_correction=options.spectator_correction,
                            exchange_zeeman=options.exchange_zeeman,
                            record_frames=options.frame_log_steps)
    wf = synthesize(timeline, dev, predistort=options.predistort, per_dot=options.per_dot,
                    keep_ideal=options.keep_ideal, mixer_correction=options.mixer_correction)
    return CompiledRun(index, run, dev, timeline, wf, options)


def recompile(base: CompiledRun, options: CompileOptions) -> CompiledRun:
    """The same run under other options (the error budget's what-if variants);
    the timeline is reused when the options do not change the schedule."""
    if base.options.ideal_bandwidth:
        raise ValueError("recompile from a run compiled with the device's own bandwidth")
    same = options.schedule_key() == base.options.schedule_key()
    return compile_run(base.run, base.device, options, index=base.index,
                       timeline=base.timeline if same else None)


def render_part(base: CompiledRun, slots: tuple, frames: dict) -> Waveforms:
    """What only ``slots`` of a compiled run play, with ``frames`` as the final
    frames (per-step fidelities simulate each step alone)."""
    tl = base.timeline
    sub = Timeline(base.run, tuple(slots), tl.n_samples, tl.dt, frames)
    return synthesize(sub, base.device, predistort=base.options.predistort, per_dot=True,
                      mixer_correction=base.options.mixer_correction)


RECOMPILER = Recompiler(recompile, render_part)


@dataclass(frozen=True)
class Compiled:
    """A checked file and the chosen runs compiled under one set of options."""
    checked: Checked
    options: CompileOptions
    runs: tuple[CompiledRun, ...]
    recompiler: Recompiler = RECOMPILER

    @property
    def waveforms(self) -> tuple[Waveforms, ...]:
        return tuple(r.waveforms for r in self.runs)


def compile(checked: Checked, options: CompileOptions = DEFAULT_OPTIONS, *,
            runs: list[int] | None = None) -> Compiled:
    """Synthesise the chosen runs (all by default) under ``options``; the
    timelines of :func:`load` are used unless the options change the
    schedule.  Only the DAC codes are kept unless ``options.keep_ideal``
    (volts follow from the codes)."""
    idx = range(len(checked.timelines)) if runs is None else runs
    same = options.schedule_key() == DEFAULT_OPTIONS.schedule_key()
    with _bulk():
        out = tuple(compile_run(checked.expanded.runs[i], checked.device, options, index=i,
                                timeline=checked.timelines[i] if same else None) for i in idx)
    return Compiled(checked, options, out)


def compile_file(path: str | Path, device: str | Path | None = None,
                 options: CompileOptions = DEFAULT_OPTIONS, *,
                 runs: list[int] | None = None) -> Compiled:
    """Parse, check, schedule and synthesise: the arrays each channel plays."""
    return compile(load(path, device), options, runs=runs)


__all__ = ["compile", "compile_file", "compile_run", "recompile", "render_part", "Compiled", "CompiledRun",
           "CompileOptions", "RECOMPILER", "Waveforms", "synthesize", "load", "check_file",
           "parse_path", "parse_text", "expand", "check", "schedule", "load_device", "summarize",
           "DotseqError", "Checked", "__version__"]
