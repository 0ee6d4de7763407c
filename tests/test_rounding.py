"""The golden interpreter's arithmetic rules against exact rational arithmetic (Python's
``fractions``, the reference library), at the ties, negative ties included."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest

from gen import golden
from gen.fixed_point import quantise
from gen.integer_program import IntegerProgram, Op


def half_up(value: Fraction) -> int:
    """Round half up: ties go toward plus infinity (common practice: floor(v + 1/2))."""
    return math.floor(value + Fraction(1, 2))


def tie_products(shift: int) -> list[int]:
    half = 1 << (shift - 1)
    base = [0, 1, -1, half, -half, 3 * half, -3 * half, half - 1, -half + 1, half + 1, -half - 1]
    more = [k * (1 << shift) + d for k in (-5, 5, 1 << 20, -(1 << 20))
            for d in (half, -half, half - 1, half + 1)]
    # A product of two 32-bit words never exceeds 2**62 in magnitude.
    return [p for p in base + more if abs(p) <= 1 << 62]


@pytest.mark.parametrize("shift", [1, 2, 15, 26, 31, 40, 62])
def test_round_half_up_matches_fractions_at_ties(shift: int) -> None:
    rng = np.random.default_rng(shift)
    products = tie_products(shift) + [int(v) for v in rng.integers(-(1 << 62), 1 << 62, 2000)]
    got = golden.round_shift(np.array(products, dtype=np.int64), shift, "half-up")
    want = [half_up(Fraction(p, 1 << shift)) for p in products]
    assert got.tolist() == want


def test_round_half_up_ties_go_up_for_negative_values_too() -> None:
    # -2.5 -> -2 and 2.5 -> 3 (round half up, common practice).
    got = golden.round_shift(np.array([-5, 5, -3, 3], dtype=np.int64), 1, "half-up")
    assert got.tolist() == [-2, 3, -1, 2]


def test_constants_round_to_nearest_ties_to_even() -> None:
    # Python's round() of a Fraction rounds ties to even (reference library behaviour).
    assert [quantise(v, 0) for v in (2.5, 3.5, -2.5, -3.5, 2.4999, -2.5001)] == [2, 4, -2, -4, 2, -3]
    assert quantise(0.1, 24) == round(Fraction(0.1) * (1 << 24))


def small_program(kind: str, args: tuple[int, ...], **fields: int) -> IntegerProgram:
    ops = (Op("state", state=0, fraction_bits=24), Op("state", state=1, fraction_bits=24),
           Op(kind, args, fraction_bits=24, **fields))
    return IntegerProgram(name="t", state_names=("a", "b"), ops=ops, next_state=(2, 1),
                          state_fraction_bits=(24, 24))


WORD_MIN, WORD_MAX = -(1 << 31), (1 << 31) - 1
EDGES = [WORD_MIN, WORD_MIN + 1, -1, 0, 1, WORD_MAX - 1, WORD_MAX, 1 << 24, -(1 << 24)]


def exact(kind: str, a: int, b: int) -> Fraction:
    return {"add": Fraction(a + b), "sub": Fraction(a - b), "neg": Fraction(-a),
            "abs": Fraction(abs(a)), "min": Fraction(min(a, b)), "max": Fraction(max(a, b)),
            "mul": half_up(Fraction(a * b, 1 << 24))}[kind]


@pytest.mark.parametrize("kind", ["add", "sub", "neg", "abs", "min", "max", "mul"])
def test_every_operation_saturates_to_the_word(kind: str) -> None:
    pairs = [(a, b) for a in EDGES for b in EDGES]
    args = (0,) if kind in ("neg", "abs") else (0, 1)
    program = small_program(kind, args, **({"shift": 24} if kind == "mul" else {}))
    states = np.array(pairs, dtype=np.int64).T
    got = golden.step(program, states)[0]
    want = [min(max(exact(kind, a, b), WORD_MIN), WORD_MAX) for a, b in pairs]
    assert got.tolist() == want


def test_scale_uses_the_constants_own_shift() -> None:
    program = small_program("scale", (0,), constant=3 << 29, shift=31)  # 0.75 in Q1.31
    states = np.array([[1 << 24, -(1 << 24), 3, -3, 5], [0] * 5], dtype=np.int64)
    got = golden.step(program, states)[0]
    want = [half_up(Fraction(a * (3 << 29), 1 << 31)) for a in states[0]]
    assert got.tolist() == want
