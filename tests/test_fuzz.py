"""Property tests: random, mutated and truncated sequence text and device
YAML never escape as anything but the tool's own error type, always with a
position, and no case takes longer than a few seconds.

The default run tries a few hundred examples per property; the long run
(``python tests/benchmarks/fuzz_long.py``, at least 20 000 examples in all)
sets ``DOTSEQ_FUZZ_EXAMPLES`` before importing this module.
"""

import functools
import os
import signal
from collections import Counter
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from compiler import limits, load
from compiler.check import check
from compiler.device import BUNDLED_DEFAULT, load_device, load_device_text
from compiler.device.model import MAX_BITS, MAX_GRANULARITY, MAX_MIN_LENGTH
from compiler.errors import DeviceError, DotseqError, SynthesisError
from compiler.export.files import CODES_DTYPE, checked_cast
from compiler.expand import expand
from compiler.parse import parse_text
from compiler.schedule import schedule
from compiler.synth import synthesize
from conftest import SEQUENCES

SEEDS = [p.read_text() for p in sorted(SEQUENCES.glob("*.dotseq"))] + [
    "let a = 2 * (3 ns + 1 us) ^ 1\nsweep b over [1 mV, 2 mV]\nrepeat 2 { wait a on A }\n",
    "block e(q, t) { rot q x 90 deg ; wait t on q }\ndo e(A, 40 ns)\ntogether { rot A y 1 rad ; rot B x 2 deg }\n",
]
ALPHABET = st.sampled_from(list("abAB xyz019.-+*/^(){}[],;=#\"\n\t") +
                           ["rot ", "wait ", "ns", "deg", "let ", "sweep ", "repeat ", "do ", "block ",
                            "together", "sqrtswap A B", "MHz", "mV", " on ", "phase(", "1e308", "nan",
                            "inf", "-0", " duration=", " amplitude=", " shape=gauss", "read A B",
                            "prepare A B singlet", "trigger ", "swap A B", "rot A x 90 deg\n",
                            "cz A B", "cphase A B ", " detuning=", "move ", " ramp="])
DEVICE_FILES = [BUNDLED_DEFAULT] + sorted((SEQUENCES / "devices").glob("*.yaml"))
DEVICE_SEEDS = [Path(p).read_text(encoding="utf-8") for p in DEVICE_FILES]
YAML_ALPHABET = st.sampled_from(
    list(" :-[]{},#&*!|>'\"%@`0123456789.eE\n\t") +
    ["  ", "    ", "name: x\n", "field: ", "temperature: ", "dots:\n", "channels:\n", "couplings:\n",
     "  A:\n", "    g: ", "t1: ", "t2: ", "sample_rate: ", "bits: ", "range: ", "kind: iq",
     "kind: gate", "kind: marker", "lo: ", "if_band: ", "drive: {line: mw, rabi_per_volt: 1 MHz/V}",
     "plunger: P_A", "model: table", "points: [[0 mV, 1 kHz], [1 mV, 2 kHz]]", "- ", "? ",
     "points:\n", "  load: {P_A: 1 mV}\n",
     ".nan", ".inf", "-.inf", "1e999", "0 GS/s", "-1 ns", "1 GS/s", "500 mT", "40 mK", "mV", "MHz",
     "&a ", "*a", "<<: *a", "!!python/object:os.system", "!!binary", "~", "null", "yes", "0x1F",
     "1_000", "--- ", "...\n", "preset: gaas", "preset: bilayer_graphene"])
DEVICE = load_device(BUNDLED_DEFAULT)
# examples per property; a long run sets DOTSEQ_FUZZ_EXAMPLES (see tests/benchmarks/fuzz_long.py)
N = int(os.environ.get("DOTSEQ_FUZZ_EXAMPLES", "300"))
CASE_SECONDS = 5.0          # no single case may take longer (no hangs)
# repeats of a piece in the "explode" mutation: enough to pass every nesting and
# operator limit in the default run, longer texts in the long run
EXPLODE = (20, 400) if N <= 1000 else (50, 2000)
MAX_SAMPLES = 200_000       # synthesise only runs up to this length (speed of the fuzz run)
# how many cases each property tried, and how each ended (read by the long-run script)
COUNTS: Counter = Counter()


