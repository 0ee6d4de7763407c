"""Basin of attraction of the model's limit cycle, sampled: from many starting states in a box, the
fraction that reaches the cycle, and what the rest do.

A rhythm generator is started from whatever state the controller holds (zeros after a reset, the
last values after a fault). The basin sample says how much of a box of such states runs onto the
wanted rhythm, and names the alternatives: another equilibrium, another cycle, unbounded growth.

Method: every start is integrated at once with the classical fourth-order Runge-Kutta method at a
fixed step (a small fraction of the cycle's period, and small against the fastest rate of the
Jacobian at the starts and on the cycle), vectorised in numpy. At every check (each half period)
a start is decided when, at two checks in a row, it lies within ``NEAR`` of the size of the
motion of the cycle (distance to the cycle's samples) or of a stable equilibrium, or when it has
left a ball of ``ESCAPE`` times the box's and the cycle's size (or become non-finite). Starts
still undecided when the model-time or wall-clock budget runs out are followed one by one with
:func:`gen.limit_cycle.find_limit_cycle`, which names another cycle if there is one; what that
cannot decide is reported as undecided.
"""

from __future__ import annotations

import itertools
import math
import time
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, replace

import numpy as np
import sympy

from orbitfix.gen.analysis.equilibria import Equilibrium, find_equilibria, format_state
from orbitfix.gen.analysis.limit_cycle import LimitCycle, find_limit_cycle
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.compiled import array_function
from orbitfix.gen.model.definition import Model
from orbitfix.gen.progress import tell

NEAR = 1e-2                 # decided when this close (relative to the cycle's size) to an attractor
ESCAPE = 1e3                # grows without bound past this many times the box's and cycle's size
STEPS_PER_PERIOD = 400      # at least this many RK4 steps per period of the cycle
STIFF_MARGIN = 1.0          # step <= this / (bound on the Jacobian's eigenvalues, at the states)
DEFAULT_PERIODS = 60.0      # model-time budget, in periods of the cycle
DEFAULT_SECONDS = 30.0      # wall-clock budget of the integration, s
MAX_STARTS = 1_000_000
MAX_PROBES = 12             # undecided starts followed one by one at the end, at most
PROBES_BETWEEN = 3          # the same, after PROBE_AFTER periods (to find other cycles early)
PROBE_AFTER = 10.0          # periods
CYCLE_SAMPLES = 1000        # cycle samples kept for distances
CLOCK_STEPS = 256           # RK4 steps between looks at the clock, inside one check

CYCLE = "reaches the cycle"
GROWS = "grows without bound"
UNDECIDED = "undecided within the budget"


@dataclass(frozen=True, eq=False)
class BasinSample:
    """What the starts in the box did.

    starts : ndarray, shape (k, n) -- the starting states.
    outcomes : tuple of str, length k -- for each start, one of :attr:`labels`.
    labels : tuple of str -- every outcome seen, the model's cycle first: ``CYCLE``,
        'settles at the stable focus (0, 0)', 'reaches another cycle (period 6.28, ...)',
        ``GROWS``, ``UNDECIDED``.
    cycle : LimitCycle -- the model's cycle, from its initial state.
    """

    model: Model
    box: tuple[tuple[str, float, float], ...]
    starts: np.ndarray
    outcomes: tuple[str, ...]
    labels: tuple[str, ...]
    cycle: LimitCycle
    step: float
    model_time: float
    notes: tuple[str, ...]

    def counts(self) -> dict[str, int]:
        """How many starts had each outcome, in the order of :attr:`labels`."""
        return {label: sum(1 for o in self.outcomes if o == label) for label in self.labels}

    @property
    def fraction_on_cycle(self) -> float:
        return self.counts().get(CYCLE, 0) / max(1, len(self.outcomes))

    def to_json(self, every_start: bool = False) -> dict:
        total = max(1, len(self.outcomes))
        data = {
            "model": self.model.name,
            "box": {name: [low, high] for name, low, high in self.box},
            "starts": len(self.outcomes),
            "cycle": {"found": bool(self.cycle.found), "stable": bool(self.cycle.stable),
                      "period": self.cycle.period, "verdict": self.cycle.verdict},
            "fraction_on_cycle": self.fraction_on_cycle,
            "outcomes": [{"outcome": label, "count": count, "fraction": count / total}
                         for label, count in self.counts().items()],
            "step": self.step,
            "model_time": self.model_time,
            "notes": list(self.notes),
        }
        if every_start:
            data["each_start"] = [{"state": [float(v) for v in x], "outcome": o}
                                  for x, o in zip(self.starts, self.outcomes, strict=True)]
        return data


