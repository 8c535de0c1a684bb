"""What a shared microwave line does to the other dots on it, found before
anything is simulated (`dotseq check`, `compile`, the sweep plan).

* Crosstalk: a burst designed for one dot also drives every other dot on
  its line, off resonance by the difference of their Larmor frequencies.
  The probability that it flips such a dot is computed from the burst's own
  sampled envelope by an exact two-level propagation at that detuning
  (:func:`compiler.pulses.spectator_flip`; for a square burst it is the
  off-resonant Rabi formula).  Above :data:`CROSSTALK_WARN` it is a warning
  with the numbers.  Dots driven in the same ``together`` group are left
  out (they are driven on purpose).
* Equal or near-equal frequencies: two dots in use on one line whose
  Larmor frequencies differ by less than the spectral width of the
  shortest burst on that line (1 / its length) cannot be addressed
  separately: a warning.
* Images: an I/Q mixer that is not perfectly balanced also plays each
  burst's mirror image at LO − IF; when that lands within the burst's
  spectral width (1 / its length) of a dot on the line, a warning (the
  ``mixer`` calibration of the line pre-distorts the image away as far as
  it holds; :mod:`compiler.analog`).
* Summed tones: bursts on one line that overlap in time add up
  (multi-tone); the peak of the I and Q sums must stay within the line's
  range.  This is the same sum synthesis plays (:mod:`compiler.synth.render`),
  computed here for the overlapping stretches only, so `check` refuses what
  `compile` would.
"""

from __future__ import annotations

import math

import numpy as np

from .. import analog
from ..device.model import Device
from ..errors import Problem, read_source_line
from ..physics import precession_sign
from ..pulses import spectator_flip
from ..schedule.timeline import Slot, Timeline, Warning_, burst_detuning
from ..units import FREQUENCY, TIME, VOLTAGE, format_quantity as fq

# Warn when a burst flips another dot on its line with at least this
# probability (common practice, no source: an error per gate above the
# 1e-3 level matters for any two-qubit benchmark).
CROSSTALK_WARN = 1e-3


def _line_of(slot: Slot, device: Device) -> str:
    return device.dots[slot.qubits[0]].drive.line


def _bursts(tl: Timeline):
    return [s for s in tl.slots if s.burst is not None and s.n > 0]


def _what(slot: Slot) -> str:
    if slot.step is None:
        return f"{slot.kind} burst on {slot.qubits[0]}"
    return f"burst on {slot.qubits[0]}"


def _driven_alongside(bursts: list[Slot], device: Device) -> list[set]:
    """For each burst, the dots driven on its line while it plays (a sweep
    over the bursts of each line in start order: linear in their number
    plus the overlaps)."""
    busy = [set() for _ in bursts]
    by_line: dict[str, list[int]] = {}
    for i, s in enumerate(bursts):
        by_line.setdefault(_line_of(s, device), []).append(i)
    for idx in by_line.values():
        idx.sort(key=lambda i: bursts[i].start_sample)
        for k, i in enumerate(idx):
            end = bursts[i].end_sample
            for j in idx[k + 1:]:
                if bursts[j].start_sample >= end:
                    break
                busy[i].add(bursts[j].qubits[0])
                busy[j].add(bursts[i].qubits[0])
    return busy


