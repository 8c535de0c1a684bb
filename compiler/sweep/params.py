"""The parameters a sweep can vary, and how a value is applied.

Device parameters (names as in the device file, a dot's or a coupling's
setting after its name)::

    field  temperature  rotation.amplitude  rotation.duration
    A.g  A.t1  A.t2  A.t2_star  A.rabi_per_volt
    A-B.j_scale  A-B.j0  A-B.pulse_voltage  A-B.idle_voltage  A-B.charge_noise

A value is applied by building a modified :class:`~compiler.device.model.Device`
with :func:`dataclasses.replace`; both the compiler and the simulator then see
it (the pulses are designed for the modified device).  The physical
constraints the device loader enforces are checked again for every point
(:func:`constraints`).

Sequence parameters are the file's own ``let`` and ``sweep`` names; a value
replaces the definition in the parsed tree, which is then expanded again
(:func:`override`).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

from ..device import exchange as xch
from ..device.loader import RWA_RATIO, THERMAL_RATIO
from ..device.model import Device
from ..errors import UsageError, did_you_mean
from ..expand.evaluate import EvalError, Quantity, evaluate
from ..parse import tree as T
from ..physics import H as PLANCK, K_B
from ..program import Expanded
from ..units import (BASES, FIELD, FREQ_PER_VOLT, FREQUENCY, NONE, TEMPERATURE, TIME, VOLTAGE,
                     Dim, format_distinct, format_quantity)

DOT_ATTRS = {"g": (NONE, "g-factor"), "t1": (TIME, "relaxation time T1"),
             "t2": (TIME, "Hahn-echo T2"), "t2_star": (TIME, "Ramsey T2*"),
             "rabi_per_volt": (FREQ_PER_VOLT, "Rabi frequency per volt of drive")}
PAIR_ATTRS = {"j_scale": (NONE, "factor on the whole J(V) curve"),
              "j0": (FREQUENCY, "J0 of the exponential J = J0·exp(V/v0)"),
              "pulse_voltage": (VOLTAGE, "barrier level during exchange"),
              "idle_voltage": (VOLTAGE, "barrier level between gates"),
              "charge_noise": (VOLTAGE, "rms quasi-static barrier noise")}
PREFIX_DEVICE, PREFIX_FILE = "device.", "file."


@dataclass(frozen=True)
class Param:
    """A sweepable name."""
    name: str              # canonical: field, A.t2, A-B.j_scale, tau
    kind: str              # "device" or "sequence"
    dim: Dim | None        # None: a sequence name whose unit could not be found
    what: str              # what it is, for messages
    nominal: float | None  # the value in the files (first value of a file sweep)
    where: str = ""        # "file:line" of a let/sweep


# ------------------------------------------------------------------ device

def _pair_name(device: Device, c) -> str:
    return f"{c.dots[0]}-{c.dots[1]}"


def device_params(device: Device) -> dict[str, Param]:
    """Every device parameter this device can vary, by canonical name."""
    out: dict[str, Param] = {
        "field": Param("field", "device", FIELD, "magnetic field", device.field),
        "temperature": Param("temperature", "device", TEMPERATURE, "temperature",
                             device.temperature),
    }
    rot = device.rotation
    if rot.mode == "amplitude":
        out["rotation.amplitude"] = Param("rotation.amplitude", "device", VOLTAGE,
                                          "burst amplitude of every rotation", rot.amplitude)
    else:
        out["rotation.duration"] = Param("rotation.duration", "device", TIME,
                                         "burst length of every rotation", rot.duration)
    for q, d in device.dots.items():
        vals = {"g": d.g, "t1": d.t1, "t2": d.t2, "t2_star": d.t2_star,
                "rabi_per_volt": d.drive.rabi_per_volt}
        for attr, (dim, what) in DOT_ATTRS.items():
            out[f"{q}.{attr}"] = Param(f"{q}.{attr}", "device", dim, f"{what} of dot {q}",
                                       vals[attr])
    for c in device.couplings:
        pn = _pair_name(device, c)
        for attr, (dim, what) in PAIR_ATTRS.items():
            if attr == "j0" and c.exchange.kind != "exponential":
                continue
            nominal = {"j_scale": 1.0, "j0": c.exchange.j0, "pulse_voltage": c.pulse_voltage,
                       "idle_voltage": c.idle_voltage, "charge_noise": c.charge_noise}[attr]
            out[f"{pn}.{attr}"] = Param(f"{pn}.{attr}", "device", dim,
                                        f"{what} of the coupling {pn}", nominal)
    return out


def _not_offered(name: str, device: Device) -> str:
    """Why a well-formed device name is not offered for this device ('' if it
    is simply unknown)."""
    rot = device.rotation
    if name == "rotation.amplitude" and rot.mode != "amplitude":
        return ("rotation.amplitude is not a parameter of this device: its rotation mode is "
                "'duration' (every burst lasts rotation.duration and its amplitude follows from "
                "the angle); vary rotation.duration, or a step's amplitude= through a let")
    if name == "rotation.duration" and rot.mode != "duration":
        return ("rotation.duration is not a parameter of this device: its rotation mode is "
                "'amplitude' (bursts have rotation.amplitude and their length follows from the "
                "angle); vary rotation.amplitude")
    head, _, attr = name.rpartition(".")
    if attr == "j0" and "-" in head:
        a, _, b = head.partition("-")
        c = device.coupling(a, b)
        if c is not None and c.exchange.kind != "exponential":
            return (f"{head}.j0 exists only for an exponential J(V); this coupling's model is "
                    f"'{c.exchange.kind}': vary {_pair_name(device, c)}.j_scale (a factor on the "
                    "whole J(V) curve) instead")
    return ""


def _canonical_pair(head: str, device: Device) -> str | None:
    a, _, b = head.partition("-")
    c = device.coupling(a, b)
    return _pair_name(device, c) if c is not None else None


def apply_device(device: Device, values: dict[str, float]) -> Device:
    """A copy of ``device`` with the named parameters set (SI values).

    Changing a dot's g keeps the microwave field per volt: its Rabi frequency
    per volt is scaled by |g_new/g_old| (f_Rabi = |g|·μB·B1/(2h), linear drive
    under the rotating-wave approximation; Abragam 1961), unless
    ``X.rabi_per_volt`` is given too.  ``j_scale`` multiplies J(V): J0 for the
    exponential model, the tunnel coupling by its square root for the
    Hubbard model (J ∝ t²), every table point.
    """
    if not values:
        return device
    top: dict = {}
    rot: dict = {}
    dots: dict[str, dict] = {}
    pairs: dict[str, dict] = {}
    for name, v in values.items():
        if name in ("field", "temperature"):
            top[name] = v
        elif name.startswith("rotation."):
            rot[name.split(".", 1)[1]] = v
        else:
            head, _, attr = name.rpartition(".")
            (pairs if "-" in head else dots).setdefault(head, {})[attr] = v
    new = dict(top)
    if rot:
        new["rotation"] = dataclasses.replace(device.rotation, **rot)
    if dots:
        dd = dict(device.dots)
        for q, ch in dots.items():
            d = dd[q]
            drive = d.drive
            if "g" in ch and "rabi_per_volt" not in ch:
                drive = dataclasses.replace(drive, rabi_per_volt=drive.rabi_per_volt
                                            * abs(ch["g"] / d.g))
            if "rabi_per_volt" in ch:
                drive = dataclasses.replace(drive, rabi_per_volt=ch["rabi_per_volt"])
            kw = {k: v for k, v in ch.items() if k in ("g", "t1", "t2", "t2_star")}
            dd[q] = dataclasses.replace(d, drive=drive, **kw)
        new["dots"] = dd
    if pairs:
        cs = []
        for c in device.couplings:
            ch = pairs.get(_pair_name(device, c))
            if ch is None:
                cs.append(c)
                continue
            m = c.exchange
            if "j0" in ch:
                m = dataclasses.replace(m, j0=ch["j0"])
            if "j_scale" in ch:
                s = ch["j_scale"]
                if m.kind == "exponential":
                    m = dataclasses.replace(m, j0=m.j0 * s)
                elif m.kind == "hubbard":
                    m = dataclasses.replace(m, t0=m.t0 * math.sqrt(s))
                else:
                    m = dataclasses.replace(m, joules=tuple(j * s for j in m.joules))
            kw = {k: v for k, v in ch.items() if k in ("pulse_voltage", "idle_voltage",
                                                        "charge_noise")}
            cs.append(dataclasses.replace(c, exchange=m, **kw))
        new["couplings"] = tuple(cs)
    return dataclasses.replace(device, **new)


def _q(x: float, dim: Dim) -> str:
    return format_quantity(x, dim, 6)


def _q2(a: float, b: float, dim: Dim) -> tuple[str, str]:
    """Two values compared in a message, with the digits that tell them apart."""
    return format_distinct(a, b, dim, 6)


def constraints(device: Device) -> list[tuple[str, str, str]]:
    """The physical constraints the device loader enforces, checked again:
    ``(id, message, hint)`` for each one violated (empty when all hold).

    * T2* ≤ T2 ≤ 2·T1, all positive (Bloch relaxation; common practice, no
      source);
    * the Larmor frequency within the drive line's LO + IF band;
    * field, temperature, Rabi per volt, J positive; burst amplitude within
      every drive line's range; barrier levels within the channel and the
      exchange model's range, the pulse level above idle.
    """
    out: list[tuple[str, str, str]] = []
    if not device.field > 0:
        out.append(("field", f"field = {_q(device.field, FIELD)} is not above zero",
                    "the Zeeman splitting needs a field"))
    if not device.temperature > 0:
        out.append(("temperature", f"temperature = {_q(device.temperature, TEMPERATURE)} is not "
                                   "above zero", "give a temperature above 0 K"))
    for q, d in device.dots.items():
        if d.g == 0:
            out.append((f"{q}.g", f"{q}.g is zero", "a dot needs a non-zero g-factor"))
        for attr in ("t1", "t2", "t2_star"):
            v = getattr(d, attr)
            if not v > 0:
                out.append((f"{q}.{attr}", f"{q}.{attr} = {_q(v, TIME)} is not above zero",
                            "coherence times are positive"))
        if d.t1 > 0 and d.t2 > 2 * d.t1 * (1 + 1e-12):
            shown = _q2(d.t2, 2 * d.t1, TIME)
            out.append((f"{q}.t2>2t1", f"{q}.t2 = {shown[0]} is longer than 2·T1 = {shown[1]}",
                        f"T2 cannot exceed 2·T1: keep {q}.t2 at most 2·{q}.t1"))
        if d.t2 > 0 and d.t2_star > d.t2 * (1 + 1e-12):
            shown = _q2(d.t2_star, d.t2, TIME)
            out.append((f"{q}.t2*>t2", f"{q}.t2_star = {shown[0]} is longer than the "
                                       f"Hahn-echo T2 = {shown[1]}",
                        f"an echo only removes dephasing, so T2* ≤ T2: keep {q}.t2_star at most "
                        f"{q}.t2"))
        if not d.drive.rabi_per_volt > 0:
            out.append((f"{q}.rabi", f"{q}.rabi_per_volt = "
                                     f"{_q(d.drive.rabi_per_volt, FREQ_PER_VOLT)} is not above "
                                     "zero", "the drive calibration is positive"))
        line = device.channels.get(d.drive.line)
        if line is not None and d.g != 0 and device.field > 0:
            f_l = device.larmor(q)
            need = f_l - line.lo
            if not line.if_min <= need <= line.if_max:
                out.append((f"{q}.larmor",
                            f"dot {q}: Larmor frequency {_q(f_l, FREQUENCY)} (|g| = {abs(d.g):g} "
                            f"at {_q(device.field, FIELD)}) is not reachable on line "
                            f"'{line.name}': LO {_q(line.lo, FREQUENCY)} + IF band covers "
                            f"{_q(line.lo + line.if_min, FREQUENCY)} to "
                            f"{_q(line.lo + line.if_max, FREQUENCY)}",
                            f"it needs IF = {_q(need, FREQUENCY)}; narrow the range of the field "
                            "or g, or move the LO in the device file"))
    rot = device.rotation
    if rot.mode == "amplitude":
        if not rot.amplitude > 0:
            out.append(("rotation.amplitude", f"rotation.amplitude = {_q(rot.amplitude, VOLTAGE)} "
                                              "is not above zero", "give a positive amplitude"))
        for q, d in device.dots.items():
            line = device.channels.get(d.drive.line)
            if line is not None and rot.amplitude > max(abs(line.v_min), abs(line.v_max)):
                out.append(("rotation.amplitude>range",
                            f"rotation.amplitude = {_q(rot.amplitude, VOLTAGE)} is above the "
                            f"range of drive line '{line.name}' (dot {q})",
                            f"keep it within ±{_q(max(abs(line.v_min), abs(line.v_max)), VOLTAGE)}"
                            " (and within your lab's limits)"))
                break
    else:
        if not rot.duration > 0:
            out.append(("rotation.duration", f"rotation.duration = {_q(rot.duration, TIME)} is "
                                             "not above zero", "give a positive burst length"))
        elif rot.shape == "flattop" and 2 * rot.edge > rot.duration:
            out.append(("rotation.edge", f"rotation.duration = {_q(rot.duration, TIME)} is "
                                         f"shorter than the two flat-top edges "
                                         f"({_q(2 * rot.edge, TIME)})",
                        "keep rotation.duration at least twice rotation.edge"))
    for c in device.couplings:
        pn = _pair_name(device, c)
        m = c.exchange
        if m.kind == "exponential" and not m.j0 > 0:
            out.append((f"{pn}.j0", f"{pn}.j0 = {_q(m.j0, FREQUENCY)} is not above zero",
                        "J is positive"))
        if m.kind == "hubbard" and not m.t0 > 0 or m.kind == "table" and \
                not all(j > 0 for j in m.joules):
            out.append((f"{pn}.j_scale", f"{pn}: J(V) is not positive", "keep j_scale above 0"))
        if not c.charge_noise >= 0:
            out.append((f"{pn}.charge_noise", f"{pn}.charge_noise = "
                                              f"{_q(c.charge_noise, VOLTAGE)} is negative",
                        "an rms value is zero or positive"))
        barrier = device.channels.get(c.barrier)
        lo, hi = xch.v_range(m)
        for key, v in (("idle_voltage", c.idle_voltage), ("pulse_voltage", c.pulse_voltage)):
            if v is None:
                continue
            if barrier is not None and not barrier.v_min <= v <= barrier.v_max:
                out.append((f"{pn}.{key}.range", f"{pn}.{key} = {_q(v, VOLTAGE)} is outside the "
                                                 f"range of barrier channel '{barrier.name}' "
                                                 f"[{_q(barrier.v_min, VOLTAGE)}, "
                                                 f"{_q(barrier.v_max, VOLTAGE)}]",
                            "keep it within the channel range (and your lab's limits)"))
            elif not lo <= v <= hi:
                out.append((f"{pn}.{key}.table", f"{pn}.{key} = {_q(v, VOLTAGE)} is outside the "
                                                 f"exchange table [{_q(lo, VOLTAGE)}, "
                                                 f"{_q(hi, VOLTAGE)}]",
                            "the table is never extrapolated: stay inside it"))
        if c.pulse_voltage is not None and not c.pulse_voltage > c.idle_voltage:
            shown = _q2(c.pulse_voltage, c.idle_voltage, VOLTAGE)
            out.append((f"{pn}.pulse<=idle", f"{pn}.pulse_voltage = {shown[0]} is not above "
                                             f"idle_voltage = {shown[1]}",
                        "J rises with barrier voltage: the exchange pulse must go above idle"))
    return out


def cautions(device: Device) -> list[tuple[str, str]]:
    """Legal but doubtful settings, as the loader warns about them:
    ``(id, message)``."""
    out = []
    for q, d in device.dots.items():
        if d.g == 0 or not device.field > 0:
            continue
        f_l = device.larmor(q)
        line = device.channels.get(d.drive.line)
        if line is not None:
            full = d.drive.rabi_per_volt * max(abs(line.v_min), abs(line.v_max))
            if full > RWA_RATIO * f_l:
                out.append((f"{q}.rwa", f"dot {q}: Rabi frequency at full scale "
                                        f"{_q(full, FREQUENCY)} exceeds {RWA_RATIO:g}·f_L = "
                                        f"{_q(RWA_RATIO * f_l, FREQUENCY)} (the rotating-wave "
                                        "approximation becomes doubtful)"))
        if device.temperature > 0 and PLANCK * f_l < THERMAL_RATIO * K_B * device.temperature:
            out.append((f"{q}.thermal", f"dot {q}: Zeeman energy h·f_L = h·{_q(f_l, FREQUENCY)} "
                                        f"is below {THERMAL_RATIO:g}·k_B·T at "
                                        f"{_q(device.temperature, TEMPERATURE)} (poor thermal "
                                        "initialisation and readout)"))
    return out


# ------------------------------------------------------------------ sequence

def _statements(body, out: list) -> list:
    for s in body:
        if isinstance(s, T.Include):
            _statements(s.body, out)
        else:
            out.append(s)
    return out


def sequence_params(tree: T.SourceFile, expanded: Expanded) -> dict[str, Param]:
    """The file's ``let`` and ``sweep`` names with their dimension (found by
    evaluating the lets in order, each sweep at its first value)."""
    axes = {a.name: a for a in expanded.axes}
    env: dict[str, Quantity] = {}
    out: dict[str, Param] = {}

    def lookup(n: T.Name):
        if n.id in env:
            return env[n.id]
        raise EvalError(f"unknown name '{n.id}'", n.span)

    for s in _statements(tree.body, []):
        where = f"{s.span.file}:{s.span.line}" if getattr(s, "span", None) else ""
        if isinstance(s, T.Let):
            try:
                q = evaluate(s.expr, lookup)
            except EvalError:  # the nominal file expanded, so this should not happen
                out[s.name] = Param(s.name, "sequence", None, f"let {s.name}", None, where)
                continue
            env[s.name] = q
            out[s.name] = Param(s.name, "sequence", q.dim, f"let {s.name}", q.value, where)
        elif isinstance(s, (T.SweepRange, T.SweepList)) and s.name in axes:
            ax = axes[s.name]
            env[s.name] = Quantity(ax.values[0], ax.dim)
            out[s.name] = Param(s.name, "sequence", ax.dim, f"sweep {s.name}", ax.values[0],
                                where)
    return out


def _literal(value: float, dim: Dim, span) -> T.Expr:
    """An expression node worth ``value`` (SI) of dimension ``dim``: the SI
    number times the base units (exact: the number is written with repr)."""
    e: T.Expr = T.Num(repr(float(value)), None, span)
    for base, exp in zip(BASES, dim.exps):
        for _ in range(abs(exp)):
            e = T.Binary("*" if exp > 0 else "/", e, T.Num("1", base, span), span)
    return e


def override(tree: T.SourceFile, values: dict[str, tuple[float, Dim]]) -> T.SourceFile:
    """The tree with each named ``let`` or ``sweep`` replaced by
    ``let NAME = VALUE`` (same place, same span, so messages still point at
    the file)."""
    if not values:
        return tree

    def walk(body):
        out = []
        for s in body:
            if isinstance(s, T.Include):
                out.append(dataclasses.replace(s, body=walk(s.body)))
            elif isinstance(s, (T.Let, T.SweepRange, T.SweepList)) and s.name in values:
                v, dim = values[s.name]
                out.append(T.Let(s.name, _literal(v, dim, s.span), s.span))
            else:
                out.append(s)
        return tuple(out)

    return dataclasses.replace(tree, body=walk(tree.body))


# ------------------------------------------------------------------ names

def listing(device_ps: dict[str, Param], seq_ps: dict[str, Param]) -> str:
    dev = ", ".join(device_ps)
    seq = ", ".join(f"{n} ({p.what.split()[0]})" for n, p in seq_ps.items())
    return f"device: {dev}" + (f"; sequence file: {seq}" if seq else "; the sequence file "
                                                                      "has no let or sweep")


def resolve(name: str, flag_text: str, flag: str, device: Device,
            device_ps: dict[str, Param], seq_ps: dict[str, Param]) -> Param:
    """The parameter a ``--vary``/``--set`` name means.

    ``device.NAME`` and ``file.NAME`` say which side is meant (needed only
    when a ``let`` is named like a device parameter).  Raises
    :class:`UsageError` with a did-you-mean and the list of sweepable names.
    """
    if name.startswith(PREFIX_DEVICE):
        pool, bare = {"device": device_ps}, name[len(PREFIX_DEVICE):]
    elif name.startswith(PREFIX_FILE):
        pool, bare = {"file": seq_ps}, name[len(PREFIX_FILE):]
    else:
        pool, bare = {"device": device_ps, "file": seq_ps}, name
    if bare.startswith("dots."):
        bare = bare[len("dots."):]
    if bare.startswith("couplings."):
        bare = bare[len("couplings."):]
    head, _, attr = bare.rpartition(".")
    if "-" in head and "device" in pool:
        canon = _canonical_pair(head, device)
        if canon:
            bare = f"{canon}.{attr}"
    found = [(side, ps[bare]) for side, ps in pool.items() if bare in ps]
    if len(found) == 2:
        raise UsageError(f"{flag} '{flag_text}': '{bare}' is both a device parameter and a "
                         f"{found[1][1].what.split()[0]} of the sequence file "
                         f"({found[1][1].where})",
                         hint=f"write device.{bare} or file.{bare}")
    if found:
        return found[0][1]
    why = _not_offered(bare, device) if "device" in pool else ""
    if why:
        raise UsageError(f"{flag} '{flag_text}': {why}")
    names = [n for ps in pool.values() for n in ps]
    dym = did_you_mean(bare, names).strip()
    raise UsageError(f"{flag} '{flag_text}': '{name}' is not a parameter this sweep can vary",
                     hint=(dym + " " if dym else "") + "sweepable: " +
                     listing(device_ps if "device" in pool else {},
                             seq_ps if "file" in pool else {}))
