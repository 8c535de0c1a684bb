"""Recursive-descent parser: tokens -> immutable program tree.

The grammar is documented in docs/language.md.  The parser collects every
problem it can (re-synchronising at the end of each statement) and raises one
:class:`~compiler.errors.SequenceSyntaxError` at the end.  ``include``
statements are read and parsed here, so the tree is complete; include cycles
are reported with the chain of files.
"""

from __future__ import annotations

from pathlib import Path

from ..errors import (Problem, ProblemCap, SequenceError, SequenceSyntaxError, Span,
                      DotseqError, did_you_mean, remember_source, suggest)
from ..limits import Budget
from ..units import UNIT_WORDS
from . import tree as T
from ..source import Oversize, Unreadable, inside, read_capped
from .lexer import MAX_FILE_CHARS, Skip, Token, iter_tokens

KEYWORDS = ("device", "include", "let", "sweep", "prepare", "rot", "sqrtswap",
            "sqrtswap_inv", "swap", "cz", "cphase", "wait", "read", "trigger", "move", "together",
            "repeat", "block", "do")
FUNCTIONS = {"sin": 1, "cos": 1, "tan": 1, "sqrt": 1, "exp": 1, "log": 1, "abs": 1,
             "min": 2, "max": 2, "round": 1}
CONSTANTS = ("pi",)
ROT_OPTIONS = ("shape", "duration", "amplitude", "detuning")
EXCHANGE_OPTIONS = ("duration", "amplitude")
MOVE_OPTIONS = ("ramp",)
SHAPES = ("square", "gauss", "flattop")
# Spellings that are no keyword of the language, with the keyword they mean:
# refused with a hint rather than read as a name.
RENAMED_KEYWORDS = {"sqrtswapinv": "sqrtswap_inv"}
INSIDE_TOGETHER = ("rot", "sqrtswap", "sqrtswap_inv", "swap", "cz", "cphase", "wait", "read",
                   "do")
CONNECTORS = ("on", "to", "in", "from", "over")
MAX_INCLUDE_DEPTH = 32
MAX_NESTING = 64
MAX_OPERATORS = 256   # per expression: keeps the tree shallow enough to evaluate

SEQUENCE_SUFFIX = ".dotseq"


class _Bail(Exception):
    """Abandon the current statement; the problem is already recorded."""


