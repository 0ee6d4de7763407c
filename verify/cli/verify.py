"""The ``verify`` verb: prove on the host that the C gives the golden model's bits, then (unless
left out) that long-run drift keeps the orbit, and (with --certify) the lattice certificate.

Exit codes: 0 every proof passed; 1 one failed (not bit-exact, drift out of tolerance, no
certificate); 2 bad input.
"""

from __future__ import annotations

import argparse
from collections.abc import Callable
from pathlib import Path
from typing import Any

from orbitfix.gen.errors import InputError
from orbitfix.verify.cli.options import (
    NOT_NEGATIVE,
    POSITIVE,
    add_cycle_tolerances,
    add_fixed_point_options,
    add_junit_option,
    add_model_arguments,
    add_report_option,
    add_trim_option,
    keep,
    model_from_args,
    name_and_value,
    parse_box,
    ready_report_folder,
    whole,
)

# The certificate's defaults, here rather than imported from the proof, so that the command line
# starts without loading it; tests/test_doors.py checks they agree.
DEFAULT_BAND = 0.03
DEFAULT_TOLERANCE = 0.08
MAX_DRIFT_STEPS = 2**63  # the drift harness counts steps in uint64_t; refuse well before it wraps


def register(verbs: Any) -> None:
    """Add the ``verify`` verb to the command line."""
    parser = verbs.add_parser("verify", help="prove the C bit-exact against the golden model, and "
                                             "its long-run drift within tolerance")
    add_verify_arguments(parser)
    add_report_option(parser)
    parser.set_defaults(handler=run)


def add_verify_arguments(parser: argparse.ArgumentParser) -> None:
    """Every argument of ``verify`` but --report (``report`` takes them all, with -o DIR)."""
    add_model_arguments(parser)
    add_fixed_point_options(parser)
    add_trim_option(parser, "verifies the trimmed design (give the same --trim to gen for "
                            "--sources)")
    parser.add_argument("--sources", type=Path, metavar="DIR",
                        help="verify NAME.h and NAME.c already in DIR instead of generating them")
    parser.add_argument("--states", type=whole(1), default=1_000_000, metavar="N",
                        help="random states to compare one step from (default 1000000)")
    parser.add_argument("--steps", type=whole(1), default=1_000_000, metavar="N",
                        help="trajectory steps to compare (default 1000000)")
    drift = add_cycle_tolerances(parser, "the continuous cycle and the float step map over the "
                                         "long-run drift test")
    drift.add_argument("--hours", type=POSITIVE, default=24.0, metavar="H",
                       help="length of the drift test in hours of loop time (default 24)")
    drift.add_argument("--skip-drift", action="store_true", help="leave out the long-run drift test")
    drift.add_argument("--start", action="append", default=[], metavar="NAME=VALUE,...",
                       help="add a drift start, e.g. --start x=0.1,y=-0.2 (states not named keep "
                            "their initial values; repeatable); reported as a robustness finding")
    drift.add_argument("--max-phase-drift", type=POSITIVE, default=1.0, metavar="CYCLES",
                       help="phase drift allowed against the float step map over the run (default 1)")
    drift.add_argument("--max-return-spread", type=POSITIVE, default=2.0, metavar="PERCENT",
                       help="spread of return points on the section allowed, percent of each "
                            "state's range (default 2 %%)")
    proof = parser.add_argument_group("lattice certificate (16-bit words, two states)")
    proof.add_argument("--certify", action="store_true",
                       help="prove over every lattice state of the box that the orbit enters the "
                            "band round the cycle and never leaves the tolerance band")
    proof.add_argument("--band", type=POSITIVE, default=DEFAULT_BAND, metavar="WIDTH",
                       help=f"inner band's half width, in units of each state's half range on the "
                            f"cycle (default {DEFAULT_BAND:g})")
    proof.add_argument("--tolerance-band", type=POSITIVE, default=DEFAULT_TOLERANCE, metavar="WIDTH",
                       help=f"the band the orbit must never leave (default {DEFAULT_TOLERANCE:g})")
    proof.add_argument("--box", action="append", default=[], metavar="NAME=LOW:HIGH",
                       help="the starts to prove for (default: the cycle's box times 1.5)")
    proof.add_argument("--exclude-radius", type=NOT_NEGATIVE, default=0.0, metavar="R",
                       help="leave out states this close to an equilibrium (normalised units)")
    add_junit_option(parser)


