"""Reading user files (compiler/source.py) and what messages show of them.

Every file dotseq reads on a user's word (the sequence, an include, a device
statement's file, --device) is a regular file read no further than its cap;
anything else (the endless zero device, a named pipe, a folder, a link loop,
a file of /proc) is refused with exit 2 naming the path and, for statements,
the statement's position.  Messages never show the text of a file that does
not read as the expected kind.  Also the inputs that used to end in exit 3
(issue 12, item 9): a wait too long for the sample grid, a lone surrogate in
device YAML, an include link loop.
"""

from __future__ import annotations

import os
import resource
import signal
import subprocess
import sys
import tempfile
import threading
import time
from contextlib import contextmanager
from pathlib import Path

import pytest

from compiler import load
from compiler.cli import main
from compiler.device import load_device_text
from compiler.errors import DeviceError, ScheduleError
from compiler.source import Oversize, Unreadable, read_capped
from conftest import ROOT, SEQUENCES

DEVICE = SEQUENCES / "devices" / "demo_pair.yaml"
SECRET = "TOKEN=s3cr3t-do-not-show"   # text that must never reach a message


@contextmanager
def time_limit(seconds: float):
    """Fail instead of hanging (a FIFO opened for reading blocks forever)."""
    def boom(*_):
        raise TimeoutError(f"took more than {seconds} s (blocked?)")
    old = signal.signal(signal.SIGALRM, boom)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)


def cli(capsys, *args, seconds: float = 20.0) -> tuple[int, str, str]:
    with time_limit(seconds):
        code = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return code, out, err


def no_traceback(text: str) -> None:
    assert "Traceback" not in text and "internal error" not in text, text


# ---------------------------------------------------------------- special files

def _fifo(d: Path) -> Path:
    p = d / "pipe.dotseq"
    os.mkfifo(p)
    return p


def _folder(d: Path) -> Path:
    p = d / "folder.dotseq"
    p.mkdir()
    return p


def _loop(d: Path) -> Path:
    (d / "loop_a.dotseq").symlink_to(d / "loop_b.dotseq")
    (d / "loop_b.dotseq").symlink_to(d / "loop_a.dotseq")
    return d / "loop_a.dotseq"


def _socket(d: Path) -> Path:
    import socket
    p = d / "sock.dotseq"
    s = socket.socket(socket.AF_UNIX)
    s.bind(str(p))
    s.close()
    return p


def _link_to_environ(d: Path) -> Path:
    p = d / "environ.dotseq"
    p.symlink_to("/proc/self/environ")
    return p


SPECIAL = [
    pytest.param(lambda d: Path("/dev/zero"), "character device", id="dev-zero"),
    pytest.param(lambda d: Path("/dev/null"), "character device", id="dev-null"),
    pytest.param(_fifo, "named pipe (FIFO)", id="fifo"),
    pytest.param(_folder, "directory", id="folder"),
    pytest.param(_loop, "loop of symbolic links", id="link-loop"),
    pytest.param(_socket, "socket", id="socket"),
    pytest.param(lambda d: Path("/proc/self/environ"), "system file under /proc", id="proc-environ"),
    pytest.param(_link_to_environ, "system file under /proc", id="link-to-proc"),
]


@pytest.mark.parametrize("make, reason", SPECIAL)
def test_read_capped_refuses_what_is_not_a_regular_file(make, reason, tmp_path):
    path = make(tmp_path)
    with time_limit(5), pytest.raises(Unreadable) as info:
        read_capped(path, 1000)
    assert reason in info.value.reason


def test_read_capped_reads_no_more_than_the_cap_whatever_the_reported_size(tmp_path, monkeypatch):
    """A file that reports a small size but holds more (it grows, or its file
    system lies): the cap applies while reading, never more than cap + 1 bytes."""
    import compiler.source as S
    p = tmp_path / "grows.dotseq"
    p.write_bytes(b"x" * 5_000_000)
    real_check, real_read = S.check_regular, os.read

    def small(path):
        st = real_check(path)
        return os.stat_result((st.st_mode, st.st_ino, st.st_dev, st.st_nlink, st.st_uid,
                               st.st_gid, 10, st.st_atime, st.st_mtime, st.st_ctime))
    got = []

    def counting_read(fd, n):
        b = real_read(fd, n)
        got.append(len(b))
        return b
    monkeypatch.setattr(S, "check_regular", small)
    monkeypatch.setattr(os, "read", counting_read)
    with pytest.raises(Oversize):
        read_capped(p, 1000)
    assert sum(got) == 1001


