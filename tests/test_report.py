"""dotseq report: the terminal summary, report.md, results.json and the figures
of a simulation, built from hand-made results (no simulator run)."""

from __future__ import annotations

import dataclasses
import json
import math
import os
import re
import struct
from pathlib import Path

import numpy as np
import pytest

from compiler.errors import DotseqError
from compiler.report import ReportError, load_results, summary_text, write_report
from compiler.report import figures as figures_mod
from compiler.report.fmt import (axis_scale, budget_rows, fmt_fidelity, fmt_infidelity,
                                 fmt_value, time_unit)
from compiler.simulate.types import BudgetLine, RunResult, SimulationResult, StepFidelity

# Invented numbers throughout; nothing here is a physics check.
BUDGET = (("T2*", 6.2e-4, "quasi-static detuning"), ("charge noise", 2.9e-4, "exchange"),
          ("T2", 1.1e-4, ""), ("crosstalk", 4.8e-5, ""), ("T1", 2.0e-5, ""),
          ("pulse distortion", 7.5e-6, ""), ("leakage", 1.5e-6, ""))
FLOOR = 3.0e-6
REMAINDER = 1.9e-5
TOTAL = FLOOR + REMAINDER + sum(v for _, v, _ in BUDGET)


def make_steps() -> tuple[StepFidelity, ...]:
    """Six steps on dots A and B: the kinds and lengths of a short circuit."""
    spec = [("rot", ("A",), "rot A x 90°", 0.0, 50e-9, 0.9999512),
            ("rot", ("B",), "rot B x 90°", 50e-9, 50e-9, 0.9999388),
            ("sqrtswap", ("A", "B"), "√SWAP A–B", 100e-9, 24e-9, 0.998731),
            ("wait", ("A", "B"), "wait", 124e-9, 200e-9, 0.999874),
            ("together", ("A", "B"), "together: x 180° A, y 90° B", 324e-9, 100e-9, 0.9996021),
            ("rot", ("A",), "rot A −y 90°", 424e-9, 50e-9, 0.99995)]
    return tuple(StepFidelity(k, kind, q, label, f"seq.dotseq:{3 + k}:5", start, dur, fid)
                 for k, (kind, q, label, start, dur, fid) in enumerate(spec))


def make_run(index: int = 0, sweep=(), f_pro: float | None = 0.99811234,
             f_state: float = 0.9972, detail: bool = True, traces: bool = True) -> RunResult:
    d = 4
    f_avg = None if f_pro is None else (d * f_pro + 1) / (d + 1)
    tr = {}
    if traces:
        t = np.linspace(0.0, 474e-9, 949)
        tr = {"t": t, "A": np.sin(2 * np.pi * 2.0e6 * t) ** 2,
              "B": 0.5 * (1 - np.cos(2 * np.pi * 1.3e6 * t)) * np.exp(-t / 2e-6)}
    return RunResult(
        run_index=index, sweep=tuple(sweep), dots=("A", "B"), duration=474e-9,
        process_fidelity=f_pro, average_fidelity=f_avg, state_fidelity=f_state,
        populations={"A": 0.0123456, "B": 0.987654},
        steps=make_steps() if detail else (),
        budget=tuple(BudgetLine(s, v, n) for s, v, n in BUDGET) if detail else (),
        budget_total=TOTAL if detail else 0.0,
        budget_floor=FLOOR if detail else 0.0,
        budget_remainder=REMAINDER if detail else 0.0,
        traces=tr,
        stats={"wall_time_s": 1.25, "solver_calls": 7} if detail else {})


COHERENCE = (("A", 28e-6, 474e-9 / 4, 28e-6 / (474e-9 / 4), True),
             ("B", 2.5e-3, 50e-9, 2.5e-3 / 50e-9, False))


