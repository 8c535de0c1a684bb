"""The memory check of a sweep (issue 14; compiler/sweep/memory.py,
docs/sweep.md "Memory"): every point's simulation is estimated with the fast
engine's own estimate while the sweep is planned, and a sweep with a point
that would not fit its share of --memory-limit is refused before any point
is simulated (exit 2, nothing written), naming the point, the cluster and
the fixes.  The device is an invented line of three spin-1/2 dots whose
barriers idle at about 1 MHz of exchange (tests/benchmarks/workloads.py):
open enough that the exact cluster spans all three dots."""

from __future__ import annotations

import dataclasses
import sys
from pathlib import Path

import numpy as np
import pytest

import compiler.simulate.engines.fast as fast
from compiler import compile_run, load
from compiler.cli import main
from compiler.errors import SimulationError
from compiler.simulate.build import build_model
from compiler.simulate.engines import FastEngine
from compiler.simulate.engines.fast import plan_estimate
from compiler.simulate.model import noise_points
from compiler.simulate.run import SimOptions, end_sample
from compiler.sweep import memory as MEM
from compiler.sweep import plan_sweep, run_sweep
from compiler.sweep.point import evaluate_point
from compiler.sweep.types import INVALID, OK

sys.path.insert(0, str(Path(__file__).parent / "benchmarks"))
from workloads import write_case  # noqa: E402

# J = 150 MHz·e^{V/20 mV} (invented line): -100 mV idles at 1.01 MHz (kept
# exactly at the default accuracy), -600 mV at 14 mHz (dropped)
OPEN, CLOSED = "-100 mV", "-600 mV"
VARY = "D0-D1.idle_voltage=-600mV,-100mV"
NODES = ["--nodes", "1"]           # one noise variant: the cluster's size alone decides


def _line(tmp_path):
    """Three dots; D1-D2 idles open, D0-D1 is swept between closed and open."""
    seq = write_case(tmp_path, 3, 3, long_range=False, charge_noise="10 uV")
    dev = tmp_path / "device.yaml"
    dev.write_text(dev.read_text().replace("idle_voltage: -600 mV", f"idle_voltage: {OPEN}"))
    seq.write_text('device "device.yaml"\nprepare D0 D1 D2 down\nrot D0 x 180 deg\n'
                   "read D0 D1 D2\n")
    return seq


def _estimates(seq, nodes=1):
    """Bytes the sweep estimates for each point of VARY (closed, open)."""
    plan = plan_sweep(seq, [VARY], options=SimOptions(nodes=nodes), memory_limit=2 ** 40)
    return [MEM.point_estimate(t.compiled, plan.options, 0)["estimate"]["bytes"]
            for t in plan.tasks]


def test_plan_estimate_is_the_engines_own_estimate(tmp_path):
    # the estimate a sweep makes is the one the engine records before it runs
    seq = _line(tmp_path)
    c = load(seq)
    cr = compile_run(c.expanded.runs[0], c.device)
    model = build_model(cr.waveforms, cr.device, m=2, stop=end_sample(cr.timeline))
    pts = noise_points(model, 1)
    got = plan_estimate(model, [(pts, True)], process=True)
    eng = FastEngine()
    ev = eng.average(model, pts, process=True, rho0=np.eye(8) / 8)
    assert got["estimate"] == ev.stats["estimate"]
    assert got["estimate"]["largest"]["dots"] == ["D0", "D1", "D2"]
    assert got["too_large"] is None and got["slow"] is None
    # over a limit: the refusal's information, without raising; nothing computed
    small = plan_estimate(model, [(pts, True)], process=True, memory_limit=100_000)
    assert small["too_large"]["dots"] == ["D0", "D1", "D2"]
    assert small["too_large"]["limit"] == 100_000


