"""The export bundle: round trip, checksums, determinism, stacking, CSV,
refusals and the atomic write (including a process killed mid-export).

The waveforms here are synthetic, built by hand; no physics is checked.
"""

from __future__ import annotations

import errno
import hashlib
import io
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from compiler.errors import DotseqError
from compiler.export import (FORMAT_NAME, FORMAT_VERSION, BundleError, RunSize, estimate_bundle_bytes,
                             read_bundle, recover, write_bundle)
from compiler.export import bundle as bundle_mod
from compiler.export.files import npy_header, write_npy
from compiler.synth.types import Output, StepRecord, Waveforms

SOURCE = {"sequence": "seq/ramsey.dotseq", "device": "devices/pair.yaml",
          "device_name": "test pair", "dotseq_version": "0.1.0",
          "sha256": {"seq/ramsey.dotseq": "ab" * 32, "devices/pair.yaml": "cd" * 32}}
LSB_IQ = 1.0 / 2**14     # 14-bit DAC over a 1 V span (invented numbers)
LSB_GATE = 2.0 / 2**16   # 16-bit DAC over a 2 V span (invented numbers)


# ---------------------------------------------------------------- helpers

def make_run(run_index: int = 0, n: int = 200, fs: float = 1e9, sweep=None,
             markers: tuple[str, ...] = ("M1",)) -> Waveforms:
    """A small hand-made run: I/Q pair, one gate, markers; deterministic."""
    t = np.arange(n) / fs
    outputs = {}

    def analog(name, channel, kind, ideal, lsb, dc=0.0):
        codes = np.round(ideal / lsb).astype(np.int32)
        outputs[name] = Output(name, channel, kind, codes * lsb, codes, ideal, dc, lsb)

    env = np.where((t > 20e-9) & (t < 120e-9), 0.25, 0.0)
    phase = 0.1 * run_index
    analog("mw.I", "mw", "iq", env * np.cos(2 * np.pi * 50e6 * t + phase), LSB_IQ)
    analog("mw.Q", "mw", "iq", env * np.sin(2 * np.pi * 50e6 * t + phase), LSB_IQ)
    analog("P_A", "P_A", "gate", np.where(t > 150e-9, -0.0123 * (run_index + 1), 0.0),
           LSB_GATE, dc=0.35)
    for k, m in enumerate(markers):
        on = ((np.arange(n) + 10 * k) % 50 < 7).astype(np.float64)
        outputs[m] = Output(m, m, "marker", on, None, on.copy())
    steps = (
        StepRecord(0, "rot", ("A",), 20, 120, ("mw",), "t.dotseq:1:1", "rot A x 90 deg",
                   {"angle_rad": np.float64(np.pi / 2), "phase_rad": 0.0,
                    "amplitude_V": np.float32(0.25), "n_periods": np.int64(5)}),
        StepRecord(1, "wait", (), 120, 150, (), "t.dotseq:2:1", "wait 30 ns",
                   {"duration_s": 3e-8}),
        StepRecord(2, "pad", (), 150, n, (), "", "", {}),
    )
    return Waveforms(
        run_index=run_index,
        sweep=tuple(sweep) if sweep is not None else (("tau", 1e-8 * (run_index + 1)),
                                                      ("detuning", 0.1 + 0.2)),
        sample_rate=fs, n_samples=n, outputs=outputs, steps=steps,
        frames={"A": float(np.pi / 3), "B": -0.0},
        larmor={"A": 13.99e9, "B": np.float64(14.0000123e9)},
        warnings=("burst on A is shorter than 2 periods",) if run_index == 1 else ())


def runs3(lengths=(200, 200, 200)):
    return [make_run(i, n) for i, n in enumerate(lengths)]


def all_files(d: Path) -> dict[str, bytes]:
    return {p.relative_to(d).as_posix(): p.read_bytes() for p in sorted(d.rglob("*"))
            if p.is_file()}


def leftovers(parent: Path) -> list[str]:
    return sorted(p.name for p in parent.iterdir() if ".partial-" in p.name or ".old-" in p.name)


def dead_pid() -> int:
    p = subprocess.Popen([sys.executable, "-c", "pass"])
    p.wait()
    return p.pid


# ---------------------------------------------------------------- round trip

def test_round_trip_per_run(tmp_path):
    runs = runs3()
    out = write_bundle(runs, tmp_path / "b", source=SOURCE)
    assert out == (tmp_path / "b").absolute()
    assert sorted(p.name for p in out.iterdir()) == ["manifest.json", "run_0000", "run_0001",
                                                     "run_0002"]
    assert sorted(p.name for p in (out / "run_0000").iterdir()) == [
        "M1.npy", "P_A.codes.npy", "P_A.npy", "mw.I.codes.npy", "mw.I.npy", "mw.Q.codes.npy",
        "mw.Q.npy"]
    b = read_bundle(out)
    assert b["stacked"] is None
    for w, r in zip(runs, b["runs"]):
        assert r["index"] == w.run_index
        assert list(r["volts"]) == list(w.outputs)
        for name, o in w.outputs.items():
            assert r["volts"][name].dtype == np.float64
            np.testing.assert_array_equal(r["volts"][name], o.volts)
            if o.codes is None:
                assert name not in r["codes"]
            else:
                assert r["codes"][name].dtype == np.int32
                np.testing.assert_array_equal(r["codes"][name], o.codes)
    # plain np.load works as well
    np.testing.assert_array_equal(np.load(out / "run_0001" / "mw.Q.npy"),
                                  runs[1].outputs["mw.Q"].volts)


