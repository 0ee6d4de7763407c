"""The cycle of the stepped model: how the float step map (L1) and the integer program (L2) keep
the continuous cycle's frequency and amplitude, and the lowest loop rate that still keeps it.

Both maps are run from a batch of points spread along the continuous cycle, so one vectorised run
measures many cycles at once. The period is the mean time between crossings of the section (the
crossing rule of :mod:`.section`: the first swinging state passing the middle of its range going
up, or, for a model with a phase, the phase passing a fixed angle, one crossing per turn), each
crossing placed between two steps by linear interpolation. Amplitudes are those of the swinging
states; an angle has none.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from orbitfix.gen import work_size
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.angles import radians_to_turns
from orbitfix.gen.model.definition import Model
from orbitfix.gen.pipeline import START_PATH_CYCLES, plan_step, program_states, start_path_steps
from orbitfix.gen.program import golden
from orbitfix.gen.program.integer_program import IntegerProgram
from orbitfix.gen.program.lowering import evaluate_real
from orbitfix.gen.study.section import Section, amplitude_errors, resting, section_for
from orbitfix.gen.timing.integrators import Integrator

START_POINTS = 24
STUDY_ADVICE = ("lower loop_hz (or raise cycle_hz) so a cycle takes fewer steps, or study the "
                "model at a lower loop rate")


@dataclass(frozen=True)
class CycleTolerance:
    """How far a stepped cycle may stray from the continuous one and still count as kept.

    period_ppm : float -- largest period error, parts per million (1000 ppm = 0.1 %); the error is
        positive when the stepped orbit runs slow (its period is longer than the wanted one).
    amplitude : float -- largest relative error of any state's half range (0.02 = 2 %).
    """

    period_ppm: float = 1000.0
    amplitude: float = 0.02


@dataclass(frozen=True)
class SteppedCycle:
    """What a stepped map does from points on the continuous cycle. ``amplitude`` holds the half
    range of each swinging state (the model states that are not angles), in model order, and
    ``middle`` the middle of its range (the level of a state at rest on the cycle)."""

    kept: bool
    verdict: str
    period_steps: float | None
    period_error_ppm: float | None
    amplitude: tuple[float, ...] | None
    amplitude_error: float | None
    middle: tuple[float, ...] | None = None

    def amplitude_shift(self, reference: SteppedCycle) -> float:
        """The largest relative amplitude error of this cycle against another stepped cycle of the
        same model (by the rule of ``gen/study/section.py``: swings relatively, the level of a
        state at rest on the reference)."""
        if not self.amplitude or not reference.amplitude:
            return 0.0
        a, m = np.asarray(self.amplitude), np.asarray(self.middle if self.middle else self.amplitude)
        b, n = (np.asarray(reference.amplitude),
                np.asarray(reference.middle if reference.middle else reference.amplitude))
        return float(np.max(amplitude_errors(m - a, m + a, n - b, n + b)))

    def to_json(self) -> dict:
        return {"kept": self.kept, "verdict": self.verdict, "period_steps": self.period_steps,
                "period_error_ppm": self.period_error_ppm,
                "amplitude": list(self.amplitude) if self.amplitude else None,
                "amplitude_error": self.amplitude_error}


def measure(step: Callable[[np.ndarray], np.ndarray], start: np.ndarray, steps: int,
            wanted_period_steps: float, cycle_min: np.ndarray, cycle_max: np.ndarray,
            tolerance: CycleTolerance, section: Section | None = None) -> SteppedCycle:
    """Run ``step`` (a map on arrays of shape (n_states, batch)) from ``start`` and compare the
    cycle it settles on with the continuous one (given in the same units as the states). Only the
    model's own swinging states (among the first ``len(cycle_min)`` rows) are compared in
    amplitude; rows after them (runtime parameters and their targets) are carried along.

    section : the crossing rule that times the cycle (default: state 0 through the middle of its
        range, for a model without angles); an angle section's state is in turns."""
    if section is None:
        section = Section(state=0, angle=False, level=0.5 * float(cycle_min[0] + cycle_max[0]),
                          swinging=tuple(range(len(cycle_min))))
    swinging = list(section.swinging)
    cycle_low = np.asarray(cycle_min, dtype=float)[swinging]
    cycle_high = np.asarray(cycle_max, dtype=float)[swinging]
    half_range = 0.5 * (cycle_high - cycle_low)
    state = np.array(start)
    first = np.empty((steps + 1, state.shape[1]))
    first[0] = state[section.state]
    tail = max(2, math.ceil(wanted_period_steps * 1.5))
    low = np.full((len(swinging), state.shape[1]), np.inf)
    high = np.full((len(swinging), state.shape[1]), -np.inf)
    for k in range(steps):
        state = step(state)
        first[k + 1] = state[section.state]
        if k >= steps - tail:
            low = np.minimum(low, state[swinging])
            high = np.maximum(high, state[swinging])
        if not np.all(np.isfinite(state)):
            return SteppedCycle(False, "the stepped map grows without bound", None, None, None, None)
    low, high = np.mean(low, axis=1), np.mean(high, axis=1)
    amplitude = 0.5 * (high - low)
    errors = amplitude_errors(low, high, cycle_low, cycle_high)
    amplitude_error = float(np.max(errors)) if swinging else 0.0
    crossings = _crossing_periods(first, section)
    if crossings.size == 0 or amplitude_error > 0.5:
        moving = ~resting(cycle_low, cycle_high)
        shrink = bool(np.any(moving)) and np.all(amplitude[moving] < 0.5 * half_range[moving])
        verdict = ("the stepped map collapses toward an equilibrium or a small cycle" if shrink
                   else "the stepped map leaves the continuous cycle")
        return SteppedCycle(False, verdict, None, None, tuple(float(a) for a in amplitude),
                            amplitude_error)
    period = float(np.mean(crossings))
    error_ppm = (period / wanted_period_steps - 1) * 1e6  # positive: runs slow
    kept = abs(error_ppm) <= tolerance.period_ppm and amplitude_error <= tolerance.amplitude
    verdict = ("keeps the cycle within tolerance" if kept else
               f"keeps a cycle, but off by {error_ppm:+.0f} ppm in period and "
               f"{100 * amplitude_error:.2f} % in amplitude")
    return SteppedCycle(kept, verdict, period, error_ppm, tuple(float(a) for a in amplitude),
                        amplitude_error, tuple(float(v) for v in 0.5 * (high + low)))


