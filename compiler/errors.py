"""Every error dotseq raises on bad input.

One root class, :class:`DotseqError`, and one subclass per pipeline stage.
Each error carries a list of :class:`Problem` records; a problem knows the
file, line and column it points at, the offending text, and a hint.  The
command line prints them with the source line and a caret under the text,
and exits with code 2.
"""

from __future__ import annotations

import difflib
import re
from collections import OrderedDict
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable, Sequence

MAX_SHOWN = 10  # problems printed in full before "and N more"
MAX_LINE_SHOWN = 120  # characters of a source line printed around the caret
MAX_TEXT_SHOWN = 200  # characters of the offending text in JSON
MAX_REREAD_BYTES = 50_000_000  # a file read again only to show one of its lines


@dataclass(frozen=True, slots=True)
class Span:
    """A stretch of source text: 1-based line and column, end exclusive."""

    file: str
    line: int
    col: int
    end_line: int
    end_col: int

    def __str__(self) -> str:
        return f"{self.file}:{self.line}:{self.col}"

    @staticmethod
    def join(a: "Span", b: "Span") -> "Span":
        return Span(a.file, a.line, a.col, b.end_line, b.end_col)


NO_SPAN = Span("<none>", 0, 0, 0, 0)


MAX_DIGITS_SHOWN = 30  # longer runs of digits echoed in a message are shortened
_LONG_DIGITS = re.compile(r"\d{%d,}" % (MAX_DIGITS_SHOWN + 1))


def shorten_numbers(text: str) -> str:
    """Runs of more than MAX_DIGITS_SHOWN digits (a 300-digit number echoed
    from the input) as their first and last digits and the count:
    '123456789012...456789 (300 digits)'."""
    if len(text) <= MAX_DIGITS_SHOWN:
        return text
    return _LONG_DIGITS.sub(lambda m: f"{m[0][:12]}...{m[0][-6:]} ({len(m[0])} digits)", text)


