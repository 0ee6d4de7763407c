"""The bit-exact proof: compiled C (layer L3) against the golden interpreter (layer L2).

First every entry point the firmware calls besides the step: the state ``NAME_init`` sets must be
the plan's initial state bit for bit, each setter must write its target and nothing else, and each
ramp, driven through the C setter to the word's extremes and back, must match golden at every step
and keep to the model's declared range and rate. Then two parts: one step from each of many random
states inside the word (spread over its whole range, near the cycle, at the edges of saturation and
of the proven ranges, the smallest values), and a long trajectory from the initial state in which
every single step is compared. On the random states, the verification-only traced step
(``NAME_trace.c``) is also compared with golden value by value, and the firmware's own step with
the traced step, so a fault in either file is caught. The count of saturated steps the firmware
keeps in its state struct is compared too, everywhere: the init function must set it to 0, every
step must add one exactly when golden says the step saturated, and it must stick at its largest
value (some random states start there). ``compare_sanitized`` repeats the comparison on a build
under the undefined-behaviour sanitizer. A mismatch names the first failing step, the state before
it, what was expected and got, and the operation of the integer program where the two part.
"""

from __future__ import annotations

import math
import subprocess
import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from orbitfix.gen.errors import InputError
from orbitfix.gen.program import golden
from orbitfix.gen.program.integer_program import (
    SATURATION_COUNT_MAX,
    IntegerProgram,
    next_saturation_count,
)
from orbitfix.gen.program.proven_fit import held_ranges, range_corners_and_samples, refuted_fits
from orbitfix.gen.progress import tell
from orbitfix.verify.targets.host_build import HostModule

SEED = 20261202
CHUNK = 1 << 16  # golden batches small enough to stay in cache
TRACE_BUDGET = 1 << 22  # values of one batch of traced steps (16 MiB of C trace at most)


@dataclass(frozen=True)
class Mismatch:
    """Where C and golden first disagree."""

    part: str
    step: int
    state_before: list[int]
    expected: list[int]
    got: list[int]
    operation: dict | None
    units: tuple[float, ...]  # per state, the real value of one integer unit (see state_units)
    reason: str | None = None  # what was wrong, when it is not a plain C-against-golden difference

    def to_json(self) -> dict:
        return {
            "reason": self.reason,
            "part": self.part,
            "step": self.step,
            "state_before": self.state_before,
            "state_before_real": [v * unit for v, unit in zip(self.state_before, self.units,
                                                              strict=True)],
            "expected": self.expected,
            "got": self.got,
            "operation": self.operation,
        }


def state_units(program: IntegerProgram) -> tuple[float, ...]:
    """The real value of one integer unit of each state, in the model's own units: 2**-f for a
    state of f fraction bits (each state, runtime parameter and target has its own format), and
    2 pi / 2**word_bits radians for an angle state, which is held in turns."""
    turn = 2 * math.pi * 2.0 ** -program.word_bits
    return tuple(turn if i in program.angle_states else 2.0 ** -bits
                 for i, bits in enumerate(program.state_fraction_bits))


@dataclass(frozen=True)
class Ramp:
    """What the model declares for one runtime parameter: its range, and its largest change per
    step in real units (None: it follows its target at once)."""

    name: str
    low: float
    high: float
    per_step: float | None


@dataclass(frozen=True)
class SanitizedRun:
    """The comparison repeated on a build under the undefined-behaviour sanitizer."""

    level: str  # the optimisation flag of the build
    compiler: str
    states: int
    steps: int
    seconds: float
    undefined: str | None  # the sanitizer's report of the first undefined operation


@dataclass
class BitExactReport:
    """The outcome of every part of the proof."""

    states_compared: int = 0
    steps_compared: int = 0
    first_mismatch: Mismatch | None = None
    seconds: dict[str, float] = field(default_factory=dict)
    init_checked: bool = False
    setters_checked: int = 0
    ramp_steps: int = 0
    sanitized: list[SanitizedRun] = field(default_factory=list)
    # the C's count of saturated steps at the end of the trajectory from the init state (None:
    # the trajectory was not run to its end)
    trajectory_saturated_steps: int | None = None
    # outputs to actuators: random states (each with random memories) and trajectory steps whose
    # every output value the C and golden agreed on
    output_states_compared: int = 0
    output_steps_compared: int = 0

    @property
    def bit_exact(self) -> bool:
        return self.first_mismatch is None and not any(run.undefined for run in self.sanitized)



