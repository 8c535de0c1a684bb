"""The output folder of a sweep and its state file.

``OUT/points.jsonl`` is the sweep's memory: a header line recording what
was asked (checksums of the sequence and device files, axes, settings; the
plan's ``key``), then one line per finished point, appended and flushed to
disk as each point arrives.  An interrupted sweep therefore keeps every
finished point, and ``--resume`` reads them back and computes only the
missing ones.  A last line cut short by a crash is dropped on resume.

The tables and the figure (``sweep.csv``, ``sweep.json``, ``sweep.png``) are
written whole into a hidden file beside their name and renamed into place,
so they are never seen half written.  While a sweep runs it holds a lock on
the state file: a second sweep into the same folder is refused.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path

from ..export import atomic
from ..export.atomic import pid_alive, refuse_unusable_place
from ..errors import Problem, Span
from ..simulate.types import Observable
from ..source import Unreadable, check_regular
from .errors import SweepError, fail
from .types import INVALID, OK, PointResult, SweepPlan

STATE_NAME = "points.jsonl"
CSV_NAME, JSON_NAME, PNG_NAME = "sweep.csv", "sweep.json", "sweep.png"
OBSERVABLES_NAME = "observables.png"
KNOWN = frozenset((STATE_NAME, CSV_NAME, JSON_NAME, PNG_NAME, OBSERVABLES_NAME))
STATE_FORMAT = "dotseq-sweep-state"
STATE_VERSION = 2


def dumps(obj) -> str:
    """Compact deterministic JSON (floats with repr, so they read back exactly)."""
    from ..jsontext import jsonable
    return json.dumps(jsonable(obj), sort_keys=True, separators=(",", ":"), allow_nan=False)


def write_atomic(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` through the one output writer
    (:func:`compiler.export.atomic.write_file`: a hidden file beside it,
    flushed to disk, renamed onto it)."""
    atomic.write_file(path, lambda f: f.write(data))


def _leftover(name: str) -> int | None:
    """The process id in a hidden temporary name of ours, else None."""
    if not name.startswith("."):
        return None
    for known in KNOWN:
        prefix = f".{known}.partial-"
        if name.startswith(prefix):
            pid = name[len(prefix):].partition("-")[0]
            return int(pid) if pid.isdigit() else None
    return None


def point_from_dict(d: dict) -> PointResult:
    def opt(x):
        return None if x is None else float(x)
    return PointResult(
        index=int(d["index"]), coords=tuple(float(c) for c in d["coords"]),
        status=str(d["status"]), message=str(d.get("message", "")),
        fidelity=opt(d.get("fidelity")), infidelity=opt(d.get("infidelity")),
        process_fidelity=opt(d.get("process_fidelity")),
        average_fidelity=opt(d.get("average_fidelity")),
        state_fidelity=opt(d.get("state_fidelity")),
        populations=tuple((str(q), float(p)) for q, p in d.get("populations", [])),
        duration=opt(d.get("duration")),
        coherence=tuple((str(c[0]), float(c[1]), float(c[2]), float(c[3]))
                        for c in d.get("coherence", [])),
        budget=tuple((str(s), float(v)) for s, v in d.get("budget", [])),
        budget_floor=opt(d.get("budget_floor")), budget_remainder=opt(d.get("budget_remainder")),
        wall_s=float(d.get("wall_s", 0.0)), averaging_error=opt(d.get("averaging_error")),
        observables=tuple(_observable(o) for o in d.get("observables", [])))


def _observable(d: dict) -> Observable:
    def opt(x):
        return None if x is None else float(x)
    return Observable(str(d["label"]), str(d["kind"]), tuple(str(q) for q in d["qubits"]),
                      float(d["ideal"]), float(d["measured"]), float(d["target"]),
                      int(d.get("shots", 0)), opt(d.get("counts")), opt(d.get("error")))


@dataclass
class StateRead:
    header: dict | None
    points: dict[int, PointResult]
    good_bytes: int          # length of the file up to the last complete line
    dropped: int             # lines that could not be read (a torn last line)


