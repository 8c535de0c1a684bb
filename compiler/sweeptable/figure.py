"""The figures of a sweep table, for ``dotseq sweep`` and the report of a
sequence with its own sweep alike (one look: :mod:`compiler.figstyle`).

* :func:`figure` (``sweep.png``), the whole-run fidelity:

  - one axis: the process, average gate and state fidelity against the
    parameter (top; those the points have) and their infidelities on a log
    scale (bottom), with the largest error sources when the budget was
    computed; the best point starred; where the coherence margin
    T2 / longest gate crosses the rule of thumb of 10⁴, the points below it
    are shaded; invalid points crossed;
  - two or more axes: heat maps of 1 − F of the ranking metric (and of the
    state fidelity when that is not the ranking metric) over the first two
    parameters (first across, second up; with more axes the slice through
    the best point), values in the cells up to 64 cells, the best cell
    outlined, and the contour T2 / longest gate = 10⁴ where the margin
    crosses it.

* :func:`observables_figure` (``observables.png``), what the reads record:

  - one axis: each observable (P(up) of a dot, P(singlet) of a blockade
    pair, P(even) of a parity readout) against the parameter as recorded
    with the readout and preparation errors (solid, with binomial error
    bars when shots were given) and as a perfect readout of the simulated
    state would give it (dashed): a Ramsey fringe, a Rabi oscillation;
  - two or more axes: one map per observable (recorded), up to
    :data:`MAX_OBSERVABLE_MAPS`.

Pure functions of the :class:`~compiler.sweeptable.types.SweepTable`
(matplotlib ``Figure`` with an Agg canvas, no pyplot); :func:`png_bytes`
renders one.
"""

from __future__ import annotations

import io

import numpy as np
from matplotlib.colors import LogNorm, Normalize
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Rectangle
from matplotlib.ticker import FuncFormatter

from .. import figstyle as FS
from ..figstyle import BEST_COLOUR, DPI, FIDELITY_MAP, FONT, HEIGHT, WIDTH, new_figure
from ..numfmt import axis_scale, fmt_fidelity, fmt_sci, fmt_value
from ..physics import COHERENCE_RULE
from ..preview import style as S
from .types import INVALID, OK, SweepTable
from .write import best_point, observable_labels

MAIN_COLOUR = S.I_COLOUR                       # slate blue
METRICS = (("process", "process_fidelity", "process fidelity", S.I_COLOUR),
           ("average", "average_fidelity", "average gate fidelity", S.GATE_COLOURS[0]),
           ("state", "state_fidelity", "state fidelity", S.Q_COLOUR))
RANKING = {"average gate fidelity": "average", "state fidelity": "state"}
SOURCE_COLOURS = ("#c0703f", "#3f7d5c", "#7a5a8c", "#8c6d3f")
OBSERVABLE_COLOURS = S.LARMOR_COLOURS + S.GATE_COLOURS
LOW_MARGIN = "#f3e3c3"                         # pale amber shading
CONTOUR_COLOUR = "#20262e"
INVALID_COLOUR = "#b8bcc4"
MAX_SOURCES = 4
MAX_LABEL = 34
SUBTITLE_WIDTH = 120          # characters per subtitle line
MAX_OBSERVABLE_MAPS = 4
PLAIN = FuncFormatter(lambda v, _: f"{v:g}")   # log axes: 0.1, 1, 10 rather than 10^-1
FOOTER = ("A simulation of the compiled sequence on the device model, not a measurement. "
          "Check voltages and microwave power against your sample's and lab's limits.")


# ---------------------------------------------------------------- shared parts

def _settings_text(table: SweepTable) -> str:
    """The simulation settings the table records (those it has)."""
    o = table.options
    parts = [f"{o['engine']} engine"] if o.get("engine") else []
    if o.get("nodes") is not None:
        parts.append(f"{o['nodes']} quadrature node{'s' * (o['nodes'] != 1)}"
                     + (f" ({o['quadrature']})" if o.get("quadrature") else "")
                     + (" to start, refined per run" if o['nodes'] > 1 else ""))
    if o.get("substeps") is not None:
        parts.append(f"{o['substeps']} sub-step{'s' * (o['substeps'] != 1)} per sample")
    if not o.get("rwa", True):
        parts.append("no RWA")
    return ", ".join(parts)


def _scope_text(table: SweepTable) -> str:
    return f"fidelity of {table.scope}" if table.scope else ""


def _partial(table: SweepTable) -> str:
    return ("" if table.complete else
            f"  (PARTIAL: {len(table.points)} of {table.n_points} points)")


