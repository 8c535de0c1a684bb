"""Putting a finished output folder (bundle, report) or file (preview,
sweep table and figure) in place without ever showing a half written one at
the target path: the one writer every output goes through
(:func:`output_state`, :func:`replace_folder`, :func:`write_file`).

The writer fills a temporary folder beside the target (same parent, so the
move is a rename on one file system), named ``.NAME.partial-PID-TOKEN``.
Then:

* target absent: ``rename(temp, target)``;
* target present (a dotseq bundle, or an empty folder) and overwriting
  allowed: ``rename(target, .NAME.old-PID-TOKEN)``, ``rename(temp, target)``,
  then delete the old folder.

A process killed while writing leaves only its ``.partial-`` folder; one
killed between the two renames leaves the previous bundle complete under its
``.old-`` name and nothing at the target.  :func:`recover` tidies both on
the next export (only for processes that no longer run).
"""

from __future__ import annotations

import json
import os
import secrets
import shutil
from pathlib import Path

from .errors import fail
from .files import fsync_dir
from .manifest import FORMAT_NAME, MANIFEST_NAME

PARTIAL = "partial"
OLD = "old"

ABSENT, EMPTY, BUNDLE = "absent", "empty", "bundle"


def resolve_output_folder(out_dir, what: str, fail_with) -> Path:
    """The absolute folder to write ``what`` ("bundle", "report") into;
    checks that its parent folder exists.  ``fail_with(path, message, hint)``
    builds the caller's own error."""
    try:
        raw = os.fspath(out_dir)
    except TypeError:
        raise fail_with("<output folder>", f"output folder {out_dir!r} is not a path",
                        "give the folder to write as a string or pathlib.Path") from None
    if isinstance(raw, bytes):
        raw = os.fsdecode(raw)
    if not raw.strip():
        raise fail_with("<output folder>", "no output folder given", "give a folder name with -o")
    target = Path(os.path.abspath(raw))
    if target.parent == target:
        raise fail_with(target, f"cannot write a {what} to the root of a file system",
                        "choose a folder below it with -o")
    parent = target.parent
    if not parent.exists():
        raise fail_with(target, f"the folder that should hold the {what}, {parent}, does not exist",
                        f"create it first (mkdir -p {parent}) or choose another -o folder")
    if not parent.is_dir():
        raise fail_with(target, f"{parent} is not a folder", "choose another -o folder")
    return target


def resolve_target(out_dir) -> Path:
    """The absolute bundle folder; checks that its parent folder exists.

    Raises
    ------
    BundleError
        Empty path, a parent that does not exist or is not a folder.
    """
    return resolve_output_folder(out_dir, "bundle", fail)


def read_format(folder: Path) -> str | None:
    """The ``format`` recorded in ``folder/manifest.json``, or None when
    there is no readable manifest."""
    try:
        with open(folder / MANIFEST_NAME, encoding="utf-8") as f:
            m = json.load(f)
    except (OSError, ValueError):
        return None
    return m.get("format") if isinstance(m, dict) and isinstance(m.get("format"), str) else None


def is_bundle(folder: Path) -> bool:
    """Whether ``folder`` is a real folder holding a dotseq manifest."""
    return (folder.is_dir() and not folder.is_symlink()
            and read_format(folder) == FORMAT_NAME)


def _refuse_link_or_file(target: Path, fail_with, expected: str) -> None:
    """Refuse an output path that is a symbolic link or a file (``expected``
    says what a folder there should be, e.g. "a dotseq bundle")."""
    if target.is_symlink():
        raise fail_with(target, "the output path is a symbolic link; dotseq does not replace "
                                "links", "give the real folder, or choose another -o folder")
    if not target.is_dir():
        raise fail_with(target, f"the output path exists and is a file, not {expected}; "
                                "nothing was written", "choose another -o folder")


