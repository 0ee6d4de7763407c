"""The model's limit cycle: found by following the flow, then pinned down by Newton shooting.

The rhythm a controller can rely on is an isolated, stable limit cycle: disturbances die away and the
oscillator returns to the same period and amplitude. This module finds the cycle the initial state
runs onto, measures its period and range tightly, and reads its stability from the Floquet
multipliers (the eigenvalues of the monodromy matrix, the linearised map once around the cycle).

When there is no such cycle the answer is a plain verdict, never a traceback: the motion settles at
an equilibrium, grows without bound, or does not repeat within the time budget.

Method, in three stages, all integrations sharing one budget of wall-clock time and vector-field
evaluations:

1. Search: integrate from the initial state (LSODA, which switches to a stiff method by itself) and
   record returns to a Poincare section (a hyperplane through a point of the trajectory, normal to
   the flow there, crossed in the flow's direction) until the returns repeat, the motion settles at
   an equilibrium, or the state runs away.
2. Shooting: Newton's method on (start point, period) with the variational equations integrated
   beside the state (DOP853; for a stiff cycle LSODA, given the exact Jacobian of the whole
   variational system), and a phase condition that keeps the start point on a section through the
   point where the first state peaks.
3. Reading off: period, monodromy, Floquet multipliers; for two-state models the nontrivial
   multiplier comes from Liouville's formula (the divergence integrated over one period), which
   stays accurate where the multiplier is far below what the monodromy matrix resolves.

Angle states (``State.angle``, phases in radians) live on the circle: returns to the section and
the repeat test compare them modulo 2 pi, and a cycle may advance an angle by whole turns, so the
shooting closes x(T) - x(0) = 2 pi k on angle states (k read off the search). The variational
equations, and so the Floquet multipliers, are untouched by the wrap.

Rooms: the flow and its budgeted integration (``flow``), stage 1 (``search``), stage 2
(``shooting``); this module holds the result, runs the stages and reads the cycle off (stage 3).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, replace

import numpy as np
from scipy.optimize import minimize_scalar

from orbitfix.gen.analysis.equilibria import Equilibrium, EquilibriumFinder, format_state
from orbitfix.gen.analysis.limit_cycle.flow import Budget, Flow, OutOfBudgetError
from orbitfix.gen.analysis.limit_cycle.search import follow_flow, rests
from orbitfix.gen.analysis.limit_cycle.shooting import Shot, peak_start, shoot
from orbitfix.gen.model.angles import TURN, wrap_angles
from orbitfix.gen.model.definition import Model

NEUTRAL_TOLERANCE = 1e-6       # |ln|m|| below this: the multiplier counts as 1 (cycle not isolated)
STIFF_INDEX = 20000.0          # spectral radius x period above which shooting uses LSODA
SAMPLE_COUNT = 2000            # samples over one period for the fixed-point planner
RANGE_GRID = 20000             # grid over one period for the per-state min and max
DEFAULT_SECONDS = 20.0         # wall-clock budget for one search, s
DEFAULT_EVALUATIONS = 3_000_000  # budget of vector-field evaluations for one search


@dataclass(frozen=True, eq=False)
class LimitCycle:
    """What the search found. Array fields are None when no cycle was found.

    found : bool -- a periodic orbit was pinned down by shooting.
    stable : bool -- found, isolated, and every nontrivial Floquet multiplier has modulus below 1.
    isolated : bool -- no nontrivial multiplier equals 1 (otherwise the cycles form a family).
    verdict : str -- one plain sentence for reports.
    outcome : str -- short tag: 'stable cycle', 'unstable cycle', 'cycle family', 'settles',
        'grows', 'no repeat', 'failed'.
    period : float, model time units.
    point : ndarray, shape (n,) -- the cycle's point on the Poincare section (samples start here).
    monodromy : ndarray, shape (n, n) -- linearised map once around the cycle, from ``point``.
    multipliers : ndarray, shape (n,), complex -- Floquet multipliers, the trivial one at
        ``trivial_index``. For two-state models the nontrivial one is exp(floquet_log[0]).
    floquet_log : ndarray, shape (n - 1,) -- ln of the modulus of each nontrivial multiplier.
    state_min, state_max : ndarray, shape (n,) -- range of each state over the cycle. An angle
        state that turns on the cycle is reported as the full turn, 0 to 2 pi.
    samples : ndarray, shape (n, SAMPLE_COUNT) -- states equally spaced in time over one period,
        starting at ``point``; angle states wrapped into [0, 2 pi).
    turns : ndarray of int, shape (n,) -- whole turns each angle state advances per period (0 for
        every other state).
    closing_error : float -- |x(period) - x(0)| (max norm) of the final shooting integration.
    settled_at : Equilibrium or None -- where trajectories settle, when they do.
    method : str -- the integrator the shooting used.
    """

    found: bool
    verdict: str
    outcome: str
    stable: bool = False
    isolated: bool = False
    period: float | None = None
    point: np.ndarray | None = None
    monodromy: np.ndarray | None = None
    multipliers: np.ndarray | None = None
    trivial_index: int | None = None
    floquet_log: np.ndarray | None = None
    state_min: np.ndarray | None = None
    state_max: np.ndarray | None = None
    samples: np.ndarray | None = None
    closing_error: float | None = None
    settled_at: Equilibrium | None = None
    method: str = ""
    turns: np.ndarray | None = None

    def __post_init__(self) -> None:
        if self.verdict and not self.verdict.endswith("."):
            object.__setattr__(self, "verdict", self.verdict + ".")   # a verdict is a sentence

    @property
    def nontrivial_multipliers(self) -> np.ndarray | None:
        """The multipliers other than the trivial one (ndarray, shape (n - 1,), complex)."""
        if self.multipliers is None or self.trivial_index is None:
            return None
        return np.delete(self.multipliers, self.trivial_index)

    @property
    def stability_margin(self) -> float | None:
        """The largest nontrivial multiplier modulus: the factor a disturbance off the cycle keeps
        after one period at worst (below 1 is stable; the smaller, the faster the recovery)."""
        if self.floquet_log is None or self.floquet_log.size == 0:
            return None
        return float(np.exp(np.max(self.floquet_log)))


def find_limit_cycle(model: Model, *, reverse_time: bool = False, seconds: float = DEFAULT_SECONDS,
                     evaluations: int = DEFAULT_EVALUATIONS) -> LimitCycle:
    """Find the limit cycle that trajectories from the model's initial state run onto.

    reverse_time : bool -- follow the flow backward in time, which finds a repelling cycle (for two
        states, the unstable cycle bounding the basin of a stable equilibrium). Results are always
        stated for forward time.
    seconds : float, s -- wall-clock budget.
    evaluations : int -- budget of vector-field evaluations over all integrations.

    Never raises for a model that simply has no cycle: the verdict says what happens instead.
    """
    budget = Budget(seconds, evaluations)
    try:
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            return _find(model, Flow(model, -1.0 if reverse_time else 1.0), budget)
    except OutOfBudgetError as exc:
        return LimitCycle(found=False, outcome="no repeat",
                          verdict=f"no periodic orbit found within the budget ({exc}): the motion "
                                  "neither repeated, settled nor ran away in that time")
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        return LimitCycle(found=False, outcome="failed",
                          verdict=f"no limit cycle could be established: the numerics failed "
                                  f"({type(exc).__name__}: {exc})")


# -- running the stages, and stage 3: reading the cycle off --------------------------------------


def _extremes(solution, period: float, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Per-state min and max over one period: a fine grid, then a local refinement of each."""
    times = np.linspace(0.0, period, RANGE_GRID + 1)
    states = solution(times)[:n]
    step = times[1] - times[0]
    lows, highs = np.empty(n), np.empty(n)
    for i in range(n):
        for sign, out in ((1.0, lows), (-1.0, highs)):
            k = int(np.argmin(sign * states[i]))
            best = sign * states[i, k]
            a, b = max(0.0, times[k] - step), min(period, times[k] + step)
            refined = minimize_scalar(lambda s, i=i, sign=sign: sign * solution(s)[i],
                                      bounds=(a, b), method="bounded",
                                      options={"xatol": 1e-12 * max(period, 1.0)})
            if refined.success and refined.fun < best:
                best = float(refined.fun)
            out[i] = sign * best
    return lows, highs


