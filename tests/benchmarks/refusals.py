"""Bounded refusals (issue 12, items 4 and 8), with their figures.

Run:  python tests/benchmarks/refusals.py [--mb 48]

* one line of repeated junk tokens ('@ ', 'x ', 'x;', '} ') of the given
  size, checked in a child process: exit code, wall time, the child's
  peak resident memory (VmHWM) and that above the interpreter, the count of
  errors not shown;
* the 60-block fan-out (each block calls the previous twice: 2^59
  rotations) checked in a child process: refused at the call.

Before the fixes the 48 MB junk line took 95 s and 9 GB and the fan-out
44 s and 3 GB (issue 12).  The last line is one JSON object.
"""

from __future__ import annotations

import argparse
import json
import re
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

import test_reliability as R  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--mb", type=float, default=48)
    args = ap.parse_args(argv)
    n_bytes = int(args.mb * 1_000_000)
    out: dict = {"junk_line_bytes": n_bytes, "junk": {}}
    with tempfile.TemporaryDirectory() as d:
        for junk in ("@ ", "x ", "x;", "} "):
            r = R.refuse_junk_line(Path(d) / "junk.dotseq", n_bytes, junk)
            m = re.search(r"\.\.\. and ([\d,]+) more", r.pop("err"))
            r["more"] = int(m.group(1).replace(",", "")) if m else 0
            out["junk"][junk] = r
            print(f"junk {junk!r:6} x {n_bytes:,} B: exit {r['exit']}, {r['seconds']} s, peak "
                  f"{r['peak_rss_MiB']} MiB ({r['above_interpreter_MiB']} above the interpreter), "
                  f"{r['more']} more", flush=True)
        lines = ["block b0(q) { rot q x 90 deg }"]
        lines += [f"block b{k}(q) {{ do b{k - 1}(q) ; do b{k - 1}(q) }}" for k in range(1, 60)]
        fan = Path(d) / "fan.dotseq"
        fan.write_text("\n".join(lines + ["do b59(A)"]) + "\n", encoding="utf-8")
        code, _, err, rss, seconds = R.run_cli(["check", fan])
        out["fan_out"] = {"exit": code, "seconds": round(seconds, 2),
                          "peak_rss_MiB": round(rss / 2**20, 1),
                          "refused_at_call": f"{fan}:61:1:" in err}
        print(f"fan-out of 60 blocks: exit {code}, {seconds:.2f} s, peak {rss / 2**20:.1f} MiB")
    print(json.dumps(out))
    return 0


if __name__ == "__main__":
    sys.exit(main())
