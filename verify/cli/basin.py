"""The ``basin`` verb: from many starting states in a box, the fraction that runs onto the model's
limit cycle, and what the rest do.

Exit codes: 0 the figures were computed; 1 the model has no stable limit cycle from its initial
state (no basin to sample); 2 bad input.
"""

from __future__ import annotations

import argparse
import json
import math
from typing import Any

from orbitfix.gen.analysis.basin import (
    DEFAULT_PERIODS,
    DEFAULT_SECONDS,
    BasinSample,
    NoCycleError,
    box_starts,
    sample_basin,
)
from orbitfix.verify.cli.options import CAUTION, add_model_arguments, model_from_args, parse_box, plain_json


def register(verbs: Any) -> None:
    """Add the ``basin`` sub-command to the command line's verb parsers."""
    parser = verbs.add_parser("basin", help="sample the starting states that reach the limit cycle")
    add_model_arguments(parser)
    parser.add_argument("--box", action="append", default=[], metavar="NAME=LOW:HIGH",
                        help="range of one state's starting values (repeatable; states not given "
                             "start at their initial value)")
    how = parser.add_mutually_exclusive_group()
    how.add_argument("--grid", type=int, metavar="N", help="N evenly spaced values per boxed state "
                                                           "(default 20 when --random is not given)")
    how.add_argument("--random", type=int, metavar="N", help="N starts drawn uniformly in the box")
    parser.add_argument("--seed", type=int, default=0, metavar="S",
                        help="seed of the random starts (default 0)")
    parser.add_argument("--periods", type=float, default=DEFAULT_PERIODS, metavar="P",
                        help=f"model-time budget in periods of the cycle (default {DEFAULT_PERIODS:g})")
    parser.add_argument("--seconds", type=float, default=DEFAULT_SECONDS, metavar="S",
                        help=f"wall-clock budget of the integration (default {DEFAULT_SECONDS:g} s)")
    parser.add_argument("--list-starts", action="store_true",
                        help="with --json, also list every start and its outcome")
    parser.set_defaults(handler=_basin)


def _basin(args: argparse.Namespace, partial: dict) -> int:
    model = model_from_args(args)
    partial["model"] = model.name
    box = parse_box(args.box)
    grid = args.grid if args.grid is not None or args.random is not None else 20
    starts = box_starts(model, box, grid=grid, random=args.random, seed=args.seed)
    try:
        result = sample_basin(model, starts, box, periods=args.periods, seconds=args.seconds)
    except NoCycleError as exc:
        message = f"no basin to sample: {exc.cycle.verdict}"
        if args.json:
            print(json.dumps(plain_json({"model": model.name, "cycle": {"found": exc.cycle.found,
                                         "stable": exc.cycle.stable, "verdict": exc.cycle.verdict},
                                         "error": message}), indent=2))
        else:
            print(f"Basin of attraction of '{model.name}': {message}")
        return 1
    if args.json:
        print(json.dumps(plain_json(result.to_json(every_start=args.list_starts)), indent=2))
    else:
        print(format_basin(result))
    return 0


def format_basin(result: BasinSample) -> str:
    """A plain-text report of a basin sample, for people."""
    total = len(result.outcomes)
    box = ", ".join(f"{name} from {low:.6g} to {high:.6g}" for name, low, high in result.box)
    lines = [f"Basin of attraction of '{result.model.name}'s limit cycle (period "
             f"{result.cycle.period:.6g})",
             f"  {total} starts with {box}",
             f"  fixed-step RK4 at step {result.step:.4g}, followed for up to "
             f"{result.model_time:.4g} model time units", ""]
    width = max(len(label) for label in result.labels)
    for label, count in result.counts().items():
        lines.append(f"  {label:<{width}}  {count:>8}  {100.0 * count / max(1, total):6.2f} %")
    lines.append("")
    share = result.fraction_on_cycle
    lines.append(f"result: {100.0 * share:.2f} % of the starts reach the cycle" if math.isfinite(share)
                 else "result: no starts")
    if result.notes:
        lines.append("")
        lines += [f"  note: {note}" for note in result.notes]
    lines.append("")
    lines.append(CAUTION)
    return "\n".join(lines)