def make_result(kind: str = "single") -> SimulationResult:
    """``single``: one run with steps, budget and traces; ``sweep1``: five
    runs over tau; ``sweep2``: a 3 x 4 grid over amplitude (outer) and
    detuning (inner), row-major."""
    common = dict(sequence="seq.dotseq", device_name="invented-pair", engine="reference",
                  rwa=True, coherence=COHERENCE,
                  settings={"time_step_s": 0.5e-9, "rwa": True, "noise_samples": 64},
                  warnings=("dot A: T2 / longest gate below 1e4",),
                  stats={"wall_time_s": 3.5, "solver_calls": 42})
    if kind == "single":
        return SimulationResult(runs=(make_run(),), axes=(), **common)
    if kind == "sweep1":
        taus = (100e-9, 200e-9, 300e-9, 400e-9, 500e-9)
        fids = (0.9961, 0.99843, 0.99902, 0.99871, 0.99795)
        runs = tuple(make_run(k, (("tau", tau),), fids[k], fids[k] - 0.001, detail=(k == 2),
                              traces=(k == 2)) for k, tau in enumerate(taus))
        return SimulationResult(runs=runs, axes=(("tau", taus, "s"),), **common)
    if kind == "sweep2":
        amps = (0.1, 0.2, 0.3)                        # V
        dets = (-2e6, -1e6, 0.0, 1e6)                 # Hz
        runs = []
        for a_i, a in enumerate(amps):
            for d_i, det in enumerate(dets):
                f = 0.999 - 1e-4 * (a_i - 1) ** 2 - 2e-4 * (det / 1e6 - 0.0) ** 2
                runs.append(make_run(len(runs), (("amp", a), ("detuning", det)), f, f - 0.002,
                                     detail=(len(runs) == 0), traces=False))
        return SimulationResult(runs=tuple(runs), axes=(("amp", amps, "V"),
                                                        ("detuning", dets, "Hz")), **common)
    raise ValueError(kind)


