"""The first Lyapunov coefficient at a Hopf point: whether the cycle born there is stable.

At a Hopf bifurcation a complex pair of the Jacobian's eigenvalues crosses the imaginary axis and a
small cycle is born. The sign of the first Lyapunov coefficient l1 decides its fate: l1 < 0
(supercritical) gives a small stable cycle on the side where the equilibrium is unstable, the
gentle start a rhythm generator wants; l1 > 0 (subcritical) gives an unstable cycle on the stable
side, so the rhythm jumps in at a large amplitude and stops with hysteresis.

Method: Kuznetsov, "Elements of Applied Bifurcation Theory" (3rd ed., 2004), section 5.4. With
A the Jacobian at the equilibrium, A q = i w q, A^T p = -i w p, <q, q> = 1, <p, q> = 1 (the
product <u, v> conjugates its first argument) and B, C the second and third derivatives of the
vector field as multilinear forms,

    l1 = Re(<p, C(q, q, conj q)> - 2 <p, B(q, A^-1 B(q, conj q))>
            + <p, B(conj q, (2 i w I - A)^-1 B(q, q))>) / (2 w).

B and C come from the model's own symbolic equations, differentiated exactly.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import sympy

from orbitfix.gen.model.compiled import array_function
from orbitfix.gen.model.definition import Model

DEGENERATE_TOLERANCE = 1e-9   # |l1| below this fraction of the sizes of its terms counts as zero
# l1 r^2 is dimensionless (the cubic term of r' = beta r + l1 w r^3 against w at amplitude r); below
# this at r = max(1, the equilibrium's size), l1 is zero to the accuracy a located Hopf point has
NEGLIGIBLE = 1e-7


@dataclass(frozen=True)
class LyapunovCoefficient:
    """The first Lyapunov coefficient at one equilibrium with a pair of eigenvalues +-i w.

    value : float -- l1, per (model time unit x squared state unit), in Kuznetsov's normalisation.
    frequency : float -- w, radians per model time unit (the imaginary part of the pair).
    scale : float -- the sum of the sizes of the three terms of l1; ``value`` is meaningful only
        against it (the terms can cancel).
    kind : str -- 'supercritical' (l1 < 0), 'subcritical' (l1 > 0) or 'degenerate' (l1 is zero
        to rounding, or negligible: |l1| r^2 <= NEGLIGIBLE at r = max(1, |state|), so
        higher-order terms decide and this analysis cannot).
    """

    value: float
    frequency: float
    scale: float
    kind: str


def first_lyapunov_coefficient(model: Model, state: np.ndarray) -> LyapunovCoefficient:
    """l1 of ``model`` (parameters as set) at the equilibrium ``state`` (ndarray, shape (n,)).

    The Jacobian there must have a pair of eigenvalues on (or, after a numerical search, next to)
    the imaginary axis; the pair with the smallest real part in size is used, and its real part is
    ignored.
    """
    x0 = np.asarray(state, dtype=float)
    derivatives = _Derivatives(model)
    a, hessian, third = derivatives.at(x0)
    values, vectors = np.linalg.eig(a)
    upper = [i for i in range(values.size) if values[i].imag > 0.0]
    if not upper:
        raise ValueError("the Jacobian has no complex pair of eigenvalues here: no Hopf point")
    i = min(upper, key=lambda k: abs(values[k].real))
    omega = float(values[i].imag)
    q = vectors[:, i] / np.linalg.norm(vectors[:, i])
    left_values, left_vectors = np.linalg.eig(a.T)
    j = int(np.argmin(np.abs(left_values - np.conj(values[i]))))
    p = left_vectors[:, j]
    p = p / np.conj(np.vdot(p, q))          # now <p, q> = vdot(p, q) = 1

    def b(u: np.ndarray, v: np.ndarray) -> np.ndarray:
        return np.einsum("ijk,j,k->i", hessian, u, v)

    def c(u: np.ndarray, v: np.ndarray, w: np.ndarray) -> np.ndarray:
        return np.einsum("ijkl,j,k,l->i", third, u, v, w)

    qbar = np.conj(q)
    n = x0.size
    cubic = np.vdot(p, c(q, q, qbar))
    mean_shift = -2.0 * np.vdot(p, b(q, np.linalg.solve(a.astype(complex), b(q, qbar))))
    second_harmonic = np.vdot(p, b(qbar, np.linalg.solve(2j * omega * np.eye(n) - a, b(q, q))))
    value = float((cubic + mean_shift + second_harmonic).real / (2.0 * omega))
    scale = float((abs(cubic) + abs(mean_shift) + abs(second_harmonic)) / (2.0 * omega))
    if not (math.isfinite(value) and math.isfinite(scale)):
        raise ValueError("the first Lyapunov coefficient is not finite here")
    size = max(1.0, float(np.max(np.abs(x0))))
    if (scale == 0.0 or abs(value) <= DEGENERATE_TOLERANCE * scale
            or abs(value) * size**2 <= NEGLIGIBLE):
        kind = "degenerate"
    else:
        kind = "supercritical" if value < 0.0 else "subcritical"
    return LyapunovCoefficient(value=value, frequency=omega, scale=scale, kind=kind)


class _Derivatives:
    """First, second and third derivatives of the model's resolved equations, compiled once."""

    def __init__(self, model: Model) -> None:
        x = list(model.state_symbols)
        n = len(x)
        f = list(model.resolved_equations)
        first = [[sympy.diff(fi, xj) for xj in x] for fi in f]
        second = [[[sympy.diff(first[i][j], x[k]) for k in range(n)] for j in range(n)]
                  for i in range(n)]
        third = [sympy.diff(second[i][j][k], x[m]) for i in range(n) for j in range(n)
                 for k in range(n) for m in range(n)]
        terms = ([e for row in first for e in row]
                 + [e for plane in second for row in plane for e in row] + third)
        # min, max, abs and clip have kinks: away from a kink their higher derivatives are zero
        terms = [sympy.sympify(t).replace(lambda e: isinstance(e, sympy.DiracDelta),
                                          lambda e: sympy.S.Zero) for t in terms]
        self.n = n
        self._compiled = array_function(x, terms)

    def at(self, x0: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(Jacobian (n, n), second derivatives (n, n, n), third derivatives (n, n, n, n))."""
        n = self.n
        flat = self._compiled(x0)
        return (flat[:n * n].reshape(n, n), flat[n * n:n * n + n ** 3].reshape(n, n, n),
                flat[n * n + n ** 3:].reshape(n, n, n, n))
