"""The benchmarks' one switch: ``--quick`` on the command line, or ORBITFIX_BENCH_QUICK=1, runs a
benchmark at a tiny size, so CI runs every benchmark once and a stale one fails there instead of
rotting. Full size (no switch) is for ``make bench``, whose printed figures are the ones to quote.
"""

from __future__ import annotations

import os
import sys


def quick() -> bool:
    """True when the benchmark should run at its tiny size."""
    return "--quick" in sys.argv[1:] or os.environ.get("ORBITFIX_BENCH_QUICK", "") not in ("", "0")


def arguments() -> list[str]:
    """The command line's arguments other than ``--quick``."""
    return [a for a in sys.argv[1:] if a != "--quick"]


def pick(full: object, tiny: object) -> object:
    """``tiny`` in quick mode, else ``full``."""
    return tiny if quick() else full
