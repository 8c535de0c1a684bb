"""Preview: a figure of what the generators will play, to look at before
loading anything onto hardware.

``preview(wf, "run0.png")`` draws one synthesised run (:class:`Waveforms`):
the step timeline, every output's samples and the spectrum of each I/Q line
with the dots' Larmor frequencies.  See ``docs/preview.md``.
"""

from .figure import build_figure, figure_size, preview, save_atomic
from .window import FORMATS, PreviewError, Window, resolve_window

__all__ = ["preview", "PreviewError", "build_figure", "figure_size", "resolve_window",
           "save_atomic", "Window", "FORMATS"]
