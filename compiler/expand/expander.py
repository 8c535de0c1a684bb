"""Expansion of a parsed sequence into concrete runs."""

from __future__ import annotations

import itertools
import math
from pathlib import Path

from .. import program as P
from ..errors import Problem, SequenceError, Span, did_you_mean, read_source_line, suggest
from ..limits import BYTES_PER_STEP, FLAG_HINT, MAX_TOTAL_STEPS, Budget, human
from ..parse import tree as T
from ..steps import EXCHANGE_GATES
from ..units import ANGLE, FREQUENCY, NONE, TIME, VOLTAGE, EXAMPLE_UNIT, Dim, format_quantity
from .evaluate import EvalError, Pending, Quantity, QubitRef, _PendingUse, evaluate

MAX_RUNS = 100_000          # sweep points in one file
MAX_STEPS = 10_000_000      # steps in one run after unrolling (all runs: limits.MAX_TOTAL_STEPS)
MAX_SWEEP_POINTS = 100_000  # points on one sweep axis
MAX_CALL_DEPTH = 64
_SATURATED = 2 ** 63        # step estimates stop growing here (a fan-out can reach 2^60)

_AXIS_PHASE = {"x": 0.0, "y": math.pi / 2}


class _Stop(Exception):
    """The current statement is abandoned; its problem is recorded."""


class _TooManySteps(Exception):
    """The run passed its step limit (recorded); the run stops expanding.
    Not a _Stop, so no handler of a single statement swallows it."""


class _Broken:
    """Value of a name whose definition failed (to avoid follow-on errors)."""


def _flatten(body, out: list) -> list:
    for s in body:
        if isinstance(s, T.Include):
            _flatten(s.body, out)
        else:
            out.append(s)
    return out


def _lookup(env: dict):
    """Name resolution for the evaluator: a defined value, a quiet stop for a
    name whose own definition already failed, else an unknown-name error."""
    def lookup(n: T.Name):
        if n.id in env:
            v = env[n.id]
            if isinstance(v, _Broken):
                raise _Stop()
            return v
        if n.id.lower() in ("nan", "inf", "infinity"):
            raise EvalError(f"'{n.id}' is not a number dotseq accepts: every value must be "
                            "finite", n.span, "write the value itself, e.g. 100 ns")
        raise EvalError(f"unknown name '{n.id}'", n.span,
                        did_you_mean(n.id, [k for k in env if not isinstance(env[k], QubitRef)]).strip()
                        or "define it first with: let NAME = VALUE")
    return lookup