def _axis_label(a, unit: str) -> str:
    return f"{a.name} ({unit})" if unit else a.name


def _subtitle(table: SweepTable, *notes: str) -> str:
    settings = _settings_text(table)
    sub = f"{table.sequence} on {table.device_name}" + (f"; {settings}" if settings else "")
    scope = _scope_text(table)
    if scope:
        sub += f"; {scope}"
    rest = "; ".join(n for n in notes if n)
    # wrapped to the figure's width (a long sequence path or device name ran off the right edge)
    import textwrap
    return "\n".join(textwrap.fill(line, SUBTITLE_WIDTH) for line in [sub] + ([rest] if rest else []))


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


def _best_note(table: SweepTable) -> str:
    best = best_point(table)
    if best is None:
        return ""
    vals = ", ".join(f"{a.name} = {fmt_value(v, a.unit)}" for a, v in zip(table.axes, best.coords))
    return f"best: F = {fmt_fidelity(best.fidelity)} (1 − F = {fmt_sci(best.infidelity)}) at {vals}"


class _Line:
    """One axis: the x values (scaled to their display unit), the order, and
    the point of each position."""

    def __init__(self, table: SweepTable):
        a = table.axes[0]
        self.axis = a
        self.x = np.asarray(a.values, dtype=float)
        self.n = len(self.x)
        self.scale, self.unit = axis_scale(self.x, a.unit)
        self.xs = self.x / self.scale
        self.order = np.argsort(self.x, kind="stable")
        self.log = a.spacing == "log" or FS.log_spaced(self.x)
        have = {p.index: p for p in table.points}
        self.points = [have.get(i) for i in range(self.n)]
        self.few = self.n <= 60

    def values(self, get) -> np.ndarray:
        out = np.full(self.n, np.nan)
        for i, p in enumerate(self.points):
            if p is not None and p.status == OK:
                v = get(p)
                if v is not None:
                    out[i] = v
        return out

    def invalid(self) -> np.ndarray:
        return np.array([p is not None and p.status == INVALID for p in self.points], bool)

    def set_log_x(self, *axes) -> None:
        if self.log:
            for a in axes:
                a.set_xscale("log")
            axes[-1].xaxis.set_major_formatter(PLAIN)


