"""Time scaling: from the model's own period and the wanted rhythm to the integrator's step size.

One model period must last ``1 / cycle_hz`` seconds on the machine, and the step function is called
``loop_hz`` times a second, so one call advances model time by ``period * cycle_hz / loop_hz``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from orbitfix.gen.model.definition import Model

# The period is rounded before it sets the step, so the generated constants do not depend on the
# last digits of an ODE solve and the same model gives the same C on every machine.
PERIOD_DIGITS = 10


@dataclass(frozen=True)
class Timing:
    """How model time maps onto control-loop steps.

    model_period : float, model time units -- the cycle's period in the equations' own time.
    time_scale : float, model time units per second.
    step : float, model time units -- how far one call of the step function advances.
    steps_per_cycle : float -- loop calls in one cycle.
    """

    model_period: float
    cycle_hz: float
    loop_hz: float
    time_scale: float
    step: float
    steps_per_cycle: float

    def to_json(self) -> dict:
        return {
            "model_period": self.model_period,
            "cycle_hz": self.cycle_hz,
            "loop_hz": self.loop_hz,
            "time_scale": self.time_scale,
            "step": self.step,
            "steps_per_cycle": self.steps_per_cycle,
        }


def plan_timing(model: Model, period: float) -> Timing:
    """Derive the step size from the cycle's period (model time) and the model's rhythm."""
    rounded = float(f"{period:.{PERIOD_DIGITS - 1}e}")
    scale = rounded * model.rhythm.cycle_hz
    step = scale / model.rhythm.loop_hz
    if not (math.isfinite(step) and step > 0):
        raise ValueError(f"period {period} gives no usable step")
    return Timing(
        model_period=rounded,
        cycle_hz=model.rhythm.cycle_hz,
        loop_hz=model.rhythm.loop_hz,
        time_scale=scale,
        step=step,
        steps_per_cycle=model.rhythm.loop_hz / model.rhythm.cycle_hz,
    )
