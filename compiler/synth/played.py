"""What reaches the sample: the outputs after the channel's analog path.

Shared with the simulator so that what is simulated is what is played
(:mod:`compiler.analog` has the model: held DAC codes, RC rise time,
optional bias tee plus its DC level)."""

from __future__ import annotations

import numpy as np

from .. import analog
from ..device.model import Device
from .types import Waveforms


def as_played(wf: Waveforms, device: Device, name: str, oversample: int = 1) -> np.ndarray:
    """Voltage (V) of one output as it reaches the sample, averaged over each
    of ``oversample`` sub-intervals per sample (so time integrals are exact).
    Gate outputs include their bias tee and DC level; every output is taken
    on the timeline's grid (:meth:`Output.arrived`: the delay alignment undone)."""
    out = wf.outputs[name]
    ch = device.channels[out.channel]
    dt = 1.0 / wf.sample_rate
    x = out.arrived()
    if out.kind == "marker":
        return np.repeat(x, oversample)
    y0 = out.before_run(x)
    y = analog.rc_mean_per_sub(x, dt, analog.rc_tau(ch.rise_time), oversample, y0=y0)
    if ch.bias_tee > 0:
        y = analog.bias_tee(y, dt / oversample, ch.bias_tee)
    return y + out.dc_level


def played_baseband(wf: Waveforms, device: Device, line: str, oversample: int = 1) -> np.ndarray:
    """Complex baseband I + iQ of a microwave line as played (V)."""
    return (as_played(wf, device, f"{line}.I", oversample)
            + 1j * as_played(wf, device, f"{line}.Q", oversample))
