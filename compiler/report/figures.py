"""The figures of a simulation report.

* ``budget.png``: the error budget of the detail run as horizontal bars, one
  per source, then the floor and the interaction remainder;
* ``steps.png``: the infidelity of each step simulated alone (log scale);
* ``populations.png``: P(spin up) of each dot against time, from the run's
  traces, under a strip of its steps;
* ``sweep.png``: fidelity against the swept parameter (one sweep axis), or
  heat maps over the first two (two or more axes), the best point marked.

Every figure is a :class:`matplotlib.figure.Figure` with its own Agg canvas
(no pyplot, no global state), 10 in wide at 110 dpi, built by a pure
function of the result; :func:`save_png` writes one.
"""

from __future__ import annotations

import math
from typing import Callable

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Rectangle
from matplotlib.ticker import MaxNLocator
from matplotlib.transforms import blended_transform_factory

from .. import figstyle as FS
from ..figstyle import BEST_COLOUR, FIDELITY_MAP, FONT, HEIGHT, WIDTH, new_figure
from ..figstyle import save_png  # noqa: F401  (write.py saves through this module)
from ..preview import style as S
from ..simulate.types import RunResult, SimulationResult
from ..numfmt import axis_scale, fmt_fidelity, fmt_percent, fmt_sci, fmt_value, time_unit
from .fmt import (best_index, budget_rows, detail_index, has_budget, sweep_metric, trace_series,
                  traces_index)

MAX_BARS = 16                # budget bars before the smallest sources are merged
MAX_STEP_BARS = 40           # steps drawn as labelled horizontal bars; more: vertical
MAX_LABEL = 44               # characters of a bar label

# Colours, from the project palette (compiler/preview/style.py).
SOURCE_COLOUR = S.I_COLOUR          # slate blue: one noise source
OTHER_COLOUR = "#8fa9d6"            # periwinkle: smaller sources merged
FLOOR_COLOUR = "#b8bcc4"            # grey: left with every source off
REMAINDER_COLOUR = S.Q_COLOUR       # sienna: sources acting together
METRIC_COLOURS = {"process": S.I_COLOUR, "average": S.GATE_COLOURS[0], "state": S.Q_COLOUR}
METRIC_NAMES = {"process": "process fidelity", "average": "average gate fidelity",
                "state": "state fidelity"}
DOT_COLOURS = S.LARMOR_COLOURS      # one colour per dot, in register order

FILES = ("budget.png", "steps.png", "populations.png", "sweep.png", "spectra.png")
CAPTIONS = {"budget.png": "Error budget", "steps.png": "Infidelity of each step",
            "populations.png": "Spin-up probability against time",
            "sweep.png": "Fidelity over the sweep",
            "spectra.png": "Noise spectra and the filter functions of the run and its worst steps"}


# ---------------------------------------------------------------- shared

def _run_name(result: SimulationResult, run: RunResult, micro: str = "µ") -> str:
    units = {n: u for n, _, u in result.axes}
    where = ", ".join(f"{n} = {fmt_value(v, units.get(n, ''), 4, micro)}" for n, v in run.sweep)
    return f"run {run.run_index}" + (f" ({where})" if where else "")


# ---------------------------------------------------------------- budget

