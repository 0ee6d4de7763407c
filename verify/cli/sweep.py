"""The ``sweep`` verb: move one parameter across a range, find the Hopf points where the rhythm is
born or dies, and follow the cycle's period, amplitude and stability beyond each.

Exit codes: 0 the sweep ran to the end; 1 its time budget ran out first (the figures so far are
printed); 2 bad input.
"""

from __future__ import annotations

import argparse
import json
import math
from typing import Any

from orbitfix.gen.analysis.equilibria import format_state
from orbitfix.gen.analysis.sweep import DEFAULT_SAMPLES, DEFAULT_SECONDS, Sweep, sweep
from orbitfix.verify.cli.options import CAUTION, add_model_arguments, model_from_args, plain_json

KIND_MEANINGS = {
    "supercritical": "a small stable cycle grows from zero amplitude on the side where the "
                     "equilibrium is unstable: the rhythm starts and stops gently",
    "subcritical": "a small unstable cycle exists on the side where the equilibrium is stable: "
                   "past this point the rhythm jumps in at a large amplitude, and it stops at "
                   "another value (hysteresis)",
    "degenerate": "the first Lyapunov coefficient is zero or negligible, so the cubic terms do not "
                  "decide what is born here (higher-order terms do); no kind is claimed",
}


def register(verbs: Any) -> None:
    """Add the ``sweep`` sub-command to the command line's verb parsers."""
    parser = verbs.add_parser("sweep", help="move one parameter across a range: Hopf points and the "
                                            "cycle born at each")
    add_model_arguments(parser)
    parser.add_argument("--param", required=True, metavar="NAME", help="the parameter to move")
    parser.add_argument("--from", dest="start", required=True, type=float, metavar="A",
                        help="first value of the parameter")
    parser.add_argument("--to", dest="stop", required=True, type=float, metavar="B",
                        help="last value of the parameter")
    parser.add_argument("--samples", type=int, default=DEFAULT_SAMPLES, metavar="N",
                        help=f"evenly spaced values from A to B (default {DEFAULT_SAMPLES})")
    parser.add_argument("--workers", type=int, default=None, metavar="N",
                        help="local processes for the independent parts (default: one per core; "
                             "1 runs all in this process)")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="run the independent parts on the Dask cluster whose scheduler is at "
                             "ADDRESS (e.g. tcp://10.0.0.5:8786) instead of local processes")
    parser.add_argument("--seconds", type=float, default=DEFAULT_SECONDS, metavar="S",
                        help=f"time budget of the whole sweep (default {DEFAULT_SECONDS:g} s)")
    parser.add_argument("--no-cycles", action="store_true",
                        help="only locate the Hopf points; do not follow the cycles")
    parser.set_defaults(handler=_sweep)


def _sweep(args: argparse.Namespace, partial: dict) -> int:
    model = model_from_args(args)
    partial.update({"model": model.name, "parameter": args.param})
    result = sweep(model, args.param, args.start, args.stop, samples=args.samples,
                   workers=args.workers, follow_cycles=not args.no_cycles, seconds=args.seconds,
                   scheduler=args.scheduler)
    if args.json:
        print(json.dumps(plain_json(result.to_json()), indent=2))
    else:
        print(format_sweep(result))
    return 0 if result.complete else 1


def format_sweep(result: Sweep) -> str:
    """A plain-text report of a sweep, for people."""
    name, model = result.parameter, result.model
    states = ", ".join(model.state_names)
    lines = [f"Sweep of '{model.name}': {name} from {result.start:.6g} to {result.stop:.6g} "
             f"({len(result.samples)} values)", ""]
    lines.append("Equilibria along the sweep (kind at state; largest real part of the eigenvalues)")
    width = max(len(name), 12)
    for sample in result.samples:
        found = "; ".join(f"{e.kind} at {format_state(e.state)} [{e.eigenvalues[0].real:.4g}]"
                          for e in sample.equilibria) or "none found"
        lines.append(f"  {name} = {sample.param_value:<{width}.6g} {found}")
    lines.append("")
    lines.append(f"Hopf points: {len(result.hopf)}" if result.hopf else "Hopf points: none")
    for number, point in enumerate(result.hopf, start=1):
        lines.append(f"  {number}. {name} = {point.param_value:.10g} at the equilibrium ({states}) = "
                     f"{format_state(point.equilibrium)}")
        lines.append(f"     frequency at onset {point.frequency:.6g} radians per time unit "
                     f"(period {2 * math.pi / point.frequency:.6g})")
        value = point.lyapunov.value
        shown = f"{value:.6g}" if math.isfinite(value) else "not computed"
        lines.append(f"     first Lyapunov coefficient {shown}: {point.kind}")
        lines.append(f"     {KIND_MEANINGS[point.kind]}")
        lines.append(f"     the equilibrium is unstable {point.unstable_side} this point; the small "
                     f"cycle is looked for {point.cycle_side} it")
    for number, _ in enumerate(result.hopf):
        rows = [b for b in result.branch if b.hopf_index == number]
        if not rows:
            continue
        lines.append("")
        lines.append(f"Cycle followed from Hopf point {number + 1}")
        lines.append(f"  {name:>{width}}  {'period':>12}  {'amplitude':>12}  {'largest multiplier':>18}"
                     "  stable")
        for row in rows:
            if not row.found:
                lines.append(f"  {row.param_value:>{width}.6g}  no cycle found here (see the notes)")
                continue
            lines.append(f"  {row.param_value:>{width}.6g}  {row.period:>12.6g}  {row.amplitude:>12.6g}  "
                         f"{_plain(row.max_multiplier):>18}  {'yes' if row.stable else 'no'}")
        lines.append(f"  (amplitude: half the peak-to-peak range of {model.state_names[0]}; largest "
                     "multiplier: the largest nontrivial Floquet multiplier modulus, below 1 stable)")
    if result.notes:
        lines.append("")
        lines.append("Notes")
        lines += [f"  - {note}" for note in result.notes]
    if not result.complete:
        lines.append("")
        lines.append("result: INCOMPLETE: the time budget ran out; raise --seconds or lower --samples")
    lines.append("")
    lines.append(CAUTION)
    return "\n".join(lines)


def _plain(value: float | None) -> str:
    return "-" if value is None else f"{value:.4g}"
