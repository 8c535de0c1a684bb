"""The decay figure of ``dotseq rb``: every sequence's survival, the mean
and spread per length, and the fitted A·p^m + B (interleaved in a second
colour when present)."""

from __future__ import annotations

import io

import numpy as np

from .fit import decay


def decay_png(data: dict) -> bytes:
    """PNG bytes of the decay figure from the contents of ``rb.json``."""
    import matplotlib
    matplotlib.use("Agg")
    from matplotlib.figure import Figure
    fig = Figure(figsize=(7.5, 4.8), dpi=120)
    ax = fig.add_subplot(1, 1, 1)
    blocks = [("reference", data, "tab:blue")]
    if "interleaved" in data:
        blocks.append((f"interleaved '{data['interleaved']['step']}'", data["interleaved"],
                       "tab:red"))
    m_max = max(data["lengths"])
    for label, b, colour in blocks:
        lengths = np.array([int(k) for k in b["survival"]])
        for L in lengths:
            ys = b["survival"][str(L)]
            ax.plot([L] * len(ys), ys, ".", color=colour, alpha=0.25, ms=4)
        means = np.array([b["mean"][str(L)] for L in lengths])
        stds = np.array([b["std"][str(L)] for L in lengths])
        ax.errorbar(lengths, means, yerr=stds, fmt="o", color=colour, capsize=3, ms=5,
                    label=f"{label}: mean ± spread over sequences")
        f = b["fit"]
        mm = np.linspace(0, m_max, 400)
        lo, hi = b["p_interval"]
        ax.plot(mm, decay(mm, f["A"], f["p"], f["B"]), "-", color=colour,
                label=f"fit A·p^m + B: p = {f['p']:.5f} [{lo:.5f}, {hi:.5f}]")
    r = data["error_per_clifford"]
    lo, hi = data["error_per_clifford_interval"]
    title = (f"RB of {' '.join(data['qubits'])} on {data['device']}: r = {r:.2e} "
             f"[{lo:.1e}, {hi:.1e}] per Clifford, {data['error_per_native']:.2e} per native step")
    if "interleaved" in data:
        i = data["interleaved"]
        title += f"\ninterleaved '{i['step']}': r = {i['error']:.2e} " \
                 f"(bounds {i['error_bounds'][0]:.1e} to {i['error_bounds'][1]:.1e})"
    ax.set_title(title, fontsize=8.5)
    ax.set_xlabel("sequence length m (Cliffords)")
    ax.set_ylabel("survival probability")
    ax.axhline(1 / data["dimension"], color="0.6", lw=0.8, ls=":")
    ax.set_ylim(min(0.0, ax.get_ylim()[0]), 1.02)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7.5, loc="upper right")
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()
