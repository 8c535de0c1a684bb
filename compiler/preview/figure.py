"""The preview figure: what the generators will play, drawn before loading.

Layout, top to bottom, all trace axes sharing one time axis:

* a step strip: one lane per qubit, one box per timeline step, labelled with
  its kind and angle (``x 90°``, ``√SWAP A–B``, ``wait``, ``read``); time the
  compiler inserted (``pad``, ``phasewait``, ``zcorrect``) is hatched;
* one axis per output (the I and Q halves of an I/Q line share one: I solid,
  Q dashed), samples drawn as a zero-order hold; markers as 0/1 steps;
* the spectrum of each I/Q line's complex baseband ``I + iQ`` over the shown
  window, with each dot's Larmor frequency marked, and where an imperfect
  I/Q mixer would put its image (LO − IF, dotted).

The figure is built on :class:`matplotlib.figure.Figure` with the Agg canvas
directly (no pyplot, no global state) and written atomically.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import PolyCollection
from matplotlib.figure import Figure
from matplotlib.colors import to_rgba
from matplotlib.patches import Patch, Rectangle
from matplotlib.ticker import MaxNLocator

from ..export import atomic
from ..synth.types import Output, StepRecord, Waveforms
from ..units import FREQUENCY, TIME, VOLTAGE, format_quantity
from . import style as S
from . import signal as _signal
from .signal import (frequency_unit, iq_spectrum, max_envelope, minmax_envelope,
                     occupied_span, spectrum_segments, time_unit, volt_unit)
from .window import (PreviewError, Window, check_lo, check_waveforms, output_format,
                     resolve_window)

# Page geometry, inches (PNG at DPI dots per inch: 14 x 9 in -> 1540 x 990 px).
DPI = 110
FIG_WIDTH = 14.0
MIN_HEIGHT = 9.0
LEFT = 1.25
RIGHT = 0.85               # room for the I/Q legend
TOP = 1.0                  # title, subtitle and the step strip's title
BOTTOM = 1.0               # spectrum frequency label and the two footer lines
STACK_GAP = 0.07           # between stacked trace axes
SPECTRUM_GAP = 0.9         # between the last trace axis and the spectrum row
SPECTRUM_HGAP = 0.7        # between side-by-side spectrum axes
HEIGHTS = {"strip_base": 0.30, "lane": 0.32, "iq": 1.2, "gate": 0.75, "marker": 0.5,
           "spectrum": 1.6}

# How much a sparse figure may enlarge its axes to fill the page.
MAX_STRETCH_STRIP = 1.25
MAX_STRETCH = 1.6
MAX_STRETCH_SPECTRUM = 1.8

# Draw a min/max envelope instead of every sample once a window holds more
# than DECIMATE_FACTOR samples per pixel column.
DECIMATE_FACTOR = 2
MAX_BOX_LABELS = 400       # per figure, so a dense timeline stays fast
DENSE_STEP_PX = 3          # steps narrower than this (on average) are merged per column
FONT = 9.0                 # base font size, points
CHAR_WIDTH = 0.62          # average glyph width, in units of the font size


@dataclass(frozen=True)
class _Panel:
    """One trace axis: an I/Q line (one or two outputs), a gate or a marker."""
    kind: str                              # "iq", "gate" or "marker"
    label: str                             # channel or output name
    outputs: tuple[Output, ...]


def _panels(wf: Waveforms) -> list[_Panel]:
    panels: list[_Panel] = []
    iq: dict[str, list[Output]] = {}
    for out in wf.outputs.values():
        if out.kind == "iq":
            if out.channel not in iq:
                iq[out.channel] = []
                panels.append(_Panel("iq", out.channel, ()))
            iq[out.channel].append(out)
        elif out.kind == "marker":
            panels.append(_Panel("marker", out.name, (out,)))
        else:
            panels.append(_Panel("gate", out.name, (out,)))
    result = []
    for p in panels:
        if p.kind == "iq":
            outs = sorted(iq[p.label], key=lambda o: (not o.name.endswith(".I"), o.name))
            p = _Panel("iq", p.label, tuple(outs))
        result.append(p)
    return result


def _lanes(wf: Waveforms) -> list[str]:
    lanes = list(wf.larmor)
    for rec in wf.steps:
        for q in rec.qubits:
            if q not in lanes:
                lanes.append(q)
    return lanes or ["all"]


def _iq_pair(wf: Waveforms, panel: _Panel) -> tuple[np.ndarray | None, np.ndarray | None]:
    i = q = None
    for out in panel.outputs:
        if out.name.endswith(".Q"):
            q = out.volts
        elif i is None:
            i = out.volts
    return i, q


def figure_size(wf: Waveforms) -> tuple[float, float]:
    """Width and height (inches) of the preview figure of ``wf``: 14 in wide,
    at least 9 in high, taller when many outputs need room."""
    return FIG_WIDTH, max(MIN_HEIGHT, _natural_height(wf))


def _natural_height(wf: Waveforms) -> float:
    panels = _panels(wf)
    stack = HEIGHTS["strip_base"] + HEIGHTS["lane"] * len(_lanes(wf))
    stack += sum(HEIGHTS[p.kind] for p in panels) + STACK_GAP * len(panels)
    spec = (SPECTRUM_GAP + HEIGHTS["spectrum"]) if any(p.kind == "iq" for p in panels) else 0.55
    return TOP + stack + spec + BOTTOM


def _sample_edges(window: Window, fs: float, scale: float) -> np.ndarray:
    return np.arange(window.i0, window.i1 + 1) / fs * scale


def _draw_trace(ax, v: np.ndarray, window: Window, fs: float, tscale: float, vscale: float,
                colour: str, dashes: str, label: str, columns: int, fill_zero: bool = False
                ) -> bool:
    """Draw one output's window; returns True when it was decimated."""
    seg = v[window.i0:window.i1]                 # a view: no copy of a long run
    if window.n > DECIMATE_FACTOR * columns:
        starts, lows, highs = minmax_envelope(seg, columns)
        x = np.append(starts + window.i0, window.i1) / fs * tscale
        lo = np.append(lows, lows[-1]) * vscale
        hi = np.append(highs, highs[-1]) * vscale
        ax.fill_between(x, lo, hi, step="post", color=colour, alpha=0.28, lw=0)
        ax.step(x, hi, where="post", color=colour, lw=0.8, ls=dashes, label=label)
        ax.step(x, lo, where="post", color=colour, lw=0.8, ls=dashes)
        return True
    x = _sample_edges(window, fs, tscale)
    y = np.append(seg, seg[-1]) * vscale
    if fill_zero:
        ax.fill_between(x, 0, y, step="post", color=colour, alpha=0.18, lw=0)
    ax.step(x, y, where="post", color=colour, lw=1.1, ls=dashes, label=label)
    return False