def test_manifest_contents(tmp_path):
    runs = runs3()
    out = write_bundle(runs, tmp_path / "b", source=SOURCE)
    text = (out / "manifest.json").read_text(encoding="utf-8")
    m = json.loads(text)
    # deterministic JSON: sorted keys, indent 2, trailing newline
    assert text == json.dumps(m, sort_keys=True, indent=2, ensure_ascii=False) + "\n"
    assert m["format"] == FORMAT_NAME == "dotseq-bundle" and m["format_version"] == FORMAT_VERSION == 3
    assert m["layout"] == "per-run"
    assert m["source"] == SOURCE
    assert m["sample_rate_Hz"] == 1e9
    assert m["units"]["time"] == "s" and m["units"]["voltage"] == "V"
    assert m["n_runs"] == 3 and m["output_order"] == ["mw.I", "mw.Q", "P_A", "M1"]
    assert m["sweep_axes"] == [{"name": "tau", "values": [1e-8 * k for k in (1, 2, 3)]},
                               {"name": "detuning", "values": [0.1 + 0.2]}]
    r1 = m["runs"][1]
    assert r1["sweep"] == {"tau": 2e-8, "detuning": 0.30000000000000004}  # repr round trip
    assert r1["n_samples"] == 200 and r1["duration_s"] == 200 / 1e9
    assert r1["padding_samples"] == 0
    assert r1["warnings"] == ["burst on A is shorter than 2 periods"]
    assert r1["frames_rad"] == {"A": float(np.pi / 3), "B": -0.0}
    assert r1["larmor_Hz"] == {"A": 13.99e9, "B": 14.0000123e9}
    e = r1["outputs"]["mw.I"]
    assert e["file"] == "run_0001/mw.I.npy" and e["codes_file"] == "run_0001/mw.I.codes.npy"
    assert (e["channel"], e["kind"], e["dtype"], e["shape"]) == ("mw", "iq", "float64", [200])
    assert e["lsb_V"] == LSB_IQ and e["codes_dtype"] == "int32"
    assert e["sha256"] == m["files"]["run_0001/mw.I.npy"]["sha256"]
    assert m["runs"][0]["outputs"]["P_A"]["dc_level_V"] == 0.35
    mk = r1["outputs"]["M1"]
    assert mk["codes_file"] is None and mk["codes_sha256"] is None and mk["lsb_V"] == 0.0
    s0 = r1["steps"][0]
    assert s0["start_sample"] == 20 and s0["stop_sample"] == 120
    assert s0["start_s"] == 20 / 1e9 and s0["stop_s"] == 120 / 1e9
    assert s0["params"] == {"angle_rad": np.pi / 2, "phase_rad": 0.0,
                            "amplitude_V": float(np.float32(0.25)), "n_periods": 5}
    assert (s0["kind"], s0["qubits"], s0["channels"], s0["source"], s0["text"]) == (
        "rot", ["A"], ["mw"], "t.dotseq:1:1", "rot A x 90 deg")
    assert [s["kind"] for s in r1["steps"]] == ["rot", "wait", "pad"]
    # every data file is listed with its size
    for rel, info in m["files"].items():
        assert (out / rel).stat().st_size == info["bytes"]


def test_npy_writer_matches_numpy_save(tmp_path):
    for a in (np.linspace(-1, 1, 1001), np.arange(-5, 5, dtype=np.int32), np.zeros(0),
              np.arange(12.0).reshape(3, 4)):
        buf = io.BytesIO()
        np.save(buf, a, allow_pickle=False)
        p = tmp_path / f"a{a.size}_{a.ndim}.npy"
        w = write_npy(p, a, a.dtype.newbyteorder("<"))
        assert p.read_bytes() == buf.getvalue()
        assert w.size == len(buf.getvalue())
        assert len(npy_header(a.shape, a.dtype)) % 64 == 0


@pytest.mark.parametrize("kw", [dict(), dict(csv=True), dict(stacked=True),
                                dict(stacked=True, csv=True), dict(segments=True),
                                dict(segments=True, csv=True), dict(segments=True, raw=True)],
                         ids=["per-run", "csv", "stacked", "stacked-csv", "segments",
                              "segments-csv", "segments-raw"])
def test_same_input_gives_byte_identical_bundle(tmp_path, kw):
    runs = runs3((200, 150, 180) if kw.get("stacked") else (200, 200, 200))
    a = write_bundle(runs, tmp_path / "a", source=SOURCE, **kw)
    b = write_bundle(runs3((200, 150, 180) if kw.get("stacked") else (200, 200, 200)),
                     tmp_path / "b", source=dict(SOURCE), **kw)
    fa, fb = all_files(a), all_files(b)
    assert list(fa) == list(fb)
    for name in fa:
        assert fa[name] == fb[name], name


