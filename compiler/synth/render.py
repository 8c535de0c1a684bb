"""Render a timeline into sample arrays.

Microwave bursts (single-sideband I/Q)
    A line carries the complex baseband c = I + iQ; the generator's I/Q
    mixer plays V(t) = Re[c(t)·e^{i2π·LO·t}], a tone at LO + IF for
    c ∝ e^{i2π·IF·t} (upper sideband for IF > 0).  In the rotating frame of
    dot q (Larmor f_q, IF_q = f_q − LO) the drive is b_q = c·e^{−i2π·IF_q·t}
    and, under the rotating-wave approximation, turns the spin about the axis
    at arg(b_q) for g > 0 and at π − arg(b_q) for g < 0 (the spin precesses
    the other way), at Rabi frequency r·|b_q|.  A rotation about axis φ with
    envelope A·e_k is played so that b_q, averaged over every sample after the
    hold and the channel's RC response, is exactly A·e_k·e^{iφ_b}, with
    φ_b = φ for g > 0 and π − φ for g < 0 (the RC is inverted sample by
    sample: :func:`compiler.analog.tone_burst`).
    Bursts on several dots of one line add up (multi-tone).

Gate voltages
    Barrier gates sit at their coupling's idle level and carry the exchange
    pulses; plungers of dots that a long-range exchange detunes carry the
    offset for the whole exchange slot.  A channel behind a bias tee gets
    V − V_idle from the generator (the DC level comes through the tee's DC
    port and is recorded); with ``predistort`` the droop of the tee is
    pre-compensated (:func:`compiler.analog.predistort_bias_tee`).

Every output is quantised to the DAC's codes; any value outside the range is
an error naming the step and the time, never clipped.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from .. import analog
from ..device.model import Device
from ..errors import Problem, SynthesisError, read_source_line
from ..limits import generator_memory_problems
from ..physics import precession_sign
from ..schedule.timeline import (TRIGGER_WIDTH, BurstInfo, InsertedInfo, Slot, Timeline,
                                 burst_detuning)
from ..units import TIME, VOLTAGE, format_quantity as fq
from .types import Output, StepRecord, Waveforms


# What each kind of slot puts into the outputs (the handlers in synthesize):
# every kind a timeline can hold (compiler.steps.KINDS but 'together', which
# the scheduler opens, and 'pad', which synthesis adds itself).
SLOT_RENDER = {
    "rot": "burst", "zcorrect": "burst",
    "sqrtswap": "exchange", "sqrtswap_inv": "exchange", "swap": "exchange",
    "cz": "exchange", "cphase": "exchange",
    "read": "readout", "trigger": "trigger", "zrot": "frame",
    "wait": "time", "phasewait": "time", "move": "level",
}


def _slot_text(slot: Slot) -> tuple[str, str]:
    if slot.span is None:
        return "", ""
    line = read_source_line(slot.span.file, slot.span.line).strip()
    return f"{slot.span.file}:{slot.span.line}:{slot.span.col}", line


def _slot_channels(slot: Slot, device: Device) -> tuple[str, ...]:
    chans = []
    for r in slot.resources:
        kind, _, name = r.partition(":")
        if kind in ("line", "ch"):
            chans.append(name)
    return tuple(chans)


STREAM_CHUNK = 1 << 15     # samples per pass: the working buffer stays in the CPU cache


def _stream(n: int, evs: list, take, baseline: float, dc_level: float, ch, tau_pre: float,
            dt: float, keep_ideal: bool = True):
    """Write one output chunk by chunk: baseline, then the events that overlap
    the chunk, minus the DC level, optional bias-tee pre-distortion, range
    check, quantisation.  Returns (ideal or None, codes), or (sample, value) of
    the first value outside the channel's range."""
    top = analog.top_voltage(ch.v_min, ch.v_max, ch.bits)
    q = analog.lsb(ch.v_min, ch.v_max, ch.bits)
    lo_ok, hi_ok = ch.v_min - q / 2, top + q / 2
    ideal = np.empty(n) if keep_ideal else None
    # codes of DACs up to 16 bits fit in two bytes, up to 32 in four
    codes = np.empty(n, dtype=analog.code_dtype(ch.bits))
    nxt, active, carry = 0, [], 0.0
    for c0 in range(0, n, STREAM_CHUNK):
        c1 = min(c0 + STREAM_CHUNK, n)
        buf = np.full(c1 - c0, baseline)
        while nxt < len(evs) and evs[nxt][0] < c1:
            active.append(evs[nxt])
            nxt += 1
        still = []
        for ev in active:
            a, b, val, mode = ev
            lo, hi = max(a, c0), min(b, c1)
            if hi > lo:
                if isinstance(val, tuple):                  # a burst: amplitude × shape
                    seg = take(val[0] * val[1][lo - a:hi - a])
                elif isinstance(val, np.ndarray):
                    seg = val[lo - a:hi - a]
                    if take is not None:
                        seg = take(seg)
                else:
                    seg = val
                if mode == "set":
                    buf[lo - c0:hi - c0] = seg
                else:
                    buf[lo - c0:hi - c0] += seg
            if b > c1:
                still.append(ev)
        active = still
        if dc_level:
            buf -= dc_level
        if tau_pre > 0:
            raw = buf
            cum = carry + np.cumsum(raw) - 0.5 * raw
            carry += float(raw.sum())
            buf = raw + cum * dt / tau_pre
        mn, mx = float(buf.min()), float(buf.max())
        if not (lo_ok <= mn and mx <= hi_ok):
            bad = np.flatnonzero((buf < lo_ok) | (buf > hi_ok) | ~np.isfinite(buf))
            k = int(bad[0])
            return c0 + k, float(buf[k])
        if ideal is not None:
            ideal[c0:c1] = buf
        buf -= ch.v_min                      # codes = round((v − v_min)/LSB), in place
        buf *= 1.0 / q
        np.rint(buf, out=buf)
        # values within half an LSB beyond the ends (allowed above) round to the end codes
        np.clip(buf, 0, 2 ** ch.bits - 1, out=buf)
        analog.to_codes(buf, ch.bits, out=codes[c0:c1])     # checked: never wraps
    return ideal, codes


