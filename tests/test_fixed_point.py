"""The fixed-point plan: the format covers the cycle with the stated margin, a format that cannot
hold the cycle is refused with what to do, and the integer map tracks the float step map."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from gen import golden
from gen.errors import InputError
from gen.lowering import evaluate_real
from gen.pipeline import design


def test_format_covers_the_cycle_with_the_margin(vanderpol_design) -> None:
    plan = vanderpol_design.plan
    assert plan.largest_signal * plan.margin < plan.signal_format.largest
    # One bit fewer of integer part would not hold largest * margin.
    assert plan.largest_signal * plan.margin >= plan.signal_format.largest / 2
    assert plan.program.is_planned


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
