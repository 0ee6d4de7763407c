"""Property tests over every registered operation kind (``gen/program/operations.py``): the golden
rule is the real reading rounded once (checked with Python's ``fractions``, the reference library),
the interval rule encloses the real results, the format rule stays inside the word, and the C form
compiled on the host gives the golden bits value by value. A kind added to the registry is
covered here without a new test."""

from __future__ import annotations

import math
from dataclasses import replace
from fractions import Fraction

import numpy as np
import pytest

from orbitfix.gen.c.emit import render_host_harness, render_model, render_trace
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.program import golden
from orbitfix.gen.program.fixed_point import ConstantReport, FixedPointPlan, QFormat, integer_bits_for
from orbitfix.gen.program.integer_program import IntegerProgram, Op
from orbitfix.gen.program.operations import KINDS, TableSine, kind_of, sine_error_bound
from orbitfix.gen.program.quantisation import quantise, quantise_array
from orbitfix.gen.timing.integrators import EULER
from orbitfix.gen.timing.step_size import Timing
from orbitfix.verify.proofs.bit_exact import _c_trace_each
from orbitfix.verify.targets.host_build import build_host_module

SEMANTICS = [(w, r, o) for w in (16, 32) for r in ("truncate", "half-up", "half-even")
             for o in ("saturate", "wrap")]

# Each rounding rule written from its definition on exact rationals (common practice):
EXACT_ROUNDING = {
    "truncate": math.floor,                                   # toward minus infinity
    "half-up": lambda v: math.floor(v + Fraction(1, 2)),      # nearest, ties toward plus infinity
    "half-even": round,                                       # Python: nearest, ties to even
}


def into_word(value: int, bits: int, overflow: str) -> int:
    """Clamp, or reduce modulo 2**bits into [-2**(bits-1), 2**(bits-1)) (two's complement,
    common practice)."""
    low, high = -(1 << (bits - 1)), (1 << (bits - 1)) - 1
    if overflow == "saturate":
        return min(max(value, low), high)
    return (value - low) % (1 << bits) + low


# The weights a kind of any arity is tested with: RK4's (common practice: k1 + 2 k2 + 2 k3 + k4),
# on arguments that repeat, and a mixed-sign set.
WEIGHTS = {4: (1, 2, 2, 1), 3: (3, -1, 2)}


def plan_op(name: str, args: tuple[int, ...], f_args: list[int], w: int, natural: int,
            real: Fraction | None = None, wraps: bool = False) -> Op:
    """One operation planned by its kind's own format rule, as the planner would."""
    kind = kind_of(name)
    weights = WEIGHTS[len(args)] if kind.arity is None else ()
    op = Op(name, args, real=None if real is None else float(real), wraps=wraps, note=name,
            weights=weights)
    if kind.constant_role == "added":  # an added constant's format holds its value
        natural = min(natural, w - 1 - integer_bits_for(abs(op.real)))
    forced = w if wraps else kind.forced_bits(op, w, f_args)
    bits = forced if forced is not None else kind.first_bits(op, f_args, natural, w)
    bits = kind.settle_bits(op, bits, f_args, w)
    return replace(kind.fill(op, bits, f_args, w), fraction_bits=bits)


def operand_shapes(name: str, w: int) -> list[tuple[tuple[int, ...], bool]]:
    """(arguments, wraps) to test a kind with: plain values a and b (states 0 and 1), and for
    kinds that read angles or may wrap, the angle t (state 2, held in turns)."""
    kind = kind_of(name)
    if isinstance(kind, TableSine):
        return [((2,), False)]
    if kind.arity == 0:
        return [((), False)]
    if kind.arity is None:  # never an angle: integrators' increments
        return [((0, 1, 1, 0), False), ((1, 0, 0), False)]
    plain = (0, 1)[:kind.arity]
    return [(plain, False), ((2, 2)[:kind.arity], True)]


def small_dyadic(rng: np.random.Generator) -> Fraction:
    """A constant exactly representable in every format the tests use (8 fraction bits)."""
    return Fraction(int(rng.integers(-3000, 3000)) or 1, 256)


