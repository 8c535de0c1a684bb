"""The parameters a sweep can vary, and how a value is applied.

Device parameters (names as in the device file, a dot's or a coupling's
setting after its name)::

    field  temperature  rotation.amplitude  rotation.duration
    A.g  A.t1  A.t2  A.t2_star  A.rabi_per_volt
    A-B.j_scale  A-B.j0  A-B.pulse_voltage  A-B.idle_voltage  A-B.charge_noise

A value is applied by building a modified :class:`~compiler.device.model.Device`
with :func:`dataclasses.replace`; both the compiler and the simulator then see
it (the pulses are designed for the modified device).  The physical
rules the device loader enforces (:func:`compiler.device.rules.validate`,
written once) are checked again for every point (:func:`constraints`,
:func:`cautions`).

Sequence parameters are the file's own ``let`` and ``sweep`` names; a value
replaces the definition in the parsed tree, which is then expanded again
(:func:`override`).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

from ..device.model import Device
from ..device.rules import ERROR, WARNING, validate
from ..errors import UsageError, did_you_mean
from ..expand.evaluate import EvalError, Quantity, evaluate
from ..parse import tree as T
from ..program import Expanded
from ..units import BASES, FIELD, FREQ_PER_VOLT, FREQUENCY, NONE, TEMPERATURE, TIME, VOLTAGE, Dim

DOT_ATTRS = {"g": (NONE, "g-factor"), "t1": (TIME, "relaxation time T1"),
             "t2": (TIME, "Hahn-echo T2"), "t2_star": (TIME, "Ramsey T2*"),
             "rabi_per_volt": (FREQ_PER_VOLT, "Rabi frequency per volt of drive")}
PAIR_ATTRS = {"j_scale": (NONE, "factor on the whole J(V) curve"),
              "j0": (FREQUENCY, "J0 of the exponential J = J0·exp(V/v0)"),
              "pulse_voltage": (VOLTAGE, "barrier level during exchange"),
              "idle_voltage": (VOLTAGE, "barrier level between gates"),
              "charge_noise": (VOLTAGE, "rms quasi-static barrier noise")}
EXCHANGE_ATTRS = ("j0",)    # parameters of one exchange model (ExchangeModel.SWEEPABLE)
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
            if attr in ("t2", "t2_star") and d.zeeman_noise is not None:
                continue          # implied by the spectrum, not a simulation input
            out[f"{q}.{attr}"] = Param(f"{q}.{attr}", "device", dim, f"{what} of dot {q}",
                                       vals[attr])
    for c in device.couplings:
        pn = _pair_name(device, c)
        for attr, (dim, what) in PAIR_ATTRS.items():
            if attr in EXCHANGE_ATTRS and attr not in c.exchange.SWEEPABLE:
                continue
            nominal = (getattr(c.exchange, attr) if attr in EXCHANGE_ATTRS else
                       {"j_scale": 1.0, "pulse_voltage": c.pulse_voltage,
                        "idle_voltage": c.idle_voltage, "charge_noise": c.charge_noise}[attr])
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
    if attr in ("t2", "t2_star") and head in device.dots \
            and device.dots[head].zeeman_noise is not None:
        return (f"{name} is not a parameter of this device: dot {head} gives its Zeeman noise "
                "as a spectrum (zeeman_noise), from which T2 and T2* follow; edit the "
                "spectrum in the device file instead")
    if attr == "j0" and "-" in head:
        a, _, b = head.partition("-")
        c = device.coupling(a, b)
        if c is not None and "j0" not in c.exchange.SWEEPABLE:
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
            direct = {k: v for k, v in ch.items() if k in m.SWEEPABLE}
            if direct:
                m = dataclasses.replace(m, **direct)
            if "j_scale" in ch:
                m = m.scaled(ch["j_scale"])
            kw = {k: v for k, v in ch.items() if k in ("pulse_voltage", "idle_voltage",
                                                        "charge_noise")}
            cs.append(dataclasses.replace(c, exchange=m, **kw))
        new["couplings"] = tuple(cs)
    return dataclasses.replace(device, **new)


def constraints(device: Device) -> list[tuple[str, str, str]]:
    """The physical rules the device loader enforces
    (:func:`compiler.device.rules.validate`), checked again for a swept
    device: ``(id, message, hint)`` for each one broken (empty when all hold)."""
    return [(f.id, f.message, f.hint) for f in validate(device) if f.severity == ERROR]


def cautions(device: Device) -> list[tuple[str, str]]:
    """Legal but doubtful settings, as the loader warns about them:
    ``(id, message)``."""
    return [(f.id, f.message) for f in validate(device) if f.severity == WARNING]


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
