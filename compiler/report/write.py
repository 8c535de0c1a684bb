"""Writing a simulation report folder atomically.

``write_report(result, "out/ramsey")`` fills a temporary folder beside the
target (``.ramsey.partial-PID-TOKEN``, same parent, so the final move is a
rename on one file system) with ``report.md``, ``results.json`` and the
figures, then moves it into place with the helpers of
:mod:`compiler.export.atomic`:

* target absent: one rename;
* target an empty folder or an earlier dotseq report (and ``overwrite``):
  the old folder is renamed aside, the new one renamed in, the old one
  deleted.

A failure while writing removes the temporary folder and leaves the target
as it was.  Anything else at the target (a file, a link, a folder that is
not a dotseq report, a report holding files the report does not write) is
refused before anything is written: nothing of the user's is ever deleted.
"""

from __future__ import annotations

import os
from pathlib import Path

from ..export import atomic
from ..simulate.types import SimulationResult
from ..sweeptable.build import from_result
from ..sweeptable.write import csv_text, json_text
from . import figures as _figures
from .data import RESULTS_NAME, FORMAT_NAME, is_report, results_json
from .errors import ReportError, fail
from .fmt import best_index, detail_index
from .text import render_markdown

REPORT_NAME = "report.md"
SWEEP_CSV, SWEEP_JSON = "sweep.csv", "sweep.json"     # the shared sweep table, for sweeps
KNOWN_FILES = frozenset((REPORT_NAME, RESULTS_NAME, SWEEP_CSV, SWEEP_JSON) + _figures.FILES)

ABSENT, EMPTY, REPORT = "absent", "empty", "report"
_PUBLISH_STATE = {ABSENT: atomic.ABSENT, EMPTY: atomic.EMPTY, REPORT: atomic.BUNDLE}


def resolve_target(out_dir) -> Path:
    """The absolute report folder; checks that its parent folder exists.

    Raises
    ------
    ReportError
        Not a path, empty, the root of a file system, or a parent folder
        that does not exist or is not a folder.
    """
    return atomic.resolve_output_folder(out_dir, "report", fail)


def target_state(target: Path, overwrite: bool) -> str:
    """What is at the target now: ``"absent"``, ``"empty"`` (an empty
    folder) or ``"report"`` (a dotseq report holding only report files);
    the output-folder check every writer shares
    (:func:`compiler.export.atomic.output_state`).

    Raises
    ------
    ReportError
        The target is a file, a symbolic link, a folder that is not a dotseq
        report, a report with other files in it, or a report while
        ``overwrite`` is False.  Nothing is touched.
    """
    state = atomic.output_state(target, overwrite, what="report", is_ours=is_report,
                                ours=f"{RESULTS_NAME} with format '{FORMAT_NAME}'",
                                fail_with=fail, known=KNOWN_FILES)
    return {atomic.ABSENT: ABSENT, atomic.EMPTY: EMPTY, atomic.BUNDLE: REPORT}[state]


def tidy(target: Path) -> list[str]:
    """Tidy what interrupted report writes to ``target`` left beside it, for
    processes that no longer run (:func:`compiler.export.atomic.recover`
    with a report as the finished kind): unfinished ``.partial-`` folders
    are removed; an ``.old-`` report is renamed back when the target is
    missing, removed when the target holds a report again; anything else is
    left.

    Returns
    -------
    list of str
        One sentence per action.
    """
    return atomic.recover(target, is_report)


def _write_text(path: Path, text: str) -> None:
    with open(path, "x", encoding="utf-8", newline="\n") as f:
        f.write(text)
        f.flush()
        os.fsync(f.fileno())


def _fill(tmp: Path, result: SimulationResult) -> tuple[str, ...]:
    """Write every file of the report into ``tmp``; the figure names."""
    written = []
    for name in _figures.planned(result):
        fig = _figures.build(name, result)
        _figures.save_png(fig, tmp / name)
        written.append(name)
        del fig
    table = from_result(result)
    if table is not None:       # the sweep table, written as dotseq sweep writes its own
        _write_text(tmp / SWEEP_JSON, json_text(
            table, figure="sweep.png" if "sweep.png" in written else None,
            observables_figure="observables.png" if "observables.png" in written else None))
        _write_text(tmp / SWEEP_CSV, csv_text(table))
    _write_text(tmp / RESULTS_NAME,
                results_json(result, figures=tuple(written), detail_run=detail_index(result),
                             best_run=best_index(result) if result.axes else None))
    _write_text(tmp / REPORT_NAME,
                render_markdown(result, figures=[(n, _figures.CAPTIONS[n]) for n in written]))
    return tuple(written)


def write_report(result: SimulationResult, out_dir: str | Path, *,
                 overwrite: bool = True) -> Path:
    """Write the report of a simulation into the folder ``out_dir``.

    Parameters
    ----------
    result : SimulationResult
        What the simulator returned.
    out_dir : str or Path
        The report folder.  Its parent must exist; the folder itself must be
        absent, empty, or an earlier dotseq report (replaced when
        ``overwrite``).
    overwrite : bool
        Replace an earlier report at ``out_dir``.

    Returns
    -------
    Path
        The absolute report folder, holding ``report.md``, ``results.json``
        and the figures (``observables.png``, ``budget.png``, ``steps.png``,
        ``populations.png``, ``sweep.png``, ``spectra.png``, each when there
        is something to draw), and for a sequence with its own sweep the
        shared sweep table ``sweep.csv`` and ``sweep.json``; see
        ``docs/report.md``.

    Raises
    ------
    ReportError
        Unusable output folder (the message says why and what to do), or
        an IO failure while writing; the target is then left as it was.
    TypeError
        ``result`` is not a :class:`SimulationResult`.
    """
    if not isinstance(result, SimulationResult):
        raise TypeError(f"write_report needs a SimulationResult, got {type(result).__name__}")
    target = resolve_target(out_dir)
    tidy(target)
    target_state(target, overwrite)
    atomic.replace_folder(target, lambda tmp: _fill(tmp, result),
                          lambda: _PUBLISH_STATE[target_state(target, overwrite)], fail, "report")
    return target


__all__ = ["write_report", "resolve_target", "target_state", "tidy", "ReportError",
           "REPORT_NAME", "KNOWN_FILES"]