def test_a_sweep_whose_point_does_not_fit_is_refused_before_any_point(tmp_path, capsys):
    seq = _line(tmp_path)
    closed, opened = _estimates(seq)
    assert opened > 4 * closed                   # 64×64 against 16×16 channels
    limit = (closed + opened) // 2               # the closed point fits, the open one not
    out = tmp_path / "out"
    code = main(["sweep", str(seq), "--vary", VARY, "-o", str(out), "--workers", "1",
                 "--memory-limit", str(limit), "--quiet", *NODES])
    err = capsys.readouterr().err
    assert code == 2
    assert not out.exists()                      # nothing written, no point simulated
    for part in ("sweep refused before starting: the point at D0-D1.idle_voltage = -100 mV",
                 "dots D0, D1, D2 form one cluster of 3 dots", "64×64",
                 "D0-D1 (J = 1.01 MHz at -100 mV on its barrier)", "idle_voltage",
                 "--exchange-accuracy", "--nodes", "--memory-limit", "nothing was simulated"):
        assert part in err, part
    assert "--workers" not in err                # one process: fewer workers would not help
    # an earlier finished sweep in the folder is left as it was
    ok = main(["sweep", str(seq), "--vary", VARY, "-o", str(out), "--workers", "1",
               "--memory-limit", str(4 * opened), "--quiet", "--json", *NODES])
    assert ok == 0
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    assert "sweep.csv" in before and "points.jsonl" in before
    capsys.readouterr()
    code = main(["sweep", str(seq), "--vary", VARY, "-o", str(out), "--workers", "1",
                 "--memory-limit", str(limit), "--quiet", *NODES])
    assert code == 2 and "the point at D0-D1.idle_voltage = -100 mV" in capsys.readouterr().err
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before


def test_local_workers_share_the_limit(tmp_path, capsys, monkeypatch):
    # two points at once on two local processes: each gets half of the limit;
    # one that would fit the whole limit is refused with --workers 1 as the fix
    import compiler.sweep.execute as execute
    monkeypatch.setattr(execute, "pool_context", lambda: None)     # no pool is needed
    seq = _line(tmp_path)
    _, opened = _estimates(seq)
    limit = int(1.5 * opened)
    out = tmp_path / "out"
    code = main(["sweep", str(seq), "--vary", VARY, "-o", str(out), "--workers", "2",
                 "--more-workers-than-cores", "--memory-limit", str(limit), "--quiet", *NODES])
    err = capsys.readouterr().err
    assert code == 2 and not out.exists()
    assert "shared by the 2 points computed at once by the local worker processes" in err
    assert "compute fewer points at once (--workers 1)" in err
    # the plan says what each point gets
    plan = plan_sweep(seq, [VARY], options=SimOptions(nodes=1), memory_limit=4 * opened,
                      processes=2)
    assert plan.memory["points_at_once"] == 2
    assert plan.memory["point_limit_bytes"] == 2 * opened
    assert plan.memory["largest_point_bytes"] == opened
    assert all(t.options.memory_limit == 2 * opened for t in plan.tasks)
    # a single point runs alone: it gets the whole limit
    one = plan_sweep(seq, ["D0-D1.idle_voltage=-100mV"], options=SimOptions(nodes=1),
                     memory_limit=limit, processes=2)
    assert one.memory["points_at_once"] == 1 and one.n_points == 1


def test_a_sufficient_limit_runs_the_sweep(tmp_path):
    seq = _line(tmp_path)
    _, opened = _estimates(seq)
    plan = plan_sweep(seq, [VARY], options=SimOptions(nodes=1), memory_limit=2 * opened)
    r = run_sweep(plan, tmp_path / "ok")
    assert r.status == "complete" and [p.status for p in r.table.points] == [OK, OK]
    assert (tmp_path / "ok" / "sweep.csv").exists()


def test_a_point_over_its_share_at_run_time_is_invalid_not_out_of_memory(tmp_path):
    # the plan estimates the starting rule; a point whose engine meets a larger
    # cluster (here: a smaller share than planned) is refused at the point
    seq = _line(tmp_path)
    plan = plan_sweep(seq, [VARY], options=SimOptions(nodes=1), memory_limit=2 ** 40)
    task = plan.tasks[1]
    small = dataclasses.replace(task, options=dataclasses.replace(task.options,
                                                                   memory_limit=100_000))
    r = evaluate_point(small)
    assert r.status == INVALID
    assert "this point's simulation would need about" in r.message
    assert "dots D0, D1, D2 form one cluster" in r.message


