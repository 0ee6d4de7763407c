"""The ``report`` verb: run every stage ``verify`` runs (the continuous analysis, the plan, the
start-up path, dead zones, the host bit-exact proof, long-run drift, optionally the certificate),
optionally stream the firmware on emulated boards or the host board (--board), and write
DIR/report.html, one self-contained page with plots, and DIR/report.json, the data behind it
(verify/report/report_folder.py).

On request only (they cost more than the rest of a quick report), a parameter sweep (--sweep,
as the ``sweep`` verb runs it) and a basin sample (--basin, as the ``basin`` verb runs it) run
first, so their plots are drawn even when the design cannot be made.

Exit codes: as ``verify`` (0 every check passed, 1 one failed, on the host or on a board; the
report is written either way); 2 bad input, or a folder that cannot be written.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from orbitfix.gen.errors import InputError
from orbitfix.verify.cli import basin, sweep, verify
from orbitfix.verify.cli.options import keep, model_from_args, parse_box, ready_report_folder, whole


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
    drawn = parser.add_argument_group("analyses drawn on request")
    drawn.add_argument("--sweep", metavar="NAME=FROM:TO",
                       help="also sweep this parameter from FROM to TO as 'orbitfix sweep' does, and "
                            "draw the equilibria's eigenvalues and the cycle's amplitude against it")
    drawn.add_argument("--sweep-samples", type=whole(2), default=sweep.DEFAULT_SAMPLES, metavar="N",
                       help=f"evenly spaced values of the swept parameter (default "
                            f"{sweep.DEFAULT_SAMPLES})")
    drawn.add_argument("--basin", action="append", default=[], metavar="NAME=LOW:HIGH",
                       help="also sample the cycle's basin over this range of a state's starting "
                            "values as 'orbitfix basin --box' does, and draw the starts "
                            "(repeatable, one per state)")
    drawn.add_argument("--basin-samples", type=whole(2), default=basin.DEFAULT_SAMPLES, metavar="N",
                       help=f"evenly spaced starting values per state given to --basin (default "
                            f"{basin.DEFAULT_SAMPLES})")
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace, partial: dict) -> int:
    """The sweep and basin sample when asked for, the checks of ``verify`` and the board runs;
    main.py writes the report from what they computed."""
    swept = parse_box([args.sweep], "--sweep") if args.sweep is not None else {}
    box = parse_box(args.basin, "--basin")
    profiles = [board_profile(name) for name in args.boards]  # checked before any work
    ready_report_folder(args)
    if swept or box:
        drawn_on_request(args, partial, swept, box)
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


def drawn_on_request(args: argparse.Namespace, partial: dict, swept: dict[str, tuple[float, float]],
                     box: dict[str, tuple[float, float]]) -> None:
    """Run the sweep and the basin sample asked for; each one's JSON joins ``partial`` (the basin's
    with every start, which its plot is drawn from) and the objects join what the report keeps.
    A model with no stable cycle has no basin: that is said in the JSON, and the checks go on."""
    from orbitfix.gen.analysis.basin import NoCycleError, box_starts, sample_basin
    from orbitfix.gen.analysis.sweep import sweep as run_sweep
    from orbitfix.gen.progress import tell

    model = model_from_args(args)
    partial["model"] = model.name
    starts = box_starts(model, box, grid=args.basin_samples) if box else None  # checked first
    if swept:
        ((name, (start, stop)),) = swept.items()
        tell(f"sweeping {name} from {start:g} to {stop:g}", 0, 1)
        result = run_sweep(model, name, start, stop, samples=args.sweep_samples)
        partial["sweep"] = result.to_json()
        keep(args, sweep=result)
        if not args.json:
            print(f"sweep of {name} from {start:g} to {stop:g}: {len(result.hopf)} Hopf point(s), "
                  f"{len(result.folds)} fold(s) of cycles"
                  + ("" if result.complete else f"; INCOMPLETE: {result.reason or 'out of time'}"))
    if starts is not None:
        tell(f"sampling the basin from {len(starts):,} starts", 0, 1)
        try:
            found = sample_basin(model, starts, box)
        except NoCycleError as exc:
            partial["basin"] = {"error": f"no basin to sample: {exc.cycle.verdict}"}
            if not args.json:
                print(f"basin: {partial['basin']['error']}")
            return
        partial["basin"] = found.to_json(every_start=True)
        keep(args, basin=found)
        if not args.json:
            print(f"basin: {100.0 * found.fraction_on_cycle:.2f} % of {len(starts):,} starts reach "
                  "the cycle")
