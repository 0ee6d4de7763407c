"""The branch of cycles born at a Hopf point, followed by pseudo-arclength continuation.

The unknowns are u = (x0, T, p): a point of the cycle, its period and the swept parameter. Each
step predicts along the branch's unit tangent (in scaled units) and corrects by Newton's method on

    phi(x0, T; p) - x0 = 0                  the orbit closes (shooting)
    <f(x_prev; p_prev), x0 - x_prev> = 0     x0 on the section through the last point (phase)
    <t, u - u_predicted> = 0                the step is orthogonal to the tangent (arclength)

with the monodromy matrix and d phi / dp integrated beside the state, so the Newton matrix is
exact. Because the parameter is an unknown, the branch passes through folds (saddle-nodes of
cycles), where the tangent's parameter component changes sign and one multiplier passes 1; each
fold is located by bisection on the step length. (Keller's pseudo-arclength method; Kuznetsov,
"Elements of Applied Bifurcation Theory", 3rd ed. 2004, sec. 10.2 and 10.3.)

A branch ends at the range's edge, back at a Hopf point (its amplitude shrinks to zero), when
its period runs away (a homoclinic orbit), or is lost when the corrector fails at the smallest step
or the budget runs out; the reason is always stated. Nothing is said about chaos: a lost branch is
a lost branch.
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass

import numpy as np
import sympy
from scipy.integrate import solve_ivp
from scipy.optimize import minimize_scalar

from orbitfix.gen.analysis.sweep.continuation import ParameterFamily
from orbitfix.gen.analysis.sweep.hopf_points import HopfPoint
from orbitfix.gen.model.compiled import scalar_function
from orbitfix.gen.model.definition import Model

RTOL = 1e-9                    # relative tolerance of every shooting integration (DOP853)
NEWTON_STEPS = 8
FIRST_STEP = 0.02              # first arclength step, scaled units
MAX_STEP = 0.1                 # longest arclength step, scaled units
MIN_STEP = 1e-4                # below this the branch is lost
MAX_POINTS = 400               # accepted points per branch
PERIOD_GROWTH = 30.0           # period over the Hopf period beyond which the orbit is homoclinic
START_RADIUS = 0.1             # the first cycle's radius, as a share of the state scale
FOLD_ITERATIONS = 24
FOLD_TURNING = 1e-3             # |tangent's parameter component| (scaled) below which a crossing is a fold
SYMBOLIC_STATES = 6            # up to this many states the variational system is compiled whole
SEGMENTS = 10                  # pieces of the cycle in the multiple shooting
GRID = 512                     # samples over one period for the amplitude


class _OutOfTimeError(Exception):
    """Raised inside an integration when the sweep's deadline passes."""


@dataclass(frozen=True)
class BranchPoint:
    """One cycle on a followed branch.

    hopf_index : the Hopf point the branch was started from.
    branch_index : the branch this point lies on.
    amplitude : half the peak-to-peak range of the first state over the cycle.
    multipliers : the nontrivial Floquet multipliers (complex).
    max_multiplier : their largest modulus (below 1: stable).
    """

    hopf_index: int | None
    param_value: float
    found: bool
    verdict: str
    period: float | None = None
    amplitude: float | None = None
    max_multiplier: float | None = None
    stable: bool = False
    multipliers: tuple[complex, ...] = ()
    branch_index: int = 0


@dataclass(frozen=True)
class Fold:
    """A saddle-node of cycles: the branch turns back in the parameter and a multiplier is 1."""

    branch_index: int
    param_value: float
    period: float
    amplitude: float
    multipliers: tuple[complex, ...]
    kind: str = "fold"       # or "branch point": a multiplier passes 1 but the branch goes on


@dataclass(frozen=True)
class CycleBranch:
    """A followed branch: its points in order, its folds, whether it was followed to a natural
    end (``complete``) and why it stopped (``reason``)."""

    index: int
    hopf_index: int | None
    points: tuple[BranchPoint, ...]
    folds: tuple[Fold, ...]
    complete: bool
    reason: str
    end_hopf: int | None = None

    @property
    def born_stable(self) -> bool | None:
        return self.points[0].stable if self.points else None


