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
from dataclasses import dataclass, replace

import numpy as np

from orbitfix.gen.c.emit import environment, firmware_context, int_literal
from orbitfix.gen.c.naming import CNames
from orbitfix.gen.model.definition import Model
from orbitfix.gen.program import golden
from orbitfix.gen.program.fixed_point import FixedPointPlan
from orbitfix.gen.timing.integrators import Integrator
from orbitfix.gen.timing.step_size import Timing

CHECKPOINTS = 16
PROBES = 16            # at most this many one-step probes
MOST_SAMPLES = 65536   # random states of the planning box the probes are chosen from ...
PROBE_WORK = 2e8       # ... fewer when operations x samples x changed programs would pass this
SEED = 1


@dataclass(frozen=True)
class Probes:
    """One-step probes: states whose next state tells a one-LSB change of a constant apart.

    states, nexts : shape (k, n_states) -- each probe's state and golden's next state.
    saturated : shape (k,) -- whether that step is saturated (the count goes from 0 to 1).
    changes : one-LSB changes (of each distinct constant of NAME.c, up and down) tried.
    samples : the random states of the planning box they were tried on.
    shown : of those, the changes that alter the next state of some sampled state; the probes
        catch every one of them (greedy set cover).
    """

    states: np.ndarray
    nexts: np.ndarray
    saturated: np.ndarray  # bool, shape (k,): whether golden's step from each probe saturates
    changes: int
    shown: int
    samples: int


def choose_probes(plan: FixedPointPlan, seed: int = SEED) -> Probes:
    """Probe states that catch every one-LSB change of a constant that shows on any of a sample
    of random states of the planning box (each distinct stored constant and format, as NAME.c
    holds it, moved up and down by one; golden runs each changed program once over the whole
    sample, of MOST_SAMPLES states or fewer within PROBE_WORK). States outside the box are not
    sampled: the firmware never steps from there. One more probe starts just beyond a state's
    proven range, so a step that does not hold it, or does not count, fails the test."""
    program = plan.program
    groups: dict[tuple[int, int], list[int]] = {}
    for report in plan.constants:
        groups.setdefault((report.stored, report.format.fraction_bits), []).append(report.index)
    runs = 1 + 2 * len(groups)
    samples = int(max(256, min(MOST_SAMPLES, PROBE_WORK / (len(program.ops) * runs))))
    batch = _box_samples(plan, samples, np.random.default_rng(seed))
    plain = _next_states(program, batch)
    shows: list[np.ndarray] = []
    changes = 0
    for (stored, _), indices in groups.items():
        for change in (1, -1):
            if not program.word_min <= stored + change <= program.word_max:
                continue
            changes += 1
            ops = list(program.ops)
            for i in indices:
                ops[i] = replace(ops[i], constant=stored + change)
            differs = np.any(_next_states(replace(program, ops=tuple(ops)), batch) != plain, axis=0)
            if differs.any():
                shows.append(differs)
    chosen: list[int] = []
    left = list(range(len(shows)))
    while left and len(chosen) < PROBES:
        counts = np.sum([shows[m] for m in left], axis=0)
        best = int(np.argmax(counts))
        chosen.append(best)
        left = [m for m in left if not shows[m][best]]
    states, nexts = batch[:, chosen], plain[:, chosen]
    outside = _outside_probe(program, batch[:, 0])
    if outside is not None:  # one step that must count: a state just beyond its proven range
        states = np.hstack([states, outside])
        nexts = np.hstack([nexts, _next_states(program, outside)])
    _, saturated = golden.step_saturated(program, states)
    return Probes(states=states.T, nexts=nexts.T, saturated=saturated,
                  changes=changes, shown=len(shows) - len(left), samples=samples)


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
    """``count`` random states: each model state uniform over its planning box (an angle over the
    whole turn), the runtime parameters' fields at their initial values; shape (n_states, count)."""
    program = plan.program
    rows = []
    for i, bits in enumerate(program.state_fraction_bits):
        if i >= program.model_state_count:
            rows.append(np.full(count, plan.initial_state[i], dtype=np.int64))
        elif i in program.angle_states:
            rows.append(generator.integers(program.word_min, program.word_max + 1, count))
        else:
            low, high = plan.box[i]
            lo = max(program.word_min, math.ceil(low * 2.0 ** bits))
            hi = min(program.word_max, math.floor(high * 2.0 ** bits))
            rows.append(generator.integers(lo, max(lo, hi) + 1, count))
    return np.stack(rows).astype(np.int64)


def checkpoints(trajectory: np.ndarray) -> list[tuple[int, list[int]]]:
    """(step, golden's state after it) at CHECKPOINTS steps spread evenly over ``trajectory``
    (golden's states from the initial state, row k after k steps)."""
    span = len(trajectory) - 1
    if span < 1:
        raise ValueError("the self-test needs a trajectory of at least one step")
    wanted = sorted({max(1, math.ceil(span * (k + 1) / CHECKPOINTS)) for k in range(CHECKPOINTS)})
    return [(step, [int(v) for v in trajectory[step]]) for step in wanted]


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
    probes = choose_probes(plan)
    literal = lambda row: [int_literal(int(v), program.word_bits) for v in row]  # noqa: E731
    # The outputs' fields are checked beside the states: golden's outputs along the run from the
    # initial state, and after each probe's step from the memories the init function sets.
    outputs = _outputs_along(program, np.asarray(trajectory), plan.initial_outputs, table[-1][0])
    memory = np.array(plan.initial_outputs, dtype=np.int64).reshape(-1, 1)
    probe_memory = np.repeat(memory, len(probes.states), axis=1)
    probe_outputs = (golden.output_values(program, probes.nexts.T, probe_memory)[0]
                     if program.outputs else probe_memory)
    context = {
        **firmware_context(model, timing, integrator, plan),
        "fields": [names.field(n) for n in (*program.state_names, *(o.name for o in program.outputs))],
        "last_step": table[-1][0],
        "checkpoints": [{"step": step, "state": literal([*values, *outputs[step]]),
                         "count": int(counts[step])} for step, values in table],
        "probes": [{"state": literal([*a, *probe_memory[:, k]]),
                    "next": literal([*b, *probe_outputs[:, k]]), "count": int(s)}
                   for k, (a, b, s) in enumerate(zip(probes.states, probes.nexts, probes.saturated,
                                                     strict=True))],
        "probe_changes": probes.changes, "probe_shown": probes.shown,
        "probe_samples": probes.samples,
    }
    env = environment()
    return {
        names.selftest_header: env.get_template("selftest.h.j2").render(context),
        names.selftest_source: env.get_template("selftest.c.j2").render(context),
    }
