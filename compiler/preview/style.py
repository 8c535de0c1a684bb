"""Colours, line styles and step labels of the preview figure.

A calm palette of dotseq's own: muted blue-greens and clays on white, grey
for idle time, hatching for time the compiler inserted (padding, phase waits, z corrections).
"""

from __future__ import annotations

import math

# Step boxes of the timeline strip, by StepRecord.kind: (face colour, hatch).
STEP_STYLE: dict[str, tuple[str, str]] = {
    "rot": ("#7fb3a6", ""),          # sage teal
    "zrot": ("#9d8fc4", ""),         # soft lavender (zero-length mark)
    "sqrtswap": ("#d9a47a", ""),     # clay
    "sqrtswap_inv": ("#c99068", ""),
    "swap": ("#b97c55", ""),
    "wait": ("#e4e6ea", ""),         # pale grey
    "read": ("#8fa9d6", ""),         # periwinkle
    "trigger": ("#c8bf7a", ""),      # straw
    "phasewait": ("#ffffff", "///"),  # inserted by the compiler: hatched
    "zcorrect": ("#e9d8c8", "\\\\"),  # inserted 2π-burst phase correction: pale clay, back-hatched
    "pad": ("#ffffff", "xx"),
}
OTHER_STEP = ("#cfcfcf", "")
STEP_EDGE = "#5b6470"
HATCH_EDGE = "#8a8f99"
HIGHLIGHT_EDGE = "#20262e"
HIGHLIGHT_SPAN = "#f8f1e0"           # shading of a zoomed step across the traces

# Traces
I_COLOUR = "#2e5e7e"                 # deep slate blue, solid
Q_COLOUR = "#c0703f"                 # burnt sienna, dashed
GATE_COLOURS = ("#3f7d5c", "#7a5a8c", "#8c6d3f", "#3f6f8c", "#8c3f5a", "#5a7a3f")
MARKER_COLOUR = "#5d5a8a"
ZERO_LINE = "#b8bcc4"
GRID = "#eceef1"
TEXT = "#2a2f36"
MUTED_TEXT = "#6b717b"
CAUTION = "#8a5300"

# Spectrum
SPECTRUM_COLOUR = "#2e5e7e"
LARMOR_COLOURS = ("#a23b3b", "#3b6ea2", "#3b8a5a", "#8a6a1f", "#6a3b8a", "#1f7a7a")

CAUTION_TEXT = ("Check voltages and microwave power against your sample's and "
                "lab's limits before loading.")

EXCHANGE_NAMES = {"sqrtswap": "√SWAP", "sqrtswap_inv": "√SWAP⁻¹", "swap": "SWAP"}


def step_style(kind: str) -> tuple[str, str]:
    """(face colour, hatch pattern) of a timeline box for a step kind."""
    return STEP_STYLE.get(kind, OTHER_STEP)


def _degrees(rad: float) -> str:
    d = math.degrees(rad)
    r = round(d, 1)
    if abs(r - round(r)) < 1e-9:
        return f"{int(round(r))}°"
    return f"{r:g}°"


def _axis(phase: float) -> str:
    d = math.degrees(phase) % 360.0
    for ref, name in ((0.0, "x"), (90.0, "y"), (180.0, "−x"), (270.0, "−y"), (360.0, "x")):
        if abs(d - ref) < 0.05:
            return name
    return f"φ{_degrees(phase)}"


def step_labels(kind: str, qubits: tuple[str, ...], params: dict) -> list[str]:
    """Labels for a timeline box, longest first; the figure uses the first
    one that fits the box.

    Parameters
    ----------
    kind : str
        ``StepRecord.kind``.
    qubits : tuple of str
    params : dict
        ``StepRecord.params`` (SI): ``angle_rad`` (rad) and ``axis_phase_rad``
        (rad, 0 = x; ``phase_rad`` is read when it is missing) for rotations,
        ``angle_rad`` or ``frame_rad`` for frame updates, ``label`` for
        triggers; missing keys only shorten the label.

    Returns
    -------
    list of str
        e.g. ``["x 90°", "x90"]``, ``["√SWAP A–B", "√SWAP"]``, ``["pad"]``.
    """
    p = params or {}
    if kind == "rot":
        # the rotation axis' azimuth; synthesis calls it axis_phase_rad
        axis = _axis(float(p.get("axis_phase_rad", p.get("phase_rad", 0.0))))
        if "angle_rad" in p:
            ang = _degrees(float(p["angle_rad"]))
            return [f"{axis} {ang}", f"{axis}{ang}"]
        return [f"rot {axis}", axis]
    if kind == "zrot":
        ang = p.get("angle_rad", p.get("frame_rad"))
        return [f"z {_degrees(float(ang))}", "z"] if ang is not None else ["z"]
    if kind in EXCHANGE_NAMES:
        name = EXCHANGE_NAMES[kind]
        if len(qubits) == 2:
            return [f"{name} {qubits[0]}–{qubits[1]}", name, "ex"]
        return [name, "ex"]
    if kind == "pad":
        return ["padding (end)", "pad", "p"]
    if kind == "phasewait":
        return ["phase wait (inserted)", "phasewait", "pw"]
    if kind == "zcorrect":
        return ["z-correct (inserted)", "zcorrect", "zc"]
    if kind == "trigger":
        label = str(p.get("label", "")).strip()
        return ([f"trigger {label}"] if label else []) + ["trigger", "trig", "t"]
    if kind == "read":
        return ["read", "r"]
    if kind == "wait":
        return ["wait", "w"]
    return [kind]


def kind_name(kind: str) -> str:
    """Short name of a step kind, for merged boxes of a dense timeline."""
    return EXCHANGE_NAMES.get(kind, {"zrot": "z", "phasewait": "phase wait", "zcorrect": "z-corr",
                                    "pad": "pad"}.get(kind, kind))


# Dense timelines (steps narrower than a few pixels) are drawn as shares per
# pixel column, without hatching: padding then gets a grey of its own.
_DENSE = {"phasewait": "#b6bac3", "zcorrect": "#d9bfa6", "pad": "#d3d6dc"}


def dense_colour(kind: str) -> str:
    """Fill colour of a step kind in a dense (merged) timeline lane."""
    return _DENSE.get(kind, step_style(kind)[0])