def test_a_file_reporting_size_zero_but_holding_data_is_refused(tmp_path, monkeypatch):
    """Files of pseudo file systems (/proc and the like, wherever mounted)
    report 0 bytes and hold text: refused, not read as input."""
    import compiler.source as S
    p = tmp_path / "pseudo.dotseq"
    p.write_text("rot A x 90 deg\n", encoding="utf-8")
    real_check = S.check_regular

    def zero(path):
        st = real_check(path)
        return os.stat_result((st.st_mode, st.st_ino, st.st_dev, st.st_nlink, st.st_uid,
                               st.st_gid, 0, st.st_atime, st.st_mtime, st.st_ctime))
    monkeypatch.setattr(S, "check_regular", zero)
    with pytest.raises(Unreadable, match="size of 0 bytes but holds data"):
        read_capped(p, 1000)
    monkeypatch.setattr(S, "check_regular", real_check)
    assert read_capped(p, 1000) == b"rot A x 90 deg\n"


def _roles(tmp_path: Path, target: Path):
    """The four ways a path reaches dotseq: (cli args, text expected in the
    error: the path and, for statements, the statement's position)."""
    inc = tmp_path / "inc.dotseq"
    inc.write_text(f'include "{target}"\nrot A x 90 deg\n', encoding="utf-8")
    dev = tmp_path / "dev.dotseq"
    dev.write_text(f'device "{target}"\nrot A x 90 deg\n', encoding="utf-8")
    plain = tmp_path / "plain.dotseq"
    plain.write_text("rot A x 90 deg\n", encoding="utf-8")
    return {
        "sequence": (["check", target], [f"'{target}'"]),
        "include": (["check", inc], [f"{inc}:1:9", f"'{target}'"]),
        "device": (["check", dev], [f"{dev}:1:1", f"'{target}'"]),
        "--device": (["check", plain, "--device", target], [f"'{target}'"]),
    }


@pytest.mark.parametrize("role", ["sequence", "include", "device", "--device"])
@pytest.mark.parametrize("make, reason", SPECIAL)
def test_special_file_in_every_role_is_exit_2_naming_it(make, reason, role, tmp_path, capsys):
    target = make(tmp_path)
    args, expected = _roles(tmp_path, target)[role]
    code, out, err = cli(capsys, *args)
    assert code == 2, err
    for text in expected:
        assert text in err, err
    assert reason in err, err
    no_traceback(err)
    assert "SHELL=" not in err and "PATH=" not in err, err    # nothing of /proc/self/environ


# ---------------------------------------------------------------- through the CLI, in a child

_PEAK_TAG = "dotseq-test-peak-rss-kB"
_CHILD = f"""
import sys
from compiler.cli import main
code = main(sys.argv[1:])
with open("/proc/self/status") as f:
    peak = next(line.split()[1] for line in f if line.startswith("VmHWM:"))
sys.stderr.write("\\n{_PEAK_TAG} " + peak + "\\n")
sys.exit(code)
"""
CHILD_MEMORY = 3 << 30   # address-space limit of the child: a regression fails, not the machine


def _limit_memory():
    _, hard = resource.getrlimit(resource.RLIMIT_AS)
    cap = CHILD_MEMORY if hard == resource.RLIM_INFINITY else min(CHILD_MEMORY, hard)
    resource.setrlimit(resource.RLIMIT_AS, (cap, hard))


def run_child(args, timeout: float = 60.0) -> tuple[int, str, int, float]:
    """``dotseq ARGS`` in a child with a time and an address-space limit:
    exit code, stderr, peak resident memory (VmHWM, bytes), wall time (s)."""
    with tempfile.TemporaryFile() as err:
        t0 = time.perf_counter()
        child = subprocess.Popen([sys.executable, "-c", _CHILD, *map(str, args)], cwd=ROOT,
                                 stdout=subprocess.DEVNULL, stderr=err,
                                 preexec_fn=_limit_memory)
        timer = threading.Timer(timeout, child.kill)
        timer.start()
        try:
            code = child.wait()
        finally:
            timer.cancel()
        seconds = time.perf_counter() - t0
        err.seek(0)
        text = err.read().decode("utf-8", "replace")
    head, tag, tail = text.rpartition(f"\n{_PEAK_TAG} ")
    peak = int(tail.split()[0]) * 1024 if tag else 0
    return code, head if tag else text, peak, seconds


