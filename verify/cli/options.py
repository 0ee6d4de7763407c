"""What every verb of the command line shares: the model argument, --set, and plain JSON."""

from __future__ import annotations

import argparse
import math
from typing import Any

from orbitfix.gen.c.emit import SAFETY_NOTE
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.definition import Model
from orbitfix.gen.model.model_file import load_model

CAUTION = "Caution: " + SAFETY_NOTE


def add_model_arguments(parser: argparse.ArgumentParser, json_flag: bool = True) -> None:
    """The model argument, --set NAME=VALUE, and (optionally) --json."""
    parser.add_argument("model", help="a model file (.toml) or a built-in model name")
    parser.add_argument("--set", action="append", default=[], metavar="NAME=VALUE",
                        help="override a model parameter (repeatable)")
    if json_flag:
        parser.add_argument("--json", action="store_true", help="print one JSON object")


def model_from_args(args: argparse.Namespace) -> Model:
    """Load the model named on the command line, with --set and the fixed-point options applied."""
    model = load_model(args.model)
    overrides = {}
    for item in args.set:
        name, sep, value = item.partition("=")
        if not sep or not name.strip():
            raise InputError(f"--set '{item}': write NAME=VALUE, e.g. --set mu=2.5")
        try:
            number = float(value)
        except ValueError:
            raise InputError(f"--set '{item}': '{value}' is not a number") from None
        if not math.isfinite(number):
            raise InputError(f"--set '{item}': the value must be finite")
        overrides[name.strip()] = number
    model = model.with_parameters(overrides)
    changes: dict[str, Any] = {}
    if getattr(args, "integrator", None):
        changes["integrator"] = args.integrator
    for option in ("fraction_bits", "word_bits", "rounding", "overflow"):
        if getattr(args, option, None) is not None:
            changes[option] = getattr(args, option)
    return model.with_fixed_point(**changes) if changes else model


def plain_json(value: Any) -> Any:
    """JSON-safe copy: numpy scalars to Python, non-finite floats to strings."""
    if isinstance(value, dict):
        return {str(k): plain_json(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [plain_json(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, str):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return str(value)
    return value


def parse_box(items: list[str]) -> dict[str, tuple[float, float]]:
    """'x=-3:3' items to {'x': (-3.0, 3.0)}; a malformed item is an input error."""
    box: dict[str, tuple[float, float]] = {}
    for item in items:
        name, sep, span = item.partition("=")
        low_text, colon, high_text = span.partition(":")
        if not sep or not colon or not name.strip():
            raise InputError(f"--box '{item}': write NAME=LOW:HIGH, e.g. --box x=-3:3")
        try:
            low, high = float(low_text), float(high_text)
        except ValueError:
            raise InputError(f"--box '{item}': '{low_text}' and '{high_text}' must be numbers") from None
        if name.strip() in box:
            raise InputError(f"--box gives the state '{name.strip()}' twice")
        box[name.strip()] = (low, high)
    return box
