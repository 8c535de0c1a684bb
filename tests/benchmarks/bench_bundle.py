"""Bundle size and write time of a Rabi scan: full per-run arrays against
segments (every distinct stretch stored once, each run a table).

Run:  python tests/benchmarks/bench_bundle.py [--repeats N]

The scan is a sequence with an in-file sweep of the burst length (34 runs:
a fixed drive amplitude, the rotation angle swept, so the burst grows from
about 10 ns to 340 ns), each run an initialisation wait, the burst and a
readout window, on a two-dot device with I/Q, three gates and two markers at
1 GS/s (an invented lab set-up).  Both layouts are written, read back and
compared bit for bit with the compiled arrays.

The last line printed is one JSON object: full_bytes, segments_bytes,
ratio (segments over full), full_write_s, segments_write_s (medians),
identical (bool).
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from compiler import compile_file  # noqa: E402
from compiler.export import read_bundle, write_bundle  # noqa: E402

DEVICE = """
name: bench rabi pair
field: 500 mT
temperature: 50 mK
rotation: {mode: amplitude, shape: square, amplitude: 100 mV}
readout: {marker: M1, duration: 24 us, trigger_marker: M2}
dots:
  A: {g: 2.0, t1: 1 ms, t2: 100 us, t2_star: 10 us, drive: {line: mw, rabi_per_volt: 60 MHz/V}, plunger: P_A}
  B: {g: 2.0015, t1: 1 ms, t2: 100 us, t2_star: 10 us, drive: {line: mw, rabi_per_volt: 60 MHz/V}, plunger: P_B}
couplings:
  - {dots: [A, B], barrier: B_AB, exchange: {model: exponential, j0: 20 kHz, v0: 40 mV}, idle_voltage: -200 mV, pulse_voltage: 380 mV}
channels:
  mw:  {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], rise_time: 1 ns, lo: 13.95 GHz, if_band: [-300 MHz, 300 MHz], min_length: 64, granularity: 16}
  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], rise_time: 2 ns}
  P_B: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], rise_time: 2 ns}
  B_AB: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], rise_time: 1 ns, bias_tee: 10 ms}
  M1: {kind: marker, sample_rate: 1 GS/s}
  M2: {kind: marker, sample_rate: 1 GS/s}
"""

SEQUENCE = """device "rabi_pair.yaml"
# Rabi scan: fixed amplitude, the burst length follows the swept angle
sweep angle from 30 deg to 1020 deg in 34
prepare A B down
trigger "start"
wait 10 us
rot A x angle amplitude=100 mV
read A
"""


def size(folder: Path) -> int:
    return sum(p.stat().st_size for p in folder.rglob("*") if p.is_file())


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        (d / "rabi_pair.yaml").write_text(DEVICE)
        (d / "rabi.dotseq").write_text(SEQUENCE)
        runs = compile_file(d / "rabi.dotseq").waveforms
        n = [w.n_samples for w in runs]
        print(f"{len(runs)} runs, {min(n)} .. {max(n)} samples, outputs {', '.join(runs[0].outputs)}")
        out = {}
        for label, seg in (("full", False), ("segments", True)):
            times = []
            for k in range(args.repeats):
                t0 = time.perf_counter()
                path = write_bundle(runs, d / label, source={"bench": "rabi"}, segments=seg)
                times.append(time.perf_counter() - t0)
            out[label] = (size(path), statistics.median(times), path)
            print(f"{label:>9}: {out[label][0] / 1e6:8.3f} MB, write median {out[label][1]:.3f} s "
                  f"({args.repeats} repeats)")
        identical = True
        for label in ("full", "segments"):
            b = read_bundle(out[label][2])
            for w, r in zip(runs, b["runs"]):
                for name, o in w.outputs.items():
                    identical &= r["volts"][name].tobytes() == np.asarray(o.volts).tobytes()
                    if o.codes is not None:
                        identical &= (r["codes"][name].tobytes()
                                      == np.asarray(o.codes, np.int32).tobytes())
        ratio = out["segments"][0] / out["full"][0]
        print(f"segments / full: {ratio:.4f} ({1 / ratio:.0f}x smaller); rebuilt arrays "
              f"bit-identical: {identical}")
        print(json.dumps({"full_bytes": out["full"][0], "segments_bytes": out["segments"][0],
                          "ratio": ratio, "full_write_s": out["full"][1],
                          "segments_write_s": out["segments"][1], "identical": identical}))


if __name__ == "__main__":
    main()