def crosstalk_warnings(tl: Timeline, device: Device) -> list[Warning_]:
    """One warning per (statement, other dot) whose flip probability exceeds
    CROSSTALK_WARN; severity is the probability."""
    out: dict[tuple, Warning_] = {}
    bursts = _bursts(tl)
    # dots driven at the same time on a line are driven on purpose
    alongside = _driven_alongside(bursts, device)
    flips: dict[tuple, float] = {}     # repeated bursts share their design object
    for s, busy in zip(bursts, alongside):
        q = s.qubits[0]
        line = _line_of(s, device)
        f_q = device.larmor(q) + burst_detuning(s)
        for o, dot in device.dots.items():
            if o == q or o in busy or dot.drive.line != line:
                continue
            delta = f_q - device.larmor(o)
            fk = (id(s.burst), o, f_q)
            p = flips.get(fk)
            if p is None:
                p = flips[fk] = spectator_flip(s.burst, dot.drive.rabi_per_volt, delta, s.dt,
                                               precession_sign(dot.g))
            if p <= CROSSTALK_WARN:
                continue
            key = (s.span, o)
            if key in out and out[key].severity >= p:
                continue
            rabi = dot.drive.rabi_per_volt * s.burst.amplitude
            out[key] = Warning_(
                f"this {_what(s)} also flips {o}, {fq(abs(delta), FREQUENCY)} away on line "
                f"'{line}', with probability {p:.2g} (a {s.burst.shape} burst of "
                f"{fq(s.duration, TIME)} at {fq(rabi, FREQUENCY)} Rabi frequency on {o}; warned "
                f"above {CROSSTALK_WARN:g}): lengthen the bursts (a narrower spectrum), use a "
                "smoother shape, or set the dots further apart in frequency",
                s.span, s.via, f"crosstalk:{s.span}:{o}", p)
    return list(out.values())


def near_equal_warnings(tl: Timeline, device: Device) -> list[Warning_]:
    """Dots in use on one line closer in frequency than the spectral width
    of the shortest burst on the line."""
    used = {q for s in tl.slots for q in s.qubits}
    shortest: dict[str, Slot] = {}
    for s in _bursts(tl):
        line = _line_of(s, device)
        if line not in shortest or s.n < shortest[line].n:
            shortest[line] = s
    out = []
    names = [q for q in device.dots if q in used]
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            line = device.dots[a].drive.line
            if device.dots[b].drive.line != line or line not in shortest:
                continue
            df = abs(device.larmor(a) - device.larmor(b))
            s = shortest[line]
            width = 1.0 / s.duration
            if df >= width:
                continue
            if df == 0:
                text = (f"{a} and {b} have the same Larmor frequency "
                        f"{fq(device.larmor(a), FREQUENCY, 7)} on line '{line}'")
            else:
                text = (f"{a} and {b} on line '{line}' are only {fq(df, FREQUENCY)} apart in "
                        f"Larmor frequency")
            out.append(Warning_(
                f"{text}, within the spectral width {fq(width, FREQUENCY)} of the shortest "
                f"burst on the line ({fq(s.duration, TIME)}): a burst on one drives the other; "
                "give the dots different g-factors or fields, separate lines, or much longer "
                "bursts", None, (), f"near-equal:{line}:{a}:{b}", 1.0 - df / width))
    return out