class Expander:
    def __init__(self, src: T.SourceFile, max_runs: int, max_steps: int,
                 budget: Budget | None = None):
        self.src = src
        self.stmts = _flatten(src.body, [])
        self.problems: list[Problem] = []
        self.budget = budget
        # steps of all runs together; a single run may not pass it either
        self.max_total = budget.steps if budget is not None else MAX_TOTAL_STEPS
        self.max_runs, self.max_steps = max_runs, min(max_steps, self.max_total)
        self.step_hint = ""
        if budget is not None and self.max_steps == budget.steps < max_steps:
            self.step_hint = (f"; the memory limit of {human(budget.memory)} allows about "
                              f"{budget.steps:,} steps ({human(BYTES_PER_STEP)} each): "
                              + FLAG_HINT)
        self.run_label = ""
        # set when a step estimate read a swept value (run sizes may then differ)
        self.estimate_reads_sweeps = False
        self.swept_names: frozenset[str] = frozenset()
        self.fatal = False          # a step limit was passed: nothing more is done

    # ------------------------------------------------------------ problems
    def source_line(self, span: Span | None) -> str:
        return read_source_line(span.file, span.line) if span is not None else ""

    def fail(self, message: str, span: Span | None, hint: str = "", via: tuple[str, ...] = ()) -> _Stop:
        ctx = via + ((self.run_label,) if self.run_label else ())
        self.problems.append(Problem(message, span, hint, self.source_line(span), ctx))
        return _Stop()

    def too_many(self, message: str, span: Span | None, hint: str,
                 via: tuple[str, ...] = ()) -> _TooManySteps:
        """Record that the run passed its step limit; the caller raises the result."""
        self.fail(message, span, hint + self.step_hint, via)
        self.fatal = True
        return _TooManySteps()

    # ------------------------------------------------------------ values
    def value(self, e: T.Expr, env: dict, want: Dim | None, what: str,
              via: tuple[str, ...] = ()) -> float:
        return self.quantity(e, env, want, what, via).value

    def quantity(self, e: T.Expr, env: dict, want: Dim | None, what: str,
                 via: tuple[str, ...] = ()) -> Quantity:
        """Evaluate ``e`` in ``env``; the problem is recorded (and _Stop raised)
        when it fails or its dimension is not ``want``."""
        try:
            q = evaluate(e, _lookup(env))
        except EvalError as err:
            raise self.fail(f"{err.message} in {what}", err.span, err.hint, via) from None
        except _PendingUse as p:
            raise self.fail(f"{what} cannot depend on the swept parameter '{p.sweep_name}'",
                            p.span, "sweep bounds and counts must be fixed values", via) from None
        if want is not None and q.dim != want:
            if want == ANGLE and q.dim == NONE:
                raise self.fail(f"{what} needs an angle unit", e.span,
                                "write e.g. 90 deg or (pi/2) rad", via)
            ex = EXAMPLE_UNIT.get(want, "")
            raise self.fail(f"{what} must be {want.name()}, but this is {q.dim.name()}", e.span,
                            f"e.g. {ex}" if ex else "", via)
        return q

    def count(self, e: T.Expr, env: dict, what: str, lo: int, hi: int, via=(),
              hint: str = "split the work into several files or runs") -> int:
        v = self.value(e, env, NONE, what, via)
        if v != int(v):
            raise self.fail(f"{what} must be a whole number, got {v:g}", e.span, "", via)
        n = int(v)
        if n < lo:
            raise self.fail(f"{what} must be at least {lo}, got {n}", e.span, "", via)
        if n > hi:
            raise self.fail(f"{what} is {n:,}, above the limit of {hi:,}", e.span, hint, via)
        return n

    # ------------------------------------------------------------ pass 1
    def declarations(self):
        """Sweep axes, device statement and blocks; lets are tried with swept
        names pending."""
        env: dict = {}
        defined: dict[str, Span] = {}
        axes: list[P.SweepAxis] = []
        device: T.DeviceStmt | None = None
        blocks: dict[str, T.BlockDef] = {}
        prepares: list[T.Prepare] = []
        first_step: T.Stmt | None = None
        for s in self.stmts:
            try:
                if isinstance(s, T.Let):
                    self.define(s.name, s.span, defined)
                    try:
                        env[s.name] = evaluate(s.expr, _lookup(env))
                    except _PendingUse as p:
                        env[s.name] = Pending(p.sweep_name)
                    except EvalError as err:
                        raise self.fail(f"{err.message} in '{s.name}'", err.span,
                                        err.hint) from None
                elif isinstance(s, (T.SweepRange, T.SweepList)):
                    self.define(s.name, s.span, defined)
                    env[s.name] = _Broken()
                    axes.append(self.sweep_axis(s, env))
                    env[s.name] = Pending(s.name)
                elif isinstance(s, T.DeviceStmt):
                    if device is not None:
                        raise self.fail("a second device statement", s.span,
                                        f"the device is already set at {device.span}")
                    device = s
                elif isinstance(s, T.BlockDef):
                    if s.name in blocks:
                        raise self.fail(f"block '{s.name}' is defined twice", s.span,
                                        f"first defined at {blocks[s.name].span}")
                    blocks[s.name] = s
                elif isinstance(s, T.Prepare):
                    if first_step is not None:
                        raise self.fail("prepare declares the initial state and must come before "
                                        "the first step", s.span,
                                        f"move it above line {first_step.span.line}")
                    prepares.append(s)
                else:
                    if first_step is None:
                        first_step = s
            except _Stop:
                if isinstance(s, (T.Let, T.SweepRange, T.SweepList)):
                    env[s.name] = _Broken()
        n = 1
        for ax in axes:
            n *= len(ax.values)
            if n > self.max_runs:
                self.fail(f"the sweeps make {n} or more runs, above the limit of {self.max_runs}",
                          ax.span, "use fewer sweep points")
                break
        # swept parameters and the lets computed from them (still pending here)
        self.swept_names = frozenset(k for k, v in env.items() if isinstance(v, Pending))
        return axes, device, blocks, prepares

    def define(self, name: str, span: Span, defined: dict) -> None:
        if name in defined:
            raise self.fail(f"'{name}' is already defined", span,
                            f"first defined at {defined[name]}; choose another name")
        defined[name] = span

    def sweep_axis(self, s, env: dict) -> P.SweepAxis:
        if isinstance(s, T.SweepRange):
            start = self.quantity(s.start, env, None, "the sweep start")
            a, dim = start.value, start.dim
            b = self.value(s.stop, env, dim, "the sweep stop")
            n = self.count(s.count, env, "the number of sweep points", 1, MAX_SWEEP_POINTS)
            if n == 1 and a != b:
                raise self.fail("one sweep point cannot span a range", s.count.span,
                                "use 2 or more points, or make start and stop equal")
            values = tuple(float(a + (b - a) * k / (n - 1)) if n > 1 else float(a) for k in range(n))
        else:
            vals, dim = [], None
            for v in s.values:
                q = self.quantity(v, env, dim, "a sweep value")
                dim = q.dim
                vals.append(q.value)
            values = tuple(vals)
        return P.SweepAxis(s.name, values, dim, s.span)

    # ------------------------------------------------------------ estimates
    def estimate(self, stmts, env: dict, blocks, sweeps, stack: tuple[str, ...] = (),
                 memo: dict | None = None) -> int:
        """A lower bound on the entries ``stmts`` add to a run (a 'together'
        group counts once), found without unrolling: repeat counts multiply
        their bodies, a block call costs its body (once per block and
        arguments, memoised), saturating at 2^63.  A count or argument that
        cannot be evaluated here counts as 0 (expansion reports it)."""
        memo = {} if memo is None else memo
        total = 0
        for s in stmts:
            if isinstance(s, T.Repeat):
                n = self._quiet_count(s.count, env, sweeps)
                if n:
                    total += min(n * self.estimate(s.body, env, blocks, sweeps, stack, memo),
                                 _SATURATED)
            elif isinstance(s, T.Do):
                total += self._estimate_call(s, env, blocks, sweeps, stack, memo)
            elif isinstance(s, (T.Rot, T.Exchange, T.Wait, T.Read, T.Trigger, T.Move, T.Together)):
                total += 1
            if total >= _SATURATED:
                return _SATURATED
        return total

    def _quiet(self, e: T.Expr, env: dict, sweeps) -> Quantity | None:
        """``e`` evaluated without recording problems; None when it fails."""
        def lookup(n: T.Name):
            if n.id in sweeps:
                self.estimate_reads_sweeps = True
            return plain(n)
        plain = _lookup(env)
        try:
            q = evaluate(e, lookup)
        except (EvalError, _PendingUse, _Stop, ArithmeticError, ValueError):
            return None
        return q if isinstance(q, Quantity) else None

    def _quiet_count(self, e: T.Expr, env: dict, sweeps) -> int:
        q = self._quiet(e, env, sweeps)
        if q is None or q.dim != NONE or not q.value >= 1 or q.value != int(q.value):
            return 0
        return min(int(q.value), _SATURATED)

    def _estimate_call(self, s: T.Do, env, blocks, sweeps, stack, memo) -> int:
        b = blocks.get(s.name)
        if (b is None or s.name in stack or len(stack) >= MAX_CALL_DEPTH
                or len(s.args) != len(b.params)):
            return 0
        local = dict(env)
        key: list = [s.name]
        for p, a in zip(b.params, s.args):
            if isinstance(a, T.Name) and a.id != "pi" and (
                    a.id not in env or isinstance(env[a.id], QubitRef)):
                v = env.get(a.id)
                local[p] = v if isinstance(v, QubitRef) else QubitRef(a.id, a.span)
                key.append(("qubit", local[p].name))
            else:
                q = self._quiet(a, env, sweeps)
                local[p] = q if q is not None else _Broken()
                key.append((q.value, q.dim) if q is not None else None)
        k = tuple(key)
        if k not in memo:
            memo[k] = self.estimate(b.body, local, blocks, sweeps, stack + (s.name,), memo)
        return memo[k]

    # ------------------------------------------------------------ pass 2
    def run(self, index: int, point: tuple[tuple[str, float, Dim], ...], blocks) -> P.Run:
        env: dict = {}
        sweep_vals = {name: Quantity(v, d) for name, v, d in point}
        steps: list = []
        prepare: list[tuple[str, str, Span]] = []
        seen_prep: dict[str, Span] = {}
        memo: dict = {}
        for s in self.stmts:
            try:
                if isinstance(s, T.Let):
                    env[s.name] = self.quantity(s.expr, env, None, f"'{s.name}'")
                elif isinstance(s, (T.SweepRange, T.SweepList)):
                    env[s.name] = sweep_vals[s.name]
                elif isinstance(s, T.Prepare):
                    for q in s.qubits:
                        if q.name in seen_prep:
                            raise self.fail(f"qubit {q.name} is prepared twice", q.span,
                                            f"first prepared at {seen_prep[q.name]}")
                        seen_prep[q.name] = q.span
                        prepare.append((q.name, s.state, q.span))
                elif isinstance(s, (T.DeviceStmt, T.BlockDef)):
                    pass
                else:
                    # refuse before unrolling what cannot fit (a fan-out of blocks
                    # calling blocks twice reaches 2^60 steps in 60 lines)
                    est = self.estimate((s,), env, blocks, self.swept_names, memo=memo)
                    if est > 1 and len(steps) + est > self.max_steps:
                        before = f" after the {len(steps):,} before it" if steps else ""
                        raise self.too_many(
                            f"this statement unrolls to {_count_text(est)} steps{before} "
                            f"(repeat counts multiplied, block calls counted), above the limit "
                            f"of {self.max_steps:,} steps of a run", s.span,
                            "reduce repeat counts or block calls")
                    self.emit(s, env, blocks, steps, (), ())
                    if len(steps) > self.max_steps:
                        raise self.too_many(f"the run has more than {self.max_steps:,} steps "
                                            "after unrolling repeats and blocks", s.span,
                                            "reduce repeat counts")
            except _Stop:
                if isinstance(s, T.Let):
                    env[s.name] = _Broken()
            except _TooManySteps:
                break       # recorded once; expanding further would only take memory
        return P.Run(index, tuple((n, v) for n, v, _ in point), tuple(prepare), tuple(steps),
                     tuple(d for _, _, d in point))

    def qubit(self, ident: T.Ident, env: dict, via) -> tuple[str, Span]:
        """The qubit an identifier names, and where that name is written
        (the call argument when it comes through a block parameter)."""
        v = env.get(ident.name)
        if isinstance(v, QubitRef):
            return v.name, v.span
        if isinstance(v, (Quantity, Pending)):
            raise self.fail(f"'{ident.name}' is a parameter, not a qubit", ident.span,
                            "give a qubit (dot) name from the device file", via)
        return ident.name, ident.span

    def emit(self, s: T.Stmt, env: dict, blocks, out: list, via: tuple[str, ...],
             stack: tuple[str, ...]) -> None:
        if isinstance(s, T.Rot):
            q, qs = self.qubit(s.qubit, env, via)
            angle = self.value(s.angle, env, ANGLE, "the rotation angle", via)
            if s.axis.kind == "z":
                out.append(P.FrameRotation(q, -angle if s.axis.negative else angle, s.span, via,
                                           (qs,)))
                return
            if s.axis.kind == "phase":
                phase = self.value(s.axis.phase, env, ANGLE, "the axis phase", via)
            else:
                phase = _AXIS_PHASE[s.axis.kind] + (math.pi if s.axis.negative else 0.0)
            shape, dur, amp = self.step_options(s.options, env, via, burst=True)
            detuning = 0.0
            for o in s.options:
                if o.key == "detuning":
                    detuning = self.value(o.value, env, FREQUENCY, "the detuning option", via)
            out.append(P.Rotation(q, phase, angle, shape, dur, amp, s.span, via, (qs,),
                                  detuning))
        elif isinstance(s, T.Exchange):
            a, sa = self.qubit(s.a, env, via)
            b, sb = self.qubit(s.b, env, via)
            if a == b:
                raise self.fail(f"{s.kind} needs two different qubits, got {a} twice", sb,
                                "", via)
            _, dur, amp = self.step_options(s.options, env, via, burst=False)
            gate = EXCHANGE_GATES[s.kind]
            angle = 0.0
            if s.angle is not None:
                angle = self.value(s.angle, env, ANGLE, "the conditional phase", via)
                if gate.integral_for(angle) == 0.0:
                    raise self.fail(f"cphase by {format_quantity(angle, ANGLE)} is the identity "
                                    "(a multiple of 360 deg)", s.angle.span,
                                    "leave the step out, or give a phase that is not a multiple "
                                    "of 360 deg", via)
            elif gate.angle is not None:
                angle = gate.angle
            out.append(P.ExchangeGate(s.kind, a, b, dur, amp, s.span, via, (sa, sb), angle))
        elif isinstance(s, T.Wait):
            d = self.value(s.duration, env, TIME, "the wait", via)
            if d < 0:
                raise self.fail(f"the wait is negative ({format_quantity(d, TIME)})",
                                s.duration.span, "waits must be zero or longer", via)
            qs, spans = self.qubit_list(s.qubits, env, via)
            out.append(P.Idle(d, qs, s.span, via, spans))
        elif isinstance(s, T.Read):
            qs, spans = self.qubit_list(s.qubits, env, via)
            out.append(P.Readout(qs, s.span, via, spans))
        elif isinstance(s, T.Trigger):
            out.append(P.Trigger(s.label, s.span, via))
        elif isinstance(s, T.Move):
            ramp = 0.0
            for o in s.options:          # the parser allows only ramp=
                ramp = self.value(o.value, env, TIME, "the ramp option", via)
                if ramp < 0:
                    raise self.fail(f"the ramp is negative ({format_quantity(ramp, TIME)})",
                                    o.value.span, "give ramp=0 ns (a jump) or longer", via)
            out.append(P.Move(s.point.name, ramp, s.span, via, s.point.span))
        elif isinstance(s, T.Together):
            inner: list = []
            for x in s.body:
                try:
                    self.emit(x, env, blocks, inner, via, stack)
                except _Stop:
                    pass
            leaves: list = []
            used: dict[str, P.Step] = {}
            for x in inner:
                for leaf in (x.steps if isinstance(x, P.Parallel) else (x,)):
                    if isinstance(leaf, (P.Trigger, P.FrameRotation)) or (
                            isinstance(leaf, P.Idle) and not leaf.qubits):
                        if not isinstance(leaf, P.FrameRotation):
                            raise self.fail("a wait on every qubit or a trigger cannot run inside "
                                            "'together'", leaf.span,
                                            "name the qubits: wait 100 ns on A", via)
                    for q in P.step_qubits(leaf):
                        if q in used:
                            raise self.fail(f"qubit {q} is used twice in one 'together' group",
                                            leaf.span, f"it is already used at {used[q].span}; "
                                            "steps in a group must act on different qubits", via)
                        used[q] = leaf
                    leaves.append(leaf)
            out.append(P.Parallel(tuple(leaves), s.span, via))
        elif isinstance(s, T.Repeat):
            n = self.count(s.count, env, "the repeat count", 0, self.max_steps, via,
                           hint="reduce the repeat count" + self.step_hint)
            body: list = []
            for x in s.body:
                try:
                    self.emit(x, env, blocks, body, via, stack)
                except _Stop:
                    pass
                if len(body) > self.max_steps:
                    break
            if n and len(body) * n + len(out) > self.max_steps:
                raise self.too_many(f"repeat {n} makes {len(body) * n:,} steps, above the limit "
                                    f"of {self.max_steps:,}", s.span, "reduce the repeat count",
                                    via)
            out.extend(body * n)
        elif isinstance(s, T.Do):
            self.call(s, env, blocks, out, via, stack)
        else:
            raise self.fail(f"'{type(s).__name__.lower()}' is not a step", s.span, "", via)

    def qubit_list(self, idents, env, via) -> tuple[tuple[str, ...], tuple[Span, ...]]:
        names: list[str] = []
        spans: list[Span] = []
        for i in idents:
            q, sp = self.qubit(i, env, via)
            if q in names:
                raise self.fail(f"qubit {q} is listed twice", sp, "", via)
            names.append(q)
            spans.append(sp)
        return tuple(names), tuple(spans)

    def step_options(self, options, env, via, burst: bool):
        """shape, duration (s) and amplitude (V) options of a step; a burst's
        amplitude is its peak (positive), an exchange's the barrier level."""
        shape = dur = amp = None
        for o in options:
            if o.key == "shape":
                shape = o.value.name
            elif o.key == "duration":
                dur = self.value(o.value, env, TIME, "the duration option", via)
                if dur <= 0:
                    raise self.fail(f"the duration option must be longer than zero, got "
                                    f"{format_quantity(dur, TIME)}", o.value.span,
                                    "e.g. duration=40 ns", via)
            elif o.key == "amplitude":
                amp = self.value(o.value, env, VOLTAGE, "the amplitude option", via)
                if burst and amp <= 0:
                    # the sign would otherwise be dropped: the angle and axis set the direction
                    raise self.fail(f"the amplitude of a burst must be above zero, got "
                                    f"{format_quantity(amp, VOLTAGE)}", o.value.span,
                                    "give the peak as a positive voltage, e.g. amplitude=100 mV; "
                                    "turn the other way with a negative angle or the -x axis",
                                    via)
        if dur is not None and amp is not None:
            raise self.fail("give duration or amplitude, not both: the other follows from the "
                            "angle and the calibration", options[-1].span, "remove one", via)
        return shape, dur, amp

    def call(self, s: T.Do, env, blocks, out, via, stack) -> None:
        b = blocks.get(s.name)
        if b is None:
            raise self.fail(f"unknown block '{s.name}'", s.span,
                            suggest(s.name, blocks) or "define it with: block NAME(params) { ... }",
                            via)
        if s.name in stack:
            raise self.fail("block calls itself: " + " -> ".join(stack + (s.name,)), s.span,
                            "blocks cannot be recursive", via)
        if len(stack) >= MAX_CALL_DEPTH:
            raise self.fail(f"blocks nested deeper than {MAX_CALL_DEPTH} calls", s.span, "", via)
        if len(s.args) != len(b.params):
            raise self.fail(f"block '{s.name}' takes {len(b.params)} argument"
                            f"{'s' if len(b.params) != 1 else ''} ({', '.join(b.params)}), "
                            f"got {len(s.args)}", s.span, f"defined at {b.span}", via)
        local = {k: v for k, v in env.items()}
        for p, a in zip(b.params, s.args):
            if isinstance(a, T.Name) and a.id != "pi" and (
                    a.id not in env or isinstance(env[a.id], QubitRef)):
                v = env.get(a.id)
                local[p] = v if isinstance(v, QubitRef) else QubitRef(a.id, a.span)
            else:
                local[p] = self.quantity(a, env, None, f"argument '{p}'", via)
        inner_via = (f"in block '{s.name}' called at {s.span}",) + via
        for x in b.body:
            try:
                self.emit(x, local, blocks, out, inner_via, stack + (s.name,))
            except _Stop:
                pass
            if len(out) > self.max_steps:
                raise self.too_many(f"the run has more than {self.max_steps:,} steps after "
                                    "unrolling", s.span, "reduce repeat counts", via)


