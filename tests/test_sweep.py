"""Parameter sweeps (compiler/sweep, `dotseq sweep`): argument syntax and
names, up-front refusal of bad points, device and sequence overrides, the
Ramsey decay against a published formula, the same numbers serially, on
local worker processes and on a Dask cluster, interruption and resume, lost
workers, the output folder, and the command line."""

import csv
import io
import json
import math
import os
import subprocess
import sys
from types import SimpleNamespace

import pytest

from compiler.device import exchange as xch
from compiler.device import load_device_text
from compiler.errors import ScheduleError, UsageError
from compiler.physics import larmor_frequency
from compiler.simulate.run import SimOptions
from compiler.sweep import SweepError, plan_sweep, run_sweep
from compiler.sweep import params as PR
from compiler.sweep.execute import child_threads
from compiler.sweep.point import THREAD_VARIABLES, evaluate_point
from compiler.sweep.spec import grid_values, split_arg
from compiler.sweep.store import read_state
from conftest import ROOT

import sweep_helpers

FAST = SimOptions(nodes=3, substeps=1)


def device_text(t1="1 s", t2="1 s", t2s="1 us", field="500 mT", extra_dot="", couplings=""):
    f = larmor_frequency(2.0, float(field.split()[0]) * 1e-3)
    return f"""
name: sweep test dot
field: {field}
temperature: 10 mK
rotation: {{mode: duration, shape: square, duration: 20 ns}}
readout: {{marker: M1, duration: 100 ns}}
dots:
  A: {{g: 2.0, t1: {t1}, t2: {t2}, t2_star: {t2s}, drive: {{line: mw, rabi_per_volt: 100 MHz/V}}, plunger: P_A}}
{extra_dot}
channels:
  mw: {{kind: iq, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], lo: {f:.3f} Hz, if_band: [-300 MHz, 300 MHz]}}
  P_A: {{kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}}
  P_B: {{kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}}
  B_AB: {{kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}}
  M1: {{kind: marker, sample_rate: 1 GS/s}}
{couplings}"""


RAMSEY = """device "dev.yaml"
let tau = 100 ns
prepare A down
rot A x 90 deg
wait tau on A
rot A x 90 deg
read A
"""


@pytest.fixture
def ramsey(tmp_path):
    """A one-dot Ramsey sequence and its device in tmp_path."""
    def make(seq=RAMSEY, **dev):
        (tmp_path / "dev.yaml").write_text(device_text(**dev), encoding="utf-8")
        p = tmp_path / "r.dotseq"
        p.write_text(seq, encoding="utf-8")
        return p
    return make


def numbers(table):
    """Everything computed at each point except the wall time."""
    return [(p.index, p.coords, p.status, p.message, p.fidelity, p.infidelity, p.process_fidelity,
             p.average_fidelity, p.state_fidelity, p.populations, p.duration, p.coherence,
             p.budget, p.budget_floor, p.budget_remainder) for p in table.points]


# ------------------------------------------------------------------ argument syntax

def test_split_forms():
    r = split_arg("field=0.5T:1.5T:11")
    assert (r.name, r.form, r.values, r.points, r.spacing) == ("field", "range", ("0.5T", "1.5T"),
                                                                11, "lin")
    assert split_arg("A.t2=10us:1ms:7:log").spacing == "log"
    assert split_arg("A-B.j_scale=0.9,1,1.1").values == ("0.9", "1", "1.1")
    assert split_arg("tau=200 ns", "--set").form == "value"


@pytest.mark.parametrize("text, fragment", [
    pytest.param("field", "no '='", id="no-equals"),
    pytest.param("=1T:2T:3", "name before '=' is missing", id="no-name"),
    pytest.param("field=1T:2T", "START:STOP:POINTS", id="two-parts"),
    pytest.param("field=1T:2T:x", "'x' is not a whole number", id="bad-count"),
    pytest.param("field=1T:2T:0", "at least 1", id="zero-points"),
    pytest.param("field=1T:2T:3:cubic", "unknown spacing 'cubic'", id="bad-spacing"),
    pytest.param("fi eld=1T:2T:3", "not a parameter name", id="bad-name"),
    pytest.param("field=1T,,2T", "empty value", id="empty-item"),
])
def test_bad_vary_text(text, fragment):
    with pytest.raises(UsageError) as e:
        split_arg(text)
    msg = e.value.render()
    assert f"--vary '{text}'" in msg and fragment in msg
    assert "NAME=START:STOP:POINTS" in e.value.first.hint