class CycleFamily:
    """phi(x0, T; p) with its monodromy matrix and d phi/dp, the swept parameter left free."""

    def __init__(self, model: Model, parameter: str, deadline: float) -> None:
        fixed = {symbol: sympy.Float(p.value) for symbol, p in zip(model.parameter_symbols,
                                                                   model.parameters, strict=True)
                 if p.name != parameter}
        swept = sympy.Symbol(parameter, real=True)
        states = list(model.state_symbols)
        rates = sympy.Matrix([eq.xreplace(fixed) for eq in model.equations])
        jacobian = rates.jacobian(sympy.Matrix(states))
        self.n = len(states)
        self.parameter = parameter
        self._field = scalar_function([*states, swept], list(rates))
        self._all = scalar_function([*states, swept], [*rates, *jacobian, *rates.diff(swept)])
        self.deadline = deadline
        self._whole = None
        if self.n <= SYMBOLIC_STATES:
            # small models: the whole variational system as one compiled function, which is several
            # times faster per call than the matrix product in numpy
            columns = sympy.Matrix(self.n, self.n + 1, sympy.symbols(f"c0:{self.n * (self.n + 1)}"))
            grown = jacobian * columns
            grown[:, self.n] += rates.diff(swept)
            flat = [grown[i, k] for k in range(self.n + 1) for i in range(self.n)]
            ordered = [columns[i, k] for k in range(self.n + 1) for i in range(self.n)]
            self._whole = scalar_function([*states, *ordered, sympy.Symbol("_d"), swept],
                                          [*rates, *flat, jacobian.trace()])

    def field(self, x: np.ndarray, p: float) -> np.ndarray:
        return np.array(self._field(*x.tolist(), p), dtype=float)

    def _variational(self, _t: float, y: np.ndarray, p: float) -> np.ndarray:
        n = self.n
        if self._whole is not None:
            return np.array(self._whole(*y.tolist(), p), dtype=float)
        values = np.array(self._all(*y[:n].tolist(), p), dtype=float)
        jac = values[n:n + n * n].reshape(n, n)
        rest = y[n:n + n * n + n].reshape(n + 1, n).T          # columns: M, then dphi/dp
        grown = jac @ rest
        grown[:, n] += values[n + n * n:]
        return np.concatenate([values[:n], grown.T.ravel(), [np.trace(jac)]])

    def shoot(self, x0: np.ndarray, period: float, p: float, scale: float):
        """(end, monodromy, dphi/dp, divergence integral, dense solution) over [0, period]."""
        if time.monotonic() > self.deadline + 5.0:
            raise _OutOfTimeError
        n = self.n
        y0 = np.concatenate([x0, np.eye(n).ravel(), np.zeros(n), [0.0]])
        atol = np.concatenate([np.full(n, 1e-12 * scale), np.full(n * n + n + 1, 1e-12)])
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            run = solve_ivp(self._variational, (0.0, period), y0, method="DOP853", rtol=RTOL,
                            atol=atol, dense_output=True, args=(p,))
        if not run.success or not np.all(np.isfinite(run.y[:, -1])):
            raise ArithmeticError(run.message if not run.success else "the orbit ran away")
        end = run.y[:, -1]
        sens = end[n:n + n * n + n].reshape(n + 1, n).T
        return end[:n], sens[:, :n], sens[:, n], float(end[-1]), run.sol


@dataclass
class _Cycle:
    u: np.ndarray             # scaled (x_0, ..., x_{m-1}, T, p)
    monodromy: np.ndarray
    system: np.ndarray        # the (m n + 1) x (m n + 2) scaled Jacobian of closing and phase
    divergence: float
    solutions: list           # dense solution of each segment, over [0, T / m]


