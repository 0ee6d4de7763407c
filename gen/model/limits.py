"""The accepted range of every number a user gives: one room, read by the model file reader, the
Python model builder, ``--set`` overrides and the expression parser, so a value outside the range
is refused with the same words wherever it comes from.

The ranges are wide enough for any rhythm generator on a motor controller and narrow enough that
the analysis, the step size and the fixed-point plan stay inside float64 and the machine: a
parameter of 1e308 overflows the first product of the analysis, a loop of 1e9 Hz asks the
verification for a billion steps per second of loop time.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from orbitfix.gen.errors import InputError


@dataclass(frozen=True)
class Limit:
    """The accepted range of one kind of number.

    low, high : float -- the accepted magnitudes (``signed``) or values, both inclusive.
    signed : bool -- the number may be negative; low and high then bound its magnitude.
    zero : bool -- zero is accepted besides the range.
    unit : str -- shown after the numbers ("Hz", "").
    what : str -- what the number is, for the message ("a parameter value").
    """

    low: float
    high: float
    signed: bool = False
    zero: bool = False
    unit: str = ""
    what: str = "a number"

    def accepts(self, value: float) -> bool:
        if isinstance(value, bool) or not isinstance(value, int | float):
            return False
        try:
            value = float(value)
        except OverflowError:  # an integer beyond float64
            return False
        if not math.isfinite(value):
            return False
        if value == 0:
            return self.zero
        if value < 0 and not self.signed:
            return False
        return self.low <= abs(value) <= self.high

    def accepted(self) -> str:
        """What is accepted, in words."""
        unit = f" {self.unit}" if self.unit else ""
        if self.signed and self.low == 0:
            return f"a finite number of magnitude up to {self.high:g}{unit}"
        if self.signed:
            text = f"a finite number of magnitude {self.low:g} to {self.high:g}{unit}"
        else:
            text = f"a finite number from {self.low:g} to {self.high:g}{unit}"
        return text + (", or 0" if self.zero else "")


# Every user-given magnitude of the equations: parameter values, runtime ranges, literals. No
# smallest magnitude: a sweep bisects through zero, and a constant too small for its format is
# refused by the plan (it would quantise to zero), where the format is known.
PARAMETER = Limit(0.0, 1e6, signed=True, zero=True, what="a parameter value")
# Initial values of the states.
INITIAL = Limit(1e-12, 1e6, signed=True, zero=True, what="an initial value")
# A number written inside an equation.
LITERAL = Limit(1e-9, 1e9, signed=True, zero=True, what="a number in an equation")
# Integer powers x**n: each is lowered to repeated products.
EXPONENT = Limit(1, 32, signed=True, zero=True, what="a power's exponent")
# The rhythm: from a cycle every few hours to a fast vibration drive.
CYCLE_HZ = Limit(1e-4, 1e5, unit="Hz", what="cycle_hz, the cycle frequency")
# A control loop on a microcontroller: from one call every 1000 s to one per microsecond.
LOOP_HZ = Limit(1e-3, 1e6, unit="Hz", what="loop_hz, the control-loop rate")
# Loop calls per cycle: at least 4 to step a cycle at all; above a million the step constants of a
# 32-bit word keep fewer than 12 significant bits.
STEPS_PER_CYCLE = Limit(4, 1e6, what="steps per cycle (loop_hz / cycle_hz)")
# The fixed-point range margin: every format holds its value's bound times this (2 = one bit).
MARGIN = Limit(1, 1024, what="the range margin")
# How fast a runtime parameter may move, in its units per second.
RATE = Limit(1e-9, 1e9, unit="units per second", what="a runtime parameter's rate (positive)")
# Fraction bits the user may ask for (the plan checks them against the word size too).
FRACTION_BITS = Limit(1, 63, what="fraction_bits")
# Networks: how many oscillators a network file may build, and the size of a lag or coupling.
OSCILLATORS = Limit(2, 64, what="the number of oscillators in a network")
LAG = Limit(1e-9, 1e3, signed=True, zero=True, what="a lag in cycles")
COUPLING = Limit(1e-6, 1e6, signed=True, zero=True, what="a coupling strength")
# Outputs to actuators: the scale and offset to the actuator's unit and its limits, in that unit.
OUTPUT_NUMBER = Limit(0.0, 1e6, signed=True, zero=True,
                      what="an output's scale, offset or limit (in the actuator's unit)")
# How fast an output may move, in the actuator's units per second.
SLEW = Limit(1e-9, 1e9, unit="units per second", what="an output's slew limit (positive)")


def check(value: object, limit: Limit, where: str) -> float:
    """``value`` as a float if ``limit`` accepts it; else an InputError naming ``where`` (the file
    and key, or the option) and what is accepted."""
    if not limit.accepts(value):  # type: ignore[arg-type]
        raise InputError(f"{where}: {_shown(value)} is not accepted as {limit.what}; accepted: "
                         f"{limit.accepted()}")
    return float(value)  # type: ignore[arg-type]


def problem(value: object, limit: Limit) -> str | None:
    """None if ``limit`` accepts ``value``, else the complaint without a place (for callers that
    locate it themselves, such as the model file reader)."""
    if limit.accepts(value):  # type: ignore[arg-type]
        return None
    return f"{_shown(value)} is not accepted as {limit.what}"


def _shown(value: object) -> str:
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) > 10**15:
        return f"an integer of {len(str(abs(value)))} digits"
    if isinstance(value, float):
        return f"{value:g}"
    return repr(value)

# The integer semantics a model may ask for (the model file's [fixed_point], the options, the
# integer program): the first of each is the default, but for the rounding (half-up).
WORD_SIZES = (16, 32)
ROUNDINGS = ("truncate", "half-up", "half-even", "mixed")
OVERFLOWS = ("saturate", "wrap")
