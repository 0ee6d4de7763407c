"""The bit-exact proof: compiled C (layer L3) against the golden interpreter (layer L2).

Two parts: one step from each of many random states spread over the whole word range, and a long
trajectory from the initial state in which every single step is compared. On the random states,
the verification-only traced step (``NAME_trace.c``) is also compared with golden value by value,
and the firmware's own step with the traced step, so a fault in either file is caught. A mismatch
names the first failing step, the state before it, what was expected and got, and the operation
of the integer program where the two part.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from orbitfix.gen.errors import InputError
from orbitfix.gen.program import golden
from orbitfix.gen.program.integer_program import IntegerProgram
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

    def to_json(self) -> dict:
        return {
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


@dataclass
class BitExactReport:
    """The outcome of both parts of the proof."""

    states_compared: int = 0
    steps_compared: int = 0
    first_mismatch: Mismatch | None = None
    seconds: dict[str, float] = field(default_factory=dict)

    @property
    def bit_exact(self) -> bool:
        return self.first_mismatch is None



def random_states(program: IntegerProgram, count: int, typical: np.ndarray,
                  rng: np.random.Generator) -> np.ndarray:
    """States spread over the word's whole range, the cycle's neighbourhood, the edges of
    saturation and the smallest values. typical : ndarray, shape (n_states,), integer magnitudes
    of the states on the cycle. Returns int64 ndarray, shape (n_states, count)."""
    n = len(program.state_names)
    low, high = program.word_min, program.word_max
    quarter = count // 4
    spread = rng.integers(low, high, size=(n, count - 3 * quarter), endpoint=True)
    reach = np.maximum(2 * np.asarray(typical, dtype=np.int64), 16).reshape(-1, 1)
    near_cycle = np.clip(rng.integers(-reach, reach, size=(n, quarter), endpoint=True), low, high)
    edges = np.where(rng.random((n, quarter)) < 0.5, low, high) - np.sign(
        rng.random((n, quarter)) - 0.5).astype(np.int64) * rng.integers(0, 1 << 12, (n, quarter))
    edges = np.clip(edges, low, high)
    small = rng.integers(-(1 << 10), 1 << 10, size=(n, quarter), endpoint=True)
    return np.hstack([spread, near_cycle, edges, small]).astype(np.int64)


def prove_bit_exact(program: IntegerProgram, host: HostModule, initial: np.ndarray,
                    typical: np.ndarray, states: int = 1_000_000, steps: int = 1_000_000,
                    segment: int = 64, block: int = 1 << 18, seed: int = SEED,
                    shipped_trace: Callable[[], HostModule | None] | None = None) -> BitExactReport:
    """Compare C and golden on ``states`` random states and a ``steps``-step trajectory.

    shipped_trace : builds, when a mismatch must be located, a module whose traced step is the
        firmware's own step code with a trace added (see ``host_check``), so the operation named
        is the firmware's; None (or a None from it) locates with ``host``'s traced step.
    """
    report = BitExactReport()
    _check_shape(program, host)
    started = time.perf_counter()
    rng = np.random.default_rng(seed)
    batch = random_states(program, states, typical, rng)
    got = _c_step_each(host, batch)
    locator = _Locator(host, shipped_trace)
    chunk = min(CHUNK, max(1024, TRACE_BUDGET // len(program.ops)))
    for first in range(0, states, chunk):
        tell("comparing random states, C against golden", first, states)
        part = batch[:, first:first + chunk]
        values = golden.evaluate(program, part)
        want = np.stack([values[i] for i in program.next_state])
        bad = np.flatnonzero(np.any(got[:, first:first + chunk] != want, axis=0))
        if bad.size:
            k = first + int(bad[0])
            report.states_compared = k + 1
            report.seconds["random_states"] = time.perf_counter() - started
            report.first_mismatch = _locate(program, locator.host(), "random states", k,
                                            batch[:, k], want[:, int(bad[0])], got[:, k])
            return report
        traced = _traced_mismatch(program, host, part, values, got[:, first:first + chunk])
        if traced is not None:
            k = first + traced.step
            report.states_compared = k + 1
            report.seconds["random_states"] = time.perf_counter() - started
            report.first_mismatch = replace(traced, step=k)
            return report
    report.states_compared = states
    report.seconds["random_states"] = time.perf_counter() - started
    started = time.perf_counter()
    report.steps_compared, report.first_mismatch = _trajectory(
        program, host, np.asarray(initial, dtype=np.int64), steps, segment, block, locator)
    report.seconds["trajectory"] = time.perf_counter() - started
    return report


class _Locator:
    """The module whose traced step locates a mismatch, built at most once and only if needed."""

    def __init__(self, host: HostModule, shipped_trace: Callable[[], HostModule | None] | None):
        self._host, self._build, self._built = host, shipped_trace, None

    def host(self) -> HostModule:
        if self._build is not None:
            self._built, self._build = self._build(), None
        return self._built or self._host


def _traced_mismatch(program: IntegerProgram, host: HostModule, part: np.ndarray,
                     values: list[np.ndarray], shipped: np.ndarray) -> Mismatch | None:
    """The traced step on a batch of states: every value against golden's, and its next state
    against the firmware step's (``shipped``). The first state where either differs, with its
    index in the batch as ``step``."""
    out, trace = _c_trace_each(host, part)
    wrong_value = np.zeros(part.shape[1], dtype=bool)
    for index, value in enumerate(values):
        wrong_value |= trace[:, index] != value
    wrong_state = np.any(out != shipped, axis=0)
    bad = np.flatnonzero(wrong_value | wrong_state)
    if not bad.size:
        return None
    j = int(bad[0])
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


def _c_trace_each(host: HostModule, batch: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The traced step from each state: (next states, shape (n_states, count); every value,
    shape (count, trace length))."""
    ffi = host.ffi
    flat_in = np.ascontiguousarray(batch.T, dtype=np.int32)
    flat_out = np.empty_like(flat_in)
    length = int(host.lib.orbitfix_harness_trace_length())
    trace = np.empty((flat_in.shape[0], length), dtype=np.int32)
    host.lib.orbitfix_harness_trace_each(ffi.from_buffer("int32_t[]", flat_in),
                                         ffi.from_buffer("int32_t[]", flat_out),
                                         ffi.from_buffer("int32_t[]", trace), flat_in.shape[0])
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