def test_grid_values_exact_ends_and_log():
    v = grid_values(0.1, 0.7, 7, "lin")
    assert v[0] == 0.1 and v[-1] == 0.7 and len(v) == 7
    g = grid_values(1e-5, 1e-3, 3, "log")
    assert g == (1e-5, pytest.approx(1e-4, rel=1e-12), 1e-3)


# ------------------------------------------------------------------ names and units

def test_typo_gets_did_you_mean_and_the_sweepable_names(ramsey):
    path = ramsey()
    with pytest.raises(UsageError) as e:
        plan_sweep(path, ["A.t2star=1us:2us:2"], options=FAST)
    p = e.value.first
    assert "'A.t2star' is not a parameter" in p.message
    assert "did you mean 'A.t2_star'?" in p.hint
    for name in ("field", "temperature", "rotation.duration", "A.g", "A.t1", "A.t2_star",
                 "A.rabi_per_volt", "tau (let)"):
        assert name in p.hint


def test_units_are_required_and_checked(ramsey):
    path = ramsey()
    with pytest.raises(UsageError) as e:
        plan_sweep(path, ["field=0.5:0.6T:3"], options=FAST)
    assert "needs a unit" in e.value.render() and "magnetic field" in e.value.render()
    with pytest.raises(UsageError) as e:
        plan_sweep(path, ["tau=1V:2V:3"], options=FAST)
    assert "must be a time" in e.value.render()


def test_names_that_do_not_fit_the_device_say_why(ramsey):
    path = ramsey()
    with pytest.raises(UsageError) as e:
        plan_sweep(path, ["rotation.amplitude=0.1V:0.2V:2"], options=FAST)
    assert "rotation mode is 'duration'" in e.value.render()


def test_more_than_two_axes_is_refused_with_a_hint(ramsey):
    path = ramsey(RAMSEY.replace("let tau = 100 ns", "sweep tau over [0 ns, 100 ns]"))
    with pytest.raises(UsageError) as e:
        plan_sweep(path, ["A.t2_star=1us:2us:2", "field=0.5T:0.501T:2"], options=FAST)
    assert "would have 3" in e.value.render() and "--set tau=VALUE" in e.value.first.hint
    # pinning the file's sweep makes it a two-axis sweep
    plan = plan_sweep(path, ["A.t2_star=1us:2us:2", "field=0.5T:0.501T:2"], ["tau=50ns"],
                      options=FAST)
    assert plan.shape == (2, 2)
    assert all(t.run.steps[1].duration == pytest.approx(50e-9, abs=0) for t in plan.tasks)


def test_repeated_name_is_refused(ramsey):
    with pytest.raises(UsageError, match="already given"):
        plan_sweep(ramsey(), ["A.t2=1ms:2ms:2"], ["A.t2=1ms"], options=FAST)


# ------------------------------------------------------------------ checked up front

def test_t2_above_2t1_refuses_the_sweep_before_anything_runs(ramsey, tmp_path):
    path = ramsey(t1="100 us", t2="50 us")
    with pytest.raises(UsageError) as e:
        plan_sweep(path, ["A.t2=100us:300us:3"], options=FAST)
    msg = e.value.render()
    # T2 <= 2 T1 (Bloch relaxation; common practice, no source)
    assert "refused before starting" in msg and "A.t2 = 300 us is longer than 2·T1 = 200 us" in msg
    assert "A.t2 = 300 us" in msg and "keep A.t2 at most 2·A.t1" in msg


def test_larmor_outside_the_band_names_the_field(ramsey):
    path = ramsey()
    # the LO sits at f_L(500 mT) and the band is ±300 MHz: 480 and 520 mT are 560 MHz
    # away, 490 and 510 mT 280 MHz
    with pytest.raises(UsageError) as e:
        plan_sweep(path, ["field=480mT:520mT:5"], options=FAST)
    msg = e.value.render()
    assert "not reachable on line 'mw'" in msg and "at 2 of 5 device settings" in msg
    assert "field = 480 mT" in msg


