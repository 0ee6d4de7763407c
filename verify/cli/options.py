"""What the verbs of the command line share: the model argument and --set, the one group of
fixed-point options, the cycle tolerances, the fan-out options, and argument types that refuse a
bad value while the command line is read (exit 2, before any work starts).

Only light modules are imported here, so that every verb (and ``--help``) starts quickly.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path
from typing import TYPE_CHECKING, Any

from orbitfix.gen.errors import InputError
from orbitfix.gen.model.limits import OVERFLOWS, ROUNDINGS, WORD_SIZES
from orbitfix.gen.timing.integrators import INTEGRATORS

if TYPE_CHECKING:
    from orbitfix.gen.model.definition import Model

PERIOD_SIGN = ("positive when the integer orbit runs slow (its period is longer than the "
               "continuous cycle's)")


def whole(low: int) -> Any:
    """An argument type: a whole number of at least ``low`` (underscores allowed: 1_000_000)."""
    def parse(text: str) -> int:
        try:
            value = int(text.replace("_", ""))
        except ValueError:
            raise argparse.ArgumentTypeError(f"'{text}' is not a whole number") from None
        if value < low:
            raise argparse.ArgumentTypeError(f"{value} is too small: give at least {low}")
        return value
    parse.__name__ = "whole number"
    return parse


def number(low: float | None = None, *, above: bool = False) -> Any:
    """An argument type: a finite number, at least ``low`` (or above it, with ``above``)."""
    def parse(text: str) -> float:
        try:
            value = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"'{text}' is not a number") from None
        if not math.isfinite(value):
            raise argparse.ArgumentTypeError(f"'{text}' is not finite: give a finite number")
        if low is not None and (value <= low if above else value < low):
            wanted = ("a positive number" if above and low == 0 else
                      f"a number above {low:g}" if above else f"a number of at least {low:g}")
            raise argparse.ArgumentTypeError(f"{text} is out of range: give {wanted}")
        return value
    parse.__name__ = "number"
    return parse


POSITIVE = number(0.0, above=True)
NOT_NEGATIVE = number(0.0)


def add_model_arguments(parser: argparse.ArgumentParser, json_help: str = "print one JSON object "
                        "(its first key, ok, is the verdict) instead of the text report") -> None:
    """The model argument, --set NAME=VALUE, and --json."""
    parser.add_argument("model", help="a model file (.toml) or a built-in model name "
                                      "(orbitfix models lists them)")
    parser.add_argument("--set", action="append", default=[], metavar="NAME=VALUE",
                        help="override a model parameter (repeatable)")
    parser.add_argument("--json", action="store_true", help=json_help)


def add_fixed_point_options(parser: argparse.ArgumentParser) -> None:
    """The one group of fixed-point options: integrator, Q format, word, rounding, overflow."""
    group = parser.add_argument_group("fixed point (default: the model file's, else as noted)")
    group.add_argument("--integrator", choices=sorted(INTEGRATORS),
                       help="integrator of the step function (default rk4)")
    group.add_argument("--fraction-bits", type=whole(0), metavar="N",
                       help="fraction bits of the states' Q format (default: chosen from the "
                            "cycle's range)")
    group.add_argument("--word", dest="word_bits", type=int, choices=WORD_SIZES,
                       help="word size in bits; products use twice as many (default 32)")
    group.add_argument("--rounding", choices=ROUNDINGS,
                       help="rounding after every shift (default half-up; mixed: half-up where "
                            "the error reaches the next state, truncate where it stays far "
                            "below a state's LSB, which is cheaper)")
    group.add_argument("--overflow", choices=OVERFLOWS,
                       help="what a result outside the word does (default saturate)")


def add_trim_option(parser: argparse.ArgumentParser, what: str) -> None:
    """--trim: move the step constants by whole LSBs so the integer orbit's exact period matches
    the wanted cycle as closely as the lattice allows (gen/study/trim.py)."""
    parser.add_argument("--trim", action="store_true",
                        help="trim the period: move the step constants by whole LSBs (formats kept) "
                             "so the integer orbit's exact mean period from the initial state "
                             f"matches the wanted cycle as closely as the lattice allows; {what}")


def add_cycle_tolerances(parser: argparse.ArgumentParser, against: str) -> Any:
    """--max-period-error and --max-amplitude-error, one meaning and one sign on every verb."""
    group = parser.add_argument_group(f"how far the stepped cycle may stray from {against}")
    group.add_argument("--max-period-error", type=POSITIVE, default=1000.0, metavar="PPM",
                       help=f"period error allowed, parts per million; errors are printed "
                            f"{PERIOD_SIGN} (default 1000 ppm)")
    group.add_argument("--max-amplitude-error", type=POSITIVE, default=2.0, metavar="PERCENT",
                       help="amplitude error allowed, percent of each state's half range on the "
                            "cycle (default 2 %%)")
    return group


def add_fan_out_options(parser: argparse.ArgumentParser, what: str) -> None:
    """--workers and --scheduler: where the independent parts of ``what`` run."""
    parser.add_argument("--workers", type=whole(1), default=None, metavar="N",
                        help=f"local processes for {what} (default: one per core; 1 runs all in "
                             "this process)")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help=f"run {what} on the Dask cluster whose scheduler is at ADDRESS "
                             "(e.g. tcp://10.0.0.5:8786) instead of local processes")


def add_junit_option(parser: argparse.ArgumentParser) -> None:
    """``--junit FILE``: also write the checks as JUnit XML, for CI systems (see main.py)."""
    parser.add_argument("--junit", type=Path, metavar="FILE",
                        help="also write one JUnit XML test case per check to FILE, for CI "
                             "systems (written when the run fails or stops too)")


def add_report_option(parser: argparse.ArgumentParser) -> None:
    """``--report DIR``: also write report.html and report.json into DIR (see main.py)."""
    parser.add_argument("--report", type=Path, metavar="DIR",
                        help="also write DIR/report.html (one self-contained page with plots) and "
                             "DIR/report.json (written when the run fails or stops too)")


def keep(args: argparse.Namespace, **computed: object) -> None:
    """Keep what a verb computed (the design, the start-up path) for the report written after it
    (main.py), beside the JSON fields it gathers in ``partial``."""
    vars(args).setdefault("computed", {}).update(computed)


def ready_report_folder(args: argparse.Namespace) -> None:
    """With --report (or report's -o), check the folder can be written before any work starts."""
    if getattr(args, "report", None) is not None:
        from orbitfix.verify.report.report_folder import ready_folder

        ready_folder(args.report)


def model_from_args(args: argparse.Namespace) -> Model:
    """Load the model named on the command line, with --set and the fixed-point options applied."""
    from orbitfix.gen.model.model_file import load_model

    overrides = parse_settings(args.set)
    model = load_model(args.model).with_parameters(overrides)
    changes: dict[str, Any] = {}
    for option in ("integrator", "fraction_bits", "word_bits", "rounding", "overflow"):
        if getattr(args, option, None) is not None:
            changes[option] = getattr(args, option)
    return model.with_fixed_point(**changes) if changes else model


def name_and_value(option: str, item: str, part: str, example: str) -> tuple[str, float]:
    """One NAME=VALUE of ``item`` given to ``option``; malformed or non-finite is an input error."""
    name, sep, text = part.partition("=")
    name = name.strip()
    if not sep or not name:
        raise InputError(f"{option} '{item}': write NAME=VALUE, e.g. {example}")
    try:
        value = float(text)
    except ValueError:
        raise InputError(f"{option} '{item}': '{text}' is not a number") from None
    if not math.isfinite(value):
        raise InputError(f"{option} '{item}': give a finite number for '{name}'")
    return name, value


def parse_settings(items: list[str]) -> dict[str, float]:
    """--set items to {name: value}; a malformed item or a non-finite value is an input error."""
    return dict(name_and_value("--set", item, item, "--set mu=2.5") for item in items)


def parse_box(items: list[str], option: str = "--box") -> dict[str, tuple[float, float]]:
    """'x=-3:3' items to {'x': (-3.0, 3.0)}; a malformed item is an input error naming ``option``
    (``--box`` of basin and verify, and report's ``--basin`` and ``--sweep``)."""
    box: dict[str, tuple[float, float]] = {}
    for item in items:
        name, sep, span = item.partition("=")
        low_text, colon, high_text = span.partition(":")
        if not sep or not colon or not name.strip():
            raise InputError(f"{option} '{item}': write NAME=LOW:HIGH, e.g. {option} x=-3:3")
        try:
            low, high = float(low_text), float(high_text)
        except ValueError:
            raise InputError(f"{option} '{item}': '{low_text}' and '{high_text}' must be numbers") from None
        if not (math.isfinite(low) and math.isfinite(high) and low < high):
            raise InputError(f"{option} '{item}': give finite numbers with LOW below HIGH")
        if name.strip() in box:
            raise InputError(f"{option} gives '{name.strip()}' twice")
        box[name.strip()] = (low, high)
    return box
