"""Split sequence text into tokens, each with its line and column.

Tokens are produced one at a time (:func:`iter_tokens`) so the parser never
holds a whole file's tokens: a file of a million lines costs the parser a
few tokens of lookahead, not millions of objects.  A token keeps its
position as plain numbers; its :class:`~compiler.errors.Span` is built only
when asked for (a tree node or an error message needs it).  Token texts are
shared between equal tokens, so a long file repeating ``ns`` or ``deg``
keeps one copy of each.

A line of junk costs bounded work: the parser skips the rest of a broken
statement through :class:`Skip` at C speed (no token per junk word), a run of
``;`` is one token, and once the problem collector is full a bad character
is counted and the rest of its line skipped.
"""

from __future__ import annotations

import re
from typing import Iterator

from ..errors import Problem, ProblemCap, Span
from ..limits import MAX_SOURCE_CHARS

MAX_FILE_CHARS = MAX_SOURCE_CHARS  # larger texts are refused before lexing


class Token:
    """One token: kind (NAME NUMBER STRING OP NEWLINE EOF), text and position
    (1-based line and column, end column exclusive; tokens never span lines)."""

    __slots__ = ("kind", "text", "file", "line", "col", "end_col", "spaced")

    def __init__(self, kind: str, text: str, file: str, line: int, col: int, end_col: int,
                 spaced: bool):
        self.kind = kind
        self.text = text
        self.file = file
        self.line = line
        self.col = col
        self.end_col = end_col
        self.spaced = spaced      # whitespace before it on the same line

    @property
    def span(self) -> Span:
        return Span(self.file, self.line, self.col, self.line, self.end_col)

    def __repr__(self) -> str:  # pragma: no cover - debugging aid
        return f"{self.kind}({self.text!r}@{self.line}:{self.col})"


# One match per token: the blanks before it, then the token itself.
_TOKEN_RE = re.compile(r"""
    [ \t\r\f\v]*
    (?:
        (?P<comment>\#[^\n]*)
      | (?P<newline>\n)
      | (?P<NUMBER>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)
      | (?P<NAME>[A-Za-z_µμ][A-Za-z0-9_µμ]*)
      | (?P<STRING>"[^"\n]*")
      | (?P<unterminated>"[^"\n]*)
      | (?P<OP>\*\*|;(?:[ \t\r\f\v]*;)*+|[-+*/^(),{}=\[\]])
      | (?P<bad>.)
      | (?P<end>\Z)
    )
""", re.VERBOSE)

BAD_CHARACTER_HINT = ("sequence files use letters, digits, operators + - * / ^ ( ) , ; { } = [ ], "
                      "double-quoted strings and # comments")


# Text that lexes only into names, numbers, blanks, closed strings and
# operators other than ; { } -- what the parser may skip inside a broken
# statement without making tokens (it stops at ; { } newline, open strings,
# comments, '.' and bad characters, which the lexer then reads as usual).
# _BRACED_RE also takes ; { } (strings excluded: they may hold braces).
_SKIPPABLE_RE = re.compile(r"""(?:[ \t\r\f\v\-+*/^(),=\[\]]++|[A-Za-z_µμ][A-Za-z0-9_µμ]*+
                               |\d++(?:\.\d*+)?(?:[eE][+-]?\d++)?|"[^"\n]*+")*+""", re.VERBOSE)


_BRACED_RE = re.compile(r"""(?:[{};\ \t\r\f\v\-+*/^(),=\[\]]++|[A-Za-z_µμ][A-Za-z0-9_µμ]*+
                             |\d++(?:\.\d*+)?(?:[eE][+-]?\d++)?)*+""", re.VERBOSE)