def test_channel_limits_are_checked_for_every_point(ramsey):
    # a 20 ns π/2 burst needs 125 mV at 100 MHz/V; a 1 ns one needs 2.5 V > 1 V
    path = ramsey()
    with pytest.raises(ScheduleError) as e:
        plan_sweep(path, ["rotation.duration=1ns:20ns:2"], options=FAST)
    assert "rotation.duration = 1 ns" in e.value.render()


# ------------------------------------------------------------------ applying values

def test_apply_device_values():
    pair = device_text(
        extra_dot="  B: {g: 2.001, t1: 1 s, t2: 1 s, t2_star: 1 us, drive: {line: mw, "
                  "rabi_per_volt: 100 MHz/V}, plunger: P_B}",
        couplings="couplings:\n  - {dots: [A, B], barrier: B_AB, exchange: {model: table, points: "
                  "[[0 mV, 10 kHz], [100 mV, 1 MHz], [200 mV, 20 MHz]]}, idle_voltage: 0 mV, "
                  "pulse_voltage: 200 mV}\n")
    dev = load_device_text(pair, "d.yaml")
    new = PR.apply_device(dev, {"A.g": 4.0, "B.t2": 0.5, "A-B.j_scale": 1.5, "field": 0.6})
    assert new.field == 0.6 and dev.field == 0.5
    # B1 per volt kept: the Rabi frequency per volt scales with |g| (Abragam 1961)
    assert new.dots["A"].drive.rabi_per_volt == pytest.approx(2 * dev.dots["A"].drive.rabi_per_volt)
    assert new.dots["B"].t2 == 0.5 and new.dots["B"].t1 == dev.dots["B"].t1
    c0, c1 = dev.couplings[0].exchange, new.couplings[0].exchange
    for v in (0.0, 0.05, 0.2):
        assert xch.j_of_v(c1, v) == pytest.approx(1.5 * xch.j_of_v(c0, v), rel=1e-12)
    assert new.larmor("A") == pytest.approx(larmor_frequency(4.0, 0.6))   # cache not carried over
    # the reversed pair name means the same coupling; j0 needs an exponential model
    names = PR.device_params(dev)
    assert "A-B.j_scale" in names and "A-B.j0" not in names
    with pytest.raises(UsageError) as e:
        PR.resolve("B-A.j0", "B-A.j0=1MHz", "--vary", dev, names, {})
    assert "vary A-B.j_scale" in e.value.render()
    assert PR.resolve("B-A.pulse_voltage", "x", "--vary", dev, names, {}).name == \
        "A-B.pulse_voltage"


def test_exponential_and_hubbard_j_scale():
    for model in ("{model: exponential, j0: 20 kHz, v0: 40 mV}",
                  "{model: hubbard, t0: 1 GHz, vt: 100 mV, u: 4 meV, detuning: 0 Hz}"):
        dev = load_device_text(device_text(
            extra_dot="  B: {g: 2.001, t1: 1 s, t2: 1 s, t2_star: 1 us, drive: {line: mw, "
                      "rabi_per_volt: 100 MHz/V}, plunger: P_B}",
            couplings=f"couplings:\n  - {{dots: [A, B], barrier: B_AB, exchange: {model}, "
                      "idle_voltage: 0 mV, pulse_voltage: 100 mV}\n"), "d.yaml")
        new = PR.apply_device(dev, {"A-B.j_scale": 0.8})
        for v in (0.0, 0.1):
            assert xch.j_of_v(new.couplings[0].exchange, v) == pytest.approx(
                0.8 * xch.j_of_v(dev.couplings[0].exchange, v), rel=1e-12)


def test_let_override_reexpands_the_sequence(ramsey):
    plan = plan_sweep(ramsey(), ["tau=0ns:200ns:3"], options=FAST)
    waits = [t.run.steps[1].duration for t in plan.tasks]
    assert waits == [0.0, 1e-7, 2e-7]             # exact SI values, from the --vary text
    assert [t.coords for t in plan.tasks] == [(0.0,), (1e-7,), (2e-7,)]
    assert plan.axes[0].kind == "sequence" and plan.axes[0].unit == "s"


# ------------------------------------------------------------------ physics

