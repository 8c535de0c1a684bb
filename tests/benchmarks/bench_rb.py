"""Speed of ``dotseq rb``: single-qubit RB of dot A on the demo pair
(sequences/devices/demo_pair.yaml), 10 lengths x 20 sequences, seed 1, on
two local worker processes, the whole command as a user meets it (planning,
writing 200 sequence files, starting the workers, 201 simulations with the
full model, the bootstrap fit, rb.json and rb.png).  The aim is under 60 s
on two cores (issue 18).

Run as ``python tests/benchmarks/bench_rb.py [--repeats N] [--lengths L]``.
Prints each repeat's wall time, the load average before and after (other
work on a shared machine takes cores from the two workers: quote it with
the figures), the fitted error per Clifford and per native step, and as the
last line one JSON object with ``median_s``, ``runs_s``, ``cpu_s`` (CPU time
of every process of the run: the command's own and its reaped children's,
plus the simulations' CPU time the workers report in rb.json,
``timing.simulation_cpu_s``; the workers are the fork server's children,
which the command does not reap, so the system does not add them up) and ``idle_two_core_estimate_s`` (half of it:
what two otherwise idle cores would take), ``load_before``,
``load_after``, ``error_per_clifford``, ``error_per_native``,
``error_per_native_from_steps`` and ``under_60_s``.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
DEVICE = ROOT / "sequences" / "devices" / "demo_pair.yaml"
LENGTHS = "1,2,4,8,12,16,24,32,48,64"


def _children_cpu() -> float:
    """CPU seconds (user + system) of ended child processes and theirs."""
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=1)
    ap.add_argument("--lengths", default=LENGTHS)
    ap.add_argument("--sequences", type=int, default=20)
    args = ap.parse_args()
    runs, cpu, data = [], [], None
    load_before = os.getloadavg()
    for k in range(args.repeats):
        with tempfile.TemporaryDirectory() as tmp:
            out = Path(tmp) / "rb"
            cmd = [sys.executable, "-m", "compiler", "rb", str(DEVICE), "--qubits", "A",
                   "--lengths", args.lengths, "--sequences", str(args.sequences), "--seed", "1",
                   "--workers", "2", "-o", str(out), "--quiet"]
            t0 = time.perf_counter()
            c0 = _children_cpu()
            proc = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True)
            dt = time.perf_counter() - t0
            own = _children_cpu() - c0
            if proc.returncode != 0:
                print(proc.stdout, proc.stderr, file=sys.stderr)
                raise SystemExit(f"dotseq rb failed with exit {proc.returncode}")
            data = json.loads((out / "rb.json").read_text())
            cpu.append(own + data["timing"]["simulation_cpu_s"])
            runs.append(dt)
            print(f"repeat {k + 1}: {dt:.1f} s wall, {cpu[-1]:.1f} CPU s in all processes "
                  f"(load average {os.getloadavg()[0]:.2f})", flush=True)
    load_after = os.getloadavg()
    med = statistics.median(runs)
    c = data["comparison"]
    print(f"median {med:.1f} s over {len(runs)} run(s) of {len(args.lengths.split(','))} lengths "
          f"x {args.sequences} sequences; r = {data['error_per_clifford']:.3e} per Clifford, "
          f"{data['error_per_native']:.3e} per native step (per-step fidelities give "
          f"{c.get('error_per_native_from_steps', float('nan')):.3e})")
    cpu_med = statistics.median(cpu)
    print(f"CPU time {cpu_med:.1f} s: on two otherwise idle cores about {cpu_med / 2:.0f} s "
          "(the work divides over the two workers; the serial parts are a few seconds)")
    print(json.dumps({"median_s": med, "runs_s": runs, "cpu_s": cpu_med,
                      "idle_two_core_estimate_s": cpu_med / 2, "load_before": load_before[0],
                      "load_after": load_after[0], "cores": os.cpu_count(),
                      "error_per_clifford": data["error_per_clifford"],
                      "error_per_clifford_interval": data["error_per_clifford_interval"],
                      "error_per_native": data["error_per_native"],
                      "error_per_native_from_steps": c.get("error_per_native_from_steps"),
                      "mean_simulation_s": data["timing"]["mean_simulation_s"],
                      "under_60_s": med < 60}))


if __name__ == "__main__":
    main()
