"""The look shared by every figure dotseq writes (report and sweep):
sizes, fonts, the fidelity colour map, axes placed in inches, titles and
footers, log-scale limits and ticks, cell edges of a heat map.

Colours of steps and traces are in :mod:`compiler.preview.style`; number
formats in :mod:`compiler.numfmt`.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import LinearSegmentedColormap
from matplotlib.figure import Figure
from matplotlib.ticker import LogLocator, NullFormatter

from .preview import style as S

DPI = 110
WIDTH = 10.0                 # in (1100 px)
HEIGHT = 6.0                 # in (660 px)
FONT = 10.0
CHAR_IN = 0.58 * FONT / 72   # average glyph width at FONT, inches
SHORT_LABEL = 44             # characters of a label before it is cut with "…"
BEST_COLOUR = S.CAUTION      # dark amber star and outline of the best point
FIDELITY_MAP = LinearSegmentedColormap.from_list(
    "dotseq_fidelity", ["#f4f0e8", "#cfe1d9", "#7fb3a6", "#3f7d8a", "#2e4e6e"])


def new_figure(width: float = WIDTH, height: float = HEIGHT) -> Figure:
    """A white figure of ``width`` x ``height`` inches with an Agg canvas."""
    fig = Figure(figsize=(width, height), dpi=DPI, facecolor="white")
    FigureCanvasAgg(fig)
    return fig


def save_png(fig: Figure, path: str | Path) -> None:
    """Write ``fig`` as PNG at :data:`DPI` (no creation date in the file)."""
    fig.canvas.print_figure(str(path), format="png", dpi=DPI,
                            metadata={"Software": "dotseq report"})


def axes(fig: Figure, left: float, bottom: float, width: float, height: float):
    """Axes placed in inches from the lower left corner."""
    w, h = fig.get_size_inches()
    ax = fig.add_axes((left / w, bottom / h, width / w, height / h))
    style(ax)
    return ax


def style(ax, grid_axis: str = "both") -> None:
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color("#9aa0a8")
    ax.tick_params(labelsize=FONT - 1, colors=S.TEXT, length=3)
    ax.grid(True, axis=grid_axis, color=S.GRID, lw=0.8, which="major")
    ax.set_axisbelow(True)
    ax.xaxis.label.set_color(S.TEXT)
    ax.yaxis.label.set_color(S.TEXT)


def titles(fig: Figure, title: str, subtitle: str = "") -> None:
    w, h = fig.get_size_inches()
    fig.text(0.25 / w, 1 - 0.22 / h, title, ha="left", va="top", fontsize=FONT + 3,
             color=S.TEXT, weight="bold")
    if subtitle:
        fig.text(0.25 / w, 1 - 0.55 / h, subtitle, ha="left", va="top", fontsize=FONT - 0.5,
                 color=S.MUTED_TEXT)


def footer(fig: Figure, text: str) -> None:
    w, h = fig.get_size_inches()
    fig.text(0.25 / w, 0.12 / h, text, ha="left", va="bottom", fontsize=FONT - 1.5,
             color=S.MUTED_TEXT)


def short(text: str, n: int = SHORT_LABEL) -> str:
    text = str(text)
    return text if len(text) <= n else text[: n - 1] + "…"


def log_limits(mags: np.ndarray) -> tuple[float, float]:
    lo = 10.0 ** math.floor(math.log10(float(np.min(mags))))
    hi = 10.0 ** math.ceil(math.log10(float(np.max(mags))) + 1e-9)
    if hi <= lo * 10:
        hi = lo * 10
    return lo, hi


def log_ticks(ax, axis: str = "x") -> None:
    a = ax.xaxis if axis == "x" else ax.yaxis
    a.set_major_locator(LogLocator(base=10.0, numticks=12))
    a.set_minor_locator(LogLocator(base=10.0, subs=np.arange(2, 10) * 0.1, numticks=12))
    a.set_minor_formatter(NullFormatter())


def text_width_in(text: str, size: float = FONT - 1) -> float:
    return len(text) * 0.58 * size / 72


def log_spaced(v: np.ndarray) -> bool:
    v = np.sort(np.asarray(v, dtype=float))
    if v.size < 3 or np.any(v <= 0) or v[-1] / v[0] < 20:
        return False
    d = np.diff(np.log(v))
    return bool(np.all(d > 0) and np.std(d) < 0.05 * np.mean(d))


def edges(v: np.ndarray, log: bool) -> np.ndarray:
    v = np.asarray(v, dtype=float)
    if v.size == 1:
        return np.array([v[0] / 1.5, v[0] * 1.5]) if log else np.array([v[0] - 0.5, v[0] + 0.5]) \
            if v[0] == 0 else (np.array([v[0] * 0.9, v[0] * 1.1]) if v[0] > 0 else
                               np.array([v[0] * 1.1, v[0] * 0.9]))
    w = np.log(v) if log else v
    mid = (w[1:] + w[:-1]) / 2
    e = np.concatenate([[w[0] - (mid[0] - w[0])], mid, [w[-1] + (w[-1] - mid[-1])]])
    return np.exp(e) if log else e
