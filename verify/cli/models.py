"""The ``models`` verb: list the built-in models, one line each, or as JSON.

A user picking a rhythm generator wants to see what ships with the tool before writing a model file.
"""

from __future__ import annotations

import argparse
import json
from typing import Any

from orbitfix.gen.model.model_file import builtin_names, load_model
from orbitfix.verify.cli.options import plain_json


def register(verbs: Any) -> None:
    """Add the ``models`` sub-command to the command line's verb parsers."""
    parser = verbs.add_parser("models", help="list the built-in models (name, states, what each is for)")
    parser.add_argument("--json", action="store_true",
                        help="print a JSON list of {name, states, params, description}")
    parser.set_defaults(handler=_models)


def model_list() -> list[dict]:
    """One plain-data entry per built-in model: name, state names, parameter values, description."""
    entries = []
    for name in builtin_names():
        model = load_model(name)
        entries.append({"name": name, "states": list(model.state_names),
                        "params": model.parameter_values, "description": model.description})
    return entries


def _models(args: argparse.Namespace, partial: dict) -> int:
    entries = model_list()
    if args.json:
        print(json.dumps(plain_json(entries), indent=2))
        return 0
    width = max(len(e["name"]) for e in entries)
    print(f"{len(entries)} built-in models (use the name wherever a model file is accepted):")
    for entry in entries:
        count = len(entry["states"])
        states = ", ".join(entry["states"]) if count <= 4 else f"{count} states"
        print(f"  {entry['name']:<{width}}  [{states}]  {entry['description']}")
    return 0
