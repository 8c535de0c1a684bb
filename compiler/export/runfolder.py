"""The folder ``dotseq run`` writes: ``bundle/``, ``preview.png``,
``report/`` and the marker ``dotseq-run.json``, always as one unit
(:func:`compiler.export.atomic.write_folder`): after a failure or a kill at
any moment the folder holds the earlier run's parts or all of the new ones,
never a mix.  The marker lists what was written (size and SHA-256 of each
top-level file), so a later run recognises its own output and refuses a
folder that holds anything else unless allowed.
"""

from __future__ import annotations

from pathlib import Path

from . import atomic
from .errors import fail

RUN_MARKER = "dotseq-run.json"
RUN_FORMAT = "dotseq-run"
UNKNOWN_OPTION = "--discard-other-files"


def check_run_folder(out_dir, allow_unknown: bool = False) -> Path:
    """Check, before anything is computed or written, that ``out_dir`` may
    receive a run: its parent exists and it is absent, empty or an earlier
    run's folder holding only that run's files.  Returns the absolute path.

    Raises
    ------
    BundleError
        Naming the path (and, for unknown files, the first of them and
        :data:`UNKNOWN_OPTION`).
    """
    target = atomic.resolve_output_folder(out_dir, "run folder", fail)
    atomic.folder_state(target, RUN_MARKER, RUN_FORMAT, allow_unknown, fail, UNKNOWN_OPTION)
    return target


def write_run_folder(out_dir, fill, *, allow_unknown: bool = False) -> Path:
    """Write a run folder as one unit; ``fill(tmp)`` writes the parts into
    the temporary folder ``tmp`` and returns extra marker values (a dict)."""
    return atomic.write_folder(out_dir, fill, marker=RUN_MARKER, fmt=RUN_FORMAT,
                               what="run folder", fail_with=fail, allow_unknown=allow_unknown,
                               option=UNKNOWN_OPTION)


def recover_run_folder(out_dir) -> list[str]:
    """Tidy what killed runs into ``out_dir`` left beside it (see
    :func:`compiler.export.atomic.recover`)."""
    target = atomic.resolve_output_folder(out_dir, "run folder", fail)
    return atomic.recover(target, lambda p: atomic.is_marked(p, RUN_MARKER, RUN_FORMAT))


__all__ = ["RUN_MARKER", "RUN_FORMAT", "UNKNOWN_OPTION", "check_run_folder", "write_run_folder",
           "recover_run_folder"]