def test_ramsey_sweep_follows_the_gaussian_decay(ramsey, tmp_path):
    # quasi-static Gaussian detuning noise: Ramsey coherence exp(−(t/T2*)²)
    # (Merkulov, Efros & Rosen, PRB 65, 205309 (2002)).  T1 = T2 = 1 s: no other
    # decay.  Two square 20 ns π/2 pulses add a free time of 2·(2/π)·20 ns to
    # first order (the spin precesses during them); 15 quadrature nodes average
    # the Gaussian to better than 1e-4 up to t ≈ 2.5·T2*.  Tolerance 1e-3 on
    # the coherence 2·P(up) − 1.
    path = ramsey()
    plan = plan_sweep(path, ["tau=0ns:1.5us:4", "A.t2_star=0.8us:2us:3"],
                      options=SimOptions(nodes=15, substeps=1))
    out = run_sweep(plan, tmp_path / "ramsey")
    assert out.status == "complete" and len(out.table.points) == 12
    t_extra = 2 * 20e-9 * 2 / math.pi
    for p in out.table.points:
        tau, t2s = p.coords
        coherence = 2 * dict(p.populations)["A"] - 1
        assert coherence == pytest.approx(math.exp(-((tau + t_extra) / t2s) ** 2), abs=1e-3)


# ------------------------------------------------------------------ where points run

def test_serial_local_pool_and_dask_give_the_same_numbers(ramsey, tmp_path):
    distributed = pytest.importorskip("distributed")
    path = ramsey()
    plan = plan_sweep(path, ["tau=0ns:300ns:4", "A.t2_star=0.5us:1us:2"], options=FAST,
                      budget=True)
    serial = run_sweep(plan, tmp_path / "serial", workers=1)
    pool = run_sweep(plan, tmp_path / "pool", workers=2)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  host="127.0.0.1", protocol="tcp://",
                                  dashboard_address=None) as cluster:
        dask = run_sweep(plan, tmp_path / "dask", cluster=cluster.scheduler_address)
    assert serial.status == pool.status == dask.status == "complete"
    assert numbers(serial.table) == numbers(pool.table) == numbers(dask.table)   # exactly
    assert pool.stats["backend"] == "local processes" and pool.stats["workers"] == 2
    assert dask.stats["backend"].startswith("dask cluster tcp://127.0.0.1")
    assert serial.table.points[0].budget           # budget computed per point
    head = (tmp_path / "serial" / "sweep.csv").read_text().splitlines()[1].split(",")
    assert "budget quasi-static Zeeman noise (T2*)" in head and "budget floor" in head
    assert json.loads((tmp_path / "dask" / "sweep.json").read_text())["budget"] is True
    for name in ("sweep.csv", "sweep.json", "sweep.png"):
        a = (tmp_path / "serial" / name).read_bytes()
        assert a and (tmp_path / "dask" / name).exists()


def test_workers_start_with_one_blas_thread():
    before = {k: os.environ.get(k) for k in THREAD_VARIABLES}
    with child_threads():
        assert all(os.environ[k] == "1" for k in THREAD_VARIABLES)
    assert {k: os.environ.get(k) for k in THREAD_VARIABLES} == before


@pytest.mark.skipif("forkserver" not in __import__("multiprocessing").get_all_start_methods(),
                    reason="needs a fork server (POSIX)")
def test_workers_are_forked_from_a_server_that_imported_the_package(ramsey):
    """A worker does not import numpy, scipy, qutip and dotseq itself (1 to
    1.5 s per worker): it is forked from a server that has, and it keeps
    one BLAS thread and its link to this process."""
    from compiler.benchmarking.run import simulate_task
    from compiler.sweep.execute import PRELOAD, run_pool
    assert evaluate_point.__module__ in PRELOAD and simulate_task.__module__ in PRELOAD
    plan = plan_sweep(ramsey(), ["tau=0ns:100ns:4"], options=FAST)
    got = []
    stats = run_pool(plan.tasks, got.append, 2, point_fn=sweep_helpers.how_started)
    assert stats == {"backend": "local processes", "workers": 2}
    assert sorted(g["index"] for g in got) == [0, 1, 2, 3]
    for g in got:
        assert g["forkserver"] and g["parent"] == os.getpid()
        assert g["modules"] == sorted(PRELOAD)
        assert all(g["env"][k] == "1" for k in THREAD_VARIABLES)
    serial, pooled = [], []
    for t in plan.tasks:
        serial.append(evaluate_point(t))
    run_pool(plan.tasks, pooled.append, 2)
    by_index = lambda points: sorted(points, key=lambda p: p.index)
    assert numbers(SimpleNamespace(points=by_index(pooled))) == \
        numbers(SimpleNamespace(points=serial))                      # exactly


