"""The golden interpreter's arithmetic rules against exact rational arithmetic (Python's
``fractions``, the reference library), at the ties, negative ties included."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest

from orbitfix.gen.program import golden
from orbitfix.gen.program.integer_program import IntegerProgram, Op
from orbitfix.gen.program.quantisation import quantise


def half_up(value: Fraction) -> int:
    """Round half up: ties go toward plus infinity (common practice: floor(v + 1/2))."""
    return math.floor(value + Fraction(1, 2))


# The three rounding rules, each written from its definition on exact rationals.
EXACT_ROUNDING = {
    "truncate": math.floor,      # toward minus infinity (common practice for a shift right)
    "half-up": half_up,
    "half-even": round,          # Python's round() of a Fraction: nearest, ties to even
}


def tie_products(shift: int) -> list[int]:
    half = 1 << (shift - 1)
    base = [0, 1, -1, half, -half, 3 * half, -3 * half, half - 1, -half + 1, half + 1, -half - 1]
    more = [k * (1 << shift) + d for k in (-5, 5, 1 << 20, -(1 << 20))
            for d in (half, -half, half - 1, half + 1)]
    # A product of two 32-bit words never exceeds 2**62 in magnitude.
    return [p for p in base + more if abs(p) <= 1 << 62]


@pytest.mark.parametrize("rounding", list(EXACT_ROUNDING))
@pytest.mark.parametrize("shift", [1, 2, 15, 26, 31, 40, 62])
def test_rounding_matches_fractions_at_ties(shift: int, rounding: str) -> None:
    rng = np.random.default_rng(shift)
    products = tie_products(shift) + [int(v) for v in rng.integers(-(1 << 62), 1 << 62, 2000)]
    got = golden.round_shift(np.array(products, dtype=np.int64), shift, rounding)
    want = [EXACT_ROUNDING[rounding](Fraction(p, 1 << shift)) for p in products]
    assert got.tolist() == want


def test_half_even_sends_ties_to_the_even_neighbour() -> None:
    # 0.5 -> 0, 1.5 -> 2, 2.5 -> 2, -0.5 -> 0, -1.5 -> -2, -2.5 -> -2 (common practice).
    got = golden.round_shift(np.array([1, 3, 5, -1, -3, -5], dtype=np.int64), 1, "half-even")
    assert got.tolist() == [0, 2, 2, 0, -2, -2]


def test_round_half_up_ties_go_up_for_negative_values_too() -> None:
    # -2.5 -> -2 and 2.5 -> 3 (round half up, common practice).
    got = golden.round_shift(np.array([-5, 5, -3, 3], dtype=np.int64), 1, "half-up")
    assert got.tolist() == [-2, 3, -1, 2]


def test_constants_round_to_nearest_ties_to_even() -> None:
    # Python's round() of a Fraction rounds ties to even (reference library behaviour).
    assert [quantise(v, 0) for v in (2.5, 3.5, -2.5, -3.5, 2.4999, -2.5001)] == [2, 4, -2, -4, 2, -3]
    assert quantise(0.1, 24) == round(Fraction(0.1) * (1 << 24))


def small_program(kind: str, args: tuple[int, ...], word_bits: int = 32, overflow: str = "saturate",
                  **fields: int) -> IntegerProgram:
    if kind in ("add", "sub", "min", "max"):
        fields = {"align": (0, 0), "shift": 0, **fields}
    elif kind in ("neg", "abs"):
        fields = {"shift": 0, **fields}
    ops = (Op("state", state=0, fraction_bits=24), Op("state", state=1, fraction_bits=24),
           Op(kind, args, fraction_bits=24, **fields))
    return IntegerProgram(name="t", state_names=("a", "b"), ops=ops, next_state=(2, 1),
                          word_bits=word_bits, product_bits=2 * word_bits, overflow=overflow,
                          state_fraction_bits=(24, 24))


def edges(bits: int) -> list[int]:
    low, high = -(1 << (bits - 1)), (1 << (bits - 1)) - 1
    return [low, low + 1, -1, 0, 1, high - 1, high, 1 << (bits - 8), -(1 << (bits - 8))]


def exact(kind: str, a: int, b: int, shift: int) -> int:
    return {"add": a + b, "sub": a - b, "neg": -a, "abs": abs(a), "min": min(a, b),
            "max": max(a, b), "mul": half_up(Fraction(a * b, 1 << shift))}[kind]


def into_word(value: int, bits: int, overflow: str) -> int:
    """Clamp, or reduce modulo 2**bits into [-2**(bits-1), 2**(bits-1)) (two's complement wrap,
    common practice)."""
    low, high = -(1 << (bits - 1)), (1 << (bits - 1)) - 1
    if overflow == "saturate":
        return min(max(value, low), high)
    return (value - low) % (1 << bits) + low


@pytest.mark.parametrize("overflow", ["saturate", "wrap"])
@pytest.mark.parametrize("bits", [16, 32])
@pytest.mark.parametrize("kind", ["add", "sub", "neg", "abs", "min", "max", "mul"])
def test_every_operation_fits_the_word_by_its_overflow_rule(kind: str, bits: int,
                                                           overflow: str) -> None:
    shift = bits - 8
    pairs = [(a, b) for a in edges(bits) for b in edges(bits)]
    args = (0,) if kind in ("neg", "abs") else (0, 1)
    program = small_program(kind, args, bits, overflow, **({"shift": shift} if kind == "mul" else {}))
    states = np.array(pairs, dtype=np.int64).T
    got = golden.step(program, states)[0]
    want = [into_word(exact(kind, a, b, shift), bits, overflow) for a, b in pairs]
    assert got.tolist() == want


@pytest.mark.parametrize("kind", ["add", "sub", "min", "max"])
def test_aligned_operands_are_exact_before_one_rounding(kind: str) -> None:
    # Reference: exact rationals. a has 20 fraction bits, b has 24; the result keeps 22.
    program = small_program(kind, (0, 1), align=(4, 0), shift=2)
    rng = np.random.default_rng(7)
    states = rng.integers(-(1 << 26), 1 << 26, size=(2, 3000))
    got = golden.step(program, states)[0]
    op = {"add": lambda x, y: x + y, "sub": lambda x, y: x - y, "min": min, "max": max}[kind]
    want = [half_up(op(Fraction(int(a), 1 << 20), Fraction(int(b), 1 << 24)) * (1 << 22))
            for a, b in states.T]
    assert got.tolist() == want


def test_scale_uses_the_constants_own_shift() -> None:
    program = small_program("scale", (0,), constant=3 << 29, shift=31)  # 0.75 in Q1.31
    states = np.array([[1 << 24, -(1 << 24), 3, -3, 5], [0] * 5], dtype=np.int64)
    got = golden.step(program, states)[0]
    want = [half_up(Fraction(a * (3 << 29), 1 << 31)) for a in states[0]]
    assert got.tolist() == want


@pytest.mark.parametrize("overflow", ["saturate", "wrap"])
@pytest.mark.parametrize("bits", [16, 32])
def test_one_value_fits_the_word_as_it_does_in_a_batch(overflow: str, bits: int) -> None:
    """fit_word's short cut for a single value: the same result and the same mark as the value
    gets inside a batch, at the word's edges and just beyond them (the rule: clamp to, or reduce
    modulo 2**bits into, [-2**(bits-1), 2**(bits-1) - 1], common practice for two's complement)."""
    top = 1 << (bits - 1)
    edges = np.array([-top - 1, -top, -top + 1, -1, 0, 1, top - 2, top - 1, top, 3 * top],
                     dtype=np.int64)
    marks = np.zeros(edges.size, dtype=bool)
    batch = golden.fit_word(edges.copy(), bits, overflow, marks)
    for value, fitted, marked in zip(edges, batch, marks, strict=True):
        mark = np.zeros(1, dtype=bool)
        one = golden.fit_word(np.array([value]), bits, overflow, mark)
        assert (int(one[0]), bool(mark[0])) == (int(fitted), bool(marked))
        wanted = (min(max(int(value), -top), top - 1) if overflow == "saturate"
                  else (int(value) + top) % (2 * top) - top)
        assert int(one[0]) == wanted
        assert bool(mark[0]) == (overflow == "saturate" and wanted != value)
