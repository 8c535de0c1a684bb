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


def descendants_of(pid: int) -> list[int]:
    """Children, grandchildren, ...: the workers are forked from the fork
    server, a child of the sweep's process."""
    out, todo = [], [pid]
    while todo:
        kids = children_of(todo.pop())
        out += kids
        todo += kids
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
            if len(descendants_of(main.pid)) >= 4 and state.exists() and \
                    state.read_bytes().count(b"\n") >= 3:
                break
            assert main.poll() is None
            time.sleep(0.1)
        else:
            pytest.fail("the sweep did not start its workers")
        kids = descendants_of(main.pid)     # 2 workers, the fork server, the resource tracker
        assert len(kids) >= 4
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
        for k in kids + descendants_of(main.pid):   # the test's own leftovers, by id
            try:
                os.kill(k, signal.SIGKILL)
            except OSError:
                pass


# ---------------------------------------------------------------- item 7: cluster addresses

class LoopbackServer:
    """A TCP server on 127.0.0.1 that accepts and then sends ``reply``
    repeatedly (b"": says nothing); not a Dask scheduler."""

    def __init__(self, reply: bytes):
        self.reply = reply
        self.sock = socket.socket()
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(8)
        self.address = f"tcp://127.0.0.1:{self.sock.getsockname()[1]}"
        self.conns: list[socket.socket] = []
        threading.Thread(target=self._serve, daemon=True).start()

    def _serve(self) -> None:
        while True:
            try:
                c, _ = self.sock.accept()
            except OSError:
                return
            self.conns.append(c)
            threading.Thread(target=self._talk, args=(c,), daemon=True).start()

    def _talk(self, c: socket.socket) -> None:
        try:
            while self.reply:
                c.sendall(self.reply)
                time.sleep(0.2)
        except OSError:
            pass

    def close(self) -> None:
        self.sock.close()
        for c in self.conns:
            c.close()


SWEEP_ARGS = ["sweep", str(RAMSEY), "--vary", "A.t2_star=2us:5us:2", "--quiet"]


@pytest.mark.parametrize("reply", [b"", b"HTTP/1.0 200 OK\r\n\r\nnot a scheduler\n" * 4])
def test_a_cluster_address_where_no_scheduler_answers_times_out(reply, tmp_path):
    pytest.importorskip("distributed")
    server = LoopbackServer(reply)
    try:
        t0 = time.monotonic()
        r = dotseq(*SWEEP_ARGS, "--cluster", server.address, "--cluster-timeout", "1",
                   "-o", str(tmp_path / "sw"), timeout=90)
        took = time.monotonic() - t0
    finally:
        server.close()
    assert r.returncode == 2, r.stderr
    assert "Traceback" not in r.stderr and "Exception ignored" not in r.stderr
    assert f"cannot reach the Dask scheduler at {server.address}" in r.stderr
    if not reply:
        assert "no answer within 1 s" in r.stderr
    assert not (tmp_path / "sw").exists()               # nothing was written
    print(f"refused after {took:.1f} s (process start and planning included)")
    assert took < 60


def test_an_http_cluster_address_is_refused_without_a_late_traceback(tmp_path):
    """The whole process, to its exit: no traceback from Dask's shutdown."""
    pytest.importorskip("distributed")
    r = dotseq(*SWEEP_ARGS, "--cluster", "http://x", "-o", str(tmp_path / "sw"), timeout=60)
    assert r.returncode == 2, r.stderr
    assert "'http://' is not an address of a Dask scheduler" in r.stderr
    assert "Traceback" not in r.stderr and "Exception ignored" not in r.stderr
    assert not (tmp_path / "sw").exists()


@pytest.mark.parametrize("address, fragment", [
    ("https://sched.example:8787/status", "'https://' is not an address"),
    ("ws://127.0.0.1:8786", "'ws://' is not an address"),
    ("tcp://nohost", "give the scheduler as tcp://HOST:PORT"),
    ("tcp://127.0.0.1:99999", "give the scheduler as tcp://HOST:PORT"),
])
def test_a_malformed_cluster_address_is_refused_at_once(address, fragment, tmp_path, capsys):
    pytest.importorskip("distributed")
    from compiler.cli import main
    assert main([*SWEEP_ARGS, "--cluster", address, "-o", str(tmp_path / "sw")]) == 2
    assert fragment in capsys.readouterr().err
    assert not (tmp_path / "sw").exists()


