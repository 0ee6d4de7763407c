"""The ``plan`` verb: the fixed-point plan as tables, how every integrator keeps the cycle at the
loop rate, and (with --search) the cheapest word size and integrator within tolerance."""

from __future__ import annotations

import argparse
import json
from typing import Any

from orbitfix.gen.errors import InputError
from orbitfix.gen.pipeline import Design, design
from orbitfix.gen.program.integer_program import OVERFLOWS, ROUNDINGS, WORD_SIZES
from orbitfix.gen.study.discrete_cycle import NO_ANGLES, CycleTolerance
from orbitfix.gen.study.plan_study import (
    CoefficientEffect,
    SearchResult,
    coefficient_effect,
    study_integrators,
)
from orbitfix.gen.study.plan_study import search as run_search
from orbitfix.gen.timing.integrators import INTEGRATORS
from orbitfix.verify.cli.options import CAUTION, add_model_arguments, model_from_args, plain_json


def register(verbs: Any) -> None:
    """Add the ``plan`` verb to the command line."""
    plan = verbs.add_parser("plan", help="show the fixed-point plan and how each integrator keeps "
                                         "the cycle; --search for the cheapest that does")
    add_model_arguments(plan)
    plan.add_argument("--integrator", choices=sorted(INTEGRATORS))
    plan.add_argument("--fraction-bits", type=int, metavar="N")
    plan.add_argument("--word", dest="word_bits", type=int, choices=WORD_SIZES)
    plan.add_argument("--rounding", choices=ROUNDINGS)
    plan.add_argument("--overflow", choices=OVERFLOWS)
    plan.add_argument("--max-frequency-error", type=float, default=1000.0, metavar="PPM",
                      help="largest frequency error that keeps the cycle (default 1000 ppm)")
    plan.add_argument("--max-amplitude-error", type=float, default=2.0, metavar="PERCENT",
                      help="largest amplitude error that keeps the cycle (default 2 %%)")
    plan.add_argument("--search", action="store_true",
                      help="find the cheapest word size and integrator within the tolerances")
    plan.add_argument("--workers", type=int, default=None, metavar="N",
                      help="local processes for --search (default: one per core; 1 runs in-process)")
    plan.add_argument("--scheduler", metavar="ADDRESS",
                      help="run --search on the Dask cluster whose scheduler is at ADDRESS "
                           "(e.g. tcp://10.0.0.5:8786) instead of local processes")
    plan.set_defaults(handler=_plan)


def _plan(args: argparse.Namespace, partial: dict) -> int:
    if args.max_frequency_error <= 0 or args.max_amplitude_error <= 0:
        raise InputError("the tolerances must be positive")
    if args.workers is not None and args.workers < 1:
        raise InputError("--workers takes a whole number of at least 1")
    tolerance = CycleTolerance(frequency_ppm=args.max_frequency_error,
                               amplitude=args.max_amplitude_error / 100.0)
    built = design(model_from_args(args))
    partial.update({"model": built.model.name, "plan": _plan_json(built)})
    found: SearchResult | None = None
    if built.plan.program.angle_states:
        partial["note"] = NO_ANGLES
        if args.json:
            print(json.dumps(plain_json(partial), indent=2))
        else:
            print("\n".join(_plan_lines(built)))
            print(f"\nnote: {NO_ANGLES}; the plan above still holds")
            print(CAUTION)
        return 2 if args.search else 0
    effect = coefficient_effect(built, tolerance)
    partial["coefficients"] = effect.to_json()
    studies = study_integrators(built, tolerance)
    partial["integrators"] = [s.to_json() for s in studies]
    if args.search:
        found = run_search(built, tolerance, workers=args.workers, scheduler=args.scheduler)
        partial["search"] = found.to_json()
    if args.json:
        print(json.dumps(plain_json(partial), indent=2))
    else:
        print("\n".join(_plan_lines(built)))
        print(_coefficient_line(effect))
        print()
        print("\n".join(_integrator_lines(built, studies, tolerance)))
        if found is not None:
            print()
            print("\n".join(_search_lines(found)))
        print(CAUTION)
    return 0 if found is None or found.best is not None else 1


def _plan_json(built: Design) -> dict:
    plan = built.plan
    return {"integrator": built.integrator.name, "step_size": built.timing.step,
            "formats": plan.formats_json(), "signals": plan.signal_table(),
            "warnings": list(plan.warnings)}


