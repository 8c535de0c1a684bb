"""Bad sequence text: the tool's own error, at the right line and column,
with the offending text and a hint.  (Device-file errors: test_device.py.)"""

from pathlib import Path

import pytest

from compiler.errors import SequenceError, SequenceSyntaxError, DotseqError
from compiler.expand import expand
from compiler.parse import parse_text

# (source, error class, line, column, message fragment, hint fragment)
CASES = [
    pytest.param("rot A x 90", SequenceError, 1, 9, "needs an angle unit", "90 deg", id="angle-without-unit"),
    pytest.param("sqrtswapinv A B", SequenceSyntaxError, 1, 1, "written 'sqrtswap_inv'", "write 'sqrtswap_inv'", id="old-inverse-keyword"),
    pytest.param("rot A x 90 dg", SequenceSyntaxError, 1, 12, "unknown unit 'dg'", "did you mean 'deg'", id="misspelt-unit"),
    pytest.param("rot A x 90dg", SequenceSyntaxError, 1, 11, "unknown unit 'dg'", "deg", id="glued-unit"),
    pytest.param("rott A x 90 deg", SequenceSyntaxError, 1, 1, "unknown statement 'rott'", "did you mean 'rot'", id="misspelt-keyword"),
    pytest.param("rot A w 90 deg", SequenceSyntaxError, 1, 7, "unknown rotation axis 'w'", "phase(ANGLE)", id="bad-axis"),
    pytest.param("wait 10 MHz", SequenceError, 1, 6, "must be a time, but this is a frequency", "ns", id="wait-wrong-unit"),
    pytest.param("wait -5 ns", SequenceError, 1, 6, "the wait is negative", "zero or longer", id="negative-wait"),
    pytest.param("let a = 1 ns\nlet a = 2 ns", SequenceError, 2, 1, "'a' is already defined", "1:1", id="redefined"),
    pytest.param("let tau = 3 ns\nwait tua", SequenceError, 2, 6, "unknown name 'tua'", "did you mean 'tau'", id="misspelt-parameter"),
    pytest.param("together { rot A x 90 deg ; rot A y 90 deg }", SequenceError, 1, 29, "qubit A is used twice", "different qubits", id="together-same-qubit"),
    pytest.param("repeat 2.5 { wait 1 ns }", SequenceError, 1, 8, "whole number", "", id="fractional-repeat"),
    pytest.param("block echo(q) { rot q x 90 deg }\ndo ecko(A)", SequenceError, 2, 1, "unknown block 'ecko'", "did you mean 'echo'", id="misspelt-block"),
    pytest.param("block b(q) { rot q x 90 deg }\ndo b(A, B)", SequenceError, 2, 1, "takes 1 argument", "defined at", id="block-arity"),
    pytest.param("block b(q) { do b(q) }\ndo b(A)", SequenceError, 1, 14, "block calls itself: b -> b", "recursive", id="recursive-block"),
    pytest.param("sqrtswap A A", SequenceError, 1, 12, "two different qubits", "", id="exchange-same-qubit"),
    pytest.param("cphase A B", SequenceSyntaxError, 1, 11, "needs the conditional phase", "cphase A B 90 deg", id="cphase-no-angle"),
    pytest.param("cphase A B duration=100 ns", SequenceSyntaxError, 1, 12, "needs the conditional phase", "cz A B", id="cphase-option-for-angle"),
    pytest.param("cphase A B 360 deg", SequenceError, 1, 12, "is the identity", "leave the step out", id="cphase-identity"),
    pytest.param("cphase A B 90 ns", SequenceError, 1, 12, "must be an angle", "", id="cphase-angle-unit"),
    pytest.param("rot A x 90 deg detuning=3 ns", SequenceError, 1, 25, "must be a frequency", "", id="detuning-unit"),
    pytest.param("rot A z 90 deg detuning=3 MHz", SequenceSyntaxError, 1, 16, "frame updates", "remove", id="detuning-on-z"),
    pytest.param("cz A B 90 deg", SequenceSyntaxError, 1, 8, "unexpected '90'", "", id="cz-takes-no-angle"),
    pytest.param("let x = 2 ^ 100000", SequenceError, 1, 13, "beyond the limit", "bounds powers", id="huge-exponent"),
    pytest.param("let x = 1 ns / 0", SequenceError, 1, 16, "division by zero", "", id="division-by-zero"),
    pytest.param('device "a.yaml"\ndevice "b.yaml"', SequenceError, 2, 1, "a second device statement", "1:1", id="two-devices"),
    pytest.param("sweep t from 0 ns to 1 us in 0", SequenceError, 1, 30, "at least 1", "", id="sweep-zero-points"),
    pytest.param("sweep t from 0 ns to 1 V in 3", SequenceError, 1, 22, "must be a time", "", id="sweep-mixed-units"),
    pytest.param("rot A x 90 deg shpe=gauss", SequenceSyntaxError, 1, 16, "unknown option 'shpe'", "did you mean 'shape'", id="misspelt-option"),
    pytest.param("rot A x 90 deg shape=gaussian", SequenceSyntaxError, 1, 22, "unknown shape 'gaussian'", "gauss", id="bad-shape"),
    pytest.param("rot A x 90 deg duration=10 ns amplitude=1 mV", SequenceError, 1, 31, "not both", "remove one", id="over-determined-burst"),
    pytest.param("let s = 3", SequenceSyntaxError, 1, 5, "'s' is a unit", "another name", id="unit-as-name"),
    pytest.param("wait 1 ns\nprepare A up", SequenceError, 2, 1, "before the first step", "line 1", id="late-prepare"),
    pytest.param("prepare A sideways", SequenceSyntaxError, 1, 11, "qubits followed by a state", "states:", id="bad-state"),
    pytest.param("together { rot A x 90 deg", SequenceSyntaxError, 1, 10, "never closed", "'}'", id="open-brace"),
    pytest.param("wait (2 + 3 ns)", SequenceError, 1, 7, "cannot add a time to a plain number", "same kind of unit", id="mixed-sum"),
    pytest.param("let t = 2\nwait t ns", SequenceSyntaxError, 2, 8, "must follow a number", "x * 1 ns", id="unit-after-name"),
    pytest.param("rot A z 90 deg shape=gauss", SequenceSyntaxError, 1, 16, "frame updates", "remove", id="options-on-z"),
    pytest.param('"unterminated', SequenceSyntaxError, 1, 1, "string is not closed", "double quote", id="open-string"),
    pytest.param("wait 1 ns }", SequenceSyntaxError, 1, 11, "without a matching", "remove", id="stray-brace"),
    pytest.param("let x = sin(3 ns)", SequenceError, 1, 9, "sin() needs an angle", "", id="sin-of-time"),
    pytest.param("wait 1 ns @", SequenceSyntaxError, 1, 11, "unexpected character '@'", "operators", id="bad-character"),
    pytest.param("rot A x 1e999 deg", SequenceError, 1, 9, "too large", "", id="overflowing-number"),
    pytest.param("sweep n over [1, 2]\nsweep m from 0 ns to n * 1 ns in 2", SequenceError, 2, 22,
                 "cannot depend on the swept parameter 'n'", "fixed", id="sweep-depends-on-sweep"),
    pytest.param("sweep t over []", SequenceSyntaxError, 1, 15, "at least one value", "over [", id="empty-sweep-list"),
    pytest.param("let a = 1 ns\nwait a\nwait b", SequenceError, 3, 6, "unknown name 'b'", "let NAME", id="undefined-name"),
    pytest.param("block b(q) { rot q x 90 deg }\nlet t = 1 ns\ndo b(t)", SequenceError, 1, 18,
                 "'q' is a parameter, not a qubit", "qubit", id="number-as-qubit"),
    # non-finite, negative, zero and unit-less values, each naming what it is about
    pytest.param("wait nan", SequenceError, 1, 6, "'nan' is not a number dotseq accepts", "100 ns", id="nan"),
    pytest.param("wait inf * 1 ns", SequenceError, 1, 6, "'inf' is not a number", "", id="inf"),
    pytest.param("let x = 1e308 * 10", SequenceError, 1, 9, "not a finite number in 'x'", "too large", id="overflow"),
    pytest.param("rot A x 90 deg duration=-5 ns", SequenceError, 1, 25,
                 "the duration option must be longer than zero, got -5 ns", "duration=40 ns", id="negative-duration"),
    pytest.param("sqrtswap A B duration=0 ns", SequenceError, 1, 23, "longer than zero, got 0 s", "", id="zero-duration"),
    pytest.param("rot A x 90 deg amplitude=-100 mV", SequenceError, 1, 26,
                 "the amplitude of a burst must be above zero", "negative angle", id="negative-burst-amplitude"),
    pytest.param("let a = sin(30)", SequenceError, 1, 13, "sin() needs an angle with its unit", "sin(30 deg)",
                 id="sin-of-plain-number"),
    pytest.param("rot A phase(30) 90 deg", SequenceError, 1, 13, "the axis phase needs an angle unit", "90 deg",
                 id="phase-without-unit"),
    pytest.param("let a = 90\nrot A x a", SequenceError, 2, 9, "the rotation angle needs an angle unit", "deg",
                 id="angle-parameter-without-unit"),
    # the evaluator: no attribute access, bounded expressions
    pytest.param("let x = pi.real", SequenceSyntaxError, 1, 11, "unexpected character '.'", "operators",
                 id="attribute-access"),
    pytest.param("let x = " + "+".join(["1"] * 300), SequenceSyntaxError, 1, 522,
                 "more than 256 operators", "let", id="operator-chain"),
    # issue 12, item 11: nesting of statements is not an expression's; long numbers shortened
    pytest.param("repeat 2 { " * 65 + "wait 1 ns" + " }" * 65, SequenceSyntaxError, 1, 714,
                 "repeat, together and block bodies nested deeper than 64 levels",
                 "multiply repeat counts", id="nested-repeats"),
    pytest.param("repeat 1 {\n" * 64 + "wait " + "(" * 62 + "-1" + ")" * 62 + " ns\n" + "}\n" * 64,
                 SequenceError, 65, 6, "the wait is negative", "zero or longer",
                 id="deep-repeats-and-expression"),
    pytest.param("wait 1 ns " + "7" * 300, SequenceSyntaxError, 1, 11,
                 "unexpected '777777777777...777777 (300 digits)' after", "one statement per line",
                 id="long-number-shortened"),
    pytest.param("rot A x 1" + "0" * 400 + " deg", SequenceError, 1, 9,
                 "number '100000000000...000000 (401 digits)' is too large", "", id="long-overflow-shortened"),
]


