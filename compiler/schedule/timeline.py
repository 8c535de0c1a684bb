"""As-soon-as-possible placement of a run's steps on the sample grid, with
frame tracking.

Every step starts and ends on a sample of the device's common grid.  Steps
use resources (their dots, the microwave line of a driven dot, the barrier
gate of an exchange, the plungers of dots an exchange detunes, marker
channels) and start as soon as all of them are free, in file order.

Frames: z rotations are frame updates (F_q += α); later bursts on the dot
are played with their axis phase minus F_q.  Exchange gates act on the
*difference* of two dots' frames, so before each exchange the differential
phase is brought to the value the gate needs (see :mod:`compiler.pulses`; a
SWAP-like gate, as good at every phase, needs none: ``PairGate.phase_free``):
either by delaying the exchange (free precession at the Zeeman difference,
an explicit ``phasewait`` entry) or, when that would take longer or the dots have
the same Larmor frequency, by a physical z rotation made of two π bursts on
the first dot (``zcorrect`` entries) together with the opposite frame update.
After the exchange, frame updates compensate the single-qubit phases it
leaves in the rotating frames.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from .. import program as P
from ..device.model import Device
from ..errors import Problem, ScheduleError, Span, read_source_line
from ..analog import burst_quantisation_loss, lsb, rc_tau, top_voltage
from ..physics import precession_sign
from ..steps import EXCHANGE_GATES, KINDS
from ..device import exchange as X
from ..pulses import (BurstDesign, DesignError, ExchangeDesign, check_duration_request,
                      design_burst, design_exchange, frame_updates_after, pair_gate,
                      spectator_phase)
from ..units import FREQUENCY, TIME, VOLTAGE, format_quantity as fq

# Below this ratio of J to the Zeeman difference an exchange gate is not a
# clean √SWAP even with frame compensation (common practice, no source; the
# swap amplitude J²/(J²+ΔEz²) of Russ et al., PRB 97, 085421 (2018) is then
# below 0.96).  The compensated fidelity computed per gate is also checked.
CLEAN_EXCHANGE_RATIO = 5.0
# A controlled phase (cz, cphase) needs the opposite: J at least this factor
# below the Zeeman difference, or the flip-flop is no longer suppressed
# (common practice, no source; Russ et al., PRB 97, 085421 (2018)).
ADIABATIC_EXCHANGE_RATIO = 5.0
# Warn when an exchange gate, compensated in the frames, is below this
# average gate fidelity with its target (common practice, no source).
EXCHANGE_FIDELITY_WARN = 0.999
TRIGGER_WIDTH = 20e-9   # s, length of a trigger marker pulse
PHASE_TOL = 1e-5        # rad, differential phase left uncorrected (infidelity ~1e-11)
MAX_RUN_SAMPLES = 2 ** 53  # sample indices stay exact in a float64 time axis
# Warn when a bias tee's droop over a run, (1/τ)·∫(V − V_DC)dt of the levels
# held at voltage points, exceeds this fraction of the largest step on the
# channel (common practice, no source).
DROOP_WARN = 0.01
# Warn when the DAC codes of a burst lose more than this fraction of its area
# (common practice, no source); when nothing is left it is an error.
QUANTISATION_LOSS_WARN = 0.01


# ------------------------------------------------------------ slot information
# What the scheduler knows about a placed step besides its time, one frozen
# type per kind of slot (Slot.info), never changed after the slot is made.

@dataclass(frozen=True, slots=True)
class BurstInfo:
    """A rotation's burst."""
    frame: float                                   # rad, the dot's frame when played
    spectator_frame_updates: tuple[tuple[str, float], ...] = ()  # (dot, rad) light-shift undo
    detuning: float = 0.0                          # Hz, tone minus the dot's Larmor frequency


def burst_detuning(slot: "Slot") -> float:
    """The offset (Hz) of a burst slot's tone from its dot's Larmor frequency
    (``rot ... detuning=``); 0 for every other slot."""
    return slot.info.detuning if isinstance(slot.info, BurstInfo) else 0.0


@dataclass(frozen=True, slots=True)
class FrameInfo:
    """A z rotation (frame update)."""
    frame: float                                   # rad, the dot's frame after it


@dataclass(frozen=True, slots=True)
class ExchangeInfo:
    """An exchange gate and the frame updates that compensate it."""
    frames_before: tuple[tuple[str, float], ...]   # (dot, rad)
    frame_updates: tuple[tuple[str, float], ...]   # (dot, rad)
    frame_fidelity: float                          # compensated gate in the rotating frames
    zeeman_difference_Hz: float


@dataclass(frozen=True, slots=True)
class InsertedInfo:
    """Time the scheduler inserts before an exchange (phasewait, zcorrect)."""
    reason: str
    spectator_frame_updates: tuple[tuple[str, float], ...] = ()


@dataclass(frozen=True, slots=True)
class MoveInfo:
    """A move to a voltage point: the levels of every point channel before
    and after it (V, absolute; a ramp goes linearly from one to the other)."""
    point: str
    before: tuple[tuple[str, float], ...]
    after: tuple[tuple[str, float], ...]


