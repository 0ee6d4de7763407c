"""The ``sweep`` verb: move one parameter across a range, find the Hopf points where the rhythm is
born or dies, and follow the cycle's period, amplitude and stability beyond each.

Exit codes: 0 the sweep ran to the end and every cycle branch was followed to its end; 1 a branch
was lost or the time budget ran out first (the figures so far are printed, with the reason); 2 bad
input.
"""

from __future__ import annotations

import argparse
from typing import Any

from orbitfix.verify.cli.options import (
    POSITIVE,
    add_fan_out_options,
    add_model_arguments,
    model_from_args,
    number,
    whole,
)

# The sweep's defaults, here rather than imported from the analysis, so that the command line
# starts without loading scipy; tests/test_doors.py checks they agree.
DEFAULT_SAMPLES = 41
DEFAULT_SECONDS = 60.0


def register(verbs: Any) -> None:
    """Add the ``sweep`` verb to the command line."""
    parser = verbs.add_parser("sweep", help="move one parameter across a range: Hopf points and the "
                                            "cycle born at each")
    add_model_arguments(parser)
    parser.add_argument("--param", required=True, metavar="NAME", help="the parameter to move")
    parser.add_argument("--from", dest="start", required=True, type=number(), metavar="A",
                        help="first value of the parameter")
    parser.add_argument("--to", dest="stop", required=True, type=number(), metavar="B",
                        help="last value of the parameter")
    parser.add_argument("--samples", type=whole(2), default=DEFAULT_SAMPLES, metavar="N",
                        help=f"evenly spaced values from A to B (default {DEFAULT_SAMPLES})")
    add_fan_out_options(parser, "the independent parts (equilibria at each value, each branch)")
    parser.add_argument("--seconds", type=POSITIVE, default=DEFAULT_SECONDS, metavar="S",
                        help=f"time budget of the whole sweep (default {DEFAULT_SECONDS:g} s)")
    parser.add_argument("--no-cycles", action="store_true",
                        help="only locate the Hopf points; do not follow the cycles")
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace, partial: dict) -> int:
    """Run the sweep and print its report (or JSON)."""
    from orbitfix.gen.analysis.sweep import sweep
    from orbitfix.verify.report.json_output import json_text
    from orbitfix.verify.report.sweep import format_sweep

    model = model_from_args(args)
    partial.update({"model": model.name, "parameter": args.param})
    result = sweep(model, args.param, args.start, args.stop, samples=args.samples,
                   workers=args.workers, follow_cycles=not args.no_cycles, seconds=args.seconds,
                   scheduler=args.scheduler)
    if args.json:
        print(json_text(result.complete, result.to_json()))
    else:
        print(format_sweep(result))
    return 0 if result.complete else 1
