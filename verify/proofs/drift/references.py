"""What the drift runs start from and are held against: the starts (the model's initial state, near
the equilibrium inside the cycle, near the basin's edge, near saturation) and the float step map
(layer L1) run from the cycle's point and from every start.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from orbitfix.gen.analysis.near_rest import OFFSET, SEED, near_rest_starts
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.angles import TURN, radians_to_turns
from orbitfix.gen.pipeline import Design
from orbitfix.gen.program.lowering import evaluate_real
from orbitfix.gen.study.section import Section, amplitude_errors

STEP_MAP_CYCLES = 40    # the float step map's reference run, in cycles
STEP_MAP_MEASURED = 15  # of which the last this many are measured


@dataclass(frozen=True)
class Start:
    """One initial state of a drift run, in integer units, and why it was chosen."""

    name: str
    state: tuple[int, ...]
    why: str
    decides: bool = False  # True for the starts whose runs decide the verdict


@dataclass(frozen=True)
class StepMapReference:
    """The float step map (L1) run from the continuous cycle's point: period and amplitudes
    (``period_steps`` is None when the step map does not go round the cycle at all). ``amplitude``,
    ``low`` and ``high`` hold one entry per model state, None for an angle state (it turns; it has
    no amplitude).

    reached : for each start, whether the float step map from it is on the cycle after
        STEP_MAP_CYCLES cycles (swinging states within the amplitude tolerance of the reference).
    """

    period_steps: float | None
    amplitude: list[float | None]
    reached: dict[str, bool]
    low: list[float | None] | None = None
    high: list[float | None] | None = None


def choose_starts(design: Design, equilibrium_offset: float = OFFSET, seed: int = SEED,
                  extra: tuple[dict[str, float], ...] = ()) -> tuple[list[Start], list[str]]:
    """The initial states of the drift runs, and notes on any that had to be left out.

    The model's initial state decides the verdict; the others test robustness. The starts near
    the equilibria are the ones the plan covers (``gen/analysis/near_rest.py``; the planning box
    holds the float step map's path from each); the start near the basin's edge and the one near
    saturation probe beyond the planning box on purpose, so what they meet is a finding.

    equilibrium_offset : the typical distance from an equilibrium, as a fraction of each state's
        range on the cycle (at least 2 LSB), so that the start can leave an unstable equilibrium
        at all: a start only a few LSB away sits in the rounding's dead zone, where every increment
        rounds to nothing (that would be a finding about starting from rest, not about drift).
    seed : of the random starts near the equilibria (see near_rest_starts).
    extra : the user's starts, model units by state name (states not named keep their initial
        values); the names are checked by the caller.
    """
    plan = design.plan
    program = plan.program
    n = program.model_state_count
    scale = 2.0 ** np.asarray(program.state_fraction_bits[:n], dtype=float)
    angles = np.isin(np.arange(n), program.angle_states)
    cycle = design.analysis.cycle
    low, high = np.asarray(cycle.state_min), np.asarray(cycle.state_max)
    centre, half = (low + high) / 2, (high - low) / 2
    half[angles] = 0.5  # an angle, in turns: its range is the full turn
    word_max = program.word_max
    held = tuple(plan.initial_state[n:])  # runtime parameters stay at their nominal values
    starts = [Start("nominal", tuple(plan.initial_state), "the model's initial state", decides=True)]
    near, notes = near_rest_starts(design.analysis, equilibrium_offset, seed)
    for start in near:
        offset = np.where(angles, start.offset / TURN, start.offset)  # angles: radians to turns
        step = np.round(offset * scale)
        step = np.where(np.abs(step) < 2, 2 * np.sign(offset), step)
        point = np.round(_in_turns(start.point - start.offset, angles) * scale) + step
        starts.append(Start(start.name, _fit(point, word_max) + held, start.why))

    corner = np.round((centre + 0.95 * plan.margin * half) * scale)
    corner[angles] = np.asarray(plan.initial_state[:n])[angles]  # an angle has no edge
    starts.append(Start("near the basin edge", _fit(corner, word_max) + held,
                        f"just inside the upper corner of the cycle's bounding box scaled by the "
                        f"planner's margin of {plan.margin:g} (a stand-in for the basin's edge)"
                        + (", angles at their initial values" if angles.any() else "")))
    near = np.array(plan.initial_state, dtype=float)
    first = int(np.flatnonzero(~angles)[0])  # an angle wraps: it has no limit to come near
    near[first] = word_max - word_max // 64
    starts.append(Start("near saturation", _fit(near, word_max),
                        f"{program.state_names[first]} at 63/64 of the word's limit, the other "
                        "states at their initial values"))
    for k, (given, point) in enumerate(zip(extra, given_starts(design, extra), strict=True), start=1):
        text = ", ".join(f"{name} = {value:g}" for name, value in given.items())
        starts.append(Start(f"given start {k}", point, f"given with --start: {text}"))
    return starts, notes


def given_starts(design: Design, extra: tuple[dict[str, float], ...]) -> list[tuple[int, ...]]:
    """The user's starts (model units by state name; an angle in radians, any number of turns) in
    integer units; a state not named keeps its initial value. A name that is not a state of the
    model, or a value the state's word cannot hold, is an input error."""
    plan = design.plan
    program = plan.program
    n = program.model_state_count
    names = program.state_names[:n]
    bits = program.state_fraction_bits
    points = []
    for given in extra:
        point = list(plan.initial_state)
        for name, value in given.items():
            if name not in names:
                raise InputError(f"--start names '{name}', which is not a state of "
                                 f"'{design.model.name}'; its states are {', '.join(names)}")
            i = names.index(name)
            if i in program.angle_states and math.isfinite(value):
                turns = float(radians_to_turns(np.asarray(value)))
                point[i] = max(program.word_min, min(program.word_max, round(turns * 2.0 ** bits[i])))
                continue
            limit = program.word_max / 2.0 ** bits[i]
            if not (math.isfinite(value) and abs(value) <= limit):
                raise InputError(f"--start {name}={value!r}: the state's word holds values from "
                                 f"{-limit:.6g} to {limit:.6g}; give a start inside that")
            point[i] = round(value * 2.0 ** bits[i])
        points.append(tuple(int(v) for v in point))
    return points