def budget_figure(result: SimulationResult, i: int | None = None) -> Figure | None:
    """Horizontal bars of the error budget of run ``i`` (default the detail
    run): each source's contribution, largest on top, then the floor and the
    interaction remainder in their own colours; value and share of the total
    printed beside each bar.  The x axis is logarithmic when the values
    span more than a factor of 20; negative values are then drawn by
    magnitude, hatched.  None when the run has no budget.
    """
    i = detail_index(result) if i is None else i
    if i is None or not has_budget(result.runs[i]):
        return None
    run = result.runs[i]
    top = None if len(run.budget) <= MAX_BARS else MAX_BARS - 1
    rows = budget_rows(run, top)
    values = np.array([r.value for r in rows], dtype=float)
    finite = np.isfinite(values)
    mags = np.abs(values[finite & (values != 0)])
    log = mags.size >= 2 and float(mags.max() / mags.min()) > 20.0
    labels = [FS.short(r.label) for r in rows]
    colours = [{"source": SOURCE_COLOUR, "other": OTHER_COLOUR, "floor": FLOOR_COLOUR,
                "remainder": REMAINDER_COLOUR}[r.kind] for r in rows]
    n = len(rows)
    height = max(HEIGHT, 1.9 + 0.34 * n)
    fig = new_figure(WIDTH, height)
    left = min(max(max(FS.text_width_in(s) for s in labels) + 0.45, 1.6), 3.6)
    right = 1.9
    ax = FS.axes(fig, left, 0.95, WIDTH - left - right, height - 0.95 - 1.05)
    y = np.arange(n)[::-1].astype(float)
    if log:
        lo, hi = FS.log_limits(mags)
        ax.set_xscale("log")
        ax.set_xlim(lo, hi)
        FS.log_ticks(ax)
        for yy, v, c in zip(y, values, colours):
            if not np.isfinite(v) or v == 0:
                continue
            neg = v < 0
            ax.barh(yy, abs(v) - lo, left=lo, height=0.62, color="white" if neg else c,
                    edgecolor=c, hatch="////" if neg else "", lw=1.0)
    else:
        ax.barh(y, np.where(finite, values, 0.0), height=0.62, color=colours,
                edgecolor=colours, lw=1.0)
        vmin = min(0.0, float(np.min(values[finite], initial=0.0)))
        vmax = max(0.0, float(np.max(values[finite], initial=0.0)), float(run.budget_total))
        span = (vmax - vmin) or 1e-12
        ax.set_xlim(vmin - 0.04 * span if vmin < 0 else 0.0, vmax + 0.06 * span)
        ax.axvline(0.0, color="#9aa0a8", lw=0.8)
    total = float(run.budget_total)
    if total > 0 and (not log or ax.get_xlim()[0] < total < ax.get_xlim()[1] * 1.0001):
        ax.axvline(total, color=S.TEXT, lw=1.0, ls=(0, (4, 3)))
        ax.text(total, 1.005, f"total {fmt_sci(total)} ", transform=blended_transform_factory(
            ax.transData, ax.transAxes), ha="right", va="bottom", fontsize=FONT - 1.5,
            color=S.TEXT)
    ax.set_yticks(y)
    ax.set_yticklabels(labels, fontsize=FONT - 1)
    ax.set_ylim(-0.6, n - 0.4)
    ax.grid(False, axis="y")
    ax.tick_params(axis="y", length=0)
    ax.set_xlabel("infidelity contribution" + ("  (log scale; hatched: negative, drawn by "
                                               "magnitude)" if log and np.any(values < 0) else
                                               "  (log scale)" if log else ""), fontsize=FONT)
    tr = blended_transform_factory(ax.transAxes, ax.transData)
    ax.text(1.03, n - 0.35, "infidelity   share", transform=tr, ha="left", va="bottom",
            fontsize=FONT - 1.5, color=S.MUTED_TEXT)
    for yy, r in zip(y, rows):
        ax.text(1.03, yy, f"{fmt_sci(r.value):>9}   {fmt_percent(r.share):>7}", transform=tr,
                ha="left", va="center", fontsize=FONT - 1, color=S.TEXT, family="monospace")
    if n > 2:  # a thin rule between the sources and the floor/remainder bars
        ax.axhline(1.5, color="#d8dbe0", lw=0.8)
    FS.titles(fig, f"Error budget: {_run_name(result, run)}",
            f"total infidelity {fmt_sci(total)} = floor + the sources' contributions + "
            "interaction remainder;  contribution = total − infidelity with that source off")
    FS.footer(fig, "floor: infidelity left with every listed source off.  interaction "
                 "remainder: total − floor − sum of contributions (sources acting together).")
    return fig


# ---------------------------------------------------------------- steps

def _step_colour(kind: str) -> tuple[str, str]:
    face, hatch = S.step_style(kind)
    return (S.dense_colour(kind) if face == "#ffffff" else face), hatch