class _Map:
    """The first two axes as a grid (rows: second axis, columns: first),
    sorted by value; with more axes, the slice through ``ref`` (grid
    indices of the other axes; default the best point's)."""

    def __init__(self, table: SweepTable):
        self.a0, self.a1 = table.axes[0], table.axes[1]
        self.shape = tuple(a.points for a in table.axes)
        self.v0 = np.asarray(self.a0.values, dtype=float)
        self.v1 = np.asarray(self.a1.values, dtype=float)
        self.n0, self.n1 = len(self.v0), len(self.v1)
        o0, o1 = np.argsort(self.v0, kind="stable"), np.argsort(self.v1, kind="stable")
        self.r0, self.r1 = np.argsort(o0), np.argsort(o1)
        self.s0, self.u0 = axis_scale(self.v0, self.a0.unit)
        self.s1, self.u1 = axis_scale(self.v1, self.a1.unit)
        self.log0 = self.a0.spacing == "log" or FS.log_spaced(self.v0)
        self.log1 = self.a1.spacing == "log" or FS.log_spaced(self.v1)
        self.e0, self.e1 = FS.edges(self.v0[o0], self.log0), FS.edges(self.v1[o1], self.log1)
        self.xc = (np.sqrt(self.e0[1:] * self.e0[:-1]) if self.log0
                   else (self.e0[1:] + self.e0[:-1]) / 2) / self.s0
        self.yc = (np.sqrt(self.e1[1:] * self.e1[:-1]) if self.log1
                   else (self.e1[1:] + self.e1[:-1]) / 2) / self.s1
        best = best_point(table)
        self.fixed = ""
        ref = ()
        if len(self.shape) > 2:
            first = best or next((p for p in table.points if p.status == OK), None)
            ref = (np.unravel_index(first.index, self.shape)[2:] if first is not None
                   else (0,) * (len(self.shape) - 2))
            self.fixed = ", ".join(f"{a.name} = {fmt_value(a.values[int(k)], a.unit)}"
                                   for a, k in zip(table.axes[2:], ref))
        self.cells = {}                       # point index -> (row, column)
        for p in table.points:
            idx = np.unravel_index(p.index, self.shape)
            if tuple(int(k) for k in idx[2:]) == tuple(int(k) for k in ref):
                self.cells[p.index] = (int(self.r1[idx[1]]), int(self.r0[idx[0]]))
        self.points = [p for p in table.points if p.index in self.cells]
        self.annotate = self.n0 * self.n1 <= 64

    def grid(self, get) -> np.ndarray:
        g = np.full((self.n1, self.n0), np.nan)
        for p in self.points:
            if p.status == OK:
                v = get(p)
                if v is not None:
                    g[self.cells[p.index]] = v
        return g

    def invalid(self) -> np.ndarray:
        g = np.zeros((self.n1, self.n0), bool)
        for p in self.points:
            if p.status == INVALID:
                g[self.cells[p.index]] = True
        return g

    def cell(self, ax, r: int, c: int, **kw) -> None:
        ax.add_patch(Rectangle((self.e0[c] / self.s0, self.e1[r] / self.s1),
                               (self.e0[c + 1] - self.e0[c]) / self.s0,
                               (self.e1[r + 1] - self.e1[r]) / self.s1, **kw))

    def panel(self, fig, x0: float, bottom: float, w: float, h: float, values: np.ndarray, *,
              norm, cmap, label: str, fmt, first: bool, title: str = "",
              dark_low: bool = True):
        """One heat map with its colour bar; returns the axes.  ``dark_low``:
        the colour map is dark at its low end (white cell text there)."""
        ax = FS.axes(fig, x0, bottom, w, h)
        ax.grid(False)
        mesh = ax.pcolormesh(self.e0 / self.s0, self.e1 / self.s1, np.ma.masked_invalid(values),
                             cmap=cmap, norm=norm, edgecolors="white",
                             linewidth=0.5 if self.n0 * self.n1 <= 400 else 0.0)
        inv = self.invalid()
        for r, c in zip(*np.nonzero(inv)):
            self.cell(ax, r, c, facecolor="white", edgecolor=INVALID_COLOUR, hatch="xx", lw=0.0,
                      zorder=2)
        if self.log0:
            ax.set_xscale("log")
            ax.xaxis.set_major_formatter(PLAIN)
        if self.log1:
            ax.set_yscale("log")
            ax.yaxis.set_major_formatter(PLAIN)
        ax.set_xlim(self.e0[0] / self.s0, self.e0[-1] / self.s0)
        ax.set_ylim(self.e1[0] / self.s1, self.e1[-1] / self.s1)
        ax.set_xlabel(_axis_label(self.a0, self.u0), fontsize=FONT)
        if first:
            ax.set_ylabel(_axis_label(self.a1, self.u1), fontsize=FONT)
        else:
            ax.tick_params(axis="y", labelleft=False)
        cax = FS.axes(fig, x0 + w + 0.15, bottom, 0.16, h)
        cb = fig.colorbar(mesh, cax=cax)
        cb.set_label(label, fontsize=FONT - 1, color=S.TEXT)
        cb.ax.tick_params(labelsize=FONT - 2)
        cb.outline.set_visible(False)
        if self.annotate:
            fs = FONT - 1 if self.n0 <= 6 else FONT - 2.5
            for r in range(self.n1):
                for c in range(self.n0):
                    v = values[r, c]
                    if not np.isfinite(v):
                        continue
                    t = norm(v) if v > 0 or not isinstance(norm, LogNorm) else 0.0
                    t = float(np.ma.filled(t, 0.0))
                    dark = t < 0.45 if dark_low else t > 0.55
                    ax.text(self.xc[c], self.yc[r], fmt(v), ha="center", va="center",
                            fontsize=fs, color="white" if dark else S.TEXT, zorder=4)
        if title:
            ax.set_title(title, fontsize=FONT, color=S.TEXT, loc="left")
        return ax


def _infidelity_norm(values: np.ndarray):
    finite = values[np.isfinite(values)]
    positive = finite[finite > 0]
    if positive.size and positive.max() / positive.min() > 3:
        lo, hi = FS.log_limits(positive)
        return LogNorm(vmin=lo, vmax=hi), np.where(values > 0, values, np.nan), "log scale"
    lo, hi = (float(finite.min()), float(finite.max())) if finite.size else (0.0, 1.0)
    if hi == lo:
        lo, hi = lo - 5e-6, hi + 5e-6
    return Normalize(vmin=lo, vmax=hi), values, "linear scale"


