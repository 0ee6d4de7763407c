"""The ``models`` verb: list the built-in models, one line each, or as JSON.

A user picking a rhythm generator wants to see what ships with the tool before writing a model file.
The list is read from the model files' own text (name, description, declared states and
parameters), without building the models: that keeps this verb as quick as ``--help``.
"""

from __future__ import annotations

import argparse
import tomllib
from pathlib import Path
from typing import Any


def register(verbs: Any) -> None:
    """Add the ``models`` verb to the command line."""
    parser = verbs.add_parser("models", help="list the built-in models (name, states, what each is for)")
    parser.add_argument("--json", action="store_true",
                        help="print one JSON object: ok, then models, a list of {name, description, "
                             "states, params, network}")
    parser.set_defaults(handler=run)


def library_folder() -> Path:
    """The folder of the built-in model files (package data of ``orbitfix.gen.model``)."""
    import orbitfix.gen.model

    return Path(next(iter(orbitfix.gen.model.__path__))) / "library"


def model_list() -> list[dict]:
    """One plain-data entry per built-in model, from its file: name, description, the declared state
    names (None for a network, whose states are built from its oscillators), parameter values, and
    the network's description (None for a single oscillator)."""
    from orbitfix.gen.model.gaits import GAITS

    entries = []
    for path in sorted(library_folder().glob("*.toml")):
        with path.open("rb") as handle:
            data = tomllib.load(handle)
        params = {name: (value.get("value") if isinstance(value, dict) else value)
                  for name, value in data.get("parameters", {}).items()}
        network = data.get("network")
        if network is not None:
            given = network
            network = {key: given[key] for key in ("oscillator", "pattern", "count", "labels",
                                                   "switch_to") if key in given}
            if "count" not in network:  # the oscillators of a gait, or of the lags or matrix given
                network["count"] = len(GAITS.get(given.get("pattern"), ())
                                       or given.get("lags", ()) or given.get("coupling", ()))
        entries.append({"name": path.stem, "description": data.get("description", ""),
                        "states": list(data["states"]) if "states" in data else None,
                        "params": params, "network": network})
    return entries


def run(args: argparse.Namespace, partial: dict) -> int:
    """List the models; exit 0."""
    from orbitfix.verify.report.json_output import json_text
    from orbitfix.verify.report.models import format_models

    entries = model_list()
    print(json_text(True, {"models": entries}) if args.json else format_models(entries))
    return 0
