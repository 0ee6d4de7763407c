"""The ``orbitfix`` command: check, gen and verify.

It lives on the verification side because it is the one place that drives both sides.
Exit codes: 0 success, 1 a check failed (no stable cycle, not bit-exact), 2 bad input or usage.
"""

from __future__ import annotations

import argparse
import json
import sys
import traceback
from pathlib import Path
from typing import Any

from orbitfix.gen import __version__
from orbitfix.gen.analysis.summary import analyse, format_report
from orbitfix.gen.c.emit import render_model
from orbitfix.gen.errors import InputError, OrbitfixError, UnsupportedError
from orbitfix.gen.pipeline import Design, NoStableCycleError, design
from orbitfix.gen.program.integer_program import OVERFLOWS, ROUNDINGS, WORD_SIZES
from orbitfix.gen.timing.integrators import INTEGRATORS
from orbitfix.verify.cli import basin, board, boards, models, plan, sweep
from orbitfix.verify.cli.options import CAUTION, add_model_arguments, model_from_args, parse_box, plain_json
from orbitfix.verify.proofs.certificate import DEFAULT_BAND, DEFAULT_TOLERANCE, certify
from orbitfix.verify.proofs.drift import NO_ANGLES, DriftTolerances, build_drift_module, run_drift
from orbitfix.verify.proofs.host_check import check_on_host, read_sources
from orbitfix.verify.targets.host_build import STRICT_FLAGS

