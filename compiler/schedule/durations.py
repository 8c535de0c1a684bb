"""How long each step takes, and at what level it is played.

Rotations: on resonance the angle is θ = 2π·r·A·∫e(t)dt with r the Rabi
frequency per volt, A the peak amplitude (V) and e the envelope of peak 1
(Rabi 1937; Abragam 1961).  Exchange: a barrier level V held for T gives a
phase 2π·J(V)·T with J/h in Hz; √SWAP needs J·T = 1/4, SWAP 1/2 and the
inverse √SWAP 3/4 (Loss & DiVincenzo, PRA 57, 120 (1998)).  Here the
barrier pulse is taken square; synthesis refines it with the channel's rise
time.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .. import shapes
from ..device import exchange as X
from ..device.model import Device
from ..physics import EXCHANGE_TARGET
from ..program import ExchangeGate, Rotation
from ..units import FREQUENCY, TIME, VOLTAGE, format_quantity as fq


class DurationProblem(Exception):
    def __init__(self, message: str, hint: str = ""):
        super().__init__(message)
        self.message, self.hint = message, hint


@dataclass(frozen=True)
class Burst:
    duration: float      # s
    amplitude: float     # V peak
    shape: str


@dataclass(frozen=True)
class ExchangePulse:
    duration: float      # s
    level: float         # V barrier voltage during the pulse
    j: float             # Hz, J/h at that level
    zeeman_difference: float  # Hz, |f_L(a) − f_L(b)|


def rotation_burst(step: Rotation, device: Device) -> Burst:
    """Duration and amplitude of the burst that plays ``step``."""
    rot = device.rotation
    dot = device.dots[step.qubit]
    shape = step.shape or rot.shape
    theta = abs(step.angle)
    r = dot.drive.rabi_per_volt
    kw = dict(sigmas=rot.sigmas, edge=rot.edge)
    if theta == 0.0:
        return Burst(0.0, 0.0, shape)
    need = theta / (2.0 * math.pi * r)          # A·∫e dt, V·s
    if step.amplitude is not None or (step.duration is None and rot.mode == "amplitude"):
        amp = abs(step.amplitude) if step.amplitude is not None else rot.amplitude
        dur = shapes.duration_for_area(shape, need / amp, **kw)
    else:
        dur = step.duration if step.duration is not None else rot.duration
        a = shapes.area(shape, dur, **kw)
        amp = need / a
    return Burst(dur, amp, shape)


def exchange_pulse(step: ExchangeGate, device: Device) -> ExchangePulse:
    """Barrier level and duration of a square exchange pulse for ``step``."""
    c = device.coupling(step.a, step.b)
    target = EXCHANGE_TARGET[step.gate]
    dz = abs(device.larmor(step.a) - device.larmor(step.b))
    if step.duration is not None:
        j = target / step.duration
        try:
            v = float(X.v_of_j(c.exchange, j))
        except ValueError as e:
            raise DurationProblem(f"no barrier level gives J = {fq(j, FREQUENCY)} for "
                                  f"{fq(step.duration, TIME)}: {e}",
                                  "choose a longer duration or extend the J(V) calibration") from None
        return ExchangePulse(step.duration, v, j, dz)
    v = step.amplitude if step.amplitude is not None else c.pulse_voltage
    if v is None:
        raise DurationProblem(f"the coupling {'-'.join(c.dots)} has no pulse_voltage",
                              "give amplitude= or duration= on the step, or pulse_voltage "
                              "in the device file")
    try:
        j = float(X.j_of_v(c.exchange, v))
    except ValueError as e:
        raise DurationProblem(f"J is not known at {fq(v, VOLTAGE)}: {e}",
                              "stay inside the J(V) calibration table") from None
    if not (j > 0 and math.isfinite(j)):
        raise DurationProblem(f"J({fq(v, VOLTAGE)}) = {j:g} Hz cannot make an exchange gate")
    return ExchangePulse(target / j, v, j, dz)
