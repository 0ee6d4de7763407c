"""The ``report`` verb: run every stage ``verify`` runs (the continuous analysis, the plan, the
start-up path, dead zones, the host bit-exact proof, long-run drift, optionally the certificate)
and write DIR/report.html, one self-contained page with plots, and DIR/report.json, the data behind
it (verify/report/report_folder.py).

Exit codes: as ``verify`` (0 every check passed, 1 one failed; the report is written either way);
2 bad input, or a folder that cannot be written.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from orbitfix.verify.cli import verify


def register(verbs: Any) -> None:
    """Add the ``report`` verb to the command line."""
    parser = verbs.add_parser("report", help="run the checks of verify and write a self-contained "
                                             "HTML page with plots, and its JSON")
    verify.add_verify_arguments(parser)
    parser.add_argument("-o", "--output", dest="report", required=True, type=Path, metavar="DIR",
                        help="folder for report.html and report.json (created if missing)")
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace, partial: dict) -> int:
    """The checks of ``verify``; main.py writes the report from what they computed."""
    return verify.run(args, partial)
