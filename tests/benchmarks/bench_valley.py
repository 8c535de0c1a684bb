"""Four-level (spin–valley) simulation cost: the cnot_pair example on the
four-level bilayer-graphene demo pair against the same sequence on the
spin-1/2 pair (tests/data/spin_half_pair.yaml), whole run, fast engine, with
1 and 3 quadrature nodes per noise variable.  ``--reference`` also runs the
reference engine (qutip mesolve; minutes) for one node and prints the
largest difference of the whole-run figures.  Last line: one JSON object.

    .venv/bin/python tests/benchmarks/bench_valley.py [--reference]
"""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from compiler import compile, load  # noqa: E402
from compiler.simulate.engines import make_engine  # noqa: E402
from compiler.simulate.run import SimOptions, evaluate_whole  # noqa: E402
from compiler.simulate.sources import ALL_ON  # noqa: E402
from compiler.threads import one_thread  # noqa: E402


def timed(crun, nodes: int, engine: str = "fast"):
    t = time.perf_counter()
    with one_thread():
        w = evaluate_whole(crun, ALL_ON, SimOptions(nodes=nodes), make_engine(engine))
    return time.perf_counter() - t, w


def main() -> None:
    seq = ROOT / "sequences" / "cnot_pair.dotseq"
    four = compile(load(seq)).runs[0]
    half = compile(load(seq, device=ROOT / "tests" / "data" / "spin_half_pair.yaml")).runs[0]
    out = {"load_average": os.getloadavg()[0]}
    for nodes in (1, 3):
        t4, w4 = timed(four, nodes)
        t2, _ = timed(half, nodes)
        print(f"nodes {nodes}: four-level pair {t4:.2f} s (F_avg {w4.f_avg:.6f}, leakage "
              f"{w4.leakage:.2e}); spin-1/2 pair {t2:.2f} s; ratio {t4 / t2:.1f}")
        out[f"four_level_s_nodes{nodes}"] = t4
        out[f"spin_half_s_nodes{nodes}"] = t2
    if "--reference" in sys.argv:
        tf, wf = timed(four, 1)
        tr, wr = timed(four, 1, "reference")
        diff = max(abs(wf.f_avg - wr.f_avg), abs(wf.f_state - wr.f_state),
                   abs(wf.leakage - wr.leakage))
        print(f"reference {tr:.1f} s; largest difference of F_avg, F_state, leakage {diff:.2e}")
        out["reference_s"] = tr
        out["max_abs_diff"] = diff
    print(f"load average {out['load_average']:.2f} (2 cores shared)")
    print(json.dumps(out))


if __name__ == "__main__":
    main()