class _Tracer:
    """Multiple shooting: the cycle is cut into ``segments`` pieces of equal time, each integrated
    from its own start, so the sensitivity of one piece stays moderate where the whole orbit's
    would not (cycles that run along a repelling slow manifold, canards)."""

    def __init__(self, family: CycleFamily, state_scale: float, period_scale: float, span: float,
                 segments: int) -> None:
        self.family, self.state_scale, self.m = family, state_scale, segments
        self.n = family.n
        self.scales = np.concatenate([np.full(segments * self.n, state_scale * math.sqrt(segments)),
                                      [period_scale, span]])

    def real(self, u: np.ndarray) -> tuple[np.ndarray, float, float]:
        """(x_0, T, p) of a scaled point."""
        v = u * self.scales
        return v[:self.n], float(v[-2]), float(v[-1])

    def spread(self, x0: np.ndarray, period: float, p: float) -> np.ndarray | None:
        """A scaled starting point: the segments' starts read off one integration from x0."""
        n = self.family.n
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            run = solve_ivp(lambda _t, x: self.family.field(x, p), (0.0, period), x0, method="DOP853",
                            rtol=1e-9, atol=1e-12 * self.state_scale, dense_output=True)
        if not run.success:
            return None
        starts = run.sol(np.arange(self.m) * period / self.m).T.reshape(self.m * n)
        return np.concatenate([starts, [period, p]]) / self.scales

    def correct(self, guess: np.ndarray, section: np.ndarray, last_row: np.ndarray,
                target: float) -> tuple[_Cycle | None, int, str]:
        """Newton on (closing, phase, last_row . u = target) from ``guess`` (scaled). The phase
        condition keeps x_0 on the plane through ``section``'s x_0 normal to the flow there."""
        n, m, u = self.n, self.m, guess.copy()
        xs, _, ps = self.real(section)
        normal = self.family.field(xs, ps)
        normal = normal / max(float(np.linalg.norm(normal)), 1e-300)
        message = "no Newton step was taken"
        last_closing = math.inf
        size = m * n
        for count in range(1, NEWTON_STEPS + 1):
            v = u * self.scales
            starts, period, p = v[:size].reshape(m, n), float(v[-2]), float(v[-1])
            if period <= 0.0:
                return None, count, "the period became negative"
            system = np.zeros((size + 1, size + 2))
            gap = np.empty(size)
            monodromy, divergence, solutions = np.eye(n), 0.0, []
            for i in range(m):
                try:
                    end, mono, dp, div, sol = self.family.shoot(starts[i], period / m, p,
                                                                self.state_scale)
                except ArithmeticError as exc:
                    return None, count, f"the integration failed ({exc})"
                rows = slice(i * n, (i + 1) * n)
                nxt = (i + 1) % m
                gap[rows] = end - starts[nxt]
                system[rows, i * n:(i + 1) * n] += mono
                system[rows, nxt * n:(nxt + 1) * n] -= np.eye(n)
                system[rows, size] = self.family.field(end, p) / m
                system[rows, size + 1] = dp
                monodromy = mono @ monodromy
                divergence += div
                solutions.append(sol)
            closing = float(np.max(np.abs(gap)))
            if count >= 3 and closing > last_closing:
                return None, count, f"Newton's method diverged (gap {closing:.3g})"
            last_closing = closing
            system[size, :n] = normal
            system = system * self.scales
            cycle = _Cycle(u=u.copy(), monodromy=monodromy, system=system, divergence=divergence,
                           solutions=solutions)
            residual = np.concatenate([gap, [normal @ (starts[0] - xs)], [last_row @ u - target]])
            full = np.vstack([system, last_row])
            try:
                step = np.linalg.solve(full, -residual)
            except np.linalg.LinAlgError:
                step = np.linalg.lstsq(full, -residual, rcond=1e-12)[0]
            if not np.all(np.isfinite(step)):
                return None, count, "the Newton matrix is singular"
            u = u + step
            moved = float(np.max(np.abs(step)))
            if (moved <= 1e-10 or (moved <= 1e-9 and count >= 3)) and closing <= 1e-6 * self.state_scale:
                return cycle, count, ""   # as closed as the integration's own accuracy allows
            message = f"the orbit did not close (gap {closing:.3g})"
        return None, NEWTON_STEPS, message