class NoCycleError(Exception):
    """The model has no stable limit cycle from its initial state, so there is no basin to sample."""

    def __init__(self, cycle: LimitCycle) -> None:
        super().__init__(cycle.verdict)
        self.cycle = cycle


def box_starts(model: Model, box: Mapping[str, tuple[float, float]], *, grid: int | None = None,
               random: int | None = None, seed: int = 0) -> np.ndarray:
    """Starting states (ndarray, shape (k, n)): a grid of ``grid`` values per boxed state, or
    ``random`` uniform draws; states not in ``box`` keep their initial value."""
    _check_box(model, box)
    if (grid is None) == (random is None):
        raise InputError("give either a grid size or a number of random starts, not both or neither")
    names = list(box)
    if grid is not None:
        if grid < 2:
            raise InputError(f"the grid needs at least 2 values per state, got {grid}")
        if grid ** len(names) > MAX_STARTS:
            raise InputError(f"a grid of {grid} per state over {len(names)} states gives more than "
                             f"{MAX_STARTS} starts; use a smaller grid or random starts")
        axes = [np.linspace(box[n][0], box[n][1], grid) for n in names]
        points = np.array(list(itertools.product(*axes)), dtype=float)
    else:
        if not 1 <= random <= MAX_STARTS:
            raise InputError(f"the number of random starts must be between 1 and {MAX_STARTS}, "
                             f"got {random}")
        rng = np.random.default_rng(seed)
        low = np.array([box[n][0] for n in names])
        high = np.array([box[n][1] for n in names])
        points = low + (high - low) * rng.random((random, len(names)))
    starts = np.tile(model.initial_state, (len(points), 1))
    for column, name in enumerate(names):
        starts[:, model.state_names.index(name)] = points[:, column]
    return starts


def sample_basin(model: Model, starts: np.ndarray, box: Mapping[str, tuple[float, float]] | None = None,
                 *, periods: float = DEFAULT_PERIODS, seconds: float = DEFAULT_SECONDS) -> BasinSample:
    """Classify each start (ndarray, shape (k, n)) by where its trajectory goes.

    Raises NoCycleError when the model's initial state does not run onto a stable limit cycle.
    """
    if not (math.isfinite(periods) and periods > 0 and math.isfinite(seconds) and seconds > 0):
        raise InputError("the budgets (periods and seconds) must be positive numbers")
    cycle = find_limit_cycle(model)
    if not (cycle.found and cycle.stable):
        raise NoCycleError(cycle)
    starts = np.asarray(starts, dtype=float)
    run = _Run(model, cycle, starts, periods, seconds)
    outcomes = run.classify()
    settles = sorted({o for o in outcomes if o.startswith("settles")})
    others = sorted({o for o in outcomes if o.startswith("reaches another")})
    labels = [CYCLE, *settles, *others, GROWS, UNDECIDED]
    labels = [label for label in labels if label == CYCLE or label in outcomes]
    box_items = tuple((name, float(low), float(high)) for name, (low, high) in (box or {}).items())
    return BasinSample(model=model, box=box_items, starts=starts, outcomes=tuple(outcomes),
                       labels=tuple(labels), cycle=cycle, step=run.step, model_time=run.elapsed,
                       notes=tuple(run.notes))