def png_bytes(table: SweepTable, build=None) -> bytes | None:
    """A figure of the table as PNG bytes (``build`` defaults to
    :func:`figure`), or None when there is nothing to draw."""
    fig = (build or figure)(table)
    if fig is None:
        return None
    buf = io.BytesIO()
    fig.canvas.print_figure(buf, format="png", dpi=DPI, metadata={"Software": "dotseq"})
    return buf.getvalue()


# ---------------------------------------------------------------- fidelity

def _title(table: SweepTable, what: str) -> str:
    name = "average gate fidelity" if table.metric == "average gate fidelity" else "state fidelity"
    return f"Whole-run {name} {what}" + _partial(table)


def figure(table: SweepTable):
    """``sweep.png`` (see the module notes), or None when no point was
    computed."""
    if not any(p.status == OK for p in table.points):
        return None
    if len(table.axes) == 1:
        return _lines(table)
    return _map(table)


def _lines(table: SweepTable):
    L = _Line(table)
    xs, order = L.xs, L.order
    margin = L.values(lambda p: p.margin)
    invalid = L.invalid()
    curves = [(key, name, colour, L.values(lambda p, a=attr: getattr(p, a)))
              for key, attr, name, colour in METRICS]
    curves = [c for c in curves if np.isfinite(c[3]).any()]
    rank = L.values(lambda p: p.fidelity)
    fig = new_figure()
    left, right = 1.15, 2.75
    top_h, bot_h = 2.25, 1.65
    ax_b = FS.axes(fig, left, 0.85, WIDTH - left - right, bot_h)
    ax_t = FS.axes(fig, left, 0.85 + bot_h + 0.22, WIDTH - left - right, top_h)
    ax_t.sharex(ax_b)
    mk = dict(marker="o" if L.few else None, ms=4)
    handles = []
    infids = []
    for key, name, colour, v in curves:
        main = key == RANKING.get(table.metric)
        lw = 1.8 if main else 1.3
        ax_t.plot(xs[order], v[order], color=colour, lw=lw, **mk)
        infid = 1.0 - v
        ax_b.plot(xs[order], np.where(infid > 0, infid, np.nan)[order], color=colour, lw=lw, **mk)
        handles.append(Line2D([], [], color=colour, lw=lw, label=name, **mk))
        infids.append(infid)
    with_budget = sum(1 for p in L.points if p is not None and p.budget)
    if with_budget >= 2:        # (a report has the budget of its detail run only)
        contrib: dict[str, np.ndarray] = {}
        for i, p in enumerate(L.points):
            if p is not None and p.status == OK:
                for s, v in p.budget:
                    contrib.setdefault(s, np.full(L.n, np.nan))[i] = v
        top = sorted(contrib, key=lambda s: -np.nanmax(contrib[s]))[:MAX_SOURCES]
        for k, s in enumerate(top):
            v = contrib[s]
            if not np.any(v > 0):
                continue
            c = SOURCE_COLOURS[k % len(SOURCE_COLOURS)]
            ax_b.plot(xs[order], np.where(v > 0, v, np.nan)[order], color=c, lw=1.2, ls="--",
                      marker="." if L.few else None)
            handles.append(Line2D([], [], color=c, lw=1.2, ls="--", label=FS.short(s, MAX_LABEL)))
            infids.append(v)
    allv = np.concatenate(infids) if infids else np.array([])
    pos = allv[np.isfinite(allv) & (allv > 0)]
    if pos.size:
        ax_b.set_yscale("log")
        ax_b.set_ylim(*FS.log_limits(pos))
        FS.log_ticks(ax_b, "y")
    L.set_log_x(ax_t, ax_b)
    if invalid.any():
        y0 = np.nanmin(rank) if np.isfinite(rank).any() else 0.0
        ax_t.plot(xs[invalid], np.full(invalid.sum(), y0), ls="", marker="x", ms=7,
                  color=INVALID_COLOUR, mew=1.6)
        handles.append(Line2D([], [], ls="", marker="x", ms=7, color=INVALID_COLOUR, mew=1.6,
                              label="invalid point"))
    note, crosses = _margin_note(margin)
    if crosses:
        below = np.isfinite(margin) & (margin < COHERENCE_RULE)
        e = FS.edges(L.x[order], L.log) / L.scale
        for j, i in enumerate(order):
            if below[i]:
                for a in (ax_t, ax_b):
                    a.axvspan(e[j], e[j + 1], color=LOW_MARGIN, lw=0, zorder=0)
        handles.append(Patch(color=LOW_MARGIN, label="T2/longest gate < 10⁴"))
    best = best_point(table)
    if best is not None:
        bx = best.coords[0] / L.scale
        for a, yv in ((ax_t, best.fidelity), (ax_b, best.infidelity)):
            a.axvline(bx, color=BEST_COLOUR, lw=0.9, ls=(0, (2, 2)))
            if a is ax_t or (yv is not None and yv > 0):
                a.plot([bx], [yv], marker="*", ms=15, color=BEST_COLOUR, mec="white", mew=0.8,
                       zorder=6, ls="")
        handles.append(Line2D([], [], ls="", marker="*", ms=12, color=BEST_COLOUR,
                              label="best point"))
    ax_t.tick_params(axis="x", labelbottom=False)
    ax_t.set_ylabel("fidelity", fontsize=FONT)
    ax_b.set_ylabel("1 − F  (log)" + ("  and sources" if with_budget >= 2 else ""),
                    fontsize=FONT)
    ax_b.set_xlabel(_axis_label(L.axis, L.unit), fontsize=FONT)
    ax_t.ticklabel_format(axis="y", useOffset=False)
    ax_t.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False,
                fontsize=FONT - 1.5)
    FS.titles(fig, _title(table, f"against {L.axis.name}"),
              _subtitle(table, _best_note(table), note))
    FS.footer(fig, FOOTER)
    return fig