def _tangent(system: np.ndarray, previous: np.ndarray | None) -> np.ndarray:
    """The unit null vector of the closing-and-phase Jacobian, turned to agree with ``previous``
    (bordered by ``previous``, an LU solve; the first one from the SVD)."""
    if previous is not None:
        right = np.zeros(system.shape[0] + 1)
        right[-1] = 1.0
        try:
            t = np.linalg.solve(np.vstack([system, previous]), right)
            if np.all(np.isfinite(t)):
                return t / np.linalg.norm(t)
        except np.linalg.LinAlgError:
            pass
    t = np.linalg.svd(system)[2][-1]
    if previous is not None and float(t @ previous) < 0.0:
        t = -t
    return t


def _multipliers(cycle: _Cycle, n: int) -> np.ndarray:
    """The nontrivial multipliers: for two states exp(divergence integral) (Liouville's formula,
    accurate far below what the monodromy matrix resolves), else the eigenvalues of the monodromy
    without the one nearest 1."""
    if n == 2:
        return np.array([complex(math.exp(min(cycle.divergence, 700.0)))])
    values = np.linalg.eigvals(cycle.monodromy)
    return np.delete(values, int(np.argmin(np.abs(values - 1.0))))


def _amplitude(cycle: _Cycle, period: float) -> float:
    """Half the peak-to-peak range of the first state: a grid on every segment, then a local
    refinement of the extremes."""
    piece = period / len(cycle.solutions)
    times = np.linspace(0.0, piece, max(GRID // len(cycle.solutions), 16) + 1)
    step = times[1] - times[0]
    ends = []
    for sign in (1.0, -1.0):
        best, where = math.inf, (0, 0.0)
        for k, sol in enumerate(cycle.solutions):
            first = sign * sol(times)[0]
            i = int(np.argmin(first))
            if first[i] < best:
                best, where = float(first[i]), (k, float(times[i]))
        sol = cycle.solutions[where[0]]
        a, b = max(0.0, where[1] - step), min(piece, where[1] + step)
        refined = minimize_scalar(lambda s, sol=sol, sign=sign: sign * sol(s)[0], bounds=(a, b),
                                  method="bounded", options={"xatol": 1e-12 * max(period, 1.0)})
        if refined.success and refined.fun < best:
            best = float(refined.fun)
        ends.append(sign * best)
    return 0.5 * (ends[1] - ends[0])


def follow_branch(model: Model, parameter: str, index: int, point: HopfPoint, bounds: tuple[float, float],
                  spacing: float, deadline: float, others: list[HopfPoint],
                  start: tuple[np.ndarray, float, float] | None = None) -> CycleBranch:
    """Follow the cycles born at ``point`` within ``bounds`` of the parameter.

    The first cycle is the small one the Hopf normal form predicts, corrected at fixed parameter;
    ``start`` (a cycle point, its period, the parameter) replaces it where the normal form says
    nothing (a degenerate point), and the branch is then followed both ways from there.
    """
    lo, hi = min(bounds), max(bounds)
    family = CycleFamily(model, parameter, deadline)
    equilibria = ParameterFamily(model, parameter)
    base = max([1e-3, float(np.max(np.abs(point.equilibrium)))]
               + [abs(s.initial) for s in model.states])
    hopf_period = 2.0 * math.pi / point.frequency
    tracer = _Tracer(family, base, hopf_period, hi - lo, SEGMENTS)
    max_step = MAX_STEP
    try:
        if start is None:
            first = _first_cycle(tracer, equilibria, point, lo, hi)
            if isinstance(first, str):
                return CycleBranch(index=index, hopf_index=index, points=(), folds=(), complete=False,
                                   reason=first)
            return _trace(tracer, first, None, point, others, index, lo, hi, max_step)
        x0, period, p = start
        u = tracer.spread(x0, period, p)
        if u is None:
            return CycleBranch(index=index, hopf_index=index, points=(), folds=(), complete=False,
                               reason=f"the cycle found at {parameter} = {p:.6g} could not be "
                                      "integrated again")
        row = np.zeros(u.size)
        row[-1] = 1.0
        cycle, _, message = tracer.correct(u, u, row, u[-1])
        if cycle is None:
            return CycleBranch(index=index, hopf_index=index, points=(), folds=(), complete=False,
                               reason=f"the cycle found at {parameter} = {p:.6g} could not be "
                                      f"corrected by shooting: {message}")
        ahead = _trace(tracer, cycle, +1.0, point, others, index, lo, hi, max_step)
        back = _trace(tracer, cycle, -1.0, point, others, index, lo, hi, max_step)
        reason = "; ".join(r for r in (back.reason, ahead.reason) if r)
        return CycleBranch(index=index, hopf_index=index,
                           points=tuple(reversed(back.points[1:])) + ahead.points,
                           folds=back.folds + ahead.folds, complete=back.complete and ahead.complete,
                           reason=reason, end_hopf=ahead.end_hopf if ahead.end_hopf is not None
                           else back.end_hopf)
    except _OutOfTimeError:
        return CycleBranch(index=index, hopf_index=index, points=(), folds=(), complete=False,
                           reason="the sweep's time budget ran out before this branch was followed")


def _first_cycle(tracer: _Tracer, equilibria: ParameterFamily, point: HopfPoint, lo: float,
                 hi: float) -> _Cycle | str:
    """The small cycle near the Hopf point: radius START_RADIUS of the scale, parameter offset
    from the normal form (beta = -omega l1 r^2, Kuznetsov sec. 3.5), corrected at that parameter."""
    l1 = point.lyapunov.value
    if point.kind == "degenerate" or not math.isfinite(l1) or not math.isfinite(point.crossing_rate) \
            or point.crossing_rate == 0.0:
        return "the Hopf point is degenerate, so the normal form gives no small cycle to start from"
    radius = START_RADIUS * tracer.state_scale
    for _ in range(6):
        beta = -point.frequency * l1 * (radius / 2.0) ** 2    # x = x_eq + 2 Re(q z), |z| = radius/2
        value = point.param_value + beta / point.crossing_rate
        if lo <= value <= hi:
            x_eq = equilibria.follow(point.equilibrium, point.param_value, value, steps=4)
            if x_eq is not None:
                values, vectors = np.linalg.eig(equilibria.jacobian(x_eq, value))
                i = int(np.argmin(np.abs(np.abs(values.imag) - point.frequency) + np.abs(values.real)))
                q = vectors[:, i] / np.linalg.norm(vectors[:, i])
                x0 = x_eq + radius * np.real(q) / max(float(np.max(np.abs(np.real(q)))), 1e-12)
                x0 = x_eq + (x0 - x_eq) * radius / float(np.linalg.norm(x0 - x_eq))
                u = tracer.spread(x0, 2.0 * math.pi / abs(values[i].imag), value)
                if u is None:
                    break
                row = np.zeros(u.size)
                row[-1] = 1.0
                cycle, _, _ = tracer.correct(u, u, row, u[-1])
                if cycle is not None:
                    x, _, _ = tracer.real(cycle.u)
                    if float(np.linalg.norm(x - x_eq)) > 0.05 * radius:
                        return cycle
        radius *= 0.3
    return (f"no small cycle could be started near the Hopf point at {point.param_value:.8g} "
            "(the shooting from the normal form's prediction did not close)")


def _row(tracer: _Tracer, cycle: _Cycle, hopf_index: int, branch: int) -> BranchPoint:
    _x0, period, p = tracer.real(cycle.u)
    multipliers = _multipliers(cycle, tracer.n)
    largest = float(np.max(np.abs(multipliers))) if multipliers.size else 0.0
    stable = largest < 1.0
    return BranchPoint(hopf_index=hopf_index, branch_index=branch, param_value=p, found=True,
                       verdict="stable cycle" if stable else "unstable cycle", period=period,
                       amplitude=_amplitude(cycle, period), max_multiplier=largest, stable=stable,
                       multipliers=tuple(complex(m) for m in multipliers))


def _trace(tracer: _Tracer, first: _Cycle, direction: float | None, point: HopfPoint,
           others: list[HopfPoint], index: int, lo: float, hi: float, max_step: float) -> CycleBranch:
    """Pseudo-arclength continuation from ``first``; direction None: away from the equilibrium,
    else +1/-1 in the parameter. The points found are kept when the time budget runs out."""
    rows: list[BranchPoint] = []
    folds: list[Fold] = []
    try:
        return _steps(tracer, first, direction, point, others, index, lo, hi, max_step, rows, folds)
    except _OutOfTimeError:
        return _done(index, rows, folds, False, "the sweep's time budget ran out while this branch "
                     "was followed", None)


def _steps(tracer: _Tracer, first: _Cycle, direction: float | None, point: HopfPoint,
           others: list[HopfPoint], index: int, lo: float, hi: float, max_step: float,
           rows: list[BranchPoint], folds: list[Fold]) -> CycleBranch:
    n = tracer.n
    span_scale = tracer.scales[-1]
    cycle = first
    tangent = _tangent(cycle.system, None)
    x_first, _, _p_first = tracer.real(first.u)
    if direction is None:
        outward = (x_first - point.equilibrium) / tracer.scales[:n]
        sign = float(tangent[:n] @ outward)
    else:
        sign = direction * tangent[-1]
    tangent = tangent if sign >= 0.0 else -tangent
    rows.append(_row(tracer, cycle, index, index))
    step = FIRST_STEP
    reason, complete, end_hopf = "", True, None
    at_edge = False
    while True:
        if time.monotonic() > tracer.family.deadline:
            return _done(index, rows, folds, False, "the sweep's time budget ran out while this "
                         "branch was followed", None)
        if len(rows) >= MAX_POINTS:
            return _done(index, rows, folds, False, f"stopped after {MAX_POINTS} points", None)
        guess = cycle.u + step * tangent
        p_guess = guess[-1] * span_scale
        edge = None
        if (p_guess > hi or p_guess < lo) and abs(guess[-1] - cycle.u[-1]) > 1e-12:
            edge = hi if p_guess > hi else lo
            row = np.zeros(guess.size)
            row[-1] = 1.0
            fraction = (edge / span_scale - cycle.u[-1]) / (guess[-1] - cycle.u[-1])
            guess = cycle.u + fraction * step * tangent
            new, count, message = tracer.correct(guess, cycle.u, row, edge / span_scale)
        else:
            new, count, message = tracer.correct(guess, cycle.u, tangent, float(tangent @ guess))
        if new is None:
            step *= 0.5
            if step < MIN_STEP:
                _, _, p = tracer.real(cycle.u)
                return _done(index, rows, folds, False,
                             f"the branch was lost after the cycle at {p:.8g}: the corrector did "
                             f"not converge even at the smallest step ({message})", None)
            continue
        new_tangent = _tangent(new.system, tangent)
        x_new, period, p_new = tracer.real(new.u)
        crossing = _closest_to_one(cycle, n) * _closest_to_one(new, n) < 0.0
        if crossing and edge is None and _real_crossing(new, n):
            folds.append(_locate_fold(tracer, cycle, tangent, step, new, new_tangent, index))
        cycle, tangent = new, new_tangent
        row = _row(tracer, cycle, index, index)
        rows.append(row)
        if edge is not None:
            at_edge = True
        if at_edge:
            return _done(index, rows, folds, True, "", None)
        for k, other in enumerate([point, *others]):
            near = abs(p_new - other.param_value) <= 0.5 * step * span_scale + 1e-9 * span_scale
            small = row.amplitude is not None and row.amplitude <= 2.0 * START_RADIUS * tracer.state_scale
            moving_in = float(tangent[:n] @ ((x_new - other.equilibrium) / tracer.scales[:n])) < 0.0
            if len(rows) > 3 and near and small and moving_in:
                end_hopf = None if k == 0 else k - 1
                where = other.param_value
                return _done(index, rows, folds, True, f"shrinks back to the Hopf point at {where:.8g}",
                             end_hopf)
        if row.amplitude is not None and row.amplitude < 1e-6 * tracer.state_scale:
            return _done(index, rows[:-1], folds, False, f"the cycle collapsed onto an equilibrium at "
                         f"{p_new:.8g} away from any Hopf point", None)
        if period > PERIOD_GROWTH * tracer.scales[-2]:
            return _done(index, rows, folds, True,
                         f"its period grows without bound near {p_new:.8g} (the cycle approaches an "
                         "orbit through a saddle, a homoclinic orbit)", None)
        if count <= 4:
            step = min(step * 1.6, max_step)
        elif count >= 7:
            step *= 0.6
    return _done(index, rows, folds, complete, reason, end_hopf)


def _done(index: int, rows: list[BranchPoint], folds: list[Fold], complete: bool, reason: str,
          end_hopf: int | None) -> CycleBranch:
    return CycleBranch(index=index, hopf_index=index, points=tuple(rows), folds=tuple(folds),
                       complete=complete, reason=reason, end_hopf=end_hopf)


def _closest_to_one(cycle: _Cycle, n: int) -> float:
    """ln |m| of the nontrivial multiplier nearest 1: zero at a fold of cycles."""
    values = _multipliers(cycle, n)
    return float(np.log(np.abs(values[int(np.argmin(np.abs(values - 1.0)))])))


def _real_crossing(cycle: _Cycle, n: int) -> bool:
    """The multiplier nearest 1 is real (a fold), not one of a complex pair (a torus)."""
    values = _multipliers(cycle, n)
    near = values[int(np.argmin(np.abs(values - 1.0)))]
    return abs(near.imag) <= 1e-6 * max(abs(near), 1e-300)


def _locate_fold(tracer: _Tracer, cycle: _Cycle, tangent: np.ndarray, step: float, new: _Cycle,
                 after: np.ndarray, index: int) -> Fold:
    """The fold between ``cycle`` and the next accepted point ``new``: where a multiplier is 1
    (the defining condition of a saddle-node of cycles; the tangent's parameter component, also
    zero there, is too flat to resolve it where the branch runs almost parallel to the parameter,
    and is used only when the multiplier does not cross 1 in between): regula falsi (Illinois) on
    the step length along ``tangent``."""
    low, high = 0.0, step
    f_low, f_high = _closest_to_one(cycle, tracer.n), _closest_to_one(new, tracer.n)
    by_multiplier = f_low * f_high < 0.0
    if not by_multiplier:
        f_low, f_high = float(tangent[-1]), float(after[-1])
    best, side = cycle, 0
    for _ in range(FOLD_ITERATIONS):
        mid = (low * f_high - high * f_low) / (f_high - f_low)
        if not low < mid < high:
            mid = 0.5 * (low + high)
        guess = cycle.u + mid * tangent
        found, _, _ = tracer.correct(guess, cycle.u, tangent, float(tangent @ guess))
        if found is None:
            break
        best = found
        value = _closest_to_one(found, tracer.n) if by_multiplier else \
            float(_tangent(found.system, tangent)[-1])
        if value == 0.0:
            break
        if (value > 0.0) == (f_low > 0.0):
            low, f_low = mid, value
            if side == -1:
                f_high *= 0.5
            side = -1
        else:
            high, f_high = mid, value
            if side == 1:
                f_low *= 0.5
            side = 1
        if high - low < 1e-9 * step:
            break
    row = _row(tracer, best, index, index)
    # at a fold the branch turns back in the parameter, so the tangent's parameter component
    # vanishes; where it does not, the branch crosses the parameter value and another family of
    # cycles meets it there (a branch point, or a degenerate Hopf point's family of cycles)
    turning = abs(float(_tangent(best.system, tangent)[-1])) < FOLD_TURNING
    return Fold(branch_index=index, param_value=row.param_value, period=float(row.period),
                amplitude=float(row.amplitude), multipliers=row.multipliers,
                kind="fold" if turning else "branch point")
