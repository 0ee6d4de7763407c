"""The ``gen`` verb: write the model's fixed-point C (NAME.h, NAME.c) and its self-test
(NAME_selftest.h, NAME_selftest.c), and optionally its integer program as JSON.

Exit codes: 0 written; 1 the model has no stable limit cycle (nothing is written); 2 bad input.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

from orbitfix.gen.errors import InputError
from orbitfix.verify.cli.options import (
    add_cycle_tolerances,
    add_fixed_point_options,
    add_model_arguments,
    model_from_args,
)


def register(verbs: Any) -> None:
    """Add the ``gen`` verb to the command line."""
    parser = verbs.add_parser("gen", help="write NAME.h and NAME.c for the model, and its self-test")
    add_model_arguments(parser, json_help="print one JSON object (ok, the files written with their "
                                          "SHA-256, the formats, the program's fingerprint)")
    add_fixed_point_options(parser)
    add_cycle_tolerances(parser, "the continuous cycle (gen warns, and still writes, when the "
                                 "integer map misses them)")
    parser.add_argument("-o", "--output", required=True, type=Path, metavar="DIR",
                        help="folder to write the C files into (created if missing)")
    parser.add_argument("--program-json", type=Path, metavar="FILE",
                        help="also write the integer program as JSON to FILE")
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace, partial: dict) -> int:
    """Design, render and write the files; print what was written and the caution."""
    from orbitfix.gen.c.emit import render_model
    from orbitfix.gen.c.selftest import render_selftest
    from orbitfix.gen.pipeline import design
    from orbitfix.gen.safety import CAUTION
    from orbitfix.gen.study.dead_zones import dead_zones
    from orbitfix.gen.study.discrete_cycle import CycleTolerance
    from orbitfix.gen.study.start_path import check_start_path, plan_warnings
    from orbitfix.verify.report.design import dead_zone_json, design_json, design_lines
    from orbitfix.verify.report.generated import written_fields, written_lines
    from orbitfix.verify.report.json_output import json_text

    built = design(model_from_args(args))
    tolerance = CycleTolerance(period_ppm=args.max_period_error,
                               amplitude=args.max_amplitude_error / 100.0)
    start = check_start_path(built)
    stepped, warnings = plan_warnings(built, start, tolerance)
    partial["start_path"] = start.to_json()
    zones = dead_zones(built)
    texts = {**render_model(built.model, built.timing, built.integrator, built.plan, zones),
             **render_selftest(built.model, built.timing, built.integrator, built.plan,
                               start.trajectory)}
    files = {args.output / name: text for name, text in texts.items()}
    if args.program_json:
        files[args.program_json] = json.dumps(built.plan.program.to_json(), indent=2) + "\n"
    for path, text in files.items():
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            path.write_text(text)
        except OSError as exc:
            raise InputError(f"cannot write '{path}': {exc.strerror or exc}; choose a folder you "
                             "can write to") from None
        partial.setdefault("files", []).append(written_fields({path: text})[0])
    if args.json:
        print(json_text(True, {**design_json(built), "start_path": start.to_json(),
                               "integer_cycle": stepped.to_json() if stepped else None,
                               "plan_warnings": warnings,
                               "dead_zones": dead_zone_json(zones), "files": written_fields(files),
                               "caution": CAUTION}))
    else:
        print("\n".join(design_lines(built) + [f"  warning: {w}" for w in warnings]
                        + written_lines(files)))
        print(CAUTION)
    return 0
