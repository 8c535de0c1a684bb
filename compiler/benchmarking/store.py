"""The output folder of ``dotseq rb`` and its state file.

``OUT/survival.jsonl`` holds a header line (what was asked: qubits,
lengths, sequences, seed, decomposition, interleaved step, simulation
settings, the checksum of the device) and then one line per simulated
sequence, appended and flushed to disk as each one finishes, so an
interrupted run keeps them and ``--resume`` simulates only the rest.  A last
line cut short by a crash is dropped on resume.  ``OUT/device.yaml`` is a
copy of the device, which the generated ``OUT/sequences/*.dotseq`` name.
``rb.json`` and ``rb.png`` are written whole beside their name and renamed
into place.  While a run holds the folder, the state file is locked.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from ..export.atomic import refuse_unusable_place
from ..sweep.errors import fail
from ..sweep.store import dumps, open_locked_state, write_atomic

STATE_NAME = "survival.jsonl"
STATE_FORMAT = "dotseq-rb-state"
STATE_VERSION = 1
KNOWN = frozenset((STATE_NAME, "rb.json", "rb.png", "device.yaml", "steps.dotseq", "sequences"))


class RBFolder:
    """The folder of one RB run (checked, state file locked while open)."""

    def __init__(self, out, key: dict, resume: bool):
        raw = os.fspath(out)
        if not str(raw).strip():
            raise fail("<output folder>", "no output folder given", "give one with -o")
        self.path = Path(os.path.abspath(raw))
        self.state_path = self.path / STATE_NAME
        self.key = key
        self._file = None
        self.done: dict[str, dict] = {}
        self.dropped = 0
        try:
            self._open(resume)
        except BaseException:
            self.close()
            raise

    def _open(self, resume: bool) -> None:
        p = self.path
        refuse_unusable_place(p, fail, "the run")
        if os.path.lexists(p) and not p.is_dir():
            raise fail(p, "the output path exists and is a file, not a folder; nothing was written",
                       "choose another -o folder")
        if not p.parent.is_dir():
            raise fail(p, f"the folder that should hold the run, {p.parent}, does not exist",
                       f"create it first (mkdir -p {p.parent}) or choose another -o folder")
        names = [n for n in (sorted(os.listdir(p)) if p.is_dir() else []) if not n.startswith(".")]
        foreign = [n for n in names if n not in KNOWN]
        if foreign:
            shown = ", ".join(foreign[:3]) + (f" and {len(foreign) - 3} more" if len(foreign) > 3
                                              else "")
            raise fail(p, f"the output folder holds files that are not a dotseq rb run's ({shown}); "
                          "nothing was written and nothing was deleted",
                       "choose another -o folder (a new or empty one)")
        p.mkdir(exist_ok=True)
        has_state = STATE_NAME in names
        self._lock()
        header, lines, good, dropped = self._read() if has_state else (None, [], 0, 0)
        if resume:
            if header is None:
                raise fail(self.state_path, "--resume: there is no rb run to resume in this "
                                            f"folder (no {STATE_NAME} with a header)",
                           "run without --resume")
            old = header.get("key", {})
            why = [k for k in sorted(set(old) | set(self.key)) if old.get(k) != self.key.get(k)]
            if why:
                raise fail(self.state_path, "--resume: this folder holds a different rb run ("
                                            + ", ".join(f"'{k}' differs" for k in why) + ")",
                           "resume with the same device and arguments, or use another -o folder")
            self.done = {d["name"]: d for d in lines}
            self.dropped = dropped
            self._file.truncate(good)
            self._file.seek(0, os.SEEK_END)
            return
        if header is not None and lines and len(lines) < int(header.get("n_tasks", 0)):
            raise fail(p, f"the output folder holds an unfinished rb run ({len(lines)} of "
                          f"{header.get('n_tasks')} simulations); starting over would lose them",
                       "continue it with the same arguments and --resume, or choose another -o")
        for n in ("rb.json", "rb.png", "steps.dotseq", "device.yaml"):
            if (p / n).exists():
                os.unlink(p / n)
        seqs = p / "sequences"
        if seqs.is_dir() and not seqs.is_symlink():
            for f in seqs.iterdir():
                if f.suffix == ".dotseq" and f.is_file():
                    f.unlink()
        self._file.truncate(0)
        self._file.seek(0)
        self.append({"format": STATE_FORMAT, "format_version": STATE_VERSION,
                     "n_tasks": self.key.get("n_tasks", 0), "key": self.key})

    def _lock(self) -> None:
        self._file = open_locked_state(self.state_path, self.path, "rb", "dotseq rb run")

    def _read(self):
        self._file.seek(0)
        data = self._file.read()
        header, lines, good, dropped, pos = None, [], 0, 0, 0
        for raw in data.split(b"\n"):
            end = pos + len(raw) + 1
            if not raw.strip():
                pos = end
                continue
            try:
                obj = json.loads(raw)
                if end > len(data):
                    raise ValueError("no newline: a torn last line")
            except ValueError:
                dropped += 1
                pos = end
                continue
            if header is None:
                if obj.get("format") != STATE_FORMAT:
                    raise fail(self.state_path, "this is not a dotseq rb state file",
                               "choose another -o folder")
                header = obj
            elif isinstance(obj, dict) and isinstance(obj.get("name"), str):
                lines.append(obj)
            good = min(end, len(data))
            pos = end
        return header, lines, good, dropped

    def append(self, obj) -> None:
        try:
            self._file.write(dumps(obj).encode("utf-8") + b"\n")
            self._file.flush()
            os.fsync(self._file.fileno())
        except OSError as e:
            raise fail(self.state_path, f"cannot write {STATE_NAME}: {e.strerror or e}; every "
                                        "simulation finished before it is kept",
                       "free disk space, then continue with the same arguments and --resume") \
                from None

    def write(self, name: str, data: bytes) -> Path:
        path = self.path / name
        path.parent.mkdir(exist_ok=True)
        try:
            write_atomic(path, data)
        except OSError as e:
            raise fail(path, f"cannot write {name}: {e.strerror or e}",
                       "free disk space, then continue with --resume") from None
        return path

    def close(self) -> None:
        if self._file is not None:
            f, self._file = self._file, None
            try:
                f.close()
            except OSError:
                pass


__all__ = ["RBFolder", "STATE_NAME"]
