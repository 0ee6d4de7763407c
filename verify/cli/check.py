"""The ``check`` verb: analyse the continuous model (equilibria, the limit cycle, its Floquet
multipliers) before any code is made.

Exit codes: 0 a stable, isolated limit cycle; 1 none; 2 bad input.
"""

from __future__ import annotations

import argparse
from typing import Any

from orbitfix.verify.cli.options import add_model_arguments, model_from_args


def register(verbs: Any) -> None:
    """Add the ``check`` verb to the command line."""
    parser = verbs.add_parser("check", help="analyse the continuous model: equilibria and cycle")
    add_model_arguments(parser)
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace, partial: dict) -> int:
    """Analyse the model and print the report (or its JSON)."""
    from orbitfix.gen.analysis.summary import analyse
    from orbitfix.verify.report.analysis import format_report
    from orbitfix.verify.report.json_output import json_text

    analysis = analyse(model_from_args(args))
    if args.json:
        print(json_text(analysis.ok, analysis.to_json()))
    else:
        print(format_report(analysis))
    return 0 if analysis.ok else 1