def _fit(point: np.ndarray, word_max: int) -> tuple[int, ...]:
    return tuple(int(min(max(v, -word_max), word_max)) for v in point)


def _in_turns(state: np.ndarray, angles: np.ndarray) -> np.ndarray:
    """A model state (radians for its angles) with the angles in turns, as the program holds them."""
    state = np.array(state, dtype=float)
    state[angles] = radians_to_turns(state[angles])
    return state


def step_map_reference(design: Design, section: Section, starts: list[Start],
                       amplitude_tolerance: float) -> StepMapReference:
    """Run the float step map (L1) from the cycle's point and from every start, vectorised, and
    time it by ``section`` (the drift proof's crossing rule)."""
    return step_map_references([(design, section, starts)], amplitude_tolerance)[0]


def step_map_references(runs: list[tuple[Design, Section, list[Start]]],
                        amplitude_tolerance: float) -> list[StepMapReference]:
    """The references of :func:`step_map_reference` for several views of one integer program (the
    nominal design and the corners of its runtime ranges: same program, other parameters, cycle
    and period), in one vectorised run: every view's columns side by side, each view recorded
    over its own last STEP_MAP_MEASURED cycles. A column's float values never depend on the other
    columns (every real rule is elementwise), so each reference has the same bits as its own run
    (``tests/test_drift.py`` checks); one run pays the per-operation overhead once for them all."""
    if not runs:
        return []
    program = runs[0][0].plan.program
    if any(design.plan.program is not program for design, _, _ in runs):
        raise ValueError("step_map_references: the views must share one integer program")
    n = program.model_state_count
    angles = np.isin(np.arange(n), program.angle_states)
    scale = 2.0 ** -np.array(program.state_fraction_bits, dtype=float)
    columns, spans = [], []
    for design, _, starts in runs:
        spc = design.timing.steps_per_cycle
        total = round(STEP_MAP_CYCLES * spc)
        measured = round(STEP_MAP_MEASURED * spc)
        nominal = [v for p in design.model.runtime_parameters for v in (p.value, p.value)]
        point = _in_turns(design.analysis.cycle.point, angles)
        first = len(columns)
        columns.append(np.concatenate([point, nominal]))
        columns += [np.array(s.state, dtype=float) * scale for s in starts]
        spans.append((first, len(columns), total - measured - 1, total))
    x = np.stack(columns, axis=1)
    # Each view's record: the states after every step from first to total, consecutive, so
    # a crossing is placed between the two steps it falls between
    records = [np.empty((total - first + 1, x.shape[0], stop - begin))
               for begin, stop, first, total in spans]
    longest = max(total for _, _, _, total in spans)
    with np.errstate(all="ignore"):
        for k in range(longest + 1):
            for record, (begin, stop, first, total) in zip(records, spans, strict=True):
                if first <= k <= total:
                    record[k - first] = x[:, begin:stop]
            if k < longest:
                values = evaluate_real(program, x)
                x = np.stack([values[i] for i in program.next_state])
    return [_judged(record, section, starts, n, amplitude_tolerance)
            for record, (_, section, starts) in zip(records, runs, strict=True)]


def _judged(record: np.ndarray, section: Section, starts: list[Start], n: int,
            amplitude_tolerance: float) -> StepMapReference:
    """One view's reference from its record (steps, states, columns: the cycle's point first,
    then each start)."""
    swinging = list(section.swinging)
    low, high = np.min(record, axis=0)[swinging], np.max(record, axis=0)[swinging]
    times = section.crossing_times(record[:, section.state, :1])[0]
    if times.size < 2 or not np.all(np.isfinite(low[:, 0])) or not np.all(np.isfinite(high[:, 0])):
        return StepMapReference(period_steps=None, amplitude=[float("nan")] * n,
                                reached={s.name: False for s in starts})
    period = float(section.turns * (times[-1] - times[0]) / (times.size - 1))
    reached = {}
    for index, start in enumerate(starts, start=1):
        with np.errstate(all="ignore"):
            error = amplitude_errors(low[:, index], high[:, index], low[:, 0], high[:, 0])
        reached[start.name] = bool(np.all(np.isfinite(error)) and np.all(error <= amplitude_tolerance)
                                   and np.all(np.isfinite(record[-1, :, index])))

    def by_state(values: np.ndarray) -> list[float | None]:
        out: list[float | None] = [None] * n
        for i, v in zip(swinging, values, strict=True):
            out[i] = float(v)
        return out

    return StepMapReference(period_steps=period, amplitude=by_state((high[:, 0] - low[:, 0]) / 2),
                            reached=reached, low=by_state(low[:, 0]), high=by_state(high[:, 0]))

