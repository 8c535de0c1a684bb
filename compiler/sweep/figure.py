"""``sweep.png``: the fidelity of a sweep, in the report's style.

* one axis: the whole-run fidelity against the parameter (top) and the
  infidelity on a log scale (bottom), with the largest error sources when
  the budget was computed; the best point starred; where the coherence
  margin T2 / longest gate crosses the rule of thumb of 10⁴, the points
  below it are shaded;
* two axes: a heat map of 1 − F (log colour scale; the first parameter
  across, the second up), values in the cells up to 64 cells, the best cell
  outlined and starred, and the contour T2 / longest gate = 10⁴ where the
  margin crosses it.

A pure function of the :class:`SweepTable`; :func:`png_bytes` renders it.
"""

from __future__ import annotations

import io

import numpy as np
from matplotlib.colors import LogNorm, Normalize
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Rectangle
from matplotlib.ticker import FuncFormatter

from ..physics import COHERENCE_RULE
from ..preview import style as S
from .. import figstyle as FS
from ..figstyle import BEST_COLOUR, DPI, FIDELITY_MAP, FONT, HEIGHT, WIDTH, new_figure
from ..numfmt import axis_scale, fmt_fidelity, fmt_sci, fmt_value
from .table import best_point
from .types import INVALID, OK, SweepTable

MAIN_COLOUR = S.I_COLOUR                       # slate blue
SOURCE_COLOURS = ("#c0703f", "#3f7d5c", "#7a5a8c", "#8c6d3f")
LOW_MARGIN = "#f3e3c3"                         # pale amber shading
CONTOUR_COLOUR = "#20262e"
INVALID_COLOUR = "#b8bcc4"
MAX_SOURCES = 4
MAX_LABEL = 34
PLAIN = FuncFormatter(lambda v, _: f"{v:g}")   # log axes: 0.1, 1, 10 rather than 10^-1
FOOTER = ("A simulation of the compiled sequence on the device model, not a measurement. "
          "Check voltages and microwave power against your sample's and lab's limits.")


def _settings_text(table: SweepTable) -> str:
    o = table.options
    return (f"{o.get('engine', '?')} engine, {o.get('nodes', '?')} quadrature node"
            f"{'s' * (o.get('nodes') != 1)} "
            f"({o.get('quadrature', '?')}), {o.get('substeps', '?')} sub-step"
            f"{'s' * (o.get('substeps') != 1)} per sample"
            + ("" if o.get("rwa", True) else ", no RWA"))


def _title(table: SweepTable, what: str) -> str:
    name = "average gate fidelity" if table.metric == "average gate fidelity" else "state fidelity"
    t = f"Whole-run {name} {what}"
    if not table.complete:
        t += f"  (PARTIAL: {len(table.points)} of {table.n_points} points)"
    return t


def _axis_label(a, unit: str) -> str:
    return f"{a.name} ({unit})" if unit else a.name


def _margin_note(margins: np.ndarray) -> tuple[str, bool]:
    """A subtitle note on the coherence margin and whether it crosses 10⁴."""
    m = margins[np.isfinite(margins)]
    if m.size == 0:
        return "", False
    lo, hi = float(m.min()), float(m.max())
    if lo >= COHERENCE_RULE:
        return f"T2/longest gate ≥ 10⁴ everywhere (min {lo:.3g})", False
    if hi < COHERENCE_RULE:
        return f"T2/longest gate below 10⁴ everywhere ({lo:.3g} to {hi:.3g})", False
    return "", True


def figure(table: SweepTable):
    """The figure (a matplotlib Figure with an Agg canvas), or None when no
    point was computed."""
    if not any(p.status == OK for p in table.points):
        return None
    if len(table.axes) == 1:
        return _lines(table)
    return _map(table)


def png_bytes(table: SweepTable) -> bytes | None:
    fig = figure(table)
    if fig is None:
        return None
    buf = io.BytesIO()
    fig.canvas.print_figure(buf, format="png", dpi=DPI, metadata={"Software": "dotseq sweep"})
    return buf.getvalue()