@settings(max_examples=25, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(values=st.lists(st.floats(allow_nan=False, allow_infinity=False), min_size=1,
                       max_size=4),
       volts=st.lists(st.floats(-2.0, 2.0), min_size=1, max_size=6))
def test_floats_round_trip_exactly(tmp_path, values, volts):
    # repr-written JSON floats and float64 .npy give back the very same numbers
    w = make_run(0, n=len(volts), sweep=[(f"x{i}", v) for i, v in enumerate(values)])
    v = np.array(volts)
    outputs = dict(w.outputs)
    outputs["P_A"] = Output("P_A", "P_A", "gate", v, None, v, dc_level=values[0], lsb=0.0)
    w = Waveforms(0, w.sweep, w.sample_rate, w.n_samples, outputs, (), {"A": values[-1]}, {})
    b = read_bundle(write_bundle([w], tmp_path / "h", source=SOURCE))
    r = b["manifest"]["runs"][0]
    assert r["sweep"] == {f"x{i}": x for i, x in enumerate(values)}
    assert r["outputs"]["P_A"]["dc_level_V"] == values[0] and r["frames_rad"]["A"] == values[-1]
    assert np.array_equal(b["runs"][0]["volts"]["P_A"], v)


# ---------------------------------------------------------------- checksums

def test_corrupted_file_is_named(tmp_path):
    out = write_bundle(runs3(), tmp_path / "b", source=SOURCE)
    p = out / "run_0001" / "P_A.npy"
    data = bytearray(p.read_bytes())
    data[-3] ^= 0x01                      # same size, one bit flipped
    p.write_bytes(bytes(data))
    with pytest.raises(BundleError) as ei:
        read_bundle(out)
    err = ei.value
    assert isinstance(err, DotseqError) and err.stage == "export"
    assert len(err.problems) == 1
    assert err.first.span.file == str(p)
    assert "SHA-256" in err.first.message and "export it again" in err.first.hint
    assert str(p) in str(err)


def test_missing_and_resized_files_all_reported(tmp_path):
    out = write_bundle(runs3(), tmp_path / "b", source=SOURCE, csv=True)
    (out / "run_0000" / "mw.I.codes.npy").unlink()
    with open(out / "run_0002" / "samples.csv", "ab") as f:
        f.write(b"0,0,0,0,0\n")
    with pytest.raises(BundleError) as ei:
        read_bundle(out)
    files = sorted(p.span.file for p in ei.value.problems)
    assert files == [str(out / "run_0000" / "mw.I.codes.npy"),
                     str(out / "run_0002" / "samples.csv")]
    msgs = " | ".join(p.message for p in ei.value.problems)
    assert "missing" in msgs and "bytes" in msgs


def test_checksums_verify_with_hashlib(tmp_path):
    # the recipe given in docs/bundle.md
    import hashlib
    out = write_bundle(runs3(), tmp_path / "b", source=SOURCE, csv=True)
    m = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    for rel, info in m["files"].items():
        assert hashlib.sha256((out / rel).read_bytes()).hexdigest() == info["sha256"]


def test_read_rejects_bad_manifests(tmp_path):
    out = write_bundle(runs3(), tmp_path / "b", source=SOURCE)
    mpath = out / "manifest.json"
    good = json.loads(mpath.read_text(encoding="utf-8"))

    def expect(manifest_text, words):
        mpath.write_text(manifest_text, encoding="utf-8")
        with pytest.raises(BundleError) as ei:
            read_bundle(out)
        assert ei.value.first.span.file == str(mpath)
        assert words in ei.value.first.message, ei.value.first.message

    expect("{not json", "not valid JSON")
    expect(json.dumps({**good, "format": "other"}), "dotseq-bundle")
    expect(json.dumps({**good, "format_version": 99}), "newer")
    expect(json.dumps({**good, "files": {"../escape.npy": {"sha256": "0", "bytes": 1}}}),
           "inside the bundle")
    bad = json.loads(json.dumps(good))
    del bad["runs"][0]["outputs"]["mw.I"]
    expect(json.dumps(bad), "malformed")
    with pytest.raises(BundleError, match="does not exist"):
        read_bundle(tmp_path / "nowhere")
    (tmp_path / "plain").mkdir()
    with pytest.raises(BundleError, match="not a dotseq bundle"):
        read_bundle(tmp_path / "plain")


# ---------------------------------------------------------------- stacked

def test_stacked_shapes_and_recorded_padding(tmp_path):
    runs = runs3((200, 150, 180))
    out = write_bundle(runs, tmp_path / "s", source=SOURCE, stacked=True)
    assert sorted(p.name for p in out.iterdir()) == ["arrays", "manifest.json"]
    m = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    assert m["layout"] == "stacked" and m["n_samples_max"] == 200
    assert [r["padding_samples"] for r in m["runs"]] == [0, 50, 20]
    assert [r["n_samples"] for r in m["runs"]] == [200, 150, 180]
    assert all(r["folder"] is None for r in m["runs"])
    b = read_bundle(out)
    st = b["stacked"]
    for name in ("mw.I", "mw.Q", "P_A", "M1"):
        a = np.load(out / "arrays" / f"{name}.npy")
        assert a.shape == (3, 200) and a.dtype == np.float64
        assert st["volts"][name].shape == (3, 200)
        for row, w in enumerate(runs):
            o = w.outputs[name]
            e = m["runs"][row]["outputs"][name]
            assert e["row"] == row and e["shape"] == [3, 200]
            assert e["file"] == f"arrays/{name}.npy"
            np.testing.assert_array_equal(a[row, :w.n_samples], o.volts)
            assert np.all(a[row, w.n_samples:] == o.volts[-1])       # idle value
            assert e["pad_value"] == float(o.volts[-1])
            np.testing.assert_array_equal(b["runs"][row]["volts"][name], o.volts)
            if o.codes is not None:
                c = np.load(out / "arrays" / f"{name}.codes.npy")
                assert c.shape == (3, 200) and c.dtype == np.int32
                assert np.all(c[row, w.n_samples:] == o.codes[-1])
                assert e["pad_code"] == int(o.codes[-1])
                np.testing.assert_array_equal(b["runs"][row]["codes"][name], o.codes)
            else:
                assert e["pad_code"] is None


def test_stacked_refuses_runs_with_different_outputs(tmp_path):
    runs = [make_run(0), make_run(1, markers=("M1", "M2"))]
    with pytest.raises(BundleError, match="cannot be stacked") as ei:
        write_bundle(runs, tmp_path / "s", source=SOURCE, stacked=True)
    assert "without stacking" in ei.value.first.hint
    assert not (tmp_path / "s").exists() and leftovers(tmp_path) == []
    write_bundle(runs, tmp_path / "s", source=SOURCE)  # fine per run


# ---------------------------------------------------------------- CSV

def test_csv_content(tmp_path):
    fs = 2.4e9
    w = make_run(0, n=37, fs=fs)
    out = write_bundle([w], tmp_path / "c", source=SOURCE, csv=True)
    lines = (out / "run_0000" / "samples.csv").read_bytes().decode("utf-8").split("\n")
    assert lines[0] == "time (ns),mw.I (V),mw.Q (V),P_A (V),M1 (0/1)"
    assert lines[-1] == "" and len(lines) == 1 + 37 + 1          # header, rows, final newline
    o = w.outputs
    i = 30
    assert lines[1 + i] == "%.6f,%.9e,%.9e,%.9e,%d" % (
        i * 1e9 / fs, o["mw.I"].volts[i], o["mw.Q"].volts[i], o["P_A"].volts[i],
        o["M1"].volts[i])
    data = np.loadtxt(out / "run_0000" / "samples.csv", delimiter=",", skiprows=1)
    assert data.shape == (37, 5)
    np.testing.assert_allclose(data[:, 0], np.arange(37) / fs * 1e9, atol=1e-6)
    for k, name in enumerate(["mw.I", "mw.Q", "P_A", "M1"], start=1):
        np.testing.assert_allclose(data[:, k], o[name].volts, rtol=1e-9, atol=0)
    m = read_bundle(out)["manifest"]
    assert m["runs"][0]["csv"]["file"] == "run_0000/samples.csv"


# ---------------------------------------------------------------- refusals

def test_refuses_a_folder_that_is_not_a_bundle(tmp_path):
    user = tmp_path / "thesis"
    user.mkdir()
    (user / "chapter1.tex").write_text("precious", encoding="utf-8")
    with pytest.raises(BundleError) as ei:
        write_bundle(runs3(), user, source=SOURCE)
    p = ei.value.first
    assert p.span.file == str(user)
    assert "not a dotseq bundle" in p.message and "-o" in p.hint
    assert (user / "chapter1.tex").read_text(encoding="utf-8") == "precious"
    assert sorted(x.name for x in user.iterdir()) == ["chapter1.tex"]
    assert leftovers(tmp_path) == []
    # a file, and a folder whose manifest is someone else's
    (tmp_path / "afile").write_text("x", encoding="utf-8")
    with pytest.raises(BundleError, match="is a file"):
        write_bundle(runs3(), tmp_path / "afile", source=SOURCE)
    other = tmp_path / "other"
    other.mkdir()
    (other / "manifest.json").write_text('{"format": "something else"}', encoding="utf-8")
    with pytest.raises(BundleError, match="not a dotseq bundle"):
        write_bundle(runs3(), other, source=SOURCE)
    assert (other / "manifest.json").exists()


def test_missing_parent_and_no_overwrite(tmp_path):
    with pytest.raises(BundleError) as ei:
        write_bundle(runs3(), tmp_path / "no" / "such" / "b", source=SOURCE)
    assert "does not exist" in ei.value.first.message and "mkdir" in ei.value.first.hint
    out = write_bundle(runs3(), tmp_path / "b", source=SOURCE)
    before = all_files(out)
    with pytest.raises(BundleError, match="already holds"):
        write_bundle([make_run(0, 10)], out, source=SOURCE, overwrite=False)
    assert all_files(out) == before


def test_empty_folder_is_used_and_bundle_is_replaced(tmp_path):
    target = tmp_path / "out"
    target.mkdir()
    write_bundle(runs3(), target, source=SOURCE)
    assert read_bundle(target)["manifest"]["n_runs"] == 3
    write_bundle([make_run(0, 10)], target, source=SOURCE)
    b = read_bundle(target)
    assert b["manifest"]["n_runs"] == 1 and b["runs"][0]["volts"]["mw.I"].shape == (10,)
    assert not (target / "run_0001").exists()           # nothing of the old bundle remains
    assert leftovers(tmp_path) == []


def test_bad_waveforms_are_reported_together(tmp_path):
    w = make_run(0)
    bad_volts = dict(w.outputs)
    o = bad_volts["P_A"]
    v = o.volts.copy()
    v[7] = np.nan
    bad_volts["P_A"] = Output("P_A", "P_A", "gate", v, o.codes, o.ideal, o.dc_level, o.lsb)
    short = Output("mw.Q", "mw", "iq", o.volts[:5], o.codes[:5], o.ideal[:5])
    bad_volts["mw.Q"] = short
    runs = [Waveforms(0, (), 1e9, 200, bad_volts, (), {}, {}),
            Waveforms(0, (), 2e9, 200, w.outputs, (), {}, {})]
    with pytest.raises(BundleError) as ei:
        write_bundle(runs, tmp_path / "b", source=SOURCE)
    msgs = [p.message for p in ei.value.problems]
    assert any("different sample rates" in s for s in msgs)
    assert any("not finite, first at sample 7" in s for s in msgs)
    assert any("shape (5,)" in s for s in msgs)
    assert any("appears twice" in s for s in msgs)
    assert not (tmp_path / "b").exists()
    evil = Output("../x", "x", "gate", o.volts, o.codes, o.ideal)
    with pytest.raises(BundleError, match="cannot be used as a file name"):
        write_bundle([Waveforms(0, (), 1e9, 200, {"../x": evil}, (), {}, {})],
                     tmp_path / "b", source=SOURCE)
    with pytest.raises(BundleError, match="no runs"):
        write_bundle([], tmp_path / "b", source=SOURCE)
    with pytest.raises(BundleError, match="cannot hold"):
        write_bundle([w], tmp_path / "b", source={"when": object()})
    odd = StepRecord(0, "wait", (), 0, 200, (), "t:1:1", "wait", {"obj": object()})
    with pytest.raises(BundleError, match=r"step 0 params\.obj is a object"):
        write_bundle([Waveforms(0, (), 1e9, 200, w.outputs, (odd,), {}, {})],
                     tmp_path / "b", source=SOURCE)
    assert not (tmp_path / "b").exists() and leftovers(tmp_path) == []


def test_non_finite_params_and_numpy_values_in_manifest(tmp_path):
    w = make_run(0)
    steps = (StepRecord(0, "wait", (), 0, 200, (), "t:1:1", "wait",
                        {"j_Hz": float("inf"), "v": np.arange(3), "pair": ("A", "B"),
                         "flag": np.bool_(True)}),)
    w2 = Waveforms(0, w.sweep, w.sample_rate, w.n_samples, w.outputs, steps, w.frames, w.larmor)
    out = write_bundle([w2], tmp_path / "b", source={**SOURCE, "path": tmp_path / "x.dotseq"})
    m = read_bundle(out)["manifest"]
    assert m["runs"][0]["steps"][0]["params"] == {"j_Hz": "inf", "v": [0, 1, 2],
                                                  "pair": ["A", "B"], "flag": True}
    assert m["source"]["path"] == str(tmp_path / "x.dotseq")


# ---------------------------------------------------------------- atomic write

def test_interrupt_removes_the_temporary_folder(tmp_path, monkeypatch):
    out = write_bundle(runs3(), tmp_path / "b", source=SOURCE)
    before = all_files(out)
    calls = []
    real = bundle_mod.write_npy

    def flaky(*a, **k):
        calls.append(1)
        if len(calls) == 3:
            raise KeyboardInterrupt
        return real(*a, **k)

    monkeypatch.setattr(bundle_mod, "write_npy", flaky)
    with pytest.raises(KeyboardInterrupt):
        write_bundle(runs3(), out, source={"other": 1})
    assert leftovers(tmp_path) == []
    assert all_files(out) == before


def test_disk_error_becomes_a_bundle_error(tmp_path, monkeypatch):
    def full(path, *a, **k):
        raise OSError(errno.ENOSPC, "No space left on device", str(path))

    monkeypatch.setattr(bundle_mod, "write_npy", full)
    with pytest.raises(BundleError) as ei:
        write_bundle(runs3(), tmp_path / "b", source=SOURCE)
    p = ei.value.first
    assert p.span.file == str((tmp_path / "b").absolute())
    assert "No space left" in p.message and "disk space" in p.hint
    assert not (tmp_path / "b").exists() and leftovers(tmp_path) == []


def test_crash_between_the_two_renames_keeps_and_restores_the_old_bundle(tmp_path):
    target = tmp_path / "b"
    write_bundle(runs3(), target, source=SOURCE)
    before = all_files(target)
    # what a process killed after renaming the old bundle aside leaves behind
    aside = tmp_path / f".b.old-{dead_pid()}-0badc0de"
    os.rename(target, aside)
    with pytest.raises(BundleError) as ei:
        read_bundle(target)
    assert str(aside) in ei.value.first.hint
    assert read_bundle(aside)["manifest"]["n_runs"] == 3      # intact under its aside name
    # tidying restores it ...
    actions = recover(target)
    assert len(actions) == 1 and "restored" in actions[0]
    assert all_files(target) == before and leftovers(tmp_path) == []
    # ... and so does the next export, which then replaces it as usual
    os.rename(target, aside)
    write_bundle([make_run(0, 10)], target, source=SOURCE)
    assert read_bundle(target)["manifest"]["n_runs"] == 1
    assert leftovers(tmp_path) == []


def test_stale_partial_folders_of_dead_processes_are_removed(tmp_path):
    stale = tmp_path / f".b.partial-{dead_pid()}-12345678"
    stale.mkdir()
    (stale / "half.npy").write_bytes(b"\x93NUMPY")
    mine = tmp_path / f".b.partial-{os.getpid()}-87654321"   # a live writer: left alone
    mine.mkdir()
    write_bundle(runs3(), tmp_path / "b", source=SOURCE)
    assert not stale.exists() and mine.exists()
    mine.rmdir()


_CHILD = r"""
import sys, time
sys.path.insert(0, {tests!r})
from test_export import make_run, SOURCE
from compiler.export import bundle

real = bundle.write_npy
def slow(*a, **k):
    w = real(*a, **k)
    time.sleep(0.2)  # a slow disk: the parent kills us during this
    return w
bundle.write_npy = slow
runs = [make_run(i, 50_000) for i in range(4)]
print("writing", flush=True)
bundle.write_bundle(runs, {target!r}, source={{"child": True}})
print("done", flush=True)
"""


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs POSIX signals")
def test_killed_export_leaves_previous_bundle_intact(tmp_path):
    target = tmp_path / "bundle"
    write_bundle(runs3(), target, source=SOURCE)
    before = all_files(target)
    code = _CHILD.format(tests=str(Path(__file__).resolve().parent), target=str(target))
    child = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, cwd=str(tmp_path))
    try:
        deadline = time.monotonic() + 20
        partial = None
        while time.monotonic() < deadline and child.poll() is None:
            found = [p for p in tmp_path.iterdir() if p.name.startswith(".bundle.partial-")]
            if found and any(found[0].rglob("*.npy")):
                partial = found[0]
                break
            time.sleep(0.005)
        assert partial is not None, child.communicate()
        os.kill(child.pid, signal.SIGKILL)
    finally:
        if child.poll() is None:
            child.kill()
        out, err = child.communicate()
    assert child.returncode == -signal.SIGKILL, err
    assert b"done" not in out
    # the previous bundle is untouched and verifies; the half-written one is not visible
    assert all_files(target) == before
    b = read_bundle(target)
    assert b["manifest"]["source"] == SOURCE and b["manifest"]["n_runs"] == 3
    assert partial.exists() and not (target / "run_0003").exists()
    # the next export tidies the unfinished folder of the dead writer
    assert any("unfinished" in a for a in recover(target))
    assert leftovers(tmp_path) == []