def summed_tone_problems(tl: Timeline, device: Device) -> list[Problem]:
    """Bursts overlapping on one line: the peak of the I and Q sums against
    the line's range (as synthesis plays them)."""
    problems = []
    by_line: dict[str, list[Slot]] = {}
    for s in _bursts(tl):
        by_line.setdefault(_line_of(s, device), []).append(s)
    for line_name, slots in by_line.items():
        slots.sort(key=lambda s: s.start_sample)
        ch = device.channels[line_name]
        top = analog.top_voltage(ch.v_min, ch.v_max, ch.bits)
        q = analog.lsb(ch.v_min, ch.v_max, ch.bits)
        tau = analog.rc_tau(ch.rise_time)
        i = 0
        while i < len(slots):
            group = [slots[i]]
            end = slots[i].end_sample
            j = i + 1
            while j < len(slots) and slots[j].start_sample < end:
                group.append(slots[j])
                end = max(end, slots[j].end_sample)
                j += 1
            i = j
            if len(group) < 2:
                continue
            a0 = group[0].start_sample
            total = np.zeros(end - a0, dtype=complex)
            for s in group:
                dot = device.dots[s.qubits[0]]
                f_if = device.larmor(s.qubits[0]) - ch.lo
                phi = s.play_phase if precession_sign(dot.g) > 0 else math.pi - s.play_phase
                amp = s.burst.amplitude * complex(
                    math.cos(phi + 2 * math.pi * f_if * s.start_sample * s.dt),
                    math.sin(phi + 2 * math.pi * f_if * s.start_sample * s.dt))
                shape = analog.tone_shape(s.burst.envelope, f_if, s.dt, tau)
                total[s.start_sample - a0:s.end_sample - a0] += amp * shape
            mx = ch.mixer
            if mx is not None and not mx.ideal:      # played pre-distorted (synthesis)
                parts = np.concatenate(analog.mixer_predistort(
                    total, mx.gain_imbalance, mx.phase_skew, mx.offset_i, mx.offset_q))
            else:
                parts = np.concatenate([total.real, total.imag])
            lo, hi = float(parts.min()), float(parts.max())
            if lo >= ch.v_min - q / 2 and hi <= top + q / 2:
                continue
            worst = hi if hi > top + q / 2 else lo
            k = int(np.argmax(np.abs(parts) == abs(worst)) % len(total))
            first = group[0]
            span = first.span
            problems.append(Problem(
                f"the {len(group)} bursts played together on line '{line_name}' "
                f"({', '.join(s.qubits[0] for s in group)}) add up to {fq(worst, VOLTAGE)} at "
                f"t = {fq((a0 + k) * first.dt, TIME)}, beyond the line's range "
                f"{fq(ch.v_min, VOLTAGE)} to {fq(top, VOLTAGE)}",
                span, "lengthen the bursts (duration=...) so each needs less amplitude, or play "
                "them one after the other; nothing is clipped",
                read_source_line(span.file, span.line) if span is not None else "", first.via))
    return problems


def image_frequency(device: Device, dot: str) -> float:
    """Where an I/Q mixer's image of a burst for ``dot`` lands (Hz): the
    tone is at LO + IF, its image at LO − IF (IF = f_L − LO)."""
    line = device.channels[device.dots[dot].drive.line]
    return 2 * line.lo - device.larmor(dot)


def image_warnings(tl: Timeline, device: Device) -> list[Warning_]:
    """One warning per (statement, dot) whose burst's image frequency
    LO − IF lies within the burst's spectral width (1 / its length) of a
    dot on the same line: an imperfect mixer drives that dot there."""
    out: dict[tuple, Warning_] = {}
    for s in _bursts(tl):
        q = s.qubits[0]
        name = _line_of(s, device)
        line = device.channels[name]
        f_img = image_frequency(device, q)
        width = 1.0 / s.duration
        for o, dot in device.dots.items():
            if dot.drive.line != name:
                continue
            df = abs(f_img - device.larmor(o))
            if df >= width:
                continue
            sev = 1.0 - df / width
            key = (s.span, o)
            if key in out and out[key].severity >= sev:
                continue
            mx = line.mixer
            if mx is not None and not mx.ideal:
                ratio = analog.image_ratio(mx.gain_imbalance, mx.phase_skew)
                how = (f"the calibration in channels.{name}.mixer pre-distorts it away as far "
                       f"as it holds (uncorrected it would be "
                       f"{20 * math.log10(ratio) if ratio > 0 else -math.inf:.0f} dB below "
                       "the tone)")
            else:
                how = (f"line '{name}' has no mixer calibration (channels.{name}.mixer), so "
                       "its strength is whatever the mixer's imbalance makes it")
            who = "itself" if o == q else o
            out[key] = Warning_(
                f"the image of this {_what(s)} at LO − IF = {fq(f_img, FREQUENCY, 7)} lies "
                f"{fq(df, FREQUENCY)} from {who} on line '{name}', within the burst's "
                f"spectral width {fq(width, FREQUENCY)}; {how}: move the LO so that no dot "
                "sits at LO − IF, or calibrate the mixer",
                s.span, s.via, f"image:{s.span}:{o}", sev)
    return list(out.values())


def line_warnings(tl: Timeline, device: Device) -> list[Warning_]:
    """Every warning of this module for one timeline."""
    return (crosstalk_warnings(tl, device) + near_equal_warnings(tl, device)
            + image_warnings(tl, device))