def _crossing_periods(values: np.ndarray, section: Section) -> np.ndarray:
    """Periods between crossings of the section (steps per crossing times the turns per cycle),
    skipping each trajectory's first crossing."""
    periods = []
    for times in section.crossing_times(values):
        if times.size >= 3:
            periods.extend(section.turns * np.diff(times[1:]))
    return np.asarray(periods, dtype=float)


def start_points(samples: np.ndarray, count: int = START_POINTS) -> np.ndarray:
    """``count`` points spread evenly in time along the continuous cycle, shape (n, count)."""
    index = np.linspace(0, samples.shape[1], count, endpoint=False).astype(int)
    return samples[:, index]


def _program_samples(program: IntegerProgram, samples: np.ndarray) -> np.ndarray:
    """The samples as the program's whole state: a program with runtime parameters carries more
    rows than the model has states (see :func:`orbitfix.gen.pipeline.program_states`). Angle
    states come in radians (as the analysis gives them) and leave in turns (as the program holds
    them)."""
    samples = np.array(samples, dtype=float)
    if samples.shape[0] != len(program.state_names):
        raise ValueError(f"the samples have {samples.shape[0]} rows but the program steps "
                         f"{len(program.state_names)} states ({', '.join(program.state_names)}); "
                         "extend them with pipeline.program_states")
    for i in program.angle_states:
        samples[i] = radians_to_turns(samples[i])
    return samples


def float_cycle(program: IntegerProgram, samples: np.ndarray, wanted_period_steps: float,
                cycle_min: np.ndarray, cycle_max: np.ndarray, cycles: float = 6.0,
                tolerance: CycleTolerance | None = None, turns: np.ndarray | None = None,
                ) -> SteppedCycle:
    """The float step map's cycle (layer L1) against the continuous one (L0). ``samples`` hold
    every state the program steps (see :func:`orbitfix.gen.pipeline.program_states`); ``turns``
    are the whole turns each angle state makes per cycle (the cycle's ``turns``; one when not
    given)."""
    section = section_for(program, cycle_min, cycle_max, turns)
    samples = _program_samples(program, samples)

    def step(x: np.ndarray) -> np.ndarray:
        values = evaluate_real(program, x)
        return np.stack([values[i] for i in program.next_state])

    steps = math.ceil(cycles * wanted_period_steps)
    work_size.refuse_beyond_machine(stepped_cycle_work(program, wanted_period_steps, cycles,
                                                       START_POINTS, integer=False), STUDY_ADVICE)
    return measure(step, start_points(samples), steps, wanted_period_steps, cycle_min, cycle_max,
                   tolerance or CycleTolerance(), section)


def integer_cycle(program: IntegerProgram, samples: np.ndarray, wanted_period_steps: float,
                  cycle_min: np.ndarray, cycle_max: np.ndarray, cycles: float = 6.0,
                  tolerance: CycleTolerance | None = None, points: int = START_POINTS,
                  turns: np.ndarray | None = None) -> SteppedCycle:
    """The integer program's cycle (layer L2) against the continuous one (L0), in real units.
    ``samples`` and ``turns`` as for :func:`float_cycle`."""
    section = section_for(program, cycle_min, cycle_max, turns)
    samples = _program_samples(program, samples)
    scale = 2.0 ** np.array(program.state_fraction_bits, dtype=float).reshape(-1, 1)
    start = np.round(start_points(samples, points) * scale).astype(np.int64)
    word_max = program.word_max
    plain = [i for i in range(len(program.state_names)) if i not in program.angle_states]

    def step(x: np.ndarray) -> np.ndarray:
        ints = golden.step(program, np.round(x * scale).astype(np.int64))
        out = ints / scale
        edge = np.any(np.abs(ints[plain]) >= word_max, axis=0)  # angles wrap by design
        if np.any(edge):
            out[:, edge] = np.inf  # at the word's edge
        return out

    steps = math.ceil(cycles * wanted_period_steps)
    work_size.refuse_beyond_machine(stepped_cycle_work(program, wanted_period_steps, cycles,
                                                       points, integer=True), STUDY_ADVICE)
    return measure(step, start / scale, steps, wanted_period_steps, cycle_min, cycle_max,
                   tolerance or CycleTolerance(), section)