def _style_axis(ax) -> None:
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color("#9aa0a8")
    ax.tick_params(labelsize=FONT - 0.5, colors=S.TEXT, length=3)
    ax.grid(True, axis="x", color=S.GRID, lw=0.8)
    ax.set_axisbelow(True)


def _ylabel(ax, text: str) -> None:
    ax.set_ylabel(text, rotation=0, ha="right", va="center", fontsize=FONT,
                  color=S.TEXT, labelpad=8)


def _corner_note(ax, text: str, right: bool = True) -> None:
    ax.text(0.995 if right else 0.005, 0.96, text, transform=ax.transAxes,
            ha="right" if right else "left", va="top", fontsize=FONT - 1.5,
            color=S.MUTED_TEXT, zorder=10,
            bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.8))


def _voltage_limits(lo: float, hi: float, symmetric: bool) -> tuple[float, float]:
    if symmetric:
        m = max(abs(lo), abs(hi))
        m = m if m > 0 else 1e-3
        return -1.15 * m, 1.15 * m
    lo, hi = min(lo, 0.0), max(hi, 0.0)
    span = hi - lo
    pad = 0.12 * span if span > 0 else max(abs(hi) * 0.1, 1e-3)
    return lo - pad, hi + pad


def _q(value: float, dim, digits: int = 6) -> str:
    """A quantity for the figure: format_quantity with the micro sign."""
    number, _, unit = format_quantity(value, dim, digits).rpartition(" ")
    if unit.startswith("u") and len(unit) > 1:
        unit = "µ" + unit[1:]
    return f"{number} {unit}"


def _count(n: int) -> str:
    """An integer with thin groups of three digits: 2000000 -> '2 000 000'."""
    return f"{int(n):,}".replace(",", "\u2009")


def _text_px(text: str, size: float) -> float:
    return len(text) * size * CHAR_WIDTH * DPI / 72.0


