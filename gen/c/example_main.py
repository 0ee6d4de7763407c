"""The example firmware entry point (``NAME_example_main.c``, ``gen --example TARGET``): a timer
interrupt calls the step at the model's loop rate, the main loop hands a copy of the state to a
placeholder the user fills in. It runs the self-test before the timer starts and halts if it
fails, and halts when the state's saturated-step count leaves 0.

One template per timer family: the Cortex-M core's SysTick (any vendor's part) and the AVR's
Timer1 in CTC mode (ATmega328P and its kin). The file is a starting point for a firmware
project, not part of the shipped step.
"""

from __future__ import annotations

from orbitfix.gen.c.emit import environment, firmware_context
from orbitfix.gen.c.naming import CNames
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.definition import Model
from orbitfix.gen.program.fixed_point import FixedPointPlan
from orbitfix.gen.timing.integrators import Integrator
from orbitfix.gen.timing.step_size import Timing

TEMPLATES = {"cortex-m": "example_main_cortex_m.c.j2", "avr": "example_main_avr.c.j2"}
EXAMPLE_TARGETS = tuple(TEMPLATES)

# The AVR example's prescaler is chosen for this clock (16 MHz: the ATmega328P boards' usual
# crystal, common practice); the C refuses to build when its F_CPU needs another one.
AVR_ASSUMED_F_CPU = 16_000_000
# Timer1's clock-select prescalers and their CS1[2:0] bits (ATmega328P datasheet, Timer/Counter1's
# clock select bits; from memory).
AVR_PRESCALERS = ((1, ("CS10",)), (8, ("CS11",)), (64, ("CS11", "CS10")), (256, ("CS12",)),
                  (1024, ("CS12", "CS10")))
AVR_TIMER_COUNTS = 1 << 16  # OCR1A + 1 counts per period, OCR1A being 16 bits


def loop_rate(model: Model, hz: float) -> int:
    """The loop rate ``hz`` as a whole number of Hz, which a timer divides its clock by; a
    fractional rate is refused (the timer could not keep it, and the rhythm would be off)."""
    if hz != int(hz) or hz < 1:
        raise InputError(f"model '{model.name}': --example needs a whole loop rate in Hz (a timer "
                         f"divides its clock by it), but loop_hz is {hz:g}; set [rhythm] loop_hz "
                         "to a whole number")
    return int(hz)


def check_example(model: Model, target: str) -> None:
    """Refuse, before any design work, an example gen could not write."""
    if target not in TEMPLATES:
        raise InputError(f"--example {target!r} is not a known target; choose one of "
                         f"{', '.join(EXAMPLE_TARGETS)}")
    rate = loop_rate(model, model.rhythm.loop_hz)
    if target == "avr":
        avr_prescaler(rate)


def avr_prescaler(loop_hz: int, f_cpu: int = AVR_ASSUMED_F_CPU) -> tuple[int, tuple[str, ...]]:
    """Timer1's prescaler for ``loop_hz`` at ``f_cpu``: the smallest whose period fits OCR1A's 16
    bits, preferring one that divides the clock exactly (the rate is then exact)."""
    fitting = [(p, bits) for p, bits in AVR_PRESCALERS if 2 <= f_cpu // (p * loop_hz) <= AVR_TIMER_COUNTS]
    exact = [(p, bits) for p, bits in fitting if f_cpu % (p * loop_hz) == 0]
    if not fitting:
        raise InputError(f"--example avr: no Timer1 prescaler gives {loop_hz} Hz from "
                         f"{f_cpu / 1e6:g} MHz with a 16-bit compare value; choose a loop rate "
                         f"between {f_cpu // (1024 * AVR_TIMER_COUNTS) + 1} and {f_cpu // 2} Hz")
    return (exact or fitting)[0]


def render_example_main(model: Model, timing: Timing, integrator: Integrator, plan: FixedPointPlan,
                        target: str) -> dict[str, str]:
    """``NAME_example_main.c`` for ``target`` (one of EXAMPLE_TARGETS)."""
    check_example(model, target)
    names = CNames(model.name)
    rate = loop_rate(model, timing.loop_hz)  # the rate the step was planned for
    context = {**firmware_context(model, timing, integrator, plan), "loop_hz": rate,
               "loop_period_us": 1e6 / rate}
    if target == "avr":
        prescaler, bits = avr_prescaler(rate)
        context.update(prescaler=prescaler, clock_select=bits, assumed_f_cpu=AVR_ASSUMED_F_CPU,
                       timer_counts=AVR_ASSUMED_F_CPU // (prescaler * rate))
    template = environment().get_template(TEMPLATES[target])
    return {names.example_source: template.render(context)}