def steps_figure(result: SimulationResult, i: int | None = None) -> Figure | None:
    """The infidelity ``1 − F`` of each step of run ``i`` (default the detail
    run), simulated alone, on a log scale; coloured by step kind as in the
    preview.  Up to :data:`MAX_STEP_BARS` steps: one labelled horizontal bar
    each, in timeline order from the top; more: vertical bars over the step
    position with the five worst labelled.  None when the run has no steps.
    """
    i = detail_index(result) if i is None else i
    if i is None or not result.runs[i].steps:
        return None
    run = result.runs[i]
    steps = list(run.steps)
    inf = np.array([1.0 - float(s.fidelity) for s in steps])
    pos = inf[np.isfinite(inf) & (inf > 0)]
    lo, hi = FS.log_limits(pos) if pos.size else (1e-6, 1e-2)
    shown = np.where(np.isfinite(inf) & (inf > 0), inf, lo)
    colours = [_step_colour(s.kind)[0] for s in steps]
    n = len(steps)
    title = f"Infidelity of each step: {_run_name(result, run)}"
    subtitle = ("1 − average gate fidelity of each step simulated alone on the whole register "
                "against its ideal operation (log scale)")
    worst = int(np.nanargmax(np.where(np.isfinite(inf), inf, -np.inf)))
    if n <= MAX_STEP_BARS:
        labels = [FS.short(f"#{s.index}  {s.label or s.kind}") for s in steps]
        height = max(HEIGHT, 1.9 + 0.27 * n)
        fig = new_figure(WIDTH, height)
        left = min(max(max(FS.text_width_in(s) for s in labels) + 0.45, 1.6), 3.6)
        right = 1.2
        ax = FS.axes(fig, left, 0.95, WIDTH - left - right, height - 0.95 - 1.05)
        y = np.arange(n)[::-1].astype(float)
        ax.set_xscale("log")
        ax.set_xlim(lo, hi)
        FS.log_ticks(ax)
        ax.barh(y, shown - lo, left=lo, height=0.66, color=colours, edgecolor=S.STEP_EDGE,
                lw=0.6)
        ax.set_yticks(y)
        ax.set_yticklabels(labels, fontsize=FONT - 1)
        ax.set_ylim(-0.6, n - 0.4)
        ax.grid(False, axis="y")
        ax.tick_params(axis="y", length=0)
        tr = blended_transform_factory(ax.transAxes, ax.transData)
        for yy, v, k in zip(y, inf, range(n)):
            txt = fmt_sci(v)  # a value <= 0 has no bar on the log axis
            ax.text(1.02, yy, txt, transform=tr, ha="left", va="center", fontsize=FONT - 1,
                    family="monospace", color=BEST_COLOUR if k == worst else S.TEXT,
                    weight="bold" if k == worst else "normal")
        ax.set_xlabel("infidelity 1 − F  (log scale)", fontsize=FONT)
    else:
        fig = new_figure()
        ax = FS.axes(fig, 1.0, 0.95, WIDTH - 1.4, HEIGHT - 0.95 - 1.25)
        x = np.arange(n)
        ax.set_yscale("log")
        ax.set_ylim(lo, hi * 10)   # a decade of room for the labels of the worst steps
        FS.log_ticks(ax, "y")
        ax.bar(x, shown - lo, bottom=lo, width=0.85 if n < 400 else 1.0, color=colours, lw=0)
        ax.set_xlim(-0.5, n - 0.5)
        ax.xaxis.set_major_locator(MaxNLocator(nbins=12, integer=True))
        ax.set_xticklabels([])
        ticks = [int(t) for t in ax.get_xticks() if 0 <= t < n]
        ax.set_xticks(ticks)
        ax.set_xticklabels([str(steps[t].index) for t in ticks])
        ax.set_xlabel("step (timeline index)", fontsize=FONT)
        ax.set_ylabel("infidelity 1 − F", fontsize=FONT)
        ax.grid(False, axis="x")
        order = np.argsort(-np.where(np.isfinite(inf), inf, -np.inf), kind="stable")
        picked: list[int] = []
        for k in order:  # the five worst, spaced apart so their labels do not collide
            if all(abs(int(k) - j) > n / 12 for j in picked):
                picked.append(int(k))
            if len(picked) == 5:
                break
        for rank, k in enumerate(sorted(picked)):
            ax.annotate(FS.short(f"#{steps[k].index} {steps[k].label or steps[k].kind}", 24),
                        (k, shown[k]), xytext=(0, 8 + 11 * (rank % 2)),
                        textcoords="offset points", ha="center", va="bottom",
                        fontsize=FONT - 2, color=S.TEXT,
                        arrowprops=dict(arrowstyle="-", color=S.MUTED_TEXT, lw=0.6))
        kinds = list(dict.fromkeys(s.kind for s in steps))
        ax.legend(handles=[Patch(color=_step_colour(k)[0], label=k) for k in kinds[:10]],
                  loc="lower right", bbox_to_anchor=(1.0, 1.01), ncol=min(len(kinds), 10),
                  fontsize=FONT - 2, frameon=False, handlelength=1.2, columnspacing=1.0)
    FS.titles(fig, title, subtitle)
    s = steps[worst]
    FS.footer(fig, f"worst step: #{s.index} {s.label or s.kind} on {' '.join(s.qubits) or '-'} "
                 f"({s.source}), 1 − F = {fmt_sci(inf[worst])}.  Colours: step kind, as in "
                 "the preview.")
    return fig


