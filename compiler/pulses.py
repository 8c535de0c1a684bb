"""Design of the pulses that play each step, on the sample grid.

Shared by scheduling (which needs their lengths) and synthesis (which
renders them), so both use the same numbers.

Bursts
    On resonance a burst turns the spin by θ = 2π·r·A·Σ e_k·dt, with r the
    Rabi frequency per volt, A the peak amplitude and e_k the envelope at the
    sample midpoints (Rabi, Phys. Rev. 51, 652 (1937); Abragam, Principles of
    Nuclear Magnetism (1961)).  The sampled area, not the peak, sets θ.

Exchange
    H = J(t)·S1·S2 (J/h in Hz).  The barrier voltage as played is the held
    samples through the channel's RC response (:mod:`compiler.analog`); the
    pulse level is solved so that ∫J(V(t))dt = 1/4 (√SWAP), 1/2 (SWAP) or
    3/4 (inverse √SWAP), i.e. ∫J dt/ħ = π/2, π, 3π/2 (Loss & DiVincenzo,
    PRA 57, 120 (1998)), integrating J(V(t)) exactly within each sample by
    Gauss–Legendre quadrature.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from . import analog, shapes
from .device import exchange as X
from .device.model import Coupling, Device, RotationDefaults
from .roots import brentq
from .steps import EXCHANGE_GATES
from .units import VOLTAGE, format_quantity as fq

SETTLE_TAUS = 12.0     # an exchange slot lasts until the RC tail is e^-12 ≈ 6e-6 of the step
GL_NODES = 12          # Gauss–Legendre nodes per sample for ∫J(V(t))dt
_GL_X, _GL_W = np.polynomial.legendre.leggauss(GL_NODES)


class DesignError(ValueError):
    """A pulse cannot be designed; the message says why and the fix."""

    def __init__(self, message: str, hint: str = ""):
        super().__init__(message)
        self.message, self.hint = message, hint


MAX_PULSE_SAMPLES = 2 ** 53     # sample counts stay exact integers in float64

# An explicit duration= or amplitude= on a step is honoured or refused, never
# quietly replaced: the played value may differ from the request only by what
# the sample grid forces, at most this fraction (common practice, no source).
REQUEST_TOLERANCE = 0.05


def _grid_text(t: float, dt: float) -> str:
    from .units import TIME, format_quantity as fq
    lo = max(1, math.floor(t / dt))
    cands = sorted({lo, lo + 1})
    return " or ".join(f"{fq(k * dt, TIME)} ({k} sample{'s' * (k != 1)})" for k in cands)


def check_duration_request(t: float, dt: float, what: str) -> None:
    """Refuse an explicit duration the sample grid cannot realise: one that
    rounds to no sample, or that the nearest whole number of samples changes
    by more than :data:`REQUEST_TOLERANCE`.  The hint names the nearest
    realisable durations."""
    if not math.isfinite(t) or t / dt > MAX_PULSE_SAMPLES:
        return                   # _samples reports it
    n = int(round(t / dt))
    if n >= 1 and abs(n * dt - t) <= REQUEST_TOLERANCE * t + 1e-12 * dt:
        return
    from .units import TIME, format_quantity as fq
    if n < 1:
        msg = (f"the {what} duration {fq(t, TIME)} is shorter than half a sample "
               f"({fq(dt, TIME)} per sample): the grid cannot play it")
    else:
        msg = (f"the {what} duration {fq(t, TIME)} is not realisable on the sample grid "
               f"({fq(dt, TIME)} per sample): the nearest, {fq(n * dt, TIME)}, differs by "
               f"{abs(n * dt - t) / t:.0%}, more than the {REQUEST_TOLERANCE:.0%} allowed")
    raise DesignError(msg, f"nearest realisable: duration={_grid_text(t, dt)}")


def _samples(t: float, dt: float, what: str, ceil: bool = False) -> int:
    """``t / dt`` samples (rounded, or rounded up), at least 1; a length past
    2^53 samples (or infinite) is a DesignError, not an OverflowError."""
    n = t / dt - (1e-9 if ceil else 0.0)
    if not n <= MAX_PULSE_SAMPLES:
        last = f"{t:.4g} s" if math.isfinite(t) else "longer than any finite time"
        raise DesignError(f"this {what} would last {last}, beyond 2^53 samples at this "
                          "sample rate", "a run is placed on an integer sample grid exact up "
                          "to 2^53 samples; give a shorter duration (or a larger amplitude)")
    return max(1, math.ceil(n) if ceil else int(round(n)))


# ------------------------------------------------------------------ bursts

@dataclass(frozen=True)
class BurstDesign:
    n: int                      # samples
    amplitude: float            # V, peak of A·e in the qubit frame (before IF compensation)
    shape: str
    envelope: tuple[float, ...]  # e_k at sample midpoints, peak ≤ 1 (kept as a tuple: hashable)
    angle: float                # rad, |θ|
    phase: float                # rad, axis azimuth in the qubit frame (π added for θ < 0)

    def envelope_array(self) -> np.ndarray:
        return np.asarray(self.envelope)


MAX_BURST_SAMPLES = 1_000_000     # one burst: 1 ms at 1 GS/s, far beyond any coherence time


@lru_cache(maxsize=4096)
def _envelope(shape: str, n: int, dt: float, sigmas: float, edge: float) -> tuple[float, ...]:
    t = (np.arange(n) + 0.5) * dt
    e = shapes.envelope(shape, t, n * dt, sigmas=sigmas, edge=edge)
    return tuple(float(x) for x in e)


@lru_cache(maxsize=65536)
def design_burst(angle: float, phase: float, rabi_per_volt: float, dt: float,
                 rot: RotationDefaults, shape: str | None = None,
                 duration: float | None = None, amplitude: float | None = None) -> BurstDesign:
    """Length and amplitude of the burst for a rotation by ``angle`` (rad)
    about the axis at ``phase`` (rad).  ``duration``/``amplitude`` override the
    device default (``rot.mode``).  The length is a whole number of samples;
    the amplitude is then set so the sampled area gives exactly ``angle``."""
    shape = shape or rot.shape
    theta = abs(angle)
    axis = phase + (math.pi if angle < 0 else 0.0)
    if theta == 0.0:
        return BurstDesign(0, 0.0, shape, (), 0.0, axis)
    need = theta / (2.0 * math.pi * rabi_per_volt)        # A·∫e dt in V·s
    kw = dict(sigmas=rot.sigmas, edge=rot.edge)
    if amplitude is not None or (duration is None and rot.mode == "amplitude"):
        amp = abs(amplitude) if amplitude is not None else rot.amplitude
        t_cont = shapes.duration_for_area(shape, need / amp, **kw)
        n = _samples(t_cont, dt, "burst", ceil=True)
    else:
        t = duration if duration is not None else rot.duration
        if duration is not None:
            check_duration_request(duration, dt, "burst")
        n = _samples(t, dt, "burst")
    if n > MAX_BURST_SAMPLES:
        raise DesignError(f"this burst would last {n:,} samples ({n * dt * 1e3:.4g} ms), more than "
                          f"the {MAX_BURST_SAMPLES:,} samples one burst may hold",
                          "check the duration= or amplitude= of the rotation (and its unit); "
                          "a longer rotation can be written as several rotations")
    env = _envelope(shape, n, dt, rot.sigmas, rot.edge)
    area = math.fsum(env) * dt
    if area <= 0:
        raise DesignError(f"a {shape} burst of {n} samples has no area",
                          "use a longer burst or another shape")
    played = need / area
    if amplitude is not None and played < (1 - REQUEST_TOLERANCE) * abs(amplitude):
        _refuse_burst_amplitude(abs(amplitude), played, n, need, shape, dt, rot)
    return BurstDesign(n, played, shape, env, theta, axis)


def _refuse_burst_amplitude(amp: float, played: float, n: int, need: float, shape: str,
                            dt: float, rot: RotationDefaults) -> None:
    """An explicit burst amplitude that a whole number of samples cannot
    realise: the realisable amplitudes nearest to it (n and n − 1 samples)."""
    from .units import TIME, VOLTAGE, format_quantity as fq
    opts = [f"amplitude={fq(played, VOLTAGE)} ({n} sample{'s' * (n != 1)})"]
    if n > 1:
        env = _envelope(shape, n - 1, dt, rot.sigmas, rot.edge)
        area = math.fsum(env) * dt
        if area > 0:
            opts.append(f"amplitude={fq(need / area, VOLTAGE)} ({n - 1} sample{'s' * (n != 2)})")
    raise DesignError(
        f"the burst amplitude {fq(amp, VOLTAGE)} is not realisable on the sample grid: this "
        f"rotation then takes {fq(n * dt, TIME)} ({n} sample{'s' * (n != 1)}) and its amplitude "
        f"would have to drop to {fq(played, VOLTAGE)} ({1 - played / amp:.0%} lower, more than "
        f"the {REQUEST_TOLERANCE:.0%} allowed)",
        "nearest realisable: " + " or ".join(opts) + "; or give duration= instead")


# ------------------------------------------------------------------ exchange

@dataclass(frozen=True)
class ExchangeDesign:
    gate: str
    pre: int                    # samples before the barrier pulse (detuning settles)
    n: int                      # samples at the pulse level
    post: int                   # samples after (RC tail settles)
    level: float                # V, absolute barrier level during the pulse
    idle: float                 # V, barrier level outside the pulse
    j_peak: float               # Hz, J at the pulse level
    integral: float             # ∫(J/h)dt over the slot, dimensionless
    target: float               # ∫(J/h)dt the gate needs: 1/4, 1/2, 3/4, or from a cphase angle
    tau: float                  # s, RC time constant of the barrier channel
    dt: float
    window: tuple[float, ...] = ()  # shaped pulse: w_k per pulse sample (peak 1); () square
    angle: float = 0.0          # rad, conditional phase of a controlled-phase gate

    @property
    def total(self) -> int:
        return self.pre + self.n + self.post

    def samples(self) -> np.ndarray:
        """Absolute barrier voltage per sample over the slot."""
        v = np.full(self.total, self.idle)
        v[self.pre:self.pre + self.n] = _pulse_values(self.level, self.idle, self.n, self.window)
        return v


HELD_CHUNK = 4096       # samples handled at a time (memory stays bounded for long pulses)


def _held_samples(runs, dt: float, tau: float, y0: float):
    """The distinct samples of a held input through an RC response.

    ``runs`` is the input as ``[(value V, count), ...]`` starting from the
    RC output ``y0``.  Yields chunks ``(x, yb, w)`` of arrays: the held value
    of a sample, the RC output at its start, and how many identical
    consecutive samples it stands for.  Within a run, once the RC output
    reaches its floating-point fixed point (y_{k+1} == y_k), every later
    sample of the run is exactly the same as the last one computed, so it is
    counted rather than computed: a pulse of 10^7 samples costs as much as
    its edges.  Without RC (``tau`` 0) every sample of a run is the same.
    """
    y = float(y0)
    for value, count in runs:
        left = int(count)
        if left <= 0:
            continue
        if isinstance(value, np.ndarray):       # a shaped part: every sample its own
            for c0 in range(0, len(value), HELD_CHUNK):
                x = np.asarray(value[c0:c0 + HELD_CHUNK], float)
                if tau > 0:
                    yb = analog.rc_boundaries(x, dt, tau, y)
                    yield x, yb[:-1], np.ones(len(x))
                    y = float(yb[-1])
                else:
                    yield x, x.copy(), np.ones(len(x))
                    y = float(x[-1])
            continue
        if tau <= 0:
            yield np.array([value], float), np.array([value], float), np.array([left], float)
            y = value
            continue
        while left > 0:
            k = min(left, HELD_CHUNK)
            yb = analog.rc_boundaries(np.full(k, float(value)), dt, tau, y)
            same = np.flatnonzero(yb[1:] == yb[:-1])
            w = np.ones(k)
            if same.size:
                j = int(same[0])          # samples j+1 ... of this run repeat sample j
                yield np.full(j + 1, float(value)), yb[:j + 1], np.concatenate(
                    [w[:j], [float(left - j)]])
                y = float(yb[j])
                left = 0
            else:
                yield np.full(k, float(value)), yb[:-1], w
                y = float(yb[-1])
                left -= k


def _held_nodes(x, yb, offsets, dt: float, tau: float, lo: float, hi: float) -> np.ndarray:
    """Held input through the RC at ``offsets`` (s, within each sample):
    shape (len(x),) + offsets.shape."""
    shape = (len(x),) + (1,) * np.ndim(offsets)
    xs = x.reshape(shape)
    if tau <= 0:
        return np.broadcast_to(xs, (len(x),) + np.shape(offsets))
    y = xs + (yb.reshape(shape) - xs) * np.exp(-np.asarray(offsets) / tau)
    # an RC output is a convex combination of its inputs: remove rounding overshoot
    return np.clip(y, lo, hi)


@lru_cache(maxsize=256)
def hann_window(n: int) -> tuple[float, ...]:
    """w_k = sin²(π(k + ½)/n), k = 0 … n−1: a raised-cosine (Hann) window at the
    sample midpoints, rising from and returning to zero with zero slope
    (common practice for adiabatic exchange pulses, e.g. Xue et al., Nature
    601, 343 (2022); shape of the window: no single source)."""
    k = np.arange(n)
    return tuple(float(x) for x in np.sin(math.pi * (k + 0.5) / n) ** 2)


def _pulse_values(level: float, idle: float, n: int, window: tuple) -> np.ndarray | float:
    """The pulse samples: ``level`` (square) or idle + (level − idle)·w_k."""
    if not window:
        return level
    return idle + (level - idle) * np.asarray(window, float)


def _slot_runs(level: float, idle: float, pre: int, n: int, post: int, window: tuple = ()):
    if window and n:
        return [(idle, pre), (_pulse_values(level, idle, n, window), n), (idle, post)]
    return [(idle, pre), (level, n), (idle, post)]


def j_integral(model, level: float, idle: float, pre: int, n: int, post: int, dt: float,
               tau: float, window: tuple = ()) -> float:
    """∫J(V(t))dt/h over an exchange slot (idle for ``pre`` samples, ``level``
    for ``n`` — or the shaped pulse idle + (level − idle)·w_k — idle for
    ``post``) through the RC, exactly up to quadrature (Gauss–Legendre,
    GL_NODES per sample)."""
    u = (_GL_X + 1.0) * 0.5 * dt                       # nodes in [0, dt]
    lo, hi = min(level, idle), max(level, idle)
    parts = []
    for x, yb, w in _held_samples(_slot_runs(level, idle, pre, n, post, window), dt, tau, idle):
        j = X.j_of_v(model, _held_nodes(x, yb, u, dt, tau, lo, hi))
        parts.append((j * _GL_W[None, :]).sum(axis=1) * 0.5 * dt * w)
    return float(math.fsum(np.concatenate(parts))) if parts else 0.0


def _at_level(integral, model, v0: float, idle: float, target: float, dt: float):
    """(samples, level) of a pulse at ``v0``: the fewest samples whose
    integral reaches the target, the level then lowered to hit it exactly."""
    j0 = float(X.j_of_v(model, v0))
    n = max(1, math.ceil(target / (j0 * dt)) - 2) if j0 > 0 else 10_000_001
    while integral(v0, n) < target:
        n += 1
        if n > 10_000_000:
            raise DesignError("the exchange pulse would be longer than 10^7 samples",
                              "raise the barrier level")
    level = brentq(lambda v: integral(v, n) - target, idle, v0, xtol=1e-16, rtol=1e-15,
                   maxiter=200)
    return n, float(level)


def _highest_realisable(level: float, idle: float) -> float:
    """The highest request that the same sample count realises within
    REQUEST_TOLERANCE, given the level that count needs: an amplitude v gets
    that count for v from ``level`` up, and is honoured while
    v − level ≤ tol·(v − idle), i.e. up to (level − tol·idle)/(1 − tol).
    Rounded down to 0.1 mV, so the value printed is itself realisable."""
    top = (level - REQUEST_TOLERANCE * idle) / (1 - REQUEST_TOLERANCE)
    return max(math.floor(top * 1e4) / 1e4, math.ceil(level * 1e4) / 1e4)


def _shortest_exchange_hint(integral, hi: float, n: int, target: float, dt: float) -> str:
    """Hint naming the shortest duration the top of the barrier range allows."""
    from .units import TIME, format_quantity as fq
    k = max(n, 1)
    while integral(hi, k) < target:
        k *= 2
        if k > 10_000_000:
            return "give a longer duration, or extend the J(V) calibration / channel range"
    lo = k // 2 if k > n else n
    while k - lo > 1:
        mid = (lo + k) // 2
        lo, k = (mid, k) if integral(hi, mid) < target else (lo, mid)
    return (f"the shortest realisable at the top of the range is duration={fq(k * dt, TIME)} "
            f"({k} samples); or extend the J(V) calibration / channel range")


# A controlled phase is played with J well below the Zeeman difference: by
# default the peak J of its pulse is this fraction of |ΔEz| (J/ΔEz = 1/20 keeps
# the flip-flop of a Hann pulse of a few hundred samples below 1e-4 in
# probability: tests/test_pulses.py; common practice, no source).
PHASE_J_FRACTION = 0.05
# A shaped pulse has no repeated samples to count: its samples are computed
# one by one (about 0.1 s per solver step at 10^5 samples), so it is bounded:
# 200 µs at 1 GS/s, beyond the coherence of any dot a controlled phase is
# played on (T2* of 28Si/SiGe about 20 µs: Yoneda et al., Nat. Nanotechnol.
# 13, 102 (2018)).
MAX_SHAPED_SAMPLES = 200_000


def zeeman_difference(device: Device, a: str, b: str) -> float:
    """δ = s_a·f_a − s_b·f_b (Hz), the pair's Zeeman difference in the qubit
    frames (s = sign of g)."""
    from .physics import precession_sign
    d = device.dots
    return (precession_sign(d[a].g) * device.larmor(a)
            - precession_sign(d[b].g) * device.larmor(b))


def design_exchange(gate: str, coupling: Coupling, device: Device, dt: float,
                    duration: float | None = None, amplitude: float | None = None,
                    angle: float = 0.0) -> ExchangeDesign:
    """Barrier pulse for an exchange gate, solved through the coupling's J(V)
    with the channel's rise time included (cached: the same gate on the same
    coupling is designed once).  A controlled phase (``cz``, ``cphase`` with
    its ``angle``) is a Hann-shaped pulse whose peak J is, unless the step
    gives duration= or amplitude=, PHASE_J_FRACTION of the Zeeman difference
    (at most the J of the coupling's pulse_voltage)."""
    ch = device.channels[coupling.barrier]
    taus = tuple(analog.rc_tau(device.channels[device.dots[d].plunger].rise_time)
                 for d, _ in coupling.detune)
    kind = EXCHANGE_GATES[gate]
    if kind.regime == "phase":
        delta = abs(zeeman_difference(device, *coupling.dots))
        return _design_phase(gate, coupling, ch, taus, dt, duration, amplitude, float(angle),
                             delta)
    return _design_exchange(gate, coupling, ch, taus, dt, duration, amplitude)


def _exchange_timing(coupling: Coupling, ch, plunger_taus: tuple, dt: float):
    """(tau, pre, post, hi): the barrier's RC time, the settling samples before
    (detuned plungers) and after the pulse, and the top of the usable range."""
    tau = analog.rc_tau(ch.rise_time)
    settle = math.ceil(SETTLE_TAUS * tau / dt) if tau > 0 else 0
    pre = 0
    if coupling.detune:
        pre = max((math.ceil(SETTLE_TAUS * t / dt) for t in plunger_taus if t > 0), default=0)
        settle = max(settle, pre)
    top = analog.top_voltage(ch.v_min, ch.v_max, ch.bits)
    hi = min(top, X.v_range(coupling.exchange)[1])
    return tau, pre, settle, hi


@lru_cache(maxsize=1024)
def _design_phase(gate: str, coupling: Coupling, ch, plunger_taus: tuple, dt: float,
                  duration: float | None, amplitude: float | None, angle: float,
                  delta: float) -> ExchangeDesign:
    """A controlled-phase pulse: the barrier follows idle + (level − idle)·w(t)
    with the Hann window w of :func:`hann_window`, its level solved so that
    ∫J(V(t))dt/h equals the gate's integral (:func:`compiler.steps.phase_integral`)."""
    model = coupling.exchange
    target = EXCHANGE_GATES[gate].integral_for(angle)
    idle = coupling.idle_voltage
    tau, pre, post, hi = _exchange_timing(coupling, ch, plunger_taus, dt)
    what = f"{gate} pulse"

    def integral(level: float, n: int) -> float:
        return j_integral(model, level, idle, pre, n, post, dt, tau, hann_window(n))

    def fewest(v: float, n0: int) -> int:
        """The fewest samples (≥ 2) whose integral at level v reaches the
        target (it grows with n): bracketed from the estimate n0, bisected."""
        def ok(k: int) -> bool:
            return integral(v, k) >= target
        hi_n = max(2, n0)
        if ok(hi_n):
            lo = hi_n
            while lo > 2 and ok(lo):
                hi_n, lo = lo, max(2, lo // 2)
            if ok(lo):
                return lo
        else:
            lo = hi_n
            while not ok(hi_n):
                lo, hi_n = hi_n, 2 * hi_n
                if hi_n > MAX_SHAPED_SAMPLES:
                    return hi_n
        while hi_n - lo > 1:                  # not ok(lo), ok(hi_n)
            mid = (lo + hi_n) // 2
            lo, hi_n = (lo, mid) if ok(mid) else (mid, hi_n)
        return hi_n

    def solve(n: int, top: float) -> float:
        return float(brentq(lambda v: integral(v, n) - target, idle, top, xtol=1e-16,
                            rtol=1e-15, maxiter=200))

    if duration is not None:
        check_duration_request(duration, dt, what)
        n = _samples(duration, dt, what)
        if n > MAX_SHAPED_SAMPLES:
            raise DesignError(f"this {gate} pulse would last {n:,} samples, more than the "
                              f"{MAX_SHAPED_SAMPLES:,} a shaped pulse may hold",
                              "check the duration= (and its unit)")
        if n < 2:
            raise DesignError(f"a shaped {gate} pulse needs at least 2 samples",
                              "give a longer duration=")
        got = integral(hi, n)
        if got < target:
            from .units import TIME
            # the integral of a window of fixed shape grows about linearly with
            # its length: start there, then bisect for the shortest pulse
            lo, k = n, min(math.ceil(n * target / max(got, 1e-300)) + 1, MAX_SHAPED_SAMPLES)
            while k < MAX_SHAPED_SAMPLES and integral(hi, k) < target:
                lo, k = k, min(2 * k, MAX_SHAPED_SAMPLES)
            if integral(hi, k) < target:
                hint = "a longer pulse than a shaped pulse may hold would be needed"
            else:
                while k - lo > 1:
                    mid = (lo + k) // 2
                    lo, k = (mid, k) if integral(hi, mid) < target else (lo, mid)
                hint = (f"the shortest realisable at the top of the range is "
                        f"duration={fq(k * dt, TIME)} ({k} samples)")
            raise DesignError(
                f"even at the top of the barrier range ({hi * 1e3:.4g} mV) a {gate} pulse of "
                f"{n} samples stays below the exchange it needs",
                hint + "; or extend the J(V) calibration / channel range")
        level = solve(n, hi)
    else:
        if amplitude is not None:
            v0 = amplitude
            if not (ch.v_min <= v0 <= hi):
                raise DesignError(f"the barrier level {fq(v0, VOLTAGE)} is outside the range "
                                  f"of channel '{ch.name}' and the J(V) calibration "
                                  f"({fq(ch.v_min, VOLTAGE, 6)} to {fq(hi, VOLTAGE, 6)})",
                                  "give an amplitude= inside the range, or duration=")
        else:
            pv = coupling.pulse_voltage if coupling.pulse_voltage is not None else hi
            if delta > 0:
                try:
                    v0 = float(X.v_of_j(model, PHASE_J_FRACTION * delta))
                except ValueError:
                    v0 = pv
                v0 = min(v0, pv, hi)
            else:
                v0 = min(pv, hi)
        if v0 <= idle:
            raise DesignError(f"the barrier level {v0 * 1e3:.4g} mV for the {gate} is not above "
                              f"the idle level {idle * 1e3:.4g} mV (J there: "
                              f"{float(X.j_of_v(model, v0)):.3g} Hz)",
                              "give amplitude= above idle, or duration=")
        # the fewest samples whose integral at v0 reaches the target (the
        # integral grows about linearly with n), then the level lowered to hit it
        n = max(2, math.ceil(target / max(integral(v0, 64) / 64, 1e-300)))
        if n <= 2 * MAX_SHAPED_SAMPLES:       # else refused without computing it
            n = fewest(v0, n)
        if n > MAX_SHAPED_SAMPLES:
            from .units import FREQUENCY, TIME
            why = (f"at J up to {fq(float(X.j_of_v(model, v0)), FREQUENCY)}"
                   + (f" ({PHASE_J_FRACTION:g} of the Zeeman difference "
                      f"{fq(delta, FREQUENCY)})" if amplitude is None and delta > 0 else ""))
            raise DesignError(f"the {gate} pulse would last about {fq(n * dt, TIME)} "
                              f"({n:,} samples) {why}, more than the {MAX_SHAPED_SAMPLES:,} "
                              "samples a shaped pulse may hold",
                              "a controlled phase needs a Zeeman difference of the pair well "
                              "above 1/(pulse length); give amplitude= or duration= for a "
                              "faster pulse, or use sqrtswap-based gates")
        level = solve(n, v0)
        if amplitude is not None and v0 - level > REQUEST_TOLERANCE * (v0 - idle):
            raise DesignError(
                f"the barrier level {v0 * 1e3:.4g} mV is not realisable on the sample grid: the "
                f"{gate} pulse would last {n} samples and its peak would have to drop to "
                f"{level * 1e3:.4g} mV (more than {REQUEST_TOLERANCE:.0%} of the pulse height)",
                f"nearest realisable: amplitude={fq(level, VOLTAGE)}; or give duration=")
    w = hann_window(n)
    return ExchangeDesign(gate, pre, n, post, level, idle, float(X.j_of_v(model, level)),
                          integral(level, n), target, tau, dt, w, angle)


@lru_cache(maxsize=1024)
def _design_exchange(gate: str, coupling: Coupling, ch, plunger_taus: tuple, dt: float,
                     duration: float | None, amplitude: float | None) -> ExchangeDesign:
    model = coupling.exchange
    tau = analog.rc_tau(ch.rise_time)
    target = EXCHANGE_GATES[gate].integral
    idle = coupling.idle_voltage
    settle = math.ceil(SETTLE_TAUS * tau / dt) if tau > 0 else 0
    pre = 0
    if coupling.detune:
        pre = max((math.ceil(SETTLE_TAUS * t / dt) for t in plunger_taus if t > 0), default=0)
        settle = max(settle, pre)
    post = settle
    top = analog.top_voltage(ch.v_min, ch.v_max, ch.bits)
    lo_v, hi_v = X.v_range(model)
    hi = min(top, hi_v)

    def integral(level: float, n: int) -> float:
        return j_integral(model, level, idle, pre, n, post, dt, tau)

    if duration is not None:
        check_duration_request(duration, dt, "exchange pulse")
        n = _samples(duration, dt, "exchange pulse")
        if integral(hi, n) < target:
            raise DesignError(
                f"even at the top of the barrier range ({hi * 1e3:.4g} mV) exchange over "
                f"{n} samples stays below the {gate} target",
                _shortest_exchange_hint(integral, hi, n, target, dt))
        level = brentq(lambda v: integral(v, n) - target, idle, hi, xtol=1e-16, rtol=1e-15,
                       maxiter=200)
    else:
        v0 = amplitude if amplitude is not None else coupling.pulse_voltage
        if v0 is None:
            raise DesignError(f"the coupling {'-'.join(coupling.dots)} has no pulse_voltage",
                              "give amplitude= or duration= on the step, or pulse_voltage in "
                              "the device file")
        if amplitude is not None and not (ch.v_min <= v0 <= top):
            near = min(max(v0, ch.v_min), top, hi_v)
            if near > idle:
                try:
                    _, lev = _at_level(integral, model, near, idle, target, dt)
                    if near - lev > REQUEST_TOLERANCE * (near - idle):
                        near = _highest_realisable(lev, idle)
                except DesignError:
                    pass
            raise DesignError(f"the barrier level {fq(v0, VOLTAGE)} is outside the range of "
                              f"channel '{ch.name}' ({fq(ch.v_min, VOLTAGE, 6)} to {fq(top, VOLTAGE, 6)})",
                              f"nearest realisable: amplitude={fq(near, VOLTAGE)}"
                              + ("" if near > idle else
                                 f"; exchange needs a level above idle ({idle * 1e3:.4g} mV)"))
        if not (lo_v <= v0 <= hi_v):
            raise DesignError(f"the barrier level {v0 * 1e3:.4g} mV is outside the J(V) "
                              f"calibration ({lo_v * 1e3:.4g} mV to {hi_v * 1e3:.4g} mV)",
                              "stay inside the calibration table")
        if v0 <= idle:
            raise DesignError(f"the barrier level {v0 * 1e3:.4g} mV is not above the idle "
                              f"level {idle * 1e3:.4g} mV", "raise amplitude=")
        n, level = _at_level(integral, model, v0, idle, target, dt)
        if amplitude is not None and v0 - level > REQUEST_TOLERANCE * (v0 - idle):
            near = _highest_realisable(level, idle)
            raise DesignError(
                f"the barrier level {v0 * 1e3:.4g} mV is not realisable on the sample grid: "
                f"J there is {float(X.j_of_v(model, v0)):.3g} Hz, so the {gate} pulse would last "
                f"{n} sample{'s' * (n != 1)} and its level would have to drop to "
                f"{level * 1e3:.4g} mV to give the exact exchange (more than "
                f"{REQUEST_TOLERANCE:.0%} of the pulse height)",
                (f"nearest realisable: amplitude={fq(near, VOLTAGE)} (or lower)"
                 if near is not None else "give a lower amplitude= or duration="))
    return ExchangeDesign(gate, pre, n, post, float(level), idle, float(X.j_of_v(model, level)),
                          integral(level, n), target, tau, dt)


# ---------------------------------------------------------- exchange in the qubit frames
#
# Basis order |↑↑>, |↑↓>, |↓↑>, |↓↓> (qubit a first; ↑ = σz eigenvalue +1).
# In the frame rotating at the mean Zeeman frequency the pair evolves under
#   H/h = J(t)·S1·S2 + (δ/2)·(σz_a − σz_b)/2,   δ = s_a·f_a − s_b·f_b
# (s = sign of g, f = Larmor frequency).  Each qubit's own rotating frame is
# R(t) = exp(+iπδt·(σz_a − σz_b)/2) away from it, so a gate played from t0 to
# t1 is U_r = R(t1)·U_mean·R(t0)†.  With virtual-Z frames F (|ψ_q> = Rz(F)|ψ_r>,
# Rz(F) = exp(−i Σ F σz/2)) the gate in the qubit frames is Rz(F')·U_r·Rz(F)†.
# Only the differential pre-phase ξ = (F_a − F_b)/2 − πδ·t0 matters before
# the gate; after it, free frame updates (F' = F + ε) absorb the rest.

SUBSTEPS = 16   # piecewise-constant sub-steps per sample for the pair propagator


def ordered_product(m: np.ndarray) -> np.ndarray:
    """``m[-1] @ … @ m[1] @ m[0]`` over the stack axis (the third from the
    end; m[0] acts first) of a stack of square matrices, with any leading
    batch axes, multiplied pairwise so the work is vectorised."""
    m = np.asarray(m)
    k = m.shape[-1]
    if m.shape[-3] == 0:
        return np.broadcast_to(np.eye(k, dtype=m.dtype), m.shape[:-3] + (k, k)).copy()
    while m.shape[-3] > 1:
        if m.shape[-3] % 2:
            pad = np.broadcast_to(np.eye(k, dtype=m.dtype), m.shape[:-3] + (1, k, k))
            m = np.concatenate([m, pad], axis=-3)
        m = m[..., 1::2, :, :] @ m[..., 0::2, :, :]
    return m[..., 0, :, :]


def pair_propagator(design: ExchangeDesign, model, delta: float) -> np.ndarray:
    """4×4 propagator of the exchange slot in the mean-Zeeman frame.

    J is averaged exactly over each of SUBSTEPS sub-steps per sample (so for
    δ = 0, where H commutes with itself, the result is exact); each sub-step
    is exponentiated in closed form.  Samples that repeat exactly (the
    settled plateau and idle parts, see :func:`_held_samples`) are raised to
    their count by repeated squaring, so long pulses cost no more than their
    edges."""
    dt = design.dt
    m = SUBSTEPS
    h = dt / m
    offsets = (np.arange(m) * h)[:, None] + ((_GL_X + 1.0) * 0.5 * h)[None, :]
    lo, hi = min(design.level, design.idle), max(design.level, design.idle)
    d = 2 * math.pi * delta / 2 * h       # (δ/2)·h in rad
    a_parts = []
    mid = np.eye(2, dtype=complex)
    runs = _slot_runs(design.level, design.idle, design.pre, design.n, design.post,
                      design.window)
    for x, yb, w in _held_samples(runs, dt, design.tau, design.idle):
        y = _held_nodes(x, yb, offsets, dt, design.tau, lo, hi)
        jbar = (X.j_of_v(model, y) * _GL_W).sum(axis=-1) * 0.5   # mean J per sub-step, Hz
        a = 2 * math.pi * jbar * h        # J·h in rad, shape (samples, m)
        a_parts.append((a * w[:, None]).ravel())
        # middle block H·h = −a/4·1 + [[d, a/2], [a/2, −d]]
        wq = np.sqrt(d * d + (a / 2) ** 2)
        with np.errstate(invalid="ignore", divide="ignore"):
            sw = np.where(wq > 0, np.sin(wq) / np.where(wq > 0, wq, 1), 1.0)
        cw = np.cos(wq)
        ph = np.exp(1j * a / 4)
        blocks = np.empty(a.shape + (2, 2), dtype=complex)
        blocks[..., 0, 0] = ph * (cw - 1j * sw * d)
        blocks[..., 1, 1] = ph * (cw + 1j * sw * d)
        blocks[..., 0, 1] = blocks[..., 1, 0] = ph * (-1j * sw * a / 2)
        # time order within a sample: later sub-steps multiply from the left
        per_sample = ordered_product(blocks)
        for i in np.flatnonzero(w > 1):
            per_sample[i] = np.linalg.matrix_power(per_sample[i], int(w[i]))
        mid = ordered_product(per_sample) @ mid
    outer = np.exp(-1j * math.fsum(np.concatenate(a_parts)) / 4) if a_parts else 1.0
    U = np.zeros((4, 4), dtype=complex)
    U[0, 0] = U[3, 3] = outer
    U[1:3, 1:3] = mid
    return U


def _post_rows(U: np.ndarray, T: np.ndarray, xi: np.ndarray) -> np.ndarray:
    """Coefficients (a, b, c, d) of the four post phases in Tr(T†·U_q) for
    pre-phases ``xi`` (array): shape (len(xi), 4)."""
    xi = np.atleast_1d(xi)
    pre = np.ones((len(xi), 4), dtype=complex)
    pre[:, 1] = np.exp(1j * xi)
    pre[:, 2] = np.exp(-1j * xi)
    # rows[j] = Σ_k conj(T_jk)·U_jk·pre_k
    return np.einsum("jk,jk,nk->nj", np.conj(T), U, pre)


_GAMMA = np.linspace(0.0, math.pi, 721)


def _best_post_many(rows: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """max over σ, η of |e^{-iσ}a + e^{iσ}d + e^{-iη}b + e^{iη}c| / 4 for each
    row (a, b, c, d).  With |X| = max_γ Re(e^{-iγ}X), the maximum over σ of
    Re(e^{-iγ}(e^{-iσ}a + e^{iσ}d)) is |a e^{-iγ} + conj(d) e^{iγ}| at
    σ = arg of that sum (and likewise for η), leaving a 1-D search over γ."""
    a, b, c, d = (rows[:, i:i + 1] for i in range(4))

    def parts(g):
        e = np.exp(-1j * g)
        zp = a * e + np.conj(d) * np.conj(e)
        zq = b * e + np.conj(c) * np.conj(e)
        return zp, zq

    zp, zq = parts(_GAMMA[None, :])
    obj = np.abs(zp) + np.abs(zq)
    g = _GAMMA[np.argmax(obj, axis=1)][:, None]
    step = _GAMMA[1] - _GAMMA[0]
    for _ in range(40):                          # local refinement around the best γ
        cand = g + np.linspace(-step, step, 5)[None, :]
        zp, zq = parts(cand)
        obj = np.abs(zp) + np.abs(zq)
        g = np.take_along_axis(cand, np.argmax(obj, axis=1)[:, None], axis=1)
        step /= 2
    zp, zq = parts(g)
    best = (np.abs(zp) + np.abs(zq))[:, 0] / 4
    return best, np.angle(zp)[:, 0], np.angle(zq)[:, 0]


def _best_post(U: np.ndarray, T: np.ndarray, xi: float) -> tuple[float, float, float]:
    """Best post-gate frame phases for a pre-phase ξ: returns (|Tr(T†U_q)|/4,
    σ, η) with U_q = diag(e^{-iσ}, e^{-iη}, e^{iη}, e^{iσ})·U·diag(1, e^{iξ}, e^{-iξ}, 1).
    Same search as :func:`_best_post_many`, for one row in scalar arithmetic."""
    a, b, c, d = (complex(z) for z in _post_rows(U, T, np.array([xi]))[0])
    dc, cc = d.conjugate(), c.conjugate()

    def obj(g: float) -> float:
        e = complex(math.cos(g), -math.sin(g))
        ec = e.conjugate()
        return abs(a * e + dc * ec) + abs(b * e + cc * ec)

    n = 96
    grid = [math.pi * k / n for k in range(n)]
    g = max(grid, key=obj)
    lo, hi = g - math.pi / n, g + math.pi / n
    for _ in range(60):                       # golden-section refinement
        m1 = hi - (hi - lo) * 0.6180339887498949
        m2 = lo + (hi - lo) * 0.6180339887498949
        if obj(m1) < obj(m2):
            lo = m1
        else:
            hi = m2
    g = (lo + hi) / 2
    e = complex(math.cos(g), -math.sin(g))
    zp = a * e + dc * e.conjugate()
    zq = b * e + cc * e.conjugate()
    return (abs(zp) + abs(zq)) / 4, math.atan2(zp.imag, zp.real), math.atan2(zq.imag, zq.real)


@dataclass(frozen=True)
class PairGate:
    """What an exchange pulse does in the qubit frames, and how to make it the
    target: the pre-phase it needs, and the frame updates after it."""
    U_mean: np.ndarray          # 4×4 in the mean-Zeeman frame
    xi_best: float              # optimal differential pre-phase ξ (rad, mod π); 0 if phase_free
    overlap_best: float         # |Tr(T†U_q)|/4 at ξ_best with the best post phases
    phase_free: bool = False    # the best overlap is the same at every ξ (no alignment needed)


# spread of the best overlap over the pre-phase ξ below which a gate needs no
# phase alignment (rounding of the overlap's search is about 1e-15; a
# sensitive gate's spread is of order 1: 0.4 to 0.5 for the demos' √SWAPs)
PHASE_FREE_TOL = 1e-12


@lru_cache(maxsize=256)
def _pair_gate_cached(design: ExchangeDesign, model, delta: float) -> PairGate:
    U = pair_propagator(design, model, delta)
    T = EXCHANGE_GATES[design.gate].target_for(design.angle)
    if not EXCHANGE_GATES[design.gate].aligned:
        # a diagonal target: Tr(T†U_q) sees only U's diagonal, which the
        # pre-phase ξ multiplies by phases the post phases absorb
        return PairGate(U, 0.0, float(_best_post(U, T, 0.0)[0]))
    xs = np.linspace(0, math.pi, 361, endpoint=False)
    vals = _best_post_many(_post_rows(U, T, xs))[0]
    if vals.max() - vals.min() <= PHASE_FREE_TOL:
        # a SWAP-like target: the pre-phase moves only entries whose phases the
        # post phases absorb, so every ξ is as good (the grid's spread is
        # rounding, 3e-16 for the ribbon's swap) and its argmax would be noise:
        # no alignment, and the post phases follow the ξ there is
        return PairGate(U, 0.0, float(vals.max()), phase_free=True)
    x0 = xs[int(np.argmax(vals))]
    step = xs[1] - xs[0]
    for _ in range(30):
        cand = x0 + np.linspace(-step, step, 7)
        vals = _best_post_many(_post_rows(U, T, cand))[0]
        x0 = cand[int(np.argmax(vals))]
        step /= 2
    best = _best_post(U, T, x0)[0]
    return PairGate(U, float(x0 % math.pi), float(best))


def pair_gate(design: ExchangeDesign, model, delta: float) -> PairGate:
    return _pair_gate_cached(design, model, float(delta))


def average_fidelity(overlap: float, d: int = 4) -> float:
    """Average gate fidelity from |Tr(T†U)|/d for a unitary U:
    F_pro = overlap², F_avg = (d·F_pro + 1)/(d + 1) (Horodecki et al.,
    PRA 60, 1888 (1999); Nielsen, Phys. Lett. A 303, 249 (2002))."""
    return (d * overlap ** 2 + 1) / (d + 1)


TABLE_POINTS = 2048


@lru_cache(maxsize=256)
def _post_table(design: ExchangeDesign, model, delta: float):
    """Best post phases (σ, η) and overlap on a grid of pre-phases ξ in
    [0, π], for interpolation (σ, η unwrapped along ξ)."""
    g = pair_gate(design, model, delta)
    xs = np.linspace(0.0, math.pi, TABLE_POINTS + 1)
    rows = _post_rows(g.U_mean, EXCHANGE_GATES[design.gate].target_for(design.angle), xs)
    best, sg, et = _best_post_many(rows)
    # (σ, η) and (σ + π, η + π) are the same gate up to a global sign, and σ, η
    # are defined mod 2π: follow the branch continuously so interpolation is smooth
    for i in range(1, len(xs)):
        best_shift, best_dist = (0.0, 0.0), math.inf
        for ks in (-2, -1, 0, 1, 2):
            for ke in (-2, -1, 0, 1, 2):
                if (ks - ke) % 2:
                    continue            # only equal parities of π shifts are equivalent
                ds = sg[i] + ks * math.pi - sg[i - 1]
                de = et[i] + ke * math.pi - et[i - 1]
                dist = ds * ds + de * de
                if dist < best_dist:
                    best_dist, best_shift = dist, (ks * math.pi, ke * math.pi)
        sg[i] += best_shift[0]
        et[i] += best_shift[1]
    return xs, best, sg, et


def best_post_phases(design: ExchangeDesign, model, delta: float, xi: float) -> tuple[float, float, float]:
    """(overlap, σ, η) for pre-phase ξ by cubic interpolation in a cached table
    (agrees with the direct search to ~1e-9 rad; tests/test_pulses.py).  Uses
    ξ → ξ + π ⇔ σ → σ + π (the pre-phase diag(1, −1, −1, 1) is a global sign
    times a flip of the outer phases)."""
    xs, best, sg, et = _post_table(design, model, float(delta))
    k, x0 = divmod(xi, math.pi)
    i = min(int(x0 / xs[1]), TABLE_POINTS - 2)
    i = max(i - 1, 0)
    idx = slice(i, i + 4)
    xv = xs[idx]

    def interp(yv):
        # cubic Lagrange through 4 points
        tot = 0.0
        for j in range(len(xv)):
            w = 1.0
            for m in range(len(xv)):
                if m != j:
                    w *= (x0 - xv[m]) / (xv[j] - xv[m])
            tot += w * yv[j]
        return tot

    return (float(interp(best[idx])), float(interp(sg[idx]) + k * math.pi), float(interp(et[idx])))


def frame_updates_after(design: ExchangeDesign, model, delta: float, xi: float,
                        t1: float, F_a: float, F_b: float) -> tuple[float, float, float]:
    """Frame updates (ε_a, ε_b) to apply after an exchange that ends at ``t1``
    (s, from the start of the run) when the pre-phase is ``xi``; returns
    (ε_a, ε_b, average gate fidelity of the compensated gate in the frames)."""
    ov, sigma, eta = best_post_phases(design, model, delta, xi)
    # post = Rz(F')·R(t1) on the middle block: diag(e^{-iη'}, e^{iη'}) with
    # η' = (F'_a − F'_b)/2 − πδ t1, and outer e^{∓i(F'_a + F'_b)/2} relative to the pre
    # outer phases e^{±i(F_a + F_b)/2}: σ = (ε_a + ε_b)/2.
    diff = 2 * (eta + math.pi * delta * t1)          # F'_a − F'_b
    summ = 2 * sigma + (F_a + F_b)                    # F'_a + F'_b
    Fa_new = (summ + diff) / 2
    Fb_new = (summ - diff) / 2
    return Fa_new - F_a, Fb_new - F_b, average_fidelity(ov)


# ---------------------------------------------------------- spectators of a burst
#
# A burst on one dot also drives every other dot on the same line, off
# resonance by the difference of their frequencies.  The spectator's spin is
# mostly shifted in phase (the AC Stark or light shift, ≈ Ω²/(2Δ) for
# Ω ≪ Δ); that phase is deterministic and is removed with a frame update.
# What remains (a small off-resonant flip) is left to the simulation.

SPECTATOR_SUBSTEPS = 4


def _spectator_propagator(design: BurstDesign, rabi_per_volt: float, detuning: float,
                          dt: float, sign: int) -> np.ndarray:
    """2×2 propagator of a spectator dot under a burst designed for another
    dot, in the spectator's rotating frame, whose frame is ``detuning`` (Hz)
    away from the burst's tone: exact exponentials of the sampled envelope,
    SPECTATOR_SUBSTEPS per sample."""
    m = SPECTATOR_SUBSTEPS
    h = dt / m
    t = (np.arange(design.n * m) + 0.5) * h
    e = np.repeat(np.asarray(design.envelope), m)
    b = design.amplitude * e * np.exp(2j * math.pi * detuning * t)     # b' = c·e^{−i2π IF' t}
    # H/h = (s·r·Re b σx + r·Im b σy)/2 ; exact 2×2 exponentials per sub-step
    hx = sign * rabi_per_volt * b.real / 2
    hy = rabi_per_volt * b.imag / 2
    w = 2 * math.pi * h * np.hypot(hx, hy)
    with np.errstate(invalid="ignore", divide="ignore"):
        nx = np.where(w > 0, 2 * math.pi * h * hx / np.where(w > 0, w, 1), 0.0)
        ny = np.where(w > 0, 2 * math.pi * h * hy / np.where(w > 0, w, 1), 0.0)
    c, s = np.cos(w), np.sin(w)
    # exp(−i w (nx σx + ny σy)) = [[c, −i s (nx − i ny)], [−i s (nx + i ny), c]]
    M = np.empty((len(c), 2, 2), dtype=complex)
    M[:, 0, 0] = c
    M[:, 1, 1] = c
    M[:, 0, 1] = -1j * s * (nx - 1j * ny)
    M[:, 1, 0] = -1j * s * (nx + 1j * ny)
    return ordered_product(M)


@lru_cache(maxsize=16384)
def spectator_phase(design: BurstDesign, rabi_per_volt: float, detuning: float, dt: float,
                    sign: int) -> float:
    """z angle α (rad) that a burst leaves on a spectator dot whose rotating
    frame is ``detuning`` (Hz) away from the burst's tone: the spectator's
    propagator is closest to Rz(α) = exp(−iασz/2).  Frame update: F −= α."""
    if design.n == 0 or detuning == 0:
        return 0.0
    U = _spectator_propagator(design, rabi_per_volt, detuning, dt, sign)
    return float(-2 * np.angle(U[0, 0]))


@lru_cache(maxsize=16384)
def spectator_flip(design: BurstDesign, rabi_per_volt: float, detuning: float, dt: float,
                   sign: int = 1) -> float:
    """Probability |U_↓↑|² that a burst designed for one dot flips a spectator
    dot ``detuning`` (Hz) away on the same line, from the exact propagation
    of the sampled envelope (:func:`_spectator_propagator`).  For a square
    burst of Rabi frequency Ω/2π and length t this is the off-resonant Rabi
    formula P = Ω²/(Ω²+Δ²)·sin²(√(Ω²+Δ²)·t/2) (Rabi, Phys. Rev. 51, 652
    (1937)); tests/test_check.py compares the two."""
    if design.n == 0:
        return 0.0
    U = _spectator_propagator(design, rabi_per_volt, detuning, dt, sign)
    return float(min(1.0, abs(U[1, 0]) ** 2))