def stepped_cycle_work(program: IntegerProgram, wanted_period_steps: float, cycles: float,
                       points: int, integer: bool) -> work_size.Work:
    """The size of one :func:`float_cycle` or :func:`integer_cycle` run, before it starts."""
    steps = math.ceil(cycles * wanted_period_steps)
    run = work_size.golden_run if integer else work_size.float_run
    layer = "integer program" if integer else "float step map"
    return run(f"stepping the {layer} {steps:,} steps ({cycles:g} cycles) from {points} starts",
               len(program.ops), steps, points, recorded_rows=steps, states=1)


def lowest_loop_rate_work(program: IntegerProgram, steps_per_cycle: float, cycle_hz: float,
                          loop_hz: float, precision: float = 0.02) -> work_size.Work:
    """The size of :func:`lowest_loop_rate`'s bisection: at most this many integer runs of 3
    cycles from 8 starts, none at more steps per cycle than the model's own loop rate."""
    span = math.log(max(loop_hz / (4.0 * cycle_hz), 1.0 + precision)) / math.log1p(precision)
    trials = 2 + math.ceil(math.log2(max(span, 1.0)))
    one = stepped_cycle_work(program, steps_per_cycle, 3.0, 8, integer=True)
    return work_size.Work(f"the search for the lowest loop rate ({trials} runs of "
                          f"{math.ceil(3 * steps_per_cycle):,} steps)", one.seconds * trials,
                          one.bytes)


def lowest_loop_rate(model: Model, integrator: Integrator, period: float, samples: np.ndarray,
                     cycle_min: np.ndarray, cycle_max: np.ndarray,
                     tolerance: CycleTolerance | None = None, precision: float = 0.02,
                     plan_samples: np.ndarray | None = None) -> float | None:
    """The lowest loop rate (Hz) at which the integer program still keeps the cycle within
    tolerance, by bisection on a log scale between 4 times the cycle frequency and the model's
    loop rate, to within ``precision`` (relative) above the true limit. None if the model's own
    loop rate does not keep it (see :func:`needed_loop_rate`).

    samples : ndarray, shape (n, k) -- the model's states on the cycle (the runs start there).
    plan_samples : ndarray, shape (n, m) -- the states the plan must hold (for a model with
        runtime parameters, the cycles at the corners of their ranges too); default ``samples``.
    """
    tolerance = tolerance or CycleTolerance()
    cycle_hz = model.rhythm.cycle_hz
    plan_samples = samples if plan_samples is None else plan_samples
    starts = program_states(model, samples)
    try:
        program = plan_step(model, integrator, period * cycle_hz / model.rhythm.loop_hz,
                            plan_samples, path_steps=start_path_steps(model)).program
    except InputError:
        return None
    work_size.refuse_beyond_machine(
        lowest_loop_rate_work(program, model.rhythm.loop_hz / cycle_hz, cycle_hz,
                              model.rhythm.loop_hz, precision), STUDY_ADVICE)

    def keeps(loop_hz: float) -> bool:
        steps_per_cycle = loop_hz / cycle_hz
        try:
            plan = plan_step(model, integrator, period * cycle_hz / loop_hz, plan_samples,
                             path_steps=math.ceil(steps_per_cycle * START_PATH_CYCLES))
        except InputError:
            return False
        return integer_cycle(plan.program, starts, steps_per_cycle, cycle_min, cycle_max,
                             cycles=3.0, tolerance=tolerance, points=8).kept

    low, high = 4.0 * cycle_hz, model.rhythm.loop_hz
    if not keeps(high):
        return None
    if keeps(low):
        return low
    while high / low > 1 + precision:
        middle = math.sqrt(low * high)
        if keeps(middle):
            high = middle
        else:
            low = middle
    return high


def needed_loop_rate(loop_hz: float, cycle: SteppedCycle, integrator: Integrator,
                     tolerance: CycleTolerance) -> float | None:
    """A first-order estimate of the loop rate at which a cycle that misses its period
    tolerance would meet it: the error of an order-p integrator scales as h**p."""
    if cycle.period_error_ppm is None:
        return None
    ratio = abs(cycle.period_error_ppm) / tolerance.period_ppm
    if ratio <= 1:
        return loop_hz
    return loop_hz * ratio ** (1.0 / integrator.order)