# ------------------------------------------------------------------ interrupt and resume

class Counting:
    """A point function that counts its calls and raises KeyboardInterrupt
    (Ctrl-C) at call number ``stop``."""

    def __init__(self, stop=None):
        self.calls, self.stop = 0, stop

    def __call__(self, task):
        self.calls += 1
        if self.stop is not None and self.calls == self.stop:
            raise KeyboardInterrupt
        return evaluate_point(task)


def test_interrupt_keeps_points_and_resume_computes_only_the_missing(ramsey, tmp_path):
    path = ramsey()
    plan = plan_sweep(path, ["tau=0ns:500ns:6"], options=FAST)
    out = tmp_path / "s"
    first = Counting(stop=4)
    r1 = run_sweep(plan, out, point_fn=first)
    assert r1.status == "interrupted" and r1.computed == 3
    doc = json.loads((out / "sweep.json").read_text())
    assert doc["complete"] is False and doc["points_done"] == 3 and doc["missing"] == [3, 4, 5]
    text = (out / "sweep.csv").read_text()
    assert text.splitlines()[1].startswith("# PARTIAL: 3 of 6 points missing")
    rows = list(csv.DictReader(io.StringIO("\n".join(l for l in text.splitlines()
                                                      if not l.startswith("#")))))
    assert [r["status"] for r in rows] == ["ok"] * 3 + ["missing"] * 3

    # a fresh run into the unfinished folder is refused: it would lose the points
    with pytest.raises(SweepError, match="unfinished sweep"):
        run_sweep(plan, out)
    # resuming with other inputs is refused
    other = plan_sweep(path, ["tau=0ns:600ns:6"], options=FAST)
    with pytest.raises(SweepError) as e:
        run_sweep(other, out, resume=True)
    assert "different sweep" in e.value.render() and "--vary" in e.value.render()

    second = Counting()
    r2 = run_sweep(plan, out, resume=True, point_fn=second)
    assert second.calls == 3 and r2.computed == 3 and r2.resumed == 3
    assert r2.status == "complete" and r2.table.complete
    whole = run_sweep(plan, tmp_path / "whole")
    assert numbers(r2.table) == numbers(whole.table)
    assert json.loads((out / "sweep.json").read_text())["complete"] is True

    # resuming a complete sweep computes nothing and rewrites the tables
    third = Counting()
    r3 = run_sweep(plan, out, resume=True, point_fn=third)
    assert third.calls == 0 and r3.status == "complete"


def test_a_torn_last_line_is_dropped_on_resume(ramsey, tmp_path):
    plan = plan_sweep(ramsey(), ["tau=0ns:200ns:3"], options=FAST)
    out = tmp_path / "s"
    run_sweep(plan, out, point_fn=Counting(stop=3))
    state = out / "points.jsonl"
    with open(state, "ab") as f:
        f.write(b'{"point": {"index": 2, "coo')       # a crash in the middle of a write
    assert len(read_state(state).points) == 2 and read_state(state).dropped == 1
    again = Counting()
    r = run_sweep(plan, out, resume=True, point_fn=again)
    assert again.calls == 1 and r.table.complete
    assert len(read_state(state).points) == 3 and read_state(state).dropped == 0


def test_a_lost_worker_keeps_the_finished_points(ramsey, tmp_path):
    plan = plan_sweep(ramsey(), ["tau=0ns:700ns:8"], options=FAST)
    out = tmp_path / "s"
    r = run_sweep(plan, out, workers=2, point_fn=sweep_helpers.die_on_point)
    assert r.status == "workers lost"
    assert sweep_helpers.STOP_AT not in {p.index for p in r.table.points}
    doc = json.loads((out / "sweep.json").read_text())
    assert doc["complete"] is False and sweep_helpers.STOP_AT in doc["missing"]
    kept = len(r.table.points)
    count = Counting()
    r2 = run_sweep(plan, out, resume=True, point_fn=count)
    assert count.calls == 8 - kept and r2.table.complete


