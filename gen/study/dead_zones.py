"""Dead zones: lattice states round an equilibrium that the integer map never lets go.

Rounding makes every step smaller than half a unit in the last place vanish, so the integer map can
keep an equilibrium of the model as a rest state even where the model leaves it (an unstable focus
at the centre of a limit cycle), and with it a whole neighbourhood of states whose orbits stay there
for ever: firmware started (or reset) inside it never oscillates.

Methods (named in every result):

- ``exhaustive``: every lattice state within +/- m LSB of the rest state in each state's own units
  (the runtime parameters held at their values) is stepped once; the map on that finite box is a
  function graph, and pointer doubling follows every state until it leaves the box or settles on a
  cycle inside it. Exact for the box; the box is doubled until the zone is at most half of it.
  Used when (2m + 1)^n stays below :data:`MOST_LATTICE_STATES` (every 16-bit planar model).
- ``sampled``: otherwise, :data:`SAMPLES` seeded random lattice states of the box are stepped
  :data:`SAMPLE_STEPS_CYCLES` cycles; those still inside the box count as dead, and the box is
  doubled until they fill at most half of it. A lower bound on the zone (a state missed by the
  samples, or one that leaves only after the sampled steps, is not reported); the result says
  how wide the last box was.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from orbitfix.gen.model.angles import radians_to_turns
from orbitfix.gen.pipeline import Design
from orbitfix.gen.program import golden
from orbitfix.gen.program.fixed_point import FixedPointPlan
from orbitfix.gen.program.quantisation import quantise

MOST_LATTICE_STATES = 1 << 21
FIRST_HALF_WIDTH = 8     # LSB
REST_SEARCH = 2          # LSB either side of the rounded equilibrium searched for a rest state
MOST_REST_CANDIDATES = 1 << 14  # beyond this many in the search cube, a sample of it (networks)
SAMPLES = 4_000
SAMPLE_STEPS_CYCLES = 2.0
SAMPLED_DOUBLINGS = 6
SEED = 8


@dataclass(frozen=True)
class DeadZone:
    """The dead zone of one equilibrium the integer map keeps as a rest state."""

    equilibrium: tuple[float, ...]
    rest_state: tuple[int, ...]
    state_names: tuple[str, ...]
    radius_lsb: tuple[int, ...]
    radius: tuple[float, ...]
    states: int
    half_width_lsb: int
    method: str
    exact: bool
    members: frozenset = field(default_factory=frozenset, repr=False, compare=False)

    def contains(self, state: np.ndarray) -> bool:
        """True when a whole program state (integers) is in the zone (for ``sampled``, within its
        radius round the rest state: the found states span no more)."""
        n = len(self.rest_state)
        offset = np.asarray(state[:n], dtype=np.int64) - np.asarray(self.rest_state, dtype=np.int64)
        if self.method == "exhaustive":
            return tuple(int(v) for v in offset) in self.members
        return bool(np.all(np.abs(offset) <= np.asarray(self.radius_lsb)) and any(self.radius_lsb))

    def to_json(self) -> dict:
        return {"equilibrium": dict(zip(self.state_names, self.equilibrium, strict=True)),
                "rest_state": dict(zip(self.state_names, self.rest_state, strict=True)),
                "radius": dict(zip(self.state_names, self.radius, strict=True)),
                "radius_lsb": dict(zip(self.state_names, self.radius_lsb, strict=True)),
                "states": self.states, "searched_half_width_lsb": self.half_width_lsb,
                "method": self.method, "exact": self.exact}

    def describe(self) -> str:
        where = ", ".join(f"{n} = {v:.4g}" for n, v in zip(self.state_names, self.equilibrium,
                                                            strict=True))
        radius = ", ".join(f"{n} +/- {r:.3g} ({lsb} LSB)" for n, r, lsb in
                           zip(self.state_names, self.radius, self.radius_lsb, strict=True))
        return (f"dead zone at the equilibrium ({where}): {self.states} lattice states never leave "
                f"it, within {radius} ({self.method})")


def dead_zones(built: Design) -> tuple[DeadZone, ...]:
    """The dead zone of every equilibrium of the model that the integer map keeps as a rest
    state. A model with angle states (whose phases always turn) has none to search."""
    if built.plan.program.angle_states:
        return ()
    sample_steps = math.ceil(SAMPLE_STEPS_CYCLES * built.timing.steps_per_cycle)
    found = [dead_zone(built.plan, np.asarray(e.state, dtype=float), sample_steps)
             for e in built.analysis.equilibria]
    return tuple(zone for zone in found if zone is not None)


def _rest_state(plan: FixedPointPlan, equilibrium: np.ndarray) -> np.ndarray | None:
    """A lattice state within REST_SEARCH LSB of the equilibrium that one step leaves in place:
    every state of that cube when it has at most MOST_REST_CANDIDATES, else (a network's many
    states) the centre, every state one coordinate away, and a seeded sample of the rest."""
    program = plan.program
    n = program.model_state_count
    bits = program.state_fraction_bits
    centre = [quantise(float(x), bits[i]) for i, x in enumerate(equilibrium)]
    tail = np.asarray(plan.initial_state[n:], dtype=np.int64)
    offsets = _rest_offsets(n)
    order = np.argsort(np.abs(offsets).sum(axis=0), kind="stable")
    candidates = np.asarray(centre, dtype=np.int64).reshape(-1, 1) + offsets[:, order]
    if candidates.min() <= program.word_min or candidates.max() >= program.word_max:
        return None
    whole = np.vstack([candidates, np.repeat(tail.reshape(-1, 1), candidates.shape[1], axis=1)])
    moved = golden.step(program, whole)
    still = np.flatnonzero(np.all(moved == whole, axis=0))
    return whole[:, still[0]] if still.size else None


def _rest_offsets(n: int) -> np.ndarray:
    """The offsets (shape (n, k)) searched for a rest state round the rounded equilibrium."""
    steps = np.arange(-REST_SEARCH, REST_SEARCH + 1)
    if len(steps) ** n <= MOST_REST_CANDIDATES:
        return np.array(np.meshgrid(*[steps] * n, indexing="ij")).reshape(n, -1)
    single = [np.zeros((n, 1), dtype=np.int64)]
    for i in range(n):
        for d in steps[steps != 0]:
            column = np.zeros((n, 1), dtype=np.int64)
            column[i] = d
            single.append(column)
    generator = np.random.default_rng(SEED)
    sample = generator.integers(-REST_SEARCH, REST_SEARCH + 1, size=(n, MOST_REST_CANDIDATES))
    return np.hstack([*single, sample])


def dead_zone(plan: FixedPointPlan, equilibrium: np.ndarray, sample_steps: int) -> DeadZone | None:
    """The dead zone round one equilibrium (model units), or None when the integer map does not
    keep it as a rest state; ``sample_steps`` is how long the ``sampled`` method follows."""
    program = plan.program
    n = program.model_state_count
    rest = _rest_state(plan, equilibrium)
    if rest is None:
        return None
    half = FIRST_HALF_WIDTH
    while True:
        if (2 * half + 1) ** n > MOST_LATTICE_STATES:
            return _sampled(plan, equilibrium, rest, max(half // 2, FIRST_HALF_WIDTH), sample_steps)
        dead = _exhaustive(program, rest, n, half)
        radius = np.abs(dead).max(axis=1) if dead.size else np.zeros(n, dtype=np.int64)
        if np.all(2 * radius <= half):
            return _result(plan, equilibrium, rest, dead, half, "exhaustive", True)
        half *= 2


def _exhaustive(program, rest: np.ndarray, n: int, half: int) -> np.ndarray:
    """Offsets (shape (n, k)) of the box's states whose orbits never leave the box."""
    side = 2 * half + 1
    offsets = np.array(np.meshgrid(*[np.arange(-half, half + 1)] * n, indexing="ij")).reshape(n, -1)
    states = rest.reshape(-1, 1) + np.vstack([offsets, np.zeros((len(rest) - n, offsets.shape[1]),
                                                                dtype=np.int64)])
    states = np.clip(states, program.word_min, program.word_max)
    moved = golden.step(program, states)[:n] - rest[:n].reshape(-1, 1)
    inside = np.all(np.abs(moved) <= half, axis=0)
    index = np.zeros(moved.shape[1], dtype=np.int64)
    for i in range(n):  # row-major index of the moved offset, as meshgrid "ij" lays them out
        index = index * side + (moved[i] + half)
    escaped = offsets.shape[1]
    follow = np.where(inside, index, escaped)
    follow = np.append(follow, escaped)
    for _ in range(max(1, math.ceil(math.log2(follow.size))) + 1):
        follow = follow[follow]
    return offsets[:, follow[:-1] != escaped]