# ---------------------------------------------------------------- populations

def populations_figure(result: SimulationResult, i: int | None = None) -> Figure | None:
    """P(spin up) of each dot against time for run ``i`` (default: the first
    run with traces, the detail run preferred), with the readout values as
    diamonds at the end and, above, a strip of the run's steps (one lane per
    dot, coloured by kind as in the preview).  None when no run has traces.
    """
    i = traces_index(result) if i is None else i
    if i is None:
        return None
    run = result.runs[i]
    series = trace_series(run)
    if series is None:
        return None
    t, curves = series
    t_end = max(float(np.nanmax(t)), float(run.duration) if run.duration > 0 else 0.0)
    scale, unit = time_unit(t_end)
    fig = new_figure()
    lanes = [d for d in run.dots] or [name for name, _ in curves]
    strip_h = 0.26 * len(lanes) if run.steps else 0.0
    left, right = 1.1, 1.75
    main_h = HEIGHT - 0.95 - 1.1 - (strip_h + 0.12 if strip_h else 0.0)
    ax = FS.axes(fig, left, 0.95, WIDTH - left - right, main_h)
    colour = {d: DOT_COLOURS[k % len(DOT_COLOURS)] for k, d in enumerate(lanes)}
    extra = [name for name, _ in curves if name not in colour]
    for k, name in enumerate(extra):
        colour[name] = S.GATE_COLOURS[k % len(S.GATE_COLOURS)]
    for name, yv in curves:
        ax.plot(t / scale, yv, color=colour[name], lw=1.4, label=f"dot {name}")
    pops = run.populations or {}
    for name, _ in curves:
        if name in pops:
            ax.plot([t_end / scale], [float(pops[name])], marker="D", ms=7, color=colour[name],
                    mec="white", mew=0.8, clip_on=False, zorder=5)
    ax.set_xlim(float(np.nanmin(t)) / scale, t_end / scale)
    ax.set_ylim(-0.03, 1.03)
    ax.set_xlabel(f"time ({unit})", fontsize=FONT)
    ax.set_ylabel("P(spin up)", fontsize=FONT)
    handles = [Line2D([], [], color=colour[n], lw=1.6, label=f"dot {n}") for n, _ in curves]
    if any(n in pops for n, _ in curves):
        handles.append(Line2D([], [], ls="", marker="D", ms=6, color=S.MUTED_TEXT,
                              label="at readout"))
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False,
              fontsize=FONT - 1)
    if run.steps:
        sx = FS.axes(fig, left, 0.95 + main_h + 0.12, WIDTH - left - right, strip_h)
        _draw_strip(sx, run, lanes, scale, ax.get_xlim(), WIDTH - left - right)
    FS.titles(fig, f"Spin-up probability: {_run_name(result, run)}",
            "P(spin up) of each dot in its qubit frame, from the simulated state; diamonds: "
            "the populations at readout")
    return fig