def refuse_unusable_place(p: Path, fail_with, holds: str) -> None:
    """The checks of a resumable output folder (the sweep's and rb's
    stores) before anything is written: not a link, not a file, and its
    parent exists (``holds`` names what the folder holds: "the sweep")."""
    if p.is_symlink():
        raise fail_with(p, "the output path is a symbolic link; dotseq does not write through "
                           "links", "give the real folder, or choose another -o folder")
    if os.path.lexists(p) and not p.is_dir():
        raise fail_with(p, "the output path exists and is a file, not a folder; nothing was "
                           "written", "choose another -o folder")
    if not p.parent.is_dir():
        raise fail_with(p, f"the folder that should hold {holds}, {p.parent}, does not exist",
                        f"create it first (mkdir -p {p.parent}) or choose another -o folder")


def output_state(target: Path, overwrite: bool, *, what: str, is_ours, ours: str, fail_with,
                 known: frozenset[str] | None = None) -> str:
    """The one check of an output folder before a writer replaces it (the
    bundle, the report; ``ABSENT``, ``EMPTY`` or ``BUNDLE`` = an earlier
    output of this writer).

    Refused, with an error built by ``fail_with(path, message, hint)``: a
    symbolic link, a file, an unreadable folder, a folder ``is_ours`` does
    not recognise (``ours`` says what it looks for), one of ours holding
    entries not in ``known`` (when given: replacing would delete them), and
    one of ours while ``overwrite`` is False.  Nothing is touched.
    """
    if not os.path.lexists(target):
        return ABSENT
    _refuse_link_or_file(target, fail_with, f"a dotseq {what}")
    try:
        names = sorted(e.name for e in os.scandir(target))
    except OSError as e:
        raise fail_with(target, f"cannot read the output folder: {e.strerror or e}",
                        "check its permissions or choose another -o folder") from None
    if not names:
        return EMPTY
    if not is_ours(target):
        raise fail_with(target, f"the output folder exists and is not a dotseq {what} (no "
                                f"{ours}); nothing was written and nothing was deleted",
                        "choose another -o folder (a new or empty one)")
    foreign = [n for n in names if known is not None and n not in known]
    if foreign:
        shown = ", ".join(foreign[:3]) + (f" and {len(foreign) - 3} more" if len(foreign) > 3
                                          else "")
        raise fail_with(target, f"the output folder holds a dotseq {what} and other files "
                                f"({shown}); replacing it would delete them, so nothing was "
                                "written", "move those files out, or choose another -o folder")
    if not overwrite:
        raise fail_with(target, f"the output folder already holds a dotseq {what}",
                        "allow overwriting, or choose another -o folder")
    return BUNDLE


def target_state(target: Path, overwrite: bool) -> str:
    """What is at the bundle target now: ``"absent"``, ``"empty"`` (an empty
    folder) or ``"bundle"`` (:func:`output_state` for bundles).

    Raises
    ------
    BundleError
        The target is a file, a symbolic link, a folder that is not a dotseq
        bundle, or a bundle while ``overwrite`` is False.  Nothing is touched.
    """
    return output_state(target, overwrite, what="bundle", is_ours=is_bundle,
                        ours=f"{MANIFEST_NAME} with format '{FORMAT_NAME}'", fail_with=fail)


def replace_folder(target: Path, fill, state, fail_with, what: str) -> Path:
    """The one way dotseq puts a finished output folder in place: ``fill(tmp)``
    writes everything into a fresh temporary sibling of ``target``
    (:func:`make_temp`); its folder entries are flushed to disk; ``state()``
    (the writer's :func:`output_state`) is asked again, since the target may
    have changed meanwhile, and :func:`publish` moves the folder in.

    On an OSError the temporary folder is removed and the error becomes
    ``fail_with(target, message, hint)`` (the target is left as it was); on
    any other exception, including KeyboardInterrupt, it is removed and the
    exception re-raised.
    """
    tmp = make_temp(target, fail_with)
    try:
        fill(tmp)
        for root, dirs, _ in os.walk(tmp):
            for d in dirs:
                fsync_dir(Path(root) / d)
        fsync_dir(tmp)
        publish(tmp, target, state())
    except OSError as e:
        remove(tmp)
        where = getattr(e, "filename", None) or tmp
        raise fail_with(target, f"could not write the {what} ({e.strerror or e}; at {where}); "
                                "nothing was changed at the output folder",
                        "check free disk space and permissions, or choose another -o folder") \
            from None
    except BaseException:
        remove(tmp)
        raise
    return target


