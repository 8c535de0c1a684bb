"""The figures of a simulation report.

* ``budget.png``: the error budget of the detail run as horizontal bars, one
  per source, then the floor and the interaction remainder;
* ``steps.png``: the infidelity of each step simulated alone (log scale);
* ``populations.png``: P(spin up) of each dot against time, from the run's
  traces, under a strip of its steps;
* ``observables.png`` (first, for a sweep whose reads record something):
  what each read records against the swept parameter, or maps over two;
* ``sweep.png``: fidelity against the swept parameter (one sweep axis), or
  heat maps over the first two (two or more axes), the best point marked.
  Both are the shared figures of the sweep table (:mod:`compiler.sweeptable`),
  the same code as ``dotseq sweep``'s.

Every figure is a :class:`matplotlib.figure.Figure` with its own Agg canvas
(no pyplot, no global state), 10 in wide at 110 dpi, built by a pure
function of the result; :func:`save_png` writes one.
"""

from __future__ import annotations

from typing import Callable

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Rectangle
from matplotlib.ticker import MaxNLocator
from matplotlib.transforms import blended_transform_factory

from .. import figstyle as FS
from ..figstyle import BEST_COLOUR, FONT, HEIGHT, WIDTH, new_figure
from ..figstyle import save_png  # noqa: F401  (write.py saves through this module)
from ..preview import style as S
from ..simulate.types import RunResult, SimulationResult
from ..numfmt import fmt_percent, fmt_sci, fmt_value, time_unit
from ..sweeptable import figure as SF
from ..sweeptable.build import from_result
from .fmt import budget_rows, detail_index, has_budget, trace_series, traces_index

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

FILES = ("observables.png", "budget.png", "steps.png", "populations.png", "sweep.png",
         "spectra.png")
CAPTIONS = {"observables.png": "What the readouts record over the sweep","budget.png": "Error budget", "steps.png": "Infidelity of each step",
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
            "P(spin up) in each qubit frame at the centre of the slow noise (its "
            "dephasing not shown); diamonds: averaged, at readout")
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

def sweep_figure(result: SimulationResult) -> Figure | None:
    """Fidelity over the sweep: the shared figure of the sweep table
    (:func:`compiler.sweeptable.figure.figure`, the same as ``dotseq
    sweep``'s).  None without sweep axes."""
    table = from_result(result)
    return None if table is None else SF.figure(table)


def observables_figure(result: SimulationResult) -> Figure | None:
    """What the reads record against the swept parameters (a Ramsey fringe;
    a map over two): the shared figure of the sweep table
    (:func:`compiler.sweeptable.figure.observables_figure`).  None without
    sweep axes or observables."""
    table = from_result(result)
    return None if table is None else SF.observables_figure(table)


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
    FS.titles(fig, "Noise spectra and filter functions",
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
        FS.style(ax)
        ax2 = ax.twinx()
        for j, (label, t, pulses) in enumerate(filters):
            y = SP.filter_function(f, t, pulses)
            ax2.loglog(f, np.maximum(y, 1e-30), lw=1.0, alpha=0.85,
                       color=S.GATE_COLOURS[j % len(S.GATE_COLOURS)], label=FS.short(label))
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
    "observables.png": observables_figure,
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
    if result.axes and any(getattr(r, "observables", ()) for r in result.runs):
        out.append("observables.png")       # first: what a lab records, then the fidelities
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
