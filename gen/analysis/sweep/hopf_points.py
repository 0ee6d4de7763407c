"""Hopf points along one parameter: where the number of eigenvalues with positive real part of a
continued equilibrium changes between two samples, the parameter is bisected (to
``BISECTION_TOLERANCE`` of the sweep's span); a complex pair at the crossing is a Hopf point, its
imaginary part the frequency, its kind from the first Lyapunov coefficient (:mod:`gen.hopf`).
A real eigenvalue crossing zero is noted, not reported as a Hopf point.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from orbitfix.gen.analysis.hopf import LyapunovCoefficient, first_lyapunov_coefficient
from orbitfix.gen.analysis.sweep.continuation import ParameterFamily, point_text, same_point
from orbitfix.gen.model.definition import Model

BISECTION_TOLERANCE = 1e-10    # relative to the sweep's span


@dataclass(frozen=True, eq=False)
class HopfPoint:
    """Where a complex pair of one equilibrium's eigenvalues crosses the imaginary axis.

    param_value : float -- the parameter there (bisected).
    equilibrium : ndarray, shape (n,) -- the equilibrium there.
    eigenvalues : ndarray, shape (n,), complex -- of the Jacobian there.
    frequency : float -- imaginary part of the crossing pair, radians per model time unit.
    lyapunov : LyapunovCoefficient -- the first Lyapunov coefficient and the kind it gives.
    crossing_rate : float -- d(real part of the pair)/d(parameter) at the crossing.
    unstable_side : str -- 'above' or 'below': the side where the equilibrium has the more
        eigenvalues with positive real part.
    """

    param_value: float
    equilibrium: np.ndarray
    eigenvalues: np.ndarray
    frequency: float
    lyapunov: LyapunovCoefficient
    crossing_rate: float
    unstable_side: str

    @property
    def kind(self) -> str:
        return self.lyapunov.kind

    @property
    def cycle_side(self) -> str:
        """The side where the small cycle exists: the unstable side for a supercritical (and,
        followed by the forward flow, a degenerate) point, the stable side for a subcritical one."""
        if self.kind == "subcritical":
            return "below" if self.unstable_side == "above" else "above"
        return self.unstable_side


def locate_hopf(family: ParameterFamily, model: Model, parameter: str, x: np.ndarray, lo: float,
                hi: float, span: float, notes: list[str]) -> HopfPoint | None:
    """The Hopf point of the equilibrium at ``x`` (parameter ``lo``) before ``hi``, if any."""
    y = family.follow(x, lo, hi)
    if y is None:
        return None
    count_lo, count_hi = family.unstable_count(x, lo), family.unstable_count(y, hi)
    if count_lo == count_hi:
        return None
    x_lo, x_hi, first_hi = x, y, count_hi
    while abs(hi - lo) > BISECTION_TOLERANCE * span:
        mid = 0.5 * (lo + hi)
        x_mid = family.root(x_lo, mid)
        if x_mid is None:
            notes.append(f"the equilibrium near {point_text(x_lo)} was lost at {parameter} = "
                         f"{mid:.8g} while locating a change in its stability")
            return None
        if family.unstable_count(x_mid, mid) == count_lo:
            lo, x_lo = mid, x_mid
        else:
            hi, x_hi = mid, x_mid
    value = 0.5 * (lo + hi)
    x_at = family.root(x_lo, value)
    if x_at is None:
        return None
    eigenvalues = family.eigenvalues(x_at, value)
    critical = int(np.argmin(np.abs(eigenvalues.real)))
    scale = float(np.max(np.abs(eigenvalues)))
    frequency = abs(float(eigenvalues[critical].imag))
    if frequency <= 1e-6 * scale:
        notes.append(f"a real eigenvalue crosses zero at {parameter} = {value:.10g} at the "
                     f"equilibrium {point_text(x_at)} (a fold or branch point of equilibria, not a "
                     "Hopf bifurcation)")
        return None
    if abs(first_hi - count_lo) != 2:
        notes.append(f"more than one pair of eigenvalues changes side between {parameter} = "
                     f"{lo:.8g} and {hi:.8g}; the first crossing found is reported")
    at = model.with_parameters({parameter: value})
    try:
        lyapunov = first_lyapunov_coefficient(at, x_at)
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        notes.append(f"the first Lyapunov coefficient at {parameter} = {value:.10g} could not be "
                     f"computed ({exc}); the Hopf point is reported as degenerate")
        lyapunov = LyapunovCoefficient(value=float("nan"), frequency=frequency, scale=0.0,
                                       kind="degenerate")
    step = 1e-6 * span
    rate = _crossing_rate(family, x_at, value, step)
    side = "above" if family.unstable_count(x_hi, hi) > count_lo else "below"
    if hi < lo:
        side = "below" if side == "above" else "above"
    return HopfPoint(param_value=value, equilibrium=x_at, eigenvalues=eigenvalues,
                     frequency=frequency, lyapunov=lyapunov, crossing_rate=rate, unstable_side=side)


def _crossing_rate(family: ParameterFamily, x: np.ndarray, p: float, step: float) -> float:
    """d(real part of the pair nearest the imaginary axis)/dp, by central differences."""
    parts = []
    for q in (p - step, p + step):
        y = family.root(x, q)
        if y is None:
            return float("nan")
        values = family.eigenvalues(y, q)
        parts.append(float(values[int(np.argmin(np.abs(values.real)))].real))
    return (parts[1] - parts[0]) / (2.0 * step)


def same_hopf(a: HopfPoint, b: HopfPoint, span: float) -> bool:
    return (abs(a.param_value - b.param_value) <= 1e-8 * span
            and same_point(a.equilibrium, b.equilibrium))