def _draw_steps(ax, wf: Waveforms, window: Window, lanes: list[str], tscale: float,
                px_per_unit: float) -> bool:
    """The step strip: boxes per lane, labelled where they fit.  Returns True
    when the steps were too dense to draw one by one and each pixel column
    shows the share of each step kind instead."""
    fs = float(wf.sample_rate)
    lane_y = {q: len(lanes) - 1 - k for k, q in enumerate(lanes)}
    half = 0.3
    boxes: dict[str, list] = {}
    zero_marks: list[tuple[float, float, StepRecord]] = []
    labels: list[tuple[float, float, float, StepRecord]] = []
    per_lane: dict[float, list[StepRecord]] = {y: [] for y in lane_y.values()}
    for rec in wf.steps:
        a, b = int(rec.start), int(rec.stop)
        if b > a:
            if b <= window.i0 or a >= window.i1:
                continue
        elif not (window.i0 <= a <= window.i1):
            continue
        ys = [lane_y[q] for q in rec.qubits if q in lane_y] or list(lane_y.values())
        for y in ys:
            if b == a:
                zero_marks.append((a / fs * tscale, y, rec))
            else:
                per_lane[y].append(rec)
    columns = int(round(px_per_unit * window.length * tscale))
    dense = max(len(v) for v in per_lane.values()) > columns / DENSE_STEP_PX
    present: set[str] = set()
    for y, recs in per_lane.items():
        if dense:
            kinds, shares = kind_shares(recs, window, columns)
            present.update(kinds)
            if kinds:
                ax.imshow(_share_image(kinds, shares), extent=(
                    window.start * tscale, window.stop * tscale, y - half, y + half),
                    origin="lower", aspect="auto", interpolation="nearest", zorder=2)
            continue
        for rec in recs:
            x0, x1 = rec.start / fs * tscale, rec.stop / fs * tscale
            boxes.setdefault(rec.kind, []).append(
                [(x0, y - half), (x1, y - half), (x1, y + half), (x0, y + half)])
            labels.append((x0, x1, y, rec))
    if dense:
        zero_marks = []        # frame updates would be a smear of diamonds
        order = [k for k in S.STEP_STYLE if k in present] + sorted(present - set(S.STEP_STYLE))
        handles = [Patch(facecolor=S.dense_colour(k), edgecolor="none", label=S.kind_name(k))
                   for k in order]
        ax.legend(handles=handles, loc="lower right", bbox_to_anchor=(1.0, 1.0),
                  ncol=len(handles), fontsize=FONT - 1, frameon=False, handlelength=1.2,
                  handleheight=0.9, columnspacing=1.0, borderaxespad=0.1)
    for kind, verts in boxes.items():
        face, hatch = S.step_style(kind)
        edge = S.HATCH_EDGE if hatch else S.STEP_EDGE
        ax.add_collection(PolyCollection(verts, facecolors=face, edgecolors=edge,
                                         linewidths=0.6, hatch=hatch or None, zorder=2))
    # labels inside boxes, clipped to the visible part of each box
    lo_x, hi_x = window.start * tscale, window.stop * tscale
    shown = 0
    for x0, x1, y, rec in labels:
        if shown >= MAX_BOX_LABELS:
            break
        v0, v1 = max(x0, lo_x), min(x1, hi_x)
        width_px = (v1 - v0) * px_per_unit
        kind = rec.kind
        for text in S.step_labels(kind, rec.qubits, rec.params):
            if _text_px(text, FONT - 1) + 6 <= width_px:
                ax.text((v0 + v1) / 2, y, text, ha="center", va="center",
                        fontsize=FONT - 1, color=S.TEXT, zorder=4, clip_on=True,
                        bbox=dict(boxstyle="square,pad=0.1", fc="white", ec="none",
                                  alpha=0.75) if S.step_style(kind)[1] else None)
                shown += 1
                break
    # zero-length steps (frame updates, triggers): a diamond on the lane, label above
    if zero_marks:
        ax.scatter([m[0] for m in zero_marks], [m[1] for m in zero_marks], marker="D", s=30,
                   c=[S.step_style(m[2].kind)[0] for m in zero_marks], edgecolors=S.STEP_EDGE,
                   linewidths=0.6, zorder=5, clip_on=False)
        last_right: dict[float, float] = {}
        axis_px = (hi_x - lo_x) * px_per_unit
        for x, y, rec in sorted(zero_marks, key=lambda m: m[0]):
            text = S.step_labels(rec.kind, rec.qubits, rec.params)[0]
            w = _text_px(text, FONT - 1.5)
            px = (x - lo_x) * px_per_unit
            # centred over the mark, but kept inside the strip at its ends
            left = min(max(px - w / 2, 0.0), max(axis_px - w, 0.0))
            if left < last_right.get(y, -math.inf) + 6 or shown >= MAX_BOX_LABELS:
                continue
            ax.text(lo_x + (left + w / 2) / px_per_unit, y + half + 0.04, text, ha="center",
                    va="bottom", fontsize=FONT - 1.5, color=S.TEXT, zorder=5, clip_on=True)
            last_right[y] = left + w
            shown += 1
    if window.step is not None:
        rec = window.step
        x0, x1 = rec.start / fs * tscale, rec.stop / fs * tscale
        for q in (rec.qubits or tuple(lanes)):
            if q in lane_y:
                ax.add_patch(Rectangle((x0, lane_y[q] - half - 0.06), max(x1 - x0, 0.0),
                                       2 * half + 0.12, fill=False, ec=S.HIGHLIGHT_EDGE,
                                       lw=1.8, zorder=6))
    ax.set_ylim(-0.62, len(lanes) - 1 + 0.72)
    ax.set_yticks([lane_y[q] for q in lanes])
    ax.set_yticklabels(lanes, fontsize=FONT)
    ax.tick_params(axis="y", length=0)
    for side in ("top", "right", "left"):
        ax.spines[side].set_visible(False)
    ax.spines["bottom"].set_color("#9aa0a8")
    ax.grid(False)
    return dense


