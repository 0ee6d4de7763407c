"""Stage 1 of the limit-cycle search: follow the flow from the initial state, watching returns to
a Poincare section, until the motion repeats, settles at an equilibrium, or runs away.

The section is a hyperplane through a point of the trajectory, normal to the flow there, crossed
in the flow's direction. Returns that repeat give a point on the cycle, its period and the whole
turns of each angle state; returns that close in geometrically are extrapolated to their limit,
so a weakly attracting cycle need not be followed for hundreds of turns (the shooting then
finishes the job). Angle states are compared modulo 2 pi throughout.
"""

from __future__ import annotations

import itertools
import math
from collections import deque
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

from orbitfix.gen.analysis.equilibria import Equilibrium, EquilibriumFinder, format_state
from orbitfix.gen.analysis.limit_cycle.flow import Budget, Flow, OutOfBudgetError, RunAwayError, integrate
from orbitfix.gen.model.angles import TURN, whole_turns, wrap_difference
from orbitfix.gen.work_size import LARGEST_ARRAY, refuse_oversized

SEARCH_RTOL = 1e-9             # relative tolerance while following the flow to find the cycle
RETURN_TOLERANCE = 1e-5        # returns that repeat to this fraction of the motion's range
SETTLED_DISTANCE = 1e-4        # closer than this (relative) to a stable equilibrium: settled
RUNAWAY_FACTOR = 1e6           # the state's size passing this times its start size: growth
SEARCH_SPAN = 2000.0           # model-time budget of the search, in natural time units
MAX_RETURNS = 200              # returns to the section without a repeat before giving up


@dataclass
class Search:
    """What following the flow showed."""

    outcome: str                       # 'oscillates', 'settles', 'grows', 'wanders', 'failed'
    message: str = ""
    equilibrium: Equilibrium | None = None
    start: np.ndarray | None = None     # a point on the repeating motion
    period: float = 0.0
    size: float = 1.0                   # largest range of any state over the repeating motion
    turns: np.ndarray | None = None     # whole turns of each angle state per period


@dataclass(frozen=True)
class _Section:
    """A Poincare section: the hyperplane normal to the flow at a point of the trajectory."""

    normal: np.ndarray
    anchor: np.ndarray
    time: float
    angles: np.ndarray

    def crossings(self, run, budget: Budget) -> list[tuple[float, np.ndarray]]:
        """Crossings in the flow's direction within one dense integration, in time order: the
        last MAX_RETURNS at most (every decision of the search reads the latest returns, and more
        than MAX_RETURNS ends it). Angle states are compared with the anchor modulo 2 pi; where an
        angle's wrapped offset jumps by a turn between two samples (the far side of the circle)
        there is no crossing."""
        times, states = _looks(run, self.angles)
        offsets = wrap_difference(states - self.anchor[:, None], self.angles)
        g = self.normal @ offsets
        upward = (g[:-1] < 0.0) & (g[1:] >= 0.0)
        if self.angles.any():
            jumps = np.abs(np.diff(offsets[self.angles], axis=1) - np.diff(states[self.angles], axis=1))
            upward &= ~np.any(jumps > math.pi, axis=0)
        found = []
        for i in np.nonzero(upward)[0][::-1]:
            if len(found) == MAX_RETURNS:
                break
            budget.check_clock()

            def height(s: float) -> float:
                return float(self.normal @ wrap_difference(run.sol(s) - self.anchor, self.angles))

            a, b = float(times[i]), float(times[i + 1])
            if height(a) * height(b) > 0.0:
                continue
            t_cross = brentq(height, a, b, xtol=1e-15 * max(1.0, abs(b)), rtol=1e-15)
            found.append((t_cross, run.sol(t_cross)))
        return found[::-1]


def _section_at(flow: Flow, p: np.ndarray, t: float, size: float) -> _Section | None:
    """The section normal to the flow at p, set a hair (1e-9 of the state's size) behind p, so a
    run starting at p starts strictly beyond it and does not report p itself as a crossing."""
    direction = flow.field(0.0, p)
    speed = float(np.linalg.norm(direction))
    if speed == 0.0 or not math.isfinite(speed):
        return None
    normal = direction / speed
    return _Section(normal=normal, anchor=p - 1e-9 * size * normal, time=t, angles=flow.angles)


