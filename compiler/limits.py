"""Resource guards: estimate before allocating, refuse clearly above a limit."""

from __future__ import annotations

import re

from .errors import SynthesisError, UsageError

BYTES_PER_OUTPUT_SAMPLE = 40   # ideal f64 + volts f64 + codes i32 + complex work array
_SIZE_RE = re.compile(r"^\s*(\d+(?:\.\d*)?)\s*(B|kB|KB|KiB|MB|MiB|GB|GiB|TB|TiB)?\s*$")
_SCALE = {None: 1, "B": 1, "kB": 1e3, "KB": 1e3, "KiB": 2 ** 10, "MB": 1e6, "MiB": 2 ** 20,
          "GB": 1e9, "GiB": 2 ** 30, "TB": 1e12, "TiB": 2 ** 40}


def available_memory() -> int:
    """Bytes of memory available now (MemAvailable), or 4 GiB when unknown."""
    try:
        with open("/proc/meminfo") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 4 * 2 ** 30


def default_limit() -> int:
    """Half of the memory available now."""
    return available_memory() // 2


def parse_size(text: str, flag: str) -> int:
    m = _SIZE_RE.match(text)
    if not m:
        raise UsageError(f"{flag} '{text}' is not a size", hint="write e.g. 2GiB, 500MB or 1e9")
    return int(float(m.group(1)) * _SCALE[m.group(2)])


def human(n: float) -> str:
    for unit, scale in (("GiB", 2 ** 30), ("MiB", 2 ** 20), ("KiB", 2 ** 10)):
        if n >= scale:
            return f"{n / scale:.3g} {unit}"
    return f"{int(n)} B"


def check_synthesis_size(n_samples_total: int, n_outputs: int, limit: int) -> int:
    """Estimated bytes to synthesise; raises SynthesisError above ``limit``."""
    need = n_samples_total * n_outputs * BYTES_PER_OUTPUT_SAMPLE
    if need > limit:
        raise SynthesisError(
            f"compiling would need about {human(need)} of memory "
            f"({n_samples_total} samples x {n_outputs} outputs), above the limit of {human(limit)}",
            hint="compile fewer runs (--run), shorten the sequence, or raise the limit with "
                 "--memory-limit SIZE (default: half the memory available)")
    return need
