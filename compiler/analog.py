"""What a generator channel really outputs: the shared model of the analog
path, used by waveform synthesis (pulse design, the as-played copy) and by
the simulator, so that what is simulated is what is played.

Chain, for every analog output:

1. DAC: the sample is quantised to a code k (0 ≤ k < 2^bits) of
   v = v_min + k·LSB with LSB = (v_max − v_min)/2^bits, and held for one
   sample period (zero-order hold: sample i on [i·dt, (i+1)·dt)).
2. Analog response: a first-order low-pass (RC) with time constant
   τ = t_rise/ln 9 (10–90 % rise time of an RC stage; bandwidth
   0.35/t_rise; common practice, no source).
3. Optional bias tee: a first-order high-pass H(s) = sτ_b/(1 + sτ_b), whose
   DC port adds the channel's DC level (common practice).

The RC response of a held staircase is computed exactly at any time, not by
numerical integration: within sample k, y(t) = x_k + (y_k − x_k)·e^{−(t−t_k)/τ}.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

LN9 = math.log(9.0)


def rc_tau(rise_time: float) -> float:
    """RC time constant (s) of a 10–90 % rise time (s); 0 for an ideal path."""
    return rise_time / LN9 if rise_time > 0 else 0.0


def lsb(v_min: float, v_max: float, bits: int) -> float:
    """Volts per DAC code."""
    return (v_max - v_min) / float(2 ** bits)


def code_dtype(bits: int) -> np.dtype:
    """The unsigned integer type that holds every code 0 … 2^bits − 1 of a
    ``bits``-wide DAC: uint16 up to 16 bits, uint32 up to 32.  Raises
    ValueError for other widths (the device loader allows 1 to
    ``device.model.MAX_BITS``)."""
    if not isinstance(bits, (int, np.integer)) or not 1 <= bits <= 32:
        raise ValueError(f"no code type for a {bits!r}-bit DAC")
    dt = np.dtype(np.uint16 if bits <= 16 else np.uint32)
    assert np.iinfo(dt).max >= 2 ** bits - 1
    return dt


def to_codes(x: np.ndarray, bits: int, out: np.ndarray | None = None) -> np.ndarray:
    """Cast rounded code values (floats) to :func:`code_dtype` of ``bits``,
    into ``out`` when given.  The cast itself is checked: every value must lie
    in [0, 2^bits − 1] and the target type must hold that range, otherwise
    ValueError; a code never wraps around."""
    dt = code_dtype(bits)
    if out is not None and (out.dtype.kind != "u" or np.iinfo(out.dtype).max < 2 ** bits - 1):
        raise ValueError(f"{out.dtype} cannot hold the codes of a {bits}-bit DAC")
    x = np.asarray(x)
    if x.size:
        lo, hi = x.min(), x.max()
        if not (0 <= lo and hi <= 2 ** bits - 1):      # also refuses NaN
            raise ValueError(f"codes {lo!r} .. {hi!r} outside 0 .. {2 ** bits - 1} "
                             f"of a {bits}-bit DAC")
    if out is None:
        return x.astype(dt)
    out[...] = x
    return out


def quantise(volts: np.ndarray, v_min: float, v_max: float, bits: int) -> tuple[np.ndarray, np.ndarray]:
    """Nearest DAC codes (of :func:`code_dtype`) and their voltages.  The
    caller has checked the range: values up to half an LSB beyond it round to
    the end codes, anything further raises (nothing is clipped silently)."""
    q = lsb(v_min, v_max, bits)
    top = 2 ** bits - 1
    x = np.subtract(volts, v_min, dtype=float)       # one work array, reused in place
    x *= 1.0 / q
    np.rint(x, out=x)
    if x.size and (x.min() < 0 or x.max() > top):
        raise ValueError("value outside the DAC range reached quantisation")
    codes = to_codes(x, bits)
    np.multiply(codes, q, out=x)
    x += v_min
    return codes, x


def top_voltage(v_min: float, v_max: float, bits: int) -> float:
    """Highest voltage the DAC can output: v_max − LSB/2 rounds to the top code."""
    return v_min + (2 ** bits - 1) * lsb(v_min, v_max, bits)


# block length of :func:`first_order` (measured: 256 to 1024 are equally fast,
# 0.03 s for 10^6 complex samples; longer blocks lose more digits to the
# scaled partial sums)
RECURSION_BLOCK = 256


def first_order(b, p, x: np.ndarray, y0=0.0) -> np.ndarray:
    """y_{k+1} = p·y_k + b·x_k along the last axis of ``x`` (real or complex,
    any leading axes), y_0 = ``y0`` (a scalar or one per leading index):
    returns y_1 … y_n.

    In blocks of L samples at once, not sample by sample: from a zero state,
    y_{i+1} = p^{i+1}·Σ_{j≤i} p^{−(j+1)}·b·x_j inside a block (one cumulative
    sum; L keeps p^{±L} within 1e±200, so nothing overflows), and every block
    adds p^{i+1} times its start state.  The start states follow the same
    recursion with pole p^L over the blocks (solved the same way, a level per
    factor L).  Rounding: a partial sum's terms, taken back by p^{i+1}, are
    each no larger than the sequential recursion's, so the error is of the
    same order (checked against the sample-by-sample recursion and
    scipy.signal.lfilter in tests/test_synth.py).  numpy only: scipy.signal,
    imported for this alone, took about 1 s of every command's start-up."""
    x = np.asarray(x)
    n = x.shape[-1]
    kind = np.result_type(x, np.asarray(p), np.asarray(b), np.asarray(y0), float)
    lead = x.shape[:-1]
    s0 = np.broadcast_to(np.asarray(y0, dtype=kind), lead)
    bx = np.multiply(b, x, dtype=kind)
    if n == 0:
        return bx
    ap = abs(p)
    if ap < 1e-100:                       # no state survives a sample (to 1e-100)
        bx[..., 0] += p * s0
        return bx
    L = n if ap == 1 else max(1, min(n, RECURSION_BLOCK, int(200 / abs(math.log10(ap)))))
    nb = -(-n // L)
    if nb * L > n:
        bx = np.concatenate([bx, np.zeros(lead + (nb * L - n,), dtype=kind)], axis=-1)
    blocks = bx.reshape(lead + (nb, L))
    pw = np.power(np.asarray(p, dtype=kind), np.arange(1, L + 1))      # p^(i+1)
    out = np.cumsum(blocks / pw, axis=-1)
    out *= pw
    if nb == 1:
        starts = s0[..., None]
    else:
        starts = np.concatenate([s0[..., None], first_order(1.0, pw[-1], out[..., :-1, -1], s0)],
                                axis=-1)
    out += starts[..., None] * pw
    return out.reshape(lead + (nb * L,))[..., :n]


def rc_boundaries(x: np.ndarray, dt: float, tau: float, y0=0.0) -> np.ndarray:
    """RC output at the sample boundaries t_k = k·dt for held input ``x``
    (length n) starting from ``y0``; returns n + 1 values.  Works on real or
    complex arrays (I + iQ filtered together, as two identical real paths)."""
    x = np.asarray(x)
    n = x.shape[-1]
    if tau <= 0:
        y = np.empty(x.shape[:-1] + (n + 1,), dtype=x.dtype)
        y[..., 0] = y0
        y[..., 1:] = x
        return y
    a = math.exp(-dt / tau)
    # y_{k+1} = a·y_k + (1 − a)·x_k, as the step from y0: y − y0 follows the
    # same recursion with x − y0, so a line held at y0 stays exactly there and
    # a settled tail rounds to its level exactly (no jitter in the last bit of
    # an idle barrier, which an adaptive solver sees as many tiny steps)
    ref = np.asarray(y0)[..., None] if np.ndim(y0) else y0
    out = first_order(1.0 - a, a, x - ref, 0.0)
    out += ref
    y = np.empty(x.shape[:-1] + (n + 1,), dtype=out.dtype)
    y[..., 0] = y0
    y[..., 1:] = out
    return y


def rc_oversampled(x: np.ndarray, dt: float, tau: float, m: int, y0=0.0) -> np.ndarray:
    """Exact RC output at the midpoints of m sub-intervals of every sample:
    t = (k + (j + 1/2)/m)·dt, j = 0..m−1; returns n·m values."""
    x = np.asarray(x)
    n = x.shape[-1]
    if tau <= 0:
        return np.repeat(x, m, axis=-1)
    yb = rc_boundaries(x, dt, tau, y0)[..., :-1]
    u = (np.arange(m) + 0.5) / m * dt
    decay = np.exp(-u / tau)
    y = x[..., :, None] + (yb - x)[..., :, None] * decay
    return y.reshape(x.shape[:-1] + (n * m,))


def rc_mean_per_sub(x: np.ndarray, dt: float, tau: float, m: int, y0=0.0) -> np.ndarray:
    """Exact mean of the RC output over each of m sub-intervals of every
    sample (the value a piecewise-constant propagator should use to keep the
    time integral of the signal exact)."""
    x = np.asarray(x)
    n = x.shape[-1]
    if tau <= 0:
        return np.repeat(x, m, axis=-1)
    yb = rc_boundaries(x, dt, tau, y0)[..., :-1]
    h = dt / m
    j = np.arange(m)
    # mean of e^{-u/τ} over [j h, (j+1) h]
    w = tau / h * (np.exp(-j * h / tau) - np.exp(-(j + 1) * h / tau))
    y = x[..., :, None] + (yb - x)[..., :, None] * w
    return y.reshape(x.shape[:-1] + (n * m,))


def rc_at(x: np.ndarray, dt: float, tau: float, t: np.ndarray, y0=0.0) -> np.ndarray:
    """Exact RC output at arbitrary times ``t`` (s) inside [0, n·dt]; after the
    last sample the input is taken as held at its last value."""
    x = np.asarray(x)
    t = np.asarray(t, dtype=float)
    n = x.shape[-1]
    k = np.clip(np.floor(t / dt).astype(int), 0, n - 1)
    if tau <= 0:
        return x[..., k]
    yb = rc_boundaries(x, dt, tau, y0)
    return x[..., k] + (yb[..., k] - x[..., k]) * np.exp(-(t - k * dt) / tau)


def bias_tee(y: np.ndarray, h: float, tau_b: float) -> np.ndarray:
    """High-pass of a bias tee with time constant ``tau_b`` (s) applied to a
    signal sampled every ``h`` seconds (treated as held): out = y − lowpass(y).
    ``tau_b`` = 0 means DC coupled (no change)."""
    if tau_b <= 0:
        return np.asarray(y)
    low = rc_boundaries(y, h, tau_b)[..., :-1]
    return y - low


def predistort_bias_tee(v: np.ndarray, dt: float, tau_b: float) -> np.ndarray:
    """Pre-distortion that cancels a bias tee's droop: V_pre = V + (1/τ)∫V dt
    (common practice), with the integral taken over the held samples up to the
    middle of each sample."""
    if tau_b <= 0:
        return np.asarray(v)
    v = np.asarray(v, dtype=float)
    integral = (np.cumsum(v) - 0.5 * v) * dt
    return v + integral / tau_b


def tone_burst(envelope: np.ndarray, if_freq: float, dt: float, tau: float) -> np.ndarray:
    """Held samples x_k that make a tone at ``if_freq`` (Hz) with envelope
    e_k, seen through hold + RC, average exactly e_k over every sample in the
    frame rotating at the IF:  (1/dt)∫ y(t)·e^{−iω(t − t0)} dt = e_k on sample
    k, with y the RC output and t0 the first sample's start.  The RC tail
    after the last sample is folded into the last sample, so the drive's
    time integral is exact as well.  Multiply by A·e^{iφ}·e^{iω t0}.

    Inverts the exact per-sample response:  within sample k the RC output is
    x_k + (y_k − x_k)e^{−u/τ}, so the rotating-frame mean is
    e^{−iωkdt}[x_k S0 + (y_k − x_k) S1] with S0 = mean of e^{−iωu},
    S1 = mean of e^{−u/τ − iωu} over the sample; solved as a first-order
    recursion (:func:`first_order`)."""
    e = np.asarray(envelope, dtype=float)
    n = len(e)
    w = 2 * math.pi * if_freq
    k = np.arange(n)
    rot = np.exp(1j * w * k * dt)
    x_ = w * dt / 2
    s0 = (math.sin(x_) / x_ if x_ != 0 else 1.0) * complex(math.cos(x_), -math.sin(x_))
    if tau <= 0 or n == 0:
        return e * rot / s0
    lam = 1.0 / tau + 1j * w
    s1 = (1 - np.exp(-lam * dt)) / (lam * dt)
    a = math.exp(-dt / tau)
    alpha = 1.0 / (s0 - s1)
    d = e * rot                                       # wanted mean, in the line's frame
    # y_{k+1} = (a − (1−a)α S1)·y_k + (1−a)α·d_k,  y_0 = 0
    pole = a - (1 - a) * alpha * s1
    ynext = first_order((1 - a) * alpha, pole, d)
    y = np.concatenate(([0.0], ynext[:-1]))
    x = alpha * (d - s1 * y)
    # last sample: its own mean plus the tail after it give the wanted integral
    kl = n - 1
    tail = tau / (1 + 1j * w * tau)                   # ∫ e^{−u/τ − iωu} du
    r_last = np.exp(-1j * w * kl * dt)
    r_end = np.exp(-1j * w * n * dt)
    coef_x = r_last * dt * (s0 - s1) + r_end * tail * (1 - a)
    coef_y = r_last * dt * s1 + r_end * tail * a
    x[kl] = (e[kl] * dt - coef_y * y[kl]) / coef_x
    return x


@lru_cache(maxsize=4096)
def tone_shape(envelope: tuple, if_freq: float, dt: float, tau: float) -> np.ndarray:
    """:func:`tone_burst` of an envelope given as a tuple, cached and
    read-only: repeated bursts (the same envelope on the same line) share one
    array in the scheduler's quantisation check and in synthesis."""
    x = tone_burst(np.asarray(envelope, dtype=float), if_freq, dt, tau)
    x.setflags(write=False)
    return x


def burst_quantisation_loss(envelope, amplitude: float, phase: float, if_freq: float,
                            start: int, dt: float, tau: float, v_min: float, v_max: float,
                            bits: int) -> tuple[float, bool]:
    """Fraction of a burst's drive area lost to the DAC codes, and whether
    nothing is left (every sample on the same code pair).

    The burst alone (A·e^{iφ}·e^{iω t0}·x_k, :func:`tone_burst`) is rounded to
    the I and Q codes; the played area along the ideal one is the projection
    Σ q_k·conj(x_k) / Σ |x_k|², and the loss is |1 − that| (an error of
    length or of axis alike).  A cheap bound skips the rounding when the
    loss is surely below 1e-3: each code is at most half an LSB off, so the
    loss is at most (LSB/√2)·n / (A·Σ|e_k|)."""
    e = np.asarray(envelope, dtype=float)
    n = len(e)
    if n == 0 or amplitude <= 0:
        return 0.0, False
    q = lsb(v_min, v_max, bits)
    bound = (q / math.sqrt(2)) * n / (amplitude * float(np.abs(e).sum()))
    if bound < 1e-3:
        return bound, False
    shape = (tone_shape(envelope, if_freq, dt, tau) if isinstance(envelope, tuple)
             else tone_burst(e, if_freq, dt, tau))
    x = amplitude * np.exp(1j * (phase + 2 * math.pi * if_freq * start * dt)) * shape
    def rq(v):
        return np.rint((v - v_min) / q) * q + v_min
    zero = complex(rq(np.zeros(1))[0], rq(np.zeros(1))[0])
    played = rq(x.real) + 1j * rq(x.imag) - zero
    ratio = complex(np.vdot(x, played) / np.vdot(x, x))
    nothing = bool(np.all(played == 0))
    return abs(1 - ratio), nothing


# ------------------------------------------------------------- I/Q mixer
#
# An I/Q mixer with Q's gain g relative to I, Q skewed by φ from quadrature
# and DC offsets o_i, o_q at its inputs plays (model of
# compiler.device.model.Mixer; common practice, no source)
#
#     c_eff = (I + o_i) + i·g·e^{iφ}·(Q + o_q),   V(t) = Re[c_eff·e^{iωt}].
#
# Written with c = I + iQ, the uncorrected mixer gives
# c_eff = ½(1 + g·e^{iφ})·c + ½(1 − g·e^{iφ})·c* (+ the offsets): the c*
# part is the image, a tone at LO − IF for a tone c ∝ e^{i2π·IF·t}.


def mixer_output(i: np.ndarray, q: np.ndarray, gain: float = 1.0, skew: float = 0.0,
                 offset_i: float = 0.0, offset_q: float = 0.0) -> np.ndarray:
    """Complex baseband (V) the mixer turns into RF from the voltages ``i``,
    ``q`` at its inputs: (i + offset_i) + i·g·e^{iφ}·(q + offset_q)."""
    return (np.asarray(i, dtype=float) + offset_i) + (1j * gain * complex(
        math.cos(skew), math.sin(skew))) * (np.asarray(q, dtype=float) + offset_q)


def mixer_predistort(c, gain: float = 1.0, skew: float = 0.0, offset_i: float = 0.0,
                     offset_q: float = 0.0) -> tuple:
    """The I and Q (V) to play so that the mixer outputs the complex baseband
    ``c``: the inverse of :func:`mixer_output`,

        Q = Im c / (g·cos φ) − o_q,   I = Re c + tan φ·Im c − o_i.

    Parameters
    ----------
    c : complex array, V
        The intended baseband I + iQ of an ideal mixer.
    gain, skew : float (ratio, rad)
        Q's gain over I's and the skew from quadrature (|φ| < π/2).
    offset_i, offset_q : float, V
        The mixer's input offsets.
    """
    c = np.asarray(c)
    re_c, im_c = np.real(c), np.imag(c)
    return (re_c + math.tan(skew) * im_c - offset_i,
            im_c * (1.0 / (gain * math.cos(skew))) - offset_q)


def image_ratio(gain: float, skew: float) -> float:
    """Amplitude of the image over the wanted sideband of an uncorrected
    mixer: |1 − g·e^{iφ}| / |1 + g·e^{iφ}| (0 for an ideal mixer)."""
    z = gain * complex(math.cos(skew), math.sin(skew))
    return abs(1 - z) / abs(1 + z)