class Skip:
    """Lets the parser move the lexer: after a token is handed out, ``end``
    is the offset just past it; setting ``goto`` (an offset on the same
    line) makes the next token start there."""

    __slots__ = ("text", "end", "goto")

    def __init__(self, text: str):
        self.text = text
        self.end = 0
        self.goto: int | None = None

    def skippable_end(self) -> int:
        """Offset where the skippable text after the last token ends."""
        return _SKIPPABLE_RE.match(self.text, self.end).end()

    def past_braces(self, depth: int) -> tuple[int, int]:
        """Skip skippable text, braces and ';' after the last token, keeping
        count of the depth: (offset to go on from, depth there).  Stops
        before a '}' or ';' at depth 0, and where skippable text ends."""
        stop = _BRACED_RE.match(self.text, self.end).end()
        seg = self.text[self.end:stop]
        if "}" not in seg:
            return stop, depth + seg.count("{")
        for i, ch in enumerate(seg):
            if ch == "{":
                depth += 1
            elif ch == "}" or ch == ";":
                if depth == 0:
                    return self.end + i, 0
                if ch == "}":
                    depth -= 1
        return stop, depth

    def line_end(self) -> int:
        """Offset of the newline ending the line of the last token (or the end)."""
        nl = self.text.find("\n", self.end)
        return len(self.text) if nl < 0 else nl


def iter_tokens(text: str, file: str, problems: "list[Problem] | ProblemCap",
                lines: list[str] | None = None, skip: Skip | None = None) -> Iterator[Token]:
    """Yield the tokens of ``text``, ending with NEWLINE and EOF; bad
    characters and open strings are added to ``problems`` as met (a list,
    or a :class:`ProblemCap`: once it is full, the rest of a line with a bad
    character is skipped).  ``lines`` is ``text.split("\\n")`` when the
    caller has it already; ``skip`` lets the parser skip text."""
    if lines is None:
        lines = text.split("\n")
    add = problems.add if isinstance(problems, ProblemCap) else problems.append
    cap = problems if isinstance(problems, ProblemCap) else None
    shared: dict[str, str] = {}
    line, line_start = 1, 0
    spaced = True
    end = 0
    match = _TOKEN_RE.match
    while True:
        if skip is not None and skip.goto is not None:
            # the parser skipped text (never past a newline): go on from there
            if skip.goto > end:
                spaced = True
                end = skip.goto
            skip.goto = None
        m = match(text, end)
        kind = m.lastgroup
        pos = m.start(kind)
        end = m.end()
        if skip is not None:
            skip.end = end
        if pos > m.start():
            spaced = True
        if kind == "NAME" or kind == "NUMBER" or kind == "OP" or kind == "STRING":
            tok = m.group(kind)
            if kind == "OP":
                if tok == "**":
                    tok = "^"
                elif tok[0] == ";":
                    tok = ";"          # a run of ';' is one separator
            tok = shared.setdefault(tok, tok)
            col = pos - line_start + 1
            yield Token(kind, tok, file, line, col, col + end - pos, spaced)
            spaced = False
        elif kind == "newline":
            col = pos - line_start + 1
            yield Token("NEWLINE", "\n", file, line, col, col + 1, spaced)
            line += 1
            line_start = end
            spaced = True
        elif kind == "comment":
            pass
        elif kind == "end":
            break
        else:
            col = pos - line_start + 1
            if kind == "bad":
                add(Problem(f"unexpected character {m.group(kind)!r}",
                            Span(file, line, col, line, col + 1), BAD_CHARACTER_HINT,
                            lines[line - 1]))
                if cap is not None and cap.dropped:
                    # counted, not kept: the rest of this line is not read
                    nl = text.find("\n", end)
                    end = len(text) if nl < 0 else nl
                    spaced = True
            else:
                add(Problem("string is not closed", Span(file, line, col, line, col + end - pos),
                            'close it with a double quote on the same line: "..."',
                            lines[line - 1]))
    col = end - line_start + 1
    yield Token("NEWLINE", "\n", file, line, col, col, True)
    yield Token("EOF", "", file, line, col, col, True)


def tokenize(text: str, file: str) -> tuple[list[Token], list[Problem]]:
    """All tokens of ``text`` and the problems met (bad characters, open
    strings).  The parser streams with :func:`iter_tokens` instead."""
    problems: list[Problem] = []
    tokens = list(iter_tokens(text, file, problems))
    return tokens, problems
