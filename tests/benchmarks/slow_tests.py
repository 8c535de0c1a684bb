"""The slow-marked tests (deselected from the default suite), run on their own.

Run:  python tests/benchmarks/slow_tests.py [-k EXPR]

They are the same checks as their fast siblings on heavier workloads: the
fast engine against mesolve on four-level (spin–valley) pairs, two-qubit
randomised benchmarking on the four-level demo pair, the long memory-guard
runs.  Together they take tens of minutes on two cores.  Prints pytest's
own summary with the 15 slowest, then one JSON object: exit code, counts
and wall time.
"""

from __future__ import annotations

import argparse
import json
import re
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("-k", default="", help="pytest -k expression to run a subset")
    args = ap.parse_args(argv)
    cmd = [sys.executable, "-m", "pytest", "-q", "-m", "slow", "--durations=15",
           "-p", "no:cacheprovider", "-n", "0"] + (["-k", args.k] if args.k else [])
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    sys.stdout.write(proc.stdout)
    sys.stderr.write(proc.stderr)
    counts = {k: int(n) for n, k in re.findall(r"(\d+) (passed|failed|skipped|error)",
                                                proc.stdout.splitlines()[-1] if proc.stdout else "")}
    print(json.dumps({"exit_code": proc.returncode, "wall_s": round(wall, 1), **counts}))
    return proc.returncode


if __name__ == "__main__":
    sys.exit(main())
