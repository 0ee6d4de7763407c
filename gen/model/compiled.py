"""Sympy expressions compiled to numeric Python functions: the one place equations become code.

Two shapes of caller need two kinds of code, and both are made here:

- scalar code (Python's ``math``, common subexpressions shared) for the solvers and root finders
  that call a vector field or Jacobian tens of thousands of times at one point each, where numpy's
  per-call overhead would dominate: :func:`scalar_function` and :func:`point_function`;
- numpy code over a stack of states at once (a grid of starts, a batch of samples), constants
  broadcast to the batch's shape: :func:`array_function`.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np
import sympy


def scalar_function(variables: Sequence[sympy.Symbol],
                    expressions: Sequence[sympy.Expr]) -> Callable[..., list[float]]:
    """f(*floats) -> list of floats, one per expression (scalar ``math`` code, shared
    subexpressions computed once)."""
    return sympy.lambdify(list(variables), list(expressions), modules="math", cse=True)


def point_function(variables: Sequence[sympy.Symbol],
                   expressions: Sequence[sympy.Expr]) -> Callable[[np.ndarray], np.ndarray]:
    """f(x) for one point x (ndarray, shape (n,)) -> ndarray, shape (m,), float, through
    :func:`scalar_function`."""
    f = scalar_function(variables, expressions)
    return lambda x: np.array(f(*np.asarray(x, dtype=float).tolist()), dtype=float)


def array_function(variables: Sequence[sympy.Symbol],
                   expressions: Sequence[sympy.Expr]) -> Callable[[np.ndarray], np.ndarray]:
    """f(x) for stacked states x (ndarray, shape (n,) or (n, k...)) -> ndarray, shape (m,) or
    (m, k...), float: numpy code, a constant expression broadcast to the batch's shape."""
    f = sympy.lambdify([list(variables)], list(expressions), modules="numpy")

    def evaluate(x: np.ndarray) -> np.ndarray:
        x = np.asarray(x, dtype=float)
        return np.array([np.broadcast_to(v, x.shape[1:]) for v in f(x)], dtype=float)

    return evaluate
