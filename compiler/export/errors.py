"""The error the export stage raises: :class:`BundleError`.

Every problem names the file or folder it is about (as the span's file, with
line 0, so it prints as ``PATH: error: ...``) and says how to fix it.
"""

from __future__ import annotations

from pathlib import Path

from ..errors import Problem, Span, DotseqError


class BundleError(DotseqError):
    """A bundle cannot be written or read: bad waveforms handed to the writer,
    an unusable output folder, an IO failure, or a missing or corrupted file
    in a bundle being read."""

    stage = "export"


def at(path: str | Path, message: str, hint: str = "") -> Problem:
    """A :class:`Problem` about a file or folder (no line or column)."""
    return Problem(message, Span(str(path), 0, 0, 0, 0), hint)


def fail(path: str | Path, message: str, hint: str = "") -> BundleError:
    """A :class:`BundleError` with one problem about ``path`` (to be raised)."""
    return BundleError(at(path, message, hint))
