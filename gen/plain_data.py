"""The one number policy for plain data (JSON): numpy scalars become Python numbers, and a number
that is not finite (an underflowed logarithm, an orbit that never closed) becomes None (JSON null).

JSON has no NaN or infinity; writing them as strings would make every reader check the type of
every number, so "not a number" is written as "no number".
"""

from __future__ import annotations

import math
from typing import Any


def plain_data(value: Any) -> Any:
    """A JSON-safe copy of ``value``: dicts, lists and tuples copied recursively (keys as strings),
    numpy scalars and arrays to Python, complex numbers to [real, imag], non-finite floats to None."""
    if isinstance(value, dict):
        return {str(k): plain_data(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [plain_data(v) for v in value]
    if hasattr(value, "tolist") and not isinstance(value, str | bytes):
        return plain_data(value.tolist())  # numpy arrays and scalars
    if isinstance(value, bool) or value is None or isinstance(value, int | str):
        return value
    if isinstance(value, complex):
        return [plain_data(value.real), plain_data(value.imag)]
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    return value


def plain_number(value: Any) -> float | None:
    """One number under the policy: a finite float, or None for None and non-finite values."""
    return None if value is None else plain_data(float(value))
