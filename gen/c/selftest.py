"""The generated self-test (``NAME_selftest.h``/``NAME_selftest.c``): the golden model's states at
checkpoints over the start-up path (the first cycles from the initial state), as a table the
firmware checks on its own target, so a build whose arithmetic differs (another compiler, other
flags, a hand edit) says so before the control loop starts.

The table is read off golden's run, which gen makes anyway to check the start-up path; the C only
compares. Checkpoints are spread evenly: a change that has moved the orbit shows at the
checkpoints after it (the orbit does not fall back onto golden's bit for bit), so a handful of
them cover the span. A change that moves the orbit only after the span is left to the host proof.
"""

from __future__ import annotations

import math
import textwrap
import zlib
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from orbitfix.gen.c.emit import ShippedConstant, environment, firmware_context, int_literal
from orbitfix.gen.c.naming import CNames
from orbitfix.gen.model.definition import Model
from orbitfix.gen.program import golden
from orbitfix.gen.program.fixed_point import FixedPointPlan
from orbitfix.gen.program.integer_program import SATURATION_COUNT_BITS, IntegerProgram
from orbitfix.gen.timing.integrators import Integrator
from orbitfix.gen.timing.step_size import Timing

CHECKPOINTS = 16
PROBES = 48            # at most this many one-step probes
SAMPLES = 65536        # random states of the planning box the probes are chosen from
CHUNK = 8192           # states golden runs at once (its values of every operation are kept)
CHANGED_RUNS = 4096    # states a changed program is run on, at most, of those it changes a value
EDGE_ODDS = 16         # a state is at each edge of its box in 1 of this many samples
SEED = 1


@dataclass(frozen=True)
class Probes:
    """One-step probes: states whose next state tells a one-LSB change of a constant apart.

    states, nexts : shape (k, n_states) -- each probe's state and golden's next state.
    saturated : shape (k,) -- whether that step is saturated (the count goes from 0 to 1).
    changes : one-LSB changes (of each stored number of NAME.c, up and down) tried.
    samples : the random states of the planning box they were tried on.
    shown : of those, the changes that alter the next state (or an output) of some sampled
        state; the probes catch every one of them (greedy set cover).
    hidden : the changes that alter no sampled step, by name (e.g. ``kc0[2]+1``).
    memories : shape (k, n_outputs) -- each output's memory (its last value) at each probe.
    """

    states: np.ndarray
    nexts: np.ndarray
    saturated: np.ndarray  # bool, shape (k,): whether golden's step from each probe saturates
    changes: int
    shown: int
    samples: int
    memories: np.ndarray
    hidden: tuple[str, ...] = ()


def choose_probes(plan: FixedPointPlan, shipped: Sequence[ShippedConstant],
                  seed: int = SEED) -> Probes:
    """Probe states that catch every one-LSB change of a stored number of NAME.c (``shipped``:
    each constant, and each entry of a per-oscillator table, with the values it feeds, moved up
    and down by one) that shows on any of SAMPLES random states of the planning box. A change
    shows when the next state, or an output (from the memories the probe starts with), differs. Most
    changes alter the values they feed on few states, so the changed program is run only where
    one of them differs (at most CHANGED_RUNS states a change). States outside the box are not
    sampled: the firmware never steps from there. One more probe starts just beyond a state's
    proven range, so a step that does not hold it, or does not count, fails the test."""
    program = plan.program
    generator = np.random.default_rng(seed)
    batch = _box_samples(plan, SAMPLES, generator)
    memory = _memories(plan, batch)
    moves = [(constant, constant.stored + change) for constant in shipped for change in (1, -1)
             if program.word_min <= constant.stored + change <= program.word_max]
    shows = np.zeros((len(moves), SAMPLES), dtype=bool)
    ran = np.zeros(len(moves), dtype=int)  # states each changed program has been run on
    for start in range(0, SAMPLES, CHUNK):
        part = slice(start, start + CHUNK)
        states = batch[:, part]
        values = golden.evaluate(program, states)
        plain = _seen(program, np.stack([values[i] for i in program.next_state]).astype(np.int64),
                      memory[:, part])
        for m, (constant, value) in enumerate(moves):
            fed = np.full(states.shape[1], bool(constant.output_values))  # outputs: every state
            for i in constant.step_values:
                op = replace(program.ops[i], constant=value)
                fed |= golden.value_with(program, states, values, i, op) != values[i]
            where = np.flatnonzero(fed)[:CHANGED_RUNS - ran[m]]
            if not where.size:
                continue
            ran[m] += where.size
            changed = _changed(program, constant, value)
            seen = _seen(changed, _next_states(changed, states[:, where]),
                         memory[:, part][:, where])
            shows[m, start + where] = np.any(seen != plain[:, where], axis=0)
    hidden = tuple(f"{c.name}{'+1' if v > c.stored else '-1'}"
                   for (c, v), row in zip(moves, shows, strict=True) if not row.any())
    shown = [row for row in shows if row.any()]
    chosen: list[int] = []
    left = list(range(len(shown)))
    while left and len(chosen) < PROBES:
        counts = np.sum([shown[m] for m in left], axis=0)
        best = int(np.argmax(counts))
        chosen.append(best)
        left = [m for m in left if not shown[m][best]]
    states, memories = batch[:, chosen], memory[:, chosen]
    outside = _outside_probe(program, batch[:, 0])
    if outside is not None:  # one step that must count: a state just beyond its proven range
        states = np.hstack([states, outside])
        memories = np.hstack([memories, _memories(plan, outside)])
    nexts = _next_states(program, states)
    _, saturated = golden.step_saturated(program, states)
    return Probes(states=states.T, nexts=nexts.T, saturated=saturated, changes=len(moves),
                  shown=len(shown) - len(left), samples=SAMPLES, hidden=hidden,
                  memories=memories.T)


