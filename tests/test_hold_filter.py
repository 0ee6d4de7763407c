"""The step's check before its rare path (the hold): a cheap filter that may send a state inside
its range to the hold (which then changes and counts nothing) but never lets a state outside the
range through. For a near-symmetric range the C compares the state's ones' complement magnitude
with a bound of few significant bits (``gen/c/emit.filter_bound``); otherwise it compares with
the range itself.

References: v ^ (v >> (n - 1)) is v for v >= 0 and -v - 1 (the ones' complement) for v < 0 with
an arithmetic shift (common practice; Python's >> floors, so it is that shift); the Thumb-2
"modified immediate" constants (Arm v7-M Architecture Reference Manual, A5.3.2, from memory):
an 8-bit value, one of three byte repetitions, or 1bcdefgh rotated right by 8 to 31 places.
Clamping to [low, high] is written here with min and max."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from orbitfix.gen.c.emit import (
    FILTER_SLACK,
    filter_bound,
    render_host_harness,
    render_model,
    render_trace,
)
from orbitfix.gen.c.naming import CNames
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.verify.proofs.bit_exact import _c_step_each
from orbitfix.verify.targets.host_build import build_host_module


def passes(v: np.ndarray, bound: int, bits: int) -> np.ndarray:
    """The C filter's verdict 'inside' for each v, in exact integers: (unsigned)(v ^ (v >> (bits
    - 1))) <= bound."""
    return ((v ^ (v >> (bits - 1))) & ((1 << bits) - 1)) <= bound


def thumb2_immediate(value: int) -> bool:
    """Whether a 32-bit constant is a Thumb-2 modified immediate (the manual's four forms)."""
    byte = value & 0xFF
    if value < 256 or value in (byte * 0x00010001, byte * 0x01010101) or (
            value == (value >> 8 & 0xFF) * 0x01000100):
        return True
    for rotation in range(8, 32):
        unrotated = ((value << rotation) | (value >> (32 - rotation))) & 0xFFFFFFFF
        if 0x80 <= unrotated <= 0xFF:
            return True
    return False


def test_the_filter_passes_only_states_inside_the_range_every_16_bit_value() -> None:
    every = np.arange(-(1 << 15), 1 << 15, dtype=np.int64)
    rng = np.random.default_rng(7)
    ranges = [(-7996, 7996), (-10662, 10662), (-12221, 12220), (-32768, 32767), (-2, 1),
              (-300, 298), (-257, 256), (-1, 0)]
    for _ in range(400):
        half = int(rng.integers(1, 1 << 15))
        ranges.append((max(-half - int(rng.integers(0, half // 50 + 2)), -(1 << 15)),
                       half - int(rng.integers(0, half // 50 + 2))))
    symmetric = lopsided = 0
    for low, high in ranges:
        if low > high:
            continue
        bound = filter_bound(low, high)
        if bound is None:
            lopsided += 1
            continue
        symmetric += 1
        inside = passes(every, bound, 16)
        assert np.all((every[inside] >= low) & (every[inside] <= high)), (low, high, bound)
        assert every[inside].min() == -bound - 1 and every[inside].max() == bound
        # the filter leaves at most 1/FILTER_SLACK of each half of the range to the rare path,
        # with a constant that Arm compares as an immediate where that is close enough
        inner = min(high, -low - 1)
        assert FILTER_SLACK * (inner - bound) <= inner
        assert thumb2_immediate(bound) or bound == inner
    assert symmetric > 100 and lopsided > 100


def test_the_bound_is_the_largest_immediate_near_the_half_width() -> None:
    # the Van der Pol 32-bit ranges: [-B, B] with B = 523971024; the inner half width is B - 1
    bound = filter_bound(-523971024, 523971024)
    assert bound == 249 << 21 and thumb2_immediate(bound)
    # the next constants of 8 significant bits, and of a repeated byte, are past B - 1
    assert 250 << 21 > 523971023 and 0x20202020 > 523971023 and 0x1F1F1F1F < bound
    assert filter_bound(-100, 99) == 99  # small: the half width is an immediate itself
    assert filter_bound(-(1 << 31), (1 << 31) - 1) == 255 << 23  # the whole word, 1/256 short
    for far in ((0, 1000), (-10, 1000), (-1000, 900), (5, 9)):  # not near-symmetric
        assert filter_bound(*far) is None


def narrowed(built):
    """The design with its first held range made lopsided (its low end pulled in to half): a
    narrower range keeps every proof, and the C checks it with the range compare."""
    program = built.plan.program
    ops = tuple(replace(op, held=(op.held[0] // 2, op.held[1])) if op.held and op.state == 0
                else op for op in program.ops)
    return replace(built, plan=replace(built.plan, program=replace(program, ops=ops)))


@pytest.fixture(scope="module")
def subjects(vanderpol_design):
    vanderpol = vanderpol_design
    sixteen = design(vanderpol.model.with_fixed_point(word_bits=16), analysis=vanderpol.analysis)
    trot = design(load_model("quadruped_trot").with_fixed_point(word_bits=16))
    return {"vanderpol 32": vanderpol, "vanderpol 16": sixteen, "trot 16": trot,
            "vanderpol 16 lopsided": narrowed(sixteen)}


def edge_states(built) -> tuple[np.ndarray, list[tuple[int, int, int, int]]]:
    """The initial state with one held state moved at a time to just outside each end of its
    range, the word's extremes, the range's ends, and (for a magnitude filter) just past its
    bound, where the filter sends a state inside the range to the hold. Returns (states, shape
    (n_states, count); per column (state, value, low, high))."""
    program = built.plan.program
    base = np.array(built.plan.initial_state, dtype=np.int64)
    columns, where = [], []
    for op in program.ops:
        if op.kind != "state" or not op.held:
            continue
        low, high = op.held
        values = {low - 1, high + 1, program.word_min, program.word_max, low, high}
        bound = filter_bound(low, high)
        if bound is not None:
            values |= {bound + 1, -bound - 2, bound, -bound - 1}
        for v in sorted(x for x in values if program.word_min <= x <= program.word_max):
            state = base.copy()
            state[op.state] = v
            columns.append(state)
            where.append((op.state, v, low, high))
    return np.stack(columns, axis=1), where


def held_unlike_golden(built, firmware: dict[str, str]) -> list[str]:
    """Where the C (``firmware``: NAME.h and NAME.c) holds a state at its range's edges unlike
    golden: the next state and the count of saturated steps after one step of the firmware, and
    the state the traced step read, against a clamp written here."""
    program = built.plan.program
    names = CNames(built.model.name)
    files = {**firmware, **render_trace(built.model, built.timing, built.integrator, built.plan)}
    host = build_host_module(files, render_host_harness(built.model, program), names.header)
    states, where = edge_states(built)
    count = states.shape[1]
    ffi = host.ffi
    flat = np.ascontiguousarray(states.T, dtype=np.int32)
    out = np.empty_like(flat)
    counts = np.zeros(count, dtype=np.uint32)
    after = np.empty_like(counts)
    host.lib.orbitfix_harness_step_each_counted(
        ffi.from_buffer("int32_t[]", flat), ffi.from_buffer("uint32_t[]", counts),
        ffi.from_buffer("int32_t[]", out), ffi.from_buffer("uint32_t[]", after), count)
    length = len(program.ops)
    trace = np.empty((count, length), dtype=np.int32)
    traced_out = np.empty_like(flat)
    traced_after = np.empty_like(counts)
    host.lib.orbitfix_harness_trace_each_counted(
        ffi.from_buffer("int32_t[]", flat), ffi.from_buffer("int32_t[]", traced_out),
        ffi.from_buffer("int32_t[]", trace), ffi.from_buffer("uint32_t[]", traced_after), count)
    want, saturated = golden.step_saturated(program, states)
    loads = {op.state: i for i, op in enumerate(program.ops) if op.kind == "state"}
    wrong = []
    for k, (state, v, low, high) in enumerate(where):
        clamped = min(max(v, low), high)
        if int(trace[k, loads[state]]) != clamped:
            wrong.append(f"state {state} = {v}: the step read {int(trace[k, loads[state]])}, "
                         f"not {clamped}")
        if not np.array_equal(out[k].astype(np.int64), want[:, k]):
            wrong.append(f"state {state} = {v}: next state differs from golden")
        if int(after[k]) != int(saturated[k]) or int(after[k]) != int(clamped != v):
            wrong.append(f"state {state} = {v}: count {int(after[k])}, golden "
                         f"{int(saturated[k])}")
    return wrong


@pytest.mark.parametrize("which", ["vanderpol 32", "vanderpol 16", "trot 16",
                                   "vanderpol 16 lopsided"])
def test_a_state_just_outside_its_range_is_held_in_c_as_golden_holds_it(subjects,
                                                                       which: str) -> None:
    built = subjects[which]
    firmware = render_model(built.model, built.timing, built.integrator, built.plan)
    names = CNames(built.model.name)
    source = firmware[names.source]
    lopsided = which.endswith("lopsided")  # its first state's range checked by the range compare
    fields = [names.field(built.plan.program.state_names[op.state])
              for op in built.plan.program.ops if op.kind == "state" and op.held]
    assert (f"{names.prefix}_outside(state->{fields[0]}, " in source) == lopsided
    assert (f"{names.prefix}_beyond(state->{fields[0]}, " in source) != lopsided
    assert all(f"{names.prefix}_beyond(state->{field}, " in source for field in fields[1:])
    assert held_unlike_golden(built, firmware) == []


@pytest.mark.parametrize("which", ["vanderpol 32", "vanderpol 16", "trot 16"])
def test_a_filter_bound_past_the_range_is_caught(subjects, which: str) -> None:
    # Seeded fault: the first state's filter bound one above the range's inner half width, so the
    # state one below the range's low end passes the filter and is read unheld.
    built = subjects[which]
    program = built.plan.program
    names = CNames(built.model.name)
    firmware = render_model(built.model, built.timing, built.integrator, built.plan)
    first = next(op for op in program.ops if op.kind == "state" and op.held)
    low, high = first.held
    literal = f"UINT{program.word_bits}_C({filter_bound(low, high)})"
    check = f"{names.prefix}_beyond(state->{names.field(program.state_names[first.state])}, "
    source = firmware[names.source]
    assert check + literal in source
    past = f"UINT{program.word_bits}_C({min(high, -low - 1) + 1})"
    wrong = held_unlike_golden(built, {**firmware, names.source: source.replace(
        check + literal, check + past, 1)})
    assert any(f"state {first.state} = {low - 1}: count 0, golden 1" in w for w in wrong), wrong


def one_step_counted(built, firmware: dict[str, str], states: np.ndarray,
                     counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """One firmware step from each state with its count of saturated steps: (next states, shape
    (n_states, count); counts after the step)."""
    names = CNames(built.model.name)
    files = {**firmware, **render_trace(built.model, built.timing, built.integrator, built.plan)}
    host = build_host_module(files, render_host_harness(built.model, built.plan.program),
                             names.header)
    out, after = _c_step_each(host, states, counts)
    return out.astype(np.int64), after.astype(np.int64)


def counted_unlike_golden(built, firmware: dict[str, str]) -> list[str]:
    """Where one firmware step counts saturated steps unlike golden and unlike the rule written
    here (one more, sticking at 2^32 - 1, exactly when some held state is outside its range; the
    subjects have no other clamp that acts from these states): from the edge states, every held
    state outside at once (above, below), and counts of 0, 2^32 - 2 and 2^32 - 1."""
    program = built.plan.program
    states, _ = edge_states(built)
    held = [op for op in program.ops if op.kind == "state" and op.held]
    for edge in (program.word_max, program.word_min):
        every = np.array(built.plan.initial_state, dtype=np.int64)
        for op in held:
            every[op.state] = edge
        states = np.hstack([states, every.reshape(-1, 1)])
    outside = np.zeros(states.shape[1], dtype=bool)
    for op in held:
        outside |= (states[op.state] < op.held[0]) | (states[op.state] > op.held[1])
    top = 2**32 - 1
    wrong = []
    for start in (0, top - 1, top):
        counts = np.full(states.shape[1], start, dtype=np.int64)
        after, c_counts = one_step_counted(built, firmware, states, counts)
        want, golden_counts = golden.step_counted(program, states, counts)
        rule = np.minimum(counts + outside, top)
        for k in np.flatnonzero((c_counts != golden_counts) | (c_counts != rule)):
            wrong.append(f"from count {start}, state {states[:, k].tolist()}: C counts "
                         f"{int(c_counts[k])}, golden {int(golden_counts[k])}, rule {int(rule[k])}")
        assert np.array_equal(after, want)
    return wrong


COUNT_IN_HOLD = ("    if (saturated != 0u && state->saturated_steps != UINT32_MAX) {\n"
                 "        state->saturated_steps += 1u; /* sticks at its largest value, never wraps */\n"
                 "    }\n")


@pytest.mark.parametrize("which", ["vanderpol 32", "vanderpol 16", "trot 16",
                                   "vanderpol 16 lopsided"])
def test_a_step_from_outside_the_range_counts_one_saturated_step_in_the_hold(subjects,
                                                                            which: str) -> None:
    built = subjects[which]
    names = CNames(built.model.name)
    firmware = render_model(built.model, built.timing, built.integrator, built.plan)
    source = firmware[names.source]
    step = source[source.index(f"void {names.step}("):]
    step = step[:step.index("\n}\n")]
    hold = source[source.index(f"void {names.prefix}_hold("):]
    hold = hold[:hold.index("\n}\n")]
    # no clamp but the holds: the count is in the rare path, the step keeps no flag
    assert "saturated" not in step.replace("saturated_steps", "")
    assert COUNT_IN_HOLD.replace("saturated_steps", names.saturation_field) in hold + "\n"
    assert counted_unlike_golden(built, firmware) == []


@pytest.mark.parametrize(("old", "new", "what"), [
    (COUNT_IN_HOLD, COUNT_IN_HOLD * 2, "counts twice"),
    ("saturated != 0u && state->saturated_steps", "state->saturated_steps", "counts every call"),
    (" && state->saturated_steps != UINT32_MAX", "", "wraps to 0"),
])
def test_a_wrong_count_in_the_hold_is_caught(subjects, old: str, new: str, what: str) -> None:
    built = subjects["vanderpol 16"]
    names = CNames(built.model.name)
    firmware = render_model(built.model, built.timing, built.integrator, built.plan)
    assert firmware[names.source].count(old) == 1
    wrong = counted_unlike_golden(built, {**firmware, names.source: firmware[names.source].replace(
        old, new)})
    assert wrong, what


def test_a_step_with_other_clamps_keeps_its_flag_and_counts_the_same(subjects) -> None:
    # One product of Van der Pol taken back from the proofs: its result is clamped, so the step
    # keeps its flag and counts at its end; the hold only says whether it acted.
    built = subjects["vanderpol 16"]
    program = built.plan.program
    names = CNames(built.model.name)
    taken = next(i for i in sorted(program.kept_values) if program.ops[i].proven
                 and program.ops[i].kind == "mul")
    ops = tuple(replace(op, proven=False) if i == taken else op
                for i, op in enumerate(program.ops))
    clamped = replace(built, plan=replace(built.plan, program=replace(program, ops=ops)))
    assert set(clamped.plan.program.counted_clamps) - set(program.counted_clamps) == {taken}
    firmware = render_model(clamped.model, clamped.timing, clamped.integrator, clamped.plan)
    source = firmware[names.source]
    assert f"saturated |= {names.prefix}_hold(state);" in source
    assert "unsigned int saturated = 0u; /* set by any clamp" in source
    assert counted_unlike_golden(clamped, firmware) == []
