"""The ``report`` verb: run every stage ``verify`` runs (the continuous analysis, the plan, the
start-up path, dead zones, the host bit-exact proof, long-run drift, optionally the certificate),
optionally stream the firmware on emulated boards or the host board (--board), and write
DIR/report.html, one self-contained page with plots, and DIR/report.json, the data behind it
(verify/report/report_folder.py).

Exit codes: as ``verify`` (0 every check passed, 1 one failed, on the host or on a board; the
report is written either way); 2 bad input, or a folder that cannot be written.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from orbitfix.gen.errors import InputError
from orbitfix.verify.cli import verify
from orbitfix.verify.cli.options import whole


def register(verbs: Any) -> None:
    """Add the ``report`` verb to the command line."""
    parser = verbs.add_parser("report", help="run the checks of verify and write a self-contained "
                                             "HTML page with plots, and its JSON")
    verify.add_verify_arguments(parser)
    parser.add_argument("-o", "--output", dest="report", required=True, type=Path, metavar="DIR",
                        help="folder for report.html and report.json (created if missing)")
    boards = parser.add_argument_group("boards (each run as 'orbitfix board' runs it)")
    boards.add_argument("--board", dest="boards", action="append", default=[], metavar="NAME",
                        help="also stream the firmware on this board over the serial link and "
                             "report it bit-exact or not, with its image's sizes and the cost of a "
                             "step (the host board or an emulated one; repeatable)")
    boards.add_argument("--board-steps", type=whole(1), default=20_000, metavar="N",
                        help="steps to stream and compare on each board (default 20000)")
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace, partial: dict) -> int:
    """The checks of ``verify`` and the board runs; main.py writes the report from what they
    computed."""
    profiles = [board_profile(name) for name in args.boards]  # checked before any work
    if not profiles:
        return verify.run(args, partial)

    def on_boards(built: Any, found: dict) -> tuple[bool, list[str]]:
        return stream_on_boards(built, profiles, args.board_steps, found)
    return verify.run(args, partial, boards=on_boards)


def board_profile(name: str) -> Any:
    """A board the report can start itself: the host board or an emulated one, its tools
    installed. A real board needs its user to flash it: refused, saying how."""
    from orbitfix.verify.targets.board_profiles import load_profile

    profile = load_profile(name)
    if profile.kind == "real":
        raise InputError(f"--board {name!r} is a real board, which its user flashes: stream it with "
                         f"'orbitfix board MODEL --board {name} --port URL --report DIR'")
    if not profile.tools_installed():
        raise InputError(f"board {profile.name!r} needs {', '.join(profile.missing_tools())}: "
                         f"{profile.install_hint()}")
    return profile


def stream_on_boards(built: Any, profiles: list, steps: int, partial: dict) -> tuple[bool, list[str]]:
    """Stream on each board in turn; each run's JSON joins ``partial['boards']`` as it ends, so a
    run that stops keeps the ones before it."""
    from orbitfix.gen.progress import tell
    from orbitfix.verify.proofs.board_stream import stream_on_board
    from orbitfix.verify.report.board import board_lines

    runs: list[dict] = partial.setdefault("boards", [])
    lines: list[str] = []
    passed = True
    for profile in profiles:
        tell(f"streaming {steps:,} steps on {profile.name}", 0, 1)
        report = stream_on_board(built, profile, steps=steps)
        runs.append(report.to_json())
        lines += ["", *board_lines(report)]
        passed = passed and report.ok
    return passed, lines
