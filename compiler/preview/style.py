"""Colours, line styles and step labels of the preview figure.

A calm palette of dotseq's own: muted blue-greens and clays on white, grey
for idle time, hatching for time the compiler inserted (padding, phase waits, z corrections).
"""

from __future__ import annotations

import math

from ..steps import KINDS

# Step boxes of the timeline strip, by StepRecord.kind: (face colour, hatch),
# from the table of step kinds (compiler.steps.KINDS, where each kind's
# colours are written).
STEP_STYLE: dict[str, tuple[str, str]] = {k: (v.face, v.hatch) for k, v in KINDS.items()}
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

EXCHANGE_NAMES = {k: v.name for k, v in KINDS.items() if v.ideal == "exchange"}


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
    k = KINDS.get(kind)
    if k is None:
        return [kind]
    return LABELS[k.label](k, qubits, params or {})


def _rotation_labels(k, qubits, p: dict) -> list[str]:
    # the rotation axis' azimuth; synthesis calls it axis_phase_rad
    axis = _axis(float(p.get("axis_phase_rad", p.get("phase_rad", 0.0))))
    if "angle_rad" in p:
        ang = _degrees(float(p["angle_rad"]))
        return [f"{axis} {ang}", f"{axis}{ang}"]
    return [f"rot {axis}", axis]


def _frame_labels(k, qubits, p: dict) -> list[str]:
    ang = p.get("angle_rad", p.get("frame_rad"))
    return [f"{k.name} {_degrees(float(ang))}", *k.labels] if ang is not None else list(k.labels)


def _exchange_labels(k, qubits, p: dict) -> list[str]:
    if len(qubits) == 2:
        name = k.name
        if k.keyword == "cphase" and "conditional_phase_rad" in p:
            name = f"{name}({_degrees(float(p['conditional_phase_rad']))})"
        return [f"{name} {qubits[0]}–{qubits[1]}", *k.labels]
    return list(k.labels)


def _trigger_labels(k, qubits, p: dict) -> list[str]:
    label = str(p.get("label", "")).strip()
    return ([f"{k.name} {label}"] if label else []) + list(k.labels)


def _point_labels(k, qubits, p: dict) -> list[str]:
    name = str(p.get("point", "")).strip()
    return ([f"{k.name} {name}", f"→ {name}"] if name else []) + list(k.labels)


# How each kind's label is made, by its ``label`` in compiler.steps.KINDS.
LABELS = {
    "rotation": _rotation_labels,
    "frame": _frame_labels,
    "exchange": _exchange_labels,
    "trigger": _trigger_labels,
    "point": _point_labels,
    "fixed": lambda k, qubits, p: list(k.labels),
}


def kind_name(kind: str) -> str:
    """Short name of a step kind, for merged boxes of a dense timeline."""
    k = KINDS.get(kind)
    return k.name if k is not None else kind


def dense_colour(kind: str) -> str:
    """Fill colour of a step kind in a dense (merged) timeline lane (no
    hatching there: inserted time gets a grey of its own)."""
    k = KINDS.get(kind)
    return k.dense_colour if k is not None else OTHER_STEP[0]