def random_states(program: IntegerProgram, count: int, typical: np.ndarray,
                  rng: np.random.Generator) -> np.ndarray:
    """States spread over each state's proven range (where the step holds it: see
    ``gen/program/proven_fit.py``) and over the word's whole range, the cycle's neighbourhood, the
    edges of saturation and of the proven ranges (some with one state alone there), and the
    smallest values. typical : ndarray, shape (n_states,), integer magnitudes of the states on
    the cycle. Returns int64 ndarray, shape (n_states, count)."""
    n = len(program.state_names)
    low, high = program.word_min, program.word_max
    quarter = count // 4
    ranges = held_ranges(program)
    first = np.array([r[0] for r in ranges], dtype=np.int64).reshape(-1, 1)
    last = np.array([r[1] for r in ranges], dtype=np.int64).reshape(-1, 1)
    wide = (count - 3 * quarter) // 2
    spread = np.hstack([rng.integers(low, high, size=(n, wide), endpoint=True),
                        rng.integers(first, last, size=(n, count - 3 * quarter - wide),
                                     endpoint=True)])
    # Twice the cycle's size, but never past the word: with under a bit of headroom, twice the
    # sure bound is beyond it, and a state the C cannot hold proves nothing.
    reach = np.minimum(np.maximum(2 * np.asarray(typical, dtype=np.int64), 16), high).reshape(-1, 1)
    near_cycle = rng.integers(np.maximum(-reach, low), reach, size=(n, quarter), endpoint=True)
    edges = np.where(rng.random((n, quarter)) < 0.5, low, high) - np.sign(
        rng.random((n, quarter)) - 0.5).astype(np.int64) * rng.integers(0, 1 << 12, (n, quarter))
    # half of them at the edges of the proven ranges instead, a few LSB either side: where the
    # step's range check sends a state to the hold, or not
    near = rng.random((n, quarter)) < 0.5
    held_edges = np.where(rng.random((n, quarter)) < 0.5, first, last) + rng.integers(
        -4, 4, (n, quarter), endpoint=True)
    edges = np.clip(np.where(near, held_edges, edges), low, high)
    small = rng.integers(-(1 << 10), 1 << 10, size=(n, quarter), endpoint=True)
    # a third of those with one state alone at an edge, every other state in the middle half of
    # its range: the step's check must send that one state to the hold by itself
    alone = (rng.random(quarter) < 1 / 3) & (np.arange(n).reshape(-1, 1) != rng.integers(
        0, n, quarter))
    middle = (first + last) // 2 + np.floor((last - first) / 4 * rng.uniform(
        -1, 1, (n, quarter))).astype(np.int64)
    edges = np.where(alone, middle, edges)
    return np.hstack([spread, near_cycle, edges, small]).astype(np.int64)


def random_counts(count: int, rng: np.random.Generator) -> np.ndarray:
    """Counts of saturated steps to start the random states from: mostly 0, and every eighth
    state at the largest count, one below it and anywhere between, so a count that wraps instead
    of sticking is seen. Returns int64 ndarray, shape (count,)."""
    counts = np.zeros(count, dtype=np.int64)
    counts[1::8] = SATURATION_COUNT_MAX
    counts[2::8] = SATURATION_COUNT_MAX - 1
    counts[3::8] = rng.integers(1, SATURATION_COUNT_MAX, size=counts[3::8].size, endpoint=True)
    return counts


def _count_mismatch(program: IntegerProgram, part: str, step: int, before: np.ndarray,
                    count_before: int, saturated: bool, want: int, got: int,
                    values: list[np.ndarray] | None = None, j: int = 0) -> Mismatch:
    """The count of saturated steps differs while the states agree."""
    operation = None
    if values is not None and saturated:  # name the first counted value golden clamped
        edges = (program.word_min, program.word_max)
        index = next((i for i in sorted(program.counted_clamps) if int(values[i][j]) in edges),
                     None)
        if index is not None:
            op = program.ops[index]
            operation = {"index": index, "kind": op.kind, "note": op.note, "args": list(op.args),
                         "expected": int(values[index][j]), "got": None}
    how = "the step did not saturate"
    if saturated:
        how = "the step saturated" + (f": operation {operation['index']} ({operation['kind']}: "
                                      f"{operation['note']}) was clamped to {operation['expected']}"
                                      if operation else "")
    return Mismatch(part=part, step=step, state_before=[int(v) for v in before],
                    expected=[want], got=[got], operation=operation, units=state_units(program),
                    reason=f"the count of saturated steps is {got} after the step from the count "
                           f"{count_before}, but golden says {want} ({how})")


def _require_inside_word(program: IntegerProgram, states: np.ndarray, what: str) -> None:
    """States travel to the C as int32_t and become the firmware's word there: one outside the word
    would reach the C wrapped and golden unwrapped, a false alarm. Never let one through."""
    states = np.asarray(states)
    if states.size and (states.min() < program.word_min or states.max() > program.word_max):
        raise ValueError(f"{what} holds a value outside the {program.word_bits}-bit word "
                         f"[{program.word_min}, {program.word_max}]: a bug in the verifier")


