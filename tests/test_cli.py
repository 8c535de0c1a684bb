"""The `dotseq` command as a user meets it: output, exit codes, no tracebacks."""

import json
import subprocess
import sys

import pytest

from compiler.cli import main
from compiler.steps import KINDS
from conftest import ROOT, SEQUENCES


def dotseq(*args, cwd=ROOT):
    r = subprocess.run([sys.executable, "-m", "compiler", *map(str, args)], cwd=cwd,
                       capture_output=True, text=True, timeout=120)
    return r.returncode, r.stdout, r.stderr


def test_check_demo_prints_the_summary():
    code, out, err = dotseq("check", "sequences/ramsey_pair.dotseq")
    assert code == 0, err
    for fragment in ("qubits", "Larmor", "GHz", "runs      11", "duration", "steps", "rot 4",
                     "longest", "coherence", "rule of thumb"):
        assert fragment in out
    assert "Traceback" not in err


def test_check_json():
    code, out, _ = dotseq("check", "sequences/ramsey_pair.dotseq", "--json")
    assert code == 0
    d = json.loads(out)
    assert d["ok"] and d["runs"] == 11
    assert {q["name"] for q in d["qubits"]} == {"A", "B"}
    assert d["step_counts"]["rot"] == {"min": 4, "max": 4}
    assert d["coherence_margin"] and all(m["ratio"] > 0 for m in d["coherence_margin"])


def test_bad_sequence_exit_2_with_position(tmp_path):
    f = tmp_path / "bad.dotseq"
    f.write_text("prepare A B down\nrot A x 90 dgr\n")
    code, out, err = dotseq("check", f)
    assert code == 2
    assert f"{f}:2:12: error: unknown unit 'dgr'" in err
    assert "did you mean 'deg'" in err
    assert "Traceback" not in err and out == ""


def test_bad_sequence_json(tmp_path):
    f = tmp_path / "bad.dotseq"
    f.write_text("rot Q x 90 deg\n")
    code, out, _ = dotseq("check", f, "--json")
    assert code == 2
    d = json.loads(out)
    assert d["ok"] is False and d["stage"] == "check"
    e = d["errors"][0]
    assert (e["line"], e["column"], e["text"]) == (1, 5, "Q")
    assert "unknown qubit 'Q'" in e["message"]


def test_unknown_qubit_did_you_mean(tmp_path):
    f = tmp_path / "q.dotseq"
    f.write_text('device "dev.yaml"\nrot Alpha x 90 deg\n')
    (tmp_path / "dev.yaml").write_text((SEQUENCES / "devices" / "demo_pair.yaml").read_text()
                                       .replace("  A:\n", "  Alfa:\n").replace("[A, B]", "[Alfa, B]"))
    code, _, err = dotseq("check", f)
    assert code == 2 and "did you mean 'Alfa'" in err, err


def test_uncoupled_pair_is_refused(tmp_path):
    f = tmp_path / "u.dotseq"
    f.write_text('device "%s"\nsqrtswap A D\n' % (SEQUENCES / "devices" / "demo_ribbon.yaml"))
    code, _, err = dotseq("check", f)
    assert code == 2 and "not coupled" in err and "A is coupled to:" in err


@pytest.mark.parametrize("args, fragment", [
    pytest.param([], "no command given", id="no-command"),
    pytest.param(["chek", "x"], "invalid choice", id="bad-command"),
    pytest.param(["check"], "required: file", id="missing-file"),
    pytest.param(["check", "nowhere.dotseq"], "cannot read sequence file 'nowhere.dotseq'", id="missing-path"),
    pytest.param(["check", "sequences/ramsey_pair.dotseq", "--devise", "x"], "unrecognized", id="bad-flag"),
    pytest.param(["check", "sequences/ramsey_pair.dotseq", "--device", "none.yaml"], "none.yaml", id="missing-device"),
    pytest.param(["check", "sequences"], "directory", id="directory"),
])
def test_usage_errors(args, fragment, capsys):
    code = main(args)
    err = capsys.readouterr().err
    assert code == 2
    assert fragment in err
    assert "Traceback" not in err


def test_version(capsys):
    with pytest.raises(SystemExit) as info:
        main(["--version"])
    assert info.value.code == 0
    assert "dotseq" in capsys.readouterr().out


# ---------------------------------------------------------------- compile and preview

