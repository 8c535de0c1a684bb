"""The slow reliability checks, with their figures.

Run:  python tests/benchmarks/big_sequence.py [--lines N]

* a sequence of N lines (default 10^6: 1 ns waits and 1 deg z rotations of
  dot A, alternately) compiled with the default memory limit: exit code,
  wall time, the child's peak resident memory (wait4), what limits.py
  estimated for it, and the bundle verified;
* the same file with --memory-limit 20MB: refused before the text is read
  (exit 2, the estimate and the flag in the message), peak memory;
* and with a limit of 1.2 kB per line, which the text fits in but the
  steps do not: refused during expansion, peak memory within the limit;
* the same at 10^5 lines, as in the default test suite;
* a small simulation run in two processes with different hash seeds:
  the same results.

The checks are those of tests/test_reliability.py (the slow-marked tests
there call the same functions).  The last line is one JSON object.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

import test_reliability as R  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--lines", type=int, default=1_000_000)
    args = ap.parse_args(argv)
    figures: dict = {"baseline_rss_MiB": round(R.baseline_rss() / 2**20, 1)}
    print(f"interpreter with numpy and scipy: {figures['baseline_rss_MiB']} MiB peak", flush=True)
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        for n in sorted({100_000, args.lines}):
            t0 = time.perf_counter()
            path = R.write_long_sequence(d / f"lines_{n}.dotseq", n)
            key = f"lines_{n}"
            figures[key] = {"file_MB": round(path.stat().st_size / 1e6, 1),
                            "write_s": round(time.perf_counter() - t0, 1)}
            ok = R.check_compiles_within_the_estimate(path, n, d / f"bundle_{n}")
            figures[key]["default_limit"] = ok
            print(f"{n} lines, default limit: exit {ok['exit']}, {ok['seconds']} s, peak "
                  f"{ok['peak_rss_MiB']} MiB ({ok['above_interpreter_MiB']} MiB above the "
                  f"interpreter; estimate {ok['estimate_MiB']} MiB, limit {ok['limit_MiB']} MiB)",
                  flush=True)
            refused = R.check_refused_below_a_small_limit(path, d / f"refused_{n}")
            figures[key]["memory_limit_20MB"] = refused
            print(f"{n} lines, --memory-limit 20MB: exit {refused['exit']}, {refused['seconds']} s,"
                  f" peak {refused['peak_rss_MiB']} MiB: {refused['message']}", flush=True)
            limit = f"{max(1, round(n * 1.2e-3))}MB"       # the text fits, the steps do not
            steps = R.check_refused_at_the_step_budget(path, n, d / f"steps_{n}", limit)
            figures[key][f"memory_limit_{limit}"] = steps
            print(f"{n} lines, --memory-limit {limit}: exit {steps['exit']}, {steps['seconds']} s,"
                  f" peak {steps['peak_rss_MiB']} MiB: {steps['message']}", flush=True)
            path.unlink()
        t0 = time.perf_counter()
        seq = d / "s.dotseq"
        seq.write_text("prepare A B up\nrot A x 90 deg\nsqrtswap A B\nwait 10 ns\n",
                       encoding="utf-8")
        same = R.simulate_in_a_child(seq, d / "a", "1") == R.simulate_in_a_child(seq, d / "b", "2")
        figures["simulation_same_in_two_processes"] = same
        print(f"simulation in two processes (hash seeds 1, 2): "
              f"{'identical' if same else 'DIFFERENT'} ({time.perf_counter() - t0:.0f} s)")
    print(json.dumps(figures, sort_keys=True))
    return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