def read_state(path: Path) -> StateRead:
    """Read a state file; a torn or unreadable line (only expected last) is
    dropped and counted."""
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        return StateRead(None, {}, 0, 0)
    except OSError as e:
        raise fail(path, f"cannot read the sweep state: {e.strerror or e}") from None
    header = None
    points: dict[int, PointResult] = {}
    good = 0
    dropped = 0
    pos = 0
    for number, raw in enumerate(data.split(b"\n"), 1):
        end = pos + len(raw) + 1
        complete = end <= len(data)
        pos = end
        if not raw.strip():
            if complete:
                good = pos
            continue
        try:
            obj = json.loads(raw.decode("utf-8"))
            if not complete:
                raise ValueError("no newline")
            if header is None:
                if obj.get("format") != STATE_FORMAT:
                    raise fail(path, "this is not a dotseq sweep state file",
                               "choose another -o folder")
                header = obj
            else:
                p = point_from_dict(obj["point"])
                if p.status not in (OK, INVALID):
                    raise ValueError(f"status {p.status}")
                points.setdefault(p.index, p)
            good = pos
        except RecursionError:
            raise SweepError(Problem(f"line {number} of the sweep state is nested too deeply "
                       "to read (the file was changed by something other than dotseq); nothing "
                       "was changed in the folder",
                Span(str(path), number, 1, number, 1),
                f"delete line {number} (its point is computed again) and resume, or choose "
                "another -o folder")) from None
        except (ValueError, KeyError, TypeError, IndexError, UnicodeDecodeError):
            if header is None:
                raise fail(path, "the sweep state file has no readable header",
                           "delete the folder or choose another -o folder") from None
            dropped += 1
    return StateRead(header, points, min(good, len(data)), dropped)


def _describe_key_change(old: dict, new: dict) -> list[str]:
    why = []
    labels = {"sequence_sha256": "the sequence file (or a file it includes) changed",
              "device_sha256": "the device file changed",
              "device_name": "another device",
              "dotseq_version": f"another dotseq version ({old.get('dotseq_version')} then, "
                               f"{new.get('dotseq_version')} now)",
              "axes": "other --vary parameters, ranges or points",
              "fixed": "other --set values",
              "options": "other simulation settings "
                         f"({old.get('options')} then, {new.get('options')} now)",
              "budget": "--budget given in one run and not the other"}
    for k in sorted(set(old) | set(new)):
        if old.get(k) != new.get(k):
            why.append(labels.get(k, f"'{k}' differs"))
    return why