def png_size(path: Path) -> tuple[int, int]:
    with open(path, "rb") as f:
        head = f.read(24)
    assert head[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", head[16:24])


# ---------------------------------------------------------------- formats

def test_number_formats():
    assert fmt_fidelity(0.99811234) == "0.998112"
    assert fmt_fidelity(0.5) == "0.500000"
    assert fmt_fidelity(0.0123456789) == "0.0123457"
    assert fmt_fidelity(None) == "n/a"
    assert fmt_infidelity(0.99811234) == "1.89e-03"
    assert time_unit(474e-9) == (1e-9, "ns")
    assert time_unit(40e-6, "u") == (1e-6, "us")
    assert fmt_value(200e-9, "s") == "200 ns"
    assert fmt_value(-1e6, "Hz") == "-1 MHz"
    assert axis_scale([100e-9, 500e-9], "s") == (1e-9, "ns")
    assert axis_scale([0.0, 2e6], "1/s") == (1e6, "MHz")


def test_budget_rows_add_up_to_hundred_percent():
    run = make_run()
    rows = budget_rows(run, top=3)
    assert [r.label for r in rows[:3]] == ["T2*", "charge noise", "T2"]
    assert rows[3].kind == "other" and rows[3].label == "other (4 sources)"
    assert rows[3].value == pytest.approx(4.8e-5 + 2.0e-5 + 7.5e-6 + 1.5e-6)
    assert [r.kind for r in rows[-2:]] == ["floor", "remainder"]
    assert sum(r.share for r in rows) == pytest.approx(100.0, abs=1e-9)


# ---------------------------------------------------------------- summary text

def test_summary_single_run_numbers():
    text = summary_text(make_result("single"), top=5)
    # whole run
    assert re.search(r"process fidelity\s+0\.998112\s+1\.89e-03", text)
    assert re.search(r"average gate fidelity\s+0\.998490\s+1\.51e-03", text)
    assert re.search(r"state fidelity\s+0\.997200\s+2\.80e-03", text)
    assert re.search(r"P\(up\) of dot A at readout\s+0\.012346", text)
    assert re.search(r"P\(up\) of dot B at readout\s+0\.987654", text)
    # per-step table: index, label, qubits, start and duration in ns, fidelity, infidelity
    assert re.search(r"start \(ns\)\s+duration \(ns\)", text)
    assert re.search(r"2\s+√SWAP A–B\s+A B\s+100\s+24\s+0\.998731\s+1\.27e-03", text)
    assert "worst step: #2 √SWAP A–B" in text
    # budget: top five by contribution, the rest merged, floor and remainder explicit
    lines = text.splitlines()
    start = next(k for k, l in enumerate(lines) if l.startswith("error budget"))
    body = lines[start + 4:]
    names = [re.split(r"\s{2,}", l.strip())[0] for l in body[:9]]
    assert names == ["T2*", "charge noise", "T2", "crosstalk", "T1", "other (2 sources)",
                     "floor (every listed source off)", "interaction remainder", "total"]
    shares = [float(m) for m in re.findall(r"(-?\d+\.\d+) %", "\n".join(body[:8]))]
    assert len(shares) == 8
    assert sum(shares) == pytest.approx(100.0, abs=0.05 * len(shares))
    assert shares[0] == pytest.approx(100 * 6.2e-4 / TOTAL, abs=0.05)
    assert re.search(r"total\s+" + re.escape(f"{TOTAL:.2e}") + r"\s+100\.0 %", text)
    # coherence margin, flagged below 1e4
    assert re.search(r"A\s+28 us\s+118\.5 ns\s+236\s+BELOW", text)
    assert re.search(r"B\s+2\.5 ms\s+50 ns\s+50 000\s+ok", text)
    # warnings and statistics
    assert "dot A: T2 / longest gate below 1e4" in text
    assert "wall time: 3.5 s" in text and "solver calls: 42" in text
    assert "run 0 wall time: 1.25 s" in text


def test_summary_top_and_remainder_always_listed():
    text = summary_text(make_result("single"), top=1)
    assert "other (6 sources)" in text
    assert "floor (every listed source off)" in text and "interaction remainder" in text


def test_summary_sweep_one_line_per_run_and_best():
    result = make_result("sweep1")
    text = summary_text(result)
    rows = [l for l in text.splitlines() if re.match(r"\s+\d\s+\d+ ns\s", l)]
    assert len(rows) == 5
    assert rows[2].rstrip().endswith("best") and "0.999020" in rows[2]
    assert sum("best" in r for r in rows) == 1
    # details of the run holding the budget (run 2)
    assert "steps: run 2 (tau = 300 ns)" in text
    assert "error budget: run 2 (tau = 300 ns)" in text
    assert "sweep tau: 100 ns .. 500 ns, 5 points" in text


def test_summary_caps_long_tables():
    result = make_result("sweep2")
    text = summary_text(result, max_rows=4)
    assert "8 more runs are in results.json" in text   # 3 shown + the best
    assert "best" in text


def test_summary_without_process_fidelity_and_budget():
    run = make_run(f_pro=None, detail=False, traces=False)
    r = SimulationResult("big.dotseq", "dev", "fast", False, (run,), (), ())
    text = summary_text(r)
    assert re.search(r"process fidelity\s+n/a\s+n/a", text)
    assert "error budget" not in text and "steps:" not in text


# ---------------------------------------------------------------- report folder

@pytest.fixture(scope="module")
def reports(tmp_path_factory):
    """The three hand-made results written once, for the tests that only read."""
    root = tmp_path_factory.mktemp("reports")
    return {k: write_report(make_result(k), root / k) for k in ("single", "sweep1", "sweep2")}


@pytest.fixture
def no_figures(monkeypatch):
    """Skip drawing where the figures are not what a test is about (speed)."""
    monkeypatch.setattr(figures_mod, "planned", lambda result: ())


def test_write_report_single(reports):
    out = reports["single"]
    assert out.is_absolute() and out.name == "single"
    names = sorted(p.name for p in out.iterdir())
    assert names == ["budget.png", "populations.png", "report.md", "results.json", "steps.png"]
    for n in ("budget.png", "populations.png", "steps.png"):
        w, h = png_size(out / n)
        assert w == 1100 and h >= 660
    md = (out / "report.md").read_text(encoding="utf-8")
    assert md.startswith("# Simulation report: seq.dotseq")
    assert "against your sample's and lab's limits" in md
    assert "![Error budget](budget.png)" in md and "sweep.png" not in md
    assert "| process fidelity | 0.998112 | 1.89e-03 |" in md
    assert "| time step | 500 ps |" in md
    assert "seq.dotseq:5:5" in md                     # step source column
    assert "pulse distortion" in md                   # every source listed in the file
    assert sorted(p.name for p in out.parent.iterdir()) == ["single", "sweep1", "sweep2"]


def test_results_json_round_trip_and_deterministic(reports, tmp_path):
    result = make_result("single")
    a = reports["single"]
    b = write_report(make_result("single"), tmp_path / "b")   # a second, equal result
    raw = (a / "results.json").read_bytes()
    assert raw == (b / "results.json").read_bytes()
    write_report(result, b)                          # overwrite: same bytes again
    assert (b / "results.json").read_bytes() == raw
    doc = json.loads(raw)
    assert doc["format"] == "dotseq-report" and doc["detail_run"] == 0
    assert list(doc) == sorted(doc)
    back = load_results(a)
    r0, b0 = result.runs[0], back.runs[0]
    assert b0.process_fidelity == r0.process_fidelity          # exact: floats as repr
    assert b0.average_fidelity == r0.average_fidelity
    assert b0.budget == r0.budget and b0.steps == r0.steps
    assert b0.budget_total == TOTAL and b0.populations == r0.populations
    np.testing.assert_array_equal(b0.traces["t"], r0.traces["t"])
    np.testing.assert_array_equal(b0.traces["B"], r0.traces["B"])
    assert back.coherence == result.coherence and back.warnings == result.warnings
    assert back.settings == result.settings and back.stats == result.stats


def test_results_json_non_finite_is_strict_json(tmp_path, no_figures):
    run = make_run(detail=False, traces=False)
    r = SimulationResult("s", "d", "fast", True, (run,), (),
                         (("A", math.inf, 1e-7, math.inf, False),), stats={"x": math.nan})
    out = write_report(r, tmp_path / "r")
    text = (out / "results.json").read_text(encoding="utf-8")
    json.loads(text, parse_constant=lambda c: pytest.fail(f"non-JSON constant {c}"))
    assert load_results(out).coherence[0][1] == math.inf


def test_sweep_png_only_for_sweeps(reports):
    one, s1, s2 = reports["single"], reports["sweep1"], reports["sweep2"]
    assert not (one / "sweep.png").exists()
    assert (s1 / "sweep.png").exists() and (s2 / "sweep.png").exists()
    assert png_size(s1 / "sweep.png") == (1100, 660)
    assert not (s2 / "populations.png").exists()        # no traces in that sweep
    doc = json.loads((s1 / "results.json").read_text(encoding="utf-8"))
    assert doc["best_run"] == 2 and doc["detail_run"] == 2
    doc2 = json.loads((s2 / "results.json").read_text(encoding="utf-8"))
    assert doc2["best_run"] == 6                         # amp 0.2 V, detuning 0 Hz
    assert "| 6 | 200 mV | 0 Hz | 0.999000 |" in (s2 / "report.md").read_text(encoding="utf-8")


def test_sweep_map_places_runs_row_major():
    result = make_result("sweep2")
    from compiler.sweeptable.build import grid_positions
    pos = grid_positions(result)
    assert pos[0] == (0, 0) and pos[1] == (0, 1) and pos[4] == (1, 0) and pos[11] == (2, 3)


def test_failed_write_leaves_nothing(tmp_path, monkeypatch):
    def boom(fig, path):
        raise RuntimeError("disk on fire")

    monkeypatch.setattr(figures_mod, "save_png", boom)
    with pytest.raises(RuntimeError):
        write_report(make_result("single"), tmp_path / "new")
    assert list(tmp_path.iterdir()) == []


def test_failed_overwrite_keeps_old_report(tmp_path, monkeypatch):
    with monkeypatch.context() as m:
        m.setattr(figures_mod, "planned", lambda result: ())
        out = write_report(make_result("single"), tmp_path / "rep")
    before = {p.name: p.read_bytes() for p in out.iterdir()}

    def full(fig, path):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(figures_mod, "save_png", full)
    with pytest.raises(ReportError) as e:
        write_report(make_result("sweep1"), out)
    assert e.value.stage == "report" and "No space left" in str(e.value)
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert [p.name for p in tmp_path.iterdir()] == ["rep"]


def test_refuses_non_report_folder(tmp_path, no_figures):
    user = tmp_path / "thesis"
    user.mkdir()
    (user / "chapter1.tex").write_text("precious", encoding="utf-8")
    with pytest.raises(ReportError) as e:
        write_report(make_result("single"), user)
    err = e.value
    assert isinstance(err, DotseqError) and err.stage == "report"
    assert "not a dotseq report" in err.first.message and "nothing was deleted" in err.first.message
    assert "another -o folder" in err.first.hint
    assert (user / "chapter1.tex").read_text(encoding="utf-8") == "precious"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["thesis"]


def test_refuses_report_with_user_files_and_missing_parent(tmp_path, no_figures):
    out = write_report(make_result("single"), tmp_path / "rep")
    (out / "notes.txt").write_text("mine", encoding="utf-8")
    with pytest.raises(ReportError, match="notes.txt"):
        write_report(make_result("single"), out)
    assert (out / "notes.txt").exists()
    with pytest.raises(ReportError) as e:
        write_report(make_result("single"), tmp_path / "missing" / "rep")
    assert "does not exist" in e.value.first.message and "mkdir -p" in e.value.first.hint
    f = tmp_path / "afile"
    f.write_text("x", encoding="utf-8")
    with pytest.raises(ReportError, match="is a file"):
        write_report(make_result("single"), f)


def test_overwrite_flag_and_empty_folder(tmp_path, no_figures):
    empty = tmp_path / "empty"
    empty.mkdir()
    assert (write_report(make_result("single"), empty) / "report.md").exists()
    with pytest.raises(ReportError, match="already holds a dotseq report"):
        write_report(make_result("single"), empty, overwrite=False)
    write_report(make_result("sweep1"), empty)           # overwrite=True replaces it
    assert load_results(empty).axes[0][0] == "tau"


def test_stale_partial_folder_of_dead_process_is_tidied(tmp_path, no_figures):
    stale = tmp_path / ".rep.partial-999999999-abcd"
    stale.mkdir()
    (stale / "report.md").write_text("half", encoding="utf-8")
    write_report(make_result("single"), tmp_path / "rep")
    assert not stale.exists()


def test_figures_are_pure_and_use_agg():
    result = make_result("sweep2")
    fig = figures_mod.build("sweep.png", result)
    assert type(fig.canvas).__name__ == "FigureCanvasAgg"
    assert figures_mod.planned(make_result("single")) == ("budget.png", "steps.png",
                                                           "populations.png")
    with pytest.raises(ValueError):
        figures_mod.build("sweep.png", make_result("single"))


def test_many_steps_and_budget_sources_draw(tmp_path):
    base = make_run()
    steps = tuple(StepFidelity(k, "rot", ("A",), f"rot A x {k}°", "s:1:1", k * 1e-8, 1e-8,
                               1 - 10 ** (-3 - (k % 5))) for k in range(120))
    budget = tuple(BudgetLine(f"source {k}", 10 ** (-k / 4) * 1e-3) for k in range(20))
    run = RunResult(0, (), ("A", "B"), 1.2e-6, 0.99, 0.992, 0.99, {"A": 0.1}, steps, budget,
                    budget_total=sum(b.infidelity for b in budget) - 1e-6, budget_floor=0.0,
                    budget_remainder=-1e-6)
    r = SimulationResult("s", "d", "fast", True, (run,), (), ())
    out = write_report(r, tmp_path / "many")
    assert (out / "steps.png").exists() and (out / "budget.png").exists()
    text = summary_text(r, max_rows=10)
    assert "showing the 10 steps with the largest infidelity of 120" in text


def test_markdown_escapes_each_cell_once():
    """A budget note with Markdown's special characters (the registry's own
    'rms √2/T2*') is escaped once: 'T2\\*' in the file, shown as 'T2*'."""
    from dataclasses import replace
    from compiler.report.text import render_markdown
    run = make_run()
    budget = (BudgetLine("T2*", 6.2e-4, "Gaussian detuning, rms √2/T2*, by quadrature"),
              BudgetLine("a|b", 2.9e-4, "under_score `tick` | bar"))
    result = replace(make_result("single"), runs=(replace(run, budget=budget),))
    md = render_markdown(result)
    assert "| Gaussian detuning, rms √2/T2\\*, by quadrature |" in md
    assert "| under\\_score \\`tick\\` \\| bar |" in md
    assert "\\\\" not in md                          # no escaped backslash anywhere


# ---------------------------------------------------------------- the shared sweep table

def test_in_file_sweep_writes_the_shared_sweep_table(reports):
    """A sequence's own sweep is written by the same table writer as
    ``dotseq sweep`` (compiler.sweeptable): sweep.json and sweep.csv with one
    point per run, placed row-major, and the same ranking (issue 13)."""
    import csv
    out = reports["sweep2"]
    doc = json.loads((out / "sweep.json").read_text(encoding="utf-8"))
    assert doc["format"] == "dotseq-sweep" and doc["complete"] and doc["points_total"] == 12
    assert [a["name"] for a in doc["axes"]] == ["amp", "detuning"]
    assert doc["axes"][0]["source"] == "file" and doc["figure"] == "sweep.png"
    result = make_result("sweep2")
    for p, run in zip(doc["points"], result.runs):
        assert p["average_gate_fidelity"] == run.average_fidelity
        assert p["values"] == dict(run.sweep)
    best = max(range(12), key=lambda k: result.runs[k].average_fidelity)
    assert doc["best"]["index"] == best
    with open(out / "sweep.csv", newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(line for line in f if not line.startswith("#")))
    assert len(rows) == 12 and float(rows[5]["state_fidelity"]) == result.runs[5].state_fidelity
    assert not (reports["single"] / "sweep.json").exists()


def test_report_and_sweep_draw_with_one_figure_module():
    """One figure code for both kinds of sweep: the report's sweep.png is the
    shared figure of the table built from the result."""
    from compiler.sweep import run as sweep_run
    from compiler.sweeptable import figure as shared
    from compiler.sweeptable.build import from_result
    assert sweep_run.FIG is shared and figures_mod.SF is shared
    table = from_result(make_result("sweep1"))
    assert [p.index for p in table.points] == [0, 1, 2, 3, 4]
    assert table.metric == "average gate fidelity"
    fig = figures_mod.build("sweep.png", make_result("sweep1"))
    assert fig.texts[0].get_text() == shared.figure(table).texts[0].get_text()


def test_three_axis_sweep_map_is_the_slice_through_the_best_run():
    result = make_result("sweep2")
    runs = []
    for extra in (0.0, 1.0):
        for r in result.runs:
            f = r.process_fidelity - (0.0 if extra else 1e-3)
            runs.append(make_run(len(runs), r.sweep + (("gain", extra),), f, f - 0.002,
                                 detail=False, traces=False))
    three = dataclasses.replace(result, runs=tuple(runs),
                                axes=result.axes + (("gain", (0.0, 1.0), ""),))
    fig = figures_mod.build("sweep.png", three)
    assert "slice at gain = 1" in fig.texts[0].get_text()


# ---------------------------------------------------------------- observables

def _with_observables(result, shots: int = 0):
    """Each run reads A (spin) and the pair A-B (blockade): a fringe over
    the runs, recorded through F_up = 0.95, F_down = 0.99 (invented)."""
    from compiler.readout import recorded
    from compiler.simulate.types import Observable
    runs = []
    for k, r in enumerate(result.runs):
        p = 0.5 * (1 + math.cos(0.7 * k))
        obs = []
        for label, kind, qubits, f_yes, f_no in (("P(up) A", "spin", ("A",), 0.95, 0.99),
                                                  ("P(singlet) A-B", "singlet", ("A", "B"),
                                                   0.98, 0.97)):
            m = recorded(p, f_yes, f_no)
            obs.append(Observable(label, kind, qubits, p, m, 1.0, shots,
                                  shots * m if shots else None,
                                  math.sqrt(m * (1 - m) / shots) if shots else None))
        runs.append(dataclasses.replace(r, observables=tuple(obs), fidelity_qubits=("A",)))
    return dataclasses.replace(result, runs=tuple(runs))


def test_observables_in_summary_results_and_sweep_table(tmp_path):
    result = _with_observables(make_result("sweep1"), shots=1000)
    text = summary_text(result)
    assert "observables" in text and "P(singlet) A-B" in text and "± 1σ" in text
    assert "fidelities of the qubit the program acts on (A); idle spectator B" in text
    out = write_report(result, tmp_path / "obs")
    assert figures_mod.planned(result)[0] == "observables.png"       # first figure
    assert png_size(out / "observables.png") == (1100, 660)
    back = load_results(out)
    assert back.runs[3].observables == result.runs[3].observables
    assert back.runs[3].fidelity_qubits == ("A",)
    doc = json.loads((out / "sweep.json").read_text(encoding="utf-8"))
    entry = doc["points"][2]["observables"][0]
    assert entry["label"] == "P(up) A" and entry["measured"] == result.runs[2].observables[0].measured
    assert doc["observables_figure"] == "observables.png"
    head = [line for line in (out / "sweep.csv").read_text(encoding="utf-8").splitlines()
            if not line.startswith("#")][0]
    assert "P(up) A measured,P(up) A ideal,P(up) A error" in head


def test_observables_map_for_two_axes():
    result = _with_observables(make_result("sweep2"))
    fig = figures_mod.build("observables.png", result)
    assert "What the readouts record over amp and detuning" in fig.texts[0].get_text()
    assert "observables.png" not in figures_mod.planned(make_result("sweep2"))


def test_spectra_figure_draws():
    """spectra.png of a result with a Zeeman-noise spectrum is drawn (it
    ended in a NameError: the figure called helpers that no longer exist)."""
    from compiler.spectra import Spectrum
    spec = Spectrum(1e6, 1.0, f_low=1e-2)
    result = dataclasses.replace(make_result("single"), noise_spectra=(
        ("A", spec, (("run 0 (1 π pulse)", 8e-6, (4e-6,)), ("rot A x 90° (worst step 1)", 4e-8, ()))),))
    assert "spectra.png" in figures_mod.planned(result)
    fig = figures_mod.build("spectra.png", result)
    assert "Noise spectra" in fig.texts[0].get_text()


@pytest.mark.parametrize("floor_times, said", [(-1.0, "within twice it"), (-1.9, "within twice it"),
                                               (-2.5, "NEGATIVE BEYOND twice it"), (1.0, "")])
def test_the_sub_step_error_is_shown_beside_the_fidelities_and_bounds_the_floor(floor_times, said):
    """The error budget's estimate of the sub-step model's error (4/3·|F(m) −
    F(2m)|, Richardson) is printed in the whole-run section too, with the way
    to lower it when above the averaging tolerance; a negative floor is
    flagged only beyond twice the estimate (with nothing else acting the
    floor is the sub-step error itself and sits at ± the estimate, within
    about 1 %, measured) (common practice, no source)."""
    num = 3.0e-4
    run = dataclasses.replace(make_run(), budget_numerical_error=num, budget_floor=floor_times * num)
    r = SimulationResult("seq.dotseq", "dev", "fast", False, (run,), (), (),
                         settings={"substeps_per_sample": 2, "averaging_tolerance": 1e-4})
    text = summary_text(r)
    whole, budget = text.split("\nerror budget:")
    assert ("sub-step model error about 3.0e-04 in fidelity (2 sub-steps per sample" in whole
            and "--substeps 4 should lower it" in whole)
    if said:
        assert said in budget
    else:
        assert "twice it" not in budget
    quiet = dataclasses.replace(run, budget_numerical_error=5e-5)
    r2 = dataclasses.replace(r, runs=(quiet,))
    assert "--substeps" not in summary_text(r2).split("\nerror budget:")[0]
