"""Numeric helpers of the preview: display units, min/max decimation and the
baseband spectrum of an I/Q line.  Pure functions, arrays in, arrays out."""

from __future__ import annotations

import math

import numpy as np
from scipy import fft as _fft

# Smallest FFT length: short windows are zero-padded to this many points so
# the drawn spectrum is a smooth curve rather than a few coarse bins.
MIN_FFT_POINTS = 8192

# Longer windows are cut into segments of this many samples whose amplitude
# spectra are averaged (root mean square), so memory stays bounded.
MAX_FFT_POINTS = 2 ** 21

# Spectrum amplitudes below (peak - SPECTRUM_RANGE_DB) are clipped to that floor.
SPECTRUM_RANGE_DB = 90.0


def time_unit(length: float) -> tuple[float, str]:
    """Display unit for a time axis whose window is ``length`` seconds long.

    Parameters
    ----------
    length : float, s

    Returns
    -------
    scale, unit : float, str
        Multiply seconds by ``scale`` to get ``unit`` (``"ns"`` below 2 µs,
        ``"µs"`` below 2 ms, ``"ms"`` below 2 s, else ``"s"``).
    """
    if length < 2e-6:
        return 1e9, "ns"
    if length < 2e-3:
        return 1e6, "µs"
    if length < 2.0:
        return 1e3, "ms"
    return 1.0, "s"


def volt_unit(peak: float) -> tuple[float, str]:
    """Display unit for a voltage axis whose largest magnitude is ``peak`` V.

    Returns
    -------
    scale, unit : float, str
        ``(1e3, "mV")`` below 1 V, else ``(1.0, "V")``.
    """
    return (1e3, "mV") if abs(peak) < 1.0 else (1.0, "V")


def frequency_unit(span: float) -> tuple[float, str]:
    """Display unit for a frequency axis reaching ``span`` Hz in magnitude.

    Returns
    -------
    scale, unit : float, str
        GHz from 2 GHz up, MHz from 2 MHz up, else kHz.
    """
    if span >= 2e9:
        return 1e-9, "GHz"
    if span >= 2e6:
        return 1e-6, "MHz"
    return 1e-3, "kHz"


