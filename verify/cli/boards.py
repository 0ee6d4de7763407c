"""The ``boards`` verb: the board profiles this installation knows, and whether each one's tools
are installed, so a user sees what ``orbitfix board --board NAME`` can reach from this machine."""

from __future__ import annotations

import argparse
import json
from typing import Any

from orbitfix.verify.cli.options import plain_json
from orbitfix.verify.targets.board_profiles import all_profiles


def register(verbs: Any) -> None:
    """Add the ``boards`` sub-command to the command line's verb parsers."""
    parser = verbs.add_parser("boards", help="list the board profiles and whether their tools are installed")
    parser.add_argument("--json", action="store_true",
                        help="print a JSON list of {name, cpu, kind, tools_installed, ...}")
    parser.set_defaults(handler=_boards)


def board_list() -> list[dict]:
    """One plain-data entry per profile."""
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


def _boards(args: argparse.Namespace, partial: dict) -> int:
    entries = board_list()
    if args.json:
        print(json.dumps(plain_json(entries), indent=2))
        return 0
    width = max((len(e["name"]) for e in entries), default=4)
    count = f"{len(entries)} board profile" + ("" if len(entries) == 1 else "s")
    print(f"{count} (use the name with 'orbitfix board MODEL --board NAME'):")
    for e in entries:
        tools = "tools installed" if e["tools_installed"] else f"missing {', '.join(e['missing_tools'])}"
        print(f"  {e['name']:<{width}}  {e['cpu']:<11} {e['kind']:<8} int {e['int_bits']} bits, "
              f"cost in {e['cost_unit']}; {tools}")
        if e["install"]:
            print(f"  {'':<{width}}  to install: {e['install']}")
    return 0
