"""The physical rules a device must keep, written once.

:func:`validate` checks a :class:`~compiler.device.model.Device` and returns
one :class:`Finding` per rule broken: the key of the value it is about (its
path in the device file, ``dots.A.t2``, ``couplings[0].pulse_voltage``), the
message, a hint and the severity (``"error"``: the device cannot be used;
``"warning"``: legal but physically doubtful).  The device loader maps each
key to its place in the YAML file; a sweep calls :func:`validate` for every
device setting it builds (:mod:`compiler.sweep.params`).

What the file reader checks itself (units, finite and positive numbers,
known keys, channel kinds, a valid exchange model) is about reading the
file; the rules here are about values that are each legal but do not fit
together, and about the values a sweep may change.

A value that could not be read is NaN in a partly read device: every rule
is written so that NaN breaks none (the reader has reported it already).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from .. import physics, readout
from ..units import (ANGLE, FIELD, FREQ_PER_VOLT, FREQUENCY, TEMPERATURE, TIME, VOLTAGE,
                     format_distinct, format_quantity)
from .exchange import Hubbard
from .model import MAX_DELAY_SAMPLES, Device

ERROR, WARNING = "error", "warning"

IDLE_EXCHANGE_RATIO = 1e-2     # J(idle)/J(pulse) above this is worth a warning
THERMAL_RATIO = 3.0            # h·f_L/(k_B·T) below this: weak spin polarisation
RWA_RATIO = 0.1                # f_Rabi(full scale)/f_L above this: RWA doubtful
HUBBARD_T_RATIO = 0.2          # t/(U − |ε|) above this: 4t²U/(U²−ε²) unreliable
# A calibrated I/Q mixer is a few percent and a few degrees from ideal
# (common practice, no source); far beyond is more likely a typing mistake.
MIXER_GAIN_WARN = (0.5, 2.0)   # gain_imbalance outside this: warning
MIXER_SKEW_WARN = math.radians(30.0)   # |phase_skew| above this: warning
DELAY_ROUND_WARN = 0.1         # delay off the sample grid by more than this fraction: warning
REL_TOL = 1e-12                # relative slack on the coherence-time orderings


@dataclass(frozen=True)
class Finding:
    """One broken rule."""

    key: str                   # device-file path of the value: "dots.A.t2"
    rule: str                  # which rule: "t2>2t1"
    message: str
    hint: str = ""
    severity: str = ERROR      # "error" or "warning"
    near: tuple[str, ...] = ()  # other keys to point at when ``key`` is not in the file
    subject: str = ""          # the dot ("A") or pair ("A-B") it is about, as a sweep names it

    @property
    def id(self) -> str:
        """Stable identity of the finding in a sweep's names (``A.t2>2t1``,
        ``A-B.pulse<=idle``, ``field``), e.g. to tell the findings of a swept
        device from those of the nominal one."""
        return f"{self.subject}.{self.rule}" if self.subject else self.rule


def _q(x: float, dim) -> str:
    return format_quantity(x, dim, 6)


def _q2(a: float, b: float, dim) -> tuple[str, str]:
    """Two values compared in a message, with the digits that tell them apart."""
    return format_distinct(a, b, dim, 6)


def validate(device: Device) -> list[Finding]:
    """Every rule ``device`` breaks, errors and warnings, in file order
    (top-level values, dots, rotation, couplings).

    Rules (errors): field and temperature above zero; per dot a non-zero g,
    positive T1, T2, T2* with T2* ≤ T2 ≤ 2·T1 (Bloch relaxation; common
    practice, no source), a positive drive calibration and a Larmor
    frequency inside its line's LO + IF band; the rotation amplitude or
    duration positive and playable; per coupling a valid exchange model with
    J > 0, a non-negative charge noise, idle and pulse levels inside the
    barrier channel's range and the model's range, the pulse above idle, and
    plunger offsets within the plunger's range.

    Warnings: the Rabi frequency at full scale above ``RWA_RATIO``·f_L (the
    rotating-wave approximation becomes doubtful), the Zeeman energy below
    ``THERMAL_RATIO``·k_B·T (poor initialisation), the exchange at idle above
    ``IDLE_EXCHANGE_RATIO`` of the exchange at the pulse level, and a Hubbard
    tunnel coupling not small against U − |ε| (all common practice, no
    source).
    """
    out: list[Finding] = []
    add = out.append
    if device.field <= 0:
        add(Finding("field", "field", f"field = {_q(device.field, FIELD)} is not above zero",
                    "the Zeeman splitting needs a field"))
    if device.temperature <= 0:
        add(Finding("temperature", "temperature", f"temperature = "
                    f"{_q(device.temperature, TEMPERATURE)} is not above zero",
                    "give a temperature above 0 K"))
    for name, ch in device.channels.items():
        _channel_rules(device, name, ch, add)
    for q, d in device.dots.items():
        _dot_rules(device, q, d, lambda f, q=q: add(replace(f, subject=q)))
    _rotation_rules(device, add)
    for i, c in enumerate(device.couplings):
        _coupling_rules(device, i, c,
                        lambda f, c=c: add(replace(f, subject=f"{c.dots[0]}-{c.dots[1]}")))
    return out


def _channel_rules(device: Device, name: str, ch, add) -> None:
    """Memory, delay and mixer of one channel."""
    p = f"channels.{name}"
    if ch.memory and ch.memory < ch.min_length:
        add(Finding(f"{p}.memory", "memory<min_length",
                    f"{p}.memory = {ch.memory:,} samples is below the channel's min_length "
                    f"{ch.min_length:,}", "give the generator's real waveform memory"))
    if ch.delay > 0 and ch.sample_rate > 0:
        exact = ch.delay * ch.sample_rate
        if exact > MAX_DELAY_SAMPLES:
            add(Finding(f"{p}.delay", "delay", f"{p}.delay = {_q(ch.delay, TIME)} is "
                        f"{exact:,.0f} samples, above {MAX_DELAY_SAMPLES:,}",
                        "cable and filter delays are nanoseconds to microseconds; check the unit"))
        elif abs(exact - round(exact)) > DELAY_ROUND_WARN:
            add(Finding(f"{p}.delay", "delay-grid",
                        f"{p}.delay = {_q(ch.delay, TIME)} is {exact:.3g} samples; it is "
                        f"applied as {round(exact)} (pulses meet within "
                        f"{_q(abs(exact - round(exact)) / ch.sample_rate, TIME)})",
                        "outputs are shifted by whole samples only", WARNING))
    mx = ch.mixer
    if mx is None:
        return
    if not abs(mx.phase_skew) < math.pi / 2:
        add(Finding(f"{p}.mixer.phase_skew", "mixer.skew",
                    f"{p}.mixer.phase_skew = {_q(mx.phase_skew, ANGLE)} is not within ±90°",
                    "the skew is the deviation from 90° between I and Q: a few degrees",
                    near=(f"{p}.mixer",)))
    elif abs(mx.phase_skew) > MIXER_SKEW_WARN:
        add(Finding(f"{p}.mixer.phase_skew", "mixer.skew-large",
                    f"{p}.mixer.phase_skew = {_q(mx.phase_skew, ANGLE)} is far from a "
                    "calibrated mixer's few degrees", "check the unit (deg or rad)", WARNING,
                    near=(f"{p}.mixer",)))
    if mx.gain_imbalance > 0 and not (MIXER_GAIN_WARN[0] <= mx.gain_imbalance
                                      <= MIXER_GAIN_WARN[1]):
        add(Finding(f"{p}.mixer.gain_imbalance", "mixer.gain-large",
                    f"{p}.mixer.gain_imbalance = {mx.gain_imbalance:g} is far from a "
                    "calibrated mixer's few percent",
                    "it is Q's gain over I's, a ratio near 1 (not in dB)", WARNING,
                    near=(f"{p}.mixer",)))
    for key, off in (("offset_i", mx.offset_i), ("offset_q", mx.offset_q)):
        if abs(off) > ch.v_max - ch.v_min:
            add(Finding(f"{p}.mixer.{key}", f"mixer.{key}",
                        f"{p}.mixer.{key} = {_q(off, VOLTAGE)} is larger than the channel's "
                        f"whole range [{_q(ch.v_min, VOLTAGE)}, {_q(ch.v_max, VOLTAGE)}]",
                        "the offsets a mixer needs are millivolts; check the unit",
                        near=(f"{p}.mixer",)))


def _dot_rules(device: Device, q: str, d, add) -> None:
    p = f"dots.{q}"
    _readout_rules(device, q, d, add)
    if d.g == 0:
        add(Finding(f"{p}.g", "g", f"{p}.g is zero", "a dot needs a non-zero g-factor"))
    for attr in ("t1", "t2", "t2_star"):
        v = getattr(d, attr)
        if v <= 0:
            add(Finding(f"{p}.{attr}", attr, f"{p}.{attr} = {_q(v, TIME)} is not above "
                        "zero", "coherence times are positive"))
    if d.t1 > 0 and d.t2 > 2 * d.t1 * (1 + REL_TOL):
        shown = _q2(d.t2, 2 * d.t1, TIME)
        add(Finding(f"{p}.t2", "t2>2t1", f"{p}.t2 = {shown[0]} is longer than 2·T1 = "
                    f"{shown[1]}",
                    f"T2 cannot exceed 2·T1: check the units, or keep {q}.t2 at most 2·{q}.t1"))
    if d.t2 > 0 and d.t2_star > d.t2 * (1 + REL_TOL):
        shown = _q2(d.t2_star, d.t2, TIME)
        add(Finding(f"{p}.t2_star", "t2*>t2", f"{p}.t2_star = {shown[0]} is longer "
                    f"than the Hahn-echo T2 = {shown[1]}",
                    f"an echo only removes dephasing, so T2* ≤ T2: keep {q}.t2_star at most "
                    f"{q}.t2"))
    rabi_keys = (f"{p}.drive.b1_per_volt", f"{p}.drive")
    if d.drive.rabi_per_volt <= 0:
        add(Finding(f"{p}.drive.rabi_per_volt", "rabi", f"{p}.drive.rabi_per_volt = "
                    f"{_q(d.drive.rabi_per_volt, FREQ_PER_VOLT)} is not above zero",
                    "the drive calibration is positive", near=rabi_keys))
    line = device.channels.get(d.drive.line)
    if line is None or line.kind != "iq" or d.g == 0 or not device.field > 0:
        return
    f_l = physics.larmor_frequency(d.g, device.field)
    what = f"|g| = {abs(d.g):g}"
    if d.spin_valley:
        if not (math.isfinite(device.field) and math.isfinite(device.field_tilt)):
            return
        lad = device.ladders[q]
        f_l = lad.larmor
        what = "qubit transition of the spin–valley levels"
        _valley_rules(device, q, lad, add)
    need = f_l - line.lo
    if need < line.if_min or need > line.if_max:
        add(Finding(f"{p}.drive.line", "larmor",
                    f"{p}: Larmor frequency {_q(f_l, FREQUENCY)} ({what} at "
                    f"{format_quantity(device.field, FIELD)}) is not reachable on line "
                    f"'{line.name}': LO {_q(line.lo, FREQUENCY)} + IF band "
                    f"[{_q(line.if_min, FREQUENCY)}, {_q(line.if_max, FREQUENCY)}] covers "
                    f"{_q(line.lo + line.if_min, FREQUENCY)} to "
                    f"{_q(line.lo + line.if_max, FREQUENCY)}",
                    f"it needs IF = f_L − LO = {_q(need, FREQUENCY)}; move the LO, widen "
                    "if_band, or check g and field"))
    full = d.drive.rabi_per_volt * max(abs(line.v_min), abs(line.v_max))
    if full > RWA_RATIO * f_l:
        shown = _q2(full, RWA_RATIO * f_l, FREQUENCY)
        add(Finding(f"{p}.drive.rabi_per_volt", "rwa",
                    f"{p}.drive: Rabi frequency at full scale {shown[0]} exceeds "
                    f"{RWA_RATIO:g}·f_L = {shown[1]}",
                    "the rotating-wave approximation becomes doubtful at strong drive",
                    WARNING, near=rabi_keys))
    if device.temperature > 0 and \
            physics.H * f_l < THERMAL_RATIO * physics.K_B * device.temperature:
        add(Finding(p, "thermal", f"{p}: Zeeman energy h·f_L = h·{_q(f_l, FREQUENCY)} is below "
                    f"{THERMAL_RATIO:g}·k_B·T at {_q(device.temperature, TEMPERATURE)}",
                    "thermal initialisation and spin-to-charge readout will be poor; raise the "
                    "field or lower the temperature", WARNING))


def _valley_rules(device: Device, q: str, lad, add) -> None:
    """A spin–valley dot: a qubit level (nearly) degenerate with another level,
    and the field near the relaxation hotspot E_Z = E_v (warnings)."""
    from . import levels as lv
    p = f"dots.{q}"
    if lad.degenerate:
        add(Finding(p, "valley-degenerate",
                    f"{p}: qubit level(s) {lad.qubit} (nearly) degenerate with level(s) "
                    f"{', '.join(map(str, lad.degenerate))} (valley degeneracy)",
                    "lift it: tilt the field out of the plane (field_tilt) so the valley "
                    "g-factor splits the valleys, or give a valley_splitting", WARNING))
    if lv.near_hotspot(lad, device.field):
        add(Finding(p, "hotspot",
                    f"{p}: the field {format_quantity(device.field, FIELD)} is near the "
                    f"spin–valley hotspot at {format_quantity(lad.hotspot_field, FIELD)} "
                    f"(Zeeman energy {format_quantity(lad.zeeman, FREQUENCY, 5)} ≈ valley "
                    "splitting)",
                    "spin relaxation is fast where E_Z = E_v (Yang et al., Nat. Commun. 4, "
                    "2069 (2013)); move the field or the valley splitting away from it",
                    WARNING))


def _readout_rules(device: Device, q: str, d, add) -> None:
    """A readout whose two fidelities add up to 1 or less records nothing
    about the state (visibility F_up + F_down − 1 ≤ 0; common practice, no
    source)."""
    if d.readout is None or not d.t1 > 0:
        return
    p = f"dots.{q}.readout"
    f_up, f_down = readout.dot_fidelities(device, q)
    if f_up + f_down <= 1.0:
        derived = d.readout.tunnel_out is not None
        add(Finding(p, "readout", f"{p}: fidelity_up + fidelity_down = {f_up + f_down:.4g}"
                    + (" (derived from the tunnel-out rate)" if derived else "")
                    + " is not above 1: the readout records nothing about the spin",
                    "check the values; a useful readout has a visibility F_up + F_down − 1 > 0"
                    + ("; lengthen integration_time or raise tunnel_out" if derived else ""),
                    WARNING))


def _rotation_rules(device: Device, add) -> None:
    rot = device.rotation
    if rot.mode == "amplitude":
        if rot.amplitude <= 0:
            add(Finding("rotation.amplitude", "rotation.amplitude", f"rotation.amplitude = "
                        f"{_q(rot.amplitude, VOLTAGE)} is not above zero",
                        "give a positive amplitude", near=("rotation",)))
        for q, d in device.dots.items():
            line = device.channels.get(d.drive.line)
            if line is None or line.kind != "iq":
                continue
            top = max(abs(line.v_min), abs(line.v_max))
            if rot.amplitude > top:
                add(Finding("rotation.amplitude", "rotation.amplitude>range",
                            f"rotation.amplitude = {_q(rot.amplitude, VOLTAGE)} is above the "
                            f"range of drive line '{line.name}' (dot {q})",
                            f"keep it within ±{_q(top, VOLTAGE)} (and within your lab's limits)",
                            near=("rotation",)))
                break
    else:
        if rot.duration <= 0:
            add(Finding("rotation.duration", "rotation.duration", f"rotation.duration = "
                        f"{_q(rot.duration, TIME)} is not above zero",
                        "give a positive burst length", near=("rotation",)))
        elif rot.shape == "flattop" and 2 * rot.edge > rot.duration:
            add(Finding("rotation.edge", "rotation.edge", f"rotation.duration = "
                        f"{_q(rot.duration, TIME)} is shorter than the two flat-top edges "
                        f"({_q(2 * rot.edge, TIME)})",
                        "keep rotation.duration at least twice rotation.edge",
                        near=("rotation.duration", "rotation")))


def _coupling_rules(device: Device, i: int, c, add) -> None:
    p = f"couplings[{i}]"
    pair = f"{c.dots[0]}-{c.dots[1]}"
    m = c.exchange
    try:
        m.check()
    except ValueError as e:
        add(Finding(f"{p}.exchange", "j_scale", f"{p} ({pair}): {e}",
                    "keep j_scale above 0" if not m.positive() else ""))
        valid = False
    else:
        valid = True
    if c.charge_noise < 0:
        add(Finding(f"{p}.charge_noise", "charge_noise", f"{p}.charge_noise = "
                    f"{_q(c.charge_noise, VOLTAGE)} is negative",
                    "an rms value is zero or positive"))
    barrier = device.channels.get(c.barrier)
    if barrier is not None and barrier.kind != "gate":
        barrier = None
    lo, hi = m.v_range() if valid else (float("-inf"), float("inf"))
    for key, v in (("idle_voltage", c.idle_voltage), ("pulse_voltage", c.pulse_voltage)):
        if v is None:
            continue
        if barrier is not None and (v < barrier.v_min or v > barrier.v_max):
            add(Finding(f"{p}.{key}", f"{key}.range",
                        f"{p}.{key} = {_q(v, VOLTAGE)} is outside the range of barrier channel "
                        f"'{barrier.name}' [{_q(barrier.v_min, VOLTAGE)}, "
                        f"{_q(barrier.v_max, VOLTAGE)}]",
                        "keep it within the channel range (and your lab's limits)",
                        near=(p,)))
        elif v < lo or v > hi:
            add(Finding(f"{p}.{key}", f"{key}.table",
                        f"{p}.{key} = {_q(v, VOLTAGE)} is outside the exchange table "
                        f"[{_q(lo, VOLTAGE)}, {_q(hi, VOLTAGE)}]",
                        "the table is never extrapolated: stay inside it or add a "
                        "calibration point", near=(p,)))
    pulse, idle = c.pulse_voltage, c.idle_voltage
    if pulse is not None and pulse <= idle:
        shown = _q2(pulse, idle, VOLTAGE)
        add(Finding(f"{p}.pulse_voltage", "pulse<=idle",
                    f"{p}.pulse_voltage = {shown[0]} is not above idle_voltage = {shown[1]}",
                    "J rises with barrier voltage: the exchange pulse must go above idle"))
    elif pulse is not None and valid:
        try:
            j_idle = float(m.j(idle))
            j_pulse = float(m.j(pulse))
        except ValueError:
            pass  # outside the model's range: reported above
        else:
            if j_idle > IDLE_EXCHANGE_RATIO * j_pulse:
                add(Finding(f"{p}.idle_voltage", "idle-exchange",
                            f"{p}: exchange at idle {_q(j_idle, FREQUENCY)} is "
                            f"{j_idle / j_pulse:.2g} of the exchange at the pulse level "
                            f"{_q(j_pulse, FREQUENCY)}",
                            "the dots stay coupled between gates; lower idle_voltage", WARNING,
                            near=(f"{p}.pulse_voltage", p)))
            if isinstance(m, Hubbard):
                t = m.tunnel(pulse)
                if t > HUBBARD_T_RATIO * (m.u - abs(m.detuning)):
                    add(Finding(f"{p}.pulse_voltage", "hubbard",
                                f"{p}: tunnel coupling t/h = {_q(t, FREQUENCY)} at the pulse "
                                "level is not small against U − |ε|",
                                "J = 4t²U/(U²−ε²) holds only for t ≪ U − |ε|", WARNING))
    plungers = {d.plunger: name for name, d in device.dots.items()}
    for nm, off in c.detune:
        dot = device.dots.get(nm)
        pl = device.channels.get(dot.plunger) if dot is not None else None
        if pl is not None and plungers.get(pl.name) == nm and abs(off) > pl.v_max - pl.v_min:
            add(Finding(f"{p}.detune.{nm}", f"detune.{nm}",
                        f"{p}.detune.{nm}: offset {_q(off, VOLTAGE)} is larger than the whole "
                        f"range of plunger '{pl.name}'", near=(f"{p}.detune", p)))


def errors(device: Device) -> list[Finding]:
    """The findings of :func:`validate` that make ``device`` unusable."""
    return [f for f in validate(device) if f.severity == ERROR]


def warnings(device: Device) -> list[Finding]:
    """The findings of :func:`validate` that are legal but doubtful."""
    return [f for f in validate(device) if f.severity == WARNING]
