"""The branch of cycles born at a Hopf point: natural continuation into the side where the cycle
exists, one :func:`gen.limit_cycle.find_limit_cycle` per sampled parameter value, each started from
the last cycle's point (the first from the small cycle the Hopf normal form predicts).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace

import numpy as np

from orbitfix.gen.analysis.limit_cycle import find_limit_cycle
from orbitfix.gen.analysis.sweep.continuation import ParameterFamily
from orbitfix.gen.analysis.sweep.hopf_points import HopfPoint
from orbitfix.gen.model.definition import Model

CYCLE_SECONDS = 10.0           # wall-clock budget of one cycle search on the branch, s


@dataclass(frozen=True)
class BranchPoint:
    """The cycle followed from Hopf point ``hopf_index`` at one parameter value.

    amplitude : half the peak-to-peak range of the first state over the cycle.
    max_multiplier : the largest nontrivial Floquet multiplier modulus (below 1: stable).
    """

    hopf_index: int
    param_value: float
    found: bool
    verdict: str
    period: float | None = None
    amplitude: float | None = None
    max_multiplier: float | None = None
    stable: bool = False


def follow_branch(model: Model, parameter: str, index: int, point: HopfPoint, values: list[float],
                  deadline: float) -> tuple[list[BranchPoint], str, bool]:
    """Follow the cycle born at ``point`` through ``values`` (ordered away from the Hopf point).

    Returns the branch points, a note (empty when nothing needs saying) and whether the budget
    allowed the whole branch.
    """
    family = ParameterFamily(model, parameter)
    reverse = point.kind == "subcritical"    # an unstable cycle attracts when time runs backward
    points: list[BranchPoint] = []
    start: np.ndarray | None = None
    x_eq, p_eq = point.equilibrium, point.param_value
    where = f"the cycle from the Hopf point at {parameter} = {point.param_value:.8g}"
    for value in values:
        left = deadline - time.monotonic()
        if left <= 0.0:
            return points, f"{where} was followed only to {parameter} = {p_eq:.8g}: the sweep's " \
                           "time budget ran out", False
        y = family.follow(x_eq, p_eq, value, steps=4)
        if y is not None:
            x_eq, p_eq = y, value
        if start is None:
            try:
                start = _first_guess(family, point, x_eq, value)
            except (ValueError, ArithmeticError, np.linalg.LinAlgError):
                start = x_eq + 1e-3 * max(1.0, float(np.max(np.abs(x_eq))))
        at = model.with_parameters({parameter: value})
        at = replace(at, states=tuple(replace(s, initial=float(v))
                                      for s, v in zip(at.states, start, strict=True)))
        cycle = find_limit_cycle(at, reverse_time=reverse, seconds=min(CYCLE_SECONDS, left))
        if not cycle.found:
            points.append(BranchPoint(hopf_index=index, param_value=value, found=False,
                                      verdict=cycle.verdict))
            return points, f"{where} was lost at {parameter} = {value:.8g}: {cycle.verdict}", True
        amplitude = 0.5 * float(cycle.state_max[0] - cycle.state_min[0])
        points.append(BranchPoint(hopf_index=index, param_value=value, found=True,
                                  verdict=cycle.verdict, period=float(cycle.period),
                                  amplitude=amplitude, max_multiplier=cycle.stability_margin,
                                  stable=bool(cycle.stable)))
        start = np.array(cycle.point)
    return points, "", True


def _first_guess(family: ParameterFamily, point: HopfPoint, x_eq: np.ndarray, value: float) -> np.ndarray:
    """A point on the small cycle the Hopf normal form predicts at ``value``: with q the unit
    eigenvector of the pair (real part beta) and l1 the first Lyapunov coefficient, the cycle is
    x_eq + 2 Re(q z) with |z|^2 = -beta / (w l1) (Kuznetsov, sec. 3.5 and 5.4). Where the
    prediction is unusable (a degenerate point) the start is a small nudge along Re q."""
    values, vectors = np.linalg.eig(family.jacobian(x_eq, value))
    upper = [i for i in range(values.size) if values[i].imag > 0.0]
    if not upper:
        return x_eq + 1e-3 * max(1.0, float(np.max(np.abs(x_eq))))
    i = min(upper, key=lambda k: abs(values[k].imag - point.frequency))
    q = vectors[:, i] / np.linalg.norm(vectors[:, i])
    beta, l1 = float(values[i].real), point.lyapunov.value
    radius2 = -beta / (point.frequency * l1) if point.kind != "degenerate" else float("nan")
    if not (math.isfinite(radius2) and radius2 > 0.0):
        radius2 = (1e-3 * max(1.0, float(np.max(np.abs(x_eq))))) ** 2
    return x_eq + 2.0 * math.sqrt(radius2) * q.real