def _find(model: Model, flow: Flow, budget: Budget) -> LimitCycle:
    finder = EquilibriumFinder(model)
    x0 = model.initial_state
    size0 = max(1.0, float(np.max(np.abs(x0))))
    direction = " (running time backward)" if flow.backward else ""
    if float(np.max(np.abs(flow.field(0.0, x0)))) == 0.0:
        at_rest = finder.at(x0)
        if rests(at_rest, flow):
            return _settles(at_rest, direction, starts_there=True)
        x0 = _nudge(flow, at_rest, size0)   # to find the cycle an unstable equilibrium feeds

    search = follow_flow(flow, finder, x0, budget)
    if search.outcome == "wanders":
        return LimitCycle(found=False, outcome="no repeat",
                          verdict=f"no periodic orbit found: {search.message}")
    if search.outcome == "grows":
        return LimitCycle(found=False, outcome="grows",
                          verdict=f"no limit cycle: trajectories from the initial state grow "
                                  f"without bound{direction} ({search.message})")
    if search.outcome == "settles":
        return _settles(search.equilibrium, direction)
    if search.outcome == "failed":
        return LimitCycle(found=False, outcome="failed",
                          verdict=f"no limit cycle could be established: {search.message}")

    guess, radius = peak_start(flow, search.start, search.period, budget, search.size)
    method = "LSODA" if radius * search.period > STIFF_INDEX else "DOP853"
    ok, message, shot = shoot(flow, guess, search.period, search.size, method, budget, search.turns)
    if not ok:
        # the extrapolated guess may have been too rough: follow the flow until returns repeat
        search = follow_flow(flow, finder, x0, budget, extrapolate=False)
        if search.outcome == "oscillates":
            guess, radius = peak_start(flow, search.start, search.period, budget, search.size)
            ok, message, shot = shoot(flow, guess, search.period, search.size, method, budget,
                                       search.turns)
    if not ok:
        return LimitCycle(found=False, outcome="failed", method=method,
                          verdict=f"the motion repeats (period about {search.period:.5g}) but no "
                                  f"exact periodic orbit was pinned down: {message}")
    return _read_cycle(flow, finder, shot, method, search.size)