def minmax_envelope(x: np.ndarray, columns: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Decimate ``x`` to at most ``columns`` bins, keeping each bin's extremes.

    Every sample lies in exactly one bin, so no spike is lost however narrow:
    the band between the returned minima and maxima contains every sample.

    Parameters
    ----------
    x : array_like, shape (n,)
    columns : int
        Maximum number of bins (one per pixel column of the axis).

    Returns
    -------
    starts : ndarray of int, shape (m,)
        Index of the first sample of each bin (``starts[0] == 0``); bin ``k``
        covers ``starts[k] .. starts[k+1]-1`` (the last one runs to ``n-1``).
    lows, highs : ndarray, shape (m,)
        Minimum and maximum of each bin.
    """
    x = np.asarray(x)
    n = x.shape[0]
    if n == 0:
        raise ValueError("minmax_envelope needs at least one sample")
    per_bin = max(int(math.ceil(n / max(int(columns), 1))), 1)
    starts = np.arange(0, n, per_bin)
    return starts, np.minimum.reduceat(x, starts), np.maximum.reduceat(x, starts)


def max_envelope(y: np.ndarray, columns: int) -> tuple[np.ndarray, np.ndarray]:
    """Peak-hold decimation: the maximum of ``y`` over at most ``columns`` bins.

    Returns
    -------
    starts, highs : ndarray
        As in :func:`minmax_envelope`.
    """
    starts, _, highs = minmax_envelope(y, columns)
    return starts, highs


def iq_spectrum(i: np.ndarray, q: np.ndarray, sample_rate: float
                ) -> tuple[np.ndarray, np.ndarray]:
    """Amplitude spectrum of the complex baseband ``z = I + iQ``.

    Parameters
    ----------
    i, q : array_like, shape (n,), V
        In-phase and quadrature samples.
    sample_rate : float, Hz

    Returns
    -------
    f_if : ndarray, Hz
        Intermediate frequencies, ascending, covering ``[-fs/2, fs/2)``.
    level : ndarray, dBV
        ``20·log10|Z(f)|`` with ``Z(f) = (1/n)·Σ z·exp(-2πi f t)``, so a
        tone ``A·exp(2πi f0 t)`` filling the window reads ``20·log10(A)`` at
        ``f0``, and a burst filling a fraction ``r`` of it reads
        ``20·log10(r·A)``.  Clipped below at ``SPECTRUM_RANGE_DB`` under the
        peak (and at -300 dBV when the signal is all zero).

    Notes
    -----
    Windows longer than ``MAX_FFT_POINTS`` are cut into
    :func:`spectrum_segments` consecutive segments; the level is then the
    root mean square over segments of each segment's amplitude spectrum
    (a steady tone still reads ``20·log10(A)``).

    With the mixer convention ``RF = Re[(I + iQ)·exp(2πi f_LO t)]`` a
    component at ``f_if`` appears at ``f_LO + f_if``.  Windows shorter than
    ``MIN_FFT_POINTS`` are zero-padded, which interpolates the curve without
    adding resolution.  No taper is applied: every sample of the window
    weighs the same, so a burst reads the same wherever it sits in the window
    (runs start and end idle, so the window edges rarely cut a burst; when a
    zoomed window does, the cut shows as sinc side lobes).  Common practice,
    no source.
    """
    i = np.asarray(i, dtype=float)
    q = np.asarray(q, dtype=float)
    n = i.shape[0]
    if n <= MAX_FFT_POINTS:
        nfft = _fft.next_fast_len(max(n, MIN_FFT_POINTS))
        mag = np.abs(_fft.fftshift(_fft.fft(i + 1j * q, nfft))) / n
    else:
        nfft = MAX_FFT_POINTS
        power = np.zeros(nfft)
        segments = spectrum_segments(n)
        for k in range(segments):
            sl = slice(k * nfft, min((k + 1) * nfft, n))
            seg = _fft.fft(i[sl] + 1j * q[sl], nfft) / (sl.stop - sl.start)
            power += seg.real ** 2 + seg.imag ** 2
        mag = np.sqrt(_fft.fftshift(power) / segments)
    f = _fft.fftshift(_fft.fftfreq(nfft, 1.0 / sample_rate))
    peak = float(mag.max())
    floor = peak * 10.0 ** (-SPECTRUM_RANGE_DB / 20.0) if peak > 0 else 1e-15
    return f, 20.0 * np.log10(np.maximum(mag, floor))


def spectrum_segments(n: int) -> int:
    """Number of segments :func:`iq_spectrum` averages for ``n`` samples
    (1 up to ``MAX_FFT_POINTS``)."""
    return max(1, -(-int(n) // MAX_FFT_POINTS))


# Spectrum zoom: the shown span covers every component within OCCUPIED_DB of
# the peak and the marked frequencies, plus OCCUPIED_PAD of the span on each
# side; never narrower than the band over MIN_SPAN_DIVISOR; the whole band
# when that would cover more than FULL_BAND_FRACTION of it.
OCCUPIED_DB = 50.0
OCCUPIED_PAD = 0.15
MIN_SPAN_DIVISOR = 20.0
FULL_BAND_FRACTION = 0.6


def occupied_span(f: np.ndarray, level: np.ndarray, marks: list[float],
                  band: tuple[float, float]) -> tuple[float, float, bool]:
    """Frequency range worth showing of a spectrum.

    Parameters
    ----------
    f : ndarray, Hz
        Ascending frequencies.
    level : ndarray, dB
        Spectrum level at ``f``.
    marks : list of float, Hz
        Frequencies that must stay visible (Larmor frequencies in the band).
    band : (float, float), Hz
        The full band ``f`` covers.

    Returns
    -------
    lo, hi : float, Hz
    zoomed : bool
        False when the whole band is returned.
    """
    peak = float(np.max(level))
    strong = f[level >= peak - OCCUPIED_DB]
    pts = list(marks) + ([float(strong[0]), float(strong[-1])] if strong.size else [])
    width = band[1] - band[0]
    if not pts:
        return band[0], band[1], False
    lo, hi = min(pts), max(pts)
    pad = OCCUPIED_PAD * (hi - lo)
    lo, hi = lo - pad, hi + pad
    min_span = width / MIN_SPAN_DIVISOR
    if hi - lo < min_span:
        mid = (lo + hi) / 2
        lo, hi = mid - min_span / 2, mid + min_span / 2
    lo, hi = max(lo, band[0]), min(hi, band[1])
    if hi - lo > FULL_BAND_FRACTION * width:
        return band[0], band[1], False
    return lo, hi, True