class _Run:
    """The vectorised integration and its checks."""

    def __init__(self, model: Model, cycle: LimitCycle, starts: np.ndarray, periods: float,
                 seconds: float) -> None:
        self.model, self.cycle, self.starts = model, cycle, starts
        self.field = model.vector_field()
        states = list(model.state_symbols)
        matrix = sympy.Matrix(model.resolved_equations).jacobian(sympy.Matrix(states))
        self.jacobian_rows = array_function(states, [sum((abs(e) for e in matrix.row(i)), sympy.S.Zero)
                                                     for i in range(model.dimension)])
        self.deadline = time.monotonic() + seconds
        self.seconds = seconds
        every = max(1, cycle.samples.shape[1] // CYCLE_SAMPLES)
        self.ring = np.asarray(cycle.samples[:, ::every], dtype=float).T      # (m, n)
        self.size = max(float(np.max(cycle.state_max - cycle.state_min)), 1e-12)
        reach = max(float(np.max(np.abs(starts))) if starts.size else 0.0,
                    float(np.max(np.abs(self.ring))), 1.0)
        self.escape = ESCAPE * reach
        self.period = float(cycle.period)
        self.step = self.period / STEPS_PER_PERIOD
        self.horizon = periods * self.period
        self.elapsed = 0.0
        self.notes: list[str] = []
        self.attractors = [e for e in find_equilibria(model) if e.stable]
        self.rings: list[tuple[str, np.ndarray, float]] = [(CYCLE, self.ring, self.size)]

    def _step(self, y: np.ndarray | None = None) -> float:
        """The step until the next check: STEPS_PER_PERIOD per period, and small against the
        fastest rate of the Jacobian (bounded by its largest absolute row sum) on the cycle and at
        the states ``y`` (ndarray, shape (n, k); default the starts)."""
        points = np.hstack([self.ring.T, self.starts.T if y is None else y])
        with np.errstate(all="ignore"):
            rows = self.jacobian_rows(points)
        bound = np.max(rows, axis=0)
        bound = bound[np.isfinite(bound)]
        fastest = float(np.max(bound)) if bound.size else 0.0
        step = self.period / STEPS_PER_PERIOD
        return min(step, STIFF_MARGIN / fastest) if fastest > 0 else step

    def classify(self) -> list[str]:
        """Integrate all starts; after PROBE_AFTER periods, follow a few undecided ones to find
        other cycles, which then count as attractors; at the end, follow the rest."""
        k = len(self.starts)
        self.outcomes = [UNDECIDED] * k
        self.final = self.starts.T.copy()             # (n, k)
        self.left = np.arange(k)
        self.previous = np.full(k, -1, dtype=int)     # attractor index near at the last check
        self.integrate(min(self.horizon, PROBE_AFTER * self.period))
        self.probe(PROBES_BETWEEN)
        self.integrate(self.horizon)
        self.probe(MAX_PROBES)
        left = sum(1 for o in self.outcomes if o == UNDECIDED)
        if left:
            self.notes.append(f"{left} start(s) neither reached an attractor within the budget nor "
                              "could be decided by following them one by one; raise the budget "
                              "to decide them")
        return self.outcomes

    def integrate(self, until: float) -> None:
        outcomes, x, active, previous = self.outcomes, self.final, self.left, self.previous
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            while active.size and self.elapsed < until:
                tell("following the starts", round(1000 * self.elapsed / until), 1000)
                if time.monotonic() > self.deadline:
                    note = (f"the {self.seconds:g} s budget ran out after {self.elapsed:.4g} model "
                            f"time units ({self.elapsed / self.period:.3g} periods)")
                    if note not in self.notes:
                        self.notes.append(note)
                    break
                y = x[:, active]
                h = self._step(y)
                self.step = min(self.step, h)
                per_check = max(1, round(0.5 * self.period / h))
                done = 0
                while done < per_check:   # the clock is read every CLOCK_STEPS steps
                    for _ in range(min(CLOCK_STEPS, per_check - done)):
                        y = self._rk4(y, h)
                    done += min(CLOCK_STEPS, per_check - done)
                    if time.monotonic() > self.deadline:
                        break
                x[:, active] = y
                self.elapsed += done * h
                size = np.sqrt(np.sum(y * y, axis=0))
                gone = ~np.isfinite(size) | (size > self.escape)
                near = self._nearest_attractor(y)
                settled = (near >= 0) & (near == previous[active]) & ~gone
                for index in active[gone]:
                    outcomes[index] = GROWS
                for index, which in zip(active[settled], near[settled], strict=True):
                    outcomes[index] = self._label(which)
                previous[active] = near
                active = active[~(gone | settled)]
        self.left = active

    def _label(self, which: int) -> str:
        if which < len(self.rings):
            return self.rings[which][0]
        return _settles(self.attractors[which - len(self.rings)])

    def _rk4(self, y: np.ndarray, h: float) -> np.ndarray:
        f = self.field
        k1 = f(0.0, y)
        k2 = f(0.0, y + 0.5 * h * k1)
        k3 = f(0.0, y + 0.5 * h * k2)
        k4 = f(0.0, y + h * k3)
        return y + (h / 6.0) * (k1 + 2.0 * k2 + 2.0 * k3 + k4)

    def _nearest_attractor(self, y: np.ndarray) -> np.ndarray:
        """For each column of y: 0 when within NEAR of the cycle, i + 1 when within NEAR of stable
        equilibrium i, else -1."""
        found = np.full(y.shape[1], -1, dtype=int)
        for i, equilibrium in enumerate(self.attractors):
            distance = np.max(np.abs(y - equilibrium.state[:, None]), axis=0)
            found[distance <= NEAR * self.size] = len(self.rings) + i
        for which in range(len(self.rings) - 1, -1, -1):
            _, ring, size = self.rings[which]
            chunk = max(1, 2_000_000 // max(1, ring.size))
            for begin in range(0, y.shape[1], chunk):
                part = y[:, begin:begin + chunk].T                              # (c, n)
                gaps = np.min(np.max(np.abs(part[:, None, :] - ring[None, :, :]), axis=2), axis=1)
                found[begin:begin + chunk][gaps <= NEAR * size] = which
        return found

    def probe(self, limit: int) -> None:
        """Follow up to ``limit`` undecided starts one by one from where the integration left
        them: the cycle search names another cycle (kept as an attractor from then on), a slow
        approach to a known attractor, or growth."""
        outcomes = self.outcomes
        probes = 0
        for index in [int(i) for i in self.left]:
            x = self.final[:, index]
            if not np.all(np.isfinite(x)):
                outcomes[index] = GROWS
                continue
            label = self._known_other(x)
            if label is not None:
                outcomes[index] = label
                continue
            if probes >= limit or time.monotonic() > self.deadline + self.seconds:
                continue
            probes += 1
            at = replace(self.model, states=tuple(replace(s, initial=float(v))
                                                  for s, v in zip(self.model.states, x, strict=True)))
            found = find_limit_cycle(at, seconds=min(5.0, self.seconds))
            if found.found and found.stable:
                ring = np.asarray(found.samples, dtype=float).T
                if self._same_cycle(ring):
                    outcomes[index] = CYCLE
                    continue
                label = (f"reaches another cycle (period {found.period:.6g}, passing through "
                         f"{format_state(found.point)})")
                size = max(float(np.max(found.state_max - found.state_min)), 1e-12)
                every = max(1, ring.shape[0] // CYCLE_SAMPLES)
                self.rings.append((label, ring[::every], size))
                outcomes[index] = label
            elif found.outcome == "settles" and found.settled_at is not None:
                outcomes[index] = _settles(found.settled_at)
            elif found.outcome == "grows":
                outcomes[index] = GROWS
        self.left = np.array([i for i in self.left if outcomes[int(i)] == UNDECIDED], dtype=int)

    def _same_cycle(self, ring: np.ndarray) -> bool:
        gaps = np.min(np.max(np.abs(ring[::10, None, :] - self.ring[None, :, :]), axis=2), axis=1)
        return bool(np.max(gaps) <= NEAR * self.size)

    def _known_other(self, x: np.ndarray) -> str | None:
        for label, ring, size in self.rings[1:]:
            if float(np.min(np.max(np.abs(ring - x[None, :]), axis=1))) <= NEAR * size:
                return label
        return None


def _settles(equilibrium: Equilibrium) -> str:
    return f"settles at the {equilibrium.kind} {format_state(equilibrium.state)}"


def _check_box(model: Model, box: Mapping[str, tuple[float, float]]) -> None:
    if not box:
        raise InputError("give the box of starting states: a range for at least one state")
    for name, (low, high) in box.items():
        if name not in model.state_names:
            raise InputError(f"model '{model.name}' has no state '{name}' (its states are: "
                             f"{', '.join(model.state_names)})")
        if not (math.isfinite(low) and math.isfinite(high)):
            raise InputError(f"the range of '{name}' must be finite, got {low} to {high}")
        if not low < high:
            raise InputError(f"the range of '{name}' must go from a lower to a higher value, "
                             f"got {low} to {high}")