def run(args: argparse.Namespace, partial: dict, boards: Callable[[Any, dict], tuple[bool, list[str]]]
        | None = None) -> int:
    """Run the proofs in order; each later one only on C that is bit-exact. ``boards`` (the
    ``report`` verb's --board): called with the design and ``partial`` after the host proofs, it
    streams on each board and returns (all bit-exact, text lines)."""
    box = parse_box(args.box) or None  # checked before any work
    ready_report_folder(args)
    starts = tuple(parse_start(item) for item in args.start)
    if args.sources is not None and not args.sources.is_dir():
        raise InputError(f"--sources '{args.sources}' is not a folder: give the folder gen wrote "
                         "NAME.h and NAME.c into")
    from orbitfix.gen.pipeline import design
    from orbitfix.gen.progress import tell
    from orbitfix.gen.safety import CAUTION
    from orbitfix.gen.study.dead_zones import dead_zones, path_lands_inside
    from orbitfix.gen.study.start_path import check_start_path
    from orbitfix.gen.work_size import bit_exact_work, refuse_beyond_machine
    from orbitfix.verify.proofs.certificate import certify
    from orbitfix.verify.proofs.drift import (
        DriftTolerances,
        build_drift_module,
        drift_size,
        given_starts,
        run_drift,
    )
    from orbitfix.verify.proofs.host_check import check_on_host, read_sources
    from orbitfix.verify.report.certificate import certificate_json, certificate_lines
    from orbitfix.verify.report.design import (
        dead_zone_json,
        dead_zone_lines,
        design_json,
        design_lines,
        start_path_lines,
        trim_json,
        trim_lines,
    )
    from orbitfix.verify.report.drift import drift_json, drift_lines
    from orbitfix.verify.report.host import host_fields, host_lines
    from orbitfix.verify.report.json_output import json_text

    model = model_from_args(args)
    partial["model"] = model.name
    if args.sources is not None and not args.trim:
        refuse_trimmed_sources(args.sources, model.name)
    drift_steps = args.hours * 3600 * model.rhythm.loop_hz
    if not args.skip_drift and drift_steps >= MAX_DRIFT_STEPS:
        raise InputError(f"--hours {args.hours:g} at the model's {model.rhythm.loop_hz:g} Hz loop is "
                         f"{drift_steps:.3g} steps, beyond the drift run's step counter (below 2^63): "
                         "give fewer hours")
    built = design(model)
    trim = None
    if args.trim:
        from orbitfix.gen.study.trim import trim_design

        built, trim = trim_design(built)
        partial["trim"] = trim_json(trim)
    partial.update(design_json(built))
    keep(args, design=built)
    # Sized now, so work beyond the machine is refused before any proof starts.
    program = built.plan.program
    refuse_beyond_machine(bit_exact_work(len(program.ops), len(program.state_names), args.states,
                                         args.steps), "give fewer --states or --steps")
    if not args.skip_drift:
        given_starts(built, starts)  # names and values checked before any proof
        refuse_beyond_machine(drift_size(built, args.hours, len(starts)),
                              "give fewer --hours or a lower loop_hz")
    tolerances = DriftTolerances(amplitude=args.max_amplitude_error / 100,
                                 period_ppm=args.max_period_error,
                                 phase_drift_cycles=args.max_phase_drift,
                                 return_spread=args.max_return_spread / 100)
    start = check_start_path(built)  # the integer map itself, from the initial state (L2 vs L1)
    keep(args, start_path=start)
    zones = dead_zones(built)
    landed = path_lands_inside(built, zones, start.steps)
    partial.update({"start_path": start.to_json(), "dead_zones": dead_zone_json(zones),
                    "initial_state_in_dead_zone": landed is not None})
    tell("building the C on the host and comparing it with the golden model", 0, 1)
    outcome = check_on_host(built, args.sources, states=args.states, steps=args.steps)
    bit_exact = outcome.report.bit_exact
    partial.update(host_fields(outcome))
    drift = None
    if not args.skip_drift and bit_exact:
        sources = read_sources(built, args.sources)[0] if args.sources else None
        tell(f"long-run drift test: {args.hours:g} h of loop time from several starts", 0, 1)
        drift = run_drift(built, hours=args.hours, tolerances=tolerances,
                          host=build_drift_module(built, sources), extra_starts=starts)
        partial["drift"] = drift_json(drift)
    certificate = None
    if args.certify and bit_exact:
        tell("lattice certificate: following every lattice state of the box", 0, 1)
        certificate = certify(built, band=args.band, tolerance=args.tolerance_band, box=box,
                              exclude_radius=args.exclude_radius)
        partial["certificate"] = certificate_json(certificate)
    passed = (bit_exact and start.ok and landed is None and (drift is None or drift.verdict == "pass")
              and (certificate is None or certificate.proved))
    streamed: list[str] = []
    if boards is not None and bit_exact:
        on_boards, streamed = boards(built, partial)
        passed = passed and on_boards
    elif boards is not None:
        streamed = ["board runs: not run, since the C is not bit-exact on the host"]
    if args.json:
        print(json_text(passed, {**partial, "caution": CAUTION}))
        return 0 if passed else 1
    lines = (design_lines(built) + (trim_lines(trim) if trim else []) + start_path_lines(start)
             + dead_zone_lines(zones, landed) + host_lines(outcome))
    if drift is not None:
        lines += ["", *drift_lines(drift)]
    elif not args.skip_drift:
        lines.append("long-run drift test: not run, since the C is not bit-exact")
    if certificate is not None:
        lines += ["", *certificate_lines(certificate)]
    if streamed:
        lines += ["", *streamed]
    print("\n".join(lines))
    print(CAUTION)
    return 0 if passed else 1


def parse_start(item: str) -> dict[str, float]:
    """'x=0.1,y=-0.2' to {'x': 0.1, 'y': -0.2}; a malformed item is an input error."""
    start: dict[str, float] = {}
    for part in item.split(","):
        name, value = name_and_value("--start", item, part, "--start x=0.1,y=-0.2")
        if name in start:
            raise InputError(f"--start '{item}' gives the state '{name}' twice")
        start[name] = value
    return start


def refuse_trimmed_sources(folder: Path, model_name: str) -> None:
    """C that ``gen --trim`` wrote says so in its banner; verifying it against the untrimmed design
    could only fail on its step constants, so say what to give instead."""
    from orbitfix.gen.c.naming import CNames

    source = folder / CNames(model_name).source
    try:
        trimmed = "Period trimmed" in source.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        return  # reading it is the proof's own job, with its own message
    if trimmed:
        raise InputError(f"--sources: {source} was written by 'gen --trim' (its step constants are "
                         "trimmed); give --trim to verify it against the trimmed design")
