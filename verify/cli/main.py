"""The ``orbitfix`` command: builds the parser from the verb modules and maps errors to exit codes.

It lives on the verification side because it is the one place that drives both sides. Each verb
is a module of its own in this package with ``register(verbs)`` (its parser, with help on every
option) and ``run(args, partial)`` (its work, importing heavy modules only when it runs).

Exit codes: 0 success; 1 a check failed (no stable cycle, not bit-exact, drift out of tolerance);
2 bad input or usage, always with a message saying what is wrong and no traceback; 3 a bug of
ours; 130 interrupted.
"""

from __future__ import annotations

import argparse
import contextlib
import sys
import traceback
from typing import Any, NoReturn

from orbitfix.gen import __version__
from orbitfix.gen.errors import OrbitfixError
from orbitfix.verify.cli import basin, board, boards, check, gen, models, plan, report, sweep, verify

VERBS: tuple = (check, gen, verify, report, plan, sweep, basin, models, boards, board)


class UsageError(Exception):
    """A command line that cannot be read: exit 2 with the parser's message."""


class Parser(argparse.ArgumentParser):
    """argparse, but a usage mistake raises :class:`UsageError` instead of printing and exiting,
    so that ``main`` reports it in the one format of every error."""

    def error(self, message: str) -> NoReturn:
        raise UsageError(f"{self.prog}: {message} (see '{self.prog} --help')")


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit code (also used by the console script)."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except UsageError as exc:
        print(exc, file=sys.stderr)
        return 2
    except SystemExit as exc:  # --help and --version print, then exit 0
        return exc.code if isinstance(exc.code, int) else 0
    partial: dict[str, Any] = {}
    args.computed = {}
    from orbitfix.gen.progress import reporting
    from orbitfix.verify.report.progress_bar import ClearingStream, terminal_bar

    bar = terminal_bar(getattr(args, "json", False))
    try:
        with reporting(bar):
            if bar is None:
                code = args.handler(args, partial)
            else:
                with contextlib.redirect_stdout(ClearingStream(sys.stdout, bar)):
                    code = args.handler(args, partial)
        code = _junit(args, partial, None, code)
        if bar is not None:
            bar.close()  # the report is written after the bar's last line
        return _report(args, partial, None, code)
    except OrbitfixError as exc:
        if bar is not None:
            bar.close()
            bar = None
        return _report(args, partial, exc, _junit(args, partial, exc, _fail(args, partial, exc)))
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except Exception:  # a bug of ours, not a user mistake: say so and show where
        print("orbitfix: internal error (please report it with the model file):", file=sys.stderr)
        traceback.print_exc()
        return 3
    finally:
        if bar is not None:
            bar.close()


def _junit(args: argparse.Namespace, partial: dict, exc: OrbitfixError | None, code: int) -> int:
    """With --junit, write the checks as JUnit XML (after a failure too); returns the exit code,
    2 if the file cannot be written."""
    path = getattr(args, "junit", None)
    if path is None:
        return code
    from orbitfix.verify.report.junit import write_junit

    data = {"model": getattr(args, "model", "?"), **partial}
    try:
        write_junit(path, args.verb, data, None if exc is None else str(exc))
    except OrbitfixError as failed:
        print(f"orbitfix {args.verb}: {failed}", file=sys.stderr)
        return max(code, 2)
    return code


def _report(args: argparse.Namespace, partial: dict, exc: OrbitfixError | None, code: int) -> int:
    """With --report DIR (or report's -o DIR), write report.json and report.html (after a failure
    too, from what was computed); returns the exit code, 2 if the folder cannot be written."""
    folder = getattr(args, "report", None)
    if folder is None:
        return code
    from orbitfix.gen.pipeline import NoStableCycleError
    from orbitfix.verify.report.report_folder import ReportFolderError, write_report

    if isinstance(exc, ReportFolderError):
        return code  # already said why; nothing can be written there
    if isinstance(exc, NoStableCycleError):
        args.computed.setdefault("analysis", exc.analysis)
    data = {"model": getattr(args, "model", "?"), **partial}
    try:
        paths = write_report(folder, args.verb, data, args.computed, None if exc is None else str(exc),
                             code)
    except OrbitfixError as failed:
        print(f"orbitfix {args.verb}: {failed}", file=sys.stderr)
        return max(code, 2)
    if not getattr(args, "json", False):
        print(f"report written: {paths[1]} (its data: {paths[0]})")
    return code


def _fail(args: argparse.Namespace, partial: dict, exc: OrbitfixError) -> int:
    """Report an error without losing what was already computed."""
    from orbitfix.gen.pipeline import NoStableCycleError
    from orbitfix.verify.report.json_output import json_text

    if getattr(args, "json", False):
        print(json_text(False, {**partial, "error": str(exc)}))
    elif isinstance(exc, NoStableCycleError):
        from orbitfix.verify.report.analysis import format_report

        print(format_report(exc.analysis))
    print(f"orbitfix {args.verb}: {exc}", file=sys.stderr)
    return exc.exit_code


def build_parser() -> argparse.ArgumentParser:
    """The whole command line: the top-level options and one sub-parser per verb module."""
    parser = Parser(
        prog="orbitfix",
        description="Prove an oscillator's limit cycle, write it as fixed-point C, and prove the "
                    "C gives the golden model's bits.")
    parser.add_argument("--version", action="version", version=f"orbitfix {__version__}")
    verbs = parser.add_subparsers(dest="verb", required=True, metavar="VERB",
                                  parser_class=Parser)
    for module in VERBS:
        module.register(verbs)
    return parser


if __name__ == "__main__":
    sys.exit(main())
