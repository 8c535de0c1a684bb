"""Resource guards: estimate before allocating, refuse clearly above a limit.

Three estimates, each checked before the memory is taken:

* the sequence text (with its includes), before parsing: about
  ``BYTES_PER_SOURCE_CHAR`` per character for the parsed tree;
* the expanded steps of all runs, while expanding: about ``BYTES_PER_STEP``
  per step for the step itself, its place in the schedule, its record in
  the waveforms and its manifest entry;
* the sampled outputs, before synthesis: ``BYTES_PER_OUTPUT_SAMPLE`` per
  sample of every output, counting the padding to the generators'
  ``min_length`` and ``granularity`` (``Device.padded_samples``).

The per-character and per-step figures were measured on sequences of 10^5
and 10^6 lines (resident memory added by each stage, divided by the count:
about 42 bytes a character for the tree, 190 + 310 + 390 bytes a step for
expansion, schedule and synthesis records; docs/reliability.md) and rounded
up; steps are counted with the members of 'together' groups, each of which
is scheduled and recorded on its own.  The limit is half the memory
available when dotseq starts unless ``--memory-limit`` says otherwise.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from .errors import Span, SynthesisError, UsageError

BYTES_PER_OUTPUT_SAMPLE = 40   # ideal f64 + volts f64 + codes i32 + complex work array
BYTES_PER_SOURCE_CHAR = 50     # parsed tree per character of sequence text (measured 42)
BYTES_PER_STEP = 1500          # expanded step, schedule slot, step record (measured 890)
MAX_SOURCE_CHARS = 50_000_000  # a sequence and its includes, whatever the memory
MAX_TOTAL_STEPS = 10_000_000   # steps of all runs together, whatever the memory
FLAG_HINT = "raise the limit with --memory-limit SIZE (default: half the memory available)"
_SIZE_RE = re.compile(r"^\s*(\d+(?:\.\d*)?(?:[eE][+]?\d+)?)\s*(B|kB|KB|KiB|MB|MiB|GB|GiB|TB|TiB)?\s*$")
_SCALE = {None: 1, "B": 1, "kB": 1e3, "KB": 1e3, "KiB": 2 ** 10, "MB": 1e6, "MiB": 2 ** 20,
          "GB": 1e9, "GiB": 2 ** 30, "TB": 1e12, "TiB": 2 ** 40}


def available_memory() -> int:
    """Bytes this process can still take: the least of the memory available
    on the machine (MemAvailable), what the container's memory limit leaves
    (cgroup v2 or v1) and what the address-space limit (``ulimit -v``)
    leaves; 4 GiB when none is known."""
    known = [n for n in (_meminfo_available(), _cgroup_left(), _address_space_left())
             if n is not None]
    return max(0, min(known)) if known else 4 * 2 ** 30


def _meminfo_available() -> int | None:
    try:
        with open("/proc/meminfo") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return None


def _read_int(path: str) -> int | None:
    try:
        with open(path) as f:
            text = f.read().strip()
    except OSError:
        return None
    return int(text) if text.isdigit() else None      # "max": no limit


def _cgroup_left() -> int | None:
    for limit_file, usage_file in (("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory.current"),
                                   ("/sys/fs/cgroup/memory/memory.limit_in_bytes",
                                    "/sys/fs/cgroup/memory/memory.usage_in_bytes")):
        limit = _read_int(limit_file)
        if limit is not None and limit < 2 ** 60:       # v1 writes ~2^63 for "no limit"
            return limit - (_read_int(usage_file) or 0)
    return None


def _address_space_left() -> int | None:
    try:
        import resource
        soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    except (ImportError, OSError, ValueError):
        return None
    if soft == resource.RLIM_INFINITY:
        return None
    try:
        with open("/proc/self/statm") as f:
            used = int(f.read().split()[0]) * resource.getpagesize()
    except (OSError, ValueError, IndexError):
        used = 0
    return soft - used


def default_limit() -> int:
    """Half of the memory available now (see :func:`available_memory`)."""
    return available_memory() // 2


def parse_size(text: str, flag: str) -> int:
    m = _SIZE_RE.match(text)
    if not m:
        raise UsageError(f"{flag} '{text}' is not a size", hint="write e.g. 2GiB, 500MB or 1e9")
    n = float(m.group(1)) * _SCALE[m.group(2)]
    if not 1 <= n < 2 ** 63:
        raise UsageError(f"{flag} '{text}' is {'zero' if n < 1 else 'too large'}",
                         hint="write e.g. 2GiB, 500MB or 1e9")
    return int(n)


def human(n: float) -> str:
    for unit, scale in (("GiB", 2 ** 30), ("MiB", 2 ** 20), ("KiB", 2 ** 10)):
        if n >= scale:
            return f"{n / scale:.3g} {unit}"
    return f"{int(n)} B"


def check_synthesis_size(n_samples_total: int, n_outputs: int, limit: int,
                         file: str | None = None) -> int:
    """Estimated bytes to synthesise; raises SynthesisError above ``limit``
    (naming ``file``, the sequence, when given)."""
    need = n_samples_total * n_outputs * BYTES_PER_OUTPUT_SAMPLE
    if need > limit:
        raise SynthesisError(
            f"compiling would need about {human(need)} of memory "
            f"({n_samples_total} samples x {n_outputs} outputs), above the limit of {human(limit)}",
            Span(str(file), 0, 0, 0, 0) if file is not None else None,
            hint="compile fewer runs, shorten the sequence, or " + FLAG_HINT)
    return need


@dataclass(frozen=True)
class Budget:
    """How much the front end may take, from a memory limit (bytes)."""

    memory: int

    @property
    def chars(self) -> int:
        """Characters of sequence text (with includes) that may be parsed."""
        return max(1, min(MAX_SOURCE_CHARS, self.memory // BYTES_PER_SOURCE_CHAR))

    @property
    def steps(self) -> int:
        """Expanded steps (all runs together) that may be compiled."""
        return max(1, min(MAX_TOTAL_STEPS, self.memory // BYTES_PER_STEP))

    def chars_problem(self, used: int) -> tuple[str, str]:
        """Message and hint when the text holds ``used`` > ``chars`` characters."""
        if self.chars < MAX_SOURCE_CHARS:
            return (f"reading this sequence and its includes ({used:,} characters or more) "
                    f"would need about {human(used * BYTES_PER_SOURCE_CHAR)} of memory, above "
                    f"the limit of {human(self.memory)}", FLAG_HINT)
        return (f"the sequence and its includes hold more than {MAX_SOURCE_CHARS:,} characters",
                "split the experiment into several files")

    def steps_problem(self, steps: int) -> tuple[str, str]:
        """Message and hint when the runs expand to more than ``steps``."""
        if self.steps < MAX_TOTAL_STEPS:
            return (f"the runs expand to more than {steps:,} steps, which would need about "
                    f"{human(steps * BYTES_PER_STEP)} of memory to compile, above the limit "
                    f"of {human(self.memory)}",
                    "use fewer sweep points or repeats, or " + FLAG_HINT)
        return (f"the runs expand to more than {MAX_TOTAL_STEPS:,} steps in all",
                "use fewer sweep points or repeats, or split the experiment into several files")


def budget(memory_limit: int | None = None) -> Budget:
    """The budget for ``memory_limit`` bytes (default: :func:`default_limit`)."""
    return Budget(default_limit() if memory_limit is None else int(memory_limit))


def generator_memory_problems(run, n_timeline: int, device) -> list:
    """A :class:`~compiler.errors.Problem` for every channel whose waveform
    memory (``channels.NAME.memory``, samples) cannot hold this run: its
    ``n_timeline`` samples padded as synthesis will pad them
    (``Device.padded_samples``: delays, min_length, granularity).  Empty
    when every channel fits or no memory is given."""
    from .errors import Problem, read_source_line
    from .units import FREQUENCY, TIME, format_quantity
    n = device.padded_samples(n_timeline)
    out = []
    for name, ch in device.channels.items():
        if ch.memory and n > ch.memory:
            point = run.sweep_text() if run.sweep else ""
            label = f"run {run.index}" + (f" ({point})" if point else "")
            fs = ch.sample_rate
            out.append(Problem(
                f"{label} needs {n:,} samples on channel '{name}' "
                f"({format_quantity(n / fs, TIME)} at "
                f"{format_quantity(fs, FREQUENCY).replace('Hz', 'S/s')}), above its memory of "
                f"{ch.memory:,} samples (channels.{name}.memory) by {n - ch.memory:,}",
                ch.span, "shorten the run (fewer or shorter waits and readouts), split the "
                "sweep into shorter runs, or give the generator's real memory",
                read_source_line(ch.span.file, ch.span.line) if ch.span else ""))
    return out