@pytest.mark.parametrize("src, cls, line, col, message, hint", CASES)
def test_bad_sequence(src, cls, line, col, message, hint):
    with pytest.raises(DotseqError) as info:
        expand(parse_text(src + "\n", "bad.dotseq"))
    err = info.value
    assert isinstance(err, cls), err.render()
    p = err.first
    assert (p.span.file, p.span.line, p.span.col) == ("bad.dotseq", line, col), err.render()
    assert message in p.message
    assert hint in p.hint
    # the rendering shows the position, the source line and a caret under the text
    text = err.render()
    assert f"bad.dotseq:{line}:{col}: error:" in text
    assert "^" in text


def test_there_are_at_least_twenty_distinct_cases():
    assert len({c.id for c in CASES}) >= 20


def test_all_problems_are_collected_and_capped():
    src = "\n".join(f"rott A x {i} deg" for i in range(15)) + "\n"
    with pytest.raises(SequenceSyntaxError) as info:
        parse_text(src, "many.dotseq")
    assert len(info.value.problems) == 10 and info.value.more == 5    # kept, then counted
    assert "... and 5 more syntax errors" in info.value.render()
    assert json_more(info.value) == 5


def json_more(err) -> int:
    return err.to_dict().get("more_errors", 0)


@pytest.mark.parametrize("junk", ["@ ", "} ", "x ", "x;", "rot ", '"" ', "1.5 ns ", ";"])
def test_a_line_of_junk_keeps_ten_problems_and_counts_the_rest(junk):
    """A long line of junk tokens (issue 12, item 4: 48 MB took 95 s and
    9 GB, one problem and token object per junk token) keeps the problems
    shown and counts the rest; the first ones stay exact."""
    line = junk * (200_000 // len(junk))
    src = "wait 1 ns\n" + line + "\n" + "rott A\n" * 3
    with pytest.raises(SequenceSyntaxError) as info:
        parse_text(src, "junk.dotseq")
    err = info.value
    assert len(err.problems) <= 10
    if junk == ";":                                  # separators only: the next line is wrong
        assert (err.first.span.line, err.first.span.col, err.more) == (3, 1, 0)
        return
    assert err.first.span.line == 2 and err.first.span.col == (5 if junk == "rot " else 1)
    text = err.render()
    assert len(text) < 10_000                        # windows, not the 200 kB line
    if junk in ("@ ", "} ", "x;"):                   # one problem a token: capped, counted
        assert len(err.problems) == 10 and err.more >= 1
        assert "only the first error of each line is counted" in text
        assert err.more == 1 + 3                     # the rest of line 2, then lines 3-5


def test_problems_from_an_include_are_counted(tmp_path):
    (tmp_path / "bad.dotseq").write_text("rott A\n" * 25, encoding="utf-8")
    main = tmp_path / "main.dotseq"
    main.write_text('include "bad.dotseq"\nrott B\n', encoding="utf-8")
    from compiler.parse import parse_path
    with pytest.raises(SequenceSyntaxError) as info:
        parse_path(main)
    assert len(info.value.problems) == 10 and info.value.more == 16
    assert "... and 16 more syntax errors" in info.value.render()


def test_caret_is_under_the_offending_text():
    with pytest.raises(DotseqError) as info:
        expand(parse_text("wait   10 MHz\n", "c.dotseq"))
    lines = info.value.render().splitlines()
    src_line = next(i for i, l in enumerate(lines) if "wait   10 MHz" in l)
    caret = lines[src_line + 1]
    start = caret.index("^")
    assert lines[src_line][start:start + caret.count("^")] == "10 MHz"


def test_errors_in_a_block_name_the_call():
    src = "block b(q, t) { wait t on q }\ndo b(A, 5 MHz)\n"
    with pytest.raises(SequenceError) as info:
        expand(parse_text(src, "calls.dotseq"))
    p = info.value.first
    assert p.span.line == 1
    assert any("called at calls.dotseq:2:1" in c for c in p.context)


def test_errors_at_one_sweep_point_name_the_point():
    src = "sweep t over [10 ns, -10 ns]\nwait t\n"
    with pytest.raises(SequenceError) as info:
        expand(parse_text(src, "s.dotseq"))
    assert "t = -10 ns (run 1)" in info.value.render()


def test_include_cycle_shows_the_chain(write):
    a = write("a.dotseq", 'include "b.dotseq"\n')
    write("b.dotseq", 'wait 1 ns\ninclude "a.dotseq"\n')
    from compiler.parse import parse_path
    with pytest.raises(SequenceSyntaxError) as info:
        parse_path(a)
    p = info.value.first
    assert "include cycle: a.dotseq -> b.dotseq -> a.dotseq" in p.message
    assert p.span.file.endswith("b.dotseq") and p.span.line == 2


def test_missing_include_names_the_path_tried(write):
    a = write("a.dotseq", 'include "lib/none.dotseq"\n')
    from compiler.parse import parse_path
    with pytest.raises(SequenceSyntaxError) as info:
        parse_path(a)
    p = info.value.first
    assert "cannot read included file 'lib/none.dotseq'" in p.message
    assert str(a.parent / "lib" / "none.dotseq") in p.hint


def test_file_including_itself(write):
    a = write("a.dotseq", 'wait 1 ns\ninclude "a.dotseq"\n')
    from compiler.parse import parse_path
    with pytest.raises(SequenceSyntaxError) as info:
        parse_path(a)
    p = info.value.first
    assert "include cycle: a.dotseq -> a.dotseq" in p.message
    assert (p.span.line, p.span.col) == (2, 9)


def test_included_text_counts_against_the_size_limit(write):
    """A small file including a big one many times is as big as the sum."""
    from compiler import limits
    from compiler.parse import parse_path
    write("big.dotseq", "wait 1 ns\n" * 1000)              # 10 000 characters
    a = write("a.dotseq", 'include "big.dotseq"\n' * 50)
    budget = limits.budget(200_000 * limits.BYTES_PER_SOURCE_CHAR)   # 200 000 characters
    with pytest.raises(SequenceSyntaxError) as info:
        parse_path(a, budget=budget)
    p = info.value.first
    assert "cannot include 'big.dotseq'" in p.message and "would need about" in p.message
    assert p.span.line == 20 and "--memory-limit" in p.hint


def test_a_burst_too_long_to_hold_is_refused(write):
    # found by the fuzz run: 'duration=400 ns' mutated into '400 s' allocated 30 GiB
    from compiler import load
    from compiler.errors import DotseqError
    dev = (Path(__file__).parent.parent / "sequences" / "devices" / "demo_gaas_pair.yaml").resolve()
    p = write("s.dotseq", f'device "{dev}"\nrot A x 90 deg duration=400 s\n')
    with pytest.raises(DotseqError) as e:
        load(p)
    text = e.value.render()
    assert "1,000,000 samples" in text and "s.dotseq:2:" in text


def fan_out(n_blocks: int, call: str = "do b{last}(A)") -> str:
    """Block k calls block k-1 twice: 2^(n-1) rotations from one call."""
    lines = ["block b0(q) { rot q x 90 deg }"]
    lines += [f"block b{k}(q) {{ do b{k - 1}(q) ; do b{k - 1}(q) }}" for k in range(1, n_blocks)]
    return "\n".join(lines + [call.format(last=n_blocks - 1)]) + "\n"


def test_block_fan_out_is_refused_before_unrolling():
    """Issue 12, item 8: 60 blocks each calling the previous twice were
    refused only after 44 s and 3 GB of unrolled steps; the estimate
    (2^59 rotations) refuses at the call, naming the limit."""
    with pytest.raises(SequenceError) as info:
        expand(parse_text(fan_out(60), "fan.dotseq"))
    p = info.value.first
    assert (p.span.line, p.span.col) == (61, 1)
    assert f"at least {2 ** 59:,} steps" in p.message
    assert "above the limit of 10,000,000 steps" in p.message
    assert "block calls" in p.hint


def test_estimate_multiplies_nested_repeats_and_block_arguments():
    """Repeat counts multiply through nesting, also through a block whose
    parameter is the count; a total just under the limit still expands."""
    src = ("block b(q, n) { repeat n { rot q x 90 deg ; wait 1 ns on q } }\n"
           "repeat 100 { repeat 100 { do b(A, 50) } }\n")        # 2 * 50 * 100 * 100 = 10^6
    run = expand(parse_text(src, "n.dotseq"), max_steps=1_000_000).runs[0]
    assert len(run.steps) == 1_000_000
    with pytest.raises(SequenceError) as info:
        expand(parse_text(src.replace("100 { do", "101 { do"), "n.dotseq"), max_steps=1_000_000)
    p = info.value.first
    assert p.span.line == 2 and f"at least {1_010_000:,} steps" in p.message


def test_estimate_saturates_and_counts_sweeps():
    deep = "".join(f"repeat 1000000 {{ " for _ in range(40)) + "wait 1 ns" + " }" * 40
    with pytest.raises(SequenceError) as info:
        expand(parse_text(deep + "\n", "deep.dotseq"))
    assert "more than 2^63 steps" in info.value.first.message
    # every sweep point as long as the first: refused after one run, at the sweep
    src = "sweep t from 1 ns to 2 ns in 1000\nrepeat 20000 { wait t on A }\n"
    with pytest.raises(SequenceError) as info:
        expand(parse_text(src, "s.dotseq"))
    p = info.value.first
    assert p.span.line == 1 and "1,000 runs of 20,000 steps make 20,000,000" in p.message
    # a count that depends on the sweep: runs differ, each is expanded and counted
    ok = "sweep n over [1, 2, 3]\nrepeat n { wait 1 ns on A }\n"
    assert [len(r.steps) for r in expand(parse_text(ok, "ok.dotseq")).runs] == [1, 2, 3]
    # ... also through a let computed from the swept value: not refused from the first run
    ok = ("sweep n over [7, 1, 1]\nlet m = 2 * n\nblock b(q, k) { repeat k { wait 1 ns on q } }\n"
          "do b(A, m)\n")
    from compiler.limits import BYTES_PER_STEP, Budget
    budget = Budget(30 * BYTES_PER_STEP)               # 30 steps in all: 14 + 2 + 2 fit, 3 x 14 not
    assert [len(r.steps) for r in expand(parse_text(ok, "ok.dotseq"), budget=budget).runs] == [14, 2, 2]


@pytest.mark.parametrize("junk", ["x ", "rot ", "1.5 ns ", '"" ', "x;", "@ ", "} ", "a=(b)*[c] ", "{ ", "{x}", "{{;}"])
def test_a_broken_statement_is_skipped_without_a_token_per_word(junk, monkeypatch):
    """Issue 12, item 4: after a syntax error the rest of the statement is
    passed over as text, not as tokens (a 48 MB line took 95 s)."""
    import compiler.parse.lexer as lexer
    made = [0]

    class Counted(lexer.Token):
        __slots__ = ()

        def __init__(self, *args):
            made[0] += 1
            super().__init__(*args)

    monkeypatch.setattr(lexer, "Token", Counted)
    with pytest.raises(SequenceSyntaxError):
        parse_text("?" + junk * (100_000 // len(junk)) + "\nwait 1 ns\n", "junk.dotseq")
    assert made[0] < 100, made[0]


# issue 14, item 3: an explicit request is honoured or refused, never replaced.
# (source on the bundled default device unless a device line is given; error
# class, line, column, message fragment, hint fragment)
DEMO_PAIR = (Path(__file__).parent.parent / "sequences" / "devices" / "demo_pair.yaml").resolve()
REQUEST_CASES = [
    pytest.param("sqrtswap A B amplitude=2 V", "ScheduleError", 1, 1,
                 "outside the range of channel 'B_AB'", "nearest realisable: amplitude=686.4 mV",
                 id="exchange-amplitude-beyond-channel"),
    pytest.param("sqrtswap A B amplitude=600 mV", "ScheduleError", 1, 1,
                 "not realisable on the sample grid", "nearest realisable: amplitude=473.5 mV",
                 id="exchange-amplitude-off-grid"),
    pytest.param("sqrtswap A B duration=0.5 ns", "ScheduleError", 1, 1,
                 "shorter than half a sample", "duration=1 ns (1 sample)",
                 id="exchange-duration-below-a-sample"),
    pytest.param("sqrtswap A B duration=1.4 ns", "ScheduleError", 1, 1,
                 "differs by 29%", "1 ns (1 sample) or 2 ns (2 samples)",
                 id="exchange-duration-off-grid"),
    pytest.param(f'device "{DEMO_PAIR}"\nsqrtswap A B duration=1 ns', "ScheduleError", 2, 1,
                 "stays below the sqrtswap target", "shortest realisable at the top of the range "
                 "is duration=5 ns", id="exchange-duration-beyond-calibration"),
    pytest.param("rot A x 90 deg detuning=400 MHz", "ScheduleError", 1, 1,
                 "needs IF 341.2 MHz on line 'mw', outside its band",
                 "detunings from -241.2 MHz to 358.8 MHz fit the band", id="detuning-beyond-if-band"),
    pytest.param(f'device "{DEMO_PAIR}"\ncz A B duration=10 ns', "ScheduleError", 2, 1,
                 "a cz pulse of 10 samples stays below", "shortest realisable at the top of the "
                 "range is duration=38 ns (38 samples)", id="cz-duration-beyond-calibration"),
    pytest.param("cz A B duration=1 ns", "ScheduleError", 1, 1,
                 "needs at least 2 samples", "longer duration=", id="cz-one-sample"),
    pytest.param("rot A x 90 deg duration=0.3 ns", "ScheduleError", 1, 1,
                 "shorter than half a sample", "duration=1 ns", id="burst-duration-below-a-sample"),
    pytest.param("rot A x 1 deg amplitude=200 mV", "ScheduleError", 1, 1,
                 "amplitude would have to drop to 138.9 mV",
                 "amplitude=138.9 mV (2 samples) or amplitude=277.8 mV (1 sample)",
                 id="burst-amplitude-off-grid"),
    pytest.param("rot A x 90 deg amplitude=2 V", "ScheduleError", 1, 1,
                 "burst amplitude 2 V is beyond the ±500 mV range", "amplitude=500 mV",
                 id="burst-amplitude-beyond-line"),
    pytest.param(f'device "{DEMO_PAIR}"\nrot A x 0.001 deg', "ScheduleError", 2, 1,
                 "every code is zero, nothing would be played", "larger amplitude",
                 id="burst-lost-to-quantisation"),
]


@pytest.mark.parametrize("src, cls, line, col, message, hint", REQUEST_CASES)
def test_explicit_requests_are_refused_not_replaced(write, src, cls, line, col, message, hint):
    from compiler import load
    p = write("req.dotseq", src + "\n")
    with pytest.raises(DotseqError) as info:
        load(p)
    err = info.value
    assert type(err).__name__ == cls, err.render()
    q = err.first
    assert (q.span.line, q.span.col) == (line, col), err.render()
    assert message in q.message, err.render()
    assert hint in q.hint, err.render()


@pytest.mark.parametrize("src", ["sqrtswap A B amplitude=473.5 mV", "sqrtswap A B amplitude=686.4 mV",
                                 "rot A x 1 deg amplitude=138.9 mV", "sqrtswap A B duration=1 ns"])
def test_the_suggested_values_are_realisable(write, src):
    from compiler import load
    load(write("ok.dotseq", src + "\n"))


def test_a_burst_losing_area_to_quantisation_is_a_warning(write):
    # 0.05 deg at 500 ns: 74 µV peak against 61 µV per code of a 14-bit ±500 mV line
    from compiler import check_file
    s = check_file(write("q.dotseq", f'device "{DEMO_PAIR}"\nrot A x 0.05 deg\n'))
    w = [w for w in s.warnings if "DAC codes of this burst lose" in w]
    assert len(w) == 1 and "q.dotseq:2:1" in w[0], s.warnings
    # a burst well above the code step is silent
    s = check_file(write("q2.dotseq", f'device "{DEMO_PAIR}"\nrot A x 2 deg\n'))
    assert not any("DAC codes" in w for w in s.warnings)


def test_errors_of_expansion_checking_and_scheduling_come_in_one_round(write):
    # issue 14, item 6: these used to take four rounds of fixing
    from compiler import load
    src = (f'device "{DEMO_PAIR}"\nlet a = 3 V + 2 s\nrot Q x 90 deg\n'
           "sqrtswap A B amplitude=600 mV\nwait -3 ns\nrot A x 90 deg duration=0.2 ns\n")
    with pytest.raises(DotseqError) as info:
        load(write("m.dotseq", src))
    err = info.value
    got = [(p.span.line, p.span.col) for p in err.problems]
    assert sorted(got) == [(2, 9), (3, 5), (4, 1), (5, 6), (6, 1)], err.render()
    assert type(err) is SequenceError       # the first stage that found a problem
    assert [p.message for p in err.problems].count("cannot add a time to a voltage in 'a'") == 1


def test_collected_errors_are_capped_like_the_parser(write):
    from compiler import load
    src = "let a = 3 V + 2 s\n" + "".join(f"rot Q{i} x 90 deg\n" for i in range(14))
    with pytest.raises(DotseqError) as info:
        load(write("m.dotseq", src))
    err = info.value
    assert len(err.problems) == 10 and err.more == 5
    assert "... and 5 more" in err.render()


def test_a_missing_device_file_points_at_the_device_line(write):
    from compiler import load
    from compiler.errors import DeviceError
    with pytest.raises(DeviceError) as info:
        load(write("d.dotseq", 'wait 1 ns\ndevice "nothere.yaml"\nrot A x 90 deg\n'))
    p = info.value.first
    assert (p.span.file.endswith("d.dotseq"), p.span.line, p.span.col) == (True, 2, 1)
    assert "cannot read device file" in p.message and "nothere.yaml" in p.message
