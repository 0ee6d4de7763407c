"""The start-up path: the integer program (L2) run from the model's own initial state, against the
float step map (L1) from the same state, over the first cycles.

Bit-exact C is only as good as the integer map it matches. Two ways that map can be wrong from the
very first step, while golden and C agree bit for bit:

- a value saturates (it reaches the edge of its word, where the program clamps it): the plan did
  not hold the path from the start, and the dynamics are no longer the model's;
- the integer map parts from the float map by more than a tolerance, whatever the cause (a format
  too coarse, a constant rounded badly, a rest state where the model keeps moving).

The parting at a step is the distance, in units of each state's half range (the largest over the
states), from the integer state to the nearest float state within a slip of a few steps: a timing
slip within the period tolerance (1000 ppm) is a period error, judged elsewhere, not a parting.

A step is counted as saturated by the program's own rule (``integer_program``: a clamp changed a
value the next state depends on), which golden applies: so the count here is the count of
saturated steps the firmware keeps in its state struct after the same steps. Angle sums wrap by
design and are not counted.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from orbitfix.gen.model.angles import radians_to_turns
from orbitfix.gen.pipeline import Design, program_states
from orbitfix.gen.program import golden
from orbitfix.gen.program.fixed_point import FixedPointPlan
from orbitfix.gen.program.lowering import evaluate_real
from orbitfix.gen.study.discrete_cycle import CycleTolerance, SteppedCycle, integer_cycle

PATH_CYCLES = 2.0      # the first cycles compared
PATH_TOLERANCE = 0.05  # largest parting, in units of each state's half range (turns for a phase)
SLIP_PPM = 1000.0      # a timing slip this small (the default period tolerance) is not parting


@dataclass(frozen=True)
class Saturation:
    """The first clamp that acted on the path: a value at the edge of its word, or a state held
    at the edge of the range the plan proved the step for (``held``)."""

    value: int
    note: str
    step: int
    format: str
    integer: int
    held: bool = False

    def to_json(self) -> dict:
        return {"value_index": self.value, "note": self.note, "step": self.step,
                "format": self.format, "integer": self.integer}

    def describe(self) -> str:
        if self.held:
            return (f"state v{self.value} ({self.note}) saturates at step {self.step} from the "
                    f"initial state: it leaves the range the plan proved the step for and is held "
                    f"at {self.integer}, that range's edge ({self.format})")
        return (f"value v{self.value} ({self.note}) saturates at step {self.step} from the initial "
                f"state: {self.integer} is the edge of its format {self.format}")


@dataclass(frozen=True)
class StartPath:
    """The integer map's first cycles from the initial state, against the float map's."""

    steps: int
    saturation: Saturation | None
    saturated_steps: int
    parting: float
    parting_state: str
    parting_step: int
    tolerance: float
    # golden's whole state (the runtime parameters' fields too) at every step of the path, row k
    # after k steps: the self-test's table is read off it (gen/c/selftest.py)
    trajectory: np.ndarray | None = field(default=None, repr=False, compare=False)
    # the firmware's count of saturated steps after k steps (row k), beside the trajectory
    counts: np.ndarray | None = field(default=None, repr=False, compare=False)

    @property
    def ok(self) -> bool:
        return self.saturation is None and self.parting <= self.tolerance

    def problems(self) -> list[str]:
        """Each failure as a sentence naming what, where and how far; empty when it holds."""
        found = []
        if self.saturation is not None:
            found.append(f"{self.saturation.describe()} ({self.saturated_steps} of {self.steps} "
                         "steps saturate); widen that value's format (plan for the path)")
        if self.parting > self.tolerance:
            found.append(f"the integer map parts from the float step map by {self.parting:.3g} of "
                         f"'{self.parting_state}''s range at step {self.parting_step} from the "
                         f"initial state (tolerance {self.tolerance:g}): bit-exact C of wrong "
                         "dynamics")
        return found

    def to_json(self) -> dict:
        return {"ok": self.ok, "steps": self.steps,
                "saturation": self.saturation.to_json() if self.saturation else None,
                "saturated_steps": self.saturated_steps, "parting": self.parting,
                "parting_state": self.parting_state, "parting_step": self.parting_step,
                "tolerance": self.tolerance}


def _clamp_acted(op, before: np.ndarray, value: int, edges: tuple[int, int]) -> bool:
    """Whether a counted clamp changed its value: a held state outside its range before the
    step, or a result left at the word's edge."""
    if op.held:
        return not op.held[0] <= int(before[op.state]) <= op.held[1]
    return int(value) in edges