def test_slow_points_are_announced_in_the_plan(tmp_path, monkeypatch):
    seq = _line(tmp_path)
    plan = plan_sweep(seq, [VARY], options=SimOptions(nodes=1))
    assert not any("slow" in w for w in plan.warnings)      # estimated well under 20 s
    monkeypatch.setattr(fast, "SLOW_NOTE_S", 0.0)
    plan = plan_sweep(seq, [VARY], options=SimOptions(nodes=1))
    slow = [w for w in plan.warnings if "slow to simulate" in w]
    assert len(slow) == 1
    assert slow[0].startswith("2 of 2 points are slow to simulate; the slowest, at "
                              "D0-D1.idle_voltage = -100 mV: one evaluation will take roughly")
    assert "dots D0, D1, D2 form one exact cluster" in slow[0]


def test_the_refusal_is_a_simulation_error_through_the_api(tmp_path):
    seq = _line(tmp_path)
    closed, _ = _estimates(seq)
    with pytest.raises(SimulationError) as e:
        plan_sweep(seq, [VARY], options=SimOptions(nodes=1), memory_limit=closed // 2)
    msg = e.value.render()
    assert "the point at D0-D1.idle_voltage = -600 mV" in msg       # the first in grid order
    assert "2 of 2 points would not fit (also at D0-D1.idle_voltage = -100 mV)" in msg


@pytest.mark.parametrize("value, says", [
    ("1KB", "above the limit of 1000 B"),         # too small even to read the sequence
    ("-1", "--memory-limit '-1' is not a size"),
    ("nan", "--memory-limit 'nan' is not a size"),
    ("garbage", "--memory-limit 'garbage' is not a size"),
    ("", "--memory-limit '' is not a size"),
    ("0", "--memory-limit '0' is zero"),
    ("1e30", "--memory-limit '1e30' is too large"),
])
def test_hostile_memory_limits_are_refused(tmp_path, capsys, value, says):
    seq = _line(tmp_path)
    out = tmp_path / "out"
    code = main(["sweep", str(seq), "--vary", VARY, "-o", str(out), "--workers", "1",
                 f"--memory-limit={value}", "--quiet", *NODES])
    assert code == 2
    assert says in capsys.readouterr().err
    assert not out.exists()


def test_exchange_accuracy_reaches_the_sweep(tmp_path, capsys):
    seq = _line(tmp_path)
    code = main(["sweep", str(seq), "--vary", VARY, "-o", str(tmp_path / "o"),
                 "--exchange-accuracy", "nan", "--quiet"])
    assert code == 2 and "exchange accuracy nan must be from 0" in capsys.readouterr().err
    plan = plan_sweep(seq, [VARY], options=SimOptions(nodes=1, exchange_accuracy=1e-3))
    assert plan.options.exchange_accuracy == 1e-3
    assert plan.key["options"]["exchange_accuracy"] == 1e-3      # --resume compares it


def test_a_point_is_refused_exactly_where_simulate_refuses_it(tmp_path, capsys):
    # the sweep estimates the evaluations the simulation makes with its first
    # two quadrature rules (5 nodes: the rules of 3 and 5 nodes, one noise at a
    # time; on this run they agree within the tolerance, so no finer rule
    # follows) to the byte: simulate refuses the open point's run one byte
    # below the sweep's estimate and runs it at the estimate; the sweep alike
    seq = _line(tmp_path)
    need = _estimates(seq, nodes=5)[1]
    opts = SimOptions(nodes=5)
    with pytest.raises(SimulationError):
        plan_sweep(seq, ["D0-D1.idle_voltage=-100mV"], options=opts, memory_limit=need - 1)
    assert plan_sweep(seq, ["D0-D1.idle_voltage=-100mV"], options=opts,
                      memory_limit=need).memory["largest_point_bytes"] == need
    args = ["simulate", str(seq), "--nodes", "5", "--no-budget", "--no-steps"]
    assert main(args + ["-o", str(tmp_path / "a"), "--memory-limit", str(need - 1)]) == 2
    assert "dots D0, D1, D2 form one cluster" in capsys.readouterr().err
    assert main(args + ["-o", str(tmp_path / "b"), "--memory-limit", str(need)]) == 0
