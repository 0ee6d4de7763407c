"""The one rule for turning a real number into an integer of a fixed-point format.

Every real-to-integer conversion of the house goes through here: stored constants, sine tables,
the cosine's phase offset, initial states and samples of the cycle. The rule is round to nearest,
ties to even, of real * 2**fraction_bits, computed exactly (common practice for quantising
constants; Python's ``round`` of a ``Fraction`` is exact and sends ties to even). A limit (a
clamp's bound, a rate's largest step) rounds inward instead, so that the stored limit is never
looser than the declared one: a low limit up, a high limit down.
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np


def quantise(real: float | Fraction, fraction_bits: int) -> int:
    """round(real * 2**fraction_bits), exact, ties to even."""
    return round(Fraction(real) * Fraction(2) ** fraction_bits)


def quantise_limit(real: float | Fraction, fraction_bits: int, side: str) -> int:
    """A limit's stored integer, exact: ceil(real * 2**fraction_bits) for a ``low`` limit (the
    least a value may be), floor for a ``high`` one (the most)."""
    scaled = Fraction(real) * Fraction(2) ** fraction_bits
    if side == "low":
        return math.ceil(scaled)
    if side == "high":
        return math.floor(scaled)
    raise ValueError(f"a limit is 'low' or 'high', got {side!r}")


def quantise_array(reals: np.ndarray, fraction_bits: int | np.ndarray) -> np.ndarray:
    """The same rule over an array (int64 out): ``quantise`` of every element.

    Scaling a float by a power of two is exact (short of overflow or underflow), and numpy's
    ``rint`` rounds ties to even, so this equals ``quantise`` element by element.
    fraction_bits : int, or ndarray broadcastable against ``reals`` (one per row, say).
    """
    scaled = np.ldexp(np.asarray(reals, dtype=float), np.asarray(fraction_bits))
    if not np.all(np.isfinite(scaled)):
        raise ValueError("cannot quantise a value that is not finite")
    if np.any(np.abs(scaled) >= 2.0**63):
        raise ValueError("a quantised value does not fit a 64-bit integer")
    return np.rint(scaled).astype(np.int64)