def _best_note(table: SweepTable) -> str:
    best = best_point(table)
    if best is None:
        return ""
    vals = ", ".join(f"{a.name} = {fmt_value(v, a.unit)}" for a, v in zip(table.axes, best.coords))
    return f"best: F = {fmt_fidelity(best.fidelity)} (1 − F = {fmt_sci(best.infidelity)}) at {vals}"


def _lines(table: SweepTable):
    ax0 = table.axes[0]
    pts = {p.index: p for p in table.points}
    x = np.asarray(ax0.values, dtype=float)
    n = len(x)
    f = np.full(n, np.nan)
    margin = np.full(n, np.nan)
    invalid = np.zeros(n, bool)
    for i in range(n):
        p = pts.get(i)
        if p is None:
            continue
        if p.status == OK:
            f[i] = p.fidelity
            if p.margin is not None:
                margin[i] = p.margin
        elif p.status == INVALID:
            invalid[i] = True
    scale, unit = axis_scale(x, ax0.unit)
    xs = x / scale
    order = np.argsort(x, kind="stable")
    log_x = ax0.spacing == "log" or FS.log_spaced(x)
    fig = new_figure()
    left, right = 1.15, 2.75
    top_h, bot_h = 2.25, 1.65
    ax_b = FS.axes(fig, left, 0.85, WIDTH - left - right, bot_h)
    ax_t = FS.axes(fig, left, 0.85 + bot_h + 0.22, WIDTH - left - right, top_h)
    ax_t.sharex(ax_b)
    few = n <= 60
    mk = dict(marker="o" if few else None, ms=4)
    ax_t.plot(xs[order], f[order], color=MAIN_COLOUR, lw=1.7, **mk)
    infid = 1.0 - f
    ax_b.plot(xs[order], np.where(infid > 0, infid, np.nan)[order], color=MAIN_COLOUR, lw=1.9,
              **mk)
    handles = [Line2D([], [], color=MAIN_COLOUR, lw=1.7, label="whole run", **mk)]
    curves = [infid]
    if table.budget:
        contrib: dict[str, np.ndarray] = {}
        for i in range(n):
            p = pts.get(i)
            if p is not None and p.status == OK:
                for s, v in p.budget:
                    contrib.setdefault(s, np.full(n, np.nan))[i] = v
        top = sorted(contrib, key=lambda s: -np.nanmax(contrib[s]))[:MAX_SOURCES]
        for k, s in enumerate(top):
            v = contrib[s]
            if not np.any(v > 0):
                continue
            c = SOURCE_COLOURS[k % len(SOURCE_COLOURS)]
            ax_b.plot(xs[order], np.where(v > 0, v, np.nan)[order], color=c, lw=1.2, ls="--",
                      marker="." if few else None)
            handles.append(Line2D([], [], color=c, lw=1.2, ls="--", label=FS.short(s, MAX_LABEL)))
            curves.append(v)
    allv = np.concatenate(curves)
    pos = allv[np.isfinite(allv) & (allv > 0)]
    if pos.size:
        ax_b.set_yscale("log")
        ax_b.set_ylim(*FS.log_limits(pos))
        FS.log_ticks(ax_b, "y")
    if log_x:
        for a in (ax_t, ax_b):
            a.set_xscale("log")
        ax_b.xaxis.set_major_formatter(PLAIN)
    if invalid.any():
        for a in (ax_t,):
            y0 = np.nanmin(f) if np.isfinite(f).any() else 0.0
            a.plot(xs[invalid], np.full(invalid.sum(), y0), ls="", marker="x", ms=7,
                   color=INVALID_COLOUR, mew=1.6)
        handles.append(Line2D([], [], ls="", marker="x", ms=7, color=INVALID_COLOUR, mew=1.6,
                              label="invalid point"))
    note, crosses = _margin_note(margin)
    if crosses:
        below = np.isfinite(margin) & (margin < COHERENCE_RULE)
        e = FS.edges(x[order], log_x) / scale
        for j, i in enumerate(order):
            if below[i]:
                for a in (ax_t, ax_b):
                    a.axvspan(e[j], e[j + 1], color=LOW_MARGIN, lw=0, zorder=0)
        handles.append(Patch(color=LOW_MARGIN, label="T2/longest gate < 10⁴"))
    best = best_point(table)
    if best is not None:
        bx = best.coords[0] / scale
        for a, yv in ((ax_t, best.fidelity), (ax_b, best.infidelity)):
            a.axvline(bx, color=BEST_COLOUR, lw=0.9, ls=(0, (2, 2)))
            if a is ax_t or (yv is not None and yv > 0):
                a.plot([bx], [yv], marker="*", ms=15, color=BEST_COLOUR, mec="white", mew=0.8,
                       zorder=6, ls="")
        handles.append(Line2D([], [], ls="", marker="*", ms=12, color=BEST_COLOUR,
                              label="best point"))
    ax_t.tick_params(axis="x", labelbottom=False)
    ax_t.set_ylabel("F" if table.metric != "average gate fidelity" else "F (average gate)",
                    fontsize=FONT)
    ax_b.set_ylabel("1 − F  (log)" + ("  and sources" if table.budget else ""), fontsize=FONT)
    ax_b.set_xlabel(_axis_label(ax0, unit), fontsize=FONT)
    ax_t.ticklabel_format(axis="y", useOffset=False)
    ax_t.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False,
                fontsize=FONT - 1.5)
    sub = f"{table.sequence} on {table.device_name}; {_settings_text(table)}"
    best_note = _best_note(table)
    FS.titles(fig, _title(table, f"against {ax0.name}"),
            sub + ("\n" + best_note if best_note else "") + (f"; {note}" if note else ""))
    FS.footer(fig, FOOTER)
    return fig