def _c_step_each(host: HostModule, batch: np.ndarray) -> np.ndarray:
    flat_in = np.ascontiguousarray(batch.T, dtype=np.int32)
    flat_out = np.empty_like(flat_in)
    ffi = host.ffi
    host.lib.orbitfix_harness_step_each(ffi.from_buffer("int32_t[]", flat_in),
                                         ffi.from_buffer("int32_t[]", flat_out), flat_in.shape[0])
    return flat_out.T.astype(np.int64)


def _c_run(host: HostModule, state: np.ndarray, steps: int) -> tuple[np.ndarray, np.ndarray]:
    ffi = host.ffi
    io = np.ascontiguousarray(state, dtype=np.int32).copy()
    record = np.empty((steps, io.size), dtype=np.int32)
    host.lib.orbitfix_harness_run(ffi.from_buffer("int32_t[]", io), steps,
                                  ffi.from_buffer("int32_t[]", record))
    return io.astype(np.int64), record.astype(np.int64)


def _trajectory(program: IntegerProgram, host: HostModule, initial: np.ndarray, steps: int,
                segment: int, block: int, locator: _Locator) -> tuple[int, Mismatch | None]:
    """Run C in blocks; in each block golden runs freely from every ``segment``-th C state (the
    checkpoints) for ``segment`` steps, vectorised over the checkpoints, and every step is compared
    with the C's record. Returns (steps compared, first mismatch or None)."""
    block = max(segment, block - block % segment)
    state = initial
    done = 0
    while done < steps:
        tell("comparing the trajectory, C against golden", done, steps)
        count = min(block, steps - done)
        end_state, record = _c_run(host, state, count)
        before = np.vstack([state.reshape(1, -1), record[:-1]])  # the state before each step
        starts = np.arange(0, count, segment)
        golden_state = before[starts].T
        for i in range(segment):
            index = starts + i
            live = index < count
            if not live.all():
                golden_state, index, starts = golden_state[:, live], index[live], starts[live]
            golden_state = golden.step(program, golden_state)
            if np.any(golden_state != record[index].T):
                # Segments advance together, so an earlier global step may also be wrong.
                first = _earliest_wrong(program, before, record, int(index[-1]))
                return done + first + 1, _locate(program, locator.host(), "trajectory",
                                                 done + first + 1,
                                                 before[first], _golden_one(program, before[first]),
                                                 record[first])
        done += count
        state = end_state
    return done, None


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