@contextmanager
def time_limit(seconds: float):
    """Fail the example if it takes longer than ``seconds`` (no hangs)."""
    def boom(*_):
        raise TimeoutError(f"a single case took more than {seconds} s")
    old = signal.signal(signal.SIGALRM, boom)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)


def assert_own_error(e: DotseqError, *files: str) -> None:
    """dotseq's own error: problems with a message, each at a position (file,
    line >= 1, column >= 1) in one of ``files``, and a rendering."""
    assert e.problems, "an error without problems"
    for p in e.problems:
        assert p.message
        assert p.span is not None, f"no position: {p.message}"
        assert p.span.file in files, (p.span, p.message)
        assert p.span.line >= 1 and p.span.col >= 1, (p.span, p.message)
    assert "error:" in e.render()


def compile_against(text: str, device, seq_file: str, *device_files: str) -> str:
    """Parse, expand, check, schedule and (for short runs) synthesise; the
    outcome: "ok" or the stage of dotseq's own error."""
    try:
        ex = expand(parse_text(text, seq_file), max_runs=200, max_steps=20_000)
        check(ex, device)
        for r in ex.runs[:3]:
            tl = schedule(r, device)
            if tl.n_samples <= MAX_SAMPLES:
                synthesize(tl, device)
    except DotseqError as e:
        assert_own_error(e, seq_file, *device_files)
        return e.stage
    return "ok"


def run_pipeline(text: str) -> str:
    with time_limit(CASE_SECONDS):
        outcome = "sequence " + compile_against(text, DEVICE, "fuzz.dotseq")
    COUNTS[outcome] += 1
    return outcome


def steps_for(device) -> str:
    """A short sequence using every dot and coupling of ``device``."""
    dots = list(device.dots)
    lines = [f"rot {d} x 90 deg" for d in dots]
    lines += [f"sqrtswap {c.dots[0]} {c.dots[1]}" for c in device.couplings]
    lines += [f"move {p} ramp=4 ns" for p in device.points]
    lines += ["wait 20 ns", "read " + " ".join(dots)]
    return "\n".join(lines) + "\n"


def run_device(text: str) -> str:
    """Load device text; when it loads, compile a short sequence against it."""
    with time_limit(CASE_SECONDS):
        try:
            dev = load_device_text(text, "fuzz.yaml")
        except DeviceError as e:
            assert_own_error(e, "fuzz.yaml")
            outcome = "device error"
        else:
            outcome = "device ok, then " + compile_against(steps_for(dev), dev, "steps.dotseq",
                                                           "fuzz.yaml")
    COUNTS[outcome] += 1
    return outcome


def mutate(text: str, data, alphabet, explode: tuple[int, int] = EXPLODE) -> str:
    """Up to four random edits: cut (truncate), delete, insert, swap, dup,
    explode (a piece repeated hundreds of times) and whole-line edits (drop,
    repeat, swap, indent)."""
    for _ in range(data.draw(st.integers(1, 4))):
        op = data.draw(st.sampled_from(["cut", "delete", "insert", "swap", "dup", "line",
                                        "explode"]))
        i = data.draw(st.integers(0, max(len(text) - 1, 0)))
        if op == "cut":
            text = text[:i]
        elif op == "delete":
            j = data.draw(st.integers(i, min(i + 10, len(text))))
            text = text[:i] + text[j:]
        elif op == "insert":
            text = text[:i] + data.draw(alphabet) + text[i:]
        elif op == "swap" and len(text) > 2:
            j = data.draw(st.integers(0, len(text) - 1))
            chars = list(text)
            chars[i], chars[j] = chars[j], chars[i]
            text = "".join(chars)
        elif op == "dup":
            text = text[:i] + text[i:i + 20] + text[i:]
        elif op == "explode":
            # a short piece repeated hundreds of times: long chains, deep nesting, long lines
            j = data.draw(st.integers(i, min(i + 8, len(text))))
            text = text[:i] + text[i:j] * data.draw(st.integers(*explode)) + text[j:]
        elif op == "line":
            lines = text.split("\n")
            k = data.draw(st.integers(0, len(lines) - 1))
            how = data.draw(st.sampled_from(["drop", "repeat", "swap", "indent", "dedent"]))
            if how == "drop":
                del lines[k]
            elif how == "repeat":
                lines.insert(k, lines[k])
            elif how == "swap":
                j = data.draw(st.integers(0, len(lines) - 1))
                lines[k], lines[j] = lines[j], lines[k]
            elif how == "indent":
                lines[k] = "  " + lines[k]
            else:
                lines[k] = lines[k][2:] if lines[k].startswith("  ") else lines[k].lstrip()
            text = "\n".join(lines)
    return text