class Folder:
    """The output folder of one sweep run: checks, the state file (locked
    while open), atomic table files."""

    def __init__(self, out, plan: SweepPlan, resume: bool, command: str = "dotseq sweep"):
        self.plan = plan
        raw = os.fspath(out)
        if not str(raw).strip():
            raise fail("<output folder>", "no output folder given", "give one with -o")
        self.path = Path(os.path.abspath(raw))
        self.state_path = self.path / STATE_NAME
        self._file = None
        self.resumed: dict[int, PointResult] = {}
        self.dropped = 0
        self._check(resume, command)

    # ------------------------------------------------------------ checks
    def _check(self, resume: bool, command: str) -> None:
        p = self.path
        refuse_unusable_place(p, fail, "the sweep")
        if os.path.lexists(p) and not p.is_dir():
            raise fail(p, "the output path exists and is a file, not a folder; nothing was written",
                       "choose another -o folder")
        if not p.parent.is_dir():
            raise fail(p, f"the folder that should hold the sweep, {p.parent}, does not exist",
                       f"create it first (mkdir -p {p.parent}) or choose another -o folder")
        names = sorted(os.listdir(p)) if p.is_dir() else []
        for n in names:
            pid = _leftover(n)
            if pid is not None and pid != os.getpid() and not pid_alive(pid):
                try:
                    os.unlink(p / n)
                except OSError:
                    pass
        names = [n for n in (sorted(os.listdir(p)) if p.is_dir() else []) if _leftover(n) is None]
        foreign = [n for n in names if n not in KNOWN]
        if foreign:
            shown = ", ".join(foreign[:3]) + (f" and {len(foreign) - 3} more" if len(foreign) > 3
                                              else "")
            raise fail(p, f"the output folder holds files that are not a dotseq sweep's ({shown}); "
                          "nothing was written and nothing was deleted",
                       "choose another -o folder (a new or empty one)")
        if STATE_NAME in names:
            self._lock()          # before reading or deleting anything: one writer at a time
        try:
            self._prepare(names, resume, command)
        except BaseException:
            self.close()
            raise

    def _prepare(self, names: list[str], resume: bool, command: str) -> None:
        p = self.path
        state = read_state(self.state_path) if STATE_NAME in names else None
        if resume:
            if state is None:
                raise fail(p, "--resume: there is no sweep to resume in this folder "
                              f"(no {STATE_NAME})", "run the sweep without --resume")
            if state.header is None:
                raise fail(self.state_path, "--resume: the state file is empty (the sweep that "
                                            "made it stopped before its first line was written), "
                                            "so there are no points to keep",
                           "run the sweep again without --resume (it starts over in this folder)")
            why = _describe_key_change(state.header.get("key", {}), self.plan.key)
            if why:
                raise fail(self.state_path, "--resume: this folder holds a different sweep: "
                                            + "; ".join(why),
                           "resume with the same sequence, device and arguments as the first "
                           "run, or start this sweep in another -o folder")
            coords = {t.index: t.coords for t in self.plan.tasks}
            for i, pt in state.points.items():
                if coords.get(i) != pt.coords:
                    raise fail(self.state_path, f"--resume: point {i} in the state file does not "
                                                "lie on this sweep's grid",
                               "start this sweep in another -o folder")
            self.resumed = dict(state.points)
            self.dropped = state.dropped
            self._truncate(state.good_bytes)
            return
        if state is not None and state.header is not None:
            n = int(state.header.get("n_points", 0))
            if 0 < len(state.points) < n:
                raise fail(p, f"the output folder holds an unfinished sweep ({len(state.points)} of "
                              f"{n} points); starting over would lose them",
                           f"continue it with the same arguments and --resume, or delete the "
                           "folder (or choose another -o) to start over")
        for n in names:
            if n != STATE_NAME:
                os.unlink(p / n)
        p.mkdir(exist_ok=True)
        if self._file is None:
            self._lock()
        self._truncate(0)
        header = {"format": STATE_FORMAT, "format_version": STATE_VERSION,
                  "n_points": self.plan.n_points, "key": self.plan.key,
                  "sequence": self.plan.sequence, "command": command}
        self._append(dumps(header))

    def _lock(self) -> None:
        """Open the state file (created if missing) and hold an exclusive lock on it."""
        self._file = open_locked_state(self.state_path, self.path, "sweep", "dotseq sweep")

    def _truncate(self, size: int) -> None:
        self._file.truncate(size)
        self._file.seek(0, os.SEEK_END)

    def _append(self, line: str) -> None:
        try:
            self._file.write(line.encode("utf-8") + b"\n")
            self._file.flush()
            os.fsync(self._file.fileno())
        except OSError as e:
            raise self._disk_error(self.state_path, e) from None

    def _disk_error(self, path: Path, e: OSError):
        """The error for a failed write (a full disk, a lost mount): the
        points already in the state file stay there for --resume."""
        return fail(path, f"cannot write {path.name}: {e.strerror or e}; every point finished "
                          f"before it is kept in {self.state_path}",
                    "free disk space (or fix the folder), then continue with the same arguments "
                    "and --resume")

    # ------------------------------------------------------------ use
    def record(self, point: PointResult) -> None:
        """Append one finished point to the state file (on disk when this returns)."""
        self._append(dumps({"point": point}))

    def write(self, name: str, data: bytes) -> Path:
        path = self.path / name
        try:
            write_atomic(path, data)
        except OSError as e:
            raise self._disk_error(path, e) from None
        return path

    def close(self) -> None:
        if self._file is not None:
            f, self._file = self._file, None
            try:
                f.close()
            except OSError:      # a full disk: the error that matters was raised already
                pass


def open_locked_state(state_path: Path, folder: Path, name: str, writer: str):
    """Open a resumable state file (created if missing) for appending and
    hold an exclusive lock on it: ``name`` says whose state file it is
    (``sweep``, ``rb``), ``writer`` what else may be writing (``dotseq sweep``).  A state file that is no regular file (a FIFO would
    block, /dev/zero never end) or a folder another run is writing into is
    refused naming the path."""
    if os.path.lexists(state_path):
        try:
            check_regular(state_path)
        except Unreadable as e:
            raise fail(state_path, f"cannot use the {name} state file: {e.reason}",
                       "delete it, or choose another -o folder") from None
    f = open(state_path, "a+b")
    try:
        import fcntl
        try:
            fcntl.flock(f.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            f.close()
            raise fail(folder, f"another {writer} is writing into this folder",
                       "wait for it to finish, or choose another -o folder") from None
    except ImportError:  # pragma: no cover - no fcntl (Windows): no lock
        pass
    return f