def _map(table: SweepTable):
    a0, a1 = table.axes[0], table.axes[1]
    v0 = np.asarray(a0.values, dtype=float)
    v1 = np.asarray(a1.values, dtype=float)
    n0, n1 = len(v0), len(v1)
    inf = np.full((n1, n0), np.nan)
    margin = np.full((n1, n0), np.nan)
    invalid = np.zeros((n1, n0), bool)
    o0, o1 = np.argsort(v0, kind="stable"), np.argsort(v1, kind="stable")
    r0, r1 = np.argsort(o0), np.argsort(o1)
    for p in table.points:
        i, j = divmod(p.index, n1)
        c, r = r0[i], r1[j]
        if p.status == OK:
            inf[r, c] = p.infidelity
            if p.margin is not None:
                margin[r, c] = p.margin
        elif p.status == INVALID:
            invalid[r, c] = True
    s0, u0 = axis_scale(v0, a0.unit)
    s1, u1 = axis_scale(v1, a1.unit)
    log0 = a0.spacing == "log" or FS.log_spaced(v0)
    log1 = a1.spacing == "log" or FS.log_spaced(v1)
    e0, e1 = FS.edges(v0[o0], log0), FS.edges(v1[o1], log1)
    xc = (np.sqrt(e0[1:] * e0[:-1]) if log0 else (e0[1:] + e0[:-1]) / 2) / s0
    yc = (np.sqrt(e1[1:] * e1[:-1]) if log1 else (e1[1:] + e1[:-1]) / 2) / s1
    fig = new_figure()
    left, bottom = 1.15, 0.9
    w = WIDTH - left - 1.9
    h = HEIGHT - bottom - 1.55
    ax = FS.axes(fig, left, bottom, w, h)
    ax.grid(False)
    finite = inf[np.isfinite(inf)]
    positive = finite[finite > 0]
    if positive.size and positive.max() / positive.min() > 3:
        lo, hi = FS.log_limits(positive)
        norm = LogNorm(vmin=lo, vmax=hi)
        shown = np.where(inf > 0, inf, np.nan)
        scale_note = "log scale"
    else:
        lo, hi = (float(finite.min()), float(finite.max())) if finite.size else (0.0, 1.0)
        if hi == lo:
            lo, hi = lo - 5e-6, hi + 5e-6
        norm = Normalize(vmin=lo, vmax=hi)
        shown = inf
        scale_note = "linear scale"
    cmap = FIDELITY_MAP.reversed()
    mesh = ax.pcolormesh(e0 / s0, e1 / s1, np.ma.masked_invalid(shown), cmap=cmap, norm=norm,
                         edgecolors="white", linewidth=0.5 if n0 * n1 <= 400 else 0.0)
    if invalid.any():
        for r, c in zip(*np.nonzero(invalid)):
            ax.add_patch(Rectangle((e0[c] / s0, e1[r] / s1), (e0[c + 1] - e0[c]) / s0,
                                   (e1[r + 1] - e1[r]) / s1, facecolor="white",
                                   edgecolor=INVALID_COLOUR, hatch="xx", lw=0.0, zorder=2))
    if log0:
        ax.set_xscale("log")
        ax.xaxis.set_major_formatter(PLAIN)
    if log1:
        ax.set_yscale("log")
        ax.yaxis.set_major_formatter(PLAIN)
    ax.set_xlim(e0[0] / s0, e0[-1] / s0)
    ax.set_ylim(e1[0] / s1, e1[-1] / s1)
    ax.set_xlabel(_axis_label(a0, u0), fontsize=FONT)
    ax.set_ylabel(_axis_label(a1, u1), fontsize=FONT)
    cax = FS.axes(fig, left + w + 0.2, bottom, 0.18, h)
    cb = fig.colorbar(mesh, cax=cax)
    cb.set_label(f"1 − F ({scale_note}); darker is better", fontsize=FONT - 1, color=S.TEXT)
    cb.ax.tick_params(labelsize=FONT - 2)
    cb.outline.set_visible(False)
    if n0 * n1 <= 64:
        fs = FONT - 1 if n0 <= 6 else FONT - 2.5
        for r in range(n1):
            for c in range(n0):
                v = inf[r, c]
                if not np.isfinite(v):
                    continue
                t = norm(v) if v > 0 or not isinstance(norm, LogNorm) else 0.0
                dark = float(np.ma.filled(t, 0.0)) < 0.45
                ax.text(xc[c], yc[r], fmt_sci(v, 2), ha="center", va="center", fontsize=fs,
                        color="white" if dark else S.TEXT, zorder=4)
    handles = []
    note, crosses = _margin_note(margin)
    if crosses and n0 >= 2 and n1 >= 2 and np.isfinite(margin).all():
        ax.contour(xc, yc, margin, levels=[COHERENCE_RULE], colors=CONTOUR_COLOUR,
                   linewidths=1.4, linestyles="--", zorder=5)
        handles.append(Line2D([], [], color=CONTOUR_COLOUR, lw=1.4, ls="--",
                              label="T2/longest gate = 10⁴"))
    elif crosses:
        note = "T2/longest gate crosses 10⁴ (contour needs every cell computed)"
    best = best_point(table)
    if best is not None:
        i, j = divmod(best.index, n1)
        c, r = r0[i], r1[j]
        ax.add_patch(Rectangle((e0[c] / s0, e1[r] / s1), (e0[c + 1] - e0[c]) / s0,
                               (e1[r + 1] - e1[r]) / s1, fill=False, edgecolor=BEST_COLOUR,
                               lw=2.4, zorder=6))
        if n0 * n1 > 64:
            ax.plot([v0[i] / s0], [v1[j] / s1], marker="*", ms=15, color=BEST_COLOUR,
                    mec="white", mew=0.8, zorder=7)
        handles.append(Patch(facecolor="none", edgecolor=BEST_COLOUR, lw=2.0, label="best point"))
    if invalid.any():
        handles.append(Patch(facecolor="white", edgecolor=INVALID_COLOUR, hatch="xx",
                             label="invalid point"))
    if np.isnan(inf).any() and not table.complete:
        handles.append(Patch(facecolor="white", edgecolor="#9aa0a8", label="not computed"))
    if handles:
        ax.legend(handles=handles, loc="lower right", bbox_to_anchor=(1.0, 1.01),
                  ncol=len(handles), frameon=False, fontsize=FONT - 1.5, borderaxespad=0.0)
    sub = f"{table.sequence} on {table.device_name}; {_settings_text(table)}"
    best_note = _best_note(table)
    FS.titles(fig, _title(table, f"over {a0.name} and {a1.name}"),
            sub + ("\n" + best_note if best_note else "") + (f"; {note}" if note else ""))
    FS.footer(fig, FOOTER)
    return fig