def one_kind_program(name: str, w: int, rounding: str, overflow: str, rng: np.random.Generator,
                     shape: tuple[tuple[int, ...], bool]) -> IntegerProgram:
    fa, fb = (int(v) for v in rng.integers(w // 2 - 2, w - 4, size=2))
    ops = [Op("state", state=0, fraction_bits=fa), Op("state", state=1, fraction_bits=fb),
           Op("state", state=2, fraction_bits=w)]
    args, wraps = shape
    formats = [fa, fb, w]
    if name == "state":
        tested = 0
    else:
        natural = int(rng.integers(8, w - 2))
        # a scaled sum's product holds the sum of any words times its constant: fewer bits
        real = small_dyadic(rng) if name != "scaled_sum" else Fraction(int(rng.integers(-40, 40))
                                                                       or 1, 8)
        ops.append(plan_op(name, args, [formats[i] for i in args], w, natural, real=real,
                           wraps=wraps))
        tested = 3
    return IntegerProgram(name="k", state_names=("a", "b", "t"), ops=tuple(ops),
                          next_state=(tested, 1, 2), word_bits=w, product_bits=2 * w,
                          rounding=rounding, overflow=overflow, state_fraction_bits=(fa, fb, w))


def word_states(program: IntegerProgram, rng: np.random.Generator, count: int) -> np.ndarray:
    w = program.word_bits
    low, high = program.word_min, program.word_max
    edges = np.array([low, low + 1, -1, 0, 1, high - 1, high], dtype=np.int64)
    spread = rng.integers(low, high, size=(3, count), endpoint=True)
    small = rng.integers(-(1 << (w // 2)), 1 << (w // 2), size=(3, count), endpoint=True)
    grid = np.array(np.meshgrid(edges, edges, edges)).reshape(3, -1)
    return np.hstack([spread, small, grid])


@pytest.mark.parametrize(("w", "rounding", "overflow"), SEMANTICS)
@pytest.mark.parametrize("name", list(KINDS))
def test_golden_rule_is_the_real_reading_rounded_once(name: str, w: int, rounding: str,
                                                      overflow: str) -> None:
    # Reference: Python's fractions. The real reading of the kind on the exact values of the
    # integer arguments, times 2**f of the result, rounded by the rule's definition and brought
    # into the word, must equal the golden bits. Table kinds are checked against numpy's sin and
    # cos within the stated error of the table instead.
    rng = np.random.default_rng(abs(hash((name, w, rounding, overflow))) % (1 << 32))
    kind = kind_of(name)
    for shape in operand_shapes(name, w):
        program = one_kind_program(name, w, rounding, overflow, rng, shape)
        op_index = program.next_state[0]
        op = program.ops[op_index]
        states = word_states(program, rng, 300)
        marks = np.zeros(states.shape[1], dtype=bool)
        batch = golden.evaluate(program, states, marks)
        got = batch[op_index]
        # A batch of one state runs on Python integers: the same bits and the same saturation mark.
        for column in range(0, states.shape[1], 7):
            mark = np.zeros(1, dtype=bool)
            one = golden.evaluate(program, states[:, column:column + 1], mark)
            assert [int(v[0]) for v in one] == [int(v[column]) for v in batch], (name, column)
            assert mark[0] == marks[column], (name, column)
        if isinstance(kind, TableSine):
            turns = states[2] / 2.0**w
            want = kind.real(op, [turns], states)
            error = np.max(np.abs(got / 2.0**op.fraction_bits - want))
            assert error <= sine_error_bound(w, op.fraction_bits), name
            continue
        exact_op = replace(op, real=Fraction(op.real) if op.real is not None else None)
        if kind.constant_role:  # the stored constant must stand for the real one exactly here
            own = kind.constant_bits(op, op.fraction_bits, w)
            assert Fraction(op.constant, 1 << own) == exact_op.real, name
        columns = [np.array([Fraction(int(v), 1 << bits) for v in row], dtype=object)
                   for row, bits in zip(states, program.state_fraction_bits, strict=True)]
        real = kind.real(exact_op, [columns[i] for i in op.args], np.array(columns, dtype=object))
        scale = 1 << op.fraction_bits
        rule = "wrap" if op.wraps else overflow
        want = [into_word(EXACT_ROUNDING[rounding](Fraction(v) * scale), w, rule) for v in real]
        assert got.tolist() == want, (name, shape)


@pytest.mark.parametrize("name", list(KINDS))
def test_interval_rule_encloses_every_real_result(name: str) -> None:
    # Random boxes, random points inside them (corners included): the real reading never leaves
    # the kind's interval (the definition of a sure bound).
    rng = np.random.default_rng(len(name))
    kind = kind_of(name)
    for trial in range(50):
        count = 3 if kind.arity is None else kind.arity
        arity = max(count, 1)
        lows = rng.uniform(-5, 5, size=3)
        highs = lows + rng.uniform(0, 5, size=3) * (trial % 5 != 0)  # some boxes are points
        args = (0, 0) if (name == "mul" and trial % 2) else tuple(range(count))
        op = Op(name, args, state=0 if name == "state" else None,
                real=float(rng.uniform(-3, 3)) if count < 2 or kind.constant_role else None,
                weights=WEIGHTS[count] if kind.arity is None else ())
        if isinstance(kind, TableSine):
            lows, highs = np.full(3, -0.5), np.full(3, 0.5)
        points = rng.uniform(lows[:, None], highs[:, None], size=(3, 400))
        points = np.hstack([points, np.array([lows, highs]).T, np.array([lows, lows]).T])
        if args == (0, 0):
            points[1] = points[0]
        bounds = [(float(lo), float(hi)) for lo, hi in zip(lows, highs, strict=True)]
        low, high = kind.interval(op, [bounds[i] for i in args], (lows, highs))
        values = kind.real(op, [points[i] for i in args][:arity] if count else [], points)
        slack = 1e-12 * (1 + max(abs(low), abs(high)))
        assert np.all(values >= low - slack) and np.all(values <= high + slack), (name, trial)


@pytest.mark.parametrize("w", [16, 32])
@pytest.mark.parametrize("name", list(KINDS))
def test_format_rule_keeps_shifts_and_alignments_inside_the_wide_type(name: str, w: int) -> None:
    # Common practice for double-width products: a shift is never negative and never reaches the
    # product width; no operand is moved left by more than word_bits - 2.
    rng = np.random.default_rng(w)
    for _ in range(40):
        for shape in operand_shapes(name, w):
            program = one_kind_program(name, w, "half-up", "saturate", rng, shape)
            op = program.ops[program.next_state[0]]
            assert 0 <= op.fraction_bits <= w
            if op.shift is not None:
                assert 0 <= op.shift <= 2 * w - 2, (name, op)
            assert all(0 <= k <= w - 2 for k in op.align), (name, op)
            if op.constant is not None:
                assert abs(op.constant) <= (1 << (w - 1)) - 1


def test_a_weighted_sum_keeps_its_aligned_terms_inside_the_wide_type() -> None:
    # Every aligned operand is below 2**(w - 1) * 2**(w - 2 - headroom); the weighted sum of them
    # (and the half added to round it) must stay below 2**(2w - 1), the product width's limit
    # (two's complement, common practice). The headroom must be the least that does it.
    kind = kind_of("scaled_sum")
    for weights in [(1, 1), (1, 2, 2, 1), (3, -1, 2), (1, 1, 1, 1, 1), (4, 4), (1, -7, 1, 1)]:
        op = Op("scaled_sum", tuple(range(len(weights))), weights=weights, real=0.5)
        total = sum(abs(w) for w in weights)
        e = kind.alignment_headroom(op)
        for w in (16, 32):
            assert total * 2 ** (2 * w - 3 - e) <= 2 ** (2 * w - 2), weights
            if e:
                assert total * 2 ** (2 * w - 3 - (e - 1)) > 2 ** (2 * w - 2), weights
    with pytest.raises(ValueError, match="one nonzero weight each"):
        Op("scaled_sum", (0, 1), weights=(1,))
    with pytest.raises(ValueError, match="no weights"):
        Op("add", (0, 1), weights=(1, 1))


def test_a_scaled_sum_of_any_words_times_its_constant_fits_the_product_width() -> None:
    # Two's complement (common practice): the exact sum times the constant must stay within
    # 2**(2w - 1) - 1 in magnitude for every word the arguments can hold (each at -2**(w - 1),
    # the largest magnitude), or the C product overflows (undefined) and golden's int64 wraps.
    # Computed on Python's integers, which do not overflow.
    kind = kind_of("scaled_sum")
    rng = np.random.default_rng(7)

    def worst(op, f_args, w, constant):
        top = max(f_args)
        return sum(abs(k) << (top - f) for k, f in zip(op.weights, f_args, strict=True)) \
            * (1 << (w - 1)) * abs(constant)

    h = 0.0099949302885  # the built-in Van der Pol's step at 1 kHz
    for w in (16, 32):
        cases = [((1, 2, 2, 1), [w - 5] * 4, h / 6), ((1, 1), [w - 4, w - 6], h / 2)]
        for _ in range(40):
            count = int(rng.integers(2, 6))
            weights = tuple(int(v) or 1 for v in rng.integers(-4, 5, size=count))
            cases.append((weights, [int(f) for f in rng.integers(w // 2, w - 2, size=count)],
                          float(rng.uniform(-3, 3))))
        for weights, f_args, real in cases:
            op = Op("scaled_sum", tuple(range(len(weights))), weights=weights, real=real)
            filled = kind.fill(op, max(f_args), f_args, w)
            own = kind.constant_bits(filled, max(f_args), w)
            assert filled.constant == quantise(real, own)
            assert abs(filled.constant) <= (1 << (w - 1)) - 1
            assert worst(op, f_args, w, filled.constant) <= (1 << (2 * w - 1)) - 1, (w, weights)
    # seeded fault: RK4's h/6 at 32 bits one fraction bit finer than chosen overflows
    op = Op("scaled_sum", (0, 1, 2, 3), weights=(1, 2, 2, 1), real=h / 6)
    own = kind.constant_bits(kind.fill(op, 27, [27] * 4, 32), 27, 32)
    assert worst(op, [27] * 4, 32, quantise(h / 6, own + 1)) > (1 << 63) - 1


def every_kind_design(w: int, rounding: str, overflow: str):
    """One program holding every registered kind (and its wrapping form where it has one), with
    a model, timing and plan around it so that the real emitter renders it."""
    rng = np.random.default_rng(w * 7 + len(rounding) + len(overflow))
    fa, fb = w - 6, w // 2
    formats = [fa, fb, w]
    ops = [Op("state", state=0, fraction_bits=fa, note="a"),
           Op("state", state=1, fraction_bits=fb, note="b"),
           Op("state", state=2, fraction_bits=w, note="t")]
    for name in KINDS:
        if name == "state":
            continue
        for args, wraps in operand_shapes(name, w):
            ops.append(plan_op(name, args, [formats[i] for i in args], w,
                               int(rng.integers(8, w - 2)), real=small_dyadic(rng), wraps=wraps))
    program = IntegerProgram(name="kinds", state_names=("a", "b", "phase"), ops=tuple(ops),
                             next_state=(len(ops) - 1, 1, 2), word_bits=w, product_bits=2 * w,
                             rounding=rounding, overflow=overflow, state_fraction_bits=(fa, fb, w))
    constants = []
    for index, op in enumerate(program.ops):
        kind = kind_of(op.kind)
        if kind.constant_role:
            constants.append(ConstantReport(index, op.note, op.real, op.constant,
                                            QFormat(w, kind.constant_bits(op, op.fraction_bits, w)),
                                            kind.constant_role))
    model = define_model("kinds", {"a": 0.0, "b": 0.0, "phase": 0.0}, {"a": "b", "b": "-a", "phase": "1"},
                         cycle_hz=1, loop_hz=100, angles=("phase",))
    plan = FixedPointPlan(signal_format=QFormat(w, fa), largest_signal=1.0,
                          largest_signal_note="a", margin=2.0, program=program,
                          constants=tuple(constants), initial_state=(0, 0, 0), warnings=())
    timing = Timing(model_period=1.0, cycle_hz=1.0, loop_hz=100.0, time_scale=1.0, step=0.01,
                    steps_per_cycle=100.0)
    return model, timing, plan


@pytest.mark.parametrize(("w", "rounding", "overflow"), SEMANTICS)
def test_every_kind_in_c_gives_the_golden_bits(w: int, rounding: str, overflow: str) -> None:
    # The C form of every registered kind, built on the host with the strict flags, against the
    # golden rule, value by value, over states spread across the whole word and its edges.
    model, timing, plan = every_kind_design(w, rounding, overflow)
    program = plan.program
    assert {op.kind for op in program.ops} == set(KINDS)
    files = {**render_model(model, timing, EULER, plan), **render_trace(model, timing, EULER, plan)}
    host = build_host_module(files, render_host_harness(model, program), "kinds.h")
    states = word_states(program, np.random.default_rng(w), 3000)
    out, trace = _c_trace_each(host, states)
    values = golden.evaluate(program, states)
    for index, (op, value) in enumerate(zip(program.ops, values, strict=True)):
        assert np.array_equal(trace[:, index], value), (index, op.kind, op.wraps)
    assert np.array_equal(out, golden.step(program, states))


def test_cosine_offset_is_a_quarter_turn_held_in_the_program() -> None:
    # cos(x) = sin(x + pi/2) (trigonometric identity): the planned cos carries a quarter of the
    # word as its offset, and the golden rule reads that field (a sin given the same offset is
    # the same operation).
    for w in (16, 32):
        cos = plan_op("cos", (0,), [w], w, 0)
        sin = plan_op("sin", (0,), [w], w, 0)
        assert (cos.offset, sin.offset) == (1 << (w - 2), 0)
        program = IntegerProgram(name="c", state_names=("t",), ops=(
            Op("state", state=0, fraction_bits=w), cos, replace(sin, offset=cos.offset), sin),
            next_state=(0,), word_bits=w, product_bits=2 * w, state_fraction_bits=(w,))
        # every 97th angle of the word, 2**20 of them at a time (at 32 bits the 44 million in
        # one batch took 3 GB and five times as long)
        same, differs = True, False
        for first in range(program.word_min, program.word_max, 97 << 20):
            angles = np.arange(first, min(first + (97 << 20), program.word_max), 97,
                               dtype=np.int64).reshape(1, -1)
            values = golden.evaluate(program, angles)
            same = same and np.array_equal(values[1], values[2])
            differs = differs or not np.array_equal(values[1], values[3])
        assert same
        assert differs


def test_golden_computes_in_the_program_product_width() -> None:
    # A 16-bit program's values are held in int32 (its product width), a 32-bit one's in int64.
    for w, dtype in ((16, np.int32), (32, np.int64)):
        program = IntegerProgram(name="p", state_names=("a",), ops=(
            Op("state", state=0, fraction_bits=w - 2),
            Op("mul", (0, 0), fraction_bits=w - 2, shift=w - 2)), next_state=(1,),
            word_bits=w, product_bits=2 * w, state_fraction_bits=(w - 2,))
        values = golden.evaluate(program, np.array([[1 << (w - 3), -(1 << (w - 2))]]))
        assert all(v.dtype == dtype for v in values)
        assert values[1].tolist() == [1 << (w - 4), 1 << (w - 2)]  # 0.25 and 1.0 in Q2.(w-2)
    with pytest.raises(ValueError, match="no numpy integer type"):
        golden.evaluate(replace(program, product_bits=128), np.zeros((1, 1), dtype=np.int64))
    with pytest.raises(ValueError, match="outside the 32-bit word"):
        golden.evaluate(program, np.array([[1 << 31]]))


def test_quantise_array_is_the_scalar_rule_element_by_element() -> None:
    # Reference: Python's fractions (round of a Fraction sends ties to even).
    rng = np.random.default_rng(3)
    reals = np.concatenate([rng.normal(0, 100, 2000), np.arange(-8, 8) + 0.5,
                            np.array([2.5, -2.5, 0.1, -0.0, 1e-12])])
    for bits in (0, 1, 14, 24, 30):
        assert quantise_array(reals, bits).tolist() == [quantise(float(r), bits) for r in reals]
        assert quantise(2.5, 0) == 2 and quantise(-2.5, 0) == -2
    with pytest.raises(ValueError, match="not finite"):
        quantise_array(np.array([np.inf]), 3)