SlotInfo = BurstInfo | FrameInfo | ExchangeInfo | InsertedInfo | MoveInfo | None


@dataclass(frozen=True, slots=True)
class Slot:
    """One step placed on the sample grid."""
    step: P.Step | None        # the program step; None for inserted phasewait/zcorrect entries
    kind: str
    qubits: tuple[str, ...]
    start_sample: int
    n: int                     # samples
    resources: tuple[str, ...]
    dt: float                  # s per sample
    burst: BurstDesign | None = None
    play_phase: float = 0.0    # rad: burst phase in the dot's rotating frame (axis − frame)
    exchange: ExchangeDesign | None = None
    span: Span | None = None   # source statement (for inserted entries: the exchange's)
    via: tuple[str, ...] = ()
    group: int = -1            # index of its 'together' group, -1 if none
    info: SlotInfo = None      # what else is known about it, by kind of slot

    @property
    def start(self) -> float:
        return self.start_sample * self.dt

    @property
    def duration(self) -> float:
        return self.n * self.dt

    @property
    def end(self) -> float:
        return (self.start_sample + self.n) * self.dt

    @property
    def end_sample(self) -> int:
        return self.start_sample + self.n

    @property
    def level(self) -> float:
        if self.burst is not None:
            return self.burst.amplitude
        if self.exchange is not None:
            return self.exchange.level
        return 0.0

    @property
    def j(self) -> float:
        return self.exchange.j_peak if self.exchange is not None else 0.0


@dataclass(frozen=True)
class Warning_:
    message: str
    span: Span | None
    via: tuple[str, ...] = ()
    key: str = ""              # what it is about (same key in several runs: one warning)
    severity: float = 0.0      # larger is worse; the summary keeps the worst per key

    def render(self) -> str:
        """``file:line:col: warning: message``, then the chain of block calls
        (``in block 'b' called at file:line:col``), innermost first."""
        where = f"{self.span}: " if self.span is not None else ""
        return "\n".join([f"{where}warning: {self.message}"] + [f"    {c}" for c in self.via])


@dataclass(frozen=True)
class Timeline:
    run: P.Run
    slots: tuple[Slot, ...]
    n_samples: int             # end of the last step (before any padding)
    dt: float
    frames: dict               # final frame phase per dot (rad)
    warnings: tuple[Warning_, ...] = ()
    # one entry per top-level step or group, in program order, for the first
    # ``record_frames`` of them (FRAME_LOG_STEPS by default; per-step fidelities):
    # (step, indices of its slots in placement order, frames before, frames after)
    frame_log: tuple = ()
    placed: tuple = ()         # slots in placement order

    @property
    def total(self) -> float:
        return self.n_samples * self.dt


SHAPED_TAUS = 4        # a pulse offered by duration= lasts at least this many RC times of its channel


def weak_exchange_fix(coupling, device: Device, delta: float, target: float = 0.25,
                      gate: str = "sqrtswap") -> str:
    """What makes an exchange gate clean again: a larger J, at a higher
    barrier pulse level (and so a shorter pulse), with the level that gives
    J = CLEAN_EXCHANGE_RATIO × the Zeeman difference when the calibration
    and the channel reach it; or a smaller Zeeman difference; or, when the
    two-qubit gate may be a controlled phase, ``cz``, which works in this
    regime (docs/language.md).

    The suggested step is designed before it is offered: the pulse is whole
    samples and its level is lowered to give the exact exchange, so the
    level of J(V) = want realises less J (following that hint, the warning
    came back).  The pulse of n = ⌊target/(want·dt)⌋ samples is offered
    (duration=, and amplitude= at its level rounded up when that designs
    the same pulse) when it lasts at least SHAPED_TAUS RC times of the
    channel; otherwise that the channel is too slow for it is said."""
    want = CLEAN_EXCHANGE_RATIO * delta
    pair = "-".join(coupling.dots)
    dt = 1.0 / device.sample_rate

    def designed(**kw):
        try:
            return design_exchange(gate, coupling, device, dt, **kw)
        except DesignError:
            return None
    ch = device.channels[coupling.barrier]
    top = min(top_voltage(ch.v_min, ch.v_max, ch.bits), X.v_range(coupling.exchange)[1])
    try:
        v = float(X.v_of_j(coupling.exchange, want))
    except ValueError:
        v = math.inf
    if target / want < 2 * dt:
        level = (f"J ≥ {fq(want, FREQUENCY)} would make the pulse about "
                 f"{fq(target / want, TIME)}, under two samples at this sample rate")
    elif v > top:
        level = (f"J ≥ {fq(want, FREQUENCY)} is beyond the barrier's calibration and range "
                 f"(up to {fq(top, VOLTAGE)}): extend the J(V) calibration or the channel range "
                 f"of {pair}")
    else:
        # the level of J(V) = want realises less J on the sample grid (the
        # pulse is whole samples and its level is lowered to give the exact
        # exchange): design the pulse of n samples instead, offered when it is
        # long against the channel's RC time (shorter, the filter sets its
        # shape and J at the level is never reached)
        level = None
        n = int(target / (want * dt))
        tau = rc_tau(ch.rise_time)
        if n >= 1 and n * dt >= SHAPED_TAUS * tau:
            d = designed(duration=n * dt)
            if d is not None and d.j_peak >= want:
                v_up = math.ceil(d.level / 1e-5) * 1e-5           # 10 µV, rounded up
                a = designed(amplitude=v_up)
                alt = (f" or amplitude={fq(v_up, VOLTAGE, 6)} (or that pulse_voltage of {pair} "
                       "in the device file)" if a is not None and a.j_peak >= want else "")
                level = (f"J ≥ {fq(want, FREQUENCY)} needs a barrier pulse of {n} samples at "
                         f"about {fq(d.level, VOLTAGE)} (J there {fq(d.j_peak, FREQUENCY)}): give "
                         f"duration={fq(n * dt, TIME)}{alt} on the step")
        if level is None:
            level = (f"J ≥ {fq(want, FREQUENCY)} needs a pulse of about "
                     f"{fq(target / want, TIME)}, too short for the barrier channel of "
                     f"{pair} (rise time {fq(ch.rise_time, TIME)} at "
                     f"{fq(device.sample_rate, FREQUENCY).replace('Hz', 'S/s')}) to shape: the "
                     "filter, not the level, would set the exchange; a faster channel (shorter "
                     "rise time, higher sample rate)")
    return (f"fix: a larger J: {level}; or a smaller Zeeman difference (a lower field); or a "
            f"controlled phase (cz {coupling.dots[0]} {coupling.dots[1]}), which needs J well "
            "below the Zeeman difference")


