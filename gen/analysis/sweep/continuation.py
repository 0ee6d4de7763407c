"""Equilibria followed along one parameter: the family of vector fields f(x; p) with the swept
parameter left free, compiled once, and natural continuation of each equilibrium through the
sampled values (each root seeded by its neighbour's).
"""

from __future__ import annotations

import warnings

import numpy as np
import sympy
from scipy.optimize import root

from orbitfix.gen.analysis.equilibria import Equilibrium, classify
from orbitfix.gen.model.compiled import scalar_function
from orbitfix.gen.model.definition import Model

SAME_POINT = 1e-6              # relative distance under which two equilibria are one
COUNT_TOLERANCE = 1e-14        # a real part above this fraction of the spectral radius is positive


class ParameterFamily:
    """f(x; p) and its Jacobian with the swept parameter p left free, compiled once."""

    def __init__(self, model: Model, parameter: str) -> None:
        fixed = {symbol: sympy.Float(p.value) for symbol, p in zip(model.parameter_symbols,
                                                                   model.parameters, strict=True)
                 if p.name != parameter}
        swept = sympy.Symbol(parameter, real=True)
        states = list(model.state_symbols)
        rates = [eq.xreplace(fixed) for eq in model.equations]
        jacobian = sympy.Matrix(rates).jacobian(sympy.Matrix(states))
        self.n = len(states)
        self._field = scalar_function([*states, swept], rates)
        self._jacobian = scalar_function([*states, swept], list(jacobian))

    def field(self, x: np.ndarray, p: float) -> np.ndarray:
        return np.array(self._field(*x.tolist(), p), dtype=float)

    def jacobian(self, x: np.ndarray, p: float) -> np.ndarray:
        return np.array(self._jacobian(*x.tolist(), p), dtype=float).reshape(self.n, self.n)

    def eigenvalues(self, x: np.ndarray, p: float) -> np.ndarray:
        return np.linalg.eigvals(self.jacobian(x, p)).astype(complex)

    def equilibrium(self, x: np.ndarray, p: float) -> Equilibrium:
        values = self.eigenvalues(x, p)
        values = np.array(sorted(values, key=lambda v: (-v.real, -v.imag)), dtype=complex)
        return Equilibrium(state=np.array(x, dtype=float), eigenvalues=values, kind=classify(values))

    def root(self, seed: np.ndarray, p: float) -> np.ndarray | None:
        """A root of f(.; p) from ``seed`` (scipy's hybrid method, analytic Jacobian), or None."""
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            try:
                result = root(lambda x: self.field(x, p), seed, jac=lambda x: self.jacobian(x, p),
                              method="hybr", options={"xtol": 1e-13})
                x = np.asarray(result.x, dtype=float)
                if not np.all(np.isfinite(x)):
                    return None
                size = max(1.0, float(np.max(np.abs(x))))
                rate = max(1.0, float(np.max(np.abs(self.jacobian(x, p)))))
                left = np.abs(self.field(x, p))
            except (ValueError, ArithmeticError, OverflowError, np.linalg.LinAlgError):
                return None
        if not np.all(np.isfinite(left)) or float(np.max(left)) > 1e-9 * size * rate:
            return None
        return x

    def follow(self, x: np.ndarray, p_from: float, p_to: float, steps: int = 2) -> np.ndarray | None:
        """The equilibrium at ``x`` (parameter ``p_from``) continued to ``p_to`` in small steps,
        each seeded by the last, or None when it is lost (a fold, where it meets another)."""
        for p in np.linspace(p_from, p_to, steps + 1)[1:]:
            x = self.root(x, float(p))
            if x is None:
                return None
        return x

    def unstable_count(self, x: np.ndarray, p: float) -> int:
        values = self.eigenvalues(x, p)
        scale = float(np.max(np.abs(values))) if values.size else 0.0
        return int(np.sum(values.real > COUNT_TOLERANCE * scale))


def same_point(a: np.ndarray, b: np.ndarray) -> bool:
    size = max(1.0, float(np.max(np.abs(a))), float(np.max(np.abs(b))))
    return float(np.max(np.abs(a - b))) <= SAME_POINT * size


def continue_across(family: ParameterFamily, values: np.ndarray,
                    states: list[list[np.ndarray]]) -> list[list[np.ndarray]]:
    """Add to each sample the equilibria continued from its neighbours (forward, then backward),
    so an equilibrium the seeds missed at one sample is still tracked there."""
    states = [list(found) for found in states]
    order = list(range(1, len(values))), list(range(len(values) - 2, -1, -1))
    for indices, step in zip(order, (-1, 1), strict=True):
        for k in indices:
            for x in states[k + step]:
                y = family.follow(x, float(values[k + step]), float(values[k]))
                if y is not None and not any(same_point(y, other) for other in states[k]):
                    states[k].append(y)
    for found in states:
        found.sort(key=lambda x: tuple(float(f"{v:.9g}") for v in x))
    return states


def point_text(x: np.ndarray) -> str:
    """A state as '(1.5, -0.25)', six significant figures."""
    return "(" + ", ".join(f"{v:.6g}" for v in np.asarray(x, dtype=float)) + ")"