@dataclass(frozen=True)
class Problem:
    """One thing wrong with the input.  Long numbers echoed in the message
    or hint are shortened (:func:`shorten_numbers`); the source line is
    shown as a window around the caret."""

    message: str
    span: Span | None = None
    hint: str = ""
    source_line: str = ""  # the text of span.line, for the caret display
    context: tuple[str, ...] = ()  # e.g. "in block 'echo' called at f:3:1"

    def __post_init__(self):
        object.__setattr__(self, "message", shorten_numbers(self.message))
        object.__setattr__(self, "hint", shorten_numbers(self.hint))

    def to_dict(self) -> dict:
        d = {"message": self.message, "hint": self.hint}
        if self.span is not None:
            d.update(file=self.span.file, line=self.span.line, column=self.span.col,
                     end_line=self.span.end_line, end_column=self.span.end_col,
                     text=self.offending_text())
        if self.context:
            d["context"] = list(self.context)
        return d

    def offending_text(self) -> str:
        if self.span is None or not self.source_line:
            return ""
        start = self.span.col - 1
        end = self.span.end_col - 1 if self.span.end_line == self.span.line else len(self.source_line)
        end = max(end, start + 1)
        if end - start > MAX_TEXT_SHOWN:
            return self.source_line[start:start + MAX_TEXT_SHOWN] + "..."
        return self.source_line[start:end]

    def render(self, level: str = "error") -> str:
        where = f"{self.span}: " if self.span is not None and self.span.line > 0 else (
            f"{self.span.file}: " if self.span is not None else "")
        out = [f"{where}{level}: {self.message}"]
        if self.span is not None and self.source_line:
            text = self.source_line.rstrip("\n").expandtabs(1)
            start = max(self.span.col - 1, 0)
            if self.span.end_line == self.span.line:
                width = max(self.span.end_col - self.span.col, 1)
            else:
                width = max(len(text) - start, 1)
            if len(text) > MAX_LINE_SHOWN:
                # a long line: show a window around the caret, marked with '...'
                lo = max(0, min(start - MAX_LINE_SHOWN // 3, len(text) - MAX_LINE_SHOWN))
                hi = lo + MAX_LINE_SHOWN
                head = "..." if lo else ""
                text = head + text[lo:hi] + ("..." if hi < len(text) else "")
                width = max(1, min(width, hi - start))
                start = start - lo + len(head)
            out.append(f"    {text}")
            out.append("    " + " " * start + "^" * width)
        for c in self.context:
            out.append(f"    {c}")
        if self.hint:
            out.append(f"  hint: {self.hint}")
        return "\n".join(out)


class DotseqError(Exception):
    """Root of every input error dotseq reports; holds one or more problems."""

    stage = "input"

    def __init__(self, problems: Problem | Sequence[Problem] | str, span: Span | None = None,
                 hint: str = "", source_line: str = "", *, more: int = 0, more_note: str = ""):
        if isinstance(problems, str):
            problems = [Problem(problems, span, hint, source_line)]
        elif isinstance(problems, Problem):
            problems = [problems]
        self.problems: list[Problem] = list(problems)
        # problems found but not kept (see ProblemCap), and how they were counted
        self.more, self.more_note = more, more_note
        super().__init__(self.render())

    @property
    def first(self) -> Problem:
        return self.problems[0]

    def render(self) -> str:
        shown = [p.render() for p in self.problems[:MAX_SHOWN]]
        rest = max(len(self.problems) - MAX_SHOWN, 0) + self.more
        if rest > 0:
            shown.append(f"... and {rest:,} more {self.stage} error{'s' if rest > 1 else ''}"
                         + (f" ({self.more_note})" if self.more and self.more_note else ""))
        return "\n".join(shown)

    def to_dict(self) -> dict:
        d = {"ok": False, "stage": self.stage, "errors": [p.to_dict() for p in self.problems]}
        if self.more:
            d["more_errors"] = self.more
        return d


class SequenceSyntaxError(DotseqError):
    """The sequence text does not follow the grammar."""
    stage = "syntax"


class SequenceError(DotseqError):
    """The sequence is well formed but means something impossible
    (unknown name, wrong unit, bad sweep, include cycle, ...)."""
    stage = "sequence"


class DeviceError(DotseqError):
    """The device description is malformed or physically inconsistent."""
    stage = "device"


class CheckError(DotseqError):
    """The program asks for something the device cannot do."""
    stage = "check"


class ScheduleError(DotseqError):
    """A step cannot be placed in time or played within the channel limits."""
    stage = "schedule"


class SynthesisError(DotseqError):
    """A waveform sample falls outside what a channel can play."""
    stage = "synthesis"


class SimulationError(DotseqError):
    """A simulation that cannot be run as asked (it would not fit in memory)."""
    stage = "simulate"


class UsageError(DotseqError):
    """Bad command-line arguments."""
    stage = "usage"


def suggest(word: str, candidates: Iterable[str]) -> str:
    """A did-you-mean hint, or '' when nothing is close."""
    cands = sorted(set(candidates))
    close = difflib.get_close_matches(word, cands, n=1, cutoff=0.6)
    if close:
        return f"did you mean '{close[0]}'?"
    if cands and len(cands) <= 12:
        return "known: " + ", ".join(cands)
    return ""


def did_you_mean(word: str, candidates: Iterable[str]) -> str:
    """'did you mean X?' when a candidate is close, else ''."""
    close = difflib.get_close_matches(word, sorted(set(candidates)), n=1, cutoff=0.6)
    return f"did you mean '{close[0]}'? " if close else ""


_SOURCES: "OrderedDict[str, list[str]]" = OrderedDict()
_SOURCES_KEPT = 64


def remember_source(file: str, text: str, echo: bool = True) -> list[str]:
    """Keep the text of a parsed file so later stages can show its lines in
    error messages (the last few files only); returns its lines.  With
    ``echo`` false every line is kept as '' (a file that must not be shown)."""
    lines = text.split("\n") if echo else [""] * (text.count("\n") + 1)
    _SOURCES[str(file)] = lines
    _SOURCES.move_to_end(str(file))
    while len(_SOURCES) > _SOURCES_KEPT:
        _SOURCES.popitem(last=False)
    return lines


def read_source_line(file: str | Path, line: int) -> str:
    """The text of one line of a parsed (or readable) file, '' when unavailable."""
    lines = _SOURCES.get(str(file))
    if lines is None:
        # no longer kept: read it again only if it is a regular sequence file of
        # reasonable size (never a pipe, a device or a system file)
        from .source import Oversize, Unreadable, read_capped
        if not str(file).endswith(".dotseq"):
            return ""
        try:
            lines = read_capped(file, MAX_REREAD_BYTES).decode("utf-8").split("\n")
        except (Unreadable, Oversize, UnicodeDecodeError):
            return ""
    return lines[line - 1] if 0 < line <= len(lines) else ""


MAX_KEPT = MAX_SHOWN  # problems a collector keeps; later ones are only counted


class ProblemCap:
    """Collects problems up to ``keep`` and counts the rest without storing
    them, so a file of junk costs memory for ``keep`` problems, not one per
    junk token.  Once full, only the first problem of each line is counted
    (:attr:`NOTE`): the lexer and parser skip the rest of such a line."""

    NOTE = f"after the first {MAX_KEPT}, only the first error of each line is counted"

    def __init__(self, keep: int = MAX_KEPT):
        self.keep = keep
        self.kept: list[tuple[int, Problem]] = []
        self.more = 0
        self._last: tuple[str, int] | None = None   # the line last counted once full
        self.dropped = False     # the last problem added was counted, not kept

    @property
    def full(self) -> bool:
        return len(self.kept) >= self.keep

    def add(self, problem: Problem, order: int = 0) -> None:
        """Keep ``problem`` (reported in ``order``, then as found) or count it."""
        self.dropped = self.full
        if not self.dropped:
            self.kept.append((order, problem))
            return
        where = (problem.span.file, problem.span.line) if problem.span is not None else None
        if where is None or where != self._last:
            self.more += 1
            self._last = where

    def extend_from(self, err: "DotseqError", order: int = 0) -> None:
        for p in err.problems:
            self.add(p, order)
        self.more += err.more

    @property
    def problems(self) -> list[Problem]:
        return [p for _, p in sorted(self.kept, key=lambda k: k[0])]

    def __bool__(self) -> bool:
        return bool(self.kept) or self.more > 0

    def raise_if_any(self, cls: type["DotseqError"]) -> None:
        if self:
            raise cls(self.problems, more=self.more, more_note=self.NOTE if self.more else "")


@dataclass
class ProblemList:
    """Collects problems of one stage so it can report all of them at once."""

    problems: list[Problem] = field(default_factory=list)

    def add(self, message: str, span: Span | None = None, hint: str = "",
            source_line: str = "", context: tuple[str, ...] = ()) -> None:
        self.problems.append(Problem(message, span, hint, source_line, context))

    def raise_if_any(self, cls: type[DotseqError]) -> None:
        if self.problems:
            raise cls(self.problems)

    def __bool__(self) -> bool:
        return bool(self.problems)
