"""Hardening: bad, big and interrupted input ends in a clear error and loses
nothing.  docs/reliability.md maps each guarantee to its tests, here and in
test_fuzz.py, test_errors.py, test_device.py and test_export.py.

The tests of 10^6-line sequences are marked slow; they run from
tests/benchmarks/big_sequence.py, which prints their figures.
"""

from __future__ import annotations

import ast
import functools
import json
import os
import signal
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
import pytest

from compiler import compile, limits, load
from compiler.cli import main
from compiler.errors import SequenceError, DotseqError
from compiler.export import read_bundle
from conftest import ROOT, SEQUENCES

# ---------------------------------------------------------------- helpers

BIG_SEQUENCE_HEAD = "# generated: waits and frame rotations on dot A\n"


def write_long_sequence(path: Path, n_lines: int) -> Path:
    """``n_lines`` short steps (a 1 ns wait on A, a 1 deg z rotation of A,
    alternately), written in pieces (no 10^6-element list in memory)."""
    with open(path, "w", encoding="utf-8") as f:
        f.write(BIG_SEQUENCE_HEAD)
        chunk = "wait 1 ns on A\nrot A z 1 deg\n" * 5000
        full, rest = divmod(n_lines, 10_000)
        for _ in range(full):
            f.write(chunk)
        f.write(("wait 1 ns on A\nrot A z 1 deg\n" * (rest // 2 + 1))[:len("wait 1 ns on A\n") * rest])
    return path


_PEAK_TAG = "dotseq-test-peak-rss-kB"
_CHILD_MAIN = f"""
import sys
from compiler.cli import main
code = main(sys.argv[1:])
try:    # VmHWM: the peak of this process image only (ru_maxrss would include the parent's)
    with open("/proc/self/status") as f:
        peak = next(line.split()[1] for line in f if line.startswith("VmHWM:"))
    sys.stderr.write("\\n{_PEAK_TAG} " + peak + "\\n")
except (OSError, StopIteration):
    pass
sys.exit(code)
"""


def run_cli(args, cwd=ROOT, timeout: float = 900) -> tuple[int, str, str, int, float]:
    """Run ``dotseq ARGS`` in a child process: exit code, stdout, stderr, the
    child's own peak resident memory (bytes; VmHWM from /proc, else the
    wait4 figure) and wall time (s)."""
    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        t0 = time.perf_counter()
        child = subprocess.Popen([sys.executable, "-c", _CHILD_MAIN, *map(str, args)], cwd=cwd,
                                 stdout=out, stderr=err)
        timer = threading.Timer(timeout, child.kill)
        timer.start()
        try:
            _, status, usage = os.wait4(child.pid, 0)
        finally:
            timer.cancel()
        child.returncode = os.waitstatus_to_exitcode(status)
        seconds = time.perf_counter() - t0
        out.seek(0)
        err.seek(0)
        stderr = err.read().decode("utf-8", "replace")
        peak = usage.ru_maxrss * 1024
        head, tag, tail = stderr.rpartition(f"\n{_PEAK_TAG} ")
        if tag:
            stderr, peak = head, int(tail.split()[0]) * 1024
        return child.returncode, out.read().decode("utf-8", "replace"), stderr, peak, seconds


@functools.lru_cache(maxsize=1)
def baseline_rss() -> int:
    """Peak resident memory of dotseq checking a one-line file: the
    interpreter with numpy and scipy loaded, before any real work."""
    with tempfile.TemporaryDirectory() as d:
        f = Path(d) / "one.dotseq"
        f.write_text("wait 1 ns\n", encoding="utf-8")
        code, _, err, rss, _ = run_cli(["check", f])
        assert code == 0, err
        return rss


def estimate(path: Path, n_steps: int, n_samples: int, n_outputs: int = 7) -> int:
    """What limits.py charges for compiling a file (bytes)."""
    return (path.stat().st_size * limits.BYTES_PER_SOURCE_CHAR + n_steps * limits.BYTES_PER_STEP
            + n_samples * n_outputs * limits.BYTES_PER_OUTPUT_SAMPLE)


def cli(capsys, *args) -> tuple[int, str, str]:
    code = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return code, out, err


def no_traceback(text: str) -> None:
    assert "Traceback" not in text and "internal error" not in text, text


# ---------------------------------------------------------------- unreadable input

def _missing(d: Path) -> Path:
    return d / "nowhere.dotseq"


def _folder(d: Path) -> Path:
    (d / "folder.dotseq").mkdir()
    return d / "folder.dotseq"


def _binary(d: Path) -> Path:
    p = d / "image.dotseq"
    p.write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR\xff\xfe")
    return p


def _empty(d: Path) -> Path:
    p = d / "empty.dotseq"
    p.write_bytes(b"")
    return p


def _comments(d: Path) -> Path:
    p = d / "comments.dotseq"
    p.write_text("# a header and nothing else\n\n   \n", encoding="utf-8")
    return p


def _huge(d: Path) -> Path:
    p = d / "huge.dotseq"
    with open(p, "wb") as f:          # sparse: 60 MB on paper, nothing on disk
        f.seek(60_000_000)
        f.write(b"\n")
    return p


BAD_SEQUENCE_FILES = [
    pytest.param(_missing, "no such file", id="missing"),
    pytest.param(_folder, "it is a directory", id="directory"),
    pytest.param(_binary, "not UTF-8 text", id="binary"),
    pytest.param(_empty, "holds no statements (it is empty)", id="empty"),
    pytest.param(_comments, "holds no statements (only comments)", id="comments-only"),
    pytest.param(_huge, "characters", id="huge"),
]


@pytest.mark.parametrize("make, fragment", BAD_SEQUENCE_FILES)
@pytest.mark.parametrize("command", ["check", "compile"])
def test_unreadable_sequence_file_is_named_with_exit_2(make, fragment, command, tmp_path, capsys):
    path = make(tmp_path)
    args = [command, path] + (["-o", tmp_path / "out"] if command == "compile" else [])
    code, out, err = cli(capsys, *args)
    assert code == 2, err
    assert str(path) in err and fragment in err, err
    no_traceback(err)
    assert not (tmp_path / "out").exists()


BAD_DEVICE_FILES = [
    pytest.param(lambda d: d / "nowhere.yaml", "no such file", id="missing"),
    pytest.param(lambda d: _folder(d), "it is a directory", id="directory"),
    pytest.param(_binary, "not UTF-8", id="binary"),
    pytest.param(_empty, "the device file is empty", id="empty"),
    pytest.param(_huge, "at most 1,000,000 characters", id="huge"),
    pytest.param(lambda d: _text(d, "name: [unclosed\n"), "YAML syntax error", id="bad-yaml"),
    pytest.param(lambda d: _text(d, "- a\n- b\n"), "must be a mapping", id="a-list"),
]


def _text(d: Path, text: str) -> Path:
    p = d / "dev.yaml"
    p.write_text(text, encoding="utf-8")
    return p


@pytest.mark.parametrize("make, fragment", BAD_DEVICE_FILES)
def test_unreadable_device_file_is_named_with_exit_2(make, fragment, tmp_path, capsys):
    path = make(tmp_path)
    code, _, err = cli(capsys, "check", SEQUENCES / "cnot_pair.dotseq", "--device", path)
    assert code == 2, err
    assert str(path) in err and fragment in err, err
    no_traceback(err)


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() == 0,
                    reason="root reads files whatever their permissions")
def test_file_without_read_permission(tmp_path, capsys):
    seq = tmp_path / "locked.dotseq"
    seq.write_text("wait 1 ns\n", encoding="utf-8")
    dev = tmp_path / "locked.yaml"
    dev.write_text("name: x\n", encoding="utf-8")
    seq.chmod(0)
    dev.chmod(0)
    try:
        for args, path in ((["check", seq], seq),
                           (["check", SEQUENCES / "cnot_pair.dotseq", "--device", dev], dev)):
            code, _, err = cli(capsys, *args)
            assert code == 2 and str(path) in err and "ermission" in err, err
            no_traceback(err)
    finally:
        seq.chmod(0o600)
        dev.chmod(0o600)


def test_read_permission_error_is_reported(tmp_path, capsys, monkeypatch):
    """The same as above for any user (root included): the operating system
    refuses the read."""
    seq = tmp_path / "locked.dotseq"
    seq.write_text("wait 1 ns\n", encoding="utf-8")
    dev = tmp_path / "locked.yaml"
    dev.write_text("name: x\n", encoding="utf-8")
    real_open = os.open

    def refuse(path, *a, **k):      # every user file is opened by compiler.source
        if Path(path).name.startswith("locked"):
            raise PermissionError(13, "Permission denied", str(path))
        return real_open(path, *a, **k)

    monkeypatch.setattr(os, "open", refuse)
    for args, path in ((["check", seq], seq),
                       (["check", SEQUENCES / "cnot_pair.dotseq", "--device", dev], dev)):
        code, _, err = cli(capsys, *args)
        assert code == 2 and str(path) in err and "Permission denied" in err, err
        no_traceback(err)


def test_huge_single_line(tmp_path, capsys):
    """20 000 statements on one line compile; a mistake on such a line is
    shown as a window around the caret, not the whole line."""
    good = tmp_path / "oneline.dotseq"
    good.write_text("wait 1 ns on A; rot A z 1 deg; " * 10_000 + "\n", encoding="utf-8")
    code, out, err = cli(capsys, "check", good)
    assert code == 0, err
    assert "zrot 10000, wait 10000" in out
    bad = tmp_path / "badline.dotseq"
    bad.write_text("wait 1 ns on A " * 20_000 + "\n", encoding="utf-8")
    code, _, err = cli(capsys, "check", bad)
    assert code == 2 and f"{bad}:1:16: error: unexpected 'wait' after the statement" in err
    no_traceback(err)
    assert len(err) < 2000                                 # not the 300 kB line
    assert "    wait 1 ns on A wait" in err and err.count("...") >= 1
    code, out, _ = cli(capsys, "check", bad, "--json")
    problem = json.loads(out)["errors"][0]
    assert code == 2 and problem["line"] == 1 and problem["column"] == 16
    assert problem["text"] == "wait" and len(problem["source"] if "source" in problem else "") < 500


def test_huge_line_json_text_is_clipped(tmp_path):
    from compiler.errors import MAX_TEXT_SHOWN, Problem, Span
    line = "x" * 100_000
    p = Problem("m", Span("f", 1, 1, 1, 100_001), "", line)
    assert len(p.to_dict()["text"]) == MAX_TEXT_SHOWN + 3
    assert len(p.render()) < 500


# ---------------------------------------------------------------- memory guard

N_DEFAULT_LINES = 100_000      # the 10^6-line version is slow: big_sequence.py


@pytest.fixture(scope="module")
def long_file(tmp_path_factory):
    return write_long_sequence(tmp_path_factory.mktemp("long") / "long.dotseq", N_DEFAULT_LINES)


def check_compiles_within_the_estimate(path: Path, n_lines: int, out: Path) -> dict:
    """Compile ``path`` (n_lines of 1 ns waits and z rotations) with the
    default limit: a verified bundle, and the peak memory above the
    interpreter's own stays below what limits.py estimated."""
    code, stdout, err, rss, seconds = run_cli(["compile", path, "-o", out])
    assert code == 0, err[-3000:]
    b = read_bundle(out)                                   # every checksum verified
    run = b["manifest"]["runs"][0]
    n_samples = n_lines // 2                               # 1 ns per wait at 1 GS/s
    assert run["n_samples"] == n_samples
    assert len(run["steps"]) == n_lines
    need = estimate(path, n_lines, n_samples)
    extra = rss - baseline_rss()
    assert extra < need, (extra, need)
    return {"lines": n_lines, "exit": code, "seconds": round(seconds, 1),
            "peak_rss_MiB": round(rss / 2**20, 1), "above_interpreter_MiB": round(extra / 2**20, 1),
            "estimate_MiB": round(need / 2**20, 1), "limit_MiB": round(limits.default_limit() / 2**20)}


def check_refused_below_a_small_limit(path: Path, out: Path, limit: str = "20MB") -> dict:
    """With --memory-limit far below what the file needs: exit 2 before the
    memory is taken, the estimate and the flag in the message, nothing
    written, and the peak memory within the limit (above the interpreter)."""
    code, stdout, err, rss, seconds = run_cli(["compile", path, "-o", out, "--memory-limit", limit])
    assert code == 2, (code, err[-3000:])
    no_traceback(err)
    assert str(path) in err and "would need about" in err and "--memory-limit" in err, err
    assert len(err.splitlines()) < 10
    assert not out.exists()
    extra = rss - baseline_rss()
    assert extra < limits.parse_size(limit, "--memory-limit"), extra
    return {"exit": code, "seconds": round(seconds, 1), "peak_rss_MiB": round(rss / 2**20, 1),
            "above_interpreter_MiB": round(extra / 2**20, 1), "message": err.splitlines()[0]}


def check_refused_at_the_step_budget(path: Path, n_lines: int, out: Path,
                                     limit: str) -> dict:
    """A limit the text fits in but the steps do not: the parse goes
    through, expansion stops at the step budget (exit 2, the estimate and
    the flag), and the peak memory stays within the limit."""
    memory = limits.parse_size(limit, "--memory-limit")
    budget = limits.budget(memory)
    assert path.stat().st_size * limits.BYTES_PER_SOURCE_CHAR < memory < n_lines * limits.BYTES_PER_STEP
    code, stdout, err, rss, seconds = run_cli(["compile", path, "-o", out, "--memory-limit", limit])
    assert code == 2, (code, err[-3000:])
    no_traceback(err)
    assert f"more than {budget.steps:,} steps" in err and "--memory-limit" in err, err
    assert not out.exists()
    extra = rss - baseline_rss()
    assert extra < memory, (extra, memory)
    return {"exit": code, "seconds": round(seconds, 1), "peak_rss_MiB": round(rss / 2**20, 1),
            "above_interpreter_MiB": round(extra / 2**20, 1), "message": err.splitlines()[0]}


@pytest.mark.slow      # 16 s: the default suite was at 4m40s-4m56s of its 5 min on 2 cores
def test_100k_lines_compile_within_the_estimated_memory(long_file, tmp_path):
    check_compiles_within_the_estimate(long_file, N_DEFAULT_LINES, tmp_path / "bundle")


def test_100k_lines_refused_below_a_small_memory_limit(long_file, tmp_path):
    check_refused_below_a_small_limit(long_file, tmp_path / "bundle")


@pytest.mark.slow
def test_million_lines_compile_within_the_estimated_memory(tmp_path):
    path = write_long_sequence(tmp_path / "million.dotseq", 1_000_000)
    check_compiles_within_the_estimate(path, 1_000_000, tmp_path / "bundle")


@pytest.mark.slow
def test_million_lines_refused_below_a_small_memory_limit(tmp_path):
    path = write_long_sequence(tmp_path / "million.dotseq", 1_000_000)
    check_refused_below_a_small_limit(path, tmp_path / "bundle")
    check_refused_at_the_step_budget(path, 1_000_000, tmp_path / "bundle", "1200MB")


@pytest.mark.parametrize("command, out", [("compile", "b"), ("preview", "p.png"),
                                          ("simulate", "r"), ("run", "all")])
def test_every_command_honours_the_memory_limit(command, out, tmp_path, capsys):
    path = write_long_sequence(tmp_path / "l.dotseq", 2000)      # 29 kB: about 1.5 MB to parse
    code, _, err = cli(capsys, command, path, "-o", tmp_path / out, "--memory-limit", "1MB")
    assert code == 2 and "would need about" in err and "--memory-limit" in err, err
    assert not (tmp_path / out).exists()
    no_traceback(err)


def test_step_budget_stops_expansion_early(tmp_path):
    """Text that fits but steps that do not: expansion stops at the budget,
    once, at the line that passes it."""
    path = write_long_sequence(tmp_path / "l.dotseq", 20_000)
    memory = 25 * 2**20
    budget = limits.budget(memory)
    assert path.stat().st_size * limits.BYTES_PER_SOURCE_CHAR < memory < 20_000 * limits.BYTES_PER_STEP
    with pytest.raises(SequenceError) as info:
        load(path, memory_limit=memory)
    assert len(info.value.problems) == 1
    p = info.value.first
    assert f"more than {budget.steps:,} steps" in p.message
    assert p.span.line == budget.steps + 2                  # header line, then one step a line
    assert "--memory-limit" in p.hint and "25 MiB" in p.hint


def test_sweep_times_repeat_is_refused_before_scheduling(tmp_path, capsys):
    """1000 sweep points of a million steps each were 10^9 steps: the runs
    are counted while they are expanded and refused at the budget."""
    path = tmp_path / "sweep.dotseq"
    path.write_text("sweep t from 1 ns to 2 ns in 1000\nrepeat 1000000 { wait t on A }\n",
                    encoding="utf-8")
    t0 = time.perf_counter()
    code, _, err = cli(capsys, "compile", path, "-o", tmp_path / "b", "--memory-limit", "4GiB")
    assert code == 2 and "steps" in err and "--memory-limit" in err, err
    assert f"{path}:1:1:" in err                             # at the sweep that multiplies the runs
    assert time.perf_counter() - t0 < 60
    no_traceback(err)


def test_long_waits_refused_before_synthesis(tmp_path, capsys):
    path = tmp_path / "long_wait.dotseq"
    path.write_text("rot A x 90 deg\nwait 5 ms\nread A\n", encoding="utf-8")
    code, _, err = cli(capsys, "compile", path, "-o", tmp_path / "b", "--memory-limit", "100MB")
    assert code == 2, err
    assert f"{path}: error: compiling would need about" in err
    assert "above the limit of 95.4 MiB" in err and "--memory-limit" in err
    assert not (tmp_path / "b").exists()


@pytest.mark.parametrize("text, fragment", [
    ("x", "is not a size"), ("0", "is zero"), ("1e400", "too large"), ("-5MB", "is not a size"),
])
def test_memory_limit_flag_is_checked(text, fragment, tmp_path, capsys):
    code, _, err = cli(capsys, "compile", SEQUENCES / "cnot_pair.dotseq", "-o", tmp_path / "b",
                       f"--memory-limit={text}")
    assert code == 2 and fragment in err and "--memory-limit" in err, err


def test_memory_limit_flag_accepts_what_its_hint_says():
    assert limits.parse_size("1e9", "--memory-limit") == 10**9
    assert limits.parse_size("2GiB", "--memory-limit") == 2 * 2**30
    assert limits.parse_size("500 MB", "--memory-limit") == 500 * 10**6


def test_default_limit_is_half_of_what_is_left(monkeypatch):
    # what is left moves while other processes run: measure it once
    left = limits.available_memory()
    monkeypatch.setattr(limits, "available_memory", lambda: left)
    assert 0 < limits.default_limit() == left // 2
    monkeypatch.undo()
    # a container limit or ulimit -v lower than the machine's memory is respected
    assert limits.available_memory() <= (limits._meminfo_available() or 2**62)


# ---------------------------------------------------------------- the evaluator

def _builtin_code_calls(tree) -> list[int]:
    """Lines calling the builtins eval, exec, compile or __import__: a call by
    that bare name in a module that does not bind the name itself (the
    package's own ``compiler.compile`` is a def or an import, not the builtin)."""
    bound = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.ClassDef)):
            bound.add(node.name)
        elif isinstance(node, ast.ImportFrom) and (
                node.level > 0 or (node.module or "").split(".")[0] == "compiler"):
            bound.update(a.asname or a.name for a in node.names)
    return [node.lineno for node in ast.walk(tree)
            if isinstance(node, ast.Call) and isinstance(node.func, ast.Name)
            and node.func.id in ("eval", "exec", "compile", "__import__")
            and node.func.id not in bound]


