"""Stage 2 of the limit-cycle search: Newton shooting on (start point, period).

The variational equations are integrated beside the state (DOP853; for a stiff cycle LSODA, given
the exact Jacobian of the whole variational system), so each Newton step has the monodromy matrix
at hand; a phase condition keeps the start point on a section through the point where the first
state peaks. On angle states the shooting closes x(T) - x(0) = 2 pi k, k the whole turns the
search counted.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from orbitfix.gen.analysis.limit_cycle.flow import Budget, Flow, integrate
from orbitfix.gen.analysis.limit_cycle.search import SEARCH_RTOL
from orbitfix.gen.model.angles import TURN, wrap_angles

SHOOTING_RTOL = 1e-11          # relative tolerance of the shooting integrations (DOP853)
STIFF_SHOOTING_RTOL = 1e-12    # the same for stiff cycles (LSODA)
NEWTON_STEPS = 16


@dataclass
class Shot:
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


def _run_once(flow: Flow, start: np.ndarray, period: float, method: str, budget: Budget,
              size: float, offset: np.ndarray) -> tuple[bool, str, Shot | None]:
    """Integrate state, monodromy and divergence integral once over [0, period]."""
    n = flow.n
    y0 = np.concatenate([start, np.eye(n).ravel(), [0.0]])
    atol = np.concatenate([np.full(n, 1e-13 * size), np.full(n * n, 1e-13), [1e-13]])
    stiff = method == "LSODA"
    ok, message, run = integrate(flow.variational, y0, (0.0, period), budget, n=n, method=method,
                                 rtol=STIFF_SHOOTING_RTOL if stiff else SHOOTING_RTOL, atol=atol,
                                 jac=flow.variational_jacobian if stiff else None, dense=True)
    if not ok:
        return False, message, None
    end = run.y[:, -1]
    return True, "", Shot(start=start, period=period, end=end[:n].copy(),
                           monodromy=end[n:n + n * n].reshape(n, n).copy(),
                           divergence_integral=float(end[-1]), solution=run.sol, offset=offset)


def shoot(flow: Flow, guess: np.ndarray, period: float, size: float, method: str,
          budget: Budget, turns: np.ndarray) -> tuple[bool, str, Shot | None]:
    """Newton's method on (start, period) for x(period) = start + 2 pi k (k: the whole turns of
    each angle state, 0 for the others), the start held on the section through ``guess`` normal
    to the flow there (the phase condition)."""
    n = flow.n
    offset = TURN * np.asarray(turns, dtype=float)
    normal = flow.field(0.0, guess)
    normal = normal / np.linalg.norm(normal)
    start = guess.copy()
    best: tuple[float, Shot] | None = None
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


def peak_start(flow: Flow, start: np.ndarray, period: float, budget: Budget,
               size: float) -> tuple[np.ndarray, float]:
    """The point of one turn where the first state peaks, and the largest spectral radius of the
    Jacobian seen on the way (which decides whether the shooting needs a stiff integrator)."""
    ok, _, run = integrate(flow.field, start, (0.0, period), budget, n=flow.n, method="LSODA",
                           rtol=SEARCH_RTOL, atol=1e-12 * size, jac=flow.jacobian, dense=True)
    if not ok:
        return start, 0.0
    states = run.sol(np.linspace(0.0, period, 2001))
    watched = int(flow.free[0]) if flow.free.size else 0   # an angle's peak is where it wraps
    peak = wrap_angles(states[:, int(np.argmax(states[watched]))], flow.angles)
    radius = max(float(np.max(np.abs(np.linalg.eigvals(flow.jacobian(0.0, states[:, i])))))
                 for i in range(0, states.shape[1], 20))
    return peak, radius