def _nudge(flow: Flow, at_rest: Equilibrium, size: float) -> np.ndarray:
    """A start just off an equilibrium that does not attract, along its most repelling direction."""
    values, vectors = np.linalg.eig(flow.jacobian(0.0, at_rest.state))
    leading = vectors[:, int(np.argmax(values.real))].real
    if not np.any(leading):
        leading = np.ones_like(at_rest.state)
    return at_rest.state + 1e-3 * size * leading / np.linalg.norm(leading)


def _settles(equilibrium: Equilibrium, direction: str, starts_there: bool = False) -> LimitCycle:
    how = "starts at and stays at" if starts_there else "settles at"
    return LimitCycle(found=False, outcome="settles", settled_at=equilibrium,
                      verdict=f"no limit cycle: the trajectory from the initial state {how} the "
                              f"{equilibrium.label()}{direction}")


def _read_cycle(flow: Flow, finder: EquilibriumFinder, shot: Shot, method: str,
                size: float) -> LimitCycle:
    n, period = flow.n, shot.period
    times = np.arange(SAMPLE_COUNT) * (period / SAMPLE_COUNT)
    samples = wrap_angles(shot.solution(times)[:n], flow.angles)
    low, high = _extremes(shot.solution, period, n)
    turning = flow.angles & (shot.offset != 0.0)
    low[turning], high[turning] = 0.0, TURN   # an angle that turns covers the whole circle
    if float(np.max(high - low)) <= 1e-6 * size:
        return LimitCycle(found=False, outcome="failed", method=method,
                          verdict="no limit cycle: the shooting closed onto a resting state, "
                                  f"not a cycle, near {format_state(shot.start)}")
    monodromy = shot.monodromy
    liouville = shot.divergence_integral
    if flow.backward:
        # the same orbit in forward time: inverse map, mirrored samples, negated divergence
        monodromy = np.linalg.inv(monodromy)
        liouville = -liouville
        samples = samples[:, (-np.arange(SAMPLE_COUNT)) % SAMPLE_COUNT]
    multipliers = np.linalg.eigvals(monodromy).astype(complex)
    trivial = int(np.argmin(np.abs(multipliers - 1.0)))
    if n == 2:
        floquet_log = np.array([liouville])
        multipliers[1 - trivial] = math.exp(liouville) if liouville < 700 else math.inf
    else:
        with np.errstate(divide="ignore"):
            floquet_log = np.log(np.abs(np.delete(multipliers, trivial)))
    neutral = bool(np.any(np.abs(floquet_log) <= NEUTRAL_TOLERANCE))
    stable = bool(not neutral and np.all(floquet_log < -NEUTRAL_TOLERANCE))
    point = shot.start.copy()
    turns = np.rint(shot.offset / TURN).astype(int)
    if flow.backward:
        turns = -turns
    for array in (point, monodromy, multipliers, floquet_log, low, high, samples, turns):
        array.setflags(write=False)
    cycle = LimitCycle(found=True, stable=stable, isolated=not neutral, verdict="", outcome="",
                       period=period, point=point, monodromy=monodromy, multipliers=multipliers,
                       trivial_index=trivial, floquet_log=floquet_log, state_min=low,
                       state_max=high, samples=samples,
                       closing_error=float(np.max(np.abs(shot.gap))), method=method, turns=turns)
    outcome, verdict = _cycle_verdict(cycle, finder, samples)
    return replace(cycle, outcome=outcome, verdict=verdict)