@pytest.fixture(scope="module")
def baseline_peak(tmp_path_factory) -> int:
    """Peak memory of checking a one-line file: the interpreter with numpy
    and scipy, before any real work."""
    p = tmp_path_factory.mktemp("base") / "one.dotseq"
    p.write_text("wait 1 ns\n", encoding="utf-8")
    code, err, peak, _ = run_child(["check", p])
    assert code == 0, err
    return peak


@pytest.mark.parametrize("what, role", [("/dev/zero", "sequence"), ("/dev/zero", "include"),
                                        ("fifo", "device"), ("fifo", "--device")])
def test_cli_refuses_zero_device_and_fifo_quickly_in_bounded_memory(what, role, tmp_path,
                                                                    baseline_peak):
    """Before: /dev/zero grew to gigabytes, a FIFO blocked forever.  Now exit
    2 naming the path, in the time and memory of a one-line check (child
    killed after 60 s, address space limited to 3 GiB)."""
    target = _fifo(tmp_path) if what == "fifo" else Path(what)
    args, expected = _roles(tmp_path, target)[role]
    code, err, peak, seconds = run_child(args)
    assert code == 2, (code, err[-2000:])
    for text in expected:
        assert text in err, err
    assert peak < baseline_peak + (32 << 20), (peak, baseline_peak)
    assert seconds < 45, seconds


# ---------------------------------------------------------------- echoed contents (item 10)

def test_device_statement_naming_a_system_like_file_shows_none_of_it(tmp_path, capsys):
    """A device statement naming some other file (here a passwd-like text):
    one problem at the statement, none of the file's text in the message."""
    other = tmp_path / "accounts"
    other.write_text(f"{SECRET}:x:0:0:root:/root:/bin/bash\nuser:x:1000:1000::/home/u:/bin/sh\n",
                     encoding="utf-8")
    seq = tmp_path / "s.dotseq"
    seq.write_text(f'device "{other}"\nrot A x 90 deg\n', encoding="utf-8")
    code, _, err = cli(capsys, "check", seq)
    assert code == 2 and f"{seq}:1:1" in err and "does not read as a device" in err, err
    assert "s3cr3t" not in err, err
    no_traceback(err)


def test_device_statement_naming_a_key_value_file_shows_none_of_its_values(tmp_path, capsys):
    other = tmp_path / "settings.conf"
    other.write_text(f"name: x\npassword: {SECRET}\n", encoding="utf-8")
    seq = tmp_path / "s.dotseq"
    seq.write_text(f'device "settings.conf"\nrot A x 90 deg\n', encoding="utf-8")
    code, _, err = cli(capsys, "check", seq)
    assert code == 2 and f"{seq}:1:1" in err, err
    assert "s3cr3t" not in err and "password" not in err, err


@pytest.mark.parametrize("role", ["device", "--device"])
def test_yaml_that_is_no_device_file_is_not_echoed(role, tmp_path, capsys):
    """Even named .yaml: a file whose top is not a mapping is 'not a device
    file', and neither its first line nor its text is shown."""
    other = tmp_path / "notes.yaml"
    other.write_text(f"{SECRET} and more words\non a second line\n", encoding="utf-8")
    seq = tmp_path / "s.dotseq"
    seq.write_text('device "notes.yaml"\nrot A x 90 deg\n' if role == "device"
                   else "rot A x 90 deg\n", encoding="utf-8")
    args = ["check", seq] + (["--device", other] if role == "--device" else [])
    code, _, err = cli(capsys, *args)
    assert code == 2 and "not a device file" in err, err
    assert "s3cr3t" not in err and "second line" not in err, err


def test_include_of_a_file_not_named_dotseq_shows_none_of_it(tmp_path, capsys):
    other = tmp_path / "env.txt"
    other.write_text(f"{SECRET}\nHOME=/root\n", encoding="utf-8")
    seq = tmp_path / "s.dotseq"
    seq.write_text('rot A x 90 deg\ninclude "env.txt"\n', encoding="utf-8")
    code, _, err = cli(capsys, "check", seq)
    assert code == 2 and f"{seq}:2:9" in err and "does not read as a sequence file" in err, err
    assert "s3cr3t" not in err and "TOKEN" not in err and "HOME" not in err, err