class Parser:
    def __init__(self, text: str, file: str, chain: tuple[str, ...] = (),
                 lines: list[str] | None = None, chars: "_Chars | None" = None):
        self.file = file
        self.chars = chars if chars is not None else _Chars(None)
        self.lines = text.split("\n") if lines is None else lines
        # tokens are streamed: the current one, the one before (for spans)
        # and at most one looked ahead
        # problems of the lexer (reported first) and the parser: the first few
        # are kept, the rest counted
        self.problems = ProblemCap()
        self._skip = Skip(text)
        self._tokens = iter_tokens(text, file, self.problems, self.lines, self._skip)
        self._ahead: Token | None = None
        self.tok: Token = next(self._tokens)
        self.prev: Token = self.tok
        self.chain = chain + (str(Path(file).resolve()) if not file.startswith("<") else file,)
        self.depth = 0          # statement bodies: repeat, together, block
        self.expr_depth = 0     # parentheses and signs within an expression
        self.expr_level = 0     # nesting of expr() calls within one expression
        self.expr_ops = 0       # operators read in the current expression

    # ------------------------------------------------------------ helpers
    def peek(self) -> Token:
        """The token after the current one."""
        if self.tok.kind == "EOF":
            return self.tok
        if self._ahead is None:
            self._ahead = next(self._tokens)
        return self._ahead

    def advance(self) -> Token:
        t = self.tok
        if t.kind != "EOF":
            self.prev = t
            if self._ahead is not None:
                self.tok, self._ahead = self._ahead, None
            else:
                self.tok = next(self._tokens)
        return t

    def line_text(self, span: Span) -> str:
        if span.file == self.file and 0 < span.line <= len(self.lines):
            return self.lines[span.line - 1]
        return ""

    def error(self, message: str, span: Span, hint: str = "") -> _Bail:
        self.problems.add(Problem(message, span, hint, self.line_text(span)), order=1)
        return _Bail()

    def describe(self, t: Token) -> str:
        if t.kind == "NEWLINE":
            return "end of line"
        if t.kind == "EOF":
            return "end of file"
        return f"'{t.text}'"

    def at_op(self, text: str) -> bool:
        return self.tok.kind == "OP" and self.tok.text == text

    def expect_op(self, text: str, hint: str = "") -> Token:
        if not self.at_op(text):
            raise self.error(f"expected '{text}', found {self.describe(self.tok)}", self.tok.span, hint)
        return self.advance()

    def expect_name(self, what: str, hint: str = "") -> Token:
        if self.tok.kind != "NAME":
            raise self.error(f"expected {what}, found {self.describe(self.tok)}", self.tok.span, hint)
        return self.advance()

    def expect_word(self, word: str, hint: str = "") -> Token:
        if self.tok.kind != "NAME" or self.tok.text != word:
            raise self.error(f"expected '{word}', found {self.describe(self.tok)}", self.tok.span, hint)
        return self.advance()

    def at_end_of_statement(self) -> bool:
        t = self.tok
        return t.kind in ("NEWLINE", "EOF") or (t.kind == "OP" and t.text in (";", "}"))

    def span_from(self, start: Span | Token) -> Span:
        """From ``start`` (a span or a token) to the end of the last token read."""
        prev = self.prev
        return Span(start.file, start.line, start.col, prev.line, prev.end_col)

    @staticmethod
    def token_span(a: Token, b: Token) -> Span:
        """From the start of token ``a`` to the end of token ``b``."""
        return Span(a.file, a.line, a.col, b.line, b.end_col)

    def skip_line(self) -> None:
        """Skip the rest of the current line without reading its tokens."""
        while self._ahead is not None and self.tok.kind not in ("NEWLINE", "EOF"):
            self.advance()
        if self.tok.kind not in ("NEWLINE", "EOF"):
            self._skip.goto = self._skip.line_end()
            self.advance()

    def sync(self) -> None:
        """Skip to the end of the current statement (respecting braces).
        Names, numbers and operators between are passed over as text, not
        tokens; once the problems are only counted, the rest of the line
        is skipped (for a problem counted, not kept)."""
        if self.problems.dropped:
            self.skip_line()
            return
        depth = 0
        while self.tok.kind != "EOF":
            t = self.tok
            if t.kind == "OP" and t.text == "{":
                depth += 1
            elif t.kind == "OP" and t.text == "}":
                if depth == 0:
                    return
                depth -= 1
            elif depth == 0 and (t.kind == "NEWLINE" or (t.kind == "OP" and t.text == ";")):
                return
            if self._ahead is None and t.kind != "NEWLINE":
                if depth == 0:
                    self._skip.goto = self._skip.skippable_end()
                else:       # inside braces: ';' does not end the statement
                    self._skip.goto, depth = self._skip.past_braces(depth)
            self.advance()

    # ------------------------------------------------------------ statements
    def parse_file(self) -> T.SourceFile:
        body = self.parse_body(top=True)
        return T.SourceFile(self.file, tuple(body))

    def parse_body(self, top: bool) -> list[T.Stmt]:
        body: list[T.Stmt] = []
        while True:
            while self.tok.kind == "NEWLINE" or self.at_op(";"):
                self.advance()
            if self.tok.kind == "EOF":
                break
            if self.at_op("}"):
                if top:
                    self.error("'}' without a matching '{'", self.tok.span, "remove it")
                    if self.problems.dropped:
                        self.skip_line()
                    else:
                        self.advance()
                    continue
                break
            try:
                stmt = self.parse_statement(top)
                if stmt is not None:
                    body.append(stmt)
                if not self.at_end_of_statement():
                    t = self.tok
                    hint = "put one statement per line, or separate statements with ';'"
                    if t.kind == "NAME" and t.text not in KEYWORDS:
                        if t.text in UNIT_WORDS:
                            raise self.error(
                                f"unit '{t.text}' must follow a number or a closing parenthesis",
                                t.span, f"write e.g. 'x * 1 {t.text}' or '(x) {t.text}' for a plain "
                                "number x; a parameter that has a unit needs none")
                        close = did_you_mean(t.text, UNIT_WORDS) if t.text not in CONNECTORS else ""
                        if close:
                            raise self.error(f"unknown unit '{t.text}'", t.span, close.strip())
                    raise self.error(f"unexpected {self.describe(t)} after the statement", t.span, hint)
            except _Bail:
                self.sync()
        return body

    def parse_statement(self, top: bool) -> T.Stmt | None:
        t = self.tok
        if t.kind != "NAME":
            raise self.error(f"expected a statement, found {self.describe(t)}", t.span,
                             "statements start with a keyword: " + ", ".join(KEYWORDS))
        word = t.text
        if word in RENAMED_KEYWORDS:
            new = RENAMED_KEYWORDS[word]
            raise self.error(f"unknown statement '{word}': the inverse square root of SWAP is "
                             f"written '{new}'", t.span,
                             f"write '{new}' (it is not the square root of iSWAP)")
        if word not in KEYWORDS:
            hint = suggest(word, KEYWORDS)
            if not hint.startswith("did"):
                hint = "statements start with a keyword: " + ", ".join(KEYWORDS)
            raise self.error(f"unknown statement '{word}'", t.span, hint)
        if not top and word in ("device", "include", "let", "sweep", "block", "prepare"):
            raise self.error(f"'{word}' is only allowed at the top level of a file, "
                             "not inside a block, repeat or together", t.span,
                             "move it before the steps")
        self.advance()
        return getattr(self, f"st_{word}")(t)

    def st_device(self, start: Token) -> T.Stmt:
        s = self.tok
        if s.kind != "STRING":
            raise self.error("expected the device file path in double quotes", s.span,
                             'e.g. device "devices/demo_pair.yaml"')
        self.advance()
        return T.DeviceStmt(s.text[1:-1], self.span_from(start))

    def st_include(self, start: Token) -> T.Stmt:
        s = self.tok
        if s.kind != "STRING":
            raise self.error("expected the file to include, in double quotes", s.span,
                             'e.g. include "blocks/echo.dotseq"')
        self.advance()
        span = self.span_from(start)
        rel = s.text[1:-1]
        base = Path(self.file).parent if not self.file.startswith("<") else Path.cwd()
        target = (base / rel)
        try:
            resolved = str(target.resolve())
        except (RuntimeError, OSError):     # Python 3.11: RuntimeError on a link loop
            raise self.error(f"cannot read included file '{rel}': it is a loop of symbolic "
                             "links", s.span, f"tried {target}; point the link at a real "
                             "file") from None
        root = self.chars.root
        if root is not None and not inside(resolved, root):
            raise self.error(f"included file '{rel}' lies outside the sequence's folder {root}",
                             s.span, "--confine reads only files in the sequence's folder tree: "
                             "move the file there, or leave out --confine") from None
        if resolved in self.chain:
            chain = [Path(c).name for c in self.chain] + [Path(resolved).name]
            raise self.error("include cycle: " + " -> ".join(chain), s.span,
                             "remove one of these include statements")
        if len(self.chain) > MAX_INCLUDE_DEPTH:
            raise self.error(f"includes nested deeper than {MAX_INCLUDE_DEPTH} files", s.span)
        echo = rel.endswith(SEQUENCE_SUFFIX)
        try:
            sub = parse_path(target, chain=self.chain, _chars=self.chars, _echo=echo)
        except DotseqError as e:
            if not echo:    # it may be any file (a system file): say nothing of its text
                first = e.problems[0].span
                raise self.error(
                    f"included file '{rel}' does not read as a sequence file ({len(e.problems)} "
                    f"problem{'s' * (len(e.problems) != 1)}"
                    + (f", the first on line {first.line}" if first and first.line else "")
                    + f"); its text is not shown as its name does not end in {SEQUENCE_SUFFIX}",
                    s.span, f"check the path, or name the file *{SEQUENCE_SUFFIX} to see "
                    "the problems") from None
            self.problems.extend_from(e, order=1)
            raise _Bail() from None
        except _MissingInclude as e:
            raise self.error(f"cannot read included file '{rel}': {e.reason}", s.span,
                             f"tried {target}; paths are relative to the including file"
                             if e.reason == "no such file" else e.hint) from None
        except _TooLarge as e:
            raise self.error(f"cannot include '{rel}': {e.message}", s.span, e.hint) from None
        return T.Include(rel, str(target), sub.body, span)

    def st_let(self, start: Token) -> T.Stmt:
        n = self.expect_name("a parameter name after 'let'", "e.g. let tau = 100 ns")
        self.check_new_name(n)
        self.expect_op("=", f"e.g. let {n.text} = 100 ns")
        e = self.expr()
        return T.Let(n.text, e, self.span_from(start))

    def check_new_name(self, n: Token) -> None:
        if n.text in KEYWORDS or n.text in CONSTANTS or n.text in FUNCTIONS or n.text in UNIT_WORDS:
            kind = ("a keyword" if n.text in KEYWORDS else "a unit" if n.text in UNIT_WORDS
                    else "a built-in name")
            raise self.error(f"'{n.text}' is {kind} and cannot be used as a parameter name",
                             n.span, "choose another name")

    def st_sweep(self, start: Token) -> T.Stmt:
        n = self.expect_name("the swept parameter's name", "e.g. sweep tau from 0 ns to 400 ns in 21")
        self.check_new_name(n)
        how = self.expect_name("'from' or 'over'", "sweep tau from 0 ns to 400 ns in 21  |  "
                               "sweep amp over [10 mV, 20 mV, 40 mV]")
        if how.text == "from":
            a = self.expr()
            self.expect_word("to", "e.g. sweep tau from 0 ns to 400 ns in 21")
            b = self.expr()
            self.expect_word("in", "give the number of points: ... in 21")
            c = self.expr()
            return T.SweepRange(n.text, a, b, c, self.span_from(start))
        if how.text == "over":
            self.expect_op("[", "list the values in brackets: over [10 mV, 20 mV]")
            if self.at_op("]"):
                raise self.error("a sweep needs at least one value", self.tok.span,
                                 "e.g. over [10 mV, 20 mV]")
            values = self.expr_list("]")
            self.expect_op("]", "close the list with ']'")
            return T.SweepList(n.text, tuple(values), self.span_from(start))
        raise self.error(f"expected 'from' or 'over', found '{how.text}'", how.span,
                         suggest(how.text, ("from", "over")) or "sweep NAME from A to B in N")

    def qubit(self, what: str = "a qubit name") -> T.Ident:
        t = self.expect_name(what)
        if t.text in KEYWORDS:
            raise self.error(f"'{t.text}' is a keyword, not a qubit name", t.span,
                             "did you forget a line break or ';'?")
        return T.Ident(t.text, t.span)

    def st_prepare(self, start: Token) -> T.Stmt:
        names: list[Token] = []
        while self.tok.kind == "NAME":
            names.append(self.advance())
        if not names or names[-1].text not in T.STATES:
            at = names[-1].span if names else self.tok.span
            word = names[-1].text if names else ""
            raise self.error("prepare needs qubits followed by a state", at,
                             did_you_mean(word, T.STATES)
                             + "states: " + ", ".join(T.STATES) + "; e.g. prepare A B up")
        if len(names) < 2:
            raise self.error("prepare needs at least one qubit before the state", names[-1].span,
                             "e.g. prepare A B up")
        state = names[-1].text
        qubits = tuple(T.Ident(t.text, t.span) for t in names[:-1])
        if state == "singlet" and len(qubits) != 2:
            raise self.error("a singlet is prepared on exactly two qubits", self.span_from(start),
                             "e.g. prepare A B singlet")
        return T.Prepare(qubits, state, self.span_from(start))

    def axis(self) -> T.Axis:
        start = self.tok
        neg = False
        if self.at_op("-"):
            self.advance()
            neg = True
        t = self.expect_name("a rotation axis (x, y, z, -x, -y, -z or phase(ANGLE))")
        if t.text in ("x", "y", "z"):
            return T.Axis(t.text, neg, None, self.span_from(start))
        if t.text == "phase" and not neg:
            self.expect_op("(", "write the axis phase in parentheses: phase(45 deg)")
            e = self.expr()
            self.expect_op(")", "close with ')'")
            return T.Axis("phase", False, e, self.span_from(start))
        raise self.error(f"unknown rotation axis '{t.text}'", t.span,
                         did_you_mean(t.text, ("x", "y", "z", "phase"))
                         + "axes: x, y, z, -x, -y, -z, or phase(ANGLE) for any axis in the xy-plane")

    def options(self, allowed: tuple[str, ...], what: str) -> tuple[T.Option, ...]:
        opts: list[T.Option] = []
        seen: set[str] = set()
        while self.tok.kind == "NAME" and self.peek().kind == "OP" and self.peek().text == "=":
            k = self.advance()
            self.advance()
            if k.text not in allowed:
                raise self.error(f"unknown option '{k.text}' for {what}", k.span,
                                 did_you_mean(k.text, allowed) + f"options: {', '.join(allowed)}")
            if k.text in seen:
                raise self.error(f"option '{k.text}' given twice", k.span, "keep one")
            seen.add(k.text)
            if k.text == "shape":
                v = self.expect_name("an envelope shape", "shapes: " + ", ".join(SHAPES))
                if v.text not in SHAPES:
                    raise self.error(f"unknown shape '{v.text}'", v.span,
                                     suggest(v.text, SHAPES) or "shapes: " + ", ".join(SHAPES))
                value: T.Expr | T.Ident = T.Ident(v.text, v.span)
            else:
                value = self.expr()
            opts.append(T.Option(k.text, value, self.span_from(k)))
        return tuple(opts)

    def st_rot(self, start: Token) -> T.Stmt:
        q = self.qubit("the qubit to rotate")
        ax = self.axis()
        angle = self.expr()
        opts = self.options(ROT_OPTIONS, "rot")
        if ax.kind == "z" and opts:
            raise self.error("z rotations are frame updates: they take no time and no options",
                             opts[0].span, "remove the options")
        return T.Rot(q, ax, angle, opts, self.span_from(start))

    def _exchange(self, kind: str, start: Token) -> T.Stmt:
        a = self.qubit(f"the first qubit of {kind}")
        b = self.qubit(f"the second qubit of {kind}")
        opts = self.options(EXCHANGE_OPTIONS, kind)
        return T.Exchange(kind, a, b, opts, self.span_from(start))

    def st_sqrtswap(self, start: Token) -> T.Stmt:
        return self._exchange("sqrtswap", start)

    def st_sqrtswap_inv(self, start: Token) -> T.Stmt:
        return self._exchange("sqrtswap_inv", start)

    def st_swap(self, start: Token) -> T.Stmt:
        return self._exchange("swap", start)

    def st_cz(self, start: Token) -> T.Stmt:
        return self._exchange("cz", start)

    def st_cphase(self, start: Token) -> T.Stmt:
        a = self.qubit("the first qubit of cphase")
        b = self.qubit("the second qubit of cphase")
        if self.at_end_of_statement() or (self.tok.kind == "NAME" and self.peek().kind == "OP"
                                          and self.peek().text == "="):
            raise self.error("cphase needs the conditional phase after the two qubits",
                             self.tok.span, "e.g. cphase A B 90 deg (cz A B is cphase A B 180 deg)")
        angle = self.expr()
        opts = self.options(EXCHANGE_OPTIONS, "cphase")
        return T.Exchange("cphase", a, b, opts, self.span_from(start), angle)

    def st_wait(self, start: Token) -> T.Stmt:
        d = self.expr()
        qubits: list[T.Ident] = []
        if self.tok.kind == "NAME" and self.tok.text == "on":
            self.advance()
            qubits.append(self.qubit())
            while self.tok.kind == "NAME" and self.tok.text not in KEYWORDS:
                qubits.append(self.qubit())
        return T.Wait(d, tuple(qubits), self.span_from(start))

    def st_read(self, start: Token) -> T.Stmt:
        qubits = [self.qubit("a qubit to read")]
        while self.tok.kind == "NAME" and self.tok.text not in KEYWORDS:
            qubits.append(self.qubit())
        return T.Read(tuple(qubits), self.span_from(start))

    def st_move(self, start: Token) -> T.Stmt:
        t = self.expect_name("the name of a voltage point (points: in the device file)",
                             "e.g. move measure, or move load ramp=100 ns")
        if t.text in KEYWORDS:
            raise self.error(f"'{t.text}' is a keyword, not a voltage point", t.span,
                             "name a point from the device file's points: section")
        opts = self.options(MOVE_OPTIONS, "move")
        return T.Move(T.Ident(t.text, t.span), opts, self.span_from(start))

    def st_trigger(self, start: Token) -> T.Stmt:
        label = ""
        if self.tok.kind == "STRING":
            label = self.advance().text[1:-1]
        return T.Trigger(label, self.span_from(start))

    def braced(self, what: str) -> tuple[T.Stmt, ...]:
        if self.depth >= MAX_NESTING and self.at_op("{"):
            # before the '{' is read, so the statement is skipped with its body
            raise self.error(f"repeat, together and block bodies nested deeper than "
                             f"{MAX_NESTING} levels", self.tok.span,
                             "flatten the nesting: multiply repeat counts, or define the "
                             "inner part as a block and call it")
        opening = self.expect_op("{", f"{what} needs a body in braces {{ ... }}")
        self.depth += 1
        try:
            body = self.parse_body(top=False)
        finally:
            self.depth -= 1
        if not self.at_op("}"):
            raise self.error(f"the '{{' that opens the body of {what} is never closed",
                             opening.span, "add '}' at the end of the body")
        self.advance()
        return tuple(body)

    def st_together(self, start: Token) -> T.Stmt:
        body = self.braced("together")
        for s in body:
            if not isinstance(s, (T.Rot, T.Exchange, T.Wait, T.Read, T.Do)):
                kw = type(s).__name__.lower()
                raise self.error(f"'{kw}' cannot run inside 'together'", s.span,
                                 "together holds single steps on different qubits: "
                                 + ", ".join(INSIDE_TOGETHER))
        return T.Together(body, self.span_from(start))

    def st_repeat(self, start: Token) -> T.Stmt:
        n = self.expr()
        body = self.braced("repeat")
        return T.Repeat(n, body, self.span_from(start))

    def st_block(self, start: Token) -> T.Stmt:
        n = self.expect_name("the block's name", "e.g. block echo(q, tau) { ... }")
        self.check_new_name(n)
        self.expect_op("(", "list the parameters in parentheses, e.g. block echo(q, tau) { ... }")
        params: list[str] = []
        if not self.at_op(")"):
            while True:
                p = self.expect_name("a parameter name")
                self.check_new_name(p)
                if p.text in params:
                    raise self.error(f"parameter '{p.text}' appears twice", p.span)
                params.append(p.text)
                if not self.at_op(","):
                    break
                self.advance()
        self.expect_op(")", "close the parameter list with ')'")
        body = self.braced(f"block {n.text}")
        return T.BlockDef(n.text, tuple(params), body, self.span_from(start))

    def expr_list(self, closer: str) -> list[T.Expr]:
        """Comma-separated expressions up to (not including) ``closer``."""
        items: list[T.Expr] = []
        if not self.at_op(closer):
            items.append(self.expr())
            while self.at_op(","):
                self.advance()
                items.append(self.expr())
        return items

    def st_do(self, start: Token) -> T.Stmt:
        n = self.expect_name("the block to run", "e.g. do echo(A, 100 ns)")
        self.expect_op("(", "give the arguments in parentheses, e.g. do echo(A, 100 ns)")
        args = self.expr_list(")")
        self.expect_op(")", "close the argument list with ')'")
        return T.Do(n.text, tuple(args), self.span_from(start))

    # ------------------------------------------------------------ expressions
    def operator(self) -> Token:
        """Read an operator token, counting it against MAX_OPERATORS (a chain
        like 1+1+...+1 builds a tree as deep as it is long)."""
        self.expr_ops += 1
        if self.expr_ops > MAX_OPERATORS:
            raise self.error(f"this expression has more than {MAX_OPERATORS} operators",
                             self.tok.span, "split it into several 'let' lines")
        return self.advance()

    def expr(self) -> T.Expr:
        if self.expr_level == 0:
            self.expr_ops = 0
        self.expr_level += 1
        self.expr_depth += 1
        try:
            if self.expr_depth > MAX_NESTING:
                raise self.error(f"expression nested deeper than {MAX_NESTING}", self.tok.span,
                                 "simplify it or split it with let")
            left = self.term()
            while self.tok.kind == "OP" and self.tok.text in ("+", "-"):
                op = self.operator().text
                right = self.term()
                left = T.Binary(op, left, right, Span.join(left.span, right.span))
            return left
        finally:
            self.expr_depth -= 1
            self.expr_level -= 1

    def term(self) -> T.Expr:
        left = self.unary()
        while self.tok.kind == "OP" and self.tok.text in ("*", "/"):
            op = self.operator().text
            right = self.unary()
            left = T.Binary(op, left, right, Span.join(left.span, right.span))
        return left

    def unary(self) -> T.Expr:
        if self.tok.kind == "OP" and self.tok.text in ("-", "+"):
            t = self.operator()
            self.expr_depth += 1
            try:
                if self.expr_depth > MAX_NESTING:
                    raise self.error(f"expression nested deeper than {MAX_NESTING}", t.span,
                                     "simplify it or split it with let")
                operand = self.unary()
            finally:
                self.expr_depth -= 1
            return T.Unary(t.text, operand, Span(t.file, t.line, t.col, operand.span.end_line,
                                                 operand.span.end_col))
        return self.power()

    def power(self) -> T.Expr:
        base = self.primary()
        if self.at_op("^"):
            self.operator()
            exp = self.unary()
            return T.Binary("^", base, exp, Span.join(base.span, exp.span))
        return base

    def unit_after(self) -> Token | None:
        t = self.tok
        if t.kind == "NAME" and t.text in UNIT_WORDS and not (
                self.peek().kind == "OP" and self.peek().text == "="):
            return self.advance()
        if t.kind == "NAME" and not t.spaced and t.text not in KEYWORDS:
            # letters glued to a number: '90dg'
            raise self.error(f"unknown unit '{t.text}'", t.span,
                             suggest(t.text, UNIT_WORDS) or "units: ns us ms s, Hz kHz MHz GHz, "
                             "mV V, mT T, deg rad, mK K, ueV meV")
        return None

    def primary(self) -> T.Expr:
        t = self.tok
        if t.kind == "NUMBER":
            self.advance()
            u = self.unit_after()
            return T.Num(t.text, u.text if u else None, self.token_span(t, u or t))
        if t.kind == "NAME":
            if t.text in KEYWORDS:
                raise self.error(f"expected a value, found the keyword '{t.text}'", t.span,
                                 "did you forget a line break or ';'?")
            self.advance()
            if self.at_op("("):
                if t.text not in FUNCTIONS:
                    raise self.error(f"unknown function '{t.text}'", t.span,
                                     suggest(t.text, FUNCTIONS) or "functions: " + ", ".join(FUNCTIONS))
                self.advance()
                args = self.expr_list(")")
                close = self.expect_op(")", "close the function call with ')'")
                span = self.token_span(t, close)
                if len(args) != FUNCTIONS[t.text]:
                    raise self.error(f"{t.text}() takes {FUNCTIONS[t.text]} argument"
                                     f"{'s' if FUNCTIONS[t.text] > 1 else ''}, got {len(args)}", span)
                return T.Call(t.text, tuple(args), span)
            return T.Name(t.text, t.span)
        if t.kind == "OP" and t.text == "(":
            self.advance()
            inner = self.expr()
            close = self.expect_op(")", "close the parenthesis")
            u = self.unit_after()
            if u is not None:
                return T.WithUnit(inner, u.text, self.token_span(t, u))
            return inner
        hint = ""
        if t.kind in ("NEWLINE", "EOF"):
            hint = "the statement ends before its value; e.g. wait 100 ns"
        raise self.error(f"expected a value, found {self.describe(t)}", t.span, hint)


