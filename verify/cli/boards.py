"""The ``boards`` verb: the board profiles this installation knows, and whether each one's tools
are installed, so a user sees what ``orbitfix board --board NAME`` can reach from this machine."""

from __future__ import annotations

import argparse
from typing import Any


def register(verbs: Any) -> None:
    """Add the ``boards`` sub-command to the command line's verb parsers."""
    parser = verbs.add_parser("boards", help="list the board profiles and whether their tools are installed")
    parser.add_argument("--json", action="store_true",
                        help="print one JSON object whose key boards lists {name, cpu, kind, "
                             "tools_installed, ...}")
    parser.set_defaults(handler=run)


def board_list() -> list[dict]:
    """One plain-data entry per profile."""
    from orbitfix.verify.targets.board_profiles import all_profiles

    entries = []
    for profile in all_profiles():
        missing = profile.missing_tools()
        entries.append({
            "name": profile.name, "cpu": profile.cpu, "kind": profile.kind,
            "int_bits": profile.int_bits, "link": profile.link_kind, "cost_unit": profile.cost_unit,
            "tools_installed": not missing, "missing_tools": missing,
            "install": profile.install_hint() if missing else None,
            "description": profile.description,
        })
    return entries


def run(args: argparse.Namespace, partial: dict) -> int:
    from orbitfix.verify.report.board import board_list_lines
    from orbitfix.verify.report.json_output import json_text

    entries = board_list()
    if args.json:
        print(json_text(True, {"boards": entries}))
    else:
        print("\n".join(board_list_lines(entries)))
    return 0
