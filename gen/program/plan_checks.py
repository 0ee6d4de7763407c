"""Checks of a finished fixed-point plan that refuse a plan which cannot do its job, whatever the
planner chose: today, a step constant that rounds to zero (the oscillator would never move, or a
term of its equations would vanish without a word)."""

from __future__ import annotations

from orbitfix.gen.errors import InputError
from orbitfix.gen.program.fixed_point import FixedPointPlan

MOST_LISTED = 4


def refuse_vanished_constants(plan: FixedPointPlan, model_name: str, steps_per_cycle: float) -> None:
    """Raise an InputError (exit 2) when a nonzero constant of the plan is stored as zero."""
    vanished = [c for c in plan.constants if c.real != 0 and c.stored == 0]
    if not vanished:
        return
    shown = ", ".join(f"{c.note} ({c.real:.3g} in {c.format.name})" for c in vanished[:MOST_LISTED])
    more = f" and {len(vanished) - MOST_LISTED} more" if len(vanished) > MOST_LISTED else ""
    word = plan.program.word_bits
    raise InputError(f"model '{model_name}': {len(vanished)} constant(s) of the {word}-bit step "
                     f"round to zero: {shown}{more}. At {steps_per_cycle:,.4g} steps per cycle "
                     "the step is too small for the word, or a parameter is too small beside "
                     "the others; lower loop_hz, raise cycle_hz, use a wider word or rescale the "
                     "model")