def kind_shares(recs: list[StepRecord], window: Window, columns: int
                ) -> tuple[list[str], np.ndarray]:
    """Share of each step kind in each pixel column of a dense timeline lane.

    Parameters
    ----------
    recs : list of StepRecord
        Steps of one lane (positive length, overlapping the window).
    window : Window
    columns : int
        Pixel columns across the window.

    Returns
    -------
    kinds : list of str
        The kinds present, in drawing order.
    shares : ndarray, shape (columns, len(kinds))
        Fraction of each column's samples covered by each kind (rows sum to
        at most 1; the rest of a column is not covered by any step).
    """
    present = {r.kind for r in recs}
    kinds = [k for k in S.STEP_STYLE if k in present] + sorted(present - set(S.STEP_STYLE))
    if not kinds or columns <= 0:
        return kinds, np.zeros((max(columns, 0), len(kinds)))
    # sample edges of the columns; memory O(steps + columns), not O(samples)
    edges = window.i0 + np.ceil(np.arange(columns + 1) * (window.n / columns)).astype(np.int64)
    edges[-1] = window.i1
    width = np.maximum(np.diff(edges), 1)
    shares = np.zeros((columns, len(kinds)))
    for j, kind in enumerate(kinds):
        iv = np.array(sorted((r.start, r.stop) for r in recs if r.kind == kind), dtype=np.int64)
        a, b = iv[:, 0], iv[:, 1]
        done = np.concatenate(([0], np.cumsum(b - a)))   # samples covered before interval k

        def covered(x: np.ndarray) -> np.ndarray:
            # samples of this kind below x: whole intervals starting before x,
            # minus the part of the last one that reaches past x
            k = np.searchsorted(a, x, side="left")
            past = np.where(k > 0, np.maximum(b[np.maximum(k - 1, 0)] - x, 0), 0)
            return done[k] - past

        shares[:, j] = np.diff(covered(edges)) / width
    total = shares.sum(axis=1, keepdims=True)
    return kinds, np.where(total > 1.0, shares / np.maximum(total, 1e-300), shares)


def _share_image(kinds: list[str], shares: np.ndarray, rows: int = 24) -> np.ndarray:
    """RGBA image (rows x columns) stacking each column's kind shares from the
    bottom of the lane, white where no step covers the column."""
    rgb = np.array([to_rgba(S.dense_colour(k)) for k in kinds] + [(1.0, 1.0, 1.0, 0.0)])
    cum = np.cumsum(shares, axis=1)                          # columns x K
    level = (np.arange(rows) + 0.5) / rows                   # row centres, 0..1
    # index of the first kind whose cumulative share passes the row's level
    idx = (cum[None, :, :] <= level[:, None, None]).sum(axis=2)   # rows x columns
    return rgb[np.minimum(idx, len(kinds))]


