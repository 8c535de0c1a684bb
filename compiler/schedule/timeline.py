"""As-soon-as-possible placement of a run's steps on shared resources."""

from __future__ import annotations

from dataclasses import dataclass

from .. import program as P
from ..device.model import Device
from ..errors import Problem, ScheduleError, Span, read_source_line
from ..units import FREQUENCY, TIME, VOLTAGE, format_quantity as fq
from .durations import DurationProblem, exchange_pulse, rotation_burst

# J must exceed the Zeeman difference by this factor for a clean √SWAP
# (common practice, no source: the swap amplitude J²/(J²+ΔEz²) of Russ et al.,
# PRB 97, 085421 (2018) is then above 0.99).
CLEAN_EXCHANGE_RATIO = 10.0


@dataclass(frozen=True)
class Slot:
    """One step placed in time."""
    step: P.Step               # a leaf step (groups are opened)
    start: float               # s
    duration: float            # s
    resources: tuple[str, ...]
    level: float = 0.0         # V: burst peak amplitude or barrier level
    j: float = 0.0             # Hz: exchange strength J/h during the pulse
    group: int = -1            # index of its 'together' group, -1 if none

    @property
    def end(self) -> float:
        return self.start + self.duration

    @property
    def kind(self) -> str:
        return self.step.kind


@dataclass(frozen=True)
class Warning_:
    message: str
    span: Span
    via: tuple[str, ...] = ()

    def render(self) -> str:
        return f"{self.span}: warning: {self.message}"


@dataclass(frozen=True)
class Timeline:
    run: P.Run
    slots: tuple[Slot, ...]
    total: float               # s
    warnings: tuple[Warning_, ...] = ()


def _resources(step: P.Step, device: Device) -> tuple[str, ...]:
    dots = tuple(device.dots)
    if isinstance(step, P.Rotation):
        return (f"dot:{step.qubit}", f"line:{device.dots[step.qubit].drive.line}")
    if isinstance(step, P.FrameRotation):
        return (f"dot:{step.qubit}",)
    if isinstance(step, P.ExchangeGate):
        c = device.coupling(step.a, step.b)
        res = [f"dot:{step.a}", f"dot:{step.b}", f"ch:{c.barrier}"]
        for d, _ in c.detune:
            res += [f"dot:{d}", f"ch:{device.dots[d].plunger}"]
        return tuple(res)
    if isinstance(step, P.Idle):
        return tuple(f"dot:{q}" for q in (step.qubits or dots))
    if isinstance(step, P.Readout):
        return tuple(f"dot:{q}" for q in step.qubits) + (f"ch:{device.readout.marker}",)
    if isinstance(step, P.Trigger):
        return tuple(f"dot:{q}" for q in dots) + (f"ch:{device.readout.trigger_marker}",)
    raise TypeError(step)


def schedule(run: P.Run, device: Device) -> Timeline:
    """Place every step of ``run``; raises ScheduleError for steps that cannot
    be played (level outside the channel range, J out of calibration, ...)."""
    free: dict[str, float] = {}
    slots: list[Slot] = []
    problems: dict[tuple, Problem] = {}
    warnings: dict[tuple, Warning_] = {}

    def fail(msg: str, step, hint: str = "") -> None:
        p = Problem(msg, step.span, hint, read_source_line(step.span.file, step.span.line), step.via)
        problems.setdefault((msg, step.span), p)

    def measure(step) -> tuple[float, float, float]:
        if isinstance(step, P.Rotation):
            b = rotation_burst(step, device)
            line = device.channels[device.dots[step.qubit].drive.line]
            peak = min(-line.v_min, line.v_max)
            if b.amplitude > peak:
                fail(f"the burst for this rotation needs {fq(b.amplitude, VOLTAGE)} peak, beyond "
                     f"the ±{fq(peak, VOLTAGE)} range of line '{line.name}'", step,
                     "lengthen the burst (duration=...) or lower the angle")
            return b.duration, b.amplitude, 0.0
        if isinstance(step, P.ExchangeGate):
            x = exchange_pulse(step, device)
            c = device.coupling(step.a, step.b)
            ch = device.channels[c.barrier]
            if not (ch.v_min <= x.level <= ch.v_max):
                fail(f"the barrier level {fq(x.level, VOLTAGE)} is outside the range "
                     f"[{fq(ch.v_min, VOLTAGE)}, {fq(ch.v_max, VOLTAGE)}] of channel '{ch.name}'",
                     step, "give a longer duration= or change the calibration")
            if x.zeeman_difference > 0 and x.j < CLEAN_EXCHANGE_RATIO * x.zeeman_difference:
                w = Warning_(f"J = {fq(x.j, FREQUENCY)} is not well above the Zeeman difference "
                             f"{fq(x.zeeman_difference, FREQUENCY)} of {step.a} and {step.b}: "
                             f"the {step.gate} is not clean", step.span, step.via)
                warnings.setdefault((w.message, w.span), w)
            return x.duration, x.level, x.j
        if isinstance(step, P.Idle):
            return step.duration, 0.0, 0.0
        if isinstance(step, P.Readout):
            return device.readout.duration, 0.0, 0.0
        return 0.0, 0.0, 0.0

    for gi, step in enumerate(run.steps):
        members = step.steps if isinstance(step, P.Parallel) else (step,)
        measured = []
        for m in members:
            try:
                measured.append((m, *measure(m), _resources(m, device)))
            except DurationProblem as e:
                fail(e.message, m, e.hint)
        if not measured:
            continue
        used = {r for *_, res in measured for r in res}
        start = max((free.get(r, 0.0) for r in used), default=0.0)
        group = gi if isinstance(step, P.Parallel) else -1
        for m, dur, level, j, res in measured:
            slots.append(Slot(m, start, dur, res, level, j, group))
            for r in res:
                free[r] = max(free.get(r, 0.0), start + dur)
    if problems:
        raise ScheduleError(list(problems.values()))
    total = max((s.end for s in slots), default=0.0)
    return Timeline(run, tuple(slots), total, tuple(warnings.values()))
