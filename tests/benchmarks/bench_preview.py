"""Preview speed: a figure of 2 million samples against one of 1 600.

Run:  python tests/benchmarks/bench_preview.py [--repeats N]

The waveforms are the hand-built two-dot run of ``tests/test_preview.py``
(bursts on a shared I/Q line, a barrier level, a readout marker, padding),
once (1 600 samples, 8 steps) and repeated 1 250 times (2 000 000 samples,
10 000 steps).  Each is drawn to a PNG by ``compiler.preview.preview`` in
this process, alternately, ``--repeats`` times; medians are reported.

The small figure is the baseline measured in the same run: it holds what
every figure costs (the figure, fonts, the PNG encoder), so the ratio
``ratio_2M_to_small`` says what the samples and steps add, and moves less
with other work on the machine than the seconds do.  The aim is the bound
the unit test used to hold: 2 million samples drawn within 10 s.

The last line printed is one JSON object with the keys
``ratio_2M_to_small``, ``preview_2M_s`` and ``preview_small_s``.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

TESTS = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(TESTS.parent))
sys.path.insert(0, str(TESTS))

from compiler.preview import preview  # noqa: E402
from test_preview import LO, make_waveforms, png_size  # noqa: E402

AIM_S = 10.0          # s for 2 million samples (the former unit test's bound)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--repeats", type=int, default=5)
    args = ap.parse_args()
    small, big = make_waveforms(repeats=1), make_waveforms(repeats=1250)
    assert big.n_samples == 2_000_000 and len(big.steps) == 10_000
    print(f"preview of {small.n_samples} and {big.n_samples} samples ({len(small.steps)} and "
          f"{len(big.steps)} steps); {args.repeats} repeats, medians; {os.cpu_count()} cores, "
          f"load average {os.getloadavg()[0]:.2f} at the start")
    times: dict[str, list[float]] = {"small": [], "big": []}
    with tempfile.TemporaryDirectory() as tmp:
        preview(small, Path(tmp, "warm.png"), lo={"mw": LO})       # fonts, caches: not timed
        for r in range(args.repeats):
            for name in (("small", "big") if r % 2 == 0 else ("big", "small")):
                wf = small if name == "small" else big
                t0 = time.perf_counter()
                out = preview(wf, Path(tmp, f"{name}.png"), lo={"mw": LO})
                times[name].append(time.perf_counter() - t0)
                assert png_size(out) == (1540, 990)
            print(f"  repeat {r + 1}: {times['small'][-1]:.2f} s small, "
                  f"{times['big'][-1]:.2f} s 2 million samples")
    t_small, t_big = statistics.median(times["small"]), statistics.median(times["big"])
    ratio = t_big / t_small
    print(f"2 million samples: {t_big:.2f} s (aim: within {AIM_S:g} s); {t_small:.2f} s for "
          f"{small.n_samples} samples: ratio {ratio:.2f}; load average "
          f"{os.getloadavg()[0]:.2f} at the end")
    print(json.dumps({"ratio_2M_to_small": round(ratio, 3), "preview_2M_s": round(t_big, 3),
                      "preview_small_s": round(t_small, 3), "samples": big.n_samples,
                      "aim_s": AIM_S, "within_aim": t_big <= AIM_S}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
