"""Equilibria of the continuous model and the kind of each, read from the Jacobian's eigenvalues.

A rhythm generator usually has one equilibrium inside its cycle (an unstable focus or node that
pushes states out onto the cycle); the kinds tell the user whether the model can oscillate at all
and what happens to states that start near each rest point.

Angle states (phases, modulo 2 pi) are reported wrapped into [0, 2 pi), and two roots a whole
number of turns apart are one equilibrium. A phase oscillator whose phase rate is a nonzero
constant (theta' = 2 pi nu) has no equilibrium at all; :func:`never_at_rest` says so exactly.
"""

from __future__ import annotations

import itertools
import math
import warnings
from dataclasses import dataclass

import numpy as np
import sympy
from scipy.optimize import root
from scipy.stats import qmc

from orbitfix.gen.model.angles import TURN, wrap_angles, wrap_difference
from orbitfix.gen.model.compiled import point_function
from orbitfix.gen.model.definition import Model

KINDS = ("stable node", "unstable node", "stable focus", "unstable focus", "saddle", "center",
         "degenerate")

KIND_MEANINGS = {
    "stable node": "nearby states settle straight in, without turning",
    "unstable node": "nearby states move straight away, without turning",
    "stable focus": "nearby states spiral in",
    "unstable focus": "nearby states spiral out",
    "saddle": "nearby states are drawn in along some directions and pushed out along others",
    "center": "to first order nearby states circle at a fixed distance, neither drawn in nor "
              "pushed out",
    "degenerate": "non-hyperbolic (a zero eigenvalue, or some on the imaginary axis and some off "
                  "it), so the linearisation cannot decide; the nonlinear terms do",
}

EIGENVALUE_TOLERANCE = 1e-9   # relative to the largest eigenvalue modulus
SAME_POINT_TOLERANCE = 1e-6   # relative distance under which two roots are one equilibrium
GRID_POINTS_PER_AXIS = {1: 41, 2: 9, 3: 5}
SCATTERED_SEEDS = 256         # seeds for four or more states


@dataclass(frozen=True, eq=False)
class Equilibrium:
    """A point where the vector field vanishes, with its linearisation.

    state : ndarray, shape (n,) -- the equilibrium, model units.
    eigenvalues : ndarray, shape (n,), complex -- of the Jacobian there, per model time unit,
        sorted by real part (largest first), then imaginary part (largest first).
    kind : str -- one of :data:`KINDS`.
    """

    state: np.ndarray
    eigenvalues: np.ndarray
    kind: str

    @property
    def stable(self) -> bool:
        """True when every nearby state is drawn in (a stable node or stable focus)."""
        return self.kind in ("stable node", "stable focus")

    def label(self) -> str:
        """Kind and place, e.g. 'stable focus (0, 0)' or 'degenerate equilibrium (1, 0)'."""
        noun = " equilibrium" if self.kind == "degenerate" else ""
        return f"{self.kind}{noun} {format_state(self.state)}"

    def describe(self) -> str:
        """One line for reports, e.g. 'stable focus at (0, 0): nearby states spiral in'."""
        return f"{self.kind} at {format_state(self.state)}: {KIND_MEANINGS[self.kind]}"


def classify(eigenvalues: np.ndarray, tolerance: float = EIGENVALUE_TOLERANCE) -> str:
    """Name the kind of an equilibrium from its Jacobian eigenvalues.

    ``tolerance`` is relative to the largest eigenvalue modulus: a real or imaginary part below it
    counts as zero. Returns one of :data:`KINDS`.
    """
    values = np.atleast_1d(np.asarray(eigenvalues, dtype=complex))
    scale = float(np.max(np.abs(values))) if values.size else 0.0
    if scale == 0.0 or not np.all(np.isfinite(values)):
        return "degenerate"
    small = tolerance * scale
    if np.any(np.abs(values) <= small):
        return "degenerate"
    real = values.real
    growing, shrinking = real > small, real < -small
    if growing.any() and shrinking.any():
        return "saddle"
    if not growing.any() and not shrinking.any():
        return "center"
    if not np.all(growing | shrinking):
        return "degenerate"   # some eigenvalues on the imaginary axis, the rest one side of it
    turning = bool(np.any(np.abs(values.imag) > small))
    side = "stable" if shrinking.all() else "unstable"
    return f"{side} {'focus' if turning else 'node'}"


def describe_kind(kind: str) -> str:
    """A one-line plain-English meaning, e.g. 'stable focus: nearby states spiral in'."""
    return f"{kind}: {KIND_MEANINGS[kind]}"


def never_at_rest(model: Model) -> str | None:
    """Why the model has no equilibrium, when some state's rate is a nonzero constant (exact:
    that state never stops moving), e.g. "the rate of theta is the constant 6.28319"; else None."""
    for state, rate in zip(model.states, model.resolved_equations, strict=True):
        if rate.is_number and rate.is_real and float(rate) != 0.0:
            return f"the rate of {state.name} is the constant {float(rate):.6g}, never zero"
    return None


def find_equilibria(model: Model) -> list[Equilibrium]:
    """All equilibria that root finding reaches from a spread of starting points.

    Seeds fill a box centred on the origin reaching, on each axis, max(3, 3 |initial value|).
    Equilibria outside the seeds' reach can be missed; those found are each listed once, in a
    fixed order (by state, lexicographically).
    """
    return EquilibriumFinder(model).all()


def equilibrium_near(model: Model, guess: np.ndarray) -> Equilibrium | None:
    """The equilibrium root finding reaches from ``guess`` (ndarray, shape (n,)), or None."""
    return EquilibriumFinder(model).near(guess)


