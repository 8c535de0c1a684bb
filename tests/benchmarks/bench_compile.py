"""Compile speed: sequences of 1k, 10k and 100k steps.

Run:  python tests/benchmarks/bench_compile.py [--repeats N]

Each size is compiled end to end (parse, expand, check, schedule, synthesise
every output, quantise) in this process, several times; the median is
reported.  "Samples" counts every output array's samples (I and Q separately,
gates and markers included), the figure a generator has to be loaded with.

Two step mixes are measured.  The figures in the JSON line come from the
"typical" mix (100 ns bursts, waits of a few hundred ns, one exchange and a
1 us readout window every 10 steps: about 190 samples per step).  The
"dense" mix (60 ns bursts, 20-30 ns waits, 200 ns readout: about 37 samples
per step) shows the per-step overhead of the compiler itself.

The last line printed is one JSON object with keys samples_per_s (typical
mix, 100k steps) and growth_10x (time of 100k steps over time of 10k steps,
typical mix).
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from compiler import compile_file  # noqa: E402

DEVICE = """
name: bench pair
field: 500 mT
temperature: 50 mK
rotation: {mode: duration, shape: gauss, duration: BURST, sigmas: 4}
readout: {marker: M1, duration: READOUT, trigger_marker: M2}
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

# 10 leaf steps per repetition: bursts, a frame update, waits, exchange, a readout
BODY = """    rot A x 90 deg
    rot B y 180 deg
    rot A z 45 deg
    wait WAIT1 on A
    sqrtswap A B
    together { rot A x 180 deg ; rot B x 90 deg }
    wait WAIT2
    rot B phase(30 deg) 45 deg
    read A B
"""
STEPS_PER_BODY = 10
MIXES = {
    "typical": {"BURST": "100 ns", "READOUT": "1 us", "WAIT1": "200 ns", "WAIT2": "300 ns"},
    "dense": {"BURST": "60 ns", "READOUT": "200 ns", "WAIT1": "20 ns", "WAIT2": "30 ns"},
}


def fill(text: str, mix: str) -> str:
    for k, v in MIXES[mix].items():
        text = text.replace(k, v)
    return text


def sequence(n_steps: int, mix: str = "dense") -> str:
    return fill(f'device "bench_{mix}.yaml"\nrepeat {n_steps // STEPS_PER_BODY} {{\n{BODY}}}\n', mix)


def measure(folder: Path, n_steps: int, repeats: int, mix: str = "dense") -> tuple[float, int, int]:
    f = folder / f"seq_{mix}_{n_steps}.dotseq"
    f.write_text(sequence(n_steps, mix))
    times, samples = [], 0
    for _ in range(repeats):
        t0 = time.perf_counter()
        c = compile_file(f)
        times.append(time.perf_counter() - t0)
        wf = c.waveforms[0]
        samples = wf.n_samples * len(wf.outputs)
        steps = len([s for s in c.checked.timelines[0].slots])
        del c, wf
    return statistics.median(times), samples, steps


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=9)
    args = ap.parse_args()
    results = {}
    with tempfile.TemporaryDirectory() as d:
        folder = Path(d)
        for mix in ("dense", "typical"):
            (folder / f"bench_{mix}.yaml").write_text(fill(DEVICE, mix))
            measure(folder, 100, 1, mix)              # warm caches and imports
            rows = {}
            for n in (1_000, 10_000, 100_000):
                reps = args.repeats if n < 100_000 else max(5, args.repeats // 2)
                t, samples, slots = measure(folder, n, reps, mix)
                rows[n] = (t, samples)
                print(f"{mix:>8} {n:>7} steps ({slots} timeline entries): median {t:.3f} s, "
                      f"{samples:.3e} samples, {samples / t:.3e} samples/s, "
                      f"{t / n * 1e6:.1f} us/step", flush=True)
            growth = rows[100_000][0] / rows[10_000][0]
            print(f"{mix:>8} growth 100k/10k steps: {growth:.2f}x (linear would be 10x)")
            results[mix] = (rows[100_000][1] / rows[100_000][0], growth)
    rate, growth = results["typical"]
    print(json.dumps({"samples_per_s": rate, "growth_10x": growth,
                      "dense_samples_per_s": results["dense"][0],
                      "dense_growth_10x": results["dense"][1]}))


if __name__ == "__main__":
    main()