def write_file(path: Path, write, mode: int | None = None) -> Path:
    """The one way dotseq writes a single output file: ``write(f)`` fills a
    hidden temporary file beside ``path`` (binary), which is flushed to disk
    and renamed onto ``path``; a half-written file never sits at ``path``.
    The file gets ``mode``, else the mode of the file it replaces, else
    rw-r--r--.  OSError propagates after the temporary file is removed."""
    tmp = path.parent / f".{path.name}.{PARTIAL}-{os.getpid()}-{secrets.token_hex(4)}"
    try:
        with open(tmp, "xb") as f:
            write(f)
            f.flush()
            os.fsync(f.fileno())
        if mode is None:
            mode = path.stat().st_mode & 0o777 if path.is_file() else 0o644
        os.chmod(tmp, mode)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
    fsync_dir(path.parent)
    return path


def aside_name(target: Path, what: str, pid: int | None = None) -> Path:
    """A fresh name beside the target: ``.NAME.partial-PID-TOKEN`` or
    ``.NAME.old-PID-TOKEN``."""
    pid = os.getpid() if pid is None else pid
    return target.parent / f".{target.name}.{what}-{pid}-{secrets.token_hex(4)}"


def parse_aside(target: Path, entry: str) -> tuple[str, int] | None:
    """``(what, pid)`` when ``entry`` is a temporary or old folder of
    ``target``, else None."""
    for what in (PARTIAL, OLD):
        prefix = f".{target.name}.{what}-"
        if entry.startswith(prefix):
            pid, _, token = entry[len(prefix):].partition("-")
            if pid.isdigit() and token:
                return what, int(pid)
    return None


def pid_alive(pid: int) -> bool:
    """Whether a process with this id runs on this machine.  Unknown counts
    as alive, so nothing of a running writer is ever removed (on Windows the
    check is not made at all)."""
    if os.name == "nt" or pid <= 0:
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True
    return True


def leftovers(target: Path) -> list[tuple[Path, str, int]]:
    """Temporary (``partial``) and old folders beside ``target``:
    ``(path, what, pid)``, sorted by name."""
    out = []
    try:
        entries = sorted(os.scandir(target.parent), key=lambda e: e.name)
    except OSError:
        return out
    for e in entries:
        p = parse_aside(target, e.name)
        if p is not None and e.is_dir(follow_symlinks=False):
            out.append((Path(e.path), p[0], p[1]))
    return out


def recover(target: Path, is_complete=None) -> list[str]:
    """Tidy what interrupted exports to ``target`` left behind, for
    processes that no longer run.

    * an unfinished ``.partial-`` folder is removed;
    * an ``.old-`` folder holding a bundle is renamed back to the target when
      the target is missing (the export died between its two renames), and
      removed when the target holds a bundle again;
    * anything else is left alone and reported.

    ``is_complete(folder)`` says whether a folder is a finished one of the
    writer's kind (default :func:`is_bundle`).

    Returns
    -------
    list of str
        One sentence per action, for the caller to show.
    """
    complete = is_complete or is_bundle
    done: list[str] = []
    stale = [(p, w, pid) for p, w, pid in leftovers(target)
             if pid != os.getpid() and not pid_alive(pid)]
    olds = sorted((p for p, w, _ in stale if w == OLD), key=_newest_first)
    for p, what, pid in stale:
        if what == PARTIAL:
            shutil.rmtree(p, ignore_errors=True)
            done.append(f"removed {p}, an unfinished export (process {pid} no longer runs)")
    for p in olds:
        if not os.path.lexists(target) and complete(p):
            try:
                os.rename(p, target)
            except OSError as e:
                done.append(f"could not restore {p} to {target}: {e.strerror or e}")
                continue
            fsync_dir(target.parent)
            done.append(f"restored the previous bundle {target} from {p} (an export was "
                        "interrupted between its two renames)")
        elif complete(p) and complete(target):
            shutil.rmtree(p, ignore_errors=True)
            done.append(f"removed {p}, an old copy of the bundle left by an interrupted export")
        else:
            done.append(f"left {p} in place: it is not a complete bundle; look at it and "
                        "delete it yourself")
    return done