def test_compiler_never_calls_eval_or_exec():
    """The expression evaluator walks the tree itself: no eval, exec,
    compile or __import__ anywhere in the package."""
    found = []
    for path in sorted((ROOT / "compiler").rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"), str(path))
        found += [f"{path.relative_to(ROOT)}:{line}" for line in _builtin_code_calls(tree)]
    assert not found, found
    # the scan itself: the builtin is found, the package's own compile is not
    assert _builtin_code_calls(ast.parse("x = compile('1', 'f', 'eval')\neval(x)\n")) == [1, 2]
    assert _builtin_code_calls(ast.parse("from . import compile\ncompile(checked)\n")) == []
    assert _builtin_code_calls(ast.parse("def compile(c): pass\ncompile(checked)\n")) == []
    assert _builtin_code_calls(ast.parse("from os import compile\ncompile(x)\n")) == [2]


@pytest.mark.parametrize("src", [
    "let x = pi.__class__", "let x = sin.__globals__", 'let x = "a".join', "let x = __import__(1)",
    "let x = (lambda: 1)", "let x = [1 ns][0]", "let x = 9 ** 9 ** 9 ** 9", "let x = 2 ^ 1001",
    "let x = 10 ^ 400", "let x = exp(1000)", "let x = " + "(" * 70 + "1" + ")" * 70,
])
def test_expressions_cannot_escape_or_hang(src):
    from compiler.expand import expand
    from compiler.parse import parse_text
    t0 = time.perf_counter()
    with pytest.raises(DotseqError) as info:
        expand(parse_text(src + "\nwait 1 ns\n", "e.dotseq"))
    assert info.value.first.span.line == 1
    assert time.perf_counter() - t0 < 5


# ---------------------------------------------------------------- determinism

def _clear_caches() -> None:
    """Forget every memoised pulse design and waveform piece, so a second
    run computes everything again."""
    import compiler.device.exchange as exchange
    import compiler.pulses as pulses
    import compiler.synth.render as render
    for mod in (pulses, exchange, render):
        for obj in vars(mod).values():
            if hasattr(obj, "cache_clear"):
                obj.cache_clear()


def test_simulation_is_the_same_run_to_run(tmp_path):
    """No unseeded randomness: the quasi-static noise is integrated by
    quadrature, so two simulations give the same numbers exactly."""
    from compiler.simulate import SimOptions, simulate
    seq = tmp_path / "s.dotseq"
    # the spin-1/2 test pair (the bundled pair is four-level: a run of it costs a minute)
    pair = Path(__file__).parent / "data" / "spin_half_pair.yaml"
    seq.write_text(f'device "{pair}"\nprepare A B up\nrot A x 90 deg\nwait 10 ns\n',
                   encoding="utf-8")
    # two quadrature nodes per noise variable: the noise integration is exercised, cheaply
    opts = SimOptions(budget=False, steps=False, nodes=2, substeps=1, quadrature="additive",
                      averaging_tolerance=0.1)
    results = []
    for _ in range(2):
        _clear_caches()
        results.append(simulate(compile(load(seq)), opts))
    a, b = results
    assert len(a.runs) == len(b.runs) == 1
    ra, rb = a.runs[0], b.runs[0]
    assert (ra.process_fidelity, ra.average_fidelity, ra.state_fidelity) == \
           (rb.process_fidelity, rb.average_fidelity, rb.state_fidelity)
    assert ra.populations == rb.populations
    assert sorted(ra.traces) == sorted(rb.traces)
    for k in ra.traces:
        np.testing.assert_array_equal(ra.traces[k], rb.traces[k])
    assert (a.coherence, a.warnings, a.settings) == (b.coherence, b.warnings, b.settings)
    assert 0.5 < ra.process_fidelity < 1.0


SIM_ARGS = ["--json", "--no-budget", "--no-steps", "--nodes", "3", "--substeps", "1",
            "--averaging-tolerance", "0.1"]


def simulate_in_a_child(seq: Path, out: Path, hash_seed: str) -> dict:
    """``dotseq simulate --json`` in a fresh interpreter with its own string
    hash seed (set and dict order of names could differ between processes)."""
    env = dict(os.environ, PYTHONHASHSEED=hash_seed)
    r = subprocess.run([sys.executable, "-m", "compiler", "simulate", str(seq), "-o", str(out),
                        *SIM_ARGS], cwd=ROOT, capture_output=True, text=True, env=env,
                       timeout=900)
    assert r.returncode == 0, r.stderr[-3000:]
    result = json.loads(r.stdout)["result"]
    result.pop("stats")                                   # wall times
    for run in result["runs"]:
        run.pop("stats")
    return result


@pytest.mark.slow
def test_simulation_is_the_same_in_two_processes(tmp_path):
    seq = tmp_path / "s.dotseq"
    seq.write_text("prepare A B up\nrot A x 90 deg\nsqrtswap A B\nwait 10 ns\n",
                   encoding="utf-8")
    a = simulate_in_a_child(seq, tmp_path / "a", "1")
    b = simulate_in_a_child(seq, tmp_path / "b", "2")
    assert a == b


# ---------------------------------------------------------------- atomic report

_REPORT_CHILD = r"""
import sys, time
sys.path.insert(0, {tests!r})
from test_report import make_result
from compiler.report import figures, write
real = figures.save_png
def slow(fig, path):
    real(fig, path)
    print("figure", flush=True)
    time.sleep(30)            # a slow disk: the parent kills us here
figures.save_png = slow
write.write_report(make_result("sweep1"), {target!r})
print("done", flush=True)
"""


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs POSIX signals")
def test_killed_report_write_leaves_previous_report_intact(tmp_path, monkeypatch):
    from compiler.report import figures as figures_mod
    from compiler.report import write_report
    from compiler.report.write import tidy
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from test_report import make_result
    monkeypatch.setattr(figures_mod, "planned", lambda result: ())
    target = write_report(make_result("single"), tmp_path / "report")
    before = {p.name: p.read_bytes() for p in target.iterdir()}
    code = _REPORT_CHILD.format(tests=str(Path(__file__).resolve().parent), target=str(target))
    child = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, cwd=str(tmp_path))
    try:
        line = child.stdout.readline()                    # one figure is in the temporary folder
        assert line == b"figure\n", child.stderr.read()
        partial = [p for p in tmp_path.iterdir() if p.name.startswith(".report.partial-")]
        assert len(partial) == 1 and any(partial[0].iterdir())
        os.kill(child.pid, signal.SIGKILL)
        child.wait(timeout=30)
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
    assert child.returncode == -signal.SIGKILL
    # the previous report is untouched; the half-written one is not at the target
    assert {p.name: p.read_bytes() for p in target.iterdir()} == before
    assert partial[0].exists()
    # the next write (or tidy) removes what the dead writer left
    assert any("unfinished" in a for a in tidy(target))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report"]