def test_include_named_dotseq_still_shows_its_problems(tmp_path, capsys):
    """The rule above does not hide a user's own mistakes in *.dotseq files."""
    (tmp_path / "lib.dotseq").write_text("rot A x 90 degg\n", encoding="utf-8")
    seq = tmp_path / "s.dotseq"
    seq.write_text('include "lib.dotseq"\n', encoding="utf-8")
    code, _, err = cli(capsys, "check", seq)
    assert code == 2 and "lib.dotseq:1:" in err and "rot A x 90 degg" in err, err


# ---------------------------------------------------------------- --confine

def _confine_tree(tmp_path: Path):
    exp = tmp_path / "exp"
    (exp / "lib").mkdir(parents=True)
    (exp / "lib" / "g.dotseq").write_text("rot A x 90 deg\n", encoding="utf-8")
    (tmp_path / "outside.dotseq").write_text("rot A x 90 deg\n", encoding="utf-8")
    (exp / "dev.yaml").write_text(DEVICE.read_text(encoding="utf-8"), encoding="utf-8")
    (tmp_path / "dev_out.yaml").write_text(DEVICE.read_text(encoding="utf-8"), encoding="utf-8")
    (exp / "sneaky.dotseq").symlink_to(tmp_path / "outside.dotseq")
    return exp


@pytest.mark.parametrize("text, ok", [
    ('device "dev.yaml"\ninclude "lib/g.dotseq"\n', True),
    ('device "../dev_out.yaml"\nrot A x 90 deg\n', False),
    ('device "dev.yaml"\ninclude "../outside.dotseq"\n', False),
    ('device "dev.yaml"\ninclude "sneaky.dotseq"\n', False),     # a link out of the tree
])
def test_confine_keeps_includes_and_devices_in_the_sequence_folder(text, ok, tmp_path, capsys):
    exp = _confine_tree(tmp_path)
    seq = exp / "s.dotseq"
    seq.write_text(text, encoding="utf-8")
    code, _, err = cli(capsys, "check", seq)
    assert code == 0, err                              # without --confine: allowed
    code, _, err = cli(capsys, "check", seq, "--confine")
    if ok:
        assert code == 0, err
    else:
        assert code == 2 and "outside the sequence's folder" in err and f"{seq}:" in err, err
        no_traceback(err)


@pytest.mark.parametrize("command", ["compile", "preview", "simulate", "run", "sweep"])
def test_every_command_takes_confine(command, tmp_path, capsys):
    exp = _confine_tree(tmp_path)
    seq = exp / "s.dotseq"
    seq.write_text('device "../dev_out.yaml"\nrot A x 90 deg\n', encoding="utf-8")
    out = tmp_path / ("out.png" if command == "preview" else "out")
    extra = ["--vary", "field=0.5T:0.6T:2"] if command == "sweep" else []
    code, _, err = cli(capsys, command, seq, "-o", out, "--confine", *extra)
    assert code == 2 and "outside the sequence's folder" in err and f"{seq}:1:1" in err, err
    assert not out.exists()


def test_confine_does_not_confine_the_command_line_device(tmp_path, capsys):
    exp = _confine_tree(tmp_path)
    seq = exp / "s.dotseq"
    seq.write_text("rot A x 90 deg\n", encoding="utf-8")
    code, _, err = cli(capsys, "check", seq, "--confine", "--device", tmp_path / "dev_out.yaml")
    assert code == 0, err


# ---------------------------------------------------------------- exit 3 -> exit 2 (item 9)

@pytest.mark.parametrize("value", ["1e300 s", "1e20 s"])
def test_wait_beyond_the_sample_grid_is_refused_at_its_line(value, tmp_path, capsys):
    """'wait 1e300 s' overflowed the integer conversion of its sample count
    (internal error, exit 3); now refused at the wait, naming the limit."""
    seq = tmp_path / "w.dotseq"
    seq.write_text(f"rot A x 90 deg\nwait {value}\n", encoding="utf-8")
    with pytest.raises(ScheduleError) as info:
        load(seq)
    p = info.value.first
    assert (p.span.line, p.span.col) == (2, 1) and "samples" in p.message, info.value.render()
    assert "2^53" in p.hint
    code, _, err = cli(capsys, "check", seq)
    assert code == 2 and f"{seq}:2:1" in err, err