# ---------------------------------------------------------------- sizes

@pytest.mark.parametrize("kw", [dict(), dict(csv=True), dict(stacked=True),
                                dict(stacked=True, csv=True), dict(segments=True),
                                dict(segments=True, csv=True), dict(segments=True, raw=True)],
                         ids=["per-run", "csv", "stacked", "stacked-csv", "segments",
                              "segments-csv", "segments-raw"])
def test_estimate_is_an_upper_bound_close_to_the_real_size(tmp_path, kw):
    runs = runs3((200, 150, 180))
    est = estimate_bundle_bytes(runs, source=SOURCE, **kw)
    out = write_bundle(runs, tmp_path / "b", source=SOURCE, **kw)
    real = sum(len(b) for b in all_files(out).values())
    assert real <= est
    if kw.get("csv"):
        assert est <= real * 1.05 + 256            # CSV is bounded at its widest values
    else:
        assert est - real <= 64                    # npy exact, manifest exact but for digits
    # before synthesis: sizes from the schedule
    sizes = [RunSize(w.n_samples, n_analog=3, n_marker=1, n_steps=len(w.steps)) for w in runs]
    est2 = estimate_bundle_bytes(sizes, sample_rate=1e9, **kw)
    assert real <= est2 <= 2 * real + 16384