def test_compile_writes_a_verified_bundle(tmp_path):
    from compiler.export import read_bundle
    out = tmp_path / "bundle"
    code, stdout, err = dotseq("compile", "sequences/cnot_pair.dotseq", "-o", out)
    assert code == 0, err
    assert "Caution" in stdout and "mw.I" in stdout
    b = read_bundle(out)                      # verifies every checksum
    m = b["manifest"]
    assert m["sample_rate_Hz"] == 1e9 and m["n_runs"] == 1
    kinds = [s["kind"] for s in m["runs"][0]["steps"]]
    assert "sqrtswap" in kinds and "read" in kinds


@pytest.mark.parametrize("flags", [[], ["--full"], ["--stack"]], ids=["segments", "full", "stack"])
def test_compile_layouts_and_the_mixer_correction_flag(tmp_path, flags, capsys):
    """dotseq compile writes segments by default (--full: per-run arrays);
    with a mixer calibration the I output carries −offset_i, and
    --no-mixer-correction plays the uncorrected 0 V (issue 19)."""
    from compiler.export import read_bundle
    dev = (SEQUENCES / "devices" / "demo_single.yaml").read_text(encoding="utf-8")
    dev = dev.replace("if_band: [-250 MHz, 250 MHz]}",
                      "if_band: [-250 MHz, 250 MHz], mixer: {offset_i: 5 mV}}")
    (tmp_path / "d.yaml").write_text(dev, encoding="utf-8")
    seq = tmp_path / "s.dotseq"
    seq.write_text('device "d.yaml"\nrot A x 90 deg\nread A\n', encoding="utf-8")
    for extra, want in (([], -0.005), (["--no-mixer-correction"], 0.0)):
        out = tmp_path / ("b" + "".join(extra))
        assert main(["compile", str(seq), "-o", str(out)] + flags + extra) == 0
        b = read_bundle(out)
        m = b["manifest"]
        assert m["layout"] == {"--full": "per-run", "--stack": "stacked"}.get(
            (flags or [""])[0], "segments")
        assert m["source"]["mixer_correction"] is (not extra)
        assert b["runs"][0]["volts"]["mw.I"][-1] == pytest.approx(want, abs=1e-4)
    capsys.readouterr()


def test_compile_twice_is_byte_identical(tmp_path):
    for d in ("a", "b"):
        code, _, err = dotseq("compile", "sequences/ramsey_pair.dotseq", "-o", tmp_path / d, "--stack")
        assert code == 0, err
    files_a = sorted(p.relative_to(tmp_path / "a") for p in (tmp_path / "a").rglob("*") if p.is_file())
    files_b = sorted(p.relative_to(tmp_path / "b") for p in (tmp_path / "b").rglob("*") if p.is_file())
    assert files_a == files_b
    for f in files_a:
        assert (tmp_path / "a" / f).read_bytes() == (tmp_path / "b" / f).read_bytes(), f


