"""The model's flow for the cycle search: its vector field and derivatives forward or backward in
time, and integration under one budget of wall-clock time and vector-field evaluations.

Every integration of one limit-cycle search (following the flow, shooting) shares a :class:`Budget`,
so a model whose motion never repeats ends in a plain verdict instead of running on; a failed
integration is a message, never an exception in the middle of the search.
"""

from __future__ import annotations

import time

import numpy as np
import sympy
from scipy.integrate import solve_ivp

from orbitfix.gen.analysis.equilibria import format_state
from orbitfix.gen.model.compiled import point_function
from orbitfix.gen.model.definition import Model

# -- the vector field, forward or backward -------------------------------------------------------


class Flow:
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
        self._field = point_function(states, rates)
        self._jacobian = point_function(states, list(jacobian))
        self._symbolic = (states, rates, jacobian)
        self._variational_jacobian = None

    @property
    def backward(self) -> bool:
        return self.sign < 0

    def field(self, t: float, x: np.ndarray) -> np.ndarray:
        return self._field(x)

    def jacobian(self, t: float, x: np.ndarray) -> np.ndarray:
        return self._jacobian(x).reshape(self.n, self.n)

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
            self._variational_jacobian = point_function(self._variables, terms)
        size = y.size
        full = np.zeros((size, size))
        full[:, :-1] = self._variational_jacobian(y[:-1]).reshape(size, size - 1)
        return full


# -- budget and integration ----------------------------------------------------------------------


class OutOfBudgetError(Exception):
    """The search used up its wall-clock or evaluation budget."""


class RunAwayError(Exception):
    """The state's size passed the runaway limit at time ``t``."""

    def __init__(self, t: float) -> None:
        super().__init__(t)
        self.t = t


class StalledError(Exception):
    """The integrator stopped making progress in time (a singular or impossibly stiff field)."""

    def __init__(self, t: float, y: np.ndarray) -> None:
        super().__init__(t)
        self.t = t
        self.y = np.array(y)


class Budget:
    """Wall-clock and evaluation limits shared by every integration of one search."""

    STALL_CHECK = 4096   # evaluations between checks that time is still moving

    def __init__(self, seconds: float, evaluations: int) -> None:
        self.seconds = seconds
        self.evaluations = evaluations
        self.deadline = time.monotonic() + seconds
        self.left = evaluations

    def check_clock(self) -> None:
        """Raise OutOfBudgetError once the wall-clock budget is spent (for work between
        vector-field evaluations, which :meth:`guard` does not see)."""
        if time.monotonic() > self.deadline:
            raise OutOfBudgetError(f"{self.seconds:g} s of computing")

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
                raise OutOfBudgetError(f"{self.evaluations} evaluations of the vector field")
            if self.left % self.STALL_CHECK == 0:
                if time.monotonic() > self.deadline:
                    raise OutOfBudgetError(f"{self.seconds:g} s of computing")
                if mark[0] is not None and abs(t - mark[0]) <= 1e-9 * span:
                    raise StalledError(t, y[:n])
                mark[0] = t
            if limit is not None and float(y[chosen] @ y[chosen]) > limit * limit:
                raise RunAwayError(t)
            return fun(t, y)

        return guarded


def integrate(fun, y0: np.ndarray, t_span: tuple[float, float], budget: Budget, *, n: int,
              method: str, rtol: float, atol: float | np.ndarray, jac=None, dense: bool = False,
              limit: float | None = None, free: np.ndarray | None = None):
    """solve_ivp under the budget. Returns (success, message, result): a failed integration is a
    message, not an exception. Raises RunAwayError when the state's size passes ``limit``."""
    options = {"jac": jac} if jac is not None else {}
    guarded = budget.guard(fun, n, abs(t_span[1] - t_span[0]), limit, free)
    try:
        result = solve_ivp(guarded, t_span, y0, method=method, rtol=rtol, atol=atol,
                           dense_output=dense, **options)
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        return False, f"the integrator stopped ({exc})", None
    except StalledError as exc:
        return False, (f"the integrator stalled at t = {exc.t:.6g} near {format_state(exc.y)}: "
                       "the vector field is singular or too stiff there"), None
    if result.status == -1:
        return False, f"the integrator gave up at t = {result.t[-1]:.6g} ({result.message})", None
    if not np.all(np.isfinite(result.y[:, -1])):
        return False, f"the state became infinite or undefined near t = {result.t[-1]:.6g}", None
    return True, "", result