def _changed(program: IntegerProgram, constant: ShippedConstant, value: int) -> IntegerProgram:
    """``program`` with ``constant`` stored as ``value`` wherever NAME.c reads it."""
    ops = list(program.ops)
    for i in constant.step_values:
        ops[i] = replace(ops[i], constant=value)
    changed = replace(program, ops=tuple(ops))
    if constant.output_values:
        section = program.output_program
        outputs = list(section.ops)
        for i in constant.output_values:
            outputs[i] = replace(outputs[i], constant=value)
        changed = replace(changed, output_program=replace(section, ops=tuple(outputs)))
    return changed


def _memories(plan: FixedPointPlan, states: np.ndarray) -> np.ndarray:
    """Each output's memory (its last value) for a probe from each state: the output the state
    itself gives, as if the step before had ended there, so a slew limit binds only where the
    output moves that fast; shape (n_outputs, batch)."""
    program = plan.program
    initial = np.array(plan.initial_outputs, dtype=np.int64).reshape(-1, 1)
    if not program.outputs:
        return np.zeros((0, states.shape[1]), dtype=np.int64)
    return golden.output_values(program, states, np.repeat(initial, states.shape[1], axis=1))[1]


def _seen(program: IntegerProgram, nexts: np.ndarray, memory: np.ndarray) -> np.ndarray:
    """What the self-test compares after one step: the next states ``nexts`` and, with outputs,
    their values from ``memory``; shape (n_states + n_outputs, batch)."""
    if not program.outputs:
        return nexts
    return np.vstack([nexts, golden.output_values(program, nexts, memory)[0]])


def _outside_probe(program, inside: np.ndarray) -> np.ndarray | None:
    """``inside`` with the first held state one LSB beyond its proven range (shape (n, 1)), so
    the step holds it and counts a saturated step; None when no state is held or the range
    reaches the word's edge."""
    for op in program.ops:
        if op.kind == "state" and op.held and op.held[1] < program.word_max:
            state = inside.copy().reshape(-1, 1)
            state[op.state, 0] = op.held[1] + 1
            return state
    return None


def _next_states(program, states: np.ndarray) -> np.ndarray:
    values = golden.evaluate(program, states)
    return np.stack([values[i] for i in program.next_state]).astype(np.int64)


def _box_samples(plan: FixedPointPlan, count: int, generator: np.random.Generator) -> np.ndarray:
    """``count`` random states: each state uniform over its planning box (an angle over the whole
    turn; a runtime parameter's value and target each over its range, so some steps ramp), and
    each, one time in EDGE_ODDS, at either edge of its box; shape (n_states, count)."""
    program = plan.program
    rows = []
    for i, bits in enumerate(program.state_fraction_bits):
        if i in program.angle_states:
            rows.append(generator.integers(program.word_min, program.word_max + 1, count))
        else:
            low, high = plan.box[i]
            lo = max(program.word_min, math.ceil(low * 2.0 ** bits))
            hi = max(lo, min(program.word_max, math.floor(high * 2.0 ** bits)))
            row = generator.integers(lo, hi + 1, count)
            edge = generator.integers(0, EDGE_ODDS, count)  # the box's edges, where limits bind
            row[edge == 0], row[edge == 1] = lo, hi
            rows.append(row)
    return np.stack(rows).astype(np.int64)