def _newest_first(p: Path) -> tuple:
    try:
        return (-p.stat().st_mtime_ns, p.name)
    except OSError:
        return (0, p.name)


def make_temp(target: Path, fail_with=fail) -> Path:
    """Create the temporary folder beside ``target`` (mode from the umask).

    Raises
    ------
    BundleError (or what ``fail_with`` builds)
        The parent folder is not writable.
    """
    for _ in range(100):
        tmp = aside_name(target, PARTIAL)
        try:
            os.mkdir(tmp)
            return tmp
        except FileExistsError:
            continue
        except OSError as e:
            raise fail_with(target, f"cannot create a folder in {target.parent}: "
                                    f"{e.strerror or e}",
                            "check that the folder is writable, or choose another -o folder") \
                from None
    raise fail_with(target, f"cannot find a free temporary name in {target.parent}", "")


def publish(tmp: Path, target: Path, state: str) -> None:
    """Move the finished folder ``tmp`` to ``target`` (see module notes).

    On any failure between the two renames the old folder is renamed back
    before the error propagates.  A leftover old folder that cannot be
    deleted stays beside the target and is removed by the next
    :func:`recover` once this process has ended.
    """
    parent = target.parent
    if state == ABSENT:
        os.rename(tmp, target)
        fsync_dir(parent)
        return
    aside = aside_name(target, OLD)
    os.rename(target, aside)
    try:
        os.rename(tmp, target)
    except BaseException:
        os.rename(aside, target)
        raise
    fsync_dir(parent)
    if state == EMPTY:
        try:
            os.rmdir(aside)
        except OSError:
            pass
    else:
        shutil.rmtree(aside, ignore_errors=True)


def remove(tmp: Path) -> None:
    """Delete the temporary folder (if it still exists)."""
    if os.path.lexists(tmp):
        shutil.rmtree(tmp, ignore_errors=True)


# ------------------------------------------------------------------ whole folders
# A folder of several parts (``dotseq run``: a bundle, a preview and a
# report) is written as one unit by the same two renames: every part goes
# into one temporary sibling folder together with a marker file listing what
# was written, and the temporary folder replaces the target.  The marker also
# tells the tool's own earlier output from a user's files.

SAFE_TOP_FILE_BYTES = 64 << 20     # top-level files larger than this are listed, not hashed


def _sha256_file(path: Path) -> str:
    import hashlib
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def read_marker(folder: Path, marker: str, fmt: str) -> dict | None:
    """The marker ``folder/marker`` of format ``fmt`` as a dict, or None."""
    try:
        with open(folder / marker, encoding="utf-8") as f:
            m = json.load(f)
    except (OSError, ValueError, RecursionError):
        return None
    if not isinstance(m, dict) or m.get("format") != fmt or not isinstance(m.get("entries"), dict):
        return None
    return m


def is_marked(folder: Path, marker: str, fmt: str) -> bool:
    """Whether ``folder`` is a real folder with a readable marker of ``fmt``."""
    return folder.is_dir() and not folder.is_symlink() and \
        read_marker(folder, marker, fmt) is not None


def unknown_entries(folder: Path, marker: str, fmt: str) -> list[str]:
    """Entries of ``folder`` the writer did not put there: every entry when
    there is no marker; else those the marker does not list, and top-level
    files whose content changed since (checked by SHA-256)."""
    names = sorted(os.listdir(folder))
    m = read_marker(folder, marker, fmt)
    if m is None:
        return names
    entries = m["entries"]
    out = []
    for n in names:
        if n == marker:
            continue
        rec = entries.get(n)
        p = folder / n
        if not isinstance(rec, dict):
            out.append(n)
        elif rec.get("kind") == "file":
            try:
                same = (p.is_file() and not p.is_symlink()
                        and p.stat().st_size == rec.get("size")
                        and (rec.get("sha256") is None or _sha256_file(p) == rec.get("sha256")))
            except OSError:
                same = False
            if not same:
                out.append(f"{n} (changed since dotseq wrote it)")
        elif not (p.is_dir() and not p.is_symlink()):
            out.append(n)
    return out


