"""Split sequence text into tokens, each with its line and column.

Tokens are produced one at a time (:func:`iter_tokens`) so the parser never
holds a whole file's tokens: a file of a million lines costs the parser a
few tokens of lookahead, not millions of objects.  A token keeps its
position as plain numbers; its :class:`~compiler.errors.Span` is built only
when asked for (a tree node or an error message needs it).  Token texts are
shared between equal tokens, so a long file repeating ``ns`` or ``deg``
keeps one copy of each.
"""

from __future__ import annotations

import re
from typing import Iterator

from ..errors import Problem, Span
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
      | (?P<OP>\*\*|[-+*/^(),;{}=\[\]])
      | (?P<bad>.)
      | (?P<end>\Z)
    )
""", re.VERBOSE)

BAD_CHARACTER_HINT = ("sequence files use letters, digits, operators + - * / ^ ( ) , ; { } = [ ], "
                      "double-quoted strings and # comments")


def iter_tokens(text: str, file: str, problems: list[Problem],
                lines: list[str] | None = None) -> Iterator[Token]:
    """Yield the tokens of ``text``, ending with NEWLINE and EOF; bad
    characters and open strings are appended to ``problems`` as met.
    ``lines`` is ``text.split("\\n")`` when the caller has it already."""
    if lines is None:
        lines = text.split("\n")
    shared: dict[str, str] = {}
    line, line_start = 1, 0
    spaced = True
    end = 0
    for m in _TOKEN_RE.finditer(text):
        kind = m.lastgroup
        pos = m.start(kind)
        end = m.end()
        if pos > m.start():
            spaced = True
        if kind == "NAME" or kind == "NUMBER" or kind == "OP" or kind == "STRING":
            tok = m.group(kind)
            if kind == "OP" and tok == "**":
                tok = "^"
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
                problems.append(Problem(f"unexpected character {m.group(kind)!r}",
                                        Span(file, line, col, line, col + 1),
                                        BAD_CHARACTER_HINT, lines[line - 1]))
            else:
                problems.append(Problem("string is not closed",
                                        Span(file, line, col, line, col + end - pos),
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