def _exchange_resources(step: P.ExchangeGate, device: Device) -> tuple[str, ...]:
    c = device.coupling(step.a, step.b)
    res = [f"dot:{step.a}", f"dot:{step.b}", f"ch:{c.barrier}"]
    for d, _ in c.detune:
        res += [f"dot:{d}", f"ch:{device.dots[d].plunger}"]
    return tuple(res)


# The resources each kind of program step occupies (dots, lines, channels).
RESOURCES = {
    P.Rotation: lambda s, dev: (f"dot:{s.qubit}", f"line:{dev.dots[s.qubit].drive.line}"),
    P.FrameRotation: lambda s, dev: (f"dot:{s.qubit}",),
    P.ExchangeGate: _exchange_resources,
    P.Idle: lambda s, dev: tuple(f"dot:{q}" for q in (s.qubits or tuple(dev.dots))),
    P.Readout: lambda s, dev: tuple(f"dot:{q}" for q in s.qubits) + (f"ch:{dev.readout.marker}",),
    P.Trigger: lambda s, dev: tuple(f"dot:{q}" for q in dev.dots)
    + (f"ch:{dev.readout.trigger_marker}",),
    # a move changes the charge configuration under every dot: a barrier
    # across the dots and every gate channel a point names
    P.Move: lambda s, dev: tuple(f"dot:{q}" for q in dev.dots)
    + tuple(f"ch:{c}" for c in dev.point_channels),
    P.Parallel: lambda s, dev: tuple(dict.fromkeys(r for m in s.steps
                                                   for r in RESOURCES[type(m)](m, dev))),
}


def _resources(step, device: Device) -> tuple[str, ...]:
    return RESOURCES[type(step)](step, device)


FRAME_LOG_STEPS = 200         # top-level steps whose frames are logged by default