def _sampled(plan: FixedPointPlan, equilibrium: np.ndarray, rest: np.ndarray, half: int,
             steps: int) -> DeadZone:
    """Seeded samples of a box doubled (at most SAMPLED_DOUBLINGS times, and within the word)
    until the states that stay fill at most half of it."""
    program = plan.program
    for _ in range(SAMPLED_DOUBLINGS):
        zone = _sampled_box(plan, equilibrium, rest, half, steps)
        wider = 2 * half
        if (2 * max(zone.radius_lsb) <= half or np.max(np.abs(rest)) + wider >= program.word_max):
            return zone
        half = wider
    return zone


def _sampled_box(plan: FixedPointPlan, equilibrium: np.ndarray, rest: np.ndarray, half: int,
                 steps: int) -> DeadZone:
    program = plan.program
    n = program.model_state_count
    rng = np.random.default_rng(SEED)
    offsets = rng.integers(-half, half + 1, size=(n, SAMPLES))
    states = rest.reshape(-1, 1) + np.vstack([offsets, np.zeros((len(rest) - n, SAMPLES),
                                                                dtype=np.int64)])
    states = np.clip(states, program.word_min, program.word_max)
    staying = np.arange(SAMPLES)  # a sample that once leaves the box is not followed further
    # A sample the step leaves in place inside the box stays there at every later step (the map
    # is a function of the state alone), so it is kept without being stepped again: in a dead
    # zone nearly every sample is such a rest state, and following them cost every step.
    resting = [np.zeros(0, dtype=staying.dtype)]
    for _ in range(steps):
        moved = golden.step(program, states)
        inside = np.all(np.abs(moved[:n] - rest[:n].reshape(-1, 1)) <= half, axis=0)
        still = inside & np.all(moved == states, axis=0)
        resting.append(staying[still])
        follow = inside & ~still
        states, staying = moved[:, follow], staying[follow]
        if not staying.size:
            break
    staying = np.sort(np.concatenate([*resting, staying]))
    return _result(plan, equilibrium, rest, offsets[:, staying], half, "sampled", False)