def _draw_strip(ax, run: RunResult, lanes: list[str], scale: float, xlim: tuple[float, float],
                width_in: float) -> None:
    ax.set_xlim(*xlim)
    ax.set_ylim(len(lanes), 0)
    ax.set_yticks(np.arange(len(lanes)) + 0.5)
    ax.set_yticklabels(lanes, fontsize=FONT - 2)
    ax.tick_params(axis="x", labelbottom=False, length=0)
    ax.tick_params(axis="y", length=0)
    ax.grid(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_visible(False)
    span = (xlim[1] - xlim[0]) or 1.0
    lane_of = {d: k for k, d in enumerate(lanes)}
    for s in run.steps:
        rows = [lane_of[q] for q in s.qubits if q in lane_of] or list(range(len(lanes)))
        face, hatch = S.step_style(s.kind)
        x0, w = s.start / scale, s.duration / scale
        for r in rows:
            if w <= 0:
                ax.plot([x0], [r + 0.5], marker="D", ms=4, color=face, mec=S.STEP_EDGE, mew=0.5)
                continue
            ax.add_patch(Rectangle((x0, r + 0.1), w, 0.8, facecolor=face, hatch=hatch,
                                   edgecolor=S.STEP_EDGE if not hatch else S.HATCH_EDGE, lw=0.5))
            px = w / span * width_in
            label = s.label or s.kind
            if FS.text_width_in(label, FONT - 3) < px - 0.06:
                ax.text(x0 + w / 2, r + 0.5, label, ha="center", va="center",
                        fontsize=FONT - 3, color=S.TEXT, clip_on=True)


# ---------------------------------------------------------------- sweep

def _grid_positions(result: SimulationResult) -> list[tuple[int, ...]] | None:
    """Grid index (one per axis) of every run: by its sweep values, else
    row-major by position (first axis outermost); None when neither fits."""
    axes = result.axes
    shape = tuple(len(v) for _, v, _ in axes)
    out: list[tuple[int, ...]] = []
    for r in result.runs:
        sw = dict(r.sweep)
        idx = []
        for name, values, _ in axes:
            if name not in sw:
                break
            hits = [k for k, v in enumerate(values)
                    if math.isclose(float(v), float(sw[name]), rel_tol=1e-9, abs_tol=1e-300)]
            if len(hits) != 1:
                break
            idx.append(hits[0])
        if len(idx) != len(axes):
            out = []
            break
        out.append(tuple(idx))
    if out and len(set(out)) == len(out):
        return out
    if len(result.runs) == int(np.prod(shape)) if shape else False:
        return [tuple(int(x) for x in np.unravel_index(k, shape)) for k in range(len(result.runs))]
    return None


def _metrics(result: SimulationResult) -> list[tuple[str, np.ndarray]]:
    """The curves of the sweep figure: process and average gate fidelity when
    every run has them, and state fidelity (NaN where missing)."""
    out = []
    for key, get in (("process", lambda r: r.process_fidelity),
                     ("average", lambda r: r.average_fidelity),
                     ("state", lambda r: r.state_fidelity)):
        vals = [get(r) for r in result.runs]
        if key == "state" or any(v is not None for v in vals):
            out.append((key, np.array([np.nan if v is None else float(v) for v in vals])))
    return out


def sweep_figure(result: SimulationResult) -> Figure | None:
    """Fidelity over the sweep.  One axis: process, average gate and state
    fidelity against the parameter (top) and their infidelities on a log
    scale (bottom).  Two or more axes: heat maps of the ranking fidelity and
    the state fidelity over the first two parameters (for more axes, the
    slice through the best run).  The best run (highest process fidelity,
    else average, else state) is starred.  None without sweep axes.
    """
    if not result.axes or not result.runs:
        return None
    pos = _grid_positions(result)
    if len(result.axes) >= 2 and pos is not None:
        return _sweep_map(result, pos)
    return _sweep_lines(result, pos)


def _sweep_lines(result: SimulationResult, pos: list[tuple[int, ...]] | None) -> Figure:
    name, values, unit = result.axes[0]
    if pos is not None:
        x = np.array([float(values[p[0]]) for p in pos])
    else:
        x = np.array([float(dict(r.sweep).get(name, np.nan)) for r in result.runs])
        if np.all(np.isnan(x)):
            x = np.arange(len(result.runs), dtype=float)
            unit, name = "", "run position"
    order = np.argsort(x, kind="stable")
    scale, xunit = axis_scale(x, unit)
    xs = x / scale
    log_x = FS.log_spaced(x)
    metric, _ = sweep_metric(result)
    best = best_index(result)
    curves = _metrics(result)
    fig = new_figure()
    left, right = 1.15, 2.0
    top_h, bot_h = 2.35, 1.55
    ax_b = FS.axes(fig, left, 0.8, WIDTH - left - right, bot_h)
    ax_t = FS.axes(fig, left, 0.8 + bot_h + 0.22, WIDTH - left - right, top_h)
    ax_t.sharex(ax_b)
    few = len(x) <= 60
    for key, v in curves:
        c = METRIC_COLOURS[key]
        kw = dict(color=c, lw=1.6, marker="o" if few else None, ms=4, label=METRIC_NAMES[key])
        ax_t.plot(xs[order], v[order], **kw)
        infid = 1.0 - v
        ax_b.plot(xs[order], np.where(infid > 0, infid, np.nan)[order], **kw)
    inf_all = np.concatenate([1.0 - v for _, v in curves])
    inf_pos = inf_all[np.isfinite(inf_all) & (inf_all > 0)]
    if inf_pos.size:
        ax_b.set_yscale("log")
        lo, hi = FS.log_limits(inf_pos)
        ax_b.set_ylim(lo, hi)
        FS.log_ticks(ax_b, "y")
    if log_x:
        for a in (ax_t, ax_b):
            a.set_xscale("log")
    ax_t.tick_params(axis="x", labelbottom=False)
    ax_t.set_ylabel("fidelity", fontsize=FONT)
    ax_b.set_ylabel("1 − F  (log)", fontsize=FONT)
    ax_b.set_xlabel(f"{name} ({xunit})" if xunit else name, fontsize=FONT)
    ax_t.yaxis.set_major_locator(MaxNLocator(nbins=6))
    note = ""
    if best is not None:
        v_best = dict(curves)[metric][best]
        for a, yv in ((ax_t, v_best), (ax_b, 1.0 - v_best)):
            a.axvline(xs[best], color=BEST_COLOUR, lw=0.9, ls=(0, (2, 2)))
            if a is ax_t or (np.isfinite(yv) and yv > 0):
                a.plot([xs[best]], [yv], marker="*", ms=15, color=BEST_COLOUR, mec="white",
                       mew=0.8, zorder=6, ls="")
        note = (f"best: {_run_name(result, result.runs[best])}, {METRIC_NAMES[metric]} "
                f"{fmt_fidelity(v_best)}")
    handles = [Line2D([], [], color=METRIC_COLOURS[k], lw=1.6, marker="o" if few else None,
                      ms=4, label=METRIC_NAMES[k]) for k, _ in curves]
    handles.append(Line2D([], [], ls="", marker="*", ms=12, color=BEST_COLOUR, label="best run"))
    ax_t.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False,
                fontsize=FONT - 1)
    extra = ""
    if len(result.axes) > 1:
        extra = "  (plotted against the first parameter only)"
    FS.titles(fig, f"Fidelity against {name}{extra}", note)
    return fig