def _cycle_verdict(cycle: LimitCycle, finder: EquilibriumFinder, samples: np.ndarray) -> tuple[str, str]:
    period = f"period {cycle.period:.6g} model time units"
    if not cycle.isolated:
        inside = finder.near(np.mean(samples, axis=1))
        because = ("the linearisation there is a center" if inside is not None and
                   inside.kind == "center" else "a nontrivial Floquet multiplier is 1")
        where = f" around {format_state(inside.state)}" if inside is not None else ""
        return "cycle family", (
            f"no isolated limit cycle: the cycles{where} form a continuous family ({because}; "
            f"this one has {period}), so there is no single rhythm to lock onto and any "
            "disturbance moves the oscillator to a neighbouring cycle for good")
    if cycle.floquet_log.size == 0:
        return "stable cycle", (
            f"limit cycle, {period}: the single angle state turns round the whole circle, so every "
            "start is on the cycle (the only Floquet multiplier is the trivial one)")
    worst = _factor(float(np.max(cycle.floquet_log)))
    if cycle.stable:
        return "stable cycle", (
            f"stable limit cycle, {period}: a disturbance off the cycle keeps at most {worst} of "
            "its size after each period (the largest nontrivial Floquet multiplier), so the rhythm "
            "recovers by itself")
    return "unstable cycle", (
        f"unstable limit cycle, {period}: a disturbance off the cycle grows by a factor of {worst} "
        "each period (the largest nontrivial Floquet multiplier), so the motion leaves it; it only "
        "marks the border between starting states that go one way and those that go another")


def _factor(log_modulus: float) -> str:
    """exp(log_modulus) as text, written as a power of e where a float would underflow."""
    if -700.0 < log_modulus < 700.0:
        return f"{math.exp(log_modulus):.3g}"
    return f"e^({log_modulus:.5g})"
