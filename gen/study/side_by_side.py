"""The integer program (L2) and the float step map (L1) run side by side from the model's initial
state for a few cycles, measured cycle by cycle at the one section (gen/study/section.py): when
each crosses it (the phase error), how far each swings between crossings (the amplitude error, in
LSB of each state's format), and where each returns on the section.

These are the series a person reads off a picture (the report's plots); the verdicts stay with the
start-up path and the drift proof. Golden runs one state at a time (about a millisecond a step for
a small model), so the run is bounded in steps, and it reuses golden's start-up path when given.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from orbitfix.gen.model.angles import radians_to_turns, wrap_turns
from orbitfix.gen.pipeline import Design
from orbitfix.gen.program import golden
from orbitfix.gen.program.lowering import evaluate_real
from orbitfix.gen.study.section import Section, section_for
from orbitfix.gen.work_size import GOLDEN_OP_SECONDS

RUN_CYCLES = 6          # cycles of the wanted rhythm run side by side
GOLDEN_SECONDS = 8.0    # golden's share at most (estimated as gen/work_size does), beyond the
                        # start-up path it continues


@dataclass(frozen=True, eq=False)
class SideBySide:
    """Golden and the float step map from the same initial state, in real units (an angle state
    in turns, wrapped into [-1/2, 1/2)).

    integer, floats : ndarray, shape (steps + 1, n) -- the model's states at every step.
    crossings : (integer, float) fractional steps at which each crosses the section.
    returns : (integer, float) ndarray, shape (crossings, n) -- the state at each crossing.
    amplitude_error_lsb : ndarray, shape (cycles, swinging states) -- per cycle between two
        crossings, the integer run's half range minus the float run's, in LSB of the state.
    phase_error_steps : ndarray, shape (paired crossings,) -- integer crossing minus float crossing.
    """

    state_names: tuple[str, ...]
    angle_states: tuple[int, ...]
    loop_hz: float
    steps_per_cycle: float
    lsb: tuple[float, ...]
    section: Section
    integer: np.ndarray
    floats: np.ndarray
    integer_crossings: np.ndarray
    float_crossings: np.ndarray
    integer_returns: np.ndarray
    float_returns: np.ndarray
    amplitude_error_lsb: np.ndarray
    phase_error_steps: np.ndarray

    @property
    def steps(self) -> int:
        return self.integer.shape[0] - 1

    @property
    def swinging(self) -> tuple[int, ...]:
        return self.section.swinging

    def to_json(self) -> dict:
        """The measured series as plain data (the report's JSON ``side_by_side``)."""
        names = self.state_names
        section = names[self.section.state]
        return {
            "steps": self.steps,
            "cycles": self.steps / self.steps_per_cycle,
            "loop_hz": self.loop_hz,
            "section": {"state": section, "level": self.section.level,
                        "units": "turns" if self.section.angle else "state units"},
            "lsb": dict(zip(names, self.lsb, strict=True)),
            "integer_crossing_steps": [float(t) for t in self.integer_crossings],
            "float_crossing_steps": [float(t) for t in self.float_crossings],
            "phase_error_seconds": [float(t) / self.loop_hz for t in self.phase_error_steps],
            "amplitude_error_lsb": {names[i]: [float(v) for v in self.amplitude_error_lsb[:, j]]
                                    for j, i in enumerate(self.swinging)},
            "worst_phase_error_seconds": _worst(self.phase_error_steps / self.loop_hz),
            "worst_amplitude_error_lsb": _worst(self.amplitude_error_lsb),
        }


def run_side_by_side(built: Design, start_trajectory: np.ndarray | None = None,
                     cycles: float = RUN_CYCLES, seconds: float = GOLDEN_SECONDS) -> SideBySide:
    """Run golden and the float step map from the initial state for ``cycles`` cycles, fewer when
    golden would take more than about ``seconds`` (never fewer than ``start_trajectory`` holds).
    ``start_trajectory``: golden's whole state at steps 0..k from the initial state (the start-up
    path's), continued rather than run again."""
    plan, timing, model = built.plan, built.timing, built.model
    program = plan.program
    n = program.model_state_count
    affordable = int(seconds / (len(program.ops) * GOLDEN_OP_SECONDS))
    known_steps = 0 if start_trajectory is None else len(start_trajectory) - 1
    steps = max(2, min(math.ceil(cycles * timing.steps_per_cycle), max(affordable, known_steps)))
    if start_trajectory is not None and len(start_trajectory) > 1:
        known = np.asarray(start_trajectory[: steps + 1], dtype=np.int64)
    else:
        known = np.asarray(plan.initial_state, dtype=np.int64).reshape(1, -1)
    more = steps + 1 - len(known)
    ints = known if more <= 0 else np.vstack([known, golden.run(program, known[-1], more)[1:]])
    scale = 2.0 ** np.asarray(program.state_fraction_bits[:n], dtype=float)
    integer = ints[:, :n] / scale

    nominal = [v for p in model.runtime_parameters for v in (p.value, p.value)]
    real = np.asarray([*model.initial_state, *nominal], dtype=float)
    for i in program.angle_states:
        real[i] = radians_to_turns(real[i])
    real = real.reshape(-1, 1)
    floats = np.empty((steps + 1, n))
    floats[0] = real[:n, 0]
    for k in range(1, steps + 1):
        values = evaluate_real(program, real)
        real = np.stack([values[i] for i in program.next_state])
        floats[k] = real[:n, 0]
    for i in program.angle_states:
        if i < n:
            integer[:, i] = wrap_turns(integer[:, i])
            floats[:, i] = wrap_turns(floats[:, i])

    cycle = built.analysis.cycle
    section = section_for(program, cycle.state_min, cycle.state_max, cycle.turns)
    column = section.state
    found = section.crossing_times(np.column_stack([integer[:, column], floats[:, column]]))
    int_times, float_times = found[0], found[1]
    paired = min(len(int_times), len(float_times))
    lsb = tuple(float(1.0 / s) for s in scale)
    return SideBySide(
        state_names=tuple(program.state_names[:n]), angle_states=tuple(i for i in program.angle_states
                                                                       if i < n),
        loop_hz=timing.loop_hz, steps_per_cycle=timing.steps_per_cycle, lsb=lsb, section=section,
        integer=integer, floats=floats, integer_crossings=int_times, float_crossings=float_times,
        integer_returns=_at_times(integer, int_times), float_returns=_at_times(floats, float_times),
        amplitude_error_lsb=_amplitude_errors(integer, floats, int_times, float_times, section.swinging,
                                              lsb),
        phase_error_steps=int_times[:paired] - float_times[:paired])


def _at_times(values: np.ndarray, times: np.ndarray) -> np.ndarray:
    """The state at each fractional step, by linear interpolation between its two steps."""
    if len(times) == 0:
        return np.empty((0, values.shape[1]))
    low = np.minimum(np.floor(times).astype(int), values.shape[0] - 2)
    share = (times - low)[:, None]
    return values[low] * (1 - share) + values[low + 1] * share


def _amplitude_errors(integer: np.ndarray, floats: np.ndarray, int_times: np.ndarray,
                      float_times: np.ndarray, swinging: tuple[int, ...],
                      lsb: tuple[float, ...]) -> np.ndarray:
    """Per cycle (between crossing k and k + 1 of each run), the half range of every swinging state
    of the integer run minus the float run's, in LSB."""
    cycles = min(len(int_times), len(float_times)) - 1
    errors = np.zeros((max(0, cycles), len(swinging)))
    for k in range(max(0, cycles)):
        a, b = math.ceil(int_times[k]), math.floor(int_times[k + 1]) + 1
        c, d = math.ceil(float_times[k]), math.floor(float_times[k + 1]) + 1
        for j, i in enumerate(swinging):
            half_int = 0.5 * float(np.ptp(integer[a:b, i])) if b > a else 0.0
            half_float = 0.5 * float(np.ptp(floats[c:d, i])) if d > c else 0.0
            errors[k, j] = (half_int - half_float) / lsb[i]
    return errors


def _worst(values: np.ndarray) -> float | None:
    values = np.asarray(values, dtype=float)
    if values.size == 0:
        return None
    return float(values.flat[int(np.argmax(np.abs(values)))])
