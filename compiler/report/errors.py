"""The error the report stage raises: :class:`ReportError`.

Every problem names the file or folder it is about (as the span's file, with
line 0, so it prints as ``PATH: error: ...``) and says how to fix it.
"""

from __future__ import annotations

from pathlib import Path

from ..errors import Problem, Span, DotseqError


class ReportError(DotseqError):
    """A simulation report cannot be written or read: an unusable output
    folder, an IO failure, or a ``results.json`` that is not a dotseq report."""

    stage = "report"


def fail(path: str | Path, message: str, hint: str = "") -> ReportError:
    """A :class:`ReportError` with one problem about ``path`` (to be raised).

    Parameters
    ----------
    path : str or Path
        The file or folder the problem is about.
    message : str
        What is wrong.
    hint : str
        How to fix it.

    Returns
    -------
    ReportError
    """
    return ReportError(Problem(message, Span(str(path), 0, 0, 0, 0), hint))
