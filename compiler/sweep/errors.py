"""The error of the sweep stage: an unusable output folder, a state file
that does not match the sweep being resumed, a cluster that cannot be used."""

from __future__ import annotations

from pathlib import Path

from ..errors import Problem, Span, DotseqError


class SweepError(DotseqError):
    """A sweep cannot start, resume or write its results."""

    stage = "sweep"


def fail(path: str | Path | None, message: str, hint: str = "") -> SweepError:
    """A :class:`SweepError` with one problem about ``path`` (to be raised)."""
    span = Span(str(path), 0, 0, 0, 0) if path is not None else None
    return SweepError(Problem(message, span, hint))
