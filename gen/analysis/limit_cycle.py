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
"""

from __future__ import annotations

import itertools
import math
import time
import warnings
from collections import deque
from dataclasses import dataclass, replace

import numpy as np
import sympy
from scipy.integrate import solve_ivp
from scipy.optimize import brentq, minimize_scalar

from orbitfix.gen.analysis.equilibria import Equilibrium, EquilibriumFinder, format_state
from orbitfix.gen.model.definition import Model

# -- tolerances and budgets ---------------------------------------------------------------------

SHOOTING_RTOL = 1e-11          # relative tolerance of the shooting integrations (DOP853)
STIFF_SHOOTING_RTOL = 1e-12    # the same for stiff cycles (LSODA)
SEARCH_RTOL = 1e-9             # relative tolerance while following the flow to find the cycle
NEUTRAL_TOLERANCE = 1e-6       # |ln|m|| below this: the multiplier counts as 1 (cycle not isolated)
RETURN_TOLERANCE = 1e-5        # returns that repeat to this fraction of the motion's range
SETTLED_DISTANCE = 1e-4        # closer than this (relative) to a stable equilibrium: settled
RUNAWAY_FACTOR = 1e6           # the state's size passing this times its start size: growth
STIFF_INDEX = 20000.0          # spectral radius x period above which shooting uses LSODA
SAMPLE_COUNT = 2000            # samples over one period for the fixed-point planner
RANGE_GRID = 20000             # grid over one period for the per-state min and max
DEFAULT_SECONDS = 20.0         # wall-clock budget for one search, s
DEFAULT_EVALUATIONS = 3_000_000  # budget of vector-field evaluations for one search
SEARCH_SPAN = 2000.0           # model-time budget of the search, in natural time units
MAX_RETURNS = 200              # returns to the section without a repeat before giving up
NEWTON_STEPS = 16
TURN = 2.0 * math.pi           # one turn of an angle state, radians


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
    budget = _Budget(seconds, evaluations)
    try:
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            return _find(model, _Flow(model, -1.0 if reverse_time else 1.0), budget)
    except _OutOfBudgetError as exc:
        return LimitCycle(found=False, outcome="no repeat",
                          verdict=f"no periodic orbit found within the budget ({exc}): the motion "
                                  "neither repeated, settled nor ran away in that time")
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        return LimitCycle(found=False, outcome="failed",
                          verdict=f"no limit cycle could be established: the numerics failed "
                                  f"({type(exc).__name__}: {exc})")


# -- the vector field, forward or backward -------------------------------------------------------


class _Flow:
    """The model's vector field and derivatives, with time running forward (+1) or backward (-1).

    The functions are compiled here from the model's resolved equations as plain scalar code (one
    call per evaluation, common subexpressions shared), because the integrators call them tens of
    thousands of times and per-call overhead dominates. The Jacobian is the same analytic
    derivative the model's own ``jacobian()`` gives.
    """

    def __init__(self, model: Model, sign: float) -> None:
        self.sign = sign
        self.n = model.dimension
        self.angles = model.angle_mask
        self.free = np.nonzero(~self.angles)[0]   # states that can run away (angles only turn)
        states = list(model.state_symbols)
        rates = [sign * eq for eq in model.resolved_equations]
        jacobian = sympy.Matrix(rates).jacobian(sympy.Matrix(states))
        self._field = _compile(states, rates)
        self._jacobian = _compile(states, list(jacobian))
        self._symbolic = (states, rates, jacobian)
        self._variational_jacobian = None

    @property
    def backward(self) -> bool:
        return self.sign < 0

    def field(self, t: float, x: np.ndarray) -> np.ndarray:
        return np.array(self._field(*x.tolist()), dtype=float)

    def jacobian(self, t: float, x: np.ndarray) -> np.ndarray:
        return np.array(self._jacobian(*x.tolist()), dtype=float).reshape(self.n, self.n)

    def variational(self, t: float, y: np.ndarray) -> np.ndarray:
        """State, monodromy (row-major) and the divergence integral (the Jacobian's trace, i.e.
        the model's divergence), differentiated together. The product J M is done in numpy, not
        compiled symbolically, so a network of many states compiles in a moment."""
        n = self.n
        x = y[:n]
        jacobian = self.jacobian(t, x)
        sensitivity = y[n:n + n * n].reshape(n, n)
        return np.concatenate([self.field(t, x), (jacobian @ sensitivity).ravel(),
                               [np.trace(jacobian)]])

    def variational_jacobian(self, t: float, y: np.ndarray) -> np.ndarray:
        """Jacobian of :meth:`variational`, for the implicit (stiff) integrator."""
        if self._variational_jacobian is None:
            states, rates, jacobian = self._symbolic
            n = self.n
            sensitivity = sympy.Matrix(n, n, [sympy.Symbol(f"_m{i}") for i in range(n * n)])
            self._variables = states + list(sensitivity)
            terms = rates + list(jacobian * sensitivity) + [jacobian.trace()]
            matrix = sympy.Matrix(terms).jacobian(sympy.Matrix(self._variables))
            # min, max and clip have kinks: their second derivative is zero away from the kink
            terms = [term.replace(lambda e: isinstance(e, sympy.DiracDelta), lambda e: sympy.S.Zero)
                     for term in matrix]
            self._variational_jacobian = _compile(self._variables, terms)
        size = y.size
        full = np.zeros((size, size))
        full[:, :-1] = np.array(self._variational_jacobian(*y[:-1].tolist()),
                                dtype=float).reshape(size, size - 1)
        return full


def _compile(variables: list, expressions: list):
    """Scalar Python code for a list of expressions: f(*floats) -> list of floats."""
    return sympy.lambdify(variables, expressions, modules="math", cse=True)


# -- budget and integration ----------------------------------------------------------------------


class _OutOfBudgetError(Exception):
    """The search used up its wall-clock or evaluation budget."""


class _RunAwayError(Exception):
    """The state's size passed the runaway limit at time ``t``."""

    def __init__(self, t: float) -> None:
        super().__init__(t)
        self.t = t


class _StalledError(Exception):
    """The integrator stopped making progress in time (a singular or impossibly stiff field)."""

    def __init__(self, t: float, y: np.ndarray) -> None:
        super().__init__(t)
        self.t = t
        self.y = np.array(y)


class _Budget:
    """Wall-clock and evaluation limits shared by every integration of one search."""

    STALL_CHECK = 4096   # evaluations between checks that time is still moving

    def __init__(self, seconds: float, evaluations: int) -> None:
        self.seconds = seconds
        self.evaluations = evaluations
        self.deadline = time.monotonic() + seconds
        self.left = evaluations

    def guard(self, fun, n: int, span: float, limit: float | None = None,
              free: np.ndarray | None = None):
        """``fun`` counted against the budget, stopped when the Euclidean size of the ``free``
        states (all by default; angles only turn) passes ``limit``, and when time stops advancing
        (less than 1e-9 of the span per check)."""
        chosen = np.arange(n) if free is None else free
        mark = [None]

        def guarded(t: float, y: np.ndarray) -> np.ndarray:
            self.left -= 1
            if self.left <= 0:
                raise _OutOfBudgetError(f"{self.evaluations} evaluations of the vector field")
            if self.left % self.STALL_CHECK == 0:
                if time.monotonic() > self.deadline:
                    raise _OutOfBudgetError(f"{self.seconds:g} s of computing")
                if mark[0] is not None and abs(t - mark[0]) <= 1e-9 * span:
                    raise _StalledError(t, y[:n])
                mark[0] = t
            if limit is not None and float(y[chosen] @ y[chosen]) > limit * limit:
                raise _RunAwayError(t)
            return fun(t, y)

        return guarded


def _integrate(fun, y0: np.ndarray, t_span: tuple[float, float], budget: _Budget, *, n: int,
               method: str, rtol: float, atol: float | np.ndarray, jac=None, dense: bool = False,
               limit: float | None = None, free: np.ndarray | None = None):
    """solve_ivp under the budget. Returns (success, message, result): a failed integration is a
    message, not an exception. Raises _RunAwayError when the state's size passes ``limit``."""
    options = {"jac": jac} if jac is not None else {}
    guarded = budget.guard(fun, n, abs(t_span[1] - t_span[0]), limit, free)
    try:
        result = solve_ivp(guarded, t_span, y0, method=method, rtol=rtol, atol=atol,
                           dense_output=dense, **options)
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        return False, f"the integrator stopped ({exc})", None
    except _StalledError as exc:
        return False, (f"the integrator stalled at t = {exc.t:.6g} near {format_state(exc.y)}: "
                       "the vector field is singular or too stiff there"), None
    if result.status == -1:
        return False, f"the integrator gave up at t = {result.t[-1]:.6g} ({result.message})", None
    if not np.all(np.isfinite(result.y[:, -1])):
        return False, f"the state became infinite or undefined near t = {result.t[-1]:.6g}", None
    return True, "", result


# -- stage 1: follow the flow --------------------------------------------------------------------


@dataclass
class _Search:
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

    def crossings(self, run) -> list[tuple[float, np.ndarray]]:
        """Crossings in the flow's direction within one dense integration. Angle states are
        compared with the anchor modulo 2 pi; where an angle's wrapped offset jumps by a turn
        between two samples (the far side of the circle) there is no crossing."""
        times, states = _looks(run, self.angles)
        offsets = wrap_difference(states - self.anchor[:, None], self.angles)
        g = self.normal @ offsets
        upward = (g[:-1] < 0.0) & (g[1:] >= 0.0)
        if self.angles.any():
            jumps = np.abs(np.diff(offsets[self.angles], axis=1) - np.diff(states[self.angles], axis=1))
            upward &= ~np.any(jumps > math.pi, axis=0)
        found = []
        for i in np.nonzero(upward)[0]:
            def height(s: float) -> float:
                return float(self.normal @ wrap_difference(run.sol(s) - self.anchor, self.angles))

            a, b = float(times[i]), float(times[i + 1])
            if height(a) * height(b) > 0.0:
                continue
            t_cross = brentq(height, a, b, xtol=1e-15 * max(1.0, abs(b)), rtol=1e-15)
            found.append((t_cross, run.sol(t_cross)))
        return found


def _section_at(flow: _Flow, p: np.ndarray, t: float, size: float) -> _Section | None:
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
    pieces = np.maximum(1, np.ceil(advance / (TURN / 8))).astype(int)
    if not np.any(pieces > 1):
        return times, states
    times = np.concatenate([np.linspace(a, b, k, endpoint=False) for a, b, k in
                            zip(times[:-1], times[1:], pieces, strict=True)] + [times[-1:]])
    return times, run.sol(times)


def wrap_difference(difference: np.ndarray, angles: np.ndarray) -> np.ndarray:
    """A difference of states (shape (n,) or (n, k)) with its angle rows wrapped into
    [-pi, pi): two states a whole number of turns apart are the same point."""
    if not angles.any():
        return difference
    wrapped = np.array(difference, dtype=float)
    wrapped[angles] = (wrapped[angles] + math.pi) % TURN - math.pi
    return wrapped


def wrap_angles(state: np.ndarray, angles: np.ndarray) -> np.ndarray:
    """A state (shape (n,) or (n, k)) with its angle rows wrapped into [0, 2 pi)."""
    if not angles.any():
        return state
    wrapped = np.array(state, dtype=float)
    wrapped[angles] = wrapped[angles] % TURN
    return wrapped


def _turns(difference: np.ndarray, angles: np.ndarray) -> np.ndarray:
    """Whole turns in a difference of states: per angle state, 0 elsewhere (int array, (n,))."""
    return np.where(angles, np.rint(np.asarray(difference, dtype=float) / TURN), 0.0).astype(int)


def _natural_time(flow: _Flow, x: np.ndarray) -> float:
    """A time scale from the Jacobian at x: one turn at the slowest nonzero rate."""
    values = np.abs(np.linalg.eigvals(flow.jacobian(0.0, x)))
    top = float(np.max(values)) if values.size else 0.0
    if not math.isfinite(top) or top == 0.0:
        return 2.0 * math.pi
    slowest = float(np.min(values[values > 1e-9 * top]))
    return 2.0 * math.pi / slowest


def _follow(flow: _Flow, finder: EquilibriumFinder, x0: np.ndarray, budget: _Budget,
            extrapolate: bool = True) -> _Search:
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
            ok, message, run = _integrate(flow.field, x, (t, t + chunk), budget, n=n,
                                          method="LSODA", rtol=SEARCH_RTOL, atol=1e-9 * size0,
                                          jac=flow.jacobian, dense=section is not None,
                                          limit=limit, free=flow.free)
        except _RunAwayError as exc:
            return _Search("grows", f"the state's size passed {limit:.3g} at t = {exc.t:.4g} "
                                    "model time units")
        if not ok:
            return _Search("failed", message)
        pieces.append(_looks(run, flow.angles))
        x, t = run.y[:, -1].copy(), float(run.t[-1])
        settled = _settled(flow, finder, x, size0)
        if settled is not None:
            return _Search("settles", equilibrium=settled)
        fresh = [] if section is None else [
            r for r in section.crossings(run) if not returns or r[0] - returns[-1][0] > 1e-9 * unit]
        if not fresh:
            # no return in a whole run: the section may miss the motion, or a turn takes longer
            if section is not None:
                chunk *= 2.0
            section = _section_at(flow, x, t, size0)
            if section is None:
                return _Search("failed", f"the motion stopped at {format_state(x)}, which is not "
                                         "an attracting equilibrium")
            returns = []
            continue
        returns.extend(fresh)
        total_returns += len(fresh)
        gap = returns[-1][0] - (returns[-2][0] if len(returns) > 1 else section.time)
        chunk = 2.2 * gap     # about two returns per run
        spiral = _decaying_spiral(flow, finder, returns, pieces)
        if spiral is not None:
            return _Search("settles", equilibrium=spiral)
        repeat = (_repeating(returns, pieces, flow.angles)
                  or (_closing_in(returns, pieces, flow.angles) if extrapolate else None))
        if repeat is not None:
            start, period, span, turns = repeat
            return _Search("oscillates", start=start, period=period, size=span, turns=turns)
        if total_returns >= MAX_RETURNS:
            return _Search("wanders", f"after {total_returns} returns to a Poincare section the "
                                      "motion still had not repeated (it may be chaotic or "
                                      "quasi-periodic)")
    raise _OutOfBudgetError(f"{span_end:.4g} model time units")


def _settled(flow: _Flow, finder: EquilibriumFinder, x: np.ndarray, size: float) -> Equilibrium | None:
    """The equilibrium x has come to rest at: one next to x that attracts in the search's time, or
    a degenerate one that repels in no direction (the linearisation cannot decide, but the
    trajectory is there)."""
    equilibrium = finder.near(x)
    if equilibrium is None:
        return None
    if float(np.max(np.abs(wrap_difference(x - equilibrium.state, flow.angles)))) > \
            SETTLED_DISTANCE * size:
        return None
    return equilibrium if _rests(equilibrium, flow) else None


def _attracts(equilibrium: Equilibrium, flow: _Flow) -> bool:
    return bool(np.all(flow.sign * equilibrium.eigenvalues.real < 0))


def _rests(equilibrium: Equilibrium, flow: _Flow) -> bool:
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
            return x_a, period, span, _turns(x_a - x_b, angles)
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
    return start, period + ahead * (period - (times[-2] - times[-3])), span, _turns(last_move, angles)


def _decaying_spiral(flow: _Flow, finder: EquilibriumFinder, returns: list, pieces) -> Equilibrium | None:
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


# -- stage 2: Newton shooting --------------------------------------------------------------------


@dataclass
class _Shot:
    """One integration of the state and its variational equations over [0, period]."""

    start: np.ndarray
    period: float
    end: np.ndarray
    monodromy: np.ndarray
    divergence_integral: float
    solution: object
    offset: np.ndarray   # 2 pi k on angle states that turn k times per period, 0 elsewhere

    @property
    def gap(self) -> np.ndarray:
        """x(period) - x(0) - 2 pi k: zero on a closed orbit."""
        return self.end - self.start - self.offset


def _run_once(flow: _Flow, start: np.ndarray, period: float, method: str, budget: _Budget,
              size: float, offset: np.ndarray) -> tuple[bool, str, _Shot | None]:
    """Integrate state, monodromy and divergence integral once over [0, period]."""
    n = flow.n
    y0 = np.concatenate([start, np.eye(n).ravel(), [0.0]])
    atol = np.concatenate([np.full(n, 1e-13 * size), np.full(n * n, 1e-13), [1e-13]])
    stiff = method == "LSODA"
    ok, message, run = _integrate(flow.variational, y0, (0.0, period), budget, n=n, method=method,
                                  rtol=STIFF_SHOOTING_RTOL if stiff else SHOOTING_RTOL, atol=atol,
                                  jac=flow.variational_jacobian if stiff else None, dense=True)
    if not ok:
        return False, message, None
    end = run.y[:, -1]
    return True, "", _Shot(start=start, period=period, end=end[:n].copy(),
                           monodromy=end[n:n + n * n].reshape(n, n).copy(),
                           divergence_integral=float(end[-1]), solution=run.sol, offset=offset)


def _shoot(flow: _Flow, guess: np.ndarray, period: float, size: float, method: str,
           budget: _Budget, turns: np.ndarray) -> tuple[bool, str, _Shot | None]:
    """Newton's method on (start, period) for x(period) = start + 2 pi k (k: the whole turns of
    each angle state, 0 for the others), the start held on the section through ``guess`` normal
    to the flow there (the phase condition)."""
    n = flow.n
    offset = TURN * np.asarray(turns, dtype=float)
    normal = flow.field(0.0, guess)
    normal = normal / np.linalg.norm(normal)
    start = guess.copy()
    best: tuple[float, _Shot] | None = None
    for _ in range(NEWTON_STEPS):
        ok, message, shot = _run_once(flow, start, period, method, budget, size, offset)
        if not ok:
            return False, f"shooting failed: {message}", None
        gap = shot.gap
        closing = float(np.max(np.abs(gap)))
        if best is None or closing < best[0]:
            best = (closing, shot)
        if closing <= 1e-10 * size:
            return True, "", shot
        system = np.zeros((n + 1, n + 1))
        system[:n, :n] = shot.monodromy - np.eye(n)
        system[:n, n] = flow.field(0.0, shot.end)
        system[n, :n] = normal
        right = -np.concatenate([gap, [normal @ (start - guess)]])
        # least squares with a cut-off: on a family of cycles the system is singular, and the
        # step must not chase rounding noise along the family
        step = np.linalg.lstsq(system, right, rcond=1e-9)[0]
        if not np.all(np.isfinite(step)):
            break
        move, stretch = float(np.max(np.abs(step[:n]))), abs(float(step[n]))
        if closing <= 1e-8 * size and move <= 1e-11 * size and stretch <= 1e-11 * period:
            return True, "", shot   # converged as far as the integration's own accuracy allows
        # keep each step modest: a tenth of the motion's range, a quarter of the period
        shrink = min(1.0, 0.1 * size / max(move, 1e-300), 0.25 * period / max(stretch, 1e-300))
        start = start + shrink * step[:n]
        period = period + shrink * float(step[n])
        if period <= 0.0:
            break
    if best is not None and best[0] <= 1e-8 * size:
        return True, "", best[1]
    closing = best[0] if best is not None else float("nan")
    return False, (f"the shooting did not close the orbit (gap {closing:.3g} after "
                   f"{NEWTON_STEPS} Newton steps)"), None


def _peak_start(flow: _Flow, start: np.ndarray, period: float, budget: _Budget,
                size: float) -> tuple[np.ndarray, float]:
    """The point of one turn where the first state peaks, and the largest spectral radius of the
    Jacobian seen on the way (which decides whether the shooting needs a stiff integrator)."""
    ok, _, run = _integrate(flow.field, start, (0.0, period), budget, n=flow.n, method="LSODA",
                            rtol=SEARCH_RTOL, atol=1e-12 * size, jac=flow.jacobian, dense=True)
    if not ok:
        return start, 0.0
    states = run.sol(np.linspace(0.0, period, 2001))
    watched = int(flow.free[0]) if flow.free.size else 0   # an angle's peak is where it wraps
    peak = wrap_angles(states[:, int(np.argmax(states[watched]))], flow.angles)
    radius = max(float(np.max(np.abs(np.linalg.eigvals(flow.jacobian(0.0, states[:, i])))))
                 for i in range(0, states.shape[1], 20))
    return peak, radius


# -- stage 3: reading the cycle off --------------------------------------------------------------


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


def _find(model: Model, flow: _Flow, budget: _Budget) -> LimitCycle:
    finder = EquilibriumFinder(model)
    x0 = model.initial_state
    size0 = max(1.0, float(np.max(np.abs(x0))))
    direction = " (running time backward)" if flow.backward else ""
    if float(np.max(np.abs(flow.field(0.0, x0)))) == 0.0:
        at_rest = finder.at(x0)
        if _rests(at_rest, flow):
            return _settles(at_rest, direction, starts_there=True)
        x0 = _nudge(flow, at_rest, size0)   # to find the cycle an unstable equilibrium feeds

    search = _follow(flow, finder, x0, budget)
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

    guess, radius = _peak_start(flow, search.start, search.period, budget, search.size)
    method = "LSODA" if radius * search.period > STIFF_INDEX else "DOP853"
    ok, message, shot = _shoot(flow, guess, search.period, search.size, method, budget, search.turns)
    if not ok:
        # the extrapolated guess may have been too rough: follow the flow until returns repeat
        search = _follow(flow, finder, x0, budget, extrapolate=False)
        if search.outcome == "oscillates":
            guess, radius = _peak_start(flow, search.start, search.period, budget, search.size)
            ok, message, shot = _shoot(flow, guess, search.period, search.size, method, budget,
                                       search.turns)
    if not ok:
        return LimitCycle(found=False, outcome="failed", method=method,
                          verdict=f"the motion repeats (period about {search.period:.5g}) but no "
                                  f"exact periodic orbit was pinned down: {message}")
    return _read_cycle(flow, finder, shot, method, search.size)


def _nudge(flow: _Flow, at_rest: Equilibrium, size: float) -> np.ndarray:
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


def _read_cycle(flow: _Flow, finder: EquilibriumFinder, shot: _Shot, method: str,
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
