"""The long fuzz run: every property of tests/test_fuzz.py with many examples.

Run:  python tests/benchmarks/fuzz_long.py [--examples N] [--seed S]

``--examples`` is the number of examples per property (default 6000; the
arbitrary-unicode, long-expression, padding-key and code-width properties
take a third of it, the mutated device files half, the special files a
thirtieth, the run-folder property, whose cases are whole `dotseq run`s, a
hundredth), which makes about 29 000 cases in all across the ten properties.
Each case is bounded in time
(``CASE_SECONDS`` in test_fuzz.py) and every outcome must be success or
dotseq's own error with a position.  A property that fails is reported with
hypothesis' falsifying example and the run goes on with the next property.

Prints, per property, the cases tried, how they ended (success or the stage
of the error) and the wall time; the last line is one JSON object:
{"cases": ..., "failures": ..., "seconds": ..., "per_property": {...}, "seed": ...}.
The exit code is 1 when any property failed.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
import traceback
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
PROPERTIES = ("test_random_text", "test_mutated_and_truncated_examples", "test_arbitrary_unicode",
              "test_long_and_deep_expressions", "test_random_device_yaml",
              "test_mutated_and_truncated_device_files",
              "test_padding_keys", "test_code_widths", "test_special_files",
              "test_run_folder_atomicity")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--examples", type=int, default=6000, help="examples per property")
    ap.add_argument("--seed", type=int, default=None,
                    help="hypothesis seed (default: a fresh random one, printed)")
    ap.add_argument("--only", choices=PROPERTIES, action="append",
                    help="run only this property (may be repeated)")
    ap.add_argument("--shrink", action="store_true",
                    help="shrink a failing example to a minimal one (slow when cases time out)")
    args = ap.parse_args(argv)

    # the example count is read when test_fuzz is imported
    os.environ["DOTSEQ_FUZZ_EXAMPLES"] = str(args.examples)
    sys.path.insert(0, str(ROOT))
    sys.path.insert(0, str(ROOT / "tests"))
    from hypothesis import Phase, settings  # noqa: E402
    from hypothesis import seed as hseed  # noqa: E402
    # the properties' own @settings fix the example counts; the profile sets the rest
    phases = list(Phase) if args.shrink else [p for p in Phase if p != Phase.shrink]
    settings.register_profile("fuzz-long", phases=phases, print_blob=True)
    settings.load_profile("fuzz-long")
    import test_fuzz  # noqa: E402

    run_seed = args.seed if args.seed is not None else int.from_bytes(os.urandom(4), "little")
    print(f"fuzz_long: {args.examples} examples per property, seed {run_seed}", flush=True)
    per: dict[str, dict] = {}
    failures = 0
    t_all = time.perf_counter()
    for name in args.only or PROPERTIES:
        fn = hseed(run_seed)(getattr(test_fuzz, name))
        before = test_fuzz.COUNTS.copy()
        t0 = time.perf_counter()
        error = ""
        try:
            fn()
        except BaseException as exc:  # noqa: BLE001 - report every failure, go on
            if isinstance(exc, KeyboardInterrupt):
                raise
            failures += 1
            error = "".join(traceback.format_exception_only(type(exc), exc)).strip()
            traceback.print_exc()
        dt = time.perf_counter() - t0
        outcomes = {k: v - before.get(k, 0) for k, v in test_fuzz.COUNTS.items()
                    if v - before.get(k, 0)}
        cases = sum(outcomes.values())
        per[name] = {"cases": cases, "seconds": round(dt, 1), "outcomes": outcomes,
                     "failed": bool(error)}
        if error:
            per[name]["error"] = error[:2000]
        print(f"{name:<42} {cases:>7} cases {dt:8.1f} s  "
              + ("FAILED: " + error.splitlines()[0] if error else
                 ", ".join(f"{k}: {v}" for k, v in sorted(outcomes.items()))), flush=True)
    total = sum(p["cases"] for p in per.values())
    seconds = time.perf_counter() - t_all
    print(f"total {total} cases, {failures} failing properties, {seconds:.0f} s wall time")
    print(json.dumps({"cases": total, "failures": failures, "seconds": round(seconds, 1),
                      "examples_per_property": args.examples, "seed": run_seed,
                      "per_property": per}, sort_keys=True))
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
