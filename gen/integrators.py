"""Explicit Runge-Kutta integrators, each given as data: its Butcher tableau.

A new integrator provides:

1. ``name``: the word users type (``--integrator NAME``);
2. ``a``, ``b``, ``c``: its Butcher tableau as exact fractions (``a`` strictly lower triangular);
3. ``order`` and a ``reference`` naming where the tableau is published.

Everything else (the float step map, the integer program) is derived from the tableau.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from gen.errors import InputError


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

    @property
    def stages(self) -> int:
        return len(self.b)

    def step(self, f: Callable[[np.ndarray], np.ndarray], x: np.ndarray, h: float) -> np.ndarray:
        """One float64 step of the autonomous system x' = f(x) (layer L1)."""
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

INTEGRATORS = {i.name: i for i in (EULER, RK4)}


def get_integrator(name: str) -> Integrator:
    """The integrator called ``name``; an unknown name is an input error listing the choices."""
    try:
        return INTEGRATORS[name]
    except KeyError:
        raise InputError(f"unknown integrator '{name}' (choose one of: "
                         f"{', '.join(INTEGRATORS)})") from None
