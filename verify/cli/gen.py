"""The ``gen`` verb: write the model's fixed-point C (NAME.h, NAME.c), the macros between real
values and stored integers (NAME_units.h) and the self-test (NAME_selftest.h, NAME_selftest.c),
optionally its integer program as JSON and, with --example TARGET, an example main that calls the
step from a timer interrupt (NAME_example_main.c).

With --plan FILE the fixed-point choice comes from what ``plan --search --json`` chose; with --trim
the step constants are trimmed first (gen/study/trim.py).

Exit codes: 0 written; 1 the model has no stable limit cycle (nothing is written); 2 bad input.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import TYPE_CHECKING, Any

from orbitfix.gen.errors import InputError
from orbitfix.verify.cli.options import (
    add_cycle_tolerances,
    add_fixed_point_options,
    add_model_arguments,
    add_trim_option,
    model_from_args,
)

if TYPE_CHECKING:
    from orbitfix.gen.model.definition import Model


# gen/c/example_main.EXAMPLE_TARGETS, kept here so the command line starts without jinja2
EXAMPLE_TARGETS = ("cortex-m", "avr")


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
    parser.add_argument("--plan", type=Path, metavar="FILE", dest="plan_file",
                        help="take the word size, integrator and states' format that 'orbitfix plan "
                             "MODEL --search --json > FILE' chose (instead of the fixed-point options)")
    add_trim_option(parser, "the header says it was trimmed and by how much")
    parser.add_argument("--example", metavar="TARGET", choices=EXAMPLE_TARGETS,
                        help="also write NAME_example_main.c: a main whose timer interrupt calls the step "
                             "at the loop rate, for TARGET: cortex-m (SysTick) or avr (Timer1)")
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace, partial: dict) -> int:
    """Design, render and write the files; print what was written and the caution."""
    from orbitfix.gen.c.emit import render_model, render_units
    from orbitfix.gen.c.selftest import render_selftest
    from orbitfix.gen.pipeline import design
    from orbitfix.gen.safety import CAUTION
    from orbitfix.gen.study.dead_zones import dead_zones
    from orbitfix.gen.study.discrete_cycle import CycleTolerance
    from orbitfix.gen.study.start_path import check_start_path, plan_warnings
    from orbitfix.verify.report.design import dead_zone_json, design_json, design_lines, trim_lines
    from orbitfix.verify.report.generated import written_fields, written_lines
    from orbitfix.verify.report.json_output import json_text

    model = model_from_args(args)
    if args.plan_file is not None:
        model = model_from_plan_file(args, model)
    if args.example is not None:
        from orbitfix.gen.c.example_main import check_example

        check_example(model, args.example)
    built = design(model)
    trim = None
    if args.trim:
        from orbitfix.gen.study.trim import trim_design

        built, trim = trim_design(built)
        partial["trim"] = trim.to_json()
    tolerance = CycleTolerance(period_ppm=args.max_period_error,
                               amplitude=args.max_amplitude_error / 100.0)
    start = check_start_path(built)
    stepped, warnings = plan_warnings(built, start, tolerance)
    partial["start_path"] = start.to_json()
    zones = dead_zones(built)
    texts = {**render_model(built.model, built.timing, built.integrator, built.plan, zones),
             **render_units(built.model, built.timing, built.integrator, built.plan),
             **render_selftest(built.model, built.timing, built.integrator, built.plan,
                               start.trajectory, start.counts)}
    if args.example is not None:
        from orbitfix.gen.c.example_main import render_example_main

        texts.update(render_example_main(built.model, built.timing, built.integrator, built.plan,
                                         args.example))
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
                               "trim": trim.to_json() if trim else None,
                               "dead_zones": dead_zone_json(zones), "files": written_fields(files),
                               "caution": CAUTION}))
    else:
        print("\n".join(design_lines(built) + [f"  warning: {w}" for w in warnings]
                        + (trim_lines(trim) if trim else []) + written_lines(files)))
        print(CAUTION)
    return 0


PLAN_FILE_ADVICE = "write it with 'orbitfix plan MODEL --search --json > FILE'"
FIXED_POINT_OPTIONS = {"integrator": "--integrator", "fraction_bits": "--fraction-bits",
                       "word_bits": "--word", "rounding": "--rounding", "overflow": "--overflow"}


def model_from_plan_file(args: argparse.Namespace, model: Model) -> Model:
    """``model`` with the fixed-point choice of the plan file (the ``choice`` that ``plan --search
    --json`` writes). Refused, naming the file and what is wrong: a file that cannot be read or is
    not JSON, JSON without a choice, a choice made for another model (name, parameters, rhythm),
    or --plan given together with a fixed-point option."""
    path = args.plan_file
    given = [option for name, option in FIXED_POINT_OPTIONS.items()
             if getattr(args, name, None) is not None]
    if given:
        raise InputError(f"--plan '{path}' sets the fixed point; leave out {', '.join(given)} (or "
                         "leave out --plan)")
    try:
        data = json.loads(path.read_text())
    except OSError as exc:
        raise InputError(f"cannot read the plan file '{path}': {exc.strerror or exc}; "
                         f"{PLAN_FILE_ADVICE}") from None
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"the plan file '{path}' is not JSON ({exc}); {PLAN_FILE_ADVICE}") from None
    choice = data.get("choice") if isinstance(data, dict) else None
    if not isinstance(choice, dict):
        why = ("its search found no candidate within tolerance" if isinstance(data, dict)
               and isinstance(data.get("search"), dict) and data["search"].get("best") is None
               else "it holds no chosen plan ('choice')")
        raise InputError(f"the plan file '{path}' cannot be used: {why}; {PLAN_FILE_ADVICE}")
    wanted = {"model": model.name, "params": model.parameter_values,
              "cycle_hz": model.rhythm.cycle_hz, "loop_hz": model.rhythm.loop_hz}
    for key, value in wanted.items():
        if choice.get(key) != value:
            raise InputError(f"the plan file '{path}' was chosen for {key} {choice.get(key)!r}, but "
                             f"this model has {value!r}; plan this model (with the same --set) and "
                             "give that file")
    fields = {"integrator": str, "word_bits": int, "fraction_bits": int, "rounding": str,
              "overflow": str}
    changes = {}
    for key, kind in fields.items():
        value = choice.get(key)
        if not isinstance(value, kind) or isinstance(value, bool):
            raise InputError(f"the plan file '{path}': its choice has no valid '{key}' (got "
                             f"{value!r}); {PLAN_FILE_ADVICE}")
        changes[key] = value
    return model.with_fixed_point(**changes)
