"""The `spinc` command as a user meets it: output, exit codes, no tracebacks."""

import json
import subprocess
import sys

import pytest

from compiler.cli import main
from conftest import ROOT, SEQUENCES


def spinc(*args, cwd=ROOT):
    r = subprocess.run([sys.executable, "-m", "compiler", *map(str, args)], cwd=cwd,
                       capture_output=True, text=True, timeout=120)
    return r.returncode, r.stdout, r.stderr


def test_check_demo_prints_the_summary():
    code, out, err = spinc("check", "sequences/ramsey_pair.dotseq")
    assert code == 0, err
    for fragment in ("qubits", "Larmor", "GHz", "runs      21", "duration", "steps", "rot 4",
                     "longest", "coherence", "rule of thumb"):
        assert fragment in out
    assert "Traceback" not in err


def test_check_json():
    code, out, _ = spinc("check", "sequences/ramsey_pair.dotseq", "--json")
    assert code == 0
    d = json.loads(out)
    assert d["ok"] and d["runs"] == 21
    assert {q["name"] for q in d["qubits"]} == {"A", "B"}
    assert d["step_counts"]["rot"] == {"min": 4, "max": 4}
    assert d["coherence_margin"] and all(m["ratio"] > 0 for m in d["coherence_margin"])


def test_bad_sequence_exit_2_with_position(tmp_path):
    f = tmp_path / "bad.dotseq"
    f.write_text("prepare A B down\nrot A x 90 dgr\n")
    code, out, err = spinc("check", f)
    assert code == 2
    assert f"{f}:2:12: error: unknown unit 'dgr'" in err
    assert "did you mean 'deg'" in err
    assert "Traceback" not in err and out == ""


def test_bad_sequence_json(tmp_path):
    f = tmp_path / "bad.dotseq"
    f.write_text("rot Q x 90 deg\n")
    code, out, _ = spinc("check", f, "--json")
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
    code, _, err = spinc("check", f)
    assert code == 2 and "did you mean 'Alfa'" in err, err


def test_uncoupled_pair_is_refused(tmp_path):
    f = tmp_path / "u.dotseq"
    f.write_text('device "%s"\nsqrtswap A D\n' % (SEQUENCES / "devices" / "demo_ribbon.yaml"))
    code, _, err = spinc("check", f)
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
    assert "spinc" in capsys.readouterr().out
