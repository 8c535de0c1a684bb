"""Property tests: random, mutated and truncated sequence text never escapes
as anything but the tool's own error type, and always with a position."""

import os
import signal
from contextlib import contextmanager

import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from compiler.device import BUNDLED_DEFAULT, load_device
from compiler.check import check
from compiler.errors import SpincError
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
                            "together", "sqrtswap A B", "MHz", "mV", " on ", "phase(", "1e308", "nan"])
DEVICE = load_device(BUNDLED_DEFAULT)
# examples per property; a long run sets SPINC_FUZZ_EXAMPLES (see tests/benchmarks/fuzz_long.py)
N = int(os.environ.get("SPINC_FUZZ_EXAMPLES", "300"))


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


def run_pipeline(text: str) -> None:
    with time_limit(5.0):
        try:
            ex = expand(parse_text(text, "fuzz.dotseq"), max_runs=200, max_steps=20_000)
            check(ex, DEVICE)
            for r in ex.runs[:3]:
                tl = schedule(r, DEVICE)
                if tl.n_samples <= 200_000:
                    synthesize(tl, DEVICE)
        except SpincError as e:
            assert e.problems, "an error without problems"
            for p in e.problems:
                assert p.message
            text = e.render()
            assert "error:" in text


@settings(max_examples=N, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(ALPHABET, max_size=60).map("".join))
def test_random_text(text):
    run_pipeline(text)


@settings(max_examples=N, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.sampled_from(SEEDS), st.data())
def test_mutated_and_truncated_examples(seed, data):
    text = seed
    for _ in range(data.draw(st.integers(1, 4))):
        op = data.draw(st.sampled_from(["cut", "delete", "insert", "swap", "dup"]))
        i = data.draw(st.integers(0, max(len(text) - 1, 0)))
        if op == "cut":
            text = text[:i]
        elif op == "delete":
            j = data.draw(st.integers(i, min(i + 10, len(text))))
            text = text[:i] + text[j:]
        elif op == "insert":
            text = text[:i] + data.draw(ALPHABET) + text[i:]
        elif op == "swap" and len(text) > 2:
            j = data.draw(st.integers(0, len(text) - 1))
            chars = list(text)
            chars[i], chars[j] = chars[j], chars[i]
            text = "".join(chars)
        elif op == "dup":
            text = text[:i] + text[i:i + 20] + text[i:]
    run_pipeline(text)


@settings(max_examples=max(N // 3, 100), deadline=None)
@given(st.text(max_size=200))
def test_arbitrary_unicode(text):
    run_pipeline(text)