# ------------------------------------------------------------------ output folder

def test_foreign_files_are_never_touched(ramsey, tmp_path):
    plan = plan_sweep(ramsey(), ["tau=0ns:100ns:2"], options=FAST)
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    with pytest.raises(SweepError, match="not a dotseq sweep"):
        run_sweep(plan, out)
    assert (out / "notes.txt").read_text() == "keep me" and len(os.listdir(out)) == 1
    with pytest.raises(SweepError, match="nothing to resume|no sweep to resume"):
        run_sweep(plan, tmp_path / "empty", resume=True)


def test_a_second_sweep_into_a_busy_folder_is_refused(ramsey, tmp_path):
    fcntl = pytest.importorskip("fcntl")
    plan = plan_sweep(ramsey(), ["tau=0ns:100ns:2"], options=FAST)
    out = tmp_path / "s"
    run_sweep(plan, out, point_fn=Counting(stop=1))          # interrupted: 0 points
    with open(out / "points.jsonl", "a+b") as held:          # as a running sweep holds it
        fcntl.flock(held.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        before = (out / "points.jsonl").read_bytes()
        with pytest.raises(SweepError, match="another dotseq sweep is writing"):
            run_sweep(plan, out)
        assert (out / "points.jsonl").read_bytes() == before
    assert run_sweep(plan, out).status == "complete"       # free again: 0 points, started over


def test_tables_hold_units_values_and_the_best_point(ramsey, tmp_path):
    plan = plan_sweep(ramsey(), ["A.t2_star=0.5us:2us:3"], ["tau=400ns"], options=FAST)
    r = run_sweep(plan, tmp_path / "s")
    doc = json.loads((tmp_path / "s" / "sweep.json").read_text())
    assert doc["format"] == "dotseq-sweep" and doc["complete"] and doc["budget"] is False
    assert doc["axes"][0]["name"] == "A.t2_star" and doc["axes"][0]["unit"] == "s"
    assert doc["axes"][0]["text"] == ["500 ns", "1.25 us", "2 us"]
    assert doc["fixed"][0]["name"] == "tau" and doc["fixed"][0]["values"] == [4e-7]
    assert doc["best"]["index"] == 2                  # the longest T2* decays least
    assert doc["metric"] == "average gate fidelity"
    assert doc["points"][0]["coherence"][0]["ratio"] == pytest.approx(1.0 / 20e-9)
    assert doc["settings"] == {"engine": "fast", "nodes": 3, "quadrature": "auto",
                               "substeps": 1, "rwa": True,
                               "averaging_tolerance": 1e-4, "exchange_accuracy": 1e-6,
                               "fidelity_scope": "program",
                               "shots": 0}
    head = (tmp_path / "s" / "sweep.csv").read_text().splitlines()
    assert head[0].startswith("# dotseq sweep of") and "complete, 3 of 3 points" in head[0]
    assert head[1].startswith("index,A.t2_star [s],status,fidelity,infidelity")
    fids = [p.fidelity for p in r.table.points]
    assert fids == sorted(fids)


# ------------------------------------------------------------------ command line

def dotseq(*args, cwd=ROOT, env=None):
    r = subprocess.run([sys.executable, "-m", "compiler", *map(str, args)], cwd=cwd,
                       capture_output=True, text=True, timeout=300, env=env)
    return r.returncode, r.stdout, r.stderr


def test_readme_example_runs(tmp_path):
    # the command of README.md and docs/sweep.md (with the quick settings of the tests)
    out = tmp_path / "ramsey-t2star"
    code, stdout, err = dotseq("sweep", "sequences/ramsey_single.dotseq", "--vary",
                              "A.t2_star=2us:5us:4", "-o", out, "--nodes", "3", "--substeps", "1",
                              "--workers", "1")
    assert code == 0, err
    assert "axis      A.t2_star: 2 us .. 5 us, 4 points" in stdout
    assert "axis      tau: 0 s .. 2 us, 5 points  (the file's sweep)" in stdout
    assert "best      F = " in stdout and "Traceback" not in err
    doc = json.loads((out / "sweep.json").read_text())
    assert doc["points_total"] == 20 and doc["complete"]
    assert (out / "sweep.png").stat().st_size > 10_000


def test_cli_json_and_bad_vary(tmp_path, ramsey, capsys):
    from compiler.cli import main
    path = ramsey()
    code = main(["sweep", str(path), "--vary", "tau=0ns:100ns:2", "-o", str(tmp_path / "j"),
                 "--json", "--workers", "1", "--nodes", "1", "--substeps", "1"])
    out = capsys.readouterr().out
    assert code == 0 and json.loads(out)["points_done"] == 2
    code = main(["sweep", str(path), "--vary", "tau=0ns..100ns", "-o", str(tmp_path / "k")])
    err = capsys.readouterr().err
    assert code == 2 and "--vary 'tau=0ns..100ns'" in err and "write --vary NAME=START:STOP" in err
    code = main(["sweep", str(path), "--vary", "tau=0ns:1ns:2", "-o", str(tmp_path / "k"),
                 "--workers", "0"])
    assert code == 2 and "--workers 0" in capsys.readouterr().err
    assert not (tmp_path / "k").exists()


def test_cluster_without_dask_says_how_to_install(tmp_path, ramsey, capsys, monkeypatch):
    from compiler.cli import main
    import builtins
    real_import = builtins.__import__

    def no_dask(name, *a, **kw):
        if name == "distributed" or name.startswith("distributed.") or name == "dask":
            raise ImportError(f"No module named '{name}'")
        return real_import(name, *a, **kw)
    monkeypatch.setattr(builtins, "__import__", no_dask)
    path = ramsey()
    code = main(["sweep", str(path), "--vary", "tau=0ns:100ns:2", "-o", str(tmp_path / "c"),
                 "--cluster", "tcp://127.0.0.1:1"])
    err = capsys.readouterr().err
    assert code == 2 and "pip install 'dotseq[dask]'" in err and "Traceback" not in err
    # the environment variable is read the same way; --workers with a cluster is refused
    monkeypatch.setenv("DOTSEQ_CLUSTER", "tcp://127.0.0.1:1")
    code = main(["sweep", str(path), "--vary", "tau=0ns:100ns:2", "-o", str(tmp_path / "c")])
    assert code == 2 and "pip install 'dotseq[dask]'" in capsys.readouterr().err
    code = main(["sweep", str(path), "--vary", "tau=0ns:100ns:2", "-o", str(tmp_path / "c"),
                 "--workers", "2"])
    assert code == 2 and "give --cluster local" in capsys.readouterr().err
    assert not (tmp_path / "c").exists()


def test_unreachable_cluster_is_a_clear_error(tmp_path, ramsey, capsys):
    pytest.importorskip("distributed")
    from compiler.cli import main
    code = main(["sweep", str(ramsey()), "--vary", "tau=0ns:100ns:2", "-o", str(tmp_path / "c"),
                 "--cluster", "tcp://127.0.0.1:9"])
    err = capsys.readouterr().err
    assert code == 2 and "cannot reach the Dask scheduler at tcp://127.0.0.1:9" in err


def test_point_warnings_are_in_the_table_and_the_worst_is_named(tmp_path):
    # issue 14, item 5: the bundled pair (J about 10 MHz against a Zeeman
    # difference of 140 MHz; J scaled by 1 and 4): every point's "J not well
    # above the Zeeman difference" warning is kept, the worst named
    from compiler.sweep.text import outcome_lines
    p = tmp_path / "x.dotseq"
    p.write_text("prepare A B down\nsqrtswap A B\n", encoding="utf-8")
    # (no quadrature: the bundled pair is four-level, and the warnings are the point here)
    plan = plan_sweep(p, ["A-B.j_scale=1,4"], options=SimOptions(nodes=1, substeps=1))
    assert set(plan.point_warnings) == {0, 1}
    assert all("not well above the Zeeman difference" in w[0][1]
               for w in plan.point_warnings.values())
    worst = max((0, 1), key=lambda i: plan.point_warnings[i][0][0])
    label = f"A-B.j_scale = {(1, 4)[worst]}"
    line = [w for w in plan.warnings if "points have warnings" in w]
    assert len(line) == 1 and "2 of 2 points" in line[0] and label in line[0], line
    out = run_sweep(plan, tmp_path / "s", workers=1)
    rows = list(csv.DictReader(x for x in (tmp_path / "s" / "sweep.csv").read_text().splitlines()
                               if not x.startswith("#")))
    assert [r["warnings"] for r in rows] == ["1", "1"]
    assert "x.dotseq:2:1: warning: J = " in rows[1]["worst_warning"]
    doc = json.loads((tmp_path / "s" / "sweep.json").read_text())
    assert "Zeeman" in doc["points"][0]["warnings"][0]
    assert any(x.startswith("warnings  2 of 2 points") and label in x for x in outcome_lines(out))


# ------------------------------------------------------------------ compiled once

def test_a_point_is_compiled_once(ramsey, monkeypatch):
    # the plan compiles every point to check it and hands that compilation to
    # the point: simulating it compiles nothing again (the result equals a
    # point compiled afresh); beyond the memory bound the point compiles itself
    # (common practice, no source)
    import dataclasses
    from compiler.sweep import plan as PLAN, point as POINT
    plan = plan_sweep(ramsey(), ["tau=100ns:200ns:2"], options=FAST, budget=True)
    assert all(t.compiled is not None and t.compiled.run is t.run for t in plan.tasks)
    fresh = [POINT.simulate_point(dataclasses.replace(t, compiled=None)) for t in plan.tasks]

    def no_compile(*a, **k):
        raise AssertionError("compiled again")
    monkeypatch.setattr(POINT, "compile_run", no_compile)
    kept = [POINT.simulate_point(t) for t in plan.tasks]
    assert [dataclasses.replace(p, wall_s=0) for p in kept] == \
        [dataclasses.replace(p, wall_s=0) for p in fresh]
    monkeypatch.undo()
    monkeypatch.setattr(PLAN, "KEEP_COMPILED_BYTES", 0)
    plan = plan_sweep(ramsey(), ["tau=100ns:200ns:2"], options=FAST)
    assert all(t.compiled is None for t in plan.tasks)


def test_every_sweep_point_is_averaged_to_the_stated_accuracy(ramsey, tmp_path):
    # Ramsey coherence exp(−(t/T2*)²) under quasi-static Gaussian detuning
    # (Merkulov, Efros & Rosen, PRB 65, 205309 (2002)); T1 = T2 = 1 s, T2* = 1 µs,
    # free time plus 2·(2/π)·20 ns for the two square π/2 pulses (first order).
    # At 1.7·T2* and 3.4·T2* (beyond what the old 15-node cap could average) every
    # point's averaging is refined to the default tolerance 1e-4 and recorded.
    plan = plan_sweep(ramsey(), ["tau=1.7us:3.4us:2"], options=SimOptions(substeps=1))
    assert not [w for w in plan.warnings if "quadrature" in w]
    out = run_sweep(plan, tmp_path / "avg")
    t_extra = 2 * 20e-9 * 2 / math.pi
    for p in out.table.points:
        (tau,) = p.coords
        assert p.averaging_error is not None and p.averaging_error <= 1e-4
        assert p.state_fidelity == pytest.approx((1 + math.exp(-((tau + t_extra) / 1e-6) ** 2)) / 2,
                                                 abs=2e-4)
    doc = json.loads((tmp_path / "avg" / "sweep.json").read_text())
    assert all(pt["averaging_error"] <= 1e-4 for pt in doc["points"])


def test_swept_device_gets_the_loader_warnings_too():
    # The loader's rules are written once (compiler.device.rules.validate): a
    # swept idle level that leaves the dots coupled between gates is warned
    # about like in the file (J(idle)/J(pulse) > 1e-2; common practice, no
    # source).  The sweep's own copy of the rules had no such warning.
    pair = device_text(
        extra_dot="  B: {g: 2.001, t1: 1 s, t2: 1 s, t2_star: 1 us, drive: {line: mw, "
                  "rabi_per_volt: 100 MHz/V}, plunger: P_B}",
        couplings="couplings:\n  - {dots: [A, B], barrier: B_AB, exchange: {model: exponential, "
                  "j0: 20 kHz, v0: 40 mV}, idle_voltage: 0 mV, pulse_voltage: 300 mV}\n")
    dev = load_device_text(pair, "d.yaml")
    assert PR.cautions(dev) == []
    ids = [cid for cid, _ in PR.cautions(PR.apply_device(dev, {"A-B.idle_voltage": 0.2}))]
    assert ids == ["A-B.idle-exchange"]