def checkpoints(trajectory: np.ndarray) -> list[tuple[int, list[int]]]:
    """(step, golden's state after it) at CHECKPOINTS steps spread evenly over ``trajectory``
    (golden's states from the initial state, row k after k steps)."""
    span = len(trajectory) - 1
    if span < 1:
        raise ValueError("the self-test needs a trajectory of at least one step")
    wanted = sorted({max(1, math.ceil(span * (k + 1) / CHECKPOINTS)) for k in range(CHECKPOINTS)})
    return [(step, [int(v) for v in trajectory[step]]) for step in wanted]


def probe_check(fields: list[list[int]], saturated: np.ndarray, word_bits: int) -> int:
    """The CRC-32 (zlib's: reflected polynomial 0xEDB88320) the self-test forms over every
    probe's state after its step, field by field, and its count of saturated steps (0, or 1 when
    the step saturates), each as little-endian two's-complement bytes. One number stands for
    all the probes' next states; a change of a single field spans at most 32 bits of the
    stream, and CRC-32 detects every error burst that short."""
    stream = bytearray()
    for row, count in zip(fields, saturated, strict=True):
        for value in row:
            stream += int(value).to_bytes(word_bits // 8, "little", signed=True)
        stream += int(count).to_bytes(SATURATION_COUNT_BITS // 8, "little")
    return zlib.crc32(bytes(stream))


def _outputs_along(program, trajectory: np.ndarray, initial: tuple[int, ...],
                   last: int) -> np.ndarray:
    """Golden's outputs after each of the first ``last`` steps of ``trajectory`` (row k after k
    steps; row 0 the memories the init function sets), shape (last + 1, n_outputs)."""
    found = np.zeros((last + 1, len(program.outputs)), dtype=np.int64)
    if not program.outputs:
        return found
    found[0] = initial
    for k in range(1, last + 1):
        found[k] = golden.output_values(program, trajectory[k].reshape(-1, 1),
                                        found[k - 1].reshape(-1, 1))[0][:, 0]
    return found


def render_selftest(model: Model, timing: Timing, integrator: Integrator, plan: FixedPointPlan,
                    trajectory: np.ndarray, counts: np.ndarray) -> dict[str, str]:
    """The self-test files ``NAME_selftest.h`` and ``NAME_selftest.c`` for one planned model;
    ``trajectory`` and ``counts`` are golden's run from the plan's initial state and its count of
    saturated steps after each step (``StartPath.trajectory`` and ``.counts``, which gen has
    computed anyway to check the start-up path)."""
    names = CNames(model.name)
    program = plan.program
    table = checkpoints(np.asarray(trajectory))
    firmware = firmware_context(model, timing, integrator, plan)
    probes = choose_probes(plan, firmware["shipped_constants"])
    literal = lambda row: [int_literal(int(v), program.word_bits) for v in row]  # noqa: E731
    # The outputs' fields are checked beside the states: golden's outputs along the run from the
    # initial state, and after each probe's step from the memories the probe starts with.
    outputs = _outputs_along(program, np.asarray(trajectory), plan.initial_outputs, table[-1][0])
    probe_memory = probes.memories.T
    probe_outputs = (golden.output_values(program, probes.nexts.T, probe_memory)[0]
                     if program.outputs else probe_memory)
    after = [[*b, *probe_outputs[:, k]] for k, b in enumerate(probes.nexts)]
    context = {
        **firmware,
        "fields": [names.field(n) for n in (*program.state_names, *(o.name for o in program.outputs))],
        "last_step": table[-1][0],
        "checkpoints": [{"step": step, "state": literal([*values, *outputs[step]]),
                         "count": int(counts[step])} for step, values in table],
        "probes": [{"state": literal([*a, *probe_memory[:, k]])}
                   for k, a in enumerate(probes.states)],
        "probe_check": f"UINT32_C(0x{probe_check(after, probes.saturated, program.word_bits):08X})",
        "count_bytes": SATURATION_COUNT_BITS // 8,
        "probe_changes": probes.changes, "probe_caught": probes.shown,
        "probe_samples": probes.samples, "probe_hidden": probes.hidden,
        "probe_hidden_lines": textwrap.wrap(", ".join(probes.hidden), 90),
        "probe_uncaught": probes.changes - probes.shown - len(probes.hidden),
        "probe_limit": PROBES,
    }
    env = environment()
    return {
        names.selftest_header: env.get_template("selftest.h.j2").render(context),
        names.selftest_source: env.get_template("selftest.c.j2").render(context),
    }