class _Scheduler:
    def __init__(self, run: P.Run, device: Device, *, spectator_correction: bool = True,
                 exchange_zeeman: bool = True, record_frames: int = FRAME_LOG_STEPS):
        self.run, self.device = run, device
        self.spectator_correction = spectator_correction
        self.exchange_zeeman = exchange_zeeman
        self.record_frames = record_frames
        self.dt = 1.0 / device.sample_rate
        self.free: dict[str, int] = {}
        self.slots: list[Slot] = []
        self.frames = {q: 0.0 for q in device.dots}
        self.problems: dict[tuple, Problem] = {}
        self.warnings: dict[tuple, Warning_] = {}
        self.marker_free: dict[str, int] = {}
        # the level of every gate channel a voltage point names (rest: no point)
        self.levels = {c: device.rest_level(c) for c in device.point_channels}
        self.point = ""                       # the point the gates are at ("" rest)
        self.level_log: list[tuple[int, int, dict, dict]] = []   # (start, ramp, before, after)
        # repeated bodies reuse the same step objects: cache per object identity
        self._res_cache: dict[int, tuple[str, ...]] = {}
        self._burst_cache: dict[int, BurstDesign | None] = {}
        self._spectator_cache: dict[tuple[int, str], float] = {}

    # ------------------------------------------------------------ reporting
    def fail(self, msg: str, step, hint: str = "") -> None:
        p = Problem(msg, step.span, hint, read_source_line(step.span.file, step.span.line), step.via)
        self.problems.setdefault((msg, step.span), p)

    def warn(self, msg: str, step, key: str = "", severity: float = 0.0) -> None:
        self.warnings.setdefault((msg, step.span),
                                 Warning_(msg, step.span, step.via, key or msg, severity))

    # ------------------------------------------------------------ helpers
    def earliest(self, resources) -> int:
        return max((self.free.get(r, 0) for r in resources), default=0)

    def occupy(self, resources, end: int) -> None:
        for r in resources:
            self.free[r] = max(self.free.get(r, 0), end)

    def resources(self, step) -> tuple[str, ...]:
        r = self._res_cache.get(id(step))
        if r is None:
            r = self._res_cache[id(step)] = _resources(step, self.device)
        return r

    def burst_for(self, step: P.Rotation) -> BurstDesign | None:
        key = id(step)
        if key in self._burst_cache:
            return self._burst_cache[key]
        b = self._burst_cache[key] = self._burst_for(step)
        return b

    def _burst_for(self, step: P.Rotation) -> BurstDesign | None:
        dot = self.device.dots[step.qubit]
        line = self.device.channels[dot.drive.line]
        peak = min(-line.v_min, line.v_max)
        if step.amplitude is not None and abs(step.amplitude) > peak:
            self.fail(f"the burst amplitude {fq(abs(step.amplitude), VOLTAGE)} is beyond the "
                      f"±{fq(peak, VOLTAGE)} range of line '{line.name}'", step,
                      f"the nearest the line plays is amplitude={fq(peak, VOLTAGE)}; or give "
                      "duration= instead")
            return None
        try:
            b = design_burst(step.angle, step.phase, self.device.rabi_per_volt(step.qubit), self.dt,
                             self.device.rotation, step.shape, step.duration, step.amplitude)
        except DesignError as e:
            self.fail(e.message, step, e.hint)
            return None
        if b.amplitude > peak:
            self.fail(f"the burst for this rotation needs {fq(b.amplitude, VOLTAGE)} peak, beyond "
                      f"the ±{fq(peak, VOLTAGE)} range of line '{line.name}'", step,
                      "lengthen the burst (duration=...) or lower the angle")
            return None
        if step.detuning:
            f_if = self.device.larmor(step.qubit) - line.lo + step.detuning
            nyq = self.device.sample_rate / 2
            if not (line.if_min <= f_if <= line.if_max) or abs(f_if) >= nyq:
                lo_d = line.if_min - (f_if - step.detuning)
                hi_d = line.if_max - (f_if - step.detuning)
                self.fail(f"a burst detuned by {fq(step.detuning, FREQUENCY)} from {step.qubit} "
                          f"needs IF {fq(f_if, FREQUENCY)} on line '{line.name}', outside its "
                          f"band [{fq(line.if_min, FREQUENCY)}, {fq(line.if_max, FREQUENCY)}]"
                          + (f" or beyond the Nyquist frequency {fq(nyq, FREQUENCY)}"
                             if abs(f_if) >= nyq else ""), step,
                          f"detunings from {fq(lo_d, FREQUENCY)} to {fq(hi_d, FREQUENCY)} "
                          "fit the band; or widen if_band / move the LO in the device file")
                return None
        return b

    def exchange_for(self, step: P.ExchangeGate) -> ExchangeDesign | None:
        c = self.device.coupling(step.a, step.b)
        held = [(ch, self.levels[ch]) for ch in
                (c.barrier, *(self.device.dots[d].plunger for d, _ in c.detune))
                if ch in self.levels and self.levels[ch] != self.device.rest_level(ch)]
        if held:
            what = ", ".join(f"{ch} at {fq(v, VOLTAGE)}" for ch, v in held)
            self.fail(f"the {step.gate} pulse needs its gates at rest, but the voltage point "
                      f"'{self.point}' holds {what}", step,
                      "move to a point that leaves the exchange's barrier (and detuned plungers) "
                      "at their rest level before the exchange")
            return None
        try:
            return design_exchange(step.gate, c, self.device, self.dt, step.duration,
                                   step.amplitude, step.angle)
        except DesignError as e:
            self.fail(e.message, step, e.hint)
            return None

    def delta(self, a: str, b: str) -> float:
        if not self.exchange_zeeman:
            return 0.0
        d = self.device.dots
        return (precession_sign(d[a].g) * self.device.larmor(a)
                - precession_sign(d[b].g) * self.device.larmor(b))

    # ------------------------------------------------------------ placement
    def place_simple(self, step, start: int, n: int, group: int, **kw) -> Slot:
        res = self.resources(step)
        slot = Slot(step, step.kind, P.step_qubits(step), start, n, res, self.dt,
                    span=step.span, via=step.via, group=group, **kw)
        self.slots.append(slot)
        self.occupy(res, start + n)
        return slot

    def prepare_exchange(self, step: P.ExchangeGate, design: ExchangeDesign, t0: int,
                         in_group: bool) -> int:
        """Insert what brings the differential frame phase to the gate's
        optimum before ``t0``; returns the (possibly later) start sample."""
        if not EXCHANGE_GATES[step.gate].aligned:
            return t0                     # a controlled phase commutes with z phases
        a, b = step.a, step.b
        c = self.device.coupling(a, b)
        delta = self.delta(a, b)
        g = pair_gate(design, c.exchange, delta)
        if g.phase_free:
            return t0                     # every pre-phase is as good (a SWAP-like target)

        def residual(t: int) -> float:
            xi = (self.frames[a] - self.frames[b]) / 2 - math.pi * delta * t * self.dt
            return (xi - g.xi_best + math.pi / 2) % math.pi - math.pi / 2

        r = residual(t0)
        if abs(r) < PHASE_TOL:
            return t0
        # option A: wait, letting the Zeeman difference turn the phase
        k = None
        if delta != 0 and not in_group:
            period = 1.0 / (abs(delta) * self.dt)          # samples per π of ξ
            k = int(round((r / (math.pi * delta * self.dt)) % period)) % max(1, int(round(period)))
        # option B: physical z rotation on dot a from two π bursts
        pi_burst = design_burst(math.pi, 0.0, self.device.rabi_per_volt(a), self.dt,
                                self.device.rotation)
        cost_b = 2 * pi_burst.n
        if k is not None and k <= cost_b:
            if k > 0:
                res = (f"dot:{a}", f"dot:{b}")
                self.slots.append(Slot(None, "phasewait", (a, b), t0, k, res, self.dt, span=step.span,
                                       via=step.via, info=InsertedInfo(
                                           f"phase alignment before {step.gate} {a} {b}")))
            return t0 + k
        # B: bursts on a, ending where the exchange starts
        line = f"line:{self.device.dots[a].drive.line}"
        start_b = max(self.free.get(f"dot:{a}", 0), self.free.get(line, 0))
        start_b = max(start_b, t0 - cost_b) if not in_group else start_b
        start_b = max(start_b, self.free.get(f"dot:{a}", 0), self.free.get(line, 0))
        t_ex = max(t0, start_b + cost_b)
        F = self.frames[a]
        # the two bursts shift the other dots of the line (light shift): those
        # frame updates come first, since they change the differential phase too
        shifts = [self.correct_spectators(a, pi_burst, step) for _ in range(2)]
        r = residual(t_ex)
        beta = 2 * r                       # physical Rz_a(β), then frame F_a −= β
        res = (f"dot:{a}", line)
        for i, axis in enumerate((0.0, beta / 2)):
            self.slots.append(Slot(None, "zcorrect", (a,), start_b + i * pi_burst.n, pi_burst.n,
                                   res, self.dt, burst=pi_burst, play_phase=axis - F,
                                   span=step.span, via=step.via,
                                   info=InsertedInfo(f"z rotation of {a} by {math.degrees(beta):.6g}"
                                                     f" deg before {step.gate} {a} {b}",
                                                     tuple(shifts[i].items()))))
        self.occupy(res, start_b + cost_b)
        self.frames[a] = F - beta
        return t_ex

    def place_exchange(self, step: P.ExchangeGate, design: ExchangeDesign, t0: int,
                       group: int) -> None:
        a, b = step.a, step.b
        c = self.device.coupling(a, b)
        delta = self.delta(a, b)
        xi = (self.frames[a] - self.frames[b]) / 2 - math.pi * delta * t0 * self.dt
        t1 = (t0 + design.total) * self.dt
        ea, eb, fid = frame_updates_after(design, c.exchange, delta, xi, t1,
                                          self.frames[a], self.frames[b])
        if EXCHANGE_GATES[step.gate].regime == "phase":
            self.warn_phase_regime(step, design, delta, fid)
        elif abs(delta) > 0 and design.j_peak < CLEAN_EXCHANGE_RATIO * abs(delta):
            self.warn(f"J = {fq(design.j_peak, FREQUENCY)} is not well above the Zeeman difference "
                      f"{fq(abs(delta), FREQUENCY)} of {a} and {b}: the {step.gate} is not clean "
                      f"(best {fid:.6f} average gate fidelity after frame compensation); "
                      + weak_exchange_fix(c, self.device, abs(delta), design.target, step.gate), step,
                      f"zeeman:{step.span}", 1 - fid)
        elif fid < EXCHANGE_FIDELITY_WARN:
            self.warn(f"this {step.gate} reaches only {fid:.6f} average gate fidelity in the "
                      "rotating frames, even after frame compensation", step,
                      f"zeeman:{step.span}", 1 - fid)
        info = ExchangeInfo(((a, self.frames[a]), (b, self.frames[b])), ((a, ea), (b, eb)), fid,
                            abs(delta))
        self.frames[a] += ea
        self.frames[b] += eb
        self.place_simple(step, t0, design.total, group, exchange=design, info=info)

    def warn_phase_regime(self, step: P.ExchangeGate, design: ExchangeDesign, delta: float,
                          fid: float) -> None:
        """A controlled phase needs J well below the Zeeman difference."""
        a, b = step.a, step.b
        name = KINDS[step.gate].name
        if not self.exchange_zeeman:
            return                        # the budget's counterfactual run
        if delta == 0:
            self.warn(f"{a} and {b} have the same Larmor frequency: the {name} pulse "
                      f"(J up to {fq(design.j_peak, FREQUENCY)}) swaps the spins instead of "
                      f"giving a controlled phase ({fid:.6f} average gate fidelity after frame "
                      "compensation); fix: a Zeeman difference between the dots (different g "
                      "or a field gradient), or sqrtswap-based gates", step,
                      f"zeeman:{step.span}", 1 - fid)
        elif design.j_peak * ADIABATIC_EXCHANGE_RATIO > abs(delta):
            self.warn(f"J = {fq(design.j_peak, FREQUENCY)} is not well below the Zeeman "
                      f"difference {fq(abs(delta), FREQUENCY)} of {a} and {b}: the {name} is not "
                      f"adiabatic ({fid:.6f} average gate fidelity after frame compensation); "
                      f"fix: a lower barrier level (amplitude=) or a longer pulse (duration=), "
                      f"J ≤ {fq(abs(delta) / ADIABATIC_EXCHANGE_RATIO, FREQUENCY)}", step,
                      f"zeeman:{step.span}", 1 - fid)
        elif fid < EXCHANGE_FIDELITY_WARN:
            self.warn(f"this {name} reaches only {fid:.6f} average gate fidelity in the "
                      "rotating frames, even after frame compensation; a longer pulse "
                      "(duration=) is more adiabatic", step, f"zeeman:{step.span}", 1 - fid)

    def check_quantisation(self, step: P.Rotation, b: BurstDesign, start: int,
                           play_phase: float) -> None:
        """Warn (or refuse, when nothing is left) a burst whose DAC codes lose
        more than QUANTISATION_LOSS_WARN of its area."""
        dot = self.device.dots[step.qubit]
        line = self.device.channels[dot.drive.line]
        if line.bits <= 0:
            return
        f_if = self.device.larmor(step.qubit) - line.lo + step.detuning
        phi = play_phase if precession_sign(dot.g) > 0 else math.pi - play_phase
        loss, nothing = burst_quantisation_loss(
            b.envelope, b.amplitude, phi, f_if, start, self.dt, rc_tau(line.rise_time),
            line.v_min, line.v_max, line.bits)
        lsb_v = lsb(line.v_min, line.v_max, line.bits)
        if nothing:
            self.fail(f"this {math.degrees(b.angle):.4g} deg burst needs only "
                      f"{fq(b.amplitude, VOLTAGE)} peak, below half a DAC step "
                      f"({fq(lsb_v, VOLTAGE)} per code on line '{line.name}'): every code is "
                      "zero, nothing would be played", step,
                      "use a shorter burst with a larger amplitude (amplitude=...), or leave "
                      "out a rotation this small")
        elif loss > QUANTISATION_LOSS_WARN:
            self.warn(f"the DAC codes of this burst lose {loss:.1%} of its area "
                      f"({fq(b.amplitude, VOLTAGE)} peak against {fq(lsb_v, VOLTAGE)} per code "
                      f"on line '{line.name}'; more than {QUANTISATION_LOSS_WARN:.0%})", step,
                      f"quantisation:{step.span}", loss)

    def correct_spectators(self, q: str, burst: BurstDesign, step, group_dots=(),
                           detuning: float = 0.0) -> dict:
        """Frame updates that undo the light shift a burst on ``q`` leaves on
        the other dots of its line (dots driven in the same group excepted);
        returns them (dot -> update, rad)."""
        if not self.spectator_correction:
            return {}
        dots = self.device.dots
        line = dots[q].drive.line
        f_q = self.device.larmor(q) + detuning
        shifts = {}
        for o, dot in dots.items():
            if o == q or o in group_dots or dot.drive.line != line:
                continue
            key = (id(burst), o, q, detuning)
            alpha = self._spectator_cache.get(key)
            if alpha is None:
                alpha = self._spectator_cache[key] = spectator_phase(
                    burst, self.device.rabi_per_volt(o), f_q - self.device.larmor(o), self.dt,
                    precession_sign(dot.g))
            if alpha:
                self.frames[o] -= alpha
                shifts[o] = -alpha
        return shifts

    def place(self, step, group: int, t_group: int | None = None) -> None:
        res = self.resources(step)
        t0 = self.earliest(res) if t_group is None else t_group
        PLACE[type(step)](self, step, t0, group, t_group)

    def place_rotation(self, step: P.Rotation, t0: int, group: int, t_group) -> None:
        b = self.burst_for(step)
        if b is None:
            return
        frame = self.frames[step.qubit]
        # a lone burst undoes its light shift on the other dots of its line now;
        # in a group, place_group does it once the group's driven dots are known
        shifts = (self.correct_spectators(step.qubit, b, step, detuning=step.detuning)
                  if t_group is None else {})
        self.place_simple(step, t0, b.n, group, burst=b, play_phase=b.phase - frame,
                          info=BurstInfo(frame, tuple(shifts.items()), step.detuning))
        self.check_quantisation(step, b, t0, b.phase - frame)

    def place_frame(self, step: P.FrameRotation, t0: int, group: int, t_group) -> None:
        self.frames[step.qubit] += step.angle
        self.place_simple(step, t0, 0, group, info=FrameInfo(self.frames[step.qubit]))

    def place_exchange_step(self, step: P.ExchangeGate, t0: int, group: int, t_group) -> None:
        d = self.exchange_for(step)
        if d is None:
            return
        t0 = self.prepare_exchange(step, d, t0, t_group is not None)
        self.place_exchange(step, d, t0, group)

    def place_idle(self, step: P.Idle, t0: int, group: int, t_group) -> None:
        n = step.duration / self.dt
        if not n <= MAX_RUN_SAMPLES - t0:     # also inf and nan
            self.fail(f"this wait of {step.duration:.4g} s ends beyond "
                      f"{MAX_RUN_SAMPLES:,} samples ({fq(MAX_RUN_SAMPLES * self.dt, TIME)} "
                      "at this sample rate), the longest run dotseq can place", step,
                      "a run is placed on an integer sample grid exact up to 2^53 samples; "
                      "shorten the wait")
            return
        self.place_simple(step, t0, int(round(n)), group)

    def place_readout(self, step: P.Readout, t0: int, group: int, t_group) -> None:
        self.place_simple(step, t0, int(math.ceil(self.device.readout.duration / self.dt - 1e-9)),
                          group)

    def place_trigger(self, step: P.Trigger, t0: int, group: int, t_group) -> None:
        self.place_simple(step, t0, 0, group)
        ch = f"ch:{self.device.readout.trigger_marker}"
        self.occupy((ch,), t0 + int(math.ceil(TRIGGER_WIDTH / self.dt - 1e-9)))

    def place_move(self, step: P.Move, t0: int, group: int, t_group) -> None:
        dev = self.device
        pt = dev.points[step.point]
        n = 0
        if step.ramp > 0:
            if not step.ramp / self.dt <= MAX_RUN_SAMPLES - t0:
                self.fail(f"this ramp of {step.ramp:.4g} s ends beyond {MAX_RUN_SAMPLES:,} "
                          "samples, the longest run dotseq can place", step, "shorten the ramp")
                return
            try:
                check_duration_request(step.ramp, self.dt, "ramp")
            except DesignError as e:
                self.fail(e.message, step, e.hint)
                return
            n = int(round(step.ramp / self.dt))
        before = dict(self.levels)
        after = {c: dev.rest_level(c) for c in dev.point_channels}
        after.update(pt.levels)
        self.levels, self.point = after, step.point
        self.level_log.append((t0, n, before, after))
        self.place_simple(step, t0, n, group, info=MoveInfo(
            step.point, tuple(before.items()), tuple(after.items())))
        for c in dev.couplings:
            v = after.get(c.barrier)
            if v is None or v <= c.idle_voltage:
                continue
            lo, hi = X.v_range(c.exchange)
            j = float(X.j_of_v(c.exchange, min(max(v, lo), hi)))
            pair = "-".join(c.dots)
            self.warn(f"the voltage point '{step.point}' raises the barrier {c.barrier} of "
                      f"{pair} to {fq(v, VOLTAGE)}, above its idle level "
                      f"{fq(c.idle_voltage, VOLTAGE)}: J = {fq(j, FREQUENCY)} acts while the "
                      "gates are there; the simulation includes it, the ideal circuit and the "
                      "frames do not", step, f"point-exchange:{step.point}:{pair}", j)

    def check_droop(self) -> None:
        """Warn when a bias tee droops by more than DROOP_WARN of the largest
        step of a point channel over the run: (1/τ)·∫(V − V_DC)dt."""
        dev = self.device
        if not self.level_log:
            return
        end = max([s.end_sample for s in self.slots] + [0])
        for ch in dev.point_channels:
            tau = dev.channels[ch].bias_tee
            if tau <= 0:
                continue
            rest = dev.rest_level(ch)
            area, big = 0.0, 0.0
            for i, (t0, n, before, after) in enumerate(self.level_log):
                stop = self.level_log[i + 1][0] if i + 1 < len(self.level_log) else end
                a, b = before[ch] - rest, after[ch] - rest
                area += (a + b) / 2 * n * self.dt + b * max(0, stop - t0 - n) * self.dt
                big = max(big, abs(a), abs(b))
            droop = abs(area) / tau
            if big > 0 and droop > DROOP_WARN * big:
                step = next(s.step for s in self.slots if isinstance(s.step, P.Move))
                self.warn(f"the bias tee of channel '{ch}' droops by {fq(droop, VOLTAGE)} over the "
                          f"run ((1/τ)·∫(V − V_DC)dt of the levels held at voltage points, τ = "
                          f"{fq(tau, TIME)}), more than {DROOP_WARN:.0%} of the largest step "
                          f"({fq(big, VOLTAGE)}): compile with --predistort to pre-compensate it, "
                          "or return to the rest level sooner", step, f"droop:{ch}", droop / big)

    def place_nested_group(self, step: P.Parallel, t0: int, group: int, t_group) -> None:
        raise TypeError("a 'together' group inside a group reached the scheduler")

    def place_group(self, group: P.Parallel, gi: int) -> None:
        res = {r for m in group.steps for r in self.resources(m)}
        t0 = self.earliest(res)
        # exchanges in a group are phase-corrected with bursts before the group starts
        for m in group.steps:
            if isinstance(m, P.ExchangeGate):
                d = self.exchange_for(m)
                if d is not None:
                    t0 = max(t0, self.prepare_exchange(m, d, t0, True))
        driven = {m.qubit for m in group.steps if isinstance(m, P.Rotation)}
        for m in group.steps:
            if isinstance(m, P.ExchangeGate):
                d = self.exchange_for(m)
                if d is not None:
                    self.place_exchange(m, d, t0, gi)
            else:
                self.place(m, gi, t_group=t0)
                last = self.slots[-1] if self.slots else None
                if isinstance(m, P.Rotation) and last is not None and last.step is m:
                    shifts = self.correct_spectators(m.qubit, last.burst, m, driven,
                                                     detuning=m.detuning)
                    if shifts:
                        self.slots[-1] = replace(last, info=replace(
                            last.info, spectator_frame_updates=tuple(shifts.items())))

    def warn_readout_overlaps(self) -> None:
        """A readout placed beside a burst or an exchange pulse (its dots are
        free, another dot is driven): the register is still being operated on
        while it is read, and the simulated span ends at the last operation,
        not at the readout (simulate.run.end_sample)."""
        active = [s for s in self.slots if s.n > 0 and (s.burst is not None
                                                          or s.exchange is not None)]
        for r in self.slots:
            if not isinstance(r.step, P.Readout) or r.n == 0:
                continue
            hit = [s for s in active if s.start_sample < r.end_sample and r.start_sample < s.end_sample]
            if not hit:
                continue
            first = min(hit, key=lambda s: s.start_sample)
            where = f" (line {first.span.line})" if first.span is not None else ""
            more = f" and {len(hit) - 1} more" if len(hit) > 1 else ""
            end = max(s.end for s in hit)
            dots = " ".join(r.qubits)
            self.warn(f"readout of {dots} starts at {fq(r.start, TIME)}, beside {first.kind} on "
                      f"{' '.join(first.qubits)}{where}{more}, which runs until {fq(end, TIME)}: "
                      "the register is read while it is still driven or exchanged (simulate "
                      "stops at the end of the last operation). To read after it, wait on the "
                      f"read dots first, e.g. 'wait {fq(end - r.start, TIME)} on {dots}'",
                      r.step, key=f"readout-overlap:{dots}")

    def schedule(self) -> Timeline:
        log = []
        for gi, step in enumerate(self.run.steps):
            logged = gi < self.record_frames
            if logged:
                before, first = dict(self.frames), len(self.slots)
            if isinstance(step, P.Parallel):
                self.place_group(step, gi)
            else:
                self.place(step, -1)
            if logged:
                log.append((step, tuple(range(first, len(self.slots))), before, dict(self.frames)))
        self.check_droop()
        if self.problems:
            raise ScheduleError(list(self.problems.values()))
        self.warn_readout_overlaps()
        n = max([s.end_sample for s in self.slots] + list(self.free.values()) + [0])
        order = sorted(range(len(self.slots)), key=lambda i: (self.slots[i].start_sample, i))
        slots = tuple(self.slots[i] for i in order)
        return Timeline(self.run, slots, n, self.dt, dict(self.frames),
                        tuple(self.warnings.values()), tuple(log), tuple(self.slots))


