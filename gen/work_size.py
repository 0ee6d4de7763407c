"""Work sized before it starts: estimates of the time and memory of every run whose size follows
from the input (steps per cycle, hours of loop time, numbers of states), and one refusal, with the
size it would need, when a run is beyond the machine; and, for the analysis, one array whose
length follows from the model (samples along a trajectory, a time grid), refused beyond
``LARGEST_ARRAY`` before it is made.

The costs per operation were measured on the project's two-core build machine (a Van der Pol rk4
step of 47 operations): the numpy float step map takes 1.3 to 2.1 us per operation and step, the
golden interpreter 14 us per operation and step plus 26 ns per operation and column, the compiled
C about 4.4 ns per operation and step. The constants below round those up, so a refusal is never
for work the machine could have done within the budget.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from orbitfix.gen.errors import InputError

SECONDS_PER_CORE = 20 * 60        # the longest run one verb may start, per core it uses
MEMORY_BYTES = 4 * 2**30          # the largest working set one run may allocate
LARGEST_ARRAY = 512 * 2**20       # bytes the analysis allows for one array (the machine's share)

FLOAT_OP_SECONDS = 2.5e-6         # numpy float step map, per operation and step
FLOAT_OP_COLUMN_SECONDS = 3e-9    # ... and per operation, step and column of the batch
GOLDEN_OP_SECONDS = 1.5e-5        # golden integer interpreter, per operation and step
GOLDEN_OP_COLUMN_SECONDS = 3e-8   # ... and per operation, step and column
C_OP_SECONDS = 6e-9               # compiled C on the host, per operation and step


@dataclass(frozen=True)
class Work:
    """The estimated size of one piece of work.

    what : str -- what the work is, for the message ("the drift runs").
    seconds : float -- estimated wall time on one core.
    bytes : float -- the largest working set it allocates at once.
    cores : int -- cores it spreads over (the time budget grows with them).
    """

    what: str
    seconds: float
    bytes: float = 0.0
    cores: int = 1

    def __add__(self, other: Work) -> Work:
        """Two pieces run one after the other: times add, memory is the larger."""
        return Work(f"{self.what} and {other.what}", self.seconds + other.seconds,
                    max(self.bytes, other.bytes), min(self.cores, other.cores))

    @property
    def fits(self) -> bool:
        return (self.seconds <= SECONDS_PER_CORE * max(1, self.cores)
                and self.bytes <= MEMORY_BYTES)

    def describe(self) -> str:
        if not math.isfinite(self.seconds):
            return f"more time than can be counted and {byte_text(self.bytes)} of memory"
        return f"about {_duration(self.seconds)} and {byte_text(self.bytes)} of memory"


def float_run(what: str, operations: int, steps: float, columns: int = 1,
              recorded_rows: float = 0.0, states: int = 1) -> Work:
    """The numpy float step map run ``steps`` times over ``columns`` states at once, keeping
    ``recorded_rows`` steps of all ``states`` (8 bytes each)."""
    seconds = steps * operations * (FLOAT_OP_SECONDS + FLOAT_OP_COLUMN_SECONDS * columns)
    return Work(what, seconds, recorded_rows * states * columns * 8.0)


def golden_run(what: str, operations: int, steps: float, columns: int = 1,
               recorded_rows: float = 0.0, states: int = 1) -> Work:
    """The golden integer interpreter, as :func:`float_run`."""
    seconds = steps * operations * (GOLDEN_OP_SECONDS + GOLDEN_OP_COLUMN_SECONDS * columns)
    return Work(what, seconds, recorded_rows * states * columns * 8.0)


def c_run(what: str, operations: int, steps: float) -> Work:
    """The compiled C stepping ``steps`` times (running statistics only, no record)."""
    return Work(what, steps * operations * C_OP_SECONDS, 0.0)


def bit_exact_work(operations: int, states: int, random_states: float, steps: float) -> Work:
    """The bit-exact proof: ``random_states`` one-step comparisons (all held at once, about 40
    bytes per state variable) and a ``steps``-step trajectory (C and golden, in fixed blocks)."""
    compared = random_states + steps
    seconds = compared * operations * (GOLDEN_OP_COLUMN_SECONDS + C_OP_SECONDS)
    return Work("the bit-exact comparison", seconds, random_states * states * 40.0)


def drift_work(operations: int, states: int, steps_per_cycle: float, loop_hz: float,
               hours: float, runs: int, reference_cycles: float, measured_cycles: float,
               reference_columns: int) -> Work:
    """The long-run drift proof: ``runs`` C runs of ``hours`` of loop time, and the float step
    map's reference run of ``reference_cycles`` cycles from ``reference_columns`` starts, the
    last ``measured_cycles`` of them recorded."""
    if not (isinstance(hours, int | float) and math.isfinite(hours) and hours > 0):
        raise InputError(f"--hours must be a positive number, got {hours!r}")
    steps = hours * 3600.0 * loop_hz
    runs_work = c_run(f"{runs} runs of {steps:,.0f} steps", operations, steps * runs)
    reference = float_run("the float step map's reference run", operations,
                          reference_cycles * steps_per_cycle, reference_columns,
                          measured_cycles * steps_per_cycle, states)
    total = runs_work + reference
    return Work("the drift proof", total.seconds, total.bytes)


def refuse_beyond_machine(work: Work, advice: str) -> None:
    """Raise an InputError (exit 2) saying what the work would need, when it is beyond the
    budget of this machine: SECONDS_PER_CORE per core and MEMORY_BYTES of memory."""
    if work.fits:
        return
    raise InputError(f"{work.what} would need {work.describe()}, beyond the "
                     f"{_duration(SECONDS_PER_CORE)} per core and {byte_text(MEMORY_BYTES)} this "
                     f"tool allows one run; {advice}")


def _duration(seconds: float) -> str:
    if not math.isfinite(seconds):
        return "unbounded time"
    for unit, size in (("days", 86400.0), ("hours", 3600.0), ("min", 60.0)):
        if seconds >= 2 * size:
            return f"{seconds / size:,.3g} {unit}"
    return f"{seconds:.3g} s"


def byte_text(count: float) -> str:
    """A number of bytes as '4.79 TiB', '512 MiB' or '96 bytes'."""
    if not math.isfinite(count):
        return "unbounded"
    for unit, size in (("TiB", 2.0**40), ("GiB", 2.0**30), ("MiB", 2.0**20), ("KiB", 2.0**10)):
        if count >= size:
            return f"{count / size:.3g} {unit}"
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