def _plan_lines(built: Design) -> list[str]:
    plan, timing = built.plan, built.timing
    program = plan.program
    lines = [
        f"fixed-point plan for {built.model.name}: {built.integrator.name}, step "
        f"{timing.step:.6g} model time units ({timing.loop_hz:g} Hz loop, {timing.cycle_hz:g} Hz "
        "cycle)",
        f"states {plan.signal_format.name}, each intermediate in its own format: "
        f"{program.word_bits}-bit words, {program.product_bits}-bit products, rounding "
        f"{program.rounding}, overflow {program.overflow}",
        "formats hold each value's sure bound over the planning box ("
        + ", ".join(f"{n} in [{lo:.4g}, {hi:.4g}]" for n, (lo, hi) in
                    zip(program.state_names, plan.box, strict=True))
        + f") times a margin of {plan.margin:g}",
        "",
        f"  {'value':>5}  {'kind':<6} {'range on the cycle':>24}  {'sure bound':>10}  "
        f"{'format':<7} {'headroom':>9}  what it is",
    ]
    for row in plan.signal_table():
        bound = max(abs(row["sure_min"]), abs(row["sure_max"]))
        lines.append(f"  v{row['value']:<4}  {row['kind']:<6} {row['min']:>11.5g} .. "
                     f"{row['max']:<10.5g}  {bound:>10.4g}  {row['format']:<7} "
                     f"{row['headroom_bits']:>5.2f} bit  {row['note']}")
    lines.append(f"  quantisation step of the states: {plan.signal_format.step:.3g}")
    lines += ["", f"  {'constant':<10} {'format':<8} {'stored':>12}  {'stands for':>22}  "
                  f"{'relative error':>14}  first use"]
    for c in plan.constants:
        relative = c.error / c.real if c.real else 0.0
        lines.append(f"  v{c.index:<9} {c.format.name:<8} {c.stored:>12}  {c.real:>22.15g}  "
                     f"{relative:>14.2e}  {c.note}")
    lines += [f"  warning: {w}" for w in plan.warnings]
    return lines


def _coefficient_line(effect: CoefficientEffect) -> str:
    if effect.warning:
        return f"  warning: {effect.warning}"
    if effect.frequency_shift_ppm is None:
        return "  rounding of the constants: not measured (no cycle in the float step map)"
    return (f"  rounding the constants moves the cycle by {effect.frequency_shift_ppm:+.3g} ppm in "
            f"frequency and {100 * (effect.amplitude_shift or 0):.2g} % in amplitude (within "
            "tolerance)")


def _integrator_lines(built: Design, studies: list, tolerance: CycleTolerance) -> list[str]:
    lines = [
        f"integrators at {built.timing.loop_hz:g} Hz, against the continuous cycle (tolerance "
        f"{tolerance.frequency_ppm:g} ppm in frequency, {100 * tolerance.amplitude:g} % in "
        "amplitude):",
        f"  {'integrator':<17} {'ops':>4} {'products':>8}  {'float map':>12}  {'integer map':>12}"
        f"  {'amplitude':>9}  lowest loop rate that keeps the cycle",
    ]
    for s in studies:
        floats, ints = s.float_cycle, s.integer_cycle
        f_ppm = f"{floats.frequency_error_ppm:+.1f} ppm" if floats.frequency_error_ppm is not None else "-"
        i_ppm = f"{ints.frequency_error_ppm:+.1f} ppm" if ints.frequency_error_ppm is not None else "-"
        amp = f"{100 * ints.amplitude_error:.3f} %" if ints.amplitude_error is not None else "-"
        if s.lowest_loop_hz is not None:
            rate = f"{s.lowest_loop_hz:.4g} Hz"
        elif s.needed_loop_hz is not None:
            rate = (f"not kept at this rate; about {s.needed_loop_hz:.4g} Hz needed (estimate "
                    f"from its order {INTEGRATORS[s.integrator].order})")
        else:
            rate = f"not kept: {ints.verdict}"
        lines.append(f"  {s.integrator:<17} {s.operations:>4} {s.products:>8}  {f_ppm:>12}  "
                     f"{i_ppm:>12}  {amp:>9}  {rate}")
    return lines


def _search_lines(found: SearchResult) -> list[str]:
    lines = ["search (cheapest first: word size, then products, then operations):"]
    for c in found.candidates:
        mark = "<- chosen" if c is found.best else ""
        outcome = "keeps the cycle" if c.kept else (c.problem or (c.cycle.verdict if c.cycle else ""))
        lines.append(f"  {c.word_bits:>2}-bit {c.integrator:<17} {c.signal_format:<7} "
                     f"{c.products:>3} products  {outcome} {mark}".rstrip())
    if found.best is None:
        lines.append("  no word size and integrator keeps the cycle within tolerance at this loop "
                     "rate: raise the loop rate or loosen the tolerances")
    else:
        lines.append(f"  binding tolerance: {found.binding}")
    return lines
