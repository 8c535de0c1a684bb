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
import shutil
from pathlib import Path

from ..export import atomic as _atomic
from ..export.files import fsync_dir
from ..simulate.types import SimulationResult
from . import figures as _figures
from .data import RESULTS_NAME, FORMAT_NAME, is_report, results_json
from .errors import ReportError, fail
from .fmt import best_index, detail_index
from .text import render_markdown

REPORT_NAME = "report.md"
KNOWN_FILES = frozenset((REPORT_NAME, RESULTS_NAME) + _figures.FILES)

ABSENT, EMPTY, REPORT = "absent", "empty", "report"
_PUBLISH_STATE = {ABSENT: _atomic.ABSENT, EMPTY: _atomic.EMPTY, REPORT: _atomic.BUNDLE}


def resolve_target(out_dir) -> Path:
    """The absolute report folder; checks that its parent folder exists.

    Raises
    ------
    ReportError
        Not a path, empty, the root of a file system, or a parent folder
        that does not exist or is not a folder.
    """
    return _atomic.resolve_output_folder(out_dir, "report", fail)


def target_state(target: Path, overwrite: bool) -> str:
    """What is at the target now: ``"absent"``, ``"empty"`` (an empty
    folder) or ``"report"`` (a dotseq report holding only report files).

    Raises
    ------
    ReportError
        The target is a file, a symbolic link, a folder that is not a dotseq
        report, a report with other files in it, or a report while
        ``overwrite`` is False.  Nothing is touched.
    """
    if not os.path.lexists(target):
        return ABSENT
    if target.is_symlink():
        raise fail(target, "the output path is a symbolic link; dotseq does not replace links",
                   "give the real folder, or choose another -o folder")
    if not target.is_dir():
        raise fail(target, "the output path exists and is a file, not a report folder; "
                           "nothing was written", "choose another -o folder")
    try:
        names = sorted(e.name for e in os.scandir(target))
    except OSError as e:
        raise fail(target, f"cannot read the output folder: {e.strerror or e}",
                   "check its permissions or choose another -o folder") from None
    if not names:
        return EMPTY
    if not is_report(target):
        raise fail(target, f"the output folder exists and is not a dotseq report (no "
                           f"{RESULTS_NAME} with format '{FORMAT_NAME}'); nothing was written "
                           "and nothing was deleted",
                   "choose another -o folder (a new or empty one)")
    foreign = [n for n in names if n not in KNOWN_FILES]
    if foreign:
        shown = ", ".join(foreign[:3]) + (f" and {len(foreign) - 3} more" if len(foreign) > 3
                                          else "")
        raise fail(target, f"the output folder holds a dotseq report and other files ({shown}); "
                           "replacing it would delete them, so nothing was written",
                   "move those files out, or choose another -o folder")
    if not overwrite:
        raise fail(target, "the output folder already holds a dotseq report",
                   "allow overwriting, or choose another -o folder")
    return REPORT


def tidy(target: Path) -> list[str]:
    """Tidy what interrupted report writes to ``target`` left beside it, for
    processes that no longer run: unfinished ``.partial-`` folders are
    removed; an ``.old-`` report is renamed back when the target is missing,
    removed when the target holds a report again; anything else is left.

    Returns
    -------
    list of str
        One sentence per action.
    """
    done: list[str] = []
    stale = [(p, w, pid) for p, w, pid in _atomic.leftovers(target)
             if pid != os.getpid() and not _atomic.pid_alive(pid)]
    for p, what, pid in stale:
        if what == _atomic.PARTIAL:
            shutil.rmtree(p, ignore_errors=True)
            done.append(f"removed {p}, an unfinished write (process {pid} no longer runs)")
    for p, what, _ in stale:
        if what != _atomic.OLD or not is_report(p):
            continue
        if not os.path.lexists(target):
            try:
                os.rename(p, target)
                done.append(f"restored the previous report {target} from {p}")
            except OSError:
                pass
        elif is_report(target):
            shutil.rmtree(p, ignore_errors=True)
            done.append(f"removed {p}, an old copy of the report")
    return done


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
        and the figures (``budget.png``, ``steps.png``, ``populations.png``,
        ``sweep.png``, each when there is something to draw; see
        ``docs/report.md``).

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
    state = target_state(target, overwrite)
    try:
        tmp = _atomic.aside_name(target, _atomic.PARTIAL)
        os.mkdir(tmp)
    except OSError as e:
        raise fail(target, f"cannot create a folder in {target.parent}: {e.strerror or e}",
                   "check that the folder is writable, or choose another -o folder") from None
    try:
        _fill(tmp, result)
        fsync_dir(tmp)
        _atomic.publish(tmp, target, _PUBLISH_STATE[state])
    except OSError as e:
        _atomic.remove(tmp)
        raise fail(target, f"cannot write the report: {e.strerror or e}",
                   "check free space and permissions, or choose another -o folder") from None
    except BaseException:
        _atomic.remove(tmp)
        raise
    return target


__all__ = ["write_report", "resolve_target", "target_state", "tidy", "ReportError",
           "REPORT_NAME", "KNOWN_FILES"]