def _draw_spectrum(ax, wf: Waveforms, panel: _Panel, window: Window, lo: float | None,
                   columns: int, wide: bool = True) -> None:
    fs = float(wf.sample_rate)
    i, q = _iq_pair(wf, panel)
    n = window.n
    i_seg = i[window.i0:window.i1] if i is not None else np.zeros(n)
    q_seg = q[window.i0:window.i1] if q is not None else np.zeros(n)
    f_if, level = iq_spectrum(i_seg, q_seg, fs)
    silent = not (np.any(i_seg) or np.any(q_seg))
    centre = lo if lo is not None else 0.0
    f = f_if + centre
    band = (centre - fs / 2, centre + fs / 2)
    marks = [fl for fl in wf.larmor.values() if lo is not None and band[0] <= fl <= band[1]]
    # where an imperfect I/Q mixer mirrors each dot's tone: LO − IF = 2·LO − f_L
    images = {name: 2 * centre - fl for name, fl in wf.larmor.items()
              if lo is not None and band[0] <= fl <= band[1] and fl != centre}
    marks += list(images.values())
    if silent:
        f_lo, f_hi, zoomed = band[0], band[1], False
    else:
        f_lo, f_hi, zoomed = occupied_span(f, level, marks, band)
    keep = (f >= f_lo) & (f <= f_hi)
    f, level = f[keep], level[keep]
    fscale, funit = frequency_unit(max(abs(band[0]), abs(band[1])))
    decimated = False
    if f.shape[0] > DECIMATE_FACTOR * columns:
        starts, highs = max_envelope(level, columns)
        f, level = f[starts], highs
        decimated = True
    floor_db = float(level.min())
    peak_db = float(level.max())
    if not silent:
        ax.fill_between(f * fscale, floor_db, level, color=S.SPECTRUM_COLOUR, alpha=0.15, lw=0)
        ax.plot(f * fscale, level, color=S.SPECTRUM_COLOUR, lw=0.9)
        ax.set_ylim(max(floor_db, peak_db - 80.0), peak_db + 14.0)
    else:
        ax.set_ylim(-120.0, 0.0)
        ax.text(0.5, 0.5, "no microwave signal in this window", transform=ax.transAxes,
                ha="center", va="center", fontsize=FONT, color=S.MUTED_TEXT)
    ax.set_xlim(f_lo * fscale, f_hi * fscale)
    ax.ticklabel_format(axis="x", useOffset=False, style="plain")
    ax.set_xlabel(f"RF frequency ({funit})" if lo is not None
                  else f"IF frequency ({funit}), no LO given", fontsize=FONT, color=S.TEXT)
    ax.set_ylabel("dBV", fontsize=FONT, color=S.TEXT)
    title = f"{panel.label}: spectrum of I + iQ" + (" over the shown window" if wide else "")
    if lo is not None:
        title += f", LO {_q(lo, FREQUENCY)}"
    if zoomed:
        title += ", zoomed on the occupied band" if wide else ", zoomed"
    segments = spectrum_segments(n)
    if segments > 1:
        title += f"; rms of {segments} segments of {_count(_signal.MAX_FFT_POINTS)} samples"
    if decimated:
        title += " (peak per pixel column)" if wide else " (peak per column)"
    ax.set_title(title, loc="left", fontsize=FONT, color=S.TEXT)
    _style_axis(ax)
    ax.grid(True, axis="y", color=S.GRID, lw=0.8)
    if lo is None:
        if wf.larmor:
            _corner_note(ax, f"Larmor frequencies are absolute: give lo={{'{panel.label}': "
                             "LO in Hz}} to mark them")
        return
    outside = []
    k = 0
    for name, fl in wf.larmor.items():
        if not (band[0] <= fl <= band[1]):
            outside.append(f"{name} ({format_quantity(fl, FREQUENCY, digits=6)})")
            continue
        colour = S.LARMOR_COLOURS[k % len(S.LARMOR_COLOURS)]
        ax.axvline(fl * fscale, color=colour, lw=1.0, ls=(0, (4, 3)), zorder=3)
        near_right = (fl - f_lo) > 0.75 * (f_hi - f_lo)
        ax.text(fl * fscale, 0.97 - 0.1 * (k % 3),
                f"{name}  {format_quantity(fl, FREQUENCY, 6)} " if near_right
                else f" {name}  {format_quantity(fl, FREQUENCY, 6)}",
                transform=ax.get_xaxis_transform(), ha="right" if near_right else "left",
                va="top", fontsize=FONT - 1,
                color=colour, zorder=4,
                bbox=dict(boxstyle="square,pad=0.1", fc="white", ec="none", alpha=0.8))
        k += 1
    for k, (name, fi) in enumerate(images.items()):
        if not (f_lo <= fi <= f_hi):
            continue
        colour = S.LARMOR_COLOURS[k % len(S.LARMOR_COLOURS)]
        ax.axvline(fi * fscale, color=colour, lw=0.8, ls=(0, (1, 2)), alpha=0.8, zorder=3)
        near_right = (fi - f_lo) > 0.75 * (f_hi - f_lo)
        label = f"image of {name}"
        ax.text(fi * fscale, 0.16 + 0.08 * (k % 3), f"{label} " if near_right else f" {label}",
                transform=ax.get_xaxis_transform(), ha="right" if near_right else "left",
                va="bottom", fontsize=FONT - 1.5, color=colour, zorder=4,
                bbox=dict(boxstyle="square,pad=0.1", fc="white", ec="none", alpha=0.8))
    if outside:
        ax.text(0.995, 0.04, "Larmor outside this band: " + ", ".join(outside),
                transform=ax.transAxes, ha="right", va="bottom", fontsize=FONT - 1.5,
                color=S.MUTED_TEXT, zorder=10,
                bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.85))