def test_estimate_npy_part_is_exact():
    # 10^7 float64 samples take 8e7 bytes; the 128-byte header does not change with n
    big = estimate_bundle_bytes([RunSize(10_000_000, n_analog=0, n_marker=1)])
    empty = estimate_bundle_bytes([RunSize(0, n_analog=0, n_marker=1)])
    assert big - empty == 80_000_000
    # with codes: 8 + 4 bytes per sample
    big = estimate_bundle_bytes([RunSize(10_000_000, n_analog=1)])
    empty = estimate_bundle_bytes([RunSize(0, n_analog=1)])
    assert big - empty == 120_000_000


# ---------------------------------------------------------------- streamed manifest

@pytest.mark.parametrize("stacked, segments", [(False, False), (True, False), (False, True)],
                         ids=["per-run", "stacked", "segments"])
def test_streamed_manifest_is_the_same_text(stacked, segments, monkeypatch):
    """The manifest is written one timeline entry at a time (a run of a
    million steps must not be held as dicts and text); the bytes are the
    same as encoding the whole manifest at once, chunk boundaries included."""
    from compiler.export import manifest as mf
    monkeypatch.setattr(mf, "_CHUNK_CHARS", 300)          # force many chunks
    empty = make_run(1, 200)
    empty = Waveforms(**{**{f: getattr(empty, f) for f in empty.__dataclass_fields__},
                         "steps": ()})
    many = make_run(2, 200)
    many = Waveforms(**{**{f: getattr(many, f) for f in many.__dataclass_fields__},
                        "steps": many.steps * 40})
    plan = mf.check_runs([make_run(0, 200), empty, many], stacked=stacked, segments=segments)
    sizes = bundle_mod._file_sizes(plan, True)
    sums = {rel: f"{i:064x}" for i, rel in enumerate(sizes)}
    whole = mf.dumps(mf.build(plan, SOURCE, sums, sizes, True))
    pieces = list(mf.chunks(plan, SOURCE, sums, sizes, True))
    assert len(pieces) > 10 and "".join(pieces) == whole
    assert json.loads(whole)["runs"][1]["steps"] == []
    assert len(json.loads(whole)["runs"][2]["steps"]) == 120