# ---------------------------------------------------------------- sequence text

@settings(max_examples=N, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(ALPHABET, max_size=60).map("".join))
def test_random_text(text):
    run_pipeline(text)


@settings(max_examples=N, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.sampled_from(SEEDS), st.data())
def test_mutated_and_truncated_examples(seed, data):
    run_pipeline(mutate(seed, data, ALPHABET))


@settings(max_examples=max(N // 3, 100), deadline=None)
@given(st.text(max_size=200))
def test_arbitrary_unicode(text):
    run_pipeline(text)


EXPR_ATOMS = ["1", "2.5", "1 ns", "3 us", "90 deg", "pi", "(1 ns)", "sin(1 rad)", "a", "1e308"]
EXPR_OPS = ["+", "-", "*", "/", "^", "**"]


@settings(max_examples=max(N // 3, 100), deadline=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(st.sampled_from(["chain", "nest", "unary", "calls", "mixed"]), st.integers(1, 3000),
       st.lists(st.sampled_from(EXPR_ATOMS), min_size=1, max_size=4),
       st.lists(st.sampled_from(EXPR_OPS), min_size=1, max_size=4))
def test_long_and_deep_expressions(shape, n, atoms, ops):
    """Expressions thousands of operators long or deep: chains, nested
    parentheses, unary signs, nested calls (the limits that keep evaluation
    off the interpreter's stack)."""
    if shape == "chain":
        expr = atoms[0] + "".join(f" {ops[k % len(ops)]} {atoms[k % len(atoms)]}"
                                  for k in range(n))
    elif shape == "nest":
        expr = "(" * n + atoms[0] + ")" * n
    elif shape == "unary":
        expr = "-" * n + atoms[0]
    elif shape == "calls":
        expr = "abs(" * n + atoms[0] + ")" * n
    else:
        expr = "".join(f"({atoms[k % len(atoms)]} {ops[k % len(ops)]} " for k in range(n)) \
            + atoms[0] + ")" * n
    run_pipeline(f"let a = 1 ns\nlet x = {expr}\nwait x on A\n")


# ---------------------------------------------------------------- device YAML

@settings(max_examples=N, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(YAML_ALPHABET, max_size=60).map("".join))
def test_random_device_yaml(text):
    run_device(text)


@settings(max_examples=max(N // 2, 100), deadline=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(st.sampled_from(DEVICE_SEEDS), st.data())
def test_mutated_and_truncated_device_files(seed, data):
    # half the count: a third of these devices load and are compiled against
    run_device(mutate(seed, data, YAML_ALPHABET, explode=(10, EXPLODE[1] // 5)))


def test_every_device_seed_loads_and_compiles():
    """The seeds themselves are valid, so mutations start from working files."""
    assert len(DEVICE_SEEDS) >= 4
    for text in DEVICE_SEEDS:
        assert run_device(text) == "device ok, then ok"


# ---------------------------------------------------------------- generator limits

# A two-dot device whose channel keys the two properties below fill in:
# {mw}, {P_A}, {P_B}, {B_AB}, {M1} are extra keys of each channel (padding),
# {bits_*} and {range_*} the DAC widths and ranges.  The barrier pulses to
# 250 mV during a sqrtswap, the plungers idle at 0 V, the I/Q line plays bursts.
LIMITS_DEVICE = """name: limits
field: 250 mT
temperature: 40 mK
rotation: {{mode: duration, shape: gauss, duration: 24 ns}}
readout: {{marker: M1, duration: 100 ns}}
dots:
  A: {{preset: gaas, g: -0.44, drive: {{line: mw, rabi_per_volt: 40 MHz/V}}, plunger: P_A}}
  B: {{preset: gaas, g: -0.40, drive: {{line: mw, rabi_per_volt: 40 MHz/V}}, plunger: P_B}}
couplings:
  - {{dots: [A, B], barrier: B_AB, exchange: {{model: exponential, j0: 200 kHz, v0: 40 mV}},
     idle_voltage: 0 mV, pulse_voltage: 250 mV}}
channels:
  mw: {{kind: iq, sample_rate: 1 GS/s, bits: {bits_mw}, range: {range_mw}, lo: 1.5 GHz,
       if_band: [-300 MHz, 300 MHz]{mw}}}
  P_A: {{kind: gate, sample_rate: 1 GS/s, bits: {bits_P_A}, range: {range_P_A}{P_A}}}
  P_B: {{kind: gate, sample_rate: 1 GS/s, bits: {bits_P_B}, range: {range_P_B}{P_B}}}
  B_AB: {{kind: gate, sample_rate: 1 GS/s, bits: {bits_B_AB}, range: {range_B_AB}{B_AB}}}
  M1: {{kind: marker, sample_rate: 1 GS/s{M1}}}
"""
LIMITS_ANALOG = ("mw", "P_A", "P_B", "B_AB")
LIMITS_CHANNELS = LIMITS_ANALOG + ("M1",)
LIMITS_STEPS = "rot A x 90 deg\nsqrtswap A B\nrot B y 45 deg\nwait 30 ns\nread A B\n"
# what the padding property lets synthesis take: below it, the estimate made
# before synthesis (padding included) must refuse
LIMITS_MEMORY = 64 * 2 ** 20
# integers as YAML may spell them, from plausible to absurd
PAD_TEXT = st.one_of(
    st.integers(1, 5000).map(str), st.integers(1, 2 ** 20).map(str),
    st.integers(-3, 2 ** 70).map(str),
    st.integers(0, 40).map(lambda k: str(2 ** k)),
    st.integers(0, 40).map(lambda k: str(2 ** k + 1)),
    st.sampled_from(["0", "1", "16", "64", "100000000", "1000000000", "1.0e+9", "1.0e+300",
                     "16777216", "16777217", "65536", "65537", "65521", "65519", "2.5", "-1",
                     ".inf", ".nan", "1_000_000", "0x1000000", "true", "~", "[1]", "9" * 40]))
BITS_TEXT = st.one_of(st.integers(1, MAX_BITS).map(str), st.integers(1, MAX_BITS).map(str),
                      st.integers(-2, 70).map(str),
                      st.sampled_from(["8", "12", "14", "16", "17", "20", "24", "25", "31", "32",
                                       "33", "64", "16.0", "1.0e+1", "0x10", "24.5", ".nan", "~"]))
RANGE_TEXT = st.tuples(st.sampled_from(["-1 V", "-500 mV", "-300 mV", "-2 mV", "-1 uV", "0 V"]),
                       st.sampled_from(["1 V", "500 mV", "300 mV", "251 mV", "3 mV", "1 uV"])
                       ).map(lambda p: f"[{p[0]}, {p[1]}]")


def limits_device(pads: dict | None = None, bits: dict | None = None,
                  ranges: dict | None = None) -> str:
    keys = {name: "" for name in LIMITS_CHANNELS}
    for name, (minlen, gran) in (pads or {}).items():
        keys[name] = ((f", min_length: {minlen}" if minlen is not None else "")
                      + (f", granularity: {gran}" if gran is not None else ""))
    for name in LIMITS_ANALOG:
        keys[f"bits_{name}"] = (bits or {}).get(name, "14" if name == "mw" else "16")
        keys[f"range_{name}"] = (ranges or {}).get(name, "[-1 V, 1 V]")
    return LIMITS_DEVICE.format(**keys)


def limits_outcome(text: str, check_waveforms) -> str:
    """Load the device, refuse or compile LIMITS_STEPS against it with the
    memory estimate (padding included) checked first, then
    ``check_waveforms(device, timeline, waveforms)``; the outcome."""
    with time_limit(CASE_SECONDS):
        try:
            dev = load_device_text(text, "limits.yaml")
        except DeviceError as e:
            assert_own_error(e, "limits.yaml")
            return "device error"
        try:
            ex = expand(parse_text(LIMITS_STEPS, "steps.dotseq"))
            check(ex, dev)
            tl = schedule(ex.runs[0], dev)
            n = dev.padded_samples(tl.n_samples)
            n_outputs = sum(2 if c.kind == "iq" else 1 for c in dev.channels.values())
            try:
                limits.check_synthesis_size(n, n_outputs, LIMITS_MEMORY, file="steps.dotseq")
            except SynthesisError as e:
                assert "would need about" in e.first.message and f"{n} samples" in e.first.message
                return "refused by the memory estimate"
            wf = synthesize(tl, dev)
        except DotseqError as e:
            assert_own_error(e, "steps.dotseq", "limits.yaml")
            return e.stage
        assert wf.n_samples == n, (wf.n_samples, n)    # the estimate is what synthesis makes
        check_waveforms(dev, tl, wf)
        return "ok"


def _padding_ok(dev, tl, wf) -> None:
    assert dev.min_length <= MAX_MIN_LENGTH and dev.granularity <= MAX_GRANULARITY
    assert wf.n_samples >= max(tl.n_samples, dev.min_length)
    assert wf.n_samples % dev.granularity == 0
    assert wf.n_samples < max(tl.n_samples, dev.min_length) + dev.granularity


def _codes_ok(dev, tl, wf) -> None:
    """Every code is within the channel's width, held by its type and by the
    bundle's int32, and decodes to within half an LSB of the intended level."""
    for name, out in wf.outputs.items():
        if out.codes is None:
            continue
        ch = dev.channels[out.channel]
        codes = np.asarray(out.codes)
        assert codes.dtype.kind == "u" and np.iinfo(codes.dtype).max >= 2 ** ch.bits - 1, name
        wide = codes.astype(np.int64)
        assert wide.min() >= 0 and wide.max() <= 2 ** ch.bits - 1, name
        assert np.array_equal(checked_cast(codes, CODES_DTYPE).astype(np.int64), wide), name
        q = (ch.v_max - ch.v_min) / 2 ** ch.bits
        decoded = ch.v_min + wide * q
        scale = max(abs(ch.v_min), abs(ch.v_max))
        err = np.abs(decoded - np.asarray(out.ideal))
        assert err.max() <= q / 2 * (1 + 1e-9) + 1e-15 * scale, (name, ch.bits, err.max(), q)


@settings(max_examples=max(N // 3, 100), deadline=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(st.dictionaries(st.sampled_from(LIMITS_CHANNELS),
                       st.tuples(st.none() | PAD_TEXT, st.none() | PAD_TEXT), max_size=5))
def test_padding_keys(pads):
    """Random min_length and granularity values, up to absurd ones: refused
    at the key with a position, refused by the memory estimate (which counts
    the padding) before synthesis, or compiled to exactly the estimated
    length; never gigabytes, never a crash."""
    outcome = "padding: " + limits_outcome(limits_device(pads=pads), _padding_ok)
    COUNTS[outcome] += 1


@settings(max_examples=max(N // 3, 100), deadline=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(st.dictionaries(st.sampled_from(LIMITS_ANALOG), BITS_TEXT, max_size=4),
       st.dictionaries(st.sampled_from(LIMITS_ANALOG), RANGE_TEXT, max_size=4))
def test_code_widths(bits, ranges):
    """Random DAC widths and ranges on the I/Q line and the gates: refused at
    the bits key with a position, or compiled with every code inside the
    width (never wrapped) and decoding to within half an LSB of the level
    intended."""
    outcome = "code widths: " + limits_outcome(limits_device(bits=bits, ranges=ranges),
                                               _codes_ok)
    COUNTS[outcome] += 1


def test_limits_device_compiles_as_written():
    """The template of the two properties above is valid at every width
    dotseq accepts, so their random cases start from a working file."""
    assert limits_outcome(limits_device(), _codes_ok) == "ok"
    for b in (1, 8, 16, 17, MAX_BITS):
        widths = {name: str(b) for name in LIMITS_ANALOG}
        # a 1-bit line (codes -1 V and 0 V) plays nothing of a burst below 0.5 V:
        # refused when scheduled (issue 14, item 3), no longer compiled to silence
        allowed = ("ok", "synthesis") + (("schedule",) if b == 1 else ())
        assert limits_outcome(limits_device(bits=widths), _codes_ok) in allowed
    assert limits_outcome(limits_device(bits={"P_A": str(MAX_BITS)}), _codes_ok) == "ok"
    assert limits_outcome(limits_device(pads={"M1": ("100000", "48")}), _padding_ok) == "ok"
    assert limits_outcome(limits_device(pads={"P_A": ("16777216", None)}), _padding_ok) \
        == "refused by the memory estimate"
# ---------------------------------------------------------------- special files

SPECIAL_KINDS = ("/dev/zero", "/dev/null", "fifo", "folder", "link-loop", "/proc/self/environ",
                 "link-to-zero", "sparse-huge", "socket")
SPECIAL_ROLES = ("sequence", "include", "nested-include", "device", "--device")
SPECIAL_MEMORY = 1 << 30     # address space a case may add: an unbounded read fails, not the machine


@functools.lru_cache(maxsize=1)
def special_dir() -> Path:
    """A folder holding one of each special file (made once, removed at exit)."""
    import atexit
    import shutil
    import socket
    import tempfile
    d = Path(tempfile.mkdtemp(prefix="dotseq-special-"))
    atexit.register(shutil.rmtree, d, True)
    os.mkfifo(d / "fifo")
    (d / "folder").mkdir()
    (d / "link-loop").symlink_to(d / "link-loop-2")
    (d / "link-loop-2").symlink_to(d / "link-loop")
    (d / "link-to-zero").symlink_to("/dev/zero")
    with open(d / "sparse-huge", "wb") as f:     # 100 GB on paper, nothing on disk
        f.truncate(100 << 30)
    s = socket.socket(socket.AF_UNIX)
    s.bind(str(d / "socket"))
    s.close()
    return d


@contextmanager
def address_space_cap(extra: int):
    """Limit this process's address space to what it has now plus ``extra``
    bytes while the block runs (a runaway read raises MemoryError)."""
    import resource
    with open("/proc/self/status") as f:
        size = next(int(line.split()[1]) * 1024 for line in f if line.startswith("VmSize:"))
    old = resource.getrlimit(resource.RLIMIT_AS)
    cap = size + extra if old[1] == resource.RLIM_INFINITY else min(size + extra, old[1])
    resource.setrlimit(resource.RLIMIT_AS, (cap, old[1]))
    try:
        yield
    finally:
        resource.setrlimit(resource.RLIMIT_AS, old)


@settings(max_examples=max(N // 30, 60), deadline=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(st.sampled_from(SPECIAL_KINDS), st.sampled_from(SPECIAL_ROLES), st.booleans())
def test_special_files(kind, role, relative):
    """Sequence, include, device statement and --device pointing at the zero
    device, the null device, a FIFO, a folder, a link loop, a process's
    environment, a 100 GB sparse file or a socket: always dotseq's own error
    naming the path as written, within the case time limit and 1 GiB more
    address space, never a byte of the file shown."""
    d = special_dir()
    target = str(d / kind) if not kind.startswith("/") else kind
    written = kind if relative and not kind.startswith("/") else target
    with tempfile_dir() as work:
        if relative and kind == "link-loop":     # a loop of its own beside the sequence
            (work / "link-loop").symlink_to(work / "link-loop-2")
            (work / "link-loop-2").symlink_to(work / "link-loop")
        elif relative and not kind.startswith("/"):
            (work / kind).symlink_to(d / kind)
        seq = work / "s.dotseq"
        device = None
        if role == "sequence":
            seq = Path(written) if not relative or kind.startswith("/") else work / written
        elif role == "include":
            seq.write_text(f'rot A x 90 deg\ninclude "{written}"\n', encoding="utf-8")
        elif role == "nested-include":
            (work / "mid.dotseq").write_text(f'include "{written}"\n', encoding="utf-8")
            seq.write_text('rot A x 90 deg\ninclude "mid.dotseq"\n', encoding="utf-8")
        elif role == "device":
            seq.write_text(f'device "{written}"\nrot A x 90 deg\n', encoding="utf-8")
        else:
            seq.write_text("rot A x 90 deg\n", encoding="utf-8")
            device = written if not relative or kind.startswith("/") else str(work / written)
        with time_limit(CASE_SECONDS), address_space_cap(SPECIAL_MEMORY):
            try:
                load(seq, device)
            except DotseqError as e:
                text = e.render()
                outcome = f"special {e.stage}"
            else:
                raise AssertionError(f"{kind} as {role} was read as input")
    assert written in text, text
    assert "SHELL=" not in text and "PATH=" not in text and "\x00" not in text, text
    COUNTS[outcome] += 1


@contextmanager
def tempfile_dir():
    import shutil
    import tempfile
    d = Path(tempfile.mkdtemp(prefix="dotseq-case-"))
    try:
        yield d
    finally:
        shutil.rmtree(d, ignore_errors=True)


# ---------------------------------------------------------------- failures found, kept

def test_long_operator_chain_is_an_error_not_a_crash():
    """1+1+...+1 made a tree deep enough to overflow the evaluator's stack
    (found while hardening; now refused by the parser with a position)."""
    assert run_pipeline("let x = " + "+".join(["1 ns"] * 5000) + "\nwait x\n") == "sequence syntax"
    assert run_pipeline("let x = " + "^".join(["1"] * 5000) + "\n") == "sequence syntax"
    assert run_pipeline("let x = " + "(" * 500 + "1" + ")" * 500 + "\n") == "sequence syntax"


def test_tiny_exchange_from_a_unit_typo_is_fast():
    """The long fuzz run swapped two characters of the GaAs demo device,
    turning 'u: 1 meV' into 'u: 1  eV': a 260 000-sample exchange pulse
    whose propagator took 20 s (a Python loop over every sub-step).  It
    must compile within the per-case time limit."""
    text = DEVICE_SEEDS[DEVICE_FILES.index(SEQUENCES / "devices" / "demo_gaas_pair.yaml")]
    chars = list(text)
    chars[1], chars[1959] = chars[1959], chars[1]
    mutated = "".join(chars)
    assert "u: 1  eV" in mutated
    assert run_device(mutated) == "device ok, then ok"


@pytest.mark.slow
def test_long_fuzz_run():
    """The long run (at least 20 000 cases in all), as the script runs it."""
    import json
    import subprocess
    import sys
    script = Path(__file__).resolve().parent / "benchmarks" / "fuzz_long.py"
    r = subprocess.run([sys.executable, str(script)], capture_output=True, text=True,
                       timeout=6 * 3600)
    summary = json.loads(r.stdout.strip().splitlines()[-1])
    assert r.returncode == 0 and summary["failures"] == 0, r.stdout[-5000:] + r.stderr[-5000:]
    assert summary["cases"] >= 20_000


# ---------------------------------------------------------------- run-folder atomicity

RUN_CONTENTS = ("absent", "empty", "own", "own+file", "own+changed-preview", "own-no-marker",
                "user-only")
RUN_FAULTS = ("none", "--run 99", "--nodes 0", "--memory-limit 1kB", "enospc-bundle",
              "enospc-report", "interrupt-preview", "kill")


@functools.lru_cache(maxsize=1)
def _old_run_folder() -> tuple[Path, float]:
    """One complete run folder of test_run_atomic.SEQ_A (made once per
    process) and the seconds a forked run of SEQ_B takes from its first
    simulation report to its end (the span the kills are spread over)."""
    import contextlib
    import io
    import tempfile
    from test_run_atomic import SEQ_A, SEQ_B, dotseq_run, kill_run_at
    base = Path(tempfile.mkdtemp(prefix="dotseq-fuzz-run-"))
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        assert dotseq_run(SEQ_A, base / "old") == 0
    (base / "calibrate").mkdir()
    code, tail = kill_run_at(SEQ_B, base / "calibrate" / "out", None)
    assert code == 0
    return base / "old", tail


@settings(max_examples=max(N // 100, 3), deadline=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(st.one_of(st.sampled_from(RUN_CONTENTS[:3]), st.sampled_from(RUN_CONTENTS)),
       st.one_of(st.just("kill"), st.sampled_from(RUN_FAULTS)),     # kills in about half the cases
       st.floats(0.0, 1.2))
def test_run_folder_atomicity(contents, fault, kill_at):
    """`dotseq run` into a folder holding anything, with a bad argument, a
    disk error, an interrupt or a SIGKILL at a random moment: afterwards
    (and after the tidying the next run does) the folder holds the old
    content byte for byte, or one complete new run; a refusal is exit 2."""
    import contextlib
    import errno
    import io
    import shutil
    import tempfile
    from unittest import mock
    from compiler.cli import main
    from test_run_atomic import (FAST, SEQ_B, check_after_kill, kill_run_at,
                                 run_folder_sequence, snapshot)
    old_run, tail = _old_run_folder()
    with tempfile.TemporaryDirectory(prefix="dotseq-fuzz-case-") as d:
        out = Path(d) / "out"
        if contents.startswith("own"):
            shutil.copytree(old_run, out)
        elif contents != "absent":
            out.mkdir()
        if contents == "own+file":
            (out / "notes.txt").write_text("a user's notes")
        elif contents == "own+changed-preview":
            (out / "preview.png").write_bytes(b"a user's picture")
        elif contents == "own-no-marker":
            (out / "dotseq-run.json").unlink()
        elif contents == "user-only":
            (out / "preview.png").write_bytes(b"a user's picture")
        before = snapshot(out) if out.exists() else None
        foreign = contents not in ("absent", "empty", "own")
        if fault == "kill":
            code, _ = kill_run_at(SEQ_B, out, kill_at * tail)
            if foreign:
                assert code == 2 and (snapshot(out) == before)
                outcome = "refused"
            else:
                outcome = check_after_kill(out, before, SEQ_B)
                if contents == "empty" and outcome == "old":
                    outcome = "old (empty)"
            COUNTS[f"run: kill, {outcome}"] += 1
            return
        argv = ["run", str(SEQ_B), "-o", str(out), *FAST]
        patches = []
        if fault.startswith("--"):
            argv += fault.split()
        elif fault.startswith("enospc"):
            where = fault.split("-")[1]
            mod = "compiler.export.write_bundle" if where == "bundle" else \
                "compiler.report.write_report"
            patches.append(mock.patch(mod, side_effect=OSError(errno.ENOSPC,
                                                               "No space left on device")))
        elif fault == "interrupt-preview":
            patches.append(mock.patch("compiler.preview.preview", side_effect=KeyboardInterrupt))
        err = io.StringIO()
        with contextlib.ExitStack() as stack:
            for p in patches:
                stack.enter_context(p)
            stack.enter_context(contextlib.redirect_stdout(io.StringIO()))
            stack.enter_context(contextlib.redirect_stderr(err))
            code = main(argv)
        assert "Traceback" not in err.getvalue()
        if foreign or fault != "none":
            assert code == (130 if fault == "interrupt-preview" and not foreign else 2), \
                err.getvalue()
            assert (snapshot(out) if out.exists() else None) == before
            assert sorted(p.name for p in out.parent.iterdir()) == (["out"] if before is not None
                                                                    else [])
            COUNTS["run: refused or failed, old kept"] += 1
        else:
            assert code == 0, err.getvalue()
            assert run_folder_sequence(out) == str(SEQ_B)
            COUNTS["run: new"] += 1