def _result(plan: FixedPointPlan, equilibrium: np.ndarray, rest: np.ndarray, dead: np.ndarray,
            half: int, method: str, exact: bool) -> DeadZone:
    program = plan.program
    n = program.model_state_count
    radius = np.abs(dead).max(axis=1) if dead.size else np.zeros(n, dtype=np.int64)
    scale = 2.0 ** np.asarray(program.state_fraction_bits[:n], dtype=float)
    members = frozenset(tuple(int(v) for v in column) for column in dead.T) if exact else frozenset()
    point = [float(radians_to_turns(x)) if i in program.angle_states else float(x)
             for i, x in enumerate(equilibrium)]
    return DeadZone(equilibrium=tuple(point), rest_state=tuple(int(v) for v in rest[:n]),
                    state_names=tuple(program.state_names[:n]),
                    radius_lsb=tuple(int(r) for r in radius),
                    radius=tuple(float(r) for r in radius / scale), states=int(dead.shape[1]),
                    half_width_lsb=half, method=method, exact=exact, members=members)


def path_lands_inside(built: Design, zones: tuple[DeadZone, ...],
                      steps: int) -> tuple[int, DeadZone] | None:
    """The first step at which the golden run from the initial state is in a dead zone, and
    that zone; None when it never is within ``steps`` steps."""
    if not zones:
        return None
    program = built.plan.program
    state = np.asarray(built.plan.initial_state, dtype=np.int64).reshape(-1, 1)
    for k in range(steps + 1):
        for zone in zones:
            if zone.contains(state[:, 0]):
                return k, zone
        state = golden.step(program, state)
    return None
