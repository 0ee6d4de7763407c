"""Work whose size follows from the input is sized before it starts.

An array the analysis makes from the model (samples along a trajectory, a time grid) can grow with
a parameter: an angle that turns a billion times faster than the rest of the motion asks for a
billion samples. Before such an array is made its size is worked out here, and beyond
``LARGEST_ARRAY`` the work is refused with the size it would need and what to change, instead of
failing in the middle with an allocation error or running for hours.
"""

from __future__ import annotations

import math

from orbitfix.gen.errors import InputError

LARGEST_ARRAY = 512 * 2**20    # bytes the analysis allows for one array (the machine's share)


def byte_text(count: float) -> str:
    """A number of bytes as '4.79 TiB', '512 MiB' or '96 bytes'."""
    for power, unit in ((40, "TiB"), (30, "GiB"), (20, "MiB"), (10, "KiB")):
        if count >= 2**power:
            return f"{count / 2**power:.3g} {unit}"
    return f"{count:.0f} bytes"


def refuse_oversized(values: float, what: str, advice: str, *, value_bytes: int = 8) -> None:
    """Raise InputError when ``values`` numbers of ``value_bytes`` each are more than one array may
    hold (or are not a finite count). ``what`` names the array, ``advice`` says what to change."""
    need = values * value_bytes
    if math.isfinite(need) and need <= LARGEST_ARRAY:
        return
    size = (f"{values:,.0f} values, {byte_text(need)}" if math.isfinite(need)
            else "an unbounded number of values")
    raise InputError(f"{what} would need {size}, more than the {byte_text(LARGEST_ARRAY)} the analysis "
                     f"allows for one array; {advice}")
