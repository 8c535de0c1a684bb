"""Which stretch of a run the preview shows, and the checks on the request.

The window is given either as a time interval ``[start, stop)`` in seconds or
as the index of one timeline step; both are turned into a :class:`Window`
holding the sample range to read and the time range to display.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import DotseqError, suggest
from ..synth.types import StepRecord, Waveforms
from ..units import FREQUENCY, TIME, format_quantity

# File formats the preview writes, by suffix.
FORMATS = {".png": "png", ".svg": "svg", ".pdf": "pdf"}

# Margin around a zoomed step: this fraction of its length on each side, but
# at least STEP_MARGIN_MIN samples (so a zero-length frame update still shows
# its neighbourhood).
STEP_MARGIN_FRACTION = 0.15
STEP_MARGIN_MIN = 16


class PreviewError(DotseqError):
    """The preview request cannot be drawn (bad window, suffix, output path or
    waveform data)."""
    stage = "preview"


@dataclass(frozen=True)
class Window:
    """The part of a run the preview shows.

    Attributes
    ----------
    start, stop : float, s
        Displayed time range (the x limits of every trace axis).
    i0, i1 : int
        Samples ``i0 .. i1-1`` are read; they cover ``[start, stop)``.
    step : StepRecord or None
        The step zoomed on, when the window was chosen by step index.
    """

    start: float
    stop: float
    i0: int
    i1: int
    step: StepRecord | None = None

    @property
    def n(self) -> int:
        """Number of samples in the window."""
        return self.i1 - self.i0

    @property
    def length(self) -> float:
        """Displayed length in s."""
        return self.stop - self.start


def _t(x: float) -> str:
    return format_quantity(x, TIME, digits=6)


def output_format(out_path: str | Path) -> tuple[Path, str]:
    """The target path and the image format its suffix asks for.

    Parameters
    ----------
    out_path : str or Path
        Where the image goes; the suffix (case-insensitive) picks the format.

    Returns
    -------
    path, format : Path, str
        The path and one of ``"png"``, ``"svg"``, ``"pdf"``.

    Raises
    ------
    PreviewError
        When the suffix is not one of ``.png``, ``.svg``, ``.pdf`` or the
        folder does not exist.
    """
    if not isinstance(out_path, (str, Path)) or str(out_path).strip() == "":
        raise PreviewError(f"the output path must be a file name, got {out_path!r}",
                           hint="e.g. preview.png")
    path = Path(out_path)
    fmt = FORMATS.get(path.suffix.lower())
    if fmt is None:
        allowed = ", ".join(FORMATS)
        got = f"'{path.suffix}'" if path.suffix else "no suffix"
        raise PreviewError(f"cannot write a preview to '{path}': {got} is not an image format "
                           f"dotseq writes", hint=f"use one of {allowed}")
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise PreviewError(f"cannot write '{path}': the folder '{folder}' does not exist",
                           hint="create the folder first or choose another path")
    if path.is_dir():
        raise PreviewError(f"cannot write '{path}': it is a folder")
    return path, fmt


def check_waveforms(wf: Waveforms) -> None:
    """Check that ``wf`` can be drawn: a positive sample rate, at least one
    sample, every output array of length ``n_samples`` holding finite values.

    Raises
    ------
    PreviewError
        Naming the first output (or field) that is not usable.
    """
    if not isinstance(wf, Waveforms):
        raise PreviewError(f"preview needs synthesised waveforms, got {type(wf).__name__}")
    fs = wf.sample_rate
    if not isinstance(fs, numbers.Real) or not math.isfinite(fs) or fs <= 0:
        raise PreviewError(f"the waveforms have sample rate {fs!r}; it must be a positive "
                           "number of samples per second")
    if not isinstance(wf.n_samples, numbers.Integral) or wf.n_samples <= 0:
        raise PreviewError(f"the run has {wf.n_samples!r} samples: there is nothing to preview")
    for name, out in wf.outputs.items():
        v = np.asarray(out.volts)
        if v.ndim != 1 or v.shape[0] != wf.n_samples:
            raise PreviewError(f"output '{name}' holds {v.shape} samples, the run has "
                               f"{wf.n_samples}")
        if v.dtype.kind not in "biuf":
            raise PreviewError(f"output '{name}' holds {v.dtype} values, not volts")
        if not (math.isfinite(float(v.min())) and math.isfinite(float(v.max()))):
            bad = int(np.argmin(np.isfinite(v)))
            raise PreviewError(f"output '{name}' has a non-finite value at sample {bad} "
                               f"(t = {_t(bad / fs)})")


def _number(value: object, what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise PreviewError(f"{what} must be a time in seconds, got {value!r}",
                           hint="e.g. 2e-6 for 2 µs")
    x = float(value)
    if not math.isfinite(x):
        raise PreviewError(f"{what} must be a finite time in seconds, got {value!r}")
    return x


def resolve_window(wf: Waveforms, start: float | None = None, stop: float | None = None,
                   step: int | None = None) -> Window:
    """Turn the window options of :func:`compiler.preview.preview` into a
    :class:`Window`.

    Parameters
    ----------
    wf : Waveforms
        The run (already checked with :func:`check_waveforms`).
    start, stop : float or None, s
        Time window; ``None`` means the start / end of the run.
    step : int or None
        Timeline index (``StepRecord.index``) of a step to zoom on, with a
        margin of ``STEP_MARGIN_FRACTION`` of its length (at least
        ``STEP_MARGIN_MIN`` samples) on each side, clipped to the run.

    Returns
    -------
    Window

    Raises
    ------
    PreviewError
        When both a time window and a step are given, when the window is
        empty or reaches outside ``[0, duration]`` (by more than half a
        sample), or when no step has that index.
    """
    fs = float(wf.sample_rate)
    n = int(wf.n_samples)
    duration = n / fs
    valid = f"the run lasts {_t(duration)} ({n} samples at {format_quantity(fs, FREQUENCY)})"
    if step is not None:
        if start is not None or stop is not None:
            raise PreviewError("give either a time window (start/stop) or a step to zoom on, "
                               f"not both (got start={start!r}, stop={stop!r}, step={step!r})",
                               hint="drop start/stop to zoom on the step, or drop step")
        return _step_window(wf, step)
    t0 = 0.0 if start is None else _number(start, "the window start")
    t1 = duration if stop is None else _number(stop, "the window stop")
    half = 0.5 / fs
    if t1 <= t0:
        raise PreviewError(f"the window is empty: start {_t(t0)} is not before stop {_t(t1)}",
                           hint=f"choose start < stop within 0 s .. {_t(duration)}; {valid}")
    if t0 < -half or t1 > duration + half:
        raise PreviewError(f"the window {_t(t0)} .. {_t(t1)} reaches outside the run, "
                           f"which covers 0 s .. {_t(duration)}",
                           hint=f"choose start and stop within 0 s .. {_t(duration)}; {valid}")
    t0, t1 = min(max(t0, 0.0), duration), max(min(t1, duration), 0.0)
    if t1 <= t0:   # inside the slack but nothing of the run left
        raise PreviewError(f"the window {_t(t0)} .. {_t(t1)} holds no part of the run, "
                           f"which covers 0 s .. {_t(duration)}",
                           hint=f"choose start < stop within 0 s .. {_t(duration)}; {valid}")
    i0 = min(max(int(math.floor(t0 * fs + 1e-9)), 0), n - 1)
    i1 = max(min(int(math.ceil(t1 * fs - 1e-9)), n), i0 + 1)
    return Window(t0, t1, i0, i1)


def _step_window(wf: Waveforms, step: object) -> Window:
    if isinstance(step, bool) or not isinstance(step, numbers.Integral):
        raise PreviewError(f"the step to zoom on must be a timeline index (an integer), "
                           f"got {step!r}")
    if not wf.steps:
        raise PreviewError(f"cannot zoom on step {step}: the run has no timeline steps",
                           hint="use start/stop instead")
    by_index = {s.index: s for s in wf.steps}
    rec = by_index.get(int(step))
    if rec is None:
        lo, hi = min(by_index), max(by_index)
        raise PreviewError(f"no step with timeline index {step}; the timeline holds "
                           f"{len(by_index)} steps, indices {lo} .. {hi}",
                           hint=f"choose a step index in {lo} .. {hi}")
    fs = float(wf.sample_rate)
    n = int(wf.n_samples)
    a, b = int(rec.start), int(rec.stop)
    if not (0 <= a <= b <= n):
        raise PreviewError(f"step {rec.index} ({rec.kind}) covers samples {a} .. {b}, outside "
                           f"the run's 0 .. {n}")
    margin = max(int(math.ceil(STEP_MARGIN_FRACTION * (b - a))), STEP_MARGIN_MIN)
    i0 = max(a - margin, 0)
    i1 = min(b + margin, n)
    if i1 <= i0:
        i1 = min(i0 + 1, n)
    return Window(i0 / fs, i1 / fs, i0, i1, rec)


def check_lo(wf: Waveforms, lo: dict[str, float] | None) -> dict[str, float]:
    """Check the local-oscillator map of the preview options.

    Parameters
    ----------
    wf : Waveforms
    lo : dict of str to float (Hz) or None
        LO frequency of each I/Q line, keyed by line (channel) name.

    Returns
    -------
    dict of str to float, Hz

    Raises
    ------
    PreviewError
        For a key that is not an I/Q line of the run (with a suggestion) or a
        value that is not a finite frequency.
    """
    if lo is None:
        return {}
    if not isinstance(lo, dict):
        raise PreviewError(f"lo must map I/Q line names to LO frequencies in Hz, got "
                           f"{type(lo).__name__}", hint="e.g. lo={'mw': 14.05e9}")
    lines = sorted({o.channel for o in wf.outputs.values() if o.kind == "iq"})
    out: dict[str, float] = {}
    for key, value in lo.items():
        if key not in lines:
            known = ", ".join(lines) if lines else "none"
            raise PreviewError(f"lo names '{key}', which is not an I/Q line of this run "
                               f"(I/Q lines: {known})", hint=suggest(str(key), lines))
        if isinstance(value, bool) or not isinstance(value, numbers.Real) \
                or not math.isfinite(float(value)):
            raise PreviewError(f"the LO of line '{key}' must be a finite frequency in Hz, "
                               f"got {value!r}", hint="e.g. 14.05e9")
        out[key] = float(value)
    return out