def _map(table: SweepTable):
    M = _Map(table)
    ranking = RANKING.get(table.metric, "average")
    keys = [ranking] + (["state"] if ranking != "state" else [])
    attrs = {key: (attr, name) for key, attr, name, _ in METRICS}
    grids = [(key, M.grid(lambda p, a=attrs[key][0]: None if getattr(p, a) is None
                          else 1.0 - getattr(p, a))) for key in keys]
    grids = [(k, g) for k, g in grids if k == ranking or np.isfinite(g).any()]
    margin = M.grid(lambda p: p.margin)
    fig = new_figure()
    left, bottom = 1.15, 0.9
    gap, bar = 0.3, 1.3                       # colour bar, its ticks and label
    h = HEIGHT - bottom - 1.55
    w = (WIDTH - left - 0.3 - len(grids) * bar - (len(grids) - 1) * gap) / len(grids)
    cmap = FIDELITY_MAP.reversed()
    handles = []
    note, crosses = _margin_note(margin)
    best = best_point(table)
    for k, (key, values) in enumerate(grids):
        norm, shown, scale_note = _infidelity_norm(values)
        ax = M.panel(fig, left + k * (w + bar + gap), bottom, w, h, shown, norm=norm, cmap=cmap,
                     label=f"1 − F ({scale_note}); darker is better",
                     fmt=lambda v: fmt_sci(v, 2), first=k == 0,
                     title=f"1 − {attrs[key][1]}" if len(grids) > 1 else "")
        if crosses and M.n0 >= 2 and M.n1 >= 2 and np.isfinite(margin).all():
            ax.contour(M.xc, M.yc, margin, levels=[COHERENCE_RULE], colors=CONTOUR_COLOUR,
                       linewidths=1.4, linestyles="--", zorder=5)
            if k == 0:
                handles.append(Line2D([], [], color=CONTOUR_COLOUR, lw=1.4, ls="--",
                                      label="T2/longest gate = 10⁴"))
        if best is not None and best.index in M.cells:
            r, c = M.cells[best.index]
            M.cell(ax, r, c, fill=False, edgecolor=BEST_COLOUR, lw=2.4, zorder=6)
            if not M.annotate:
                ax.plot([M.xc[c]], [M.yc[r]], marker="*", ms=15, color=BEST_COLOUR,
                        mec="white", mew=0.8, zorder=7)
    if crosses and not (M.n0 >= 2 and M.n1 >= 2 and np.isfinite(margin).all()):
        note = "T2/longest gate crosses 10⁴ (contour needs every cell computed)"
    if best is not None:
        handles.append(Patch(facecolor="none", edgecolor=BEST_COLOUR, lw=2.0, label="best point"))
    if M.invalid().any():
        handles.append(Patch(facecolor="white", edgecolor=INVALID_COLOUR, hatch="xx",
                             label="invalid point"))
    if np.isnan(grids[0][1]).any():
        handles.append(Patch(facecolor="white", edgecolor="#9aa0a8", label="not computed"))
    if handles:
        fig.legend(handles=handles, loc="lower right", bbox_to_anchor=(0.98, (bottom + h) / HEIGHT
                                                                       + 0.005),
                   ncol=len(handles), frameon=False, fontsize=FONT - 1.5, borderaxespad=0.0)
    what = f"over {M.a0.name} and {M.a1.name}" + (f"  (slice at {M.fixed})" if M.fixed else "")
    FS.titles(fig, _title(table, what), _subtitle(table, _best_note(table), note))
    FS.footer(fig, FOOTER)
    return fig