def build_figure(wf: Waveforms, window: Window, *, title: str = "",
                 lo: dict[str, float] | None = None) -> Figure:
    """Draw the preview of ``wf`` over ``window`` (no file is written).

    Parameters
    ----------
    wf : Waveforms
        A checked run (see :func:`compiler.preview.window.check_waveforms`).
    window : Window
        From :func:`compiler.preview.window.resolve_window`.
    title : str
        Figure title; empty gives ``"dotseq preview: run N"``.
    lo : dict of str to float, Hz, optional
        LO frequency per I/Q line, for the absolute frequency axis of its
        spectrum and the Larmor marks.

    Returns
    -------
    matplotlib.figure.Figure
        With an Agg canvas attached, ready for ``print_figure``.
    """
    lo = lo or {}
    fs = float(wf.sample_rate)
    width, height = figure_size(wf)
    fig = Figure(figsize=(width, height), dpi=DPI, facecolor="white")
    FigureCanvasAgg(fig)
    panels = _panels(wf)
    lanes = _lanes(wf)
    has_iq = any(p.kind == "iq" for p in panels)

    # vertical budget: stretch the axes to fill the page when there is room
    fixed = TOP + BOTTOM + STACK_GAP * len(panels) + (SPECTRUM_GAP if has_iq else 0.55)
    wanted = [HEIGHTS["strip_base"] + HEIGHTS["lane"] * len(lanes)]
    wanted += [HEIGHTS[p.kind] for p in panels]
    spec_h = HEIGHTS["spectrum"] if has_iq else 0.0
    stretch = max((height - fixed) / (sum(wanted) + spec_h), 1.0)
    # a sparse run should not blow one lane or marker up to half the page:
    # the strip grows at most MAX_STRETCH_STRIP times, traces MAX_STRETCH,
    # the spectrum takes what is left (up to MAX_STRETCH_SPECTRUM)
    wanted = [wanted[0] * min(stretch, MAX_STRETCH_STRIP)] + \
        [h * min(stretch, MAX_STRETCH) for h in wanted[1:]]
    if spec_h:
        spec_h = min(max(height - fixed - sum(wanted), spec_h),
                     spec_h * MAX_STRETCH_SPECTRUM)
    axes_w = width - LEFT - RIGHT
    columns = int(axes_w * DPI)

    def place(top_in: float, h_in: float, left_in: float = LEFT, w_in: float = axes_w):
        return [left_in / width, (height - top_in - h_in) / height, w_in / width, h_in / height]

    tscale, tunit = time_unit(window.length)
    xlim = (window.start * tscale, window.stop * tscale)
    px_per_unit = columns / (xlim[1] - xlim[0])

    # step strip
    y = TOP
    strip = fig.add_axes(place(y, wanted[0]))
    strip.set_xlim(*xlim)
    dense = _draw_steps(strip, wf, window, lanes, tscale, px_per_unit)
    strip.tick_params(axis="x", labelbottom=False, length=0)
    strip.set_title("timeline steps, each pixel column showing the share of each kind"
                    if dense else "timeline steps (hatched: inserted by the compiler: padding, phase waits, z corrections)",
                    loc="left", fontsize=FONT, color=S.TEXT, pad=4)
    y += wanted[0] + STACK_GAP

    decimated_any = False
    axes = []
    gate_k = 0
    for panel, h in zip(panels, wanted[1:]):
        ax = fig.add_axes(place(y, h), sharex=strip)
        axes.append(ax)
        y += h + STACK_GAP
        _style_axis(ax)
        segs = [o.volts[window.i0:window.i1] for o in panel.outputs]
        vmin = min(float(s.min()) for s in segs)
        vmax = max(float(s.max()) for s in segs)
        if panel.kind == "marker":
            dec = _draw_trace(ax, panel.outputs[0].volts, window, fs, tscale, 1.0,
                              S.MARKER_COLOUR, "-", panel.label, columns, fill_zero=True)
            ax.set_ylim(-0.25, 1.35)
            ax.set_yticks([0, 1])
            _ylabel(ax, panel.label)
        else:
            vscale, vunit = volt_unit(max(abs(vmin), abs(vmax)))
            ax.axhline(0.0, color=S.ZERO_LINE, lw=0.8, zorder=1)
            dec = False
            if panel.kind == "iq":
                for out in panel.outputs:
                    is_q = out.name.endswith(".Q")
                    part = "Q" if is_q else ("I" if out.name.endswith(".I") else out.name)
                    dec |= _draw_trace(ax, out.volts, window, fs, tscale, vscale,
                                       S.Q_COLOUR if is_q else S.I_COLOUR,
                                       "--" if is_q else "-", part, columns)
                ax.legend(loc="upper left", bbox_to_anchor=(1.005, 1.0), fontsize=FONT - 0.5,
                          frameon=False, handlelength=1.8)
                _ylabel(ax, f"{panel.label}\nI/Q ({vunit})")
            else:
                colour = S.GATE_COLOURS[gate_k % len(S.GATE_COLOURS)]
                gate_k += 1
                out = panel.outputs[0]
                dec = _draw_trace(ax, out.volts, window, fs, tscale, vscale, colour, "-",
                                  panel.label, columns)
                _ylabel(ax, f"{panel.label}\n({vunit})")
                if out.dc_level:
                    _corner_note(ax, f"DC level {_q(out.dc_level, VOLTAGE)} added through the "
                                     "bias tee, not drawn", right=False)
            lo_v, hi_v = _voltage_limits(vmin, vmax, symmetric=panel.kind == "iq")
            ax.set_ylim(lo_v * vscale, hi_v * vscale)
            if vmin == vmax:
                ax.set_yticks([vmin * vscale])     # a flat output: one tick at its value
            else:
                ax.yaxis.set_major_locator(MaxNLocator(nbins=4 if h < 1.2 else 6,
                                                       steps=[1, 2, 2.5, 5, 10]))
        decimated_any |= dec
        ax.tick_params(axis="x", labelbottom=False)
    last = axes[-1] if axes else strip
    last.tick_params(axis="x", labelbottom=True, length=3)
    xlabel = f"time from the start of the run ({tunit})"
    if decimated_any:
        per_col = max(int(math.ceil(window.n / columns)), 1)
        xlabel += f"   ·   traces decimated: min/max envelope of {_count(per_col)} samples per pixel column"
    last.set_xlabel(xlabel, fontsize=FONT, color=S.TEXT)
    strip.set_xlim(*xlim)
    if window.step is not None and not dense:
        rec = window.step
        what = " ".join((rec.text.strip() or rec.kind).split())
        if len(what) > 60:
            what = what[:57] + "..."
        strip.set_title(f"zoom on step {rec.index}: {what}"
                        + (f"  ({rec.source})" if rec.source else ""),
                        loc="right", fontsize=FONT - 0.5, color=S.MUTED_TEXT, pad=4)
    if window.step is not None:
        rec = window.step
        for ax in axes:
            ax.axvspan(rec.start / fs * tscale, rec.stop / fs * tscale, color=S.HIGHLIGHT_SPAN,
                       zorder=0, lw=0)

    # spectrum row
    iq_panels = [p for p in panels if p.kind == "iq"]
    if iq_panels:
        y = height - BOTTOM - spec_h
        k = len(iq_panels)
        w_each = (axes_w - SPECTRUM_HGAP * (k - 1)) / k
        cols_each = int(w_each * DPI)
        for j, panel in enumerate(iq_panels):
            ax = fig.add_axes(place(y, spec_h, LEFT + j * (w_each + SPECTRUM_HGAP), w_each))
            _draw_spectrum(ax, wf, panel, window, lo.get(panel.label), cols_each, wide=k == 1)

    # title, subtitle, footer
    heading = title.strip() or f"dotseq preview: run {wf.run_index}"
    fig.text(LEFT / width, 1 - 0.22 / height, heading, ha="left", va="top",
             fontsize=FONT + 5, color=S.TEXT, weight="bold")
    facts = [f"run {wf.run_index}"]
    if wf.sweep:
        facts.append(wf.sweep_text or ", ".join(f"{name} = {value:g}" for name, value in wf.sweep))
    facts += [f"{format_quantity(fs, FREQUENCY)}".replace("Hz", "S/s"),
              f"{_count(wf.n_samples)} samples", f"{_q(wf.duration, TIME)} in all",
              f"{_count(len(wf.steps))} timeline steps"]
    fig.text(LEFT / width, 1 - 0.52 / height, " · ".join(facts), ha="left", va="top",
             fontsize=FONT, color=S.MUTED_TEXT)
    fig.text(1 - RIGHT / width, 1 - 0.52 / height,
             f"shown: {_q(window.start, TIME)} – {_q(window.stop, TIME)} ({_count(window.n)} samples)",
             ha="right", va="top", fontsize=FONT, color=S.TEXT)
    fig.text(0.12 / width, 0.30 / height, "⚠ " + S.CAUTION_TEXT, ha="left", va="bottom",
             fontsize=FONT + 0.5, color=S.CAUTION)
    if wf.warnings:
        shown = "; ".join(w.replace("\n", " ") for w in wf.warnings[:2])
        if len(shown) > 170:
            shown = shown[:167] + "..."
        more = f" (and {len(wf.warnings) - 2} more)" if len(wf.warnings) > 2 else ""
        fig.text(0.12 / width, 0.1 / height, f"synthesis warnings: {shown}{more}", ha="left",
                 va="bottom", fontsize=FONT - 1, color=S.MUTED_TEXT)
    return fig


