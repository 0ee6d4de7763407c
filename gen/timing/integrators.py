"""Explicit Runge-Kutta integrators, each given as data: its Butcher tableau.

A new integrator provides:

1. ``name``: the word users type (``--integrator NAME``);
2. ``a``, ``b``, ``c``: its Butcher tableau as exact fractions (``a`` strictly lower triangular);
3. ``order`` and a ``reference`` naming where the tableau is published;
4. ``sweep``: True for a semi-implicit method that updates the states one after another in the
   model's state order, each from the states already updated in this step (the tableau is then
   forward Euler's, applied state by state).

Everything else (the float step map, the integer program) is derived from these.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from fractions import Fraction
from typing import TYPE_CHECKING

from orbitfix.gen.errors import InputError

if TYPE_CHECKING:
    import numpy as np


@dataclass(frozen=True)
class Integrator:
    """One explicit Runge-Kutta method."""

    name: str
    a: tuple[tuple[Fraction, ...], ...]
    b: tuple[Fraction, ...]
    c: tuple[Fraction, ...]
    order: int
    description: str
    reference: str
    sweep: bool = False

    @property
    def stages(self) -> int:
        return len(self.b)

    def step(self, f: Callable[[np.ndarray], np.ndarray], x: np.ndarray, h: float) -> np.ndarray:
        """One float64 step of the autonomous system x' = f(x) (layer L1)."""
        import numpy as np  # here, not at the top: the command line lists integrators without numpy

        if self.sweep:
            x = np.array(x, dtype=float, copy=True)
            for i in range(x.shape[0]):
                x[i] = x[i] + h * f(x)[i]
            return x
        slopes: list[np.ndarray] = []
        for row in self.a:
            point = x + h * sum((float(w) * k for w, k in zip(row, slopes, strict=False) if w),
                                np.zeros_like(x))
            slopes.append(f(point))
        return x + h * sum((float(w) * k for w, k in zip(self.b, slopes, strict=True) if w),
                           np.zeros_like(x))


F = Fraction

EULER = Integrator(
    name="euler",
    a=((),),
    b=(F(1),),
    c=(F(0),),
    order=1,
    description="forward Euler: one slope per step, cheapest, first order",
    reference="Hairer, Norsett, Wanner, Solving Ordinary Differential Equations I, section II.1",
)

RK4 = Integrator(
    name="rk4",
    a=((), (F(1, 2),), (F(0), F(1, 2)), (F(0), F(0), F(1))),
    b=(F(1, 6), F(1, 3), F(1, 3), F(1, 6)),
    c=(F(0), F(1, 2), F(1, 2), F(1)),
    order=4,
    description="classical fourth-order Runge-Kutta: four slopes per step",
    reference="Hairer, Norsett, Wanner, Solving Ordinary Differential Equations I, "
              "section II.1, Table 1.2 (Kutta 1901)",
)

HEUN = Integrator(
    name="heun",
    a=((), (F(1),)),
    b=(F(1, 2), F(1, 2)),
    c=(F(0), F(1)),
    order=2,
    description="Heun's method: an Euler step, then the average of both slopes; second order",
    reference="Hairer, Norsett, Wanner, Solving Ordinary Differential Equations I, section II.1 "
              "(Heun 1900)",
)

SYMPLECTIC_EULER = Integrator(
    name="symplectic-euler",
    a=((),),
    b=(F(1),),
    c=(F(0),),
    order=1,
    description="semi-implicit (symplectic) Euler: states updated in order, each from the ones "
                "already updated; keeps a rotation's area, so amplitude does not creep",
    reference="Hairer, Lubich, Wanner, Geometric Numerical Integration, section I.1.2",
    sweep=True,
)

INTEGRATORS = {i.name: i for i in (EULER, SYMPLECTIC_EULER, HEUN, RK4)}


def get_integrator(name: str) -> Integrator:
    """The integrator called ``name``; an unknown name is an input error listing the choices."""
    try:
        return INTEGRATORS[name]
    except KeyError:
        raise InputError(f"unknown integrator '{name}' (choose one of: "
                         f"{', '.join(INTEGRATORS)})") from None