def _sweep_map(result: SimulationResult, pos: list[tuple[int, ...]]) -> Figure:
    (n0, v0, u0), (n1, v1, u1) = result.axes[0], result.axes[1]
    v0 = np.asarray(v0, dtype=float)
    v1 = np.asarray(v1, dtype=float)
    best = best_index(result)
    metric, _ = sweep_metric(result)
    fixed = ""
    keep = list(range(len(result.runs)))
    if len(result.axes) > 2:
        ref = pos[best if best is not None else 0]
        keep = [k for k in keep if pos[k][2:] == ref[2:]]
        units = {n: u for n, _, u in result.axes}
        fixed = ", ".join(f"{n} = {fmt_value(vals[ref[j + 2]], units[n])}"
                          for j, (n, vals, _) in enumerate(result.axes[2:]))
    curves = dict(_metrics(result))
    panels = [metric] + (["state"] if metric != "state" else [])
    s0, xu = axis_scale(v0, u0)
    s1, yu = axis_scale(v1, u1)
    o0, o1 = np.argsort(v0, kind="stable"), np.argsort(v1, kind="stable")
    rank0, rank1 = np.argsort(o0), np.argsort(o1)
    log0, log1 = FS.log_spaced(v0), FS.log_spaced(v1)
    e0, e1 = FS.edges(v0[o0], log0), FS.edges(v1[o1], log1)
    fig = new_figure()
    gap, left, right_cb = 0.35, 1.1, 1.15   # right_cb: colour bar, its ticks and label
    w_panel = (WIDTH - left - 0.3 - len(panels) * right_cb - (len(panels) - 1) * gap) / len(panels)
    annotate = len(v0) * len(v1) <= 64
    missing = False
    for p, key in enumerate(panels):
        grid = np.full((len(v1), len(v0)), np.nan)
        for k in keep:
            a, b = pos[k][0], pos[k][1]
            grid[rank1[b], rank0[a]] = curves[key][k]
        x0 = left + p * (w_panel + right_cb + gap)
        ax = FS.axes(fig, x0, 0.95, w_panel, HEIGHT - 0.95 - 1.25)
        ax.grid(False)
        finite = grid[np.isfinite(grid)]
        vmin, vmax = (float(finite.min()), float(finite.max())) if finite.size else (0.0, 1.0)
        if vmax == vmin:
            vmin, vmax = vmin - 5e-5, vmax + 5e-5
        missing = missing or bool(np.isnan(grid).any())
        mesh = ax.pcolormesh(e0 / s0, e1 / s1, np.ma.masked_invalid(grid), cmap=FIDELITY_MAP,
                             vmin=vmin, vmax=vmax, edgecolors="white", linewidth=0.6)
        if log0:
            ax.set_xscale("log")
        if log1:
            ax.set_yscale("log")
        ax.set_xlabel(f"{n0} ({xu})" if xu else n0, fontsize=FONT)
        if p == 0:
            ax.set_ylabel(f"{n1} ({yu})" if yu else n1, fontsize=FONT)
        else:  # same y axis as the first panel
            ax.tick_params(axis="y", labelleft=False)
        cax = FS.axes(fig, x0 + w_panel + 0.15, 0.95, 0.16, HEIGHT - 0.95 - 1.25)
        cb = fig.colorbar(mesh, cax=cax)
        cb.set_label(METRIC_NAMES[key], fontsize=FONT - 1, color=S.TEXT)
        cb.ax.tick_params(labelsize=FONT - 2)
        cb.formatter.set_useOffset(False)
        cb.update_ticks()
        cb.outline.set_visible(False)
        if annotate:
            xc = np.sqrt(e0[1:] * e0[:-1]) if log0 else (e0[1:] + e0[:-1]) / 2
            yc = np.sqrt(e1[1:] * e1[:-1]) if log1 else (e1[1:] + e1[:-1]) / 2
            fs = FONT - 1 if len(v0) <= 6 else FONT - 2.5
            for r in range(len(v1)):
                for c in range(len(v0)):
                    v = grid[r, c]
                    if not np.isfinite(v):
                        continue
                    dark = (v - vmin) / (vmax - vmin) > 0.55
                    ax.text(xc[c] / s0, yc[r] / s1, f"{v:.5f}", ha="center", va="center",
                            fontsize=fs, color="white" if dark else S.TEXT)
        if best is not None and best in keep:
            a, b = pos[best][0], pos[best][1]
            c, r = rank0[a], rank1[b]
            ax.add_patch(Rectangle((e0[c] / s0, e1[r] / s1), (e0[c + 1] - e0[c]) / s0,
                                   (e1[r + 1] - e1[r]) / s1, fill=False, edgecolor=BEST_COLOUR,
                                   lw=2.2, zorder=5))
            if p == 0 and not annotate:
                ax.plot([v0[a] / s0], [v1[b] / s1], marker="*", ms=15, color=BEST_COLOUR,
                        mec="white", mew=0.8, zorder=6)
        ax.set_title(METRIC_NAMES[key], fontsize=FONT, color=S.TEXT, loc="left")
    note = ""
    if best is not None:
        note = (f"best (outlined): {_run_name(result, result.runs[best])}, "
                f"{METRIC_NAMES[metric]} {fmt_fidelity(curves[metric][best])}")
    if missing:
        note += ("; " if note else "") + "white cells: no result"
    title = f"Fidelity over {n0} and {n1}"
    if fixed:
        title += f"  (slice at {fixed})"
    FS.titles(fig, title, note)
    return fig