def _writer(tl: Timeline, k: int, channel: str, device: Device) -> Slot | None:
    """The step that writes sample ``k`` of ``channel`` (for error messages)."""
    best = None
    for s in tl.slots:
        if s.start_sample <= k < s.end_sample and (
                channel in _slot_channels(s, device) or best is None):
            best = s
    return best


def synthesize(tl: Timeline, device: Device, *, predistort: bool = False,
               per_dot: bool = False, keep_ideal: bool = True,
               mixer_correction: bool = True) -> Waveforms:
    """Sample arrays of one scheduled run (see the module notes).  With
    ``per_dot`` the result also holds each dot's own bursts separately;
    ``keep_ideal=False`` keeps only the DAC codes (volts follow from them on
    use), which halves the memory of long runs.  ``mixer_correction=False``
    plays I and Q as for an ideal mixer even where the device gives a
    ``mixer`` calibration (what-if: the uncorrected mixer)."""
    dt = tl.dt
    fs = device.sample_rate
    chans = device.channels
    # every channel's waveform memory holds the run (refused before allocating)
    memory = generator_memory_problems(tl.run, tl.n_samples, device)
    if memory:
        raise SynthesisError(memory)
    # length: the timeline plus the delay alignment, then the generators'
    # minimum length and granularity
    n_min, gran = device.min_length, device.granularity
    n = device.padded_samples(tl.n_samples)
    shifts = device.shifts

    # What each channel plays is collected as events (start, stop, values,
    # "add"/"set"), in time order, then streamed out in cache-sized chunks
    # straight into the output arrays (see _stream): long runs never hold a
    # second full-length copy of any output.
    events: dict[str, list] = {name: [] for name in chans}
    dc: dict[str, float] = {}
    idle_of: dict[str, float] = {}
    for c in device.couplings:
        idle_of.setdefault(c.barrier, c.idle_voltage)
    for name, c in chans.items():
        if c.kind == "gate":
            dc[name] = idle_of.get(name, 0.0) if c.bias_tee > 0 else 0.0

    own: dict[str, np.ndarray] = {}

    def burst(s: Slot, a: int, b: int) -> dict:
        if s.n == 0:
            return {}
        q = s.qubits[0]
        dot = device.dots[q]
        line = chans[dot.drive.line]
        f_if = device.larmor(q) - line.lo
        phi = s.play_phase if precession_sign(dot.g) > 0 else math.pi - s.play_phase
        # a detuned burst (rot ... detuning=): the tone runs at IF + Δ from the
        # burst's start, its phase there still referred to the dot's frame
        det = burst_detuning(s)
        shape = analog.tone_shape(s.burst.envelope, f_if + det, dt, analog.rc_tau(line.rise_time))
        amp = s.burst.amplitude * complex(math.cos(phi + 2 * math.pi * f_if * a * dt),
                                          math.sin(phi + 2 * math.pi * f_if * a * dt))
        # kept as (amplitude, shared cached shape): no per-burst array
        events[line.name].append((a, b, (amp, shape), "add"))
        if per_dot:
            own.setdefault(q, np.zeros(n, dtype=complex))[a:b] += amp * shape
        params = {"angle_rad": s.burst.angle, "axis_phase_rad": s.burst.phase,
                  "play_phase_rad": s.play_phase, "amplitude_V": s.burst.amplitude,
                  "shape": s.burst.shape, "if_Hz": f_if, "larmor_Hz": device.larmor(q)}
        if isinstance(s.info, BurstInfo):
            params["frame_rad"] = s.info.frame
        if det:
            params["detuning_Hz"] = det
        return params

    def exchange(s: Slot, a: int, b: int) -> dict:
        d = s.exchange
        c = device.coupling(*s.qubits)
        events[c.barrier].append((a, b, d.samples(), "set"))
        for dd, offset in c.detune:
            events[device.dots[dd].plunger].append((a, b, float(offset), "add"))
        info = s.info
        return {"level_V": d.level, "idle_V": d.idle, "j_peak_Hz": d.j_peak,
                "exchange_integral": d.integral, "target_integral": d.target,
                "pulse_samples": d.n, "settle_before": d.pre, "settle_after": d.post,
                "frame_updates_rad": dict(info.frame_updates),
                "frame_fidelity": info.frame_fidelity,
                "zeeman_difference_Hz": info.zeeman_difference_Hz,
                **({"conditional_phase_rad": d.angle, "shape": "hann"} if d.window else {})}

    def readout(s: Slot, a: int, b: int) -> dict:
        events[device.readout.marker].append((a, b, 1.0, "set"))
        return {}

    def trigger(s: Slot, a: int, b: int) -> dict:
        w = int(math.ceil(TRIGGER_WIDTH / dt - 1e-9))
        events[device.readout.trigger_marker].append((a, min(a + w, n), 1.0, "set"))
        return {"label": s.step.label, "width_s": w * dt}

    # voltage points: each move sets every point channel for its ramp, then
    # holds the new level up to the next move (or the end); levels at rest
    # are the channel's baseline and need no event
    moves = [s for s in tl.slots if s.kind == "move"]
    next_move = {id(s): (moves[i + 1].start_sample if i + 1 < len(moves) else n)
                 for i, s in enumerate(moves)}

    def level(s: Slot, a: int, b: int) -> dict:
        before, after = dict(s.info.before), dict(s.info.after)
        stop = next_move[id(s)]
        for ch, v in after.items():
            v0, rest = before[ch], device.rest_level(ch)
            if b > a and not (v0 == v == rest):
                k = np.arange(b - a)
                events[ch].append((a, b, v0 + (v - v0) * (k + 0.5) / (b - a), "set"))
            if v != rest and stop > b:
                events[ch].append((b, stop, float(v), "set"))
        return {"point": s.info.point, "ramp_s": (b - a) * dt, "levels_V": after}

    def frame(s: Slot, a: int, b: int) -> dict:
        return {"angle_rad": s.step.angle, "frame_rad": s.info.frame}

    handlers = {"burst": burst, "exchange": exchange, "readout": readout, "trigger": trigger,
                "frame": frame, "level": level, "time": lambda s, a, b: {}}
    records: list[StepRecord] = []
    texts: dict = {}          # repeated steps share their source text and channel list
    chan_of: dict = {}
    for i, s in enumerate(tl.slots):
        a, b = s.start_sample, s.end_sample
        st = texts.get(s.span)
        if st is None:
            st = texts[s.span] = _slot_text(s)
        src, text = st
        ch_list = chan_of.get(s.resources)
        if ch_list is None:
            ch_list = chan_of[s.resources] = _slot_channels(s, device)
        params = handlers[SLOT_RENDER[s.kind]](s, a, b)
        if isinstance(s.info, InsertedInfo) and s.info.reason:
            params["reason"] = s.info.reason
        records.append(StepRecord(len(records), s.kind, s.qubits, a, b, ch_list, src, text, params))
    if n > tl.n_samples:
        reason = f"generator minimum length {n_min} and granularity {gran} samples"
        if device.alignment:
            reason = (f"alignment of the channels' delays ({device.alignment} samples), "
                      + reason)
        records.append(StepRecord(len(records), "pad", (), tl.n_samples, n, tuple(chans), "", "",
                                  {"reason": reason}))
    # each channel plays its events later by its shift, so that every
    # channel's pulses reach the sample together (Device.shifts)
    for name, sh in shifts.items():
        if sh:
            events[name] = [(a + sh, b + sh, v, mode) for a, b, v, mode in events[name]]

    outputs: dict[str, Output] = {}
    problems: list[Problem] = []

    def fail_at(name: str, ch, k: int, v: float) -> None:
        top = analog.top_voltage(ch.v_min, ch.v_max, ch.bits)
        k -= shifts.get(ch.name, 0)           # the timeline's sample
        slot = _writer(tl, k, ch.name, device)
        where = (f"during the {slot.kind} step at {slot.span}" if slot is not None and slot.span
                 else "outside any step")
        problems.append(Problem(
            f"output '{name}' would need {fq(float(v), VOLTAGE)} at t = {fq(k * dt, TIME)} "
            f"(sample {k}), {where}; the channel plays {fq(ch.v_min, VOLTAGE)} to "
            f"{fq(top, VOLTAGE)}", slot.span if slot is not None else None,
            "lower the amplitude or lengthen the step; nothing is clipped",
            read_source_line(slot.span.file, slot.span.line) if slot is not None and slot.span
            else "", slot.via if slot is not None else ()))

    def add_analog(name: str, ch, evs: list, take, baseline: float, dc_level: float,
                   tau_pre: float) -> None:
        q = analog.lsb(ch.v_min, ch.v_max, ch.bits)
        if not evs and tau_pre <= 0:     # a constant output (an idle gate): stored once
            v0 = baseline - dc_level
            top = analog.top_voltage(ch.v_min, ch.v_max, ch.bits)
            if not (ch.v_min - q / 2 <= v0 <= top + q / 2):
                fail_at(name, ch, 0, v0)
                return
            c1, v1 = analog.quantise(np.array([v0]), ch.v_min, ch.v_max, ch.bits)
            outputs[name] = Output(name, ch.name, ch.kind, np.broadcast_to(v1[:1], (n,)),
                                   np.broadcast_to(c1[:1], (n,)),
                                   np.broadcast_to(np.array([v0]), (n,)), dc_level, q, ch.v_min)
            return
        got = _stream(n, evs, take, baseline, dc_level, ch, tau_pre, dt, keep_ideal)
        if isinstance(got[0], int):
            fail_at(name, ch, *got)
            return
        ideal, codes = got
        outputs[name] = Output(name, ch.name, ch.kind, None, codes, ideal, dc_level, q, ch.v_min)

    for name, ch in chans.items():
        if ch.kind == "iq":
            mx = ch.mixer
            if mx is not None and mixer_correction and not mx.ideal:
                # pre-distorted for the mixer (analog.mixer_predistort): linear
                # in the bursts, the offsets as the baseline
                t_i = math.tan(mx.phase_skew)
                k_q = 1.0 / (mx.gain_imbalance * math.cos(mx.phase_skew))
                add_analog(f"{name}.I", ch, events[name], lambda z: z.real + t_i * z.imag,
                           -mx.offset_i, 0.0, 0.0)
                add_analog(f"{name}.Q", ch, events[name], lambda z: z.imag * k_q,
                           -mx.offset_q, 0.0, 0.0)
            else:
                add_analog(f"{name}.I", ch, events[name], np.real, 0.0, 0.0, 0.0)
                add_analog(f"{name}.Q", ch, events[name], np.imag, 0.0, 0.0, 0.0)
        elif ch.kind == "gate":
            tau_pre = ch.bias_tee if predistort and ch.bias_tee > 0 else 0.0
            add_analog(name, ch, events[name], None, idle_of.get(name, 0.0), dc[name], tau_pre)
        else:
            if not events[name]:
                m = np.broadcast_to(np.zeros(1), (n,))
                outputs[name] = Output(name, name, "marker", m, None, m, 0.0, 0.0)
            else:
                marks = np.zeros(n, dtype=np.uint8)
                for a, b, _, _ in events[name]:
                    marks[a:b] = 1
                outputs[name] = Output(name, name, "marker", None, None, None, 0.0, 0.0,
                                       marks=marks)
    if problems:
        raise SynthesisError(problems)
    for key, o in outputs.items():
        c = chans[o.channel]
        if shifts[o.channel] or c.delay:
            outputs[key] = dataclasses.replace(o, shift=shifts[o.channel], delay=c.delay)
    warnings = tuple(w.render() for w in tl.warnings)
    return Waveforms(tl.run.index, tl.run.sweep, fs, n, outputs, tuple(records), dict(tl.frames),
                     {q: device.larmor(q) for q in device.dots}, warnings, own,
                     tl.run.sweep_text())
