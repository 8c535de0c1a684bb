"""Sweeps under hostile conditions (issue 12, items 6, 7, 9 and 11): a killed
main process leaves no worker behind, a --cluster address where no Dask
scheduler answers times out with a clear message and no traceback, a full
disk or a corrupted state file ends in exit 2 naming the path with the
finished points kept, an empty state file is reported as empty, and
--workers is capped at the cores unless asked (docs/sweep.md,
docs/reliability.md)."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from conftest import ROOT, SEQUENCES

RAMSEY = SEQUENCES / "ramsey_single.dotseq"


def dotseq(*args: str, timeout: float = 120, **kw) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "compiler", *args], capture_output=True,
                          text=True, timeout=timeout, cwd=str(ROOT), **kw)


# ---------------------------------------------------------------- item 6: orphaned workers

def _proc_stat(pid: int) -> tuple[str, int] | None:
    """(state, parent pid) of a process from /proc, None when it is gone."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    fields = text[text.rindex(")") + 2:].split()
    return fields[0], int(fields[1])


def children_of(pid: int) -> list[int]:
    out = []
    for d in os.listdir("/proc"):
        if d.isdigit():
            st = _proc_stat(int(d))
            if st is not None and st[1] == pid:
                out.append(int(d))
    return out


def running(pid: int) -> bool:
    st = _proc_stat(pid)
    return st is not None and st[0] not in ("Z", "X")     # a zombie has ended


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs /proc (Linux)")
def test_killing_the_sweep_leaves_no_worker_behind(tmp_path):
    out = tmp_path / "sw"
    kids: list[int] = []
    main = subprocess.Popen([sys.executable, "-m", "compiler", "sweep", str(RAMSEY), "--vary",
                             "A.t2_star=2us:5us:400", "--workers", "2", "--quiet", "-o", str(out)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, cwd=str(ROOT))
    try:
        deadline = time.monotonic() + 90
        state = out / "points.jsonl"
        while time.monotonic() < deadline:            # both workers up and a point finished
            if len(children_of(main.pid)) >= 3 and state.exists() and \
                    state.read_bytes().count(b"\n") >= 3:
                break
            assert main.poll() is None
            time.sleep(0.1)
        else:
            pytest.fail("the sweep did not start its workers")
        kids = children_of(main.pid)                   # 2 workers and the resource tracker
        assert len(kids) >= 3
        os.kill(main.pid, signal.SIGKILL)
        main.wait(timeout=10)
        t0 = time.monotonic()
        while any(running(k) for k in kids) and time.monotonic() - t0 < 10:
            time.sleep(0.05)
        gone_after = time.monotonic() - t0
        left = [k for k in kids if running(k)]
        print(f"{len(kids)} children ended {gone_after:.2f} s after the main process was killed")
        assert not left, f"processes {left} still run after the sweep's main process was killed"
        assert gone_after < 5
    finally:
        if main.poll() is None:
            main.kill()
            main.wait()
        for k in kids + children_of(main.pid):      # the test's own leftovers, by id
            try:
                os.kill(k, signal.SIGKILL)
            except OSError:
                pass