# ---------------------------------------------------------------- spectra

def spectra_figure(result: SimulationResult) -> Figure | None:
    """Per dot with a Zeeman-noise spectrum: S(f) (left axis, Hz²/Hz) and,
    on the right axis, the filter functions |Y(f)|² (s²) of the detail run
    (its π pulses flip the toggling function) and of free evolution over its
    worst steps (Cywiński et al., PRB 77, 174509 (2008)): the decay is
    2π²∫S|Y|² df, so the product of the curves is what dephases.  None when
    no dot has a spectrum."""
    from .. import spectra as SP
    if not result.noise_spectra:
        return None
    n = len(result.noise_spectra)
    fig = new_figure(WIDTH, max(HEIGHT, 1.6 + 3.2 * n))
    _titles(fig, "Noise spectra and filter functions",
            "S(f) of the Larmor frequency; |Y(f)|² of the run and of its worst steps")
    top, bottom = 0.86, 0.10
    hgt = (top - bottom) / n
    for k, (dot, sp, filters) in enumerate(result.noise_spectra):
        ax = fig.add_axes((0.09, top - (k + 1) * hgt + 0.12 * hgt, 0.78, hgt * 0.74))
        tmin = min([f[1] for f in filters if f[1] > 0] + [1e-6])
        tmax = max([f[1] for f in filters if f[1] > 0] + [1e-6])
        lo = max(sp.f_low, 1e-3 / tmax)
        hi = min(sp.f_high, 300.0 / tmin)
        f = np.geomspace(lo, hi, 1500)
        ax.loglog(f, np.maximum(sp.psd(f), 1e-300), color=DOT_COLOURS[k % len(DOT_COLOURS)],
                  lw=2.0, label=f"S(f), dot {dot}")
        ax.set_ylabel("S(f)  (Hz²/Hz)")
        ax.set_xlabel("frequency (Hz)")
        _style(ax)
        ax2 = ax.twinx()
        for j, (label, t, pulses) in enumerate(filters):
            y = SP.filter_function(f, t, pulses)
            ax2.loglog(f, np.maximum(y, 1e-30), lw=1.0, alpha=0.85,
                       color=S.GATE_COLOURS[j % len(S.GATE_COLOURS)], label=_short(label))
        ax2.set_ylabel("|Y(f)|²  (s²)")
        ymax = max(t for _, t, _ in filters) ** 2 if filters else 1.0
        ax2.set_ylim(ymax * 1e-8, ymax * 3)
        lines = ax.get_legend_handles_labels()
        lines2 = ax2.get_legend_handles_labels()
        ax2.legend(lines[0] + lines2[0], lines[1] + lines2[1], fontsize=FONT - 2,
                   loc="lower left", frameon=False)
    return fig