@pytest.mark.parametrize("line, what", [
    ("rot A x 90 deg duration=1e300 s", "burst"),
    ("rot A x 90 deg amplitude=1e-320 V", "burst"),
    ("sqrtswap A B duration=1e300 s", "exchange pulse"),
    ("together { wait 1e300 s on A ; rot B x 90 deg }", "wait"),
])
def test_pulse_lengths_beyond_the_sample_grid_are_refused_at_the_step(line, what, tmp_path):
    """The same overflow in the burst and exchange designs (exit 3 before)."""
    seq = tmp_path / "p.dotseq"
    seq.write_text(f'device "{DEVICE}"\nrot A x 90 deg\n{line}\n', encoding="utf-8")
    with pytest.raises(ScheduleError) as info:
        load(seq)
    p = info.value.first
    assert p.span.line == 3 and what in p.message and "2^53" in p.hint, info.value.render()


def test_long_but_placeable_wait_still_checks(tmp_path):
    seq = tmp_path / "w.dotseq"
    seq.write_text("rot A x 90 deg\nwait 1 s\n", encoding="utf-8")
    load(seq)


def test_lone_surrogate_in_device_yaml_is_refused_at_its_position():
    """A "\\udc80" escape made a string that cannot be printed or written as
    UTF-8: 'check' crashed printing the name (exit 3), 'compile' writing the
    manifest."""
    text = DEVICE.read_text(encoding="utf-8")
    lines = text.split("\n")
    k = next(i for i, line in enumerate(lines) if line.startswith("name:"))
    lines[k] = 'name: "bad \\udc80 name"'
    with pytest.raises(DeviceError) as info:
        load_device_text("\n".join(lines), "s.yaml")
    p = info.value.first
    assert (p.span.line, p.span.col) == (k + 1, 7) and "surrogate" in p.message, info.value.render()
    info.value.render().encode("utf-8")       # the message itself can be printed


def test_lone_surrogate_in_a_key_or_list_is_refused():
    with pytest.raises(DeviceError, match="surrogate"):
        load_device_text('name: x\nnotes: ["\\ud800"]\n', "s.yaml")
    with pytest.raises(DeviceError, match="surrogate"):
        load_device_text('"\\udfff": 1\n', "s.yaml")


def test_include_link_loop_names_the_statement(tmp_path, capsys):
    """Path.resolve raised RuntimeError on a link loop (exit 3)."""
    _loop(tmp_path)
    seq = tmp_path / "s.dotseq"
    seq.write_text('rot A x 90 deg\ninclude "loop_a.dotseq"\n', encoding="utf-8")
    code, _, err = cli(capsys, "check", seq)
    assert code == 2 and f"{seq}:2:9" in err and "loop of symbolic links" in err, err
    assert "loop_a.dotseq" in err
    no_traceback(err)


@pytest.mark.parametrize("kind", ["fifo", "link-to-dev-null", "link-loop"])
def test_sweep_state_file_that_is_not_a_regular_file_is_refused(kind, tmp_path, capsys):
    """points.jsonl in the -o folder as a FIFO blocked the sweep forever (it
    is opened read-write, then read); as a link to /dev/null the state went
    there.  Refused with exit 2 naming it, with or without --resume."""
    out = tmp_path / "out"
    out.mkdir()
    state = out / "points.jsonl"
    if kind == "fifo":
        os.mkfifo(state)
    elif kind == "link-to-dev-null":
        state.symlink_to("/dev/null")
    else:
        state.symlink_to(out / "points.jsonl")
    seq = tmp_path / "s.dotseq"
    seq.write_text(f'device "{DEVICE}"\nlet tau = 10 ns\nrot A x 90 deg\nwait tau\n',
                   encoding="utf-8")
    for resume in ([], ["--resume"]):
        code, _, err = cli(capsys, "sweep", seq, "-o", out, "--vary", "tau=10ns:20ns:2",
                           "--workers", "1", "--quiet", *resume)
        assert code == 2 and str(state) in err and "cannot use the sweep state file" in err, err
        no_traceback(err)