# How each kind of program step is placed (groups: _Scheduler.place_group).
PLACE = {
    P.Rotation: _Scheduler.place_rotation,
    P.FrameRotation: _Scheduler.place_frame,
    P.ExchangeGate: _Scheduler.place_exchange_step,
    P.Idle: _Scheduler.place_idle,
    P.Readout: _Scheduler.place_readout,
    P.Trigger: _Scheduler.place_trigger,
    P.Move: _Scheduler.place_move,
    P.Parallel: _Scheduler.place_nested_group,
}


def schedule(run: P.Run, device: Device, *, spectator_correction: bool = True,
             exchange_zeeman: bool = True, record_frames: int = FRAME_LOG_STEPS) -> Timeline:
    """Place every step of ``run`` on the sample grid; raises ScheduleError
    for steps that cannot be played (level outside the channel range, J out of
    calibration, ...).

    ``spectator_correction`` and ``exchange_zeeman`` switch off the light-shift
    frame corrections and the Zeeman-difference model of exchange (used by the
    error budget's counterfactual runs); the frames before and after each of
    the first ``record_frames`` top-level steps are kept (per-step fidelities;
    a bounded log, so long sequences do not pay for it)."""
    return _Scheduler(run, device, spectator_correction=spectator_correction,
                      exchange_zeeman=exchange_zeeman, record_frames=record_frames).schedule()