# Verbs defined in modules of their own: each module has register(verbs) adding its parser.
VERB_MODULES: tuple = (models, plan, sweep, basin, boards, board)


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit code (also used by the console script)."""
    parser = _parser()
    args = parser.parse_args(argv)
    partial: dict[str, Any] = {}
    try:
        return args.handler(args, partial)
    except NoStableCycleError as exc:
        return _fail(args, partial, exc, report=format_report(exc.analysis))
    except OrbitfixError as exc:
        return _fail(args, partial, exc)
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except Exception:  # a bug of ours, not a user mistake: say so and show where
        print("orbitfix: internal error (please report it with the model file):", file=sys.stderr)
        traceback.print_exc()
        return 3


def _fail(args: argparse.Namespace, partial: dict, exc: OrbitfixError, report: str = "") -> int:
    """Report an error without losing what was already computed."""
    if getattr(args, "json", False):
        partial["error"] = str(exc)
        print(json.dumps(plain_json(partial), indent=2))
    elif report:
        print(report)
    print(f"orbitfix {args.verb}: {exc}", file=sys.stderr)
    return exc.exit_code


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="orbitfix",
        description="Prove an oscillator's limit cycle, write it as fixed-point C, and prove the "
                    "C gives the golden model's bits.",
        epilog=CAUTION)
    parser.add_argument("--version", action="version", version=f"orbitfix {__version__}")
    verbs = parser.add_subparsers(dest="verb", required=True, metavar="VERB")

    def fixed(p: argparse.ArgumentParser) -> None:
        p.add_argument("--integrator", choices=sorted(INTEGRATORS),
                       help="integrator of the step function (default: the model's, else rk4)")
        p.add_argument("--fraction-bits", type=int, metavar="N",
                       help="fraction bits of the Q format (default: chosen from the cycle's range)")
        p.add_argument("--word", dest="word_bits", type=int, choices=WORD_SIZES,
                       help="word size in bits; products use twice as many (default 32)")
        p.add_argument("--rounding", choices=ROUNDINGS,
                       help="rounding after every shift (default half-up)")
        p.add_argument("--overflow", choices=OVERFLOWS,
                       help="what a result outside the word does (default saturate)")

    check = verbs.add_parser("check", help="analyse the continuous model: equilibria and cycle")
    add_model_arguments(check)
    check.set_defaults(handler=_check)

    gen = verbs.add_parser("gen", help="write NAME.h and NAME.c for the model")
    add_model_arguments(gen, json_flag=False)
    fixed(gen)
    gen.add_argument("-o", "--output", required=True, type=Path, metavar="DIR",
                     help="folder to write the C files into (created if missing)")
    gen.add_argument("--program-json", type=Path, metavar="FILE",
                     help="also write the integer program as JSON to FILE")
    gen.set_defaults(handler=_gen)

    verify = verbs.add_parser("verify", help="prove the C bit-exact against the golden model")
    add_model_arguments(verify)
    fixed(verify)
    verify.add_argument("--sources", type=Path, metavar="DIR",
                        help="verify NAME.h and NAME.c already in DIR instead of generating them")
    verify.add_argument("--states", type=_count, default=1_000_000, metavar="N",
                        help="random states to compare one step from (default 1000000)")
    verify.add_argument("--steps", type=_count, default=1_000_000, metavar="N",
                        help="trajectory steps to compare (default 1000000)")
    drift = verify.add_argument_group("long-run drift test (compiled C, several starts)")
    drift.add_argument("--hours", type=float, default=24.0, metavar="H",
                       help="length in hours of loop time (default 24)")
    drift.add_argument("--skip-drift", action="store_true", help="leave out the long-run drift test")
    drift.add_argument("--max-amplitude-error", type=float, default=2.0, metavar="PERCENT",
                       help="amplitude error allowed against the continuous cycle and the float "
                            "step map (default 2 %%)")
    drift.add_argument("--max-period-error", type=float, default=1000.0, metavar="PPM",
                       help="period error allowed (default 1000 ppm)")
    drift.add_argument("--max-phase-drift", type=float, default=1.0, metavar="CYCLES",
                       help="phase drift against the float step map over the run (default 1)")
    drift.add_argument("--max-return-spread", type=float, default=2.0, metavar="PERCENT",
                       help="spread of return points on the section, of each state's range "
                            "(default 2 %%)")
    proof = verify.add_argument_group("lattice certificate (16-bit words, two states)")
    proof.add_argument("--certify", action="store_true",
                       help="prove over every lattice state of the box that the orbit enters the "
                            "band round the cycle and never leaves the tolerance band")
    proof.add_argument("--band", type=float, default=DEFAULT_BAND, metavar="WIDTH",
                       help=f"inner band's half width, in units of each state's half range on the "
                            f"cycle (default {DEFAULT_BAND:g})")
    proof.add_argument("--tolerance-band", type=float, default=DEFAULT_TOLERANCE, metavar="WIDTH",
                       help=f"the band the orbit must never leave (default {DEFAULT_TOLERANCE:g})")
    proof.add_argument("--box", action="append", default=[], metavar="NAME=LOW:HIGH",
                       help="the starts to prove for (default: the cycle's box times 1.5)")
    proof.add_argument("--exclude-radius", type=float, default=0.0, metavar="R",
                       help="leave out states this close to an equilibrium (normalised units)")
    verify.set_defaults(handler=_verify)
    for module in VERB_MODULES:
        module.register(verbs)
    return parser


def _count(text: str) -> int:
    try:
        value = int(text.replace("_", ""))
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError("give at least 1")
    return value


def _check(args: argparse.Namespace, partial: dict) -> int:
    model = model_from_args(args)
    analysis = analyse(model)
    if args.json:
        result = analysis.to_json()
        result["ok"] = analysis.ok
        print(json.dumps(plain_json(result), indent=2))
    else:
        print(format_report(analysis))  # the report carries its own caution
    return 0 if analysis.ok else 1


def _gen(args: argparse.Namespace, partial: dict) -> int:
    model = model_from_args(args)
    built = design(model)
    files = render_model(model, built.timing, built.integrator, built.plan)
    try:
        args.output.mkdir(parents=True, exist_ok=True)
        for name, text in files.items():
            (args.output / name).write_text(text)
        if args.program_json:
            args.program_json.parent.mkdir(parents=True, exist_ok=True)
            args.program_json.write_text(json.dumps(built.plan.program.to_json(), indent=2) + "\n")
    except OSError as exc:
        raise InputError(f"cannot write into '{args.output}': {exc}") from None
    for line in _design_lines(built):
        print(line)
    for name in files:
        print(f"wrote {args.output / name}")
    if args.program_json:
        print(f"wrote {args.program_json}")
    print(CAUTION)
    return 0


def _verify(args: argparse.Namespace, partial: dict) -> int:
    model = model_from_args(args)
    partial["model"] = model.name
    built = design(model)
    partial.update(_design_json(built))
    if built.plan.program.angle_states and not args.skip_drift:
        raise UnsupportedError(NO_ANGLES)
    tolerances = DriftTolerances(amplitude=args.max_amplitude_error / 100,
                                 period_ppm=args.max_period_error,
                                 phase_drift_cycles=args.max_phase_drift,
                                 return_spread=args.max_return_spread / 100)
    outcome = check_on_host(built, args.sources, states=args.states, steps=args.steps)
    report = outcome.report
    mismatch = report.first_mismatch
    partial.update({
        "bit_exact": report.bit_exact,
        "states_compared": report.states_compared,
        "steps_compared": report.steps_compared,
        "first_mismatch": mismatch.to_json() if mismatch else None,
        "sources": outcome.sources,
        "notes": outcome.notes,
        "compiler_flags": list(STRICT_FLAGS),
        "seconds": {"host_build": outcome.build_seconds, **report.seconds},
    })
    drift = None
    if not args.skip_drift and report.bit_exact:
        sources = read_sources(built, args.sources)[0] if args.sources else None
        drift = run_drift(built, hours=args.hours, tolerances=tolerances,
                          host=build_drift_module(built, sources))
        partial["drift"] = drift.to_json()
    certificate = None
    if args.certify and report.bit_exact:
        certificate = certify(built, band=args.band, tolerance=args.tolerance_band,
                              box=parse_box(args.box) or None, exclude_radius=args.exclude_radius)
        partial["certificate"] = certificate.to_json()
    if args.json:
        print(json.dumps(plain_json(partial), indent=2))
    else:
        for line in _design_lines(built):
            print(line)
        print(f"C sources: {outcome.sources}")
        for note in outcome.notes:
            print(f"  note: {note}")
        reused = " (reused from the cache)" if outcome.build_reused else ""
        print(f"host build: {' '.join(STRICT_FLAGS)}, {outcome.build_seconds:.2f} s{reused}")
        print(f"random states: {report.states_compared:,} compared one step each"
              + _seconds(report.seconds.get("random_states")))
        if "trajectory" in report.seconds or report.steps_compared:
            print(f"trajectory from the initial state: {report.steps_compared:,} steps compared"
                  + _seconds(report.seconds.get("trajectory")))
        if mismatch:
            print(mismatch.describe())
            print("result: NOT bit-exact: the C does not give the golden model's bits")
        else:
            print("result: bit-exact: the C gives the golden model's bits at every compared step")
        if drift is not None:
            print()
            print("\n".join(drift.describe()))
        elif not args.skip_drift:
            print("long-run drift test: not run, since the C is not bit-exact")
        if certificate is not None:
            print()
            print("\n".join(certificate.describe()))
        print(CAUTION)
    passed = (report.bit_exact and (drift is None or drift.verdict == "pass")
              and (certificate is None or certificate.proved))
    return 0 if passed else 1


def _seconds(value: float | None) -> str:
    return f" ({value:.2f} s)" if value is not None else ""


def _design_json(built: Design) -> dict:
    return {
        "model": built.model.name,
        "params": built.model.parameter_values,
        "integrator": built.integrator.name,
        "step_size": built.timing.step,
        "timing": built.timing.to_json(),
        "formats": built.plan.formats_json(),
        "program_fingerprint": built.plan.program.fingerprint(),
        "warnings": list(built.plan.warnings),
    }


def _design_lines(built: Design) -> list[str]:
    t, plan = built.timing, built.plan
    lines = [
        f"model {built.model.name}: cycle period {t.model_period:.6g} model time units; "
        f"{t.cycle_hz:g} Hz at a {t.loop_hz:g} Hz loop gives a step of {t.step:.6g} "
        f"({t.steps_per_cycle:.1f} steps per cycle)",
        f"integrator {built.integrator.name}; states {plan.signal_format.name}, each "
        f"intermediate in its own format; {plan.program.word_bits}-bit words, "
        f"{plan.program.product_bits}-bit products, rounding "
        f"{plan.program.rounding}, overflow {plan.program.overflow}; largest state "
        f"{plan.largest_signal:.4g} on the cycle, {plan.headroom_bits:.2f} bits of headroom",
    ]
    lines += [f"  warning: {w}" for w in plan.warnings]
    return lines


if __name__ == "__main__":
    sys.exit(main())
