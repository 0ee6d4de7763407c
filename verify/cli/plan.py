"""The ``plan`` verb: the fixed-point plan as tables, how every integrator keeps the cycle at the
loop rate, and (with --search) the cheapest word size and integrator within tolerance.

With --search --json the chosen candidate is also written as ``choice``, which ``gen --plan FILE``
takes. With --trim the plan is trimmed first (gen/study/trim.py) and the trim is shown.

Exit codes: 0 shown (and, with --search, found); 1 --search found nothing within tolerance; 2 bad
input (or --search on a model with angle states, which the stepped-cycle study cannot time).
"""

from __future__ import annotations

import argparse
from typing import TYPE_CHECKING, Any

from orbitfix.verify.cli.options import (
    add_cycle_tolerances,
    add_fan_out_options,
    add_fixed_point_options,
    add_model_arguments,
    add_trim_option,
    model_from_args,
)

if TYPE_CHECKING:
    from orbitfix.gen.pipeline import Design
    from orbitfix.gen.study.plan_study import Candidate


def register(verbs: Any) -> None:
    """Add the ``plan`` verb to the command line."""
    parser = verbs.add_parser("plan", help="show the fixed-point plan and how each integrator keeps "
                                           "the cycle; --search for the cheapest that does")
    add_model_arguments(parser)
    add_fixed_point_options(parser)
    add_cycle_tolerances(parser, "the continuous cycle at the loop rate")
    parser.add_argument("--search", action="store_true",
                        help="find the cheapest word size and integrator within the tolerances")
    add_trim_option(parser, "shows the period before and after and the constants moved (the plan's "
                            "tables and studies are of the trimmed plan)")
    add_fan_out_options(parser, "--search's candidates")
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace, partial: dict) -> int:
    """Show the plan and the integrators' studies; search when asked."""
    from orbitfix.gen.pipeline import design
    from orbitfix.gen.study.dead_zones import dead_zones
    from orbitfix.gen.study.discrete_cycle import CycleTolerance
    from orbitfix.gen.study.plan_study import coefficient_effect, search, study_integrators
    from orbitfix.gen.study.start_path import check_start_path
    from orbitfix.verify.report.design import (
        coefficient_line,
        dead_zone_json,
        dead_zone_lines,
        integrator_lines,
        plan_json,
        plan_lines,
        search_lines,
        start_path_lines,
        trim_json,
        trim_lines,
    )
    from orbitfix.verify.report.json_output import json_text

    tolerance = CycleTolerance(period_ppm=args.max_period_error,
                               amplitude=args.max_amplitude_error / 100.0)
    built = design(model_from_args(args))
    partial["model"] = built.model.name
    trim = None
    if args.trim:
        from orbitfix.gen.study.trim import trim_design

        built, trim = trim_design(built)
        partial["trim"] = trim_json(trim)
    start = check_start_path(built)
    zones = dead_zones(built)
    partial.update({"model": built.model.name, "plan": plan_json(built),
                    "start_path": start.to_json(), "dead_zones": dead_zone_json(zones)})
    effect = coefficient_effect(built, tolerance)
    partial["coefficients"] = effect.to_json()
    studies = study_integrators(built, tolerance)
    partial["integrators"] = [s.to_json() for s in studies]
    found = None
    if args.search:
        found = search(built, tolerance, workers=args.workers, scheduler=args.scheduler)
        partial["search"] = found.to_json()
        if found.best is not None:
            partial["choice"] = choice_json(built, found.best)
    ok = found is None or found.best is not None
    if args.json:
        print(json_text(ok, partial))
    else:
        lines = [*plan_lines(built), *start_path_lines(start), *dead_zone_lines(zones),
                 coefficient_line(effect), "",
                 *integrator_lines(built, studies, tolerance)]
        if trim is not None:
            lines += ["", *trim_lines(trim)]
            if trim.changed:
                lines.append("  (the constants' rounding above includes the trim's deliberate change "
                             "of the step; the integrator rows are each integrator's own untrimmed "
                             "plan)")
        if found is not None:
            lines += ["", *search_lines(found)]
        print("\n".join(lines))
    return 0 if ok else 1


def choice_json(built: Design, best: Candidate) -> dict:
    """What ``gen --plan FILE`` reads back (JSON ``choice``): the model it was chosen for (name,
    parameters, rhythm) and the chosen candidate's word size, integrator and states' format, with
    the rounding and overflow it was tried with."""
    model = built.model
    fraction = int(best.signal_format.rpartition(".")[2])
    return {"model": model.name, "params": model.parameter_values,
            "cycle_hz": model.rhythm.cycle_hz, "loop_hz": model.rhythm.loop_hz,
            "word_bits": best.word_bits, "integrator": best.integrator, "fraction_bits": fraction,
            "rounding": model.fixed_point.rounding, "overflow": model.fixed_point.overflow}
