"""Weak residual exchange on the general-levels path: cost and accuracy.

Two four-level (spin–valley) dots of the invented test device
tests/data/valley_pair_weak.yaml, three π bursts and a 200 ns wait, whole
run (process, fidelities) through ``evaluate_whole``, fast engine; the idle
barrier closed (J well under a millihertz: dropped), at 1 Hz and at 1 kHz
(the weak treatment of compiler/simulate/engines/levels_weak.py).  Times are
medians of interleaved repeats (each a fresh engine), for one quadrature
point and for the product rule of 3 nodes per variable (27 points).  The
exact treatment (exchange_accuracy 0: the pair one 256 × 256 cluster) is run
once per J with one point, for its time and for the differences of the
whole-run figures against it.  Last line: one JSON object.

    .venv/bin/python tests/benchmarks/bench_levels_weak.py [--repeats N] [--no-exact]
"""

from __future__ import annotations

import json
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from compiler import compile, load  # noqa: E402
from compiler.simulate.engines import make_engine  # noqa: E402
from compiler.simulate.run import SimOptions, evaluate_whole  # noqa: E402
from compiler.simulate.sources import ALL_ON  # noqa: E402
from compiler.threads import one_thread  # noqa: E402

DEVICE = ROOT / "tests" / "data" / "valley_pair_weak.yaml"
IDLE = {"closed": "-600 mV", "1 Hz": "-376 mV", "1 kHz": "-238 mV"}   # J = 150 MHz·e^{V/20 mV}
BODY = "rot A x 180 deg\nrot B x 180 deg\nwait 200 ns\nrot A x 180 deg\n"


def compiled(folder: Path, idle: str):
    (folder / "d.yaml").write_text(DEVICE.read_text().replace("idle_voltage: -600 mV",
                                                              f"idle_voltage: {idle}"))
    (folder / "s.dotseq").write_text(f'device "d.yaml"\nprepare A B down\n{BODY}read A B\n')
    return compile(load(folder / "s.dotseq")).runs[0]


def timed(crun, nodes: int, accuracy: float = 1e-6):
    opts = SimOptions(nodes=nodes, exchange_accuracy=accuracy, budget=False, steps=False)
    eng = make_engine("fast", exchange_accuracy=accuracy)
    t = time.perf_counter()
    with one_thread():
        w = evaluate_whole(crun, ALL_ON, opts, eng, nodes=nodes)
    return time.perf_counter() - t, w, eng.stats()


def main() -> None:
    repeats = int(sys.argv[sys.argv.index("--repeats") + 1]) if "--repeats" in sys.argv else 5
    exact = "--no-exact" not in sys.argv
    out: dict = {"load_average_before": os.getloadavg()[0], "repeats": repeats}
    with tempfile.TemporaryDirectory() as tmp:
        runs = {}
        for label, v in IDLE.items():
            f = Path(tmp) / label.replace(" ", "")
            f.mkdir()
            runs[label] = compiled(f, v)
        worst = 0.0
        for nodes in (1, 3):
            times: dict = {k: [] for k in runs}
            whole: dict = {}
            timed(runs["closed"], nodes)                 # warm-up (imports, caches of shapes)
            for _ in range(repeats):
                for label, cr in runs.items():
                    t, w, st = timed(cr, nodes)
                    times[label].append(t)
                    whole[label] = (w, st)
            med = {k: statistics.median(v) for k, v in times.items()}
            for label in ("1 Hz", "1 kHz"):
                w, st = whole[label]
                ratio = med[label] / med["closed"]
                worst = max(worst, ratio) if nodes == 3 else worst
                print(f"nodes {nodes}: {label:6s} {med[label]:.3f} s, closed {med['closed']:.3f} s, "
                      f"ratio {ratio:.1f}; largest cluster {st['largest_cluster']}, weak bound "
                      f"{st['weak_exchange_bound']:.2e}, F_avg {w.f_avg:.9f}")
                key = label.replace(" ", "")
                out[f"nodes{nodes}_{key}_s"] = med[label]
                out[f"nodes{nodes}_{key}_ratio"] = ratio
                out[f"nodes{nodes}_{key}_bound"] = st["weak_exchange_bound"]
            out[f"nodes{nodes}_closed_s"] = med["closed"]
        if exact:
            for label in ("1 Hz", "1 kHz"):
                key = label.replace(" ", "")
                tw, ww, sw = timed(runs[label], 1)
                te, we, se = timed(runs[label], 1, accuracy=0.0)
                diff = max(abs(ww.f_avg - we.f_avg), abs(ww.f_state - we.f_state),
                           abs(ww.leakage - we.leakage))
                print(f"exact, {label}, one point: {te:.2f} s (cluster {se['largest_cluster']}); weak "
                      f"{tw:.3f} s; largest difference of F_avg, F_state, leakage {diff:.2e} "
                      f"(recorded bound {sw['exchange_error_bound']:.2e})")
                out[f"exact_nodes1_{key}_s"] = te
                out[f"max_abs_diff_{key}"] = diff
                out[f"exchange_error_bound_{key}"] = sw["exchange_error_bound"]
    out["weak_exchange_ratio_levels"] = worst
    out["load_average_after"] = os.getloadavg()[0]
    print(f"load average {out['load_average_before']:.2f} -> {out['load_average_after']:.2f} "
          "(2 cores shared)")
    print(json.dumps(out))


if __name__ == "__main__":
    main()