def prove_bit_exact(program: IntegerProgram, host: HostModule, initial: np.ndarray,
                    typical: np.ndarray, states: int = 1_000_000, steps: int = 1_000_000,
                    segment: int = 64, block: int = 1 << 18, seed: int = SEED,
                    shipped_trace: Callable[[], HostModule | None] | None = None,
                    ramps: tuple[Ramp, ...] = (),
                    first_states: np.ndarray | None = None) -> BitExactReport:
    """Check the init function, the setters and ramps, then compare C and golden on ``states``
    random states and a ``steps``-step trajectory.

    ramps : the model's runtime parameters in order (one setter each), for the ramp checks.
    first_states : shape (n_states, k) -- states compared before the random ones, in their place
        (the self-test's probes, each of which shows a one-LSB change of a stored constant).

    shipped_trace : builds, when a mismatch must be located, a module whose traced step is the
        firmware's own step code with a trace added (see ``host_check``), so the operation named
        is the firmware's; None (or a None from it) locates with ``host``'s traced step.
    """
    report = BitExactReport()
    _check_shape(program, host)
    initial = np.asarray(initial, dtype=np.int64)
    _require_inside_word(program, initial, "the initial state")
    locator = _Locator(host, shipped_trace)
    started = time.perf_counter()
    report.first_mismatch = _check_init(program, host, initial)
    report.init_checked = report.first_mismatch is None
    if report.first_mismatch is None:
        report.setters_checked, report.ramp_steps, report.first_mismatch = _check_ramps(
            program, host, ramps, locator)
    report.seconds["init_and_setters"] = time.perf_counter() - started
    if report.first_mismatch is None:
        report.first_mismatch = _check_proven_fits(program, min(states, 1 << 16), seed)
    if report.first_mismatch is not None:
        return report
    started = time.perf_counter()
    rng = np.random.default_rng(seed)
    batch = random_states(program, states, typical, rng)
    if first_states is not None:
        first = np.asarray(first_states, dtype=np.int64)[:, :states]
        batch[:, :first.shape[1]] = first
    _require_inside_word(program, batch, "a random state")
    counts = random_counts(states, rng)
    got, got_counts = _c_step_each(host, batch, counts)
    chunk = min(CHUNK, max(1024, TRACE_BUDGET // len(program.ops)))
    for first in range(0, states, chunk):
        tell("comparing random states, C against golden", first, states)
        part = batch[:, first:first + chunk]
        saturated = np.zeros(part.shape[1], dtype=bool)
        values = golden.evaluate(program, part, saturated)
        want = np.stack([values[i] for i in program.next_state])
        bad = np.flatnonzero(np.any(got[:, first:first + chunk] != want, axis=0))
        if bad.size:
            k = first + int(bad[0])
            report.states_compared = k + 1
            report.seconds["random_states"] = time.perf_counter() - started
            report.first_mismatch = _locate(program, locator.host(), "random states", k,
                                            batch[:, k], want[:, int(bad[0])], got[:, k])
            return report
        want_counts = next_saturation_count(counts[first:first + chunk], saturated)
        bad = np.flatnonzero(got_counts[first:first + chunk] != want_counts)
        if bad.size:
            j = int(bad[0])
            k = first + j
            report.states_compared = k + 1
            report.seconds["random_states"] = time.perf_counter() - started
            report.first_mismatch = _count_mismatch(
                program, "random states", k, batch[:, k], int(counts[k]), bool(saturated[j]),
                int(want_counts[j]), int(got_counts[k]), values, j)
            return report
        traced = _traced_mismatch(program, host, part, values, got[:, first:first + chunk],
                                  saturated)
        if traced is not None:
            k = first + traced.step
            report.states_compared = k + 1
            report.seconds["random_states"] = time.perf_counter() - started
            report.first_mismatch = replace(traced, step=k)
            return report
    report.states_compared = states
    report.seconds["random_states"] = time.perf_counter() - started
    started = time.perf_counter()
    report.steps_compared, report.first_mismatch, count = _trajectory(
        program, host, np.asarray(initial, dtype=np.int64), steps, segment, block, locator)
    if report.first_mismatch is None:
        report.trajectory_saturated_steps = count
    report.seconds["trajectory"] = time.perf_counter() - started
    if report.first_mismatch is None and program.outputs:
        started = time.perf_counter()
        report.first_mismatch = _check_outputs(program, host, initial, typical, states, steps,
                                               block, seed, report)
        report.seconds["outputs"] = time.perf_counter() - started
    return report


def random_memories(program: IntegerProgram, count: int, rng: np.random.Generator) -> np.ndarray:
    """Memories (last values) of the outputs to step from: mostly inside each output's limits,
    some anywhere in the word and at its edges (a memory written by hand), some at the limits
    themselves. Returns int64 ndarray, shape (n_outputs, count)."""
    low = np.array([o.low for o in program.outputs], dtype=np.int64).reshape(-1, 1)
    high = np.array([o.high for o in program.outputs], dtype=np.int64).reshape(-1, 1)
    m = len(program.outputs)
    inside = rng.integers(low, high, size=(m, count), endpoint=True)
    anywhere = rng.integers(program.word_min, program.word_max, size=(m, count), endpoint=True)
    at_limits = np.where(rng.random((m, count)) < 0.5, low, high)
    pick = rng.random((1, count))
    return np.where(pick < 0.6, inside, np.where(pick < 0.8, anywhere, at_limits)).astype(np.int64)


def _output_mismatch(program: IntegerProgram, part: str, step: int, state: np.ndarray,
                     memory: np.ndarray, want: np.ndarray, got: np.ndarray, why: str) -> Mismatch:
    wrong = [o.name for o, a, b in zip(program.outputs, want, got, strict=True) if a != b]
    return Mismatch(part=part, step=step, state_before=[int(v) for v in state],
                    expected=[int(v) for v in want], got=[int(v) for v in got], operation=None,
                    units=state_units(program),
                    reason=f"output {', '.join(wrong) or '?'} differs ({why}; memories before: "
                           f"{[int(v) for v in memory]}): expected {[int(v) for v in want]}, got "
                           f"{[int(v) for v in got]}")


def _check_outputs(program: IntegerProgram, host: HostModule, initial: np.ndarray,
                   typical: np.ndarray, states: int, steps: int, block: int, seed: int,
                   report: BitExactReport) -> Mismatch | None:
    """Every output value of the C against golden: the memories the init function sets; one step
    from random states each with random memories (the next state and every output compared);
    and the run from the initial state, every step's outputs compared with golden's from the
    C's own state and memories (the states themselves are compared by the trajectory part)."""
    ffi, m, n = host.ffi, len(program.outputs), len(program.state_names)
    count = int(host.lib.orbitfix_harness_output_count())
    if count != m:
        raise InputError(f"the C has {count} outputs but the model has {m}; the sources belong to "
                         "another model")
    got = np.zeros(m, dtype=np.int32)
    host.lib.orbitfix_harness_outputs_init(ffi.from_buffer("int32_t[]", got))
    want = golden.initial_outputs(program, initial)
    if not np.array_equal(got.astype(np.int64), want):
        return _output_mismatch(program, "init", 0, initial, want, want, got,
                                "the init function must set clamp(u, min, max) of the initial state")
    rng = np.random.default_rng(seed + 1)
    for first in range(0, states, CHUNK):
        tell("comparing the outputs from random states, C against golden", first, states)
        size = min(CHUNK, states - first)
        batch = random_states(program, size, typical, rng)
        memory = random_memories(program, size, rng)
        flat_in = np.ascontiguousarray(batch.T, dtype=np.int32)
        flat_memory = np.ascontiguousarray(memory.T, dtype=np.int32)
        out, out_memory = np.empty_like(flat_in), np.empty_like(flat_memory)
        host.lib.orbitfix_harness_step_outputs(
            ffi.from_buffer("int32_t[]", flat_in), ffi.from_buffer("int32_t[]", flat_memory),
            ffi.from_buffer("int32_t[]", out), ffi.from_buffer("int32_t[]", out_memory), size)
        after, outputs, _ = golden.step_with_outputs(program, batch, memory)
        wrong = np.any(out.T != after, axis=0) | np.any(out_memory.T != outputs, axis=0)
        if np.any(wrong):
            j = int(np.flatnonzero(wrong)[0])
            return _output_mismatch(program, "outputs, random states", first + j, batch[:, j],
                                    memory[:, j], outputs[:, j], out_memory[j],
                                    "one step from a random state and random memories")
        report.output_states_compared = first + size
    state, memory = initial.copy(), want.copy()
    done = 0
    while done < steps:
        tell("comparing the outputs along the trajectory, C against golden", done, steps)
        size = min(block, steps - done)
        io = np.ascontiguousarray(state, dtype=np.int32).copy()
        memory_io = np.ascontiguousarray(memory, dtype=np.int32).copy()
        record = np.empty((size, n), dtype=np.int32)
        memory_record = np.empty((size, m), dtype=np.int32)
        host.lib.orbitfix_harness_run_outputs(
            ffi.from_buffer("int32_t[]", io), ffi.from_buffer("int32_t[]", memory_io), size,
            ffi.from_buffer("int32_t[]", record), ffi.from_buffer("int32_t[]", memory_record))
        record, memory_record = record.astype(np.int64), memory_record.astype(np.int64)
        before = np.vstack([memory.reshape(1, -1), memory_record[:-1]])
        for first in range(0, size, CHUNK):
            part = slice(first, min(size, first + CHUNK))
            expected = golden.output_values(program, record[part].T, before[part].T)[0]
            wrong = np.flatnonzero(np.any(expected != memory_record[part].T, axis=0))
            if wrong.size:
                k = first + int(wrong[0])
                return _output_mismatch(program, "outputs, trajectory", done + k + 1, record[k],
                                        before[k], expected[:, int(wrong[0])], memory_record[k],
                                        "after this step of the run from the initial state")
        done += size
        report.output_steps_compared = done
        state, memory = io.astype(np.int64), memory_io.astype(np.int64)
    return None


def _check_proven_fits(program: IntegerProgram, count: int, seed: int) -> Mismatch | None:
    """The plan's proofs of fits against golden: no value marked proven may leave the word from
    a state in the proven ranges (random states and the ranges' corners). C and golden agree on
    a wrong proof (both wrap), so this is its own check."""
    states = range_corners_and_samples(program, count, np.random.default_rng(seed))
    refuted = refuted_fits(program, states)
    if not refuted:
        return None
    index, column = refuted[0]
    before = states[:, column]
    wrapped = golden.evaluate(program, before.reshape(-1, 1))[index][0]
    op = program.ops[index]
    return Mismatch(part="proven fits", step=0, state_before=[int(v) for v in before],
                    expected=[], got=[int(wrapped)],
                    operation={"index": index, "kind": op.kind, "note": op.note},
                    units=state_units(program),
                    reason=f"value {index} ({op.kind}, {op.note}) leaves its sure integer bounds "
                           "or, marked proven to fit, the word, from this state within the proven "
                           "ranges: the plan's proof is wrong (an orbitfix fault); do not ship this "
                           "C, and report it with the model file")


def _check_init(program: IntegerProgram, host: HostModule, initial: np.ndarray) -> Mismatch | None:
    """The state the C's init function sets against the plan's initial state, bit for bit."""
    out = np.zeros(len(program.state_names), dtype=np.int32)
    host.lib.orbitfix_harness_init(host.ffi.from_buffer("int32_t[]", out))
    count = int(host.lib.orbitfix_harness_init_saturated())
    if np.array_equal(out.astype(np.int64), initial):
        if count == 0:
            return None
        return Mismatch(part="init", step=0, state_before=[], expected=[0], got=[count],
                        operation=None, units=state_units(program),
                        reason=f"the init function leaves the count of saturated steps at "
                               f"{count}, not 0")
    wrong = [program.state_names[i] for i in np.flatnonzero(out != initial)]
    return Mismatch(part="init", step=0, state_before=[], expected=[int(v) for v in initial],
                    got=[int(v) for v in out], operation=None, units=state_units(program),
                    reason=f"the init function sets {', '.join(wrong)} to another value than the "
                           "plan's initial state")


RAMP_STEP_CAP = 1 << 16  # steps followed after each setter call at most


def _c_set(host: HostModule, state: np.ndarray, which: int, target: int) -> np.ndarray:
    ffi = host.ffi
    given = np.ascontiguousarray(state, dtype=np.int32)
    out = np.empty_like(given)
    host.lib.orbitfix_harness_set(ffi.from_buffer("int32_t[]", given),
                                  ffi.from_buffer("int32_t[]", out), which, int(target))
    return out.astype(np.int64)


def slowest_move(per_step: float, unit: float) -> float:
    """The least a rate-limited parameter may move in one step and still keep its declared rate:
    the parameter moves in whole LSBs (``unit``), so a rate of 2.048 LSBs a step may be kept by
    moving 2 of them; and at least one LSB, or the parameter never arrives. The ramp's travel time
    is judged against this, not against the declared rate, which the word cannot hold exactly."""
    return max(math.floor(per_step / unit), 1) * unit


def _check_ramps(program: IntegerProgram, host: HostModule, ramps: tuple[Ramp, ...],
                 locator: _Locator) -> tuple[int, int, Mismatch | None]:
    """Each setter, called through the C on the state the C itself reached, with targets at the
    word's extremes, inside the range and back: it must write its target and nothing else; every
    step after it must match golden; and the parameter must keep to its declared range, move by
    at most its declared rate and arrive at its target held in the range in the time its rate,
    kept in whole LSBs (``slowest_move``), takes. Returns (setters
    checked, steps compared, first mismatch or None)."""
    count = int(host.lib.orbitfix_harness_setter_count())
    if count != len(ramps):
        raise InputError(f"the C has {count} setters but the model has {len(ramps)} runtime "
                         "parameters; the sources belong to another model")
    units = state_units(program)
    first_parameter = program.model_state_count
    steps_done = 0
    for which, ramp in enumerate(ramps):
        current, target = first_parameter + 2 * which, first_parameter + 2 * which + 1
        bits = program.state_fraction_bits[current]
        unit = 2.0 ** -bits
        # constants of the ramp are rounded in their own formats: allow the word's resolution
        slack = 2 * unit + 2 * max(abs(ramp.low), abs(ramp.high)) * 2.0 ** (2 - program.word_bits)
        middle = round((ramp.low + ramp.high) / 2 * 2.0 ** program.state_fraction_bits[target])
        out = np.zeros(len(program.state_names), dtype=np.int32)
        host.lib.orbitfix_harness_init(host.ffi.from_buffer("int32_t[]", out))
        state = out.astype(np.int64)
        span = ramp.high - ramp.low
        follow = 2 if ramp.per_step is None else math.ceil(span / slowest_move(ramp.per_step, unit)) + 2
        follow = min(follow, RAMP_STEP_CAP)
        for wanted in (program.word_max, program.word_min, middle, program.word_max):
            expected = state.copy()
            expected[target] = wanted
            got = _c_set(host, state, which, wanted)
            if not np.array_equal(got, expected):
                return which + 1, steps_done, Mismatch(
                    part="setter", step=steps_done, state_before=[int(v) for v in state],
                    expected=[int(v) for v in expected], got=[int(v) for v in got],
                    operation=None, units=units,
                    reason=f"the setter of {ramp.name} does not write just its target")
            state = got
            end, record = _c_run(host, state, follow)
            before = np.vstack([state.reshape(1, -1), record[:-1]])
            chunk = min(CHUNK, max(1024, TRACE_BUDGET // len(program.ops)))
            want = np.vstack([golden.step(program, before[first:first + chunk].T).T
                              for first in range(0, follow, chunk)])
            wrong = np.flatnonzero(np.any(want != record, axis=1))
            if wrong.size:
                k = int(wrong[0])
                return which + 1, steps_done + k + 1, _locate(
                    program, locator.host(), "ramp", steps_done + k + 1, before[k], want[k],
                    record[k])
            values = np.concatenate([[state[current]], record[:, current]]) * unit
            held = min(max(wanted * 2.0 ** -program.state_fraction_bits[target], ramp.low),
                       ramp.high)
            problem = None
            if values[1:].min() < ramp.low - slack or values[1:].max() > ramp.high + slack:
                problem = (f"{ramp.name} leaves its range [{ramp.low:g}, {ramp.high:g}]: it "
                           f"reaches {values[1:].min():g} .. {values[1:].max():g}")
            elif ramp.per_step is not None and np.abs(np.diff(values)).max() > ramp.per_step + slack:
                problem = (f"{ramp.name} moves by {np.abs(np.diff(values)).max():g} in one step, "
                           f"more than its rate allows ({ramp.per_step:g} per step)")
            elif follow < RAMP_STEP_CAP and abs(values[-1] - held) > slack:
                problem = (f"{ramp.name} ends at {values[-1]:g} after {follow} steps, not at its "
                           f"target held in its range ({held:g})")
            if problem is not None:
                return which + 1, steps_done + follow, Mismatch(
                    part="ramp", step=steps_done + follow, state_before=[int(v) for v in state],
                    expected=[], got=[int(v) for v in end], operation=None, units=units,
                    reason=problem)
            steps_done += follow
            state = end
    return len(ramps), steps_done, None


def compare_sanitized(program: IntegerProgram, executable: str, level: str, initial: np.ndarray,
                      typical: np.ndarray, states: int, steps: int, seed: int = SEED,
                      compiler: str = "cc") -> tuple[SanitizedRun, Mismatch | None]:
    """The stand-alone sanitized build (``host_build.build_sanitized_program``) on ``states``
    random states (drawn as in the main proof, the traced step too) and ``steps`` steps from its
    own init state, every value and every count of saturated steps against golden. Undefined
    behaviour stops the program: its report is kept in the run."""
    started = time.perf_counter()
    rng = np.random.default_rng(seed)
    batch = random_states(program, states, typical, rng)
    _require_inside_word(program, batch, "a random state")
    counts_in = random_counts(states, rng)
    n, length = len(program.state_names), len(program.ops)
    traced = min(states, max(1024, TRACE_BUDGET // length))  # traces held in memory at once
    feed = np.concatenate([np.array([states, traced, steps], dtype=np.int32),
                           np.ascontiguousarray(batch.T, dtype=np.int32).ravel(),
                           counts_in.astype(np.uint32).view(np.int32)])
    done = subprocess.run([executable], input=feed.tobytes(), capture_output=True, check=False)
    if done.returncode != 0:
        text = done.stderr.decode(errors="replace").strip().splitlines()
        found = [line for line in text if "runtime error" in line] or text[-3:] or [
            f"exit code {done.returncode}"]
        return SanitizedRun(level, compiler, states, steps, time.perf_counter() - started,
                            undefined="\n".join(found[:3])), None
    words = np.frombuffer(done.stdout, dtype=np.int32)
    sizes = [n, 1, states * n, states, traced * n, traced * length, traced, steps * n, steps]
    if words.size != sum(sizes):
        raise ValueError(f"the sanitized program wrote {words.size} values, not {sum(sizes)}")
    parts = np.split(words, np.cumsum(sizes)[:-1])
    init, stepped, traced_next, traces, record = (parts[i].astype(np.int64) for i in (0, 2, 4, 5, 7))
    init_count, stepped_counts, traced_counts, record_counts = (
        parts[i].view(np.uint32).astype(np.int64) for i in (1, 3, 6, 8))
    run = SanitizedRun(level, compiler, states, steps, 0.0, None)
    units = state_units(program)
    part = f"sanitized build {compiler} {level}"
    mismatch = None
    if not np.array_equal(init, initial):
        mismatch = Mismatch(part=part, step=0, state_before=[], expected=[int(v) for v in initial],
                            got=[int(v) for v in init], operation=None, units=units,
                            reason="the init function sets another state in this build")
    elif int(init_count[0]) != 0:
        mismatch = Mismatch(part=part, step=0, state_before=[], expected=[0],
                            got=[int(init_count[0])], operation=None, units=units,
                            reason="the init function leaves the count of saturated steps at "
                                   f"{int(init_count[0])}, not 0, in this build")
    stepped, traced_next = stepped.reshape(states, n).T, traced_next.reshape(traced, n).T
    traces = traces.reshape(traced, length)
    chunk = min(CHUNK, max(1024, TRACE_BUDGET // length))
    for first in range(0, states if mismatch is None else 0, chunk):
        saturated = np.zeros(min(chunk, states - first), dtype=bool)
        values = golden.evaluate(program, batch[:, first:first + chunk], saturated)
        want = np.stack([values[i] for i in program.next_state])
        wrong = np.any(stepped[:, first:first + chunk] != want, axis=0)
        inside = max(0, min(traced - first, want.shape[1]))
        wrong[:inside] |= np.any(traced_next[:, first:first + inside] != want[:, :inside], axis=0)
        for index, value in enumerate(values):
            wrong[:inside] |= traces[first:first + inside, index] != value[:inside]
        want_counts = next_saturation_count(counts_in[first:first + chunk], saturated)
        wrong_count = stepped_counts[first:first + chunk] != want_counts
        wrong_count[:inside] |= traced_counts[first:first + inside] != saturated[:inside]
        bad = np.flatnonzero(wrong | wrong_count)
        if bad.size and not wrong[int(bad[0])]:
            j = int(bad[0])
            k = first + j
            mismatch = _count_mismatch(program, part, k, batch[:, k], int(counts_in[k]),
                                       bool(saturated[j]), int(want_counts[j]),
                                       int(stepped_counts[k]), values, j)
            break
        if bad.size:
            j = int(bad[0])
            k = first + j
            operation = None
            if k < traced:
                operation = next(({"index": i, "kind": program.ops[i].kind,
                                   "note": program.ops[i].note, "args": list(program.ops[i].args),
                                   "expected": int(values[i][j]), "got": int(traces[k, i])}
                                  for i in range(length) if traces[k, i] != values[i][j]), None)
            mismatch = Mismatch(part=part, step=k, state_before=[int(v) for v in batch[:, k]],
                                expected=[int(v) for v in want[:, j]],
                                got=[int(v) for v in stepped[:, k]], operation=operation,
                                units=units)
            break
    if mismatch is None and steps:
        record = record.reshape(steps, n)
        before = np.vstack([init.reshape(1, -1), record[:-1]])
        stepped_golden = [golden.step_saturated(program, before[first:first + chunk].T)
                          for first in range(0, steps, chunk)]
        expected = np.vstack([after.T for after, _ in stepped_golden])
        flags = np.concatenate([flag for _, flag in stepped_golden])
        counts_before = np.concatenate([[0], record_counts[:-1]])
        want_counts = next_saturation_count(counts_before, flags)
        bad = np.flatnonzero(np.any(expected != record, axis=1))
        bad_count = np.flatnonzero(want_counts != record_counts)
        if bad.size:
            k = int(bad[0])
            mismatch = Mismatch(part=part, step=k + 1, state_before=[int(v) for v in before[k]],
                                expected=[int(v) for v in expected[k]],
                                got=[int(v) for v in record[k]], operation=None, units=units,
                                reason="a step of the trajectory from the init state differs")
        elif bad_count.size:
            k = int(bad_count[0])
            mismatch = _count_mismatch(program, part, k + 1, before[k], int(counts_before[k]),
                                       bool(flags[k]), int(want_counts[k]),
                                       int(record_counts[k]))
    return replace(run, seconds=time.perf_counter() - started), mismatch


class _Locator:
    """The module whose traced step locates a mismatch, built at most once and only if needed."""

    def __init__(self, host: HostModule, shipped_trace: Callable[[], HostModule | None] | None):
        self._host, self._build, self._built = host, shipped_trace, None

    def host(self) -> HostModule:
        if self._build is not None:
            self._built, self._build = self._build(), None
        return self._built or self._host


def _traced_mismatch(program: IntegerProgram, host: HostModule, part: np.ndarray,
                     values: list[np.ndarray], shipped: np.ndarray,
                     saturated: np.ndarray) -> Mismatch | None:
    """The traced step on a batch of states: every value against golden's, its next state
    against the firmware step's (``shipped``), and its count of saturated steps (from 0) against
    golden's ``saturated``. The first state where any differs, with its index in the batch as
    ``step``."""
    out, trace, counts = _c_trace_each(host, part, counted=True)
    wrong_value = np.zeros(part.shape[1], dtype=bool)
    for index, value in enumerate(values):
        wrong_value |= trace[:, index] != value
    wrong_state = np.any(out != shipped, axis=0)
    wrong_count = counts != saturated
    bad = np.flatnonzero(wrong_value | wrong_state | wrong_count)
    if not bad.size:
        return None
    j = int(bad[0])
    if not wrong_value[j] and not wrong_state[j]:
        return _count_mismatch(program, "traced step", j, part[:, j], 0, bool(saturated[j]),
                               int(saturated[j]), int(counts[j]), values, j)
    operation = None
    if wrong_value[j]:
        index = next(i for i, v in enumerate(values) if int(trace[j, i]) != int(v[j]))
        op = program.ops[index]
        operation = {"index": index, "kind": op.kind, "note": op.note, "args": list(op.args),
                     "expected": int(values[index][j]), "got": int(trace[j, index])}
    expected = [int(values[i][j]) for i in program.next_state]
    return Mismatch(part="traced step", step=j, state_before=[int(v) for v in part[:, j]],
                    expected=expected, got=[int(v) for v in out[:, j]], operation=operation,
                    units=state_units(program))


def _c_trace_each(host: HostModule, batch: np.ndarray, counted: bool = False) -> tuple:
    """The traced step from each state: (next states, shape (n_states, count); every value,
    shape (count, trace length)), and with ``counted`` the count of saturated steps after the
    step from 0 (int64, shape (count,))."""
    ffi = host.ffi
    flat_in = np.ascontiguousarray(batch.T, dtype=np.int32)
    flat_out = np.empty_like(flat_in)
    length = int(host.lib.orbitfix_harness_trace_length())
    trace = np.empty((flat_in.shape[0], length), dtype=np.int32)
    counts = np.zeros(flat_in.shape[0], dtype=np.uint32)
    host.lib.orbitfix_harness_trace_each_counted(
        ffi.from_buffer("int32_t[]", flat_in), ffi.from_buffer("int32_t[]", flat_out),
        ffi.from_buffer("int32_t[]", trace),
        ffi.from_buffer("uint32_t[]", counts) if counted else ffi.NULL, flat_in.shape[0])
    if counted:
        return flat_out.T.astype(np.int64), trace, counts.astype(np.int64)
    return flat_out.T.astype(np.int64), trace


def _check_shape(program: IntegerProgram, host: HostModule) -> None:

    n = int(host.lib.orbitfix_harness_state_count())
    if n != len(program.state_names):
        raise InputError(f"the C declares {n} states but the model has "
                         f"{len(program.state_names)}; the sources belong to another model")
    length = int(host.lib.orbitfix_harness_trace_length())
    if length != len(program.ops):
        raise InputError(f"the traced step keeps {length} values but the integer program has "
                         f"{len(program.ops)}; the trace files belong to another program")


def _c_step_each(host: HostModule, batch: np.ndarray,
                 counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """One C step from each state with its count of saturated steps: (next states, shape
    (n_states, count); the counts after the step, int64 shape (count,))."""
    flat_in = np.ascontiguousarray(batch.T, dtype=np.int32)
    flat_out = np.empty_like(flat_in)
    counts_in = np.ascontiguousarray(counts, dtype=np.uint32)
    counts_out = np.empty_like(counts_in)
    ffi = host.ffi
    host.lib.orbitfix_harness_step_each_counted(
        ffi.from_buffer("int32_t[]", flat_in), ffi.from_buffer("uint32_t[]", counts_in),
        ffi.from_buffer("int32_t[]", flat_out), ffi.from_buffer("uint32_t[]", counts_out),
        flat_in.shape[0])
    return flat_out.T.astype(np.int64), counts_out.astype(np.int64)


def _c_run(host: HostModule, state: np.ndarray, steps: int) -> tuple[np.ndarray, np.ndarray]:
    end, _, record, _ = c_run_counted(host, state, 0, steps)
    return end, record


def c_run_counted(host: HostModule, state: np.ndarray, count: int,
                  steps: int) -> tuple[np.ndarray, int, np.ndarray, np.ndarray]:
    """``steps`` C steps from ``state`` and the count of saturated steps ``count``: (the last
    state, the last count, the state after each step (shape (steps, n_states)), the count after
    each step (shape (steps,)), all int64)."""
    ffi = host.ffi
    io = np.ascontiguousarray(state, dtype=np.int32).copy()
    count_io = np.array([count], dtype=np.uint32)
    record = np.empty((steps, io.size), dtype=np.int32)
    counts = np.empty(steps, dtype=np.uint32)
    host.lib.orbitfix_harness_run_counted(
        ffi.from_buffer("int32_t[]", io), ffi.from_buffer("uint32_t[]", count_io), steps,
        ffi.from_buffer("int32_t[]", record), ffi.from_buffer("uint32_t[]", counts))
    return io.astype(np.int64), int(count_io[0]), record.astype(np.int64), counts.astype(np.int64)


def _trajectory(program: IntegerProgram, host: HostModule, initial: np.ndarray, steps: int,
                segment: int, block: int, locator: _Locator) -> tuple[int, Mismatch | None, int]:
    """Run C in blocks; in each block golden runs freely from every ``segment``-th C state (the
    checkpoints) for ``segment`` steps, vectorised over the checkpoints, and every step is compared
    with the C's record, its count of saturated steps too (from 0 at the start). Returns (steps
    compared, first mismatch or None, the C's count at the end)."""
    block = max(segment, block - block % segment)
    state = initial
    saturated_count = 0
    done = 0
    while done < steps:
        tell("comparing the trajectory, C against golden", done, steps)
        count = min(block, steps - done)
        end_state, end_count, record, counts = c_run_counted(host, state, saturated_count, count)
        before = np.vstack([state.reshape(1, -1), record[:-1]])  # the state before each step
        starts = np.arange(0, count, segment)
        golden_state = before[starts].T
        flags = np.zeros(count, dtype=bool)
        for i in range(segment):
            index = starts + i
            live = index < count
            if not live.all():
                golden_state, index, starts = golden_state[:, live], index[live], starts[live]
            golden_state, flags[index] = golden.step_saturated(program, golden_state)
            if np.any(golden_state != record[index].T):
                # Segments advance together, so an earlier global step may also be wrong.
                first = _earliest_wrong(program, before, record, int(index[-1]))
                return done + first + 1, _locate(program, locator.host(), "trajectory",
                                                 done + first + 1,
                                                 before[first], _golden_one(program, before[first]),
                                                 record[first]), saturated_count
        counts_before = np.concatenate([[saturated_count], counts[:-1]])
        want = next_saturation_count(counts_before, flags)
        wrong = np.flatnonzero(want != counts)
        if wrong.size:
            k = int(wrong[0])
            return done + k + 1, _count_mismatch(
                program, "trajectory", done + k + 1, before[k], int(counts_before[k]),
                bool(flags[k]), int(want[k]), int(counts[k]),
                golden.evaluate(program, before[k].reshape(-1, 1)), 0), saturated_count
        done += count
        state, saturated_count = end_state, end_count
    return done, None, saturated_count


def _golden_one(program: IntegerProgram, state: np.ndarray) -> np.ndarray:
    return golden.step(program, state.reshape(-1, 1))[:, 0]


def _earliest_wrong(program: IntegerProgram, before: np.ndarray, record: np.ndarray,
                    candidate: int) -> int:
    """The first step (index into ``record``) at or below ``candidate`` where one golden step from
    the C's own previous state differs from the C."""
    upto = candidate + 1
    want = golden.step(program, before[:upto].T)
    wrong = np.flatnonzero(np.any(want != record[:upto].T, axis=0))
    return int(wrong[0]) if wrong.size else candidate


def _locate(program: IntegerProgram, host: HostModule, part: str, step: int, before: np.ndarray,
            expected: np.ndarray, got: np.ndarray) -> Mismatch:
    """Trace one step in both back ends and name the first operation whose value differs."""
    ffi = host.ffi
    length = int(host.lib.orbitfix_harness_trace_length())
    state_in = np.ascontiguousarray(before, dtype=np.int32)
    state_out = np.empty_like(state_in)
    trace = np.zeros(max(length, len(program.ops)), dtype=np.int32)
    host.lib.orbitfix_harness_trace(ffi.from_buffer("int32_t[]", state_in),
                                    ffi.from_buffer("int32_t[]", state_out),
                                    ffi.from_buffer("int32_t[]", trace))
    values = golden.evaluate(program, state_in.astype(np.int64).reshape(-1, 1))
    operation = None
    for index, (op, value) in enumerate(zip(program.ops, values, strict=True)):
        if index >= length or int(trace[index]) != int(value[0]):
            operation = {"index": index, "kind": op.kind, "note": op.note,
                         "args": list(op.args), "expected": int(value[0]),
                         "got": int(trace[index]) if index < length else None}
            break
    return Mismatch(part=part, step=step, state_before=[int(v) for v in before],
                    expected=[int(v) for v in expected], got=[int(v) for v in got],
                    operation=operation, units=state_units(program))
