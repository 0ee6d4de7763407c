"""The Poincare section that times a stepped cycle: one crossing rule for states that swing and for
angle states that turn, and the symmetry that makes an angle model's integer orbit periodic.

The rule. The cycle is timed by one state, the section state:

- a state that swings crosses the section when it passes the middle of its range on the continuous
  cycle going up: x[k-1] < level <= x[k];
- an angle state (a phase, held in turns) has no range to take the middle of: it crosses the
  section when it passes a fixed phase in its direction of turning, counted in whole turns on the
  angle unwrapped across the word's wrap (each step's change taken the short way round, under half
  a turn): u[k-1] < phase + m <= u[k] for some whole m, with u the unwrapped angle (negated for an
  angle that turns backwards). A crossing is one turn, so the period is the steps per turn times the
  turns the angle makes per cycle of the continuous model.

The first angle state that turns on the cycle times it when there is one, else the first state that
swings (state 0 of a model without angles). Amplitudes are judged on the swinging states only: an
angle has no amplitude, its range is the full turn. A swinging state at rest on the continuous
cycle (the amplitude of a phase oscillator, held at its set point) is judged by its level instead
(:func:`amplitude_errors`).

Readers: the stepped-cycle study (:mod:`.discrete_cycle`, on float and golden runs, through
:meth:`Section.crossing_times`) and the drift proof, which reads a :class:`Section` to set up its C
harness (``templates/drift_harness.c.j2``): the harness applies the same rule to the firmware's own
words in integer arithmetic (:meth:`Section.integer_level` and :meth:`Section.integer_crossing` say
exactly what it computes; a test holds the two against each other on one orbit).

The symmetry. When the integer step commutes with turning every angle state by the same whole
number of word units (:func:`turns_together`, decided exactly from the program's operations), the
orbit is determined by the swinging states and the angles relative to one of them. That reduced
state lives on a finite lattice, so its orbit is eventually periodic with a short period even when
the full state (angles modulo the word) only repeats after up to 2**word_bits steps; over each turn
of the reduced cycle every angle advances by the same exact amount, so the mean steps per turn is
exact for all time.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from orbitfix.gen.model.angles import TURN, wrap_turns
from orbitfix.gen.program.integer_program import IntegerProgram


@dataclass(frozen=True)
class Section:
    """Which state times the cycle, and where its section lies.

    state : int -- index of the section state in the program's states.
    angle : bool -- the state is an angle (held in turns) that turns on the cycle.
    level : float -- the section, in the state's units: model units for a swinging state, turns in
        [-1/2, 1/2) for an angle.
    direction : int -- +1, or -1 for an angle that turns backwards (its passes are counted
        downwards).
    turns : int -- whole turns the section angle makes per cycle (1 for a swinging state: one
        crossing per cycle).
    swinging : tuple of int -- the model states whose amplitudes are judged (the states that are
        not angles).
    """

    state: int
    angle: bool
    level: float
    direction: int = 1
    turns: int = 1
    swinging: tuple[int, ...] = ()

    def integer_level(self, fraction_bits: int) -> int:
        """The level in the state's integer units (an angle's phase as a signed word of turns)."""
        return round(self.level * 2.0**fraction_bits)

    def crossing_times(self, values: np.ndarray) -> list[np.ndarray]:
        """The (fractional) steps at which each column of ``values`` (shape (steps + 1, batch): the
        section state at steps 0..steps, in its units; an angle in turns, wrapped or not) crosses
        the section, each placed between two steps by linear interpolation. One array per column."""
        values = np.asarray(values, dtype=float)
        if self.angle:
            turned = np.cumsum(np.vstack([values[:1], wrap_turns(np.diff(values, axis=0))]), axis=0)
            turned = self.direction * (turned - self.level)
            before, after = turned[:-1], turned[1:]
            passes = np.floor(after) - np.floor(before)
            target = np.floor(after)  # the whole turn passed (one per step: a step is under half a turn)
        else:
            before, after = values[:-1], values[1:]
            passes = ((before < self.level) & (after >= self.level)).astype(float)
            target = np.full_like(after, self.level)
        times = []
        for j in range(values.shape[1]):
            steps = np.flatnonzero(passes[:, j] > 0)
            a, b = before[steps, j], after[steps, j]
            times.append(steps + (target[steps, j] - a) / (b - a))
        return times

    def integer_crossing(self, before: int, after: int, level: int, word_bits: int,
                         ) -> tuple[int, int] | None:
        """The rule on two integer values of the section state (steps k-1 and k), as the drift
        harness computes it: None when the step does not cross the section, else (num, den) with
        the crossing at step k - 1 + num / den (0 <= num < den or num = den; integers)."""
        if self.angle:
            low = self.direction * wrap_word(before - level, word_bits)
            high = low + self.direction * wrap_word(after - before, word_bits)
            zero = 0
        else:
            low, high, zero = before, after, level
        if low < zero <= high:
            return zero - low, high - low
        return None

    def to_json(self, names: tuple[str, ...], fraction_bits: int) -> dict:
        return {"state": names[self.state], "kind": "phase" if self.angle else "level",
                "level": self.integer_level(fraction_bits), "level_real": self.level,
                "units": "turns" if self.angle else "state units",
                "direction": ("upward" if not self.angle else
                              "forward" if self.direction > 0 else "backward"),
                "turns_per_cycle": self.turns if self.angle else None,
                "amplitude_states": [names[i] for i in self.swinging]}


AT_REST = 1e-6  # a state whose swing on the cycle is under this share of the model's scale rests


def amplitude_errors(low: np.ndarray, high: np.ndarray, cycle_low: np.ndarray,
                     cycle_high: np.ndarray) -> np.ndarray:
    """Relative error of each swinging state on a stepped cycle (its least and largest values
    there, shape (m,)) against the continuous cycle's (shape (m,)), in the same units:

    - a state that swings on the continuous cycle: |half range / continuous half range - 1|;
    - a state at rest on it (a swing under AT_REST of the model's scale, the largest magnitude of
      any of these states on the cycle): the farthest the stepped values lie from the rest value,
      relative to that value, or to the model's scale for a state at rest at zero.
    """
    low, high = np.asarray(low, dtype=float), np.asarray(high, dtype=float)
    cycle_low, cycle_high = np.asarray(cycle_low, dtype=float), np.asarray(cycle_high, dtype=float)
    if low.size == 0:
        return np.zeros(0)
    scale = float(np.max(np.abs(np.concatenate([cycle_low, cycle_high])))) or 1.0
    half = 0.5 * (cycle_high - cycle_low)
    moving = half > AT_REST * scale
    rest = 0.5 * (cycle_high + cycle_low)
    with np.errstate(divide="ignore", invalid="ignore"):
        swing = np.abs(0.5 * (high - low) / half - 1)
    level = np.maximum(np.abs(low - rest), np.abs(high - rest))
    level = level / np.where(np.abs(rest) > AT_REST * scale, np.abs(rest), scale)
    return np.where(moving, swing, level)


def resting(cycle_low: np.ndarray, cycle_high: np.ndarray) -> np.ndarray:
    """Which of these states rest on the continuous cycle (see :func:`amplitude_errors`)."""
    cycle_low, cycle_high = np.asarray(cycle_low, dtype=float), np.asarray(cycle_high, dtype=float)
    if cycle_low.size == 0:
        return np.zeros(0, dtype=bool)
    scale = float(np.max(np.abs(np.concatenate([cycle_low, cycle_high])))) or 1.0
    return 0.5 * (cycle_high - cycle_low) <= AT_REST * scale


def wrap_word(value: int, word_bits: int) -> int:
    """An integer brought into the signed word [-2**(w-1), 2**(w-1)): an angle the short way round."""
    half = 1 << (word_bits - 1)
    return (value + half) % (1 << word_bits) - half


def section_for(program: IntegerProgram, cycle_min: np.ndarray | None, cycle_max: np.ndarray | None,
                turns: np.ndarray | None = None) -> Section:
    """The section of a model's cycle: the first angle state that turns on it (at phase 0, its
    turns per cycle from the cycle's ``turns``; one turn when not given), else the middle of the
    first swinging state's range. ``cycle_min``/``cycle_max`` in model units (angles in radians,
    the full turn for one that turns, as the analysis reports them); with no cycle known (None),
    the first angle state, else state 0 at level 0."""
    n = program.model_state_count
    angles = set(program.angle_states)
    swinging = tuple(i for i in range(n) if i not in angles)
    if cycle_min is None or cycle_max is None:
        cycle_min = np.zeros(n)
        cycle_max = np.where(np.isin(np.arange(n), program.angle_states), TURN, 0.0)
    low, high = np.asarray(cycle_min, dtype=float), np.asarray(cycle_max, dtype=float)
    for i in sorted(angles):
        whole = int(turns[i]) if turns is not None else (1 if high[i] - low[i] >= TURN * (1 - 1e-9)
                                                         else 0)
        if i < n and whole != 0:
            return Section(state=i, angle=True, level=0.0, direction=1 if whole > 0 else -1,
                           turns=abs(whole), swinging=swinging)
    first = swinging[0] if swinging else 0
    return Section(state=first, angle=False, level=0.5 * float(low[first] + high[first]),
                   swinging=swinging)


# How each kind passes a common turn d of the angle states on to its result: the result turns by
# the listed combination of its arguments' turns. A kind not listed must see no turn at all.
_EXACT_SUMS = {"add": (1, 1), "sub": (1, -1), "neg": (-1,)}


def turns_together(program: IntegerProgram) -> bool:
    """True when the integer step commutes, exactly, with turning every angle state by the same
    number of word units d: F(x + d e) = F(x) + d e (angles modulo the word), e the angle states.

    Decided from the operations: give every value the multiple of d by which it moves (1 for an
    angle state, 0 for any other state and constant). A value that moves may only pass through a
    wrapping add, sub or neg with no alignment and no shift (exact modulo the word); ``sin`` and
    ``cos`` and every other kind must see values that do not move; each next angle state must move
    by exactly d and every other next state not at all."""
    if not program.angle_states:
        return False
    angles = set(program.angle_states)
    moves: list[int] = []
    for op in program.ops:
        if op.kind == "state":
            moves.append(1 if op.state in angles else 0)
            continue
        given = [moves[a] for a in op.args]
        if not any(given):
            moves.append(0)
            continue
        signs = _EXACT_SUMS.get(op.kind)
        exact = (signs is not None and op.wraps and not op.shift
                 and not any(op.align[i] for i, m in enumerate(given) if m and i < len(op.align)))
        if not exact:
            return False
        moves.append(sum(s * m for s, m in zip(signs, given, strict=True)))
    return all(moves[v] == (1 if i in angles else 0) for i, v in enumerate(program.next_state))


def steps_per_turn(cycle_steps: int, advance: int, word_bits: int) -> float:
    """The exact mean steps per turn of an orbit that advances ``advance`` word units (unwrapped)
    in ``cycle_steps`` steps, over and over (math.inf when it does not advance)."""
    return cycle_steps * 2.0**word_bits / advance if advance > 0 else math.inf


def full_period(cycle_steps: int, advance: int, word_bits: int) -> int:
    """The period of the full state (angles modulo the word) of an orbit whose reduced state repeats
    every ``cycle_steps`` steps while every angle advances ``advance`` word units."""
    return cycle_steps * ((1 << word_bits) // math.gcd(advance, 1 << word_bits))
