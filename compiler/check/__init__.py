"""Stage 3: check the expanded program against the device description.

Every qubit named must be a dot of the device, every exchange step must use
a coupling of the device's coupling graph (any pair, not only neighbours),
readout and trigger steps need their marker channels.  Problems from all
runs are collected (each reported once) and raised as one
:class:`~compiler.errors.CheckError`.
"""

from __future__ import annotations

from .. import program as P
from ..device.model import Device
from ..errors import CheckError, Problem, Span, read_source_line, suggest


def _problem(msg: str, step, hint: str = "", span=None) -> Problem:
    span = span or step.span
    return Problem(msg, span, hint, read_source_line(span.file, span.line), step.via)


def _pair_span(s: P.ExchangeGate) -> Span | None:
    """Span covering both qubit names when they are written side by side."""
    if len(s.qubit_spans) != 2:
        return None
    a, b = s.qubit_spans
    if (a.file, a.line) == (b.file, b.line) and a.col < b.col:
        return Span.join(a, b)
    return a


def _check_exchange(s: P.ExchangeGate, device: Device, known, add) -> None:
    ok = known(s.a, s) & known(s.b, s)
    if ok and device.coupling(s.a, s.b) is None:
        partners = sorted({d for c in device.couplings if s.a in c.dots
                           for d in c.dots if d != s.a})
        add(_problem(f"dots {s.a} and {s.b} are not coupled in the device", s,
                     f"{s.a} is coupled to: {', '.join(partners) or 'nothing'}; "
                     "add a coupling to the device file or use a coupled pair",
                     _pair_span(s)))


def _check_readout(s: P.Readout, device: Device, known, add) -> None:
    for q in s.qubits:
        known(q, s)
    if not device.readout.marker:
        add(_problem("the device has no readout marker channel", s,
                     "add readout: {marker: NAME, duration: ...} to the device file"))


def _check_trigger(s: P.Trigger, device: Device, known, add) -> None:
    if not device.readout.trigger_marker:
        add(_problem("the device has no trigger marker channel", s,
                     "add readout: {trigger_marker: NAME} to the device file"))


def _check_move(s: P.Move, device: Device, known, add) -> None:
    if s.point in device.points:
        return
    span = s.point_span or s.span
    if device.points:
        hint = (suggest(s.point, device.points) or "") + \
            " points of the device: " + ", ".join(device.points)
    else:
        hint = ("the device file has no points: section; add e.g. 'points: {measure: "
                "{P_A: 12 mV}}'")
    add(_problem(f"the device has no voltage point '{s.point}'", s, hint.strip(), span))


def _check_qubits(s, device: Device, known, add) -> None:
    for q in P.step_qubits(s):
        known(q, s)


def _check_group(s: P.Parallel, device: Device, known, add) -> None:
    for m in s.steps:
        CHECKS[type(m)](m, device, known, add)


# What each kind of program step needs from the device.
CHECKS = {
    P.Rotation: _check_qubits,
    P.FrameRotation: _check_qubits,
    P.ExchangeGate: _check_exchange,
    P.Idle: _check_qubits,
    P.Readout: _check_readout,
    P.Trigger: _check_trigger,
    P.Move: _check_move,
    P.Parallel: _check_group,
}


def check(expanded: P.Expanded, device: Device) -> None:
    """Raise CheckError if any run asks for something the device lacks."""
    problems: dict[tuple, Problem] = {}
    dots = device.dots

    def add(p: Problem) -> None:
        problems.setdefault((p.message, p.span), p)

    def known(q: str, step) -> bool:
        if q in dots:
            return True
        qs = P.step_qubits(step)
        spans = getattr(step, "qubit_spans", ())
        span = spans[qs.index(q)] if q in qs and len(spans) == len(qs) else step.span
        add(_problem(f"unknown qubit '{q}': the device '{device.name}' has no such dot", step,
                     suggest(q, dots) or "dots: " + ", ".join(dots), span))
        return False

    for run in expanded.runs:
        for q, _, span in run.prepare:
            if q not in dots:
                add(Problem(f"unknown qubit '{q}' in prepare", span,
                            suggest(q, dots) or "dots: " + ", ".join(dots),
                            read_source_line(span.file, span.line)))
        for s in P.leaf_steps(run.steps):
            CHECKS[type(s)](s, device, known, add)
    if problems:
        raise CheckError(list(problems.values()))