def test_preview_draws_a_png(tmp_path):
    out = tmp_path / "p.png"
    code, stdout, err = dotseq("preview", "sequences/ramsey_pair.dotseq", "-o", out, "--run", "3",
                              "--from", "100 ns", "--to", "1.2 us")
    assert code == 0, err
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize("args, fragment", [
    pytest.param(["preview", "sequences/cnot_pair.dotseq", "-o", "x.png", "--run", "5"], "--run 5 does not exist", id="bad-run"),
    pytest.param(["preview", "sequences/cnot_pair.dotseq", "-o", "x.png", "--from", "12"], "needs a unit", id="unitless-time"),
    pytest.param(["preview", "sequences/cnot_pair.dotseq", "-o", "x.gif"], ".gif", id="bad-suffix"),
    pytest.param(["compile", "sequences/cnot_pair.dotseq", "-o", "o", "--memory-limit", "1kB"], "--memory-limit", id="memory-guard"),
    pytest.param(["compile", "sequences/cnot_pair.dotseq", "-o", "o", "--memory-limit", "lots"], "is not a size", id="bad-size"),
    pytest.param(["compile", "sequences/cnot_pair.dotseq"], "required: -o", id="missing-out"),
])
def test_compile_and_preview_usage_errors(args, fragment, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(ROOT)
    args = [str(tmp_path / a) if a in ("x.png", "x.gif", "o") else a for a in args]
    code = main(args)
    err = capsys.readouterr().err
    assert code == 2, err
    assert fragment in err
    assert "Traceback" not in err
    assert not (tmp_path / "o").exists()


def test_simulate_writes_a_report(tmp_path):
    out = tmp_path / "deep" / "report"
    code, stdout, err = dotseq("simulate", "sequences/cnot_pair.dotseq", "-o", out, "--nodes", "1",
                              "--no-budget")
    assert code == 0, err
    assert "average gate fidelity" in stdout and "steps" in stdout
    assert (out / "report.md").exists() and (out / "results.json").exists()


def test_run_does_the_whole_job(tmp_path):
    out = tmp_path / "all"
    code, stdout, err = dotseq("run", "sequences/cnot_pair.dotseq", "-o", out, "--nodes", "1",
                              "--no-budget", "--no-steps")
    assert code == 0, err
    assert (out / "bundle" / "manifest.json").exists()
    assert (out / "preview.png").exists()
    assert (out / "report" / "report.md").exists()
    assert "Caution" in stdout and "Larmor" in stdout


def test_run_loads_and_compiles_once(tmp_path, monkeypatch, capsys):
    # dotseq run parses, checks and schedules the file once and synthesises it
    # once; export, preview and simulation take the same compiled runs, so what
    # is simulated is what is exported (common practice, no source)
    import compiler.cli as CLI
    import compiler.export
    import compiler.simulate
    from compiler.schedule import timeline as TL
    monkeypatch.chdir(ROOT)
    n_runs = len(CLI.load("sequences/cnot_pair.dotseq").timelines)
    calls = {"load": 0, "compile": 0, "schedule": 0}
    seen = {}

    def counted(name, fn):
        def wrapper(*a, **k):
            calls[name] += 1
            return fn(*a, **k)
        return wrapper
    monkeypatch.setattr(CLI, "load", counted("load", CLI.load))
    monkeypatch.setattr(CLI, "compile", counted("compile", CLI.compile))
    monkeypatch.setattr(TL._Scheduler, "schedule", counted("schedule", TL._Scheduler.schedule))
    real_bundle, real_sim = compiler.export.write_bundle, compiler.simulate.simulate

    def bundle(wfs, *a, **k):
        seen["exported"] = wfs
        return real_bundle(wfs, *a, **k)

    def sim(compiled, *a, **k):
        seen["simulated"] = compiled.waveforms
        return real_sim(compiled, *a, **k)
    monkeypatch.setattr(compiler.export, "write_bundle", bundle)
    monkeypatch.setattr(compiler.simulate, "simulate", sim)
    code = main(["run", "sequences/cnot_pair.dotseq", "-o", str(tmp_path / "all"), "--nodes", "1",
                 "--no-budget", "--no-steps"])
    assert code == 0, capsys.readouterr().err
    assert calls == {"load": 1, "compile": 1, "schedule": n_runs}
    assert len(seen["simulated"]) == n_runs
    assert all(a is b for a, b in zip(seen["exported"], seen["simulated"]))


@pytest.mark.parametrize("args, fragment", [
    pytest.param(["simulate", "sequences/cnot_pair.dotseq", "-o", "r", "--run", "3"], "--run 3 does not exist", id="bad-run"),
    pytest.param(["simulate", "sequences/cnot_pair.dotseq", "-o", "r", "--nodes", "0"], "nodes 0", id="bad-nodes"),
    pytest.param(["simulate", "sequences/cnot_pair.dotseq", "-o", "r", "--no-rwa"], "substeps", id="no-rwa-coarse"),
    pytest.param(["simulate", "sequences/cnot_pair.dotseq", "-o", "r", "--engine", "magic"], "invalid choice", id="bad-engine"),
])
def test_simulate_usage_errors(args, fragment, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(ROOT)
    args = [str(tmp_path / a) if a == "r" else a for a in args]
    code = main(args)
    err = capsys.readouterr().err
    assert code == 2, err
    assert fragment in err and "Traceback" not in err


def test_own_names_in_compiled_demos(tmp_path):
    """The inserted phase wait is written as `phasewait`, and every step kind
    in the manifest is one the tool defines (common practice, no source)."""
    seen = set()
    for name in ("ramsey_pair", "cnot_pair"):
        code, _, err = dotseq("compile", SEQUENCES / f"{name}.dotseq", "-o", tmp_path / name)
        assert code == 0, err
        m = json.loads((tmp_path / name / "manifest.json").read_text())
        kinds = {s["kind"] for r in m["runs"] for s in r["steps"]}
        assert kinds <= set(KINDS), kinds - set(KINDS)   # only step kinds the tool defines
        seen |= kinds
        assert m["format"] == "dotseq-bundle"
    assert "phasewait" in seen or "zcorrect" in seen


def test_help_names_the_command(capsys):
    with pytest.raises(SystemExit) as e:
        main(["--help"])
    assert e.value.code == 0
    out = capsys.readouterr().out
    assert out.startswith("usage: dotseq")


RUNS_WARNING = """device "{device}"
sweep tau from 0 ns to 2 us in 5
sweep angle over [0.02 deg, 90 deg]
prepare A down
rot A x angle
rot A x 90 deg
wait tau on A
rot A x 90 deg
read A
"""


def test_a_warning_of_many_runs_is_printed_once_with_its_run_count(tmp_path):
    """A burst whose DAC codes lose area in 5 of the 10 runs (those of the
    tiny angle; the same message in each): one warning per position with
    the number of runs, from check, compile and simulate alike (common
    practice, no source)."""
    from compiler import compile as compile_checked, load
    from compiler.simulate import SimOptions, simulate
    f = tmp_path / "tiny.dotseq"
    f.write_text(RUNS_WARNING.format(device=SEQUENCES / "devices" / "demo_single.yaml"))
    tag = f"{f}:5:1: warning: the DAC codes of this burst lose"
    for args in (("check", f), ("compile", f, "-o", tmp_path / "b")):
        code, out, err = dotseq(*args)
        assert code == 0, err
        lines = [l for l in out.splitlines() if "warning:" in l]
        assert len(lines) == 1 and lines[0].startswith(tag), out
        assert lines[0].endswith("(in 5 of 10 runs)")
    code, out, _ = dotseq("compile", f, "-o", tmp_path / "b", "--json")
    assert code == 0 and len(json.loads(out)["warnings"]) == 1
    checked = load(f)
    result = simulate(compile_checked(checked), SimOptions(nodes=1, substeps=1, budget=False,
                                                           steps=False))
    assert len(result.warnings) == 1 and result.warnings[0].startswith(tag)
    assert result.warnings[0].endswith("(in 5 of 10 runs)")


def test_merged_warnings_keep_positions_and_call_chains_apart():
    from compiler.errors import Span
    from compiler.runwarnings import merged
    from compiler.schedule.timeline import Warning_
    a = Span("f.dotseq", 3, 1, 3, 5)
    b = Span("f.dotseq", 4, 1, 4, 5)
    same = Warning_("J is low", a)
    other_call = Warning_("J is low", a, ("in block 'g' called at f.dotseq:9:1",))
    runs = [(same, other_call), (same,), (same, Warning_("J is low", b)), ()]
    out = merged(runs)
    assert out == ("f.dotseq:3:1: warning: J is low (in 3 of 4 runs)",
                   "f.dotseq:3:1: warning: J is low (in 1 of 4 runs)\n"
                   "    in block 'g' called at f.dotseq:9:1",
                   "f.dotseq:4:1: warning: J is low (in 1 of 4 runs)")
    assert merged([(same, same)]) == ("f.dotseq:3:1: warning: J is low",)   # one run: no count
    # one subject (key) at one position, the message differing by run: the worst, said so
    loss = [Warning_(f"loses {p}%", a, (), "quantisation:f.dotseq:3:1", p) for p in (15, 26, 21)]
    assert merged([(w,) for w in loss]) == (
        "f.dotseq:3:1: warning: loses 26% (in 3 of 3 runs; the worst shown)",)


@pytest.mark.parametrize("command, goes", [
    (["sweep", str(SEQUENCES / "ramsey_single.dotseq"), "--vary", "A.t2_star=2us:5us:2"],
     "the sweep goes"),
    (["rb", str(SEQUENCES / "devices" / "demo_single.yaml"), "--qubits", "A"],
     "the simulations go")])
def test_sweep_and_rb_refuse_workers_beside_a_cluster_alike(command, goes, tmp_path, capsys,
                                                           monkeypatch):
    """sweep and rb place their simulations by one rule: --workers beside a
    cluster (given, or from DOTSEQ_CLUSTER, which the message names) and a
    timeout out of range are refused before anything is planned."""
    monkeypatch.setenv("DOTSEQ_CLUSTER", "tcp://127.0.0.1:1")
    args = command + ["-o", str(tmp_path / "out"), "--quiet"]
    assert main(args + ["--workers", "2"]) == 2
    err = capsys.readouterr().err
    assert (f"--workers sets the local worker processes, but {goes} to the Dask cluster "
            "tcp://127.0.0.1:1 (from DOTSEQ_CLUSTER)") in err
    assert main(args + ["--cluster", "local", "--cluster-timeout", "0"]) == 2
    assert "--cluster-timeout 0: give from 0 to 3600 seconds" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()
