"""Proof of fits: which results of a planned step can never leave the word, so that the step
needs no clamp there.

Interval arithmetic on the stored integers themselves (each kind's ``exact_bounds``, then the
program's one rounding rule, which is monotone): for every state within its range, a result
whose bounds lie inside the word is ``proven`` and enters the word by wrapping, which then never
acts. The ranges are the planning box, widened about its centre as far as the same results stay
proven. The step first holds each state in its range (``held`` on the state's load: a clamp, and
a saturated step when it acts), so every result after it is as proven. The formats already hold
every sure bound over the box times the margin, so at the box itself nearly every result is
proven; what is not keeps its clamp.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from orbitfix.gen.program import golden
from orbitfix.gen.program.integer_program import IntegerProgram
from orbitfix.gen.program.operations import kind_of

WIDENINGS = 12  # halvings of the search for the widest ranges that keep the proofs


def prove_fits(program: IntegerProgram, box: tuple[tuple[float, float], ...]) -> IntegerProgram:
    """``program`` with every state (but angles) ``held`` in the widest range about ``box``
    (model units) for which the results proven at the box stay proven, and those results
    marked ``proven``. A ``wrap`` program is returned with no holds and no proofs (its results
    wrap, which needs no proof)."""
    bare = without_proofs(program)
    if program.overflow != "saturate":
        return bare
    base = _state_ranges(bare, box, 1.0)
    proven = _proven(bare, base)
    low, high = 1.0, _widest_scale(bare, box)
    if proven <= _proven(bare, _state_ranges(bare, box, high)):
        low = high
    else:
        for _ in range(WIDENINGS):
            middle = 0.5 * (low + high)
            if proven <= _proven(bare, _state_ranges(bare, box, middle)):
                low = middle
            else:
                high = middle
    ranges = _state_ranges(bare, box, low)
    word = (program.word_min, program.word_max)
    ops = []
    for index, op in enumerate(bare.ops):
        if op.kind == "state" and ranges[op.state] != word:
            op = replace(op, held=ranges[op.state])
        ops.append(replace(op, proven=index in proven))
    return replace(program, ops=tuple(ops))


def without_proofs(program: IntegerProgram) -> IntegerProgram:
    """``program`` as the planner filled it: no held states, no proven results (every result
    clamped by the program's overflow rule)."""
    return replace(program, ops=tuple(replace(op, held=(), proven=False) for op in program.ops))


def held_ranges(program: IntegerProgram) -> list[tuple[int, int]]:
    """Each state's proven range (lowest, highest stored integer); the whole word for a state
    that is not held (an angle, or any state of a ``wrap`` program)."""
    return [op.held or (program.word_min, program.word_max)
            for op in program.ops if op.kind == "state"]


def value_bounds(program: IntegerProgram,
                 state_ranges: list[tuple[int, int]]) -> tuple[list[tuple[int, int]], set[int]]:
    """Sure integer bounds of every value of one step from any state within ``state_ranges``,
    and the values whose result is proven to fit the word (never clamped there)."""
    word = (program.word_min, program.word_max)
    bounds: list[tuple[int, int]] = []
    proven: set[int] = set()
    for index, op in enumerate(program.ops):
        kind = kind_of(op.kind)
        args = [bounds[i] for i in op.args]
        if op.kind == "state":
            bounds.append(state_ranges[op.state])
            continue
        low, high = (int(v) for v in kind.exact_bounds(op, args, program.word_bits))  # 0.0 -> 0
        if op.shift and not kind.rounds_itself:
            low, high = _rounded((low, high), op.shift, program.rounding_of(op))
        wraps = kind.fit_wraps(op)
        if wraps is None:
            bounds.append((low, high))
        elif program.fit_rule(wraps) == "wrap":
            bounds.append((low, high) if word[0] <= low and high <= word[1] else word)
        elif word[0] <= low and high <= word[1]:
            bounds.append((low, high))
            if kind.provable:
                proven.add(index)
        else:
            bounds.append((max(low, word[0]), min(high, word[1])))
    return bounds, proven


def _proven(program: IntegerProgram, ranges: list[tuple[int, int]]) -> set[int]:
    return value_bounds(program, ranges)[1]


def _rounded(values: tuple[int, int], shift: int, rounding: str) -> tuple[int, int]:
    """Both ends divided by 2**shift with the program's rounding (golden's own rule, exact on
    Python integers)."""
    low, high = golden.round_shift(np.array(values, dtype=object), shift, rounding)
    return int(low), int(high)


def _state_ranges(program: IntegerProgram, box: tuple[tuple[float, float], ...],
                  scale: float) -> list[tuple[int, int]]:
    """Each state's range in stored integers: the box widened about its centre by ``scale``,
    rounded outward and held in the word; an angle state (in turns) has the whole word."""
    word = (program.word_min, program.word_max)
    ranges = []
    for index, ((low, high), bits) in enumerate(zip(box, program.state_fraction_bits, strict=True)):
        if index in program.angle_states:
            ranges.append(word)
            continue
        centre, half = 0.5 * (low + high), 0.5 * (high - low) * scale
        lo = math.floor((centre - half) * 2.0 ** bits)
        hi = math.ceil((centre + half) * 2.0 ** bits)
        ranges.append((max(lo, word[0]), min(hi, word[1])))
    return ranges


def _widest_scale(program: IntegerProgram, box: tuple[tuple[float, float], ...]) -> float:
    """The widening at which every state's range has reached the word's edge."""
    widest = 1.0
    for index, ((low, high), bits) in enumerate(zip(box, program.state_fraction_bits, strict=True)):
        if index in program.angle_states or high <= low:
            continue
        centre, half = 0.5 * (low + high), 0.5 * (high - low)
        edge = (program.word_max + 1) / 2.0 ** bits
        widest = max(widest, (edge + abs(centre)) / half)
    return widest


def refuted_fits(program: IntegerProgram, states: np.ndarray) -> list[tuple[int, int]]:
    """The values whose sure integer bounds (``value_bounds``, which the proofs and the C's sums
    in the word rest on) fail from some of ``states``, and the values marked ``proven`` whose
    result leaves the word (found by running golden with and without the proofs: a clamp that
    acts where the proof said none was needed changes that value); each with the first such
    state's column. ``states``: int ndarray, shape (n_states, batch), within the ranges."""
    unproven = replace(program, ops=tuple(replace(op, proven=False) for op in program.ops))
    proven = golden.evaluate(program, states)
    clamped = golden.evaluate(unproven, states)
    bounds, _ = value_bounds(program, held_ranges(program))
    found = []
    for i, op in enumerate(program.ops):
        wrong = (proven[i] < bounds[i][0]) | (proven[i] > bounds[i][1])
        if op.proven:
            wrong |= proven[i] != clamped[i]
        if np.any(wrong):
            found.append((i, int(np.flatnonzero(wrong)[0])))
    return found


def range_corners_and_samples(program: IntegerProgram, count: int,
                              rng: np.random.Generator) -> np.ndarray:
    """States to test the proofs on: random states within the proven ranges and, for up to 12
    states, every corner of the ranges (else ``count`` more random corners). Shape (n_states, k)."""
    ranges = held_ranges(program)
    low = np.array([r[0] for r in ranges], dtype=np.int64)
    high = np.array([r[1] for r in ranges], dtype=np.int64)
    inside = rng.integers(low[:, None], high[:, None], size=(len(ranges), count), endpoint=True)
    if len(ranges) <= 12:
        picks = np.array(np.meshgrid(*([0, 1],) * len(ranges))).reshape(len(ranges), -1)
    else:
        picks = rng.integers(0, 2, size=(len(ranges), count))
    corners = np.where(picks == 1, high[:, None], low[:, None])
    return np.hstack([inside, corners])
