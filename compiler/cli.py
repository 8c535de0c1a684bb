"""The `spinc` command.  Thin: it parses arguments and calls the functions of
:mod:`compiler`; every input error is printed with its position and a hint
and gives exit code 2, never a traceback."""

from __future__ import annotations

import argparse
import json
import sys
import traceback
from pathlib import Path

from . import __version__, check_file
from .check.summary import render_text, to_dict
from .errors import SpincError, UsageError

EXIT_OK, EXIT_INPUT, EXIT_INTERNAL, EXIT_INTERRUPTED = 0, 2, 3, 130

CAUTION = ("Caution: check every compiled voltage and microwave amplitude against the sample's "
           "and the lab's own limits before loading it onto an instrument; spinc does not "
           "replace instrument-side limits.")


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # argparse would exit itself; report like any input error
        raise UsageError(f"{message} (see: {self.prog} --help)")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="spinc", description="Pulse-sequence compiler for electron-spin qubits "
                "in gate-defined quantum dots.", epilog=CAUTION)
    p.add_argument("--version", action="version", version=f"spinc {__version__}")
    p.add_argument("--debug", action="store_true", help="show Python tracebacks of internal errors")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    c = sub.add_parser("check", help="parse and validate a sequence and its device; print a summary",
                       description="Parse a sequence file, load its device description, check both "
                       "and print qubits, Larmor frequencies, duration, step counts, the longest "
                       "gate and the coherence margin.")
    c.add_argument("file", help="sequence file (.dotseq)")
    c.add_argument("--device", help="device description (YAML) to use instead of the file's own")
    c.add_argument("--json", action="store_true", help="print the result as JSON for scripts")
    return p


def cmd_check(args) -> int:
    summary = check_file(args.file, args.device)
    if args.json:
        print(json.dumps(to_dict(summary), indent=2))
    else:
        print(render_text(summary))
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    want_json = "--json" in argv
    debug = "--debug" in argv
    try:
        args = build_parser().parse_args(argv)
        if args.command is None:
            raise UsageError("no command given; try: spinc check FILE (see: spinc --help)")
        return {"check": cmd_check}[args.command](args)
    except SpincError as e:
        if want_json:
            print(json.dumps(e.to_dict(), indent=2))
        else:
            print(e.render(), file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("spinc: interrupted; nothing was written", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        return EXIT_OK
    except Exception as e:  # an internal bug, not bad input: say so plainly
        if debug:
            traceback.print_exc()
        msg = f"spinc: internal error ({type(e).__name__}: {e}). This is a bug in spinc, not in " \
              "your input; please report it with the input files (rerun with --debug for details)."
        if want_json:
            print(json.dumps({"ok": False, "stage": "internal", "errors": [{"message": msg}]}))
        else:
            print(msg, file=sys.stderr)
        return EXIT_INTERNAL


def entry() -> None:
    sys.exit(main())


if __name__ == "__main__":  # pragma: no cover
    entry()