def check_start_path(built: Design, cycles: float = PATH_CYCLES,
                     tolerance: float = PATH_TOLERANCE, plan: FixedPointPlan | None = None) -> StartPath:
    """Run golden and the float step map from the model's initial state for ``cycles`` cycles.

    plan : the plan to judge (default the design's own; a test passes a seeded fault here).
    """
    plan = plan or built.plan
    program = plan.program
    n = program.model_state_count
    steps = max(1, math.ceil(cycles * built.timing.steps_per_cycle))
    scale = 2.0 ** np.asarray(program.state_fraction_bits, dtype=float)
    nominal = [v for p in built.model.runtime_parameters for v in (p.value, p.value)]
    real = np.asarray([*built.model.initial_state, *nominal], dtype=float)
    for i in program.angle_states:
        real[i] = radians_to_turns(real[i])
    real = real.reshape(-1, 1)
    ints = np.asarray(plan.initial_state, dtype=np.int64).reshape(-1, 1)
    edges = (program.word_min, program.word_max)
    counted = sorted(program.counted_clamps)
    first: Saturation | None = None
    saturated_steps = 0
    floats = np.empty((steps + 1, n))
    fixed = np.empty((steps + 1, n))
    floats[0], fixed[0] = real[:n, 0], ints[:n, 0] / scale[:n]
    trajectory = np.empty((steps + 1, ints.shape[0]), dtype=np.int64)
    trajectory[0] = ints[:, 0]
    counts = np.zeros(steps + 1, dtype=np.int64)
    for k in range(1, steps + 1):
        saturated = np.zeros(1, dtype=bool)
        values = golden.evaluate(program, ints, saturated)
        if saturated[0]:
            saturated_steps += 1
            if first is None:
                i = next(i for i in counted if _clamp_acted(program.ops[i], ints[:, 0],
                                                            values[i][0], edges))
                first = Saturation(i, program.ops[i].note, k, plan.value_format(i).name,
                                   int(values[i][0]), held=bool(program.ops[i].held))
        ints = np.stack([values[i] for i in program.next_state]).astype(np.int64)
        reals = evaluate_real(program, real)
        real = np.stack([reals[i] for i in program.next_state])
        floats[k], fixed[k] = real[:n, 0], ints[:n, 0] / scale[:n]
        trajectory[k] = ints[:, 0]
        counts[k] = saturated_steps
    halves = _half_ranges(built, floats)
    for i in program.angle_states:
        halves[i] = 1.0
    slip = 1 + math.ceil(SLIP_PPM * 1e-6 * steps)
    best = np.full(steps + 1, np.inf)
    worst_state = np.zeros(steps + 1, dtype=int)
    for shift in range(-slip, slip + 1):  # the float map's state a few steps earlier or later
        index = np.clip(np.arange(steps + 1) + shift, 0, steps)
        gap = np.abs(fixed - floats[index])
        for i in program.angle_states:
            gap[:, i] = np.minimum(gap[:, i] % 1.0, 1.0 - gap[:, i] % 1.0)  # turns, on the circle
        parted = gap / halves
        nearer = parted.max(axis=1) < best
        best = np.where(nearer, parted.max(axis=1), best)
        worst_state = np.where(nearer, parted.argmax(axis=1), worst_state)
    step = int(np.argmax(best))
    return StartPath(steps=steps, saturation=first, saturated_steps=saturated_steps,
                     parting=float(best[step]), parting_state=program.state_names[worst_state[step]],
                     parting_step=step, tolerance=tolerance, trajectory=trajectory,
                     counts=counts)


def _half_ranges(built: Design, floats: np.ndarray) -> np.ndarray:
    """Each state's half range over the continuous cycle and the float path together; a state
    that never moves on either falls back to the largest of the others."""
    cycle = built.analysis.cycle
    low = np.minimum(np.asarray(cycle.state_min, dtype=float), floats.min(axis=0))
    high = np.maximum(np.asarray(cycle.state_max, dtype=float), floats.max(axis=0))
    halves = 0.5 * (high - low)
    positive = halves[halves > 0]
    fallback = float(positive.max()) if positive.size else 1.0
    return np.where(halves > 0, halves, fallback)


def plan_warnings(built: Design, path: StartPath, tolerance: CycleTolerance | None = None,
                  ) -> tuple[SteppedCycle | None, list[str]]:
    """What ``gen`` warns about the plan it writes: the start-up path's problems, and the integer
    map's cycle against the continuous one when it misses a tolerance (timed by the section rule of
    ``gen/study/section.py``, so a phase model is timed per turn of its phase)."""
    tolerance = tolerance or CycleTolerance()
    found = path.problems()
    cycle = built.analysis.cycle
    stepped = integer_cycle(built.plan.program, program_states(built.model, cycle.samples),
                            built.timing.steps_per_cycle, cycle.state_min, cycle.state_max,
                            tolerance=tolerance, turns=cycle.turns)
    if not stepped.kept:
        found.append(f"the integer map {stepped.verdict} (tolerance {tolerance.period_ppm:g} ppm "
                     f"in period, {100 * tolerance.amplitude:g} % in amplitude): raise the loop rate "
                     "or the word size (plan --search finds the cheapest that keeps it)")
    return stepped, found