# ---------------------------------------------------------------- observables

def _observable_series(table: SweepTable, label: str):
    return (lambda p: next((o.measured for o in p.observables if o.label == label), None),
            lambda p: next((o.ideal for o in p.observables if o.label == label), None),
            lambda p: next((o.error for o in p.observables if o.label == label), None))


def _readout_note(table: SweepTable) -> str:
    shots = sorted({o.shots for p in table.points for o in p.observables if o.shots})
    text = ("solid: recorded (readout and preparation errors of the device); dashed: a perfect "
            "readout of the simulated state")
    if shots:
        text += f"\nerror bars: binomial 1σ for {', '.join(str(s) for s in shots)} shots"
    return text


def observables_figure(table: SweepTable):
    """``observables.png`` (see the module notes), or None when no computed
    point has an observable."""
    labels = observable_labels(table)
    if not labels or not any(p.status == OK for p in table.points):
        return None
    if len(table.axes) == 1:
        return _observable_lines(table, labels)
    return _observable_maps(table, labels)


def _observable_lines(table: SweepTable, labels: list[str]):
    L = _Line(table)
    xs, order = L.xs, L.order
    fig = new_figure()
    left, right = 1.15, 2.75
    ax = FS.axes(fig, left, 0.85, WIDTH - left - right, HEIGHT - 0.85 - 1.4)
    handles = []
    for k, label in enumerate(labels):
        colour = OBSERVABLE_COLOURS[k % len(OBSERVABLE_COLOURS)]
        measured, ideal, error = (L.values(f) for f in _observable_series(table, label))
        mk = dict(marker="o" if L.few else None, ms=4)
        if np.isfinite(error).any():
            ax.errorbar(xs[order], measured[order], yerr=np.nan_to_num(error[order]),
                        color=colour, lw=1.7, capsize=2.5, elinewidth=0.9, **mk)
        else:
            ax.plot(xs[order], measured[order], color=colour, lw=1.7, **mk)
        ax.plot(xs[order], ideal[order], color=colour, lw=1.0, ls="--")
        handles.append(Line2D([], [], color=colour, lw=1.7, label=FS.short(label, MAX_LABEL), **mk))
    handles.append(Line2D([], [], color=S.MUTED_TEXT, lw=1.0, ls="--", label="perfect readout"))
    L.set_log_x(ax)
    ax.set_ylim(-0.03, 1.03)
    ax.set_xlabel(_axis_label(L.axis, L.unit), fontsize=FONT)
    ax.set_ylabel("probability recorded", fontsize=FONT)
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False,
              fontsize=FONT - 1.5)
    FS.titles(fig, f"What the readouts record against {L.axis.name}" + _partial(table),
              f"{table.sequence} on {table.device_name}\n{_readout_note(table)}")
    FS.footer(fig, FOOTER)
    return fig


def _observable_maps(table: SweepTable, labels: list[str]):
    M = _Map(table)
    shown = labels[:MAX_OBSERVABLE_MAPS]
    fig = new_figure()
    left, bottom = 1.15, 0.9
    gap, bar = 0.3, 1.0
    h = HEIGHT - bottom - 1.55
    w = (WIDTH - left - 0.3 - len(shown) * bar - (len(shown) - 1) * gap) / len(shown)
    norm = Normalize(vmin=0.0, vmax=1.0)
    for k, label in enumerate(shown):
        measured = M.grid(_observable_series(table, label)[0])
        M.panel(fig, left + k * (w + bar + gap), bottom, w, h, measured, norm=norm,
                cmap=FIDELITY_MAP, label="recorded probability", fmt=lambda v: f"{v:.3f}",
                first=k == 0, title=FS.short(label, 28), dark_low=False)
    more = len(labels) - len(shown)
    notes = ["recorded with the readout and preparation errors of the device"]
    if more:
        notes.append(f"{more} more observable{'s' * (more != 1)} in the table")
    what = f"over {M.a0.name} and {M.a1.name}" + (f"  (slice at {M.fixed})" if M.fixed else "")
    FS.titles(fig, f"What the readouts record {what}" + _partial(table),
              f"{table.sequence} on {table.device_name}\n" + "; ".join(notes))
    FS.footer(fig, FOOTER)
    return fig