class EquilibriumFinder:
    """Root finding and linearisation for one model, with its numeric functions compiled once."""

    def __init__(self, model: Model) -> None:
        self.model = model
        self.angles = model.angle_mask
        self.moving = never_at_rest(model) is not None
        # scalar code with shared subexpressions: root finding calls these for one point at a
        # time, where numpy's per-call overhead would dominate (a 16-state network has 256
        # Jacobian entries)
        n = model.dimension
        states = list(model.state_symbols)
        rates = list(model.resolved_equations)
        field = point_function(states, rates)
        jacobian = point_function(states, list(sympy.Matrix(rates).jacobian(sympy.Matrix(states))))
        self.field = lambda t, x: field(x)
        self.jacobian = lambda x: jacobian(x).reshape(n, n)

    def all(self) -> list[Equilibrium]:
        """Every equilibrium reached from the seeds, each once, in a fixed order."""
        found: list[np.ndarray] = []
        if self.moving:
            return []
        for seed in _seeds(self.model.initial_state):
            point = self.root_from(seed)
            if point is not None and not any(_same_point(point, other, self.angles)
                                             for other in found):
                found.append(point)
        found.sort(key=_order_key)
        return [self.at(point) for point in found]

    def near(self, guess: np.ndarray) -> Equilibrium | None:
        """The equilibrium reached from ``guess`` (ndarray, shape (n,)), or None."""
        if self.moving:
            return None
        point = self.root_from(np.asarray(guess, dtype=float))
        return None if point is None else self.at(point)

    def at(self, state: np.ndarray) -> Equilibrium:
        """The linearisation at a known equilibrium ``state`` (ndarray, shape (n,))."""
        point = np.array(state, dtype=float)
        values = _tidy_eigenvalues(np.linalg.eigvals(self.jacobian(point)).astype(complex))
        point.setflags(write=False)
        values.setflags(write=False)
        return Equilibrium(state=point, eigenvalues=values, kind=classify(values))

    def root_from(self, seed: np.ndarray) -> np.ndarray | None:
        """A root of the vector field from ``seed`` (scipy's hybrid Newton method with the
        analytic Jacobian), or None when it does not converge to a true root."""
        field, jacobian = self.field, self.jacobian

        def residual(x: np.ndarray) -> np.ndarray:
            return field(0.0, x)

        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            try:
                result = root(residual, seed, jac=jacobian, method="hybr", options={"xtol": 1e-13})
                point = np.asarray(result.x, dtype=float)
                if not np.all(np.isfinite(point)):
                    return None
                point = wrap_angles(point, self.angles)   # judged where it is on the circle
                free = point[~self.angles]
                size = max(1.0, float(np.max(np.abs(free))) if free.size else 1.0)
                rate = max(1.0, float(np.max(np.abs(jacobian(point)))))
                left = np.abs(field(0.0, point))
            except (ValueError, ArithmeticError, np.linalg.LinAlgError):
                return None
        if not np.all(np.isfinite(left)) or float(np.max(left)) > 1e-9 * size * rate:
            return None
        point[np.abs(point) < 1e-12 * size] = 0.0   # report the origin as 0, not 1e-17 or -0
        point[self.angles & (np.abs(point - TURN) < 1e-12)] = 0.0
        return point


def format_state(state: np.ndarray) -> str:
    """A state as '(1.5, -0.25)', with six significant figures and no '-0'."""
    parts = []
    for value in np.asarray(state, dtype=float):
        text = f"{value:.6g}"
        parts.append("0" if text in ("-0", "0") else text)
    return "(" + ", ".join(parts) + ")"


def _seeds(initial: np.ndarray) -> np.ndarray:
    """Starting points: the initial state, the origin, then a grid (or a Halton set) in the box."""
    n = initial.size
    reach = np.maximum(3.0, 3.0 * np.abs(initial))
    if n in GRID_POINTS_PER_AXIS:
        ticks = np.linspace(-1.0, 1.0, GRID_POINTS_PER_AXIS[n])
        unit = np.array(list(itertools.product(ticks, repeat=n)))
    else:
        unit = 2.0 * qmc.Halton(d=n, scramble=False).random(SCATTERED_SEEDS) - 1.0
    return np.vstack([initial, np.zeros(n), unit * reach])


def _same_point(a: np.ndarray, b: np.ndarray, angles: np.ndarray | None = None) -> bool:
    size = max(1.0, float(np.max(np.abs(a))), float(np.max(np.abs(b))))
    difference = a - b if angles is None else wrap_difference(a - b, angles)
    return float(np.max(np.abs(difference))) <= SAME_POINT_TOLERANCE * size


def _order_key(point: np.ndarray) -> tuple[float, ...]:
    return tuple(float(f"{v:.9g}") for v in point)


def _tidy_eigenvalues(values: np.ndarray) -> np.ndarray:
    """Zero the rounding noise in real and imaginary parts, then sort deterministically."""
    scale = float(np.max(np.abs(values))) if values.size else 0.0
    noise = 1e-13 * scale
    real = np.where(np.abs(values.real) <= noise, 0.0, values.real)
    imag = np.where(np.abs(values.imag) <= noise, 0.0, values.imag)
    tidy = real + 1j * imag

    def key(v: complex) -> tuple[float, float]:
        digits = 12
        return (-_round_relative(v.real, scale, digits), -_round_relative(v.imag, scale, digits))

    return np.array(sorted(tidy, key=key), dtype=complex)


def _round_relative(value: float, scale: float, digits: int) -> float:
    if scale == 0.0 or not math.isfinite(value):
        return value
    quantum = scale * 10.0 ** (-digits)
    return round(value / quantum) * quantum
