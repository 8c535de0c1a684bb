"""Split sequence text into tokens, each with its line and column."""

from __future__ import annotations

import re
from dataclasses import dataclass

from ..errors import Problem, Span

MAX_FILE_CHARS = 50_000_000  # larger files are refused before lexing


@dataclass(frozen=True)
class Token:
    kind: str      # NAME NUMBER STRING OP NEWLINE EOF
    text: str
    span: Span
    spaced: bool   # whitespace before it on the same line

    def __repr__(self) -> str:  # pragma: no cover - debugging aid
        return f"{self.kind}({self.text!r}@{self.span.line}:{self.span.col})"


_TOKEN_RE = re.compile(r"""
    (?P<ws>[ \t\r\f\v]+)
  | (?P<comment>\#[^\n]*)
  | (?P<newline>\n)
  | (?P<number>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)
  | (?P<name>[A-Za-z_µμ][A-Za-z0-9_µμ]*)
  | (?P<string>"[^"\n]*")
  | (?P<unterminated>"[^"\n]*)
  | (?P<op>\*\*|[-+*/^(),;{}=\[\]])
""", re.VERBOSE)


def tokenize(text: str, file: str) -> tuple[list[Token], list[Problem]]:
    """Tokens of ``text`` and the problems met (bad characters, open strings)."""
    tokens: list[Token] = []
    problems: list[Problem] = []
    lines = text.split("\n")
    line, line_start, pos, n = 1, 0, 0, len(text)
    spaced = True
    while pos < n:
        m = _TOKEN_RE.match(text, pos)
        col = pos - line_start + 1
        if m is None:
            ch = text[pos]
            problems.append(Problem(
                f"unexpected character {ch!r}", Span(file, line, col, line, col + 1),
                "sequence files use letters, digits, operators + - * / ^ ( ) , ; { } = [ ], "
                "double-quoted strings and # comments", lines[line - 1]))
            pos += 1
            continue
        kind = m.lastgroup
        tok = m.group()
        end = m.end()
        if kind == "ws":
            spaced = True
        elif kind == "comment":
            pass
        elif kind == "newline":
            tokens.append(Token("NEWLINE", "\n", Span(file, line, col, line, col + 1), spaced))
            line += 1
            line_start = end
            spaced = True
        elif kind == "unterminated":
            problems.append(Problem("string is not closed", Span(file, line, col, line, col + len(tok)),
                                    'close it with a double quote on the same line: "..."',
                                    lines[line - 1]))
        else:
            k = {"number": "NUMBER", "name": "NAME", "string": "STRING", "op": "OP"}[kind]
            if tok == "**":
                tok = "^"
            tokens.append(Token(k, tok, Span(file, line, col, line, col + len(m.group())), spaced))
            spaced = False
        pos = end
    col = pos - line_start + 1
    tokens.append(Token("NEWLINE", "\n", Span(file, line, col, line, col), True))
    tokens.append(Token("EOF", "", Span(file, line, col, line, col), True))
    return tokens, problems
