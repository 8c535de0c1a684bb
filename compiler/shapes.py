"""Burst envelopes: the shape of a microwave burst's amplitude in time.

Shared by scheduling (durations) and waveform synthesis (samples) so both
use the same formulas.  Envelopes have peak 1; the rotation angle is set by
the area: θ = 2π·(Rabi frequency per volt)·A·∫e(t)dt, with A the peak
amplitude in volts (Rabi 1937; Abragam, Principles of Nuclear Magnetism,
1961: on resonance the angle is the time integral of the Rabi frequency).
"""

from __future__ import annotations

import math

import numpy as np

SHAPES = ("square", "gauss", "flattop")


def gauss_offset(sigmas: float) -> float:
    """Value of the untruncated Gaussian at the ends of a burst ``sigmas``
    standard deviations long; subtracted so the envelope starts and ends at
    zero (area correction of the truncation)."""
    return math.exp(-((sigmas / 2.0) ** 2) / 2.0)


def envelope(shape: str, t: np.ndarray, duration: float, *, sigmas: float = 4.0,
             edge: float = 0.0) -> np.ndarray:
    """Envelope e(t) with peak 1 for 0 ≤ t ≤ duration (s), 0 outside.

    * square: 1.
    * gauss: (g(t) − c)/(1 − c), g a Gaussian centred in the burst with
      σ = duration/sigmas, c = g at the burst ends (truncated, lifted to zero).
    * flattop: raised-cosine edges of length ``edge`` (s) each, flat between;
      a burst shorter than two edges is a cosine bell (edges of duration/2).
    """
    t = np.asarray(t, dtype=float)
    inside = (t >= 0) & (t <= duration)
    if shape == "square":
        e = np.ones_like(t)
    elif shape == "gauss":
        sigma = duration / sigmas
        c = gauss_offset(sigmas)
        g = np.exp(-((t - duration / 2.0) ** 2) / (2.0 * sigma ** 2))
        e = (g - c) / (1.0 - c)
    elif shape == "flattop":
        edge = min(edge, duration / 2.0)   # short bursts become a cosine bell
        if edge <= 0:
            e = np.ones_like(t)
        else:
            rise = 0.5 * (1 - np.cos(np.pi * np.clip(t / edge, 0, 1)))
            fall = 0.5 * (1 - np.cos(np.pi * np.clip((duration - t) / edge, 0, 1)))
            e = np.minimum(rise, fall)
    else:
        raise ValueError(f"unknown envelope shape {shape!r}")
    return np.where(inside, e, 0.0)


def area(shape: str, duration: float, *, sigmas: float = 4.0, edge: float = 0.0) -> float:
    """∫e(t)dt in seconds for a burst of ``duration`` seconds (closed form)."""
    if shape == "square":
        return duration
    if shape == "gauss":
        sigma = duration / sigmas
        c = gauss_offset(sigmas)
        full = sigma * math.sqrt(2 * math.pi) * math.erf(sigmas / (2 * math.sqrt(2)))
        return (full - c * duration) / (1.0 - c)
    if shape == "flattop":
        return duration - min(edge, duration / 2.0) if edge > 0 else duration
    raise ValueError(f"unknown envelope shape {shape!r}")


def duration_for_area(shape: str, target_area: float, *, sigmas: float = 4.0,
                      edge: float = 0.0) -> float:
    """Burst length (s) whose envelope area is ``target_area`` (s)."""
    if target_area <= 0:
        return 0.0
    if shape == "flattop" and edge > 0:
        # area = T - edge once T >= 2 edge; shorter bursts are pure cosine bells
        if target_area >= edge:
            return target_area + edge
        return 2.0 * target_area   # two half edges of length T/2 meet: area T/2
    return target_area / (area(shape, 1.0, sigmas=sigmas, edge=edge))
