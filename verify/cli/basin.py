"""The ``basin`` verb: from many starting states in a box, the fraction that runs onto the model's
limit cycle, and what the rest do.

Exit codes: 0 the figures were computed; 1 the model has no stable limit cycle from its initial
state (no basin to sample); 2 bad input.
"""

from __future__ import annotations

import argparse
from typing import Any

from orbitfix.verify.cli.options import POSITIVE, add_model_arguments, model_from_args, parse_box, whole

# The basin's defaults, here rather than imported from the analysis, so that the command line
# starts without loading scipy; tests/test_doors.py checks they agree.
DEFAULT_SAMPLES = 20
DEFAULT_PERIODS = 60.0
DEFAULT_SECONDS = 30.0


def register(verbs: Any) -> None:
    """Add the ``basin`` verb to the command line."""
    parser = verbs.add_parser("basin", help="sample the starting states that reach the limit cycle")
    add_model_arguments(parser)
    parser.add_argument("--box", action="append", default=[], metavar="NAME=LOW:HIGH",
                        help="range of one state's starting values (repeatable; states not given "
                             "start at their initial value)")
    how = parser.add_mutually_exclusive_group()
    how.add_argument("--samples", type=whole(2), metavar="N",
                     help=f"N evenly spaced values per boxed state (default {DEFAULT_SAMPLES} when "
                          "--random is not given)")
    how.add_argument("--random", type=whole(1), metavar="N", help="N starts drawn uniformly in the box")
    parser.add_argument("--seed", type=whole(0), default=0, metavar="S",
                        help="seed of the random starts (default 0)")
    parser.add_argument("--periods", type=POSITIVE, default=DEFAULT_PERIODS, metavar="P",
                        help=f"model-time budget in periods of the cycle (default {DEFAULT_PERIODS:g})")
    parser.add_argument("--seconds", type=POSITIVE, default=DEFAULT_SECONDS, metavar="S",
                        help=f"wall-clock budget of the integration (default {DEFAULT_SECONDS:g} s)")
    parser.add_argument("--list-starts", action="store_true",
                        help="with --json, also list every start and its outcome")
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace, partial: dict) -> int:
    """Sample the basin and print its report (or JSON)."""
    box = parse_box(args.box)
    from orbitfix.gen.analysis.basin import NoCycleError, box_starts, sample_basin
    from orbitfix.verify.report.basin import format_basin
    from orbitfix.verify.report.json_output import json_text

    model = model_from_args(args)
    partial["model"] = model.name
    samples = args.samples if args.samples is not None or args.random is not None else DEFAULT_SAMPLES
    starts = box_starts(model, box, grid=samples, random=args.random, seed=args.seed)
    try:
        result = sample_basin(model, starts, box, periods=args.periods, seconds=args.seconds)
    except NoCycleError as exc:
        message = f"no basin to sample: {exc.cycle.verdict}"
        if args.json:
            print(json_text(False, {"model": model.name, "cycle": {
                "found": exc.cycle.found, "stable": exc.cycle.stable, "verdict": exc.cycle.verdict},
                "error": message}))
        else:
            print(f"Basin of attraction of '{model.name}': {message}")
        return 1
    if args.json:
        print(json_text(True, result.to_json(every_start=args.list_starts)))
    else:
        print(format_basin(result))
    return 0