def folder_state(target: Path, marker: str, fmt: str, allow_unknown: bool, fail_with,
                 option: str) -> str:
    """``"absent"``, ``"empty"`` or ``"bundle"`` (an earlier output of this
    writer, to be replaced) for a whole-folder target.

    Raises (built by ``fail_with(path, message, hint)``) when the target is a
    link or a file, or holds entries the writer did not write and
    ``allow_unknown`` is False; the message names them and ``option``.
    """
    if not os.path.lexists(target):
        return ABSENT
    _refuse_link_or_file(target, fail_with, "a folder")
    try:
        if not any(os.scandir(target)):
            return EMPTY
        unknown = unknown_entries(target, marker, fmt)
    except OSError as e:
        raise fail_with(target, f"cannot read the output folder: {e.strerror or e}",
                        "check its permissions or choose another -o folder") from None
    if unknown and not allow_unknown:
        shown = ", ".join(unknown[:3]) + (f" and {len(unknown) - 3} more"
                                          if len(unknown) > 3 else "")
        first = target / unknown[0].split(" (")[0]
        raise fail_with(first, f"the output folder {target} holds files dotseq did not write "
                        f"({shown}); replacing the folder would delete them, so nothing was "
                        "written and nothing was deleted",
                        f"move them out, choose another -o folder, or give {option} to replace "
                        "the whole folder (deleting them)")
    return BUNDLE


def write_folder(out_dir, fill, *, marker: str, fmt: str, what: str, fail_with,
                 allow_unknown: bool = False, option: str = "", info: dict | None = None) -> Path:
    """Write a whole output folder as one unit: the old content or all of
    the new, never a mix.

    ``fill(tmp)`` writes every part into the temporary folder ``tmp`` (a
    sibling of the target) and may return a dict of extra JSON values for
    the marker; then the marker ``tmp/marker`` (``{"format": fmt, "entries":
    {...}, ...}``: each top-level entry, and size and SHA-256 of each top-level
    file) is written and ``tmp`` replaces the target (:func:`publish`).
    Leftovers of killed writers are tidied first (:func:`recover`).

    The target must be absent, empty, or an earlier folder of this writer
    holding nothing else (``allow_unknown`` lifts this; ``option`` is named
    in the refusal).  Errors are built with ``fail_with(path, message,
    hint)``; an OSError while writing becomes such an error and leaves the
    target as it was; the temporary folder is removed on any failure,
    including KeyboardInterrupt (re-raised).
    """
    target = resolve_output_folder(out_dir, what, fail_with)
    complete = lambda p: is_marked(p, marker, fmt)  # noqa: E731
    try:
        recover(target, complete)
    except OSError:
        pass
    folder_state(target, marker, fmt, allow_unknown, fail_with, option)

    def fill_and_mark(tmp: Path) -> None:
        extra = fill(tmp) or {}
        entries = {}
        for e in sorted(os.scandir(tmp), key=lambda e: e.name):
            if e.is_file(follow_symlinks=False):
                size = e.stat(follow_symlinks=False).st_size
                entries[e.name] = {"kind": "file", "size": size,
                                   "sha256": _sha256_file(Path(e.path))
                                   if size <= SAFE_TOP_FILE_BYTES else None}
            else:
                entries[e.name] = {"kind": "folder"}
        body = {"format": fmt, "format_version": 1, "entries": entries, **extra}
        with open(tmp / marker, "x", encoding="utf-8") as f:
            f.write(json.dumps(body, indent=2, sort_keys=True) + "\n")
            f.flush()
            os.fsync(f.fileno())

    return replace_folder(target, fill_and_mark,
                          lambda: folder_state(target, marker, fmt, allow_unknown, fail_with,
                                               option), fail_with, what)


__all__ = ["resolve_target", "target_state", "recover", "make_temp", "publish", "remove",
           "leftovers", "is_bundle", "write_folder", "folder_state", "unknown_entries",
           "is_marked", "read_marker"]