def _count_text(n: int) -> str:
    return "more than 2^63" if n >= _SATURATED else f"at least {n:,}"


def expand(src: T.SourceFile, *, max_runs: int = MAX_RUNS, max_steps: int = MAX_STEPS,
           budget: Budget | None = None, collect: list | None = None) -> P.Expanded:
    """Expand a parsed file into its runs; raises SequenceError.

    The steps of all runs together are limited to ``MAX_TOTAL_STEPS``, or to
    what ``budget`` (from :func:`compiler.limits.budget`) allows in memory;
    expansion stops as soon as the limit is passed, before the steps are
    scheduled.

    With ``collect`` (a list) the problems of the declarations and of the
    first run that has any are appended to it instead of raised, and the
    runs expanded so far are returned (a statement with a problem is left
    out), so later stages can report their problems in the same round
    (:func:`compiler.load`).  Passing a step limit still raises at once."""
    ex = Expander(src, max_runs, max_steps, budget)
    axes, device, blocks, _ = ex.declarations()
    if ex.problems and collect is None:
        raise SequenceError(ex.problems)
    device_path = None
    if device is not None:
        base = Path(device.span.file).parent if not device.span.file.startswith("<") else Path.cwd()
        device_path = str(base / device.path)
    grid = list(itertools.product(*[[(a.name, v, a.dim) for v in a.values] for a in axes]))
    runs: list[P.Run] = []
    total = 0
    for i, point in enumerate(grid):
        if axes:
            ex.run_label = "for the sweep point " + ", ".join(
                f"{n} = {format_quantity(v, d)}" for n, v, d in point) + f" (run {i})"
        runs.append(ex.run(i, point, blocks))
        if ex.problems:
            if collect is None or ex.fatal:
                raise SequenceError(ex.problems)
            break           # the other runs would repeat the same statements' problems
        # members of 'together' groups are scheduled and recorded one by one
        total += sum(len(s.steps) if isinstance(s, P.Parallel) else 1 for s in runs[-1].steps)
        if i == 0 and len(grid) > 1 and not ex.estimate_reads_sweeps and (
                total * len(grid) > ex.max_total):
            # no repeat count depends on the sweep: every run is as long as the first
            if budget is not None:
                message, hint = budget.steps_problem(ex.max_total)
            else:
                message = f"the runs expand to more than {MAX_TOTAL_STEPS:,} steps in all"
                hint = "use fewer sweep points or repeats, or split the experiment"
            span = axes[0].span
            raise SequenceError(f"{message} ({len(grid):,} runs of {total:,} steps make "
                                f"{total * len(grid):,})", span, hint,
                                read_source_line(span.file, span.line))
        if total > ex.max_total:
            if budget is not None:
                message, hint = budget.steps_problem(ex.max_total)
            else:
                message = f"the runs expand to more than {MAX_TOTAL_STEPS:,} steps in all"
                hint = "use fewer sweep points or repeats, or split the experiment"
            span = axes[0].span if axes else (runs[-1].steps[0].span if runs[-1].steps else None)
            raise SequenceError(f"{message} ({i + 1} of {len(grid)} runs reach {total:,})",
                                span, hint, read_source_line(span.file, span.line) if span else "")
    if collect is not None:
        collect.extend(ex.problems)
    return P.Expanded(src.file, device_path, device.span if device else None, tuple(axes),
                      tuple(runs))