def test_nothing_listening_is_refused_at_once(tmp_path, capsys):
    pytest.importorskip("distributed")
    from compiler.cli import main
    with socket.socket() as s:                      # a free port, closed again
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    t0 = time.monotonic()
    assert main([*SWEEP_ARGS, "--cluster", f"tcp://127.0.0.1:{port}",
                 "-o", str(tmp_path / "sw")]) == 2
    assert time.monotonic() - t0 < 30
    assert "Connection refused" in capsys.readouterr().err


@pytest.mark.parametrize("value", ["0", "-1", "1e9", "nan"])
def test_cluster_timeout_is_checked(value, tmp_path, capsys):
    from compiler.cli import main
    assert main([*SWEEP_ARGS, "--cluster", "tcp://127.0.0.1:1", "--cluster-timeout", value,
                 "-o", str(tmp_path / "sw")]) == 2
    assert "--cluster-timeout" in capsys.readouterr().err


# ---------------------------------------------------------------- items 9 and 11: the state file

def sweep_main(out: Path, *extra: str) -> int:
    from compiler.cli import main
    return main([*SWEEP_ARGS, "--workers", "1", "-o", str(out), *extra])


def state_points(out: Path) -> int:
    lines = (out / "points.jsonl").read_bytes().split(b"\n")
    return sum(1 for ln in lines[1:] if ln.endswith(b"}"))


@pytest.mark.parametrize("fail_at", [3, 12])     # a point line; the first table (after 1 + 10 lines)
def test_a_full_disk_during_a_sweep_is_exit_2_and_keeps_the_points(fail_at, tmp_path, capsys,
                                                                    monkeypatch):
    """ENOSPC from the fsync of the ``fail_at``-th write (the state file's
    header and points, then the tables): exit 2 naming the file, every point
    finished before it kept, and --resume completes the sweep."""
    import errno
    import compiler.sweep.store as store
    real, calls = store.os.fsync, []

    def fsync(fd):
        calls.append(fd)
        if len(calls) == fail_at:
            raise OSError(errno.ENOSPC, "No space left on device")
        return real(fd)
    monkeypatch.setattr(store.os, "fsync", fsync)
    out = tmp_path / "sw"
    assert sweep_main(out) == 2
    err = capsys.readouterr().err
    assert "No space left on device" in err and "--resume" in err and "Traceback" not in err
    named = "points.jsonl" if fail_at <= 11 else "sweep."
    assert f"{out}" in err and named in err
    kept = state_points(out)
    assert kept >= min(fail_at - 2, 10)
    monkeypatch.setattr(store.os, "fsync", real)
    assert sweep_main(out, "--resume") == 0
    assert state_points(out) == 10 and (out / "sweep.csv").exists()


def test_a_deeply_nested_state_line_is_exit_2_naming_the_line(tmp_path, capsys):
    out = tmp_path / "sw"
    assert sweep_main(out) == 0
    state = out / "points.jsonl"
    lines = state.read_bytes().split(b"\n")
    lines.insert(3, b"[" * 100_000 + b"]" * 100_000)
    state.write_bytes(b"\n".join(lines))
    before = state.read_bytes()
    assert sweep_main(out, "--resume") == 2
    err = capsys.readouterr().err
    assert f"{state}:4:1" in err and "nested too deeply" in err and "Traceback" not in err
    assert state.read_bytes() == before                 # the finished points are kept


@pytest.mark.parametrize("content", [b"", b"\n\n  \n"])
def test_an_empty_state_file_is_reported_as_empty(content, tmp_path, capsys):
    out = tmp_path / "sw"
    out.mkdir()
    (out / "points.jsonl").write_bytes(content)
    assert sweep_main(out, "--resume") == 2
    err = capsys.readouterr().err
    assert "the state file is empty" in err and "without --resume" in err
    assert "no points.jsonl" not in err


def test_workers_are_capped_at_the_cores_unless_asked(tmp_path, capsys, monkeypatch):
    import compiler.sweep.execute as execute
    import compiler.sweep.run as run
    started = []
    monkeypatch.setattr(execute, "local_cores", lambda: 2)
    monkeypatch.setattr(run, "run_pool", lambda tasks, on_result, workers, fn:
                        (started.append(workers), execute.run_serial(tasks, on_result, fn))[1])
    from compiler.cli import main
    assert main([*SWEEP_ARGS, "-o", str(tmp_path / "a"), "--workers", "1000"]) == 0
    assert started == [2]
    assert "--workers 1000 capped at the 2 cores" in capsys.readouterr().out
    # asked explicitly: as many as asked, but never more than the points (10)
    assert main([*SWEEP_ARGS, "-o", str(tmp_path / "b"), "--workers", "1000",
                 "--more-workers-than-cores"]) == 0
    assert started == [2, 10]
    assert "capped at the 10 points" in capsys.readouterr().out