JSON_PLAIN = st.recursive(
    st.none() | st.booleans() | st.integers(-2**70, 2**70)
    | st.floats(allow_nan=False, allow_infinity=False) | st.text(max_size=8),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=6), inner,
                                                                max_size=4),
    max_leaves=20)


@settings(max_examples=200, deadline=None)
@given(JSON_PLAIN, st.integers(0, 12))
def test_manifest_formatter_matches_the_json_encoder(value, indent):
    from compiler.export.manifest import format_json
    expected = json.dumps({"k": value}, sort_keys=True, indent=2, ensure_ascii=False,
                          allow_nan=False)
    if indent == 0:
        assert format_json(value) == json.dumps(value, sort_keys=True, indent=2,
                                                ensure_ascii=False, allow_nan=False)
    # nested one level down: the same text as the encoder writes inside a dict
    assert '{\n  "k": ' + format_json(value, 2) + "\n}" == expected


# ---------------------------------------------------------------- segments (issue 19)

def test_segments_round_trip_is_bit_identical_and_shares_stretches(tmp_path):
    runs = runs3((200, 150, 180))
    out = write_bundle(runs, tmp_path / "s", source=SOURCE, segments=True)
    m = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    assert m["layout"] == "segments"
    assert sorted(p.name for p in out.iterdir()) == ["manifest.json", "segments"]
    b = read_bundle(out)
    for w, r in zip(runs, b["runs"]):
        for name, o in w.outputs.items():
            assert r["volts"][name].dtype == np.float64
            assert r["volts"][name].tobytes() == np.asarray(o.volts, np.float64).tobytes()
            if o.codes is not None:
                assert r["codes"][name].tobytes() == np.asarray(o.codes, np.int32).tobytes()
    # P_A is two constant stretches per run: stored as one sample each, and
    # shared by every run that plays the same level (here 0 V before 150 ns)
    seg = m["segments"]["P_A"]
    pool = np.load(out / seg["file"])
    assert seg["samples"] == len(pool) == 1 + 2       # 0 V once, the levels of runs 0 and 2
    table = np.load(out / seg["table_file"])
    lo, hi = m["runs"][1]["outputs"]["P_A"]["table_rows"]
    assert table[lo:hi].tolist() == [[0, 1, 150]]     # run 1 ends at 150: only 0 V
    # the recipe of docs/bundle.md, without dotseq
    e = m["runs"][2]["outputs"]["mw.I"]
    pool = np.load(out / e["file"])
    tab = np.load(out / e["table_file"])
    a, z = e["table_rows"]
    v = np.concatenate([np.tile(pool[o:o + n], r) for o, n, r in tab[a:z]])
    assert v.tobytes() == runs[2].outputs["mw.I"].volts.tobytes()