class _MissingInclude(Exception):
    def __init__(self, reason: str, hint: str = ""):
        self.reason, self.hint = reason, hint


class _TooLarge(Exception):
    def __init__(self, message: str, hint: str):
        self.message, self.hint = message, hint


class _Chars:
    """Characters read for one parse: the file and everything it includes
    (a file included a thousand times counts a thousand times)."""

    def __init__(self, budget: Budget | None, root: str | None = None):
        self.budget = budget
        self.root = root    # with --confine: the folder includes must lie in
        self.limit = min(MAX_FILE_CHARS, budget.chars) if budget is not None else MAX_FILE_CHARS
        self.used = 0

    def take(self, n: int) -> None:
        """Count ``n`` more characters; raises _TooLarge above the limit."""
        self.check(n)
        self.used += n

    def check(self, n: int) -> None:
        """Raise _TooLarge if ``n`` more characters would pass the limit."""
        if self.used + n > self.limit:
            if self.budget is not None:
                raise _TooLarge(*self.budget.chars_problem(self.used + n))
            raise _TooLarge(f"the sequence and its includes hold more than {self.limit:,} "
                            "characters", "split the experiment into several files")


def _read(path: Path, chars: _Chars) -> str:
    """The text of a regular file, read no further than the characters left
    (bytes >= characters, so the byte cap never refuses a file that fits)."""
    try:
        data = read_capped(path, max(chars.limit - chars.used, 0))
    except Unreadable as e:
        hint = e.hint
        if e.reason.startswith("it is a directory"):
            hint = f"give a sequence file (ending in {SEQUENCE_SUFFIX})"
        raise _MissingInclude(e.reason, hint) from None
    except Oversize as e:
        chars.check(e.size)
        raise   # pragma: no cover - check() raises above the limit
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as e:
        raise _MissingInclude(f"it is not UTF-8 text (byte 0x{e.object[e.start]:02x} at offset "
                              f"{e.start})", "save it as UTF-8 text; dotseq reads only text "
                              "files") from None


