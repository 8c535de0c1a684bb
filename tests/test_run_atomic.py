"""`dotseq run` writes its folder (bundle, preview, report) as one unit:
every argument is checked before anything is written, a late failure or a
SIGKILL at any moment leaves the earlier run's folder or the complete new
one (never a mix), and a folder holding files dotseq did not write is
refused (issue 12, item 5; docs/reliability.md)."""

from __future__ import annotations

import errno
import hashlib
import json
import os
import random
import signal
import sys
import time
from pathlib import Path

import pytest

from compiler.cli import main
from compiler.export.runfolder import RUN_MARKER, UNKNOWN_OPTION, recover_run_folder
from conftest import SEQUENCES

SEQ_A = SEQUENCES / "ramsey_single.dotseq"     # 5 runs
# a two-qubit run on two-level dots (the demo pair is four-level: minutes per kill loop)
SEQ_B = Path(__file__).parent / "data" / "cnot_spin_half.dotseq"
FAST = ["--no-budget", "--no-steps", "--nodes", "1"]
KILLS = int(os.environ.get("DOTSEQ_RUN_KILLS", "5"))   # random kills in the default run


def snapshot(folder: Path) -> dict[str, bytes]:
    """Every file below ``folder`` (relative path -> bytes)."""
    return {str(p.relative_to(folder)): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def run_folder_sequence(folder: Path) -> str | None:
    """The sequence a complete, self-consistent run folder was made from, or
    None when the folder is not one: the marker, the preview, the bundle
    manifest and the report's results must all be those the marker lists,
    the bundle must name the same sequence, and nothing else may be there."""
    try:
        marker = json.loads((folder / RUN_MARKER).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if sorted(os.listdir(folder)) != sorted([RUN_MARKER, *marker["entries"]]):
        return None
    if sorted(marker["entries"]) != ["bundle", "preview.png", "report"]:
        return None
    png = (folder / "preview.png").read_bytes()
    if hashlib.sha256(png).hexdigest() != marker["entries"]["preview.png"]["sha256"]:
        return None
    for part, digest in marker["sha256"].items():
        try:
            if hashlib.sha256((folder / part).read_bytes()).hexdigest() != digest:
                return None
        except OSError:
            return None
    manifest = json.loads((folder / "bundle" / "manifest.json").read_text(encoding="utf-8"))
    if manifest["source"]["sequence"] != marker["sequence"]:
        return None
    return marker["sequence"]


def dotseq_run(seq: Path, out: Path, *extra: str) -> int:
    return main(["run", str(seq), "-o", str(out), *FAST, *extra])


@pytest.fixture(scope="module")
def old_run(tmp_path_factory):
    """A complete run folder of SEQ_A (copied fresh by each test)."""
    base = tmp_path_factory.mktemp("old")
    assert dotseq_run(SEQ_A, base / "out") == 0
    return base / "out"


@pytest.fixture
def out(old_run, tmp_path):
    import shutil
    target = tmp_path / "out"
    shutil.copytree(old_run, target)
    return target


def test_a_run_folder_is_complete_and_marked(out):
    assert run_folder_sequence(out) == str(SEQ_A)


@pytest.mark.parametrize("bad", [["--run", "99"], ["--run", "-1"], ["--nodes", "99"],
                                 ["--no-rwa"], ["--memory-limit", "lots"]])
def test_bad_argument_leaves_the_old_folder_intact(out, bad, capsys):
    before = snapshot(out)
    assert dotseq_run(SEQ_B, out, *bad) == 2
    assert snapshot(out) == before
    assert sorted(p.name for p in out.parent.iterdir()) == ["out"]     # no leftovers
    assert "Traceback" not in capsys.readouterr().err


def test_run_99_on_a_sweep_is_refused_before_anything_is_written(out, capsys):
    before = snapshot(out)
    assert dotseq_run(SEQUENCES / "ramsey_pair.dotseq", out, "--run", "99") == 2
    err = capsys.readouterr().err
    assert "--run 99 does not exist" in err and "11 runs" in err and "nothing was written" in err
    assert snapshot(out) == before


@pytest.mark.parametrize("where", ["report", "preview", "bundle"])
def test_late_failure_while_writing_leaves_the_old_folder_intact(out, where, monkeypatch, capsys):
    """A disk that fills up while the last part is written: the old run stays."""
    import compiler.export as export
    import compiler.preview as preview
    import compiler.report as report

    def full(*a, **k):
        raise OSError(errno.ENOSPC, "No space left on device", str(out / where))
    mod, name = {"report": (report, "write_report"), "preview": (preview, "preview"),
                 "bundle": (export, "write_bundle")}[where]
    monkeypatch.setattr(mod, name, full)
    before = snapshot(out)
    assert dotseq_run(SEQ_B, out) == 2
    err = capsys.readouterr().err
    assert "No space left on device" in err and "nothing was changed" in err
    assert snapshot(out) == before
    assert sorted(p.name for p in out.parent.iterdir()) == ["out"]


def test_interrupt_while_writing_leaves_the_old_folder_intact(out, monkeypatch):
    import compiler.report as report

    def interrupted(*a, **k):
        raise KeyboardInterrupt
    monkeypatch.setattr(report, "write_report", interrupted)
    before = snapshot(out)
    assert dotseq_run(SEQ_B, out) == 130
    assert snapshot(out) == before
    assert sorted(p.name for p in out.parent.iterdir()) == ["out"]


def test_a_new_run_replaces_the_old_one_whole(out):
    assert dotseq_run(SEQ_B, out) == 0
    assert run_folder_sequence(out) == str(SEQ_B)
    assert sorted(p.name for p in out.parent.iterdir()) == ["out"]


@pytest.mark.parametrize("make, named", [
    (lambda d: (d / "notes.txt").write_text("mine"), "notes.txt"),
    (lambda d: (d / "preview.png").write_bytes(b"my own picture"), "preview.png"),
    (lambda d: (d / RUN_MARKER).unlink(), "bundle"),
    (lambda d: (d / "data").mkdir(), "data"),
])
def test_a_folder_with_files_dotseq_did_not_write_is_refused(out, make, named, capsys):
    make(out)
    before = snapshot(out)
    assert dotseq_run(SEQ_B, out) == 2
    err = capsys.readouterr().err
    assert named in err and UNKNOWN_OPTION in err and "nothing was deleted" in err
    assert snapshot(out) == before
    if named == "notes.txt":       # the option replaces the folder whole (the user's file goes)
        assert dotseq_run(SEQ_B, out, UNKNOWN_OPTION) == 0
        assert run_folder_sequence(out) == str(SEQ_B)


def test_a_users_folder_is_refused_before_the_simulation(tmp_path, capsys, monkeypatch):
    import compiler.simulate as simulate
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "preview.png").write_bytes(b"a user's picture")
    monkeypatch.setattr(simulate, "simulate", lambda *a, **k: pytest.fail("simulated"))
    assert dotseq_run(SEQ_A, tmp_path / "out") == 2
    assert "preview.png" in capsys.readouterr().err
    assert (tmp_path / "out" / "preview.png").read_bytes() == b"a user's picture"


def test_an_empty_folder_is_used(tmp_path):
    (tmp_path / "out").mkdir()
    assert dotseq_run(SEQ_A, tmp_path / "out") == 0
    assert run_folder_sequence(tmp_path / "out") == str(SEQ_A)


def kill_run_at(seq: Path, out: Path, delay: float | None,
                hook=None) -> tuple[int | None, float]:
    """Run `dotseq run` in a forked child process (its imports already done,
    so a case costs only the run itself) and SIGKILL it ``delay`` seconds
    after it reports its first simulation progress (the bundle, preview and
    report are written after that); ``delay`` None: let it finish.  Returns
    the exit status (None: killed) and the seconds from that report to the
    end.  ``hook()`` is called in the child first (to plant a kill at an exact
    moment)."""
    r, w = os.pipe()
    pid = os.fork()
    if pid == 0:                                    # the child: `dotseq run`, nothing else
        code = 3
        try:
            os.close(r)
            sys.stdout = open(os.devnull, "w")
            sys.stderr = os.fdopen(w, "w", buffering=1)
            if hook is not None:
                hook()
            code = main(["run", str(seq), "-o", str(out), *FAST])
        finally:
            os._exit(code)
    os.close(w)
    status = None
    try:
        with os.fdopen(r, "rb") as err:
            t = time.perf_counter()
            for line in err:
                if line.startswith(b"simulating"):
                    break
            else:                                   # it ended before simulating (refused)
                return os.waitstatus_to_exitcode(os.waitpid(pid, 0)[1]), time.perf_counter() - t
            t = time.perf_counter()
            end = t + (120 if delay is None else delay)
            while time.perf_counter() < end:
                done, status = os.waitpid(pid, os.WNOHANG)
                if done:
                    return os.waitstatus_to_exitcode(status), time.perf_counter() - t
                time.sleep(0.005)
            os.kill(pid, signal.SIGKILL)
            return None, time.perf_counter() - t
    finally:
        try:
            os.waitpid(pid, 0)
        except ChildProcessError:
            pass


def check_after_kill(out: Path, old: dict[str, bytes] | None, new_seq: Path) -> str:
    """After a killed or finished run (and the tidying the next one does):
    the folder is the old one byte for byte, or a complete run of
    ``new_seq``; nothing else is left beside it.  Returns which."""
    recover_run_folder(out)
    assert sorted(p.name for p in out.parent.iterdir()) == ["out"] or \
        (old is None and not out.exists() and not any(out.parent.iterdir())), \
        sorted(p.name for p in out.parent.iterdir())
    if old is None and not out.exists():
        return "none"
    if snapshot(out) == old:
        return "old"
    assert run_folder_sequence(out) == str(new_seq)
    return "new"


def kill_loop(old_run: Path, tmp_path: Path, kills: int, seed: int) -> list[str]:
    """``kills`` runs of SEQ_B into copies of ``old_run``, each SIGKILLed at
    a random moment (seeded) of its simulating and writing phase; after each
    the folder must be the old run or the new one, whole."""
    import shutil
    rng = random.Random(seed)
    (tmp_path / "calibrate").mkdir()
    code, tail = kill_run_at(SEQ_B, tmp_path / "calibrate" / "out", None)
    assert code == 0
    seen = []
    for i in range(kills):                       # one random moment in each 1/kills of it
        case = tmp_path / f"k{i}"
        case.mkdir()
        shutil.copytree(old_run, case / "out")
        old = snapshot(case / "out")
        code, _ = kill_run_at(SEQ_B, case / "out", (i + rng.random()) / kills * 1.2 * tail)
        assert code in (None, 0)
        seen.append(check_after_kill(case / "out", old, SEQ_B))
    return seen


@pytest.mark.skipif(not hasattr(os, "fork"), reason="needs POSIX fork and signals")
def test_killed_runs_leave_the_old_folder_or_the_new_one(old_run, tmp_path):
    """SIGKILL at random moments of a run into an earlier run's folder (DOTSEQ_RUN_KILLS
    sets how many; 5 by default)."""
    t0 = time.perf_counter()
    seen = kill_loop(old_run, tmp_path, KILLS, seed=12)
    print(f"kills: {seen}, {time.perf_counter() - t0:.1f} s in all")


def _die() -> None:
    os.kill(os.getpid(), signal.SIGKILL)


def _kill_when(module, name: str, when) -> None:
    """Replace ``module.name`` so that the call for which ``when(*args)`` is
    true does its work and then kills the process."""
    real = getattr(module, name)

    def wrapped(*a, **k):
        out = real(*a, **k)
        if when(*a):
            _die()
        return out
    setattr(module, name, wrapped)


def _between_renames():        # the old folder renamed aside, the new one not yet in place
    import compiler.export.atomic as atomic
    _kill_when(atomic.os, "rename", lambda src, dst: ".out.old-" in str(dst))


def _before_old_removed():     # the new folder in place, the old one not yet deleted
    import compiler.export.atomic as atomic
    _kill_when(atomic, "fsync_dir", lambda p: any(".out.old-" in e.name for e in os.scandir(p)))


def _after_the_bundle():       # the bundle written into the temporary folder
    import compiler.export as export
    _kill_when(export, "write_bundle", lambda *a: True)


def _marker_written():         # everything in the temporary folder, not yet published
    import compiler.export.atomic as atomic
    _kill_when(atomic, "fsync_dir", lambda p: ".out.partial-" in str(p)
               and (Path(p) / RUN_MARKER).exists())


@pytest.mark.skipif(not hasattr(os, "fork"), reason="needs POSIX fork and signals")
@pytest.mark.parametrize("hook, expect", [(_after_the_bundle, "old"), (_marker_written, "old"),
                                          (_between_renames, "old"),
                                          (_before_old_removed, "new")])
def test_a_kill_at_each_critical_moment(old_run, tmp_path, hook, expect):
    import shutil
    shutil.copytree(old_run, tmp_path / "out")
    old = snapshot(tmp_path / "out")
    code, _ = kill_run_at(SEQ_B, tmp_path / "out", None, hook)
    assert code == -signal.SIGKILL                 # the planted kill happened
    # between the renames nothing is at the target until the next run tidies up
    assert (tmp_path / "out").exists() == (hook is not _between_renames)
    assert check_after_kill(tmp_path / "out", old, SEQ_B) == expect