# ---------------------------------------------------------------- plan

BUILDERS: dict[str, Callable[[SimulationResult], Figure | None]] = {
    "budget.png": budget_figure,
    "steps.png": steps_figure,
    "populations.png": populations_figure,
    "sweep.png": sweep_figure,
    "spectra.png": spectra_figure,
}


def planned(result: SimulationResult) -> tuple[str, ...]:
    """File names of the figures the report of ``result`` will hold, in
    order (only those with something to draw)."""
    d = detail_index(result)
    out = []
    if d is not None and has_budget(result.runs[d]):
        out.append("budget.png")
    if d is not None and result.runs[d].steps:
        out.append("steps.png")
    if traces_index(result) is not None:
        out.append("populations.png")
    if result.axes and result.runs:
        out.append("sweep.png")
    if result.noise_spectra:
        out.append("spectra.png")
    return tuple(out)


def build(name: str, result: SimulationResult) -> Figure:
    """The figure ``name`` (one of :data:`FILES`) of ``result``.

    Raises
    ------
    ValueError
        Unknown name, or nothing to draw for it.
    """
    if name not in BUILDERS:
        raise ValueError(f"unknown report figure {name!r}; known: {', '.join(FILES)}")
    fig = BUILDERS[name](result)
    if fig is None:
        raise ValueError(f"nothing to draw for {name}")
    return fig
