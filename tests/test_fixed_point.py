"""The fixed-point plan: the format covers the cycle with the stated margin, a format that cannot
hold the cycle is refused with what to do, and the integer map tracks the float step map."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from orbitfix.gen.errors import InputError
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.gen.program.lowering import evaluate_real


def test_every_format_holds_its_sure_bound_with_the_margin(vanderpol_design) -> None:
    plan = vanderpol_design.plan
    assert plan.program.is_planned
    for row in plan.signal_table():
        peak = max(abs(row["sure_min"]), abs(row["sure_max"]))
        fmt = plan.value_format(row["value"])
        # every format holds its sure bound times the margin (a constant holds its own value)
        assert peak * (1 if row["kind"] == "const" else plan.margin) <= fmt.largest
        # the range met on the cycle lies inside the sure bound (interval arithmetic is sound)
        assert row["sure_min"] <= row["min"] + 1e-12 and row["max"] <= row["sure_max"] + 1e-12
    states = [r for r in plan.signal_table() if r["kind"] == "state"]
    assert all(r["headroom_bits"] >= 1 for r in states)  # margin 2 = one bit over the box


def test_sure_bounds_hold_for_random_states_in_the_box(vanderpol_design) -> None:
    # Sampling check of soundness: no value of one step from a state in the box leaves its bound.
    plan = vanderpol_design.plan
    rng = np.random.default_rng(3)
    low = np.array([b[0] for b in plan.box])
    high = np.array([b[1] for b in plan.box])
    states = rng.uniform(low[:, None], high[:, None], size=(2, 20000))
    for value, (lo, hi) in zip(evaluate_real(plan.program, states), plan.sure_bounds, strict=True):
        assert lo - 1e-9 <= value.min() and value.max() <= hi + 1e-9


def test_constant_reports_are_exact(vanderpol_design) -> None:
    for c in vanderpol_design.plan.constants:
        exact = Fraction(c.stored, 1 << c.format.fraction_bits)
        assert Fraction(c.represents) == exact
        assert abs(Fraction(c.real) - exact) <= Fraction(1, 1 << (c.format.fraction_bits + 1))
        assert abs(c.stored) < 1 << 31


def test_too_many_fraction_bits_is_refused_with_the_limit(vanderpol_design) -> None:
    model = vanderpol_design.model.with_fixed_point(fraction_bits=30)
    with pytest.raises(InputError, match=r"Q2\.30 overflows: .* use at most \d+ fraction bits"):
        design(model, analysis=vanderpol_design.analysis)


def test_integer_map_tracks_the_float_step_map(vanderpol_design) -> None:
    plan = vanderpol_design.plan
    program = plan.program
    scale = 2.0 ** plan.signal_format.fraction_bits
    ints = golden.run(program, np.array(plan.initial_state), 2000)
    x = vanderpol_design.model.initial_state.reshape(-1, 1)
    floats = [x[:, 0]]
    for _ in range(2000):
        values = evaluate_real(program, x)
        x = np.stack([values[i] for i in program.next_state])
        floats.append(x[:, 0])
    error = np.max(np.abs(ints / scale - np.array(floats)))
    assert error < 1e-5  # quantisation drift over 3 cycles stays far below the signal's size