def _looks(run, angles: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Times and states of a dense integration, close enough together that no angle state turns
    more than an eighth of a turn between two (a solver step may turn an angle by more than half
    a turn, where wrapping could no longer tell which way it went)."""
    times, states = run.t, run.y
    if not angles.any() or run.sol is None or times.size < 2:
        return times, states
    advance = np.max(np.abs(np.diff(states[angles], axis=1)), axis=0)
    wanted = np.maximum(1.0, np.ceil(advance / (TURN / 8)))
    refuse_oversized(
        (float(np.sum(wanted)) + 1.0) * (states.shape[0] + 1),
        f"following the motion in steps of an eighth of a turn (an angle state turns up to "
        f"{float(np.max(advance)) / TURN:.3g} times in one step of the integrator)",
        "the angles turn far faster than the rest of the motion changes, so their rates span too "
        "many time scales to follow; bring them closer (for example a smaller angular frequency "
        "parameter: the rhythm's speed in Hz is set by cycle_hz, not by the model's own time unit)")
    pieces = wanted.astype(int)
    if not np.any(pieces > 1):
        return times, states
    times = np.concatenate([np.linspace(a, b, k, endpoint=False) for a, b, k in
                            zip(times[:-1], times[1:], pieces, strict=True)] + [times[-1:]])
    return times, run.sol(times)


def _natural_time(flow: Flow, x: np.ndarray) -> float:
    """A time scale from the Jacobian at x: one turn at the slowest nonzero rate."""
    values = np.abs(np.linalg.eigvals(flow.jacobian(0.0, x)))
    top = float(np.max(values)) if values.size else 0.0
    if not math.isfinite(top) or top == 0.0:
        return TURN
    slowest = float(np.min(values[values > 1e-9 * top]))
    return TURN / slowest


def follow_flow(flow: Flow, finder: EquilibriumFinder, x0: np.ndarray, budget: Budget,
                extrapolate: bool = True) -> Search:
    """Integrate from x0, watching returns to a Poincare section, until the motion repeats,
    settles or runs away. With ``extrapolate``, returns that close in geometrically are
    extrapolated to their limit, so a weakly attracting cycle need not be followed for hundreds
    of turns (the shooting then finishes the job)."""
    n = flow.n
    size0 = max(1.0, float(np.max(np.abs(x0))))
    limit = RUNAWAY_FACTOR * size0
    unit = _natural_time(flow, x0)
    span_end = SEARCH_SPAN * unit
    x, t, chunk = x0.astype(float), 0.0, unit
    section: _Section | None = None
    returns: list[tuple[float, np.ndarray]] = []
    pieces: deque = deque(maxlen=64)
    total_returns = 0
    while t < span_end:
        try:
            ok, message, run = integrate(flow.field, x, (t, t + chunk), budget, n=n,
                                         method="LSODA", rtol=SEARCH_RTOL, atol=1e-9 * size0,
                                         jac=flow.jacobian, dense=section is not None,
                                         limit=limit, free=flow.free)
        except RunAwayError as exc:
            return Search("grows", f"the state's size passed {limit:.3g} at t = {exc.t:.4g} "
                                    "model time units")
        if not ok:
            return Search("failed", message)
        pieces.append(_looks(run, flow.angles))
        while len(pieces) > 1 and sum(p[1].nbytes for p in pieces) > 2 * LARGEST_ARRAY:
            pieces.popleft()   # the oldest stretch: the decisions read the latest returns
        x, t = run.y[:, -1].copy(), float(run.t[-1])
        settled = _settled(flow, finder, x, size0)
        if settled is not None:
            return Search("settles", equilibrium=settled)
        fresh = [] if section is None else [
            r for r in section.crossings(run, budget) if not returns or r[0] - returns[-1][0] > 1e-9 * unit]
        if not fresh:
            # no return in a whole run: the section may miss the motion, or a turn takes longer
            if section is not None:
                chunk *= 2.0
            section = _section_at(flow, x, t, size0)
            if section is None:
                return Search("failed", f"the motion stopped at {format_state(x)}, which is not "
                                         "an attracting equilibrium")
            returns = []
            continue
        returns.extend(fresh)
        total_returns += len(fresh)
        gap = returns[-1][0] - (returns[-2][0] if len(returns) > 1 else section.time)
        chunk = 2.2 * gap     # about two returns per run
        spiral = _decaying_spiral(flow, finder, returns, pieces)
        if spiral is not None:
            return Search("settles", equilibrium=spiral)
        repeat = (_repeating(returns, pieces, flow.angles)
                  or (_closing_in(returns, pieces, flow.angles) if extrapolate else None))
        if repeat is not None:
            start, period, span, turns = repeat
            return Search("oscillates", start=start, period=period, size=span, turns=turns)
        if total_returns >= MAX_RETURNS:
            return Search("wanders", f"after {total_returns} returns to a Poincare section the "
                                      "motion still had not repeated (it may be chaotic or "
                                      "quasi-periodic)")
    raise OutOfBudgetError(f"{span_end:.4g} model time units")


def _settled(flow: Flow, finder: EquilibriumFinder, x: np.ndarray, size: float) -> Equilibrium | None:
    """The equilibrium x has come to rest at: one next to x that attracts in the search's time, or
    a degenerate one that repels in no direction (the linearisation cannot decide, but the
    trajectory is there)."""
    equilibrium = finder.near(x)
    if equilibrium is None:
        return None
    if float(np.max(np.abs(wrap_difference(x - equilibrium.state, flow.angles)))) > \
            SETTLED_DISTANCE * size:
        return None
    return equilibrium if rests(equilibrium, flow) else None


def _attracts(equilibrium: Equilibrium, flow: Flow) -> bool:
    return bool(np.all(flow.sign * equilibrium.eigenvalues.real < 0))


def rests(equilibrium: Equilibrium, flow: Flow) -> bool:
    """It attracts, or it is degenerate and repels in no direction of its linearisation."""
    if _attracts(equilibrium, flow):
        return True
    growth = flow.sign * equilibrium.eigenvalues.real
    scale = float(np.max(np.abs(equilibrium.eigenvalues))) if equilibrium.eigenvalues.size else 0.0
    return equilibrium.kind == "degenerate" and bool(np.all(growth <= 1e-9 * scale))


def _between(pieces, t_from: float, t_to: float) -> np.ndarray:
    """Recorded states with times in [t_from, t_to], shape (n, k)."""
    chosen = [y[:, (t >= t_from) & (t <= t_to)] for t, y in pieces]
    chosen = [c for c in chosen if c.size]
    return np.hstack(chosen) if chosen else np.empty((0, 0))


def _repeating(returns: list, pieces, angles: np.ndarray
               ) -> tuple[np.ndarray, float, float, np.ndarray] | None:
    """(start, period, range, turns) when the last returns repeat, every 1, 2 or 3 returns
    (angle states compared modulo 2 pi; turns counts their whole turns per period)."""
    for every in (1, 2, 3):
        if len(returns) < every + 2:
            continue
        (t_a, x_a), (t_b, x_b) = returns[-1], returns[-1 - every]
        (t_c, x_c), (t_d, x_d) = returns[-2], returns[-2 - every]
        period, previous = t_a - t_b, t_c - t_d
        states = _between(pieces, t_b, t_a)
        if states.size == 0:
            continue
        span = float(np.max(np.ptp(states, axis=1)))
        close = max(float(np.max(np.abs(wrap_difference(x_a - x_b, angles)))),
                    float(np.max(np.abs(wrap_difference(x_c - x_d, angles)))))
        if close <= RETURN_TOLERANCE * span and abs(period - previous) <= RETURN_TOLERANCE * period:
            return x_a, period, span, whole_turns(x_a - x_b, angles)
    return None


def _closing_in(returns: list, pieces, angles: np.ndarray
                ) -> tuple[np.ndarray, float, float, np.ndarray] | None:
    """(start, period, range, turns) extrapolated to the limit when successive returns close in
    on a point geometrically (a steady ratio below 1), and the limit is within 1% of the range."""
    if len(returns) < 5:
        return None
    times = [r[0] for r in returns[-4:]]
    points = [r[1] for r in returns[-4:]]
    moves = [float(np.max(np.abs(wrap_difference(b - a, angles))))
             for a, b in itertools.pairwise(points)]
    if min(moves) == 0.0:
        return None
    first, ratio = moves[1] / moves[0], moves[2] / moves[1]
    if not (0.0 < ratio < 0.999) or abs(first - ratio) > 0.05 * ratio:
        return None
    states, before = _between(pieces, times[-2], times[-1]), _between(pieces, times[-3], times[-2])
    if states.size == 0 or before.size == 0:
        return None
    span = float(np.max(np.ptp(states, axis=1)))
    if span < 0.9 * float(np.max(np.ptp(before, axis=1))):
        return None   # the motion is shrinking away, as into a stable focus, not onto a cycle
    ahead = ratio / (1.0 - ratio)   # the geometric tail still to come, per unit of the last move
    if moves[2] * ahead > 1e-2 * span:
        return None
    period = times[-1] - times[-2]
    last_move = points[-1] - points[-2]
    start = points[-1] + ahead * wrap_difference(last_move, angles)
    return start, period + ahead * (period - (times[-2] - times[-3])), span, whole_turns(last_move, angles)


def _decaying_spiral(flow: Flow, finder: EquilibriumFinder, returns: list, pieces) -> Equilibrium | None:
    """The equilibrium the motion spirals into, when successive returns shrink at the rate its
    linearisation predicts (so the motion is already in its linear, decaying regime)."""
    if len(returns) < 4:
        return None
    t_last, t_before = returns[-1][0], returns[-2][0]
    states = _between(pieces, t_before, t_last)
    if states.size == 0:
        return None
    equilibrium = finder.near(np.mean(states, axis=1))
    spiral_in = "unstable focus" if flow.backward else "stable focus"
    if equilibrium is None or equilibrium.kind != spiral_in:
        return None
    expected = math.exp(float(np.max(flow.sign * equilibrium.eigenvalues.real)) * (t_last - t_before))
    distances = [float(np.linalg.norm(wrap_difference(x - equilibrium.state, flow.angles)))
                 for _, x in returns[-4:]]
    if min(distances) == 0.0:
        return equilibrium
    ratios = [b / a for a, b in itertools.pairwise(distances)]
    if all(abs(r - expected) <= 0.02 * expected for r in ratios):
        return equilibrium
    return None


