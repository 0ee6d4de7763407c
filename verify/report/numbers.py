"""Numbers printed to the digits that are known, no more."""

from __future__ import annotations

import math


def to_tolerance(value: float, tolerance: float) -> str:
    """``value`` rounded to the decade of ``tolerance`` (its known digits), with the tolerance:
    ``to_tolerance(4.66e-11, 4e-10)`` is ``'0 ± 4e-10'``, ``to_tolerance(1.2345678, 1e-4)``
    is ``'1.2346 ± 1e-04'``."""
    if not (math.isfinite(value) and math.isfinite(tolerance) and tolerance > 0):
        return f"{value:.6g}"
    if abs(value) <= tolerance:  # zero lies within what is known
        return f"0 ± {tolerance:.0e}"
    decimals = max(0, -math.floor(math.log10(tolerance)))
    text = f"{round(value, decimals):.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    if text in ("-0", ""):
        text = "0"
    return f"{text} ± {tolerance:.0e}"