# ---------------------------------------------------------------- bounded refusals (issue 12)

JUNK_LINE_BYTES = 8_000_000     # the 48 MB line of the report: tests/benchmarks/refusals.py


def refuse_junk_line(path: Path, n_bytes: int, junk: str = "@ ") -> dict:
    """A single line of ``junk`` repeated to ``n_bytes``, checked by a child
    process: exit code, the first error, the count of the rest, time and
    peak memory above the interpreter."""
    with open(path, "w", encoding="utf-8") as f:
        chunk = junk * (1_000_000 // len(junk))
        for _ in range(n_bytes // len(chunk)):
            f.write(chunk)
        f.write("\n")
    code, _, err, rss, seconds = run_cli(["check", path])
    no_traceback(err)
    return {"exit": code, "err": err, "seconds": round(seconds, 2),
            "peak_rss_MiB": round(rss / 2**20, 1),
            "above_interpreter_MiB": round((rss - baseline_rss()) / 2**20, 1)}


@pytest.mark.parametrize("junk", ["@ ", "x "])
def test_a_long_junk_line_is_refused_in_bounded_memory(junk, tmp_path):
    """An 8 MB line of junk tokens: the first errors shown, the rest
    counted; the peak memory is what the text itself takes (the line and
    its copy in the error display), not a problem or token per junk word."""
    r = refuse_junk_line(tmp_path / "junk.dotseq", JUNK_LINE_BYTES, junk)
    assert r["exit"] == 2
    assert f"{tmp_path / 'junk.dotseq'}:1:1: error:" in r["err"]
    if junk == "@ ":
        assert "unexpected character '@'" in r["err"] and "... and 1 more syntax error" in r["err"]
    assert len(r["err"]) < 20_000
    assert r["above_interpreter_MiB"] < 8 * JUNK_LINE_BYTES / 2**20, r
    assert r["seconds"] < 60, r          # generous: a loaded 2-core machine


def test_block_fan_out_refused_at_once(tmp_path):
    """60 blocks each calling the previous twice (2^59 rotations): refused
    by the estimate before any unrolling."""
    lines = ["block b0(q) { rot q x 90 deg }"]
    lines += [f"block b{k}(q) {{ do b{k - 1}(q) ; do b{k - 1}(q) }}" for k in range(1, 60)]
    path = tmp_path / "fan.dotseq"
    path.write_text("\n".join(lines + ["do b59(A)"]) + "\n", encoding="utf-8")
    t0 = time.perf_counter()
    with pytest.raises(SequenceError) as info:
        load(path)
    assert time.perf_counter() - t0 < 5
    p = info.value.first
    assert p.span.line == 61 and "unrolls to at least" in p.message and "steps" in p.hint + p.message