def parse_text(text: str, file: str = "<text>", chain: tuple[str, ...] = (), *,
               budget: Budget | None = None, _chars: _Chars | None = None,
               _echo: bool = True) -> T.SourceFile:
    """Parse sequence text; raises SequenceSyntaxError listing every problem.

    ``budget`` (from :func:`compiler.limits.budget`) bounds the characters
    read, includes and all, by the memory the tree would take."""
    chars = _chars if _chars is not None else _Chars(budget)
    try:
        chars.take(len(text))
    except _TooLarge as e:
        raise SequenceSyntaxError(e.message, Span(file, 1, 1, 1, 1), e.hint) from None
    # a file included under another name than *.dotseq may be anything (a system file):
    # its lines are never shown in messages
    p = Parser(text, file, chain, lines=remember_source(file, text, echo=_echo), chars=chars)
    result = p.parse_file()
    p.problems.raise_if_any(SequenceSyntaxError)
    return result


def parse_path(path: str | Path, chain: tuple[str, ...] = (), *, budget: Budget | None = None,
               confine: bool = False, _chars: _Chars | None = None,
               _echo: bool = True) -> T.SourceFile:
    """Read and parse one sequence file (and the files it includes).

    ``budget`` (from :func:`compiler.limits.budget`) bounds the characters
    read, includes and all, by the memory the tree would take.  ``confine``
    refuses includes outside the folder tree of ``path``."""
    path = Path(path)
    chars = _chars if _chars is not None else _Chars(
        budget, str(Path(path).absolute().parent) if confine else None)
    if not chain:
        try:
            text = _read(path, chars)
        except _MissingInclude as e:
            raise SequenceError(f"cannot read sequence file '{path}': {e.reason}",
                                Span(str(path), 0, 0, 0, 0), e.hint) from None
        except _TooLarge as e:
            raise SequenceError(e.message, Span(str(path), 0, 0, 0, 0), e.hint) from None
    else:
        text = _read(path, chars)
    tree = parse_text(text, str(path), chain, _chars=chars, _echo=_echo)
    if not chain and not tree.body:
        # an empty file is almost always a wrong path or a copy that failed
        raise SequenceError(f"the sequence file '{path}' holds no statements"
                            + (" (it is empty)" if not text.strip() else " (only comments)"),
                            Span(str(path), 1, 1, 1, 1),
                            "write the experiment in it, e.g. 'rot A x 90 deg' (docs/language.md)")
    return tree