def test_segments_refuse_stacking_and_damaged_tables(tmp_path):
    with pytest.raises(BundleError, match="either stacked or stored as segments"):
        write_bundle(runs3(), tmp_path / "x", source=SOURCE, segments=True, stacked=True)
    out = write_bundle(runs3(), tmp_path / "s", source=SOURCE, segments=True)
    t = out / "segments" / "table" / "mw.I.npy"
    data = bytearray(t.read_bytes())
    data[-1] ^= 1
    t.write_bytes(bytes(data))
    with pytest.raises(BundleError, match="checksum") as ei:
        read_bundle(out)
    assert "mw.I.npy" in str(ei.value)


def test_rebuild_refuses_tables_that_do_not_fit():
    from compiler.export import rebuild_segments
    pool = np.array([0.0, 1.0, 2.0])
    assert rebuild_segments(pool, [[0, 1, 2], [1, 2, 2]], 6).tolist() == [0, 0, 1, 2, 1, 2]
    with pytest.raises(ValueError, match="give 6 samples"):
        rebuild_segments(pool, [[0, 1, 2], [1, 2, 2]], 7)
    with pytest.raises(ValueError, match="outside the pool"):
        rebuild_segments(pool, [[2, 2, 1]], 2)


def test_segments_of_a_compiled_sweep_rebuild_bit_identically_and_are_small(tmp_path):
    """Every run of a compiled sweep (Ramsey, 5 waits) rebuilt from the
    segment layout is byte for byte the compiled arrays, and the shared
    readout and idle windows are stored once: the bundle is a small part of
    the full one; writing twice gives the same bytes."""
    from compiler import compile_file
    from conftest import SEQUENCES
    runs = compile_file(SEQUENCES / "ramsey_single.dotseq").waveforms
    assert len(runs) == 5
    seg = write_bundle(runs, tmp_path / "seg", source=SOURCE, segments=True)
    full = write_bundle(runs, tmp_path / "full", source=SOURCE)
    b = read_bundle(seg)
    for w, r in zip(runs, b["runs"]):
        for name, o in w.outputs.items():
            assert r["volts"][name].tobytes() == np.asarray(o.volts).tobytes(), name
            if o.codes is not None:
                assert r["codes"][name].tobytes() == np.asarray(o.codes, np.int32).tobytes()
    size = lambda d: sum(len(x) for x in all_files(d).values())  # noqa: E731
    assert size(seg) < 0.1 * size(full)
    again = write_bundle(compile_file(SEQUENCES / "ramsey_single.dotseq").waveforms,
                         tmp_path / "again", source=SOURCE, segments=True)
    assert all_files(again) == all_files(seg)