def _metadata(fmt: str) -> dict:
    # no creation dates: the same waveforms give the same file
    return {"png": {"Software": "dotseq preview"}, "svg": {"Date": None},
            "pdf": {"CreationDate": None, "Producer": "dotseq preview"}}[fmt]


def save_atomic(fig: Figure, path: Path, fmt: str) -> Path:
    """Write ``fig`` to ``path`` through the one output writer
    (:func:`compiler.export.atomic.write_file`: a temporary file in the same
    folder, flushed, then renamed), so a half-written image never sits at
    ``path``.

    Raises
    ------
    PreviewError
        When the file cannot be written (permissions, full disk, ...).
    """
    try:
        return atomic.write_file(path, lambda fh: fig.canvas.print_figure(
            fh, format=fmt, dpi=DPI, metadata=_metadata(fmt)))
    except OSError as exc:
        raise PreviewError(f"cannot write '{path}': {exc.strerror or exc}") from None


def preview(wf: Waveforms, out_path: str | Path, *, start: float | None = None,
            stop: float | None = None, step: int | None = None, title: str = "",
            lo: dict[str, float] | None = None) -> Path:
    """Draw what the generators will play for one run and write it as an image.

    Parameters
    ----------
    wf : Waveforms
        The synthesised run.
    out_path : str or Path
        Target file; ``.png`` (1540 x 990 px for up to about six outputs,
        taller with more), ``.svg`` or ``.pdf``.
    start, stop : float, s, optional
        Time window to show; default the whole run.  Must lie within
        ``[0, wf.duration]`` with ``start < stop``.
    step : int, optional
        Timeline index (``StepRecord.index``) of one step to zoom on, with a
        small margin; not together with ``start``/``stop``.
    title : str
        Figure title; default ``"dotseq preview: run N"``.
    lo : dict of str to float, Hz, optional
        LO frequency of each I/Q line by line name; its spectrum is then drawn
        over absolute frequency ``f = f_LO + f_IF`` with each dot's Larmor
        frequency marked, otherwise over the IF.

    Returns
    -------
    Path
        ``out_path``, written atomically.

    Raises
    ------
    PreviewError
        Bad window, step, suffix, folder, ``lo`` entry or waveform data; the
        message names the values and the valid range.
    """
    path, fmt = output_format(out_path)
    if not isinstance(title, str):
        raise PreviewError(f"the title must be text, got {type(title).__name__}")
    check_waveforms(wf)
    window = resolve_window(wf, start, stop, step)
    lo_map = check_lo(wf, lo)
    fig = build_figure(wf, window, title=title, lo=lo_map)
    return save_atomic(fig, path, fmt)
