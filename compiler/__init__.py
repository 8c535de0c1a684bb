"""dotseq: a pulse-sequence compiler for electron-spin qubits in quantum dots.

The pipeline, one subpackage per stage::

    text --parse--> tree --expand--> runs --check--> (against the device)
         --schedule--> timelines --synth--> waveforms --export--> bundle
                                                      --preview--> figure

The functions here chain the stages; the command line calls only these.
"""

from __future__ import annotations

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
            timelines = tuple(schedule(r, dev) for r in runs)
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
    summed on one line (raises CheckError naming the group)."""
    from .errors import CheckError
    problems: dict = {}
    for tl in timelines:
        for p in summed_tone_problems(tl, device):
            problems.setdefault((p.message, p.span), p)
    if problems:
        raise CheckError(list(problems.values()))


def check_file(path: str | Path, device: str | Path | None = None, *,
               memory_limit: int | None = None, confine: bool = False) -> Summary:
    """What `dotseq check` prints: a :class:`Summary` of the checked file."""
    c = load(path, device, memory_limit=memory_limit, confine=confine)
    return summarize(c.expanded, c.device, list(c.timelines))


@dataclass(frozen=True)
class Compiled:
    """A checked file and the sampled waveforms of every run."""
    checked: Checked
    waveforms: tuple[Waveforms, ...]


def compile_checked(checked: Checked, *, predistort: bool = False,
                    runs: list[int] | None = None, keep_ideal: bool = False) -> Compiled:
    """Synthesise the waveforms of the chosen runs (all by default).  Only the
    DAC codes are kept unless ``keep_ideal`` (volts follow from the codes)."""
    idx = range(len(checked.timelines)) if runs is None else runs
    with _bulk():
        wfs = tuple(synthesize(checked.timelines[i], checked.device, predistort=predistort,
                               keep_ideal=keep_ideal) for i in idx)
    return Compiled(checked, wfs)


def compile_file(path: str | Path, device: str | Path | None = None, *,
                 predistort: bool = False, runs: list[int] | None = None) -> Compiled:
    """Parse, check, schedule and synthesise: the arrays each channel plays."""
    return compile_checked(load(path, device), predistort=predistort, runs=runs)


__all__ = ["compile_file", "compile_checked", "Compiled", "Waveforms", "synthesize","load", "check_file", "parse_path", "parse_text", "expand", "check", "schedule",
           "load_device", "summarize", "DotseqError", "Checked", "__version__"]