# ---------------------------------------------------------------- raw and HDF5 (issue 19, item 4)

def test_raw_code_files_decode_to_the_volts_bit_for_bit(tmp_path):
    runs = runs3((200, 150, 180))
    out = write_bundle(runs, tmp_path / "r", source=SOURCE, segments=True, raw=True)
    m = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    assert m["raw"]["byte_order"] == "little" and m["raw"]["header_bytes"] == 0
    for w, r in zip(runs, m["runs"]):
        for name, o in w.outputs.items():
            e = r["outputs"][name]
            data = (out / e["raw_file"]).read_bytes()
            assert m["files"][e["raw_file"]]["sha256"] == hashlib.sha256(data).hexdigest()
            if o.codes is None:
                assert e["raw_dtype"] == "uint8" and e["raw_file"].endswith(".u8")
                v = np.frombuffer(data, dtype="u1").astype(float)
            else:
                codes = np.frombuffer(data, dtype="<i4")
                assert codes.tobytes() == np.asarray(o.codes, "<i4").tobytes()
                v = e["raw_offset_V"] + codes * e["raw_scale_V"]
            assert v.tobytes() == np.asarray(o.volts, np.float64).tobytes(), name
    read_bundle(out)                    # the raw files are checksummed with the rest


def test_hdf5_holds_every_run_and_output_with_units_scaling_and_checksums(tmp_path):
    h5py = pytest.importorskip("h5py")
    runs = runs3((200, 150, 180))
    out = write_bundle(runs, tmp_path / "h", source=SOURCE, segments=True, hdf5=True)
    m = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    assert m["hdf5"] == {"file": "bundle.h5"} and "bundle.h5" in m["files"]
    with h5py.File(out / "bundle.h5", "r") as f:
        assert f.attrs["sample_rate_Hz"] == 1e9 and f.attrs["n_runs"] == 3
        assert list(f) == ["run_0000", "run_0001", "run_0002"]
        for w in runs:
            g = f[f"run_{w.run_index:04d}"]
            assert g.attrs["n_samples"] == w.n_samples
            for name, o in w.outputs.items():
                d = g[name]
                assert d.dtype == np.float64 and d.attrs["unit"] == ("0 or 1" if o.codes is None
                                                                     else "V")
                assert d[()].tobytes() == np.asarray(o.volts, np.float64).tobytes()
                assert d.attrs["sha256"] == hashlib.sha256(d[()].astype("<f8").tobytes()
                                                           ).hexdigest()
                if o.codes is not None:
                    c = g[f"{name}.codes"]
                    v = c.attrs["offset_V"] + c[()] * c.attrs["scale_V"]
                    assert v.tobytes() == np.asarray(o.volts, np.float64).tobytes()
    # the same waveforms give the same bytes (no timestamps)
    again = write_bundle(runs3((200, 150, 180)), tmp_path / "h2", source=SOURCE, segments=True,
                         hdf5=True)
    assert (again / "bundle.h5").read_bytes() == (out / "bundle.h5").read_bytes()
    est = estimate_bundle_bytes(runs, source=SOURCE, segments=True, hdf5=True)
    assert sum(len(b) for b in all_files(out).values()) <= est


def test_hdf5_without_h5py_is_refused_before_writing(tmp_path, monkeypatch):
    import builtins
    real = builtins.__import__

    def no_h5py(name, *a, **k):
        if name == "h5py":
            raise ImportError("no h5py")
        return real(name, *a, **k)

    monkeypatch.setattr(builtins, "__import__", no_h5py)
    with pytest.raises(BundleError, match="needs the h5py package") as ei:
        write_bundle(runs3(), tmp_path / "h", source=SOURCE, hdf5=True)
    assert "dotseq[hdf5]" in str(ei.value)
    assert not (tmp_path / "h").exists() and leftovers(tmp_path) == []


@pytest.mark.parametrize("kw", [dict(), dict(segments=True)], ids=["per-run", "segments"])
def test_export_never_builds_a_full_volts_array(tmp_path, kw):
    """Compiled outputs keep only their DAC codes; the writer derives volts a
    piece at a time (the same arithmetic, so the same bytes) instead of
    building and keeping a float64 array per output and run."""
    from compiler import compile_file
    from conftest import SEQUENCES
    runs = compile_file(SEQUENCES / "ramsey_pair.dotseq").waveforms
    derived = [(w, n) for w in runs for n, o in w.outputs.items()
               if o.stored_volts is None and o.codes is not None]
    assert derived
    out = write_bundle(runs, tmp_path / "b", source=SOURCE, **kw)
    assert all("volts" not in w.outputs[n].__dict__ for w, n in derived)
    b = read_bundle(out)
    for w, r in zip(runs, b["runs"]):
        for name, o in w.outputs.items():
            assert r["volts"][name].tobytes() == np.asarray(o.volts).tobytes()
