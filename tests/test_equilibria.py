"""Equilibria and their kinds (gen/analysis/equilibria.py)."""

from __future__ import annotations

import numpy as np
import pytest

from orbitfix.gen.analysis.equilibria import KINDS, classify, describe_kind, equilibrium_near, find_equilibria
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.model.model_file import load_model


def vanderpol(mu: float):
    return load_model("vanderpol").with_parameters({"mu": mu})


def bistable(initial_x: float = 0.3):
    """x'' = x - x^3 - 0.5 x': a damped double well, with equilibria at x = -1, 0, 1."""
    return define_model("double_well", {"x": initial_x, "y": 0.0},
                        {"x": "y", "y": "x - x^3 - 0.5*y"}, cycle_hz=1.0, loop_hz=100.0)


@pytest.mark.parametrize("mu", [-3.0, -1.0, 0.0, 1.0, 3.0])
def test_vanderpol_origin_eigenvalues_follow_the_closed_form(mu):
    equilibria = find_equilibria(vanderpol(mu))
    assert len(equilibria) == 1
    assert np.array_equal(equilibria[0].state, [0.0, 0.0])
    # Strogatz, Nonlinear Dynamics and Chaos (1994), sec. 5.2: the linearisation at the origin has
    # trace mu and determinant 1, so lambda = (mu +- sqrt(mu^2 - 4)) / 2.
    root = np.sqrt(complex(mu * mu - 4.0))
    expected = sorted([(mu + root) / 2, (mu - root) / 2], key=lambda v: (-v.real, -v.imag))
    assert np.allclose(equilibria[0].eigenvalues, expected, rtol=0, atol=1e-12)


@pytest.mark.parametrize(("mu", "kind"), [
    (-3.0, "stable node"),      # Strogatz (1994) sec. 5.2: tau < 0, tau^2 > 4 delta
    (-1.0, "stable focus"),     # tau < 0, tau^2 < 4 delta
    (0.0, "center"),            # tau = 0, delta > 0
    (1.0, "unstable focus"),    # 0 < tau, tau^2 < 4 delta
    (3.0, "unstable node"),     # tau > 0, tau^2 > 4 delta
])
def test_vanderpol_origin_kind_follows_trace_and_determinant(mu, kind):
    assert [e.kind for e in find_equilibria(vanderpol(mu))] == [kind]


def test_three_equilibria_are_each_found_once_with_their_kinds():
    equilibria = find_equilibria(bistable())
    assert [tuple(e.state) for e in equilibria] == [(-1.0, 0.0), (0.0, 0.0), (1.0, 0.0)]
    assert [e.kind for e in equilibria] == ["stable focus", "saddle", "stable focus"]
    # direct calculation: at x = +-1 the Jacobian is [[0, 1], [-2, -0.5]], so
    # lambda = -0.25 +- i sqrt(7.75) / 2; at the origin [[0, 1], [1, -0.5]], lambda = (-0.5 +- sqrt(4.25)) / 2
    focus = [-0.25 + 0.5j * np.sqrt(7.75), -0.25 - 0.5j * np.sqrt(7.75)]
    saddle = [(-0.5 + np.sqrt(4.25)) / 2, (-0.5 - np.sqrt(4.25)) / 2]
    assert np.allclose(equilibria[0].eigenvalues, focus, atol=1e-12)
    assert np.allclose(equilibria[1].eigenvalues, saddle, atol=1e-12)
    assert np.allclose(equilibria[2].eigenvalues, focus, atol=1e-12)


def test_the_list_does_not_depend_on_where_the_model_starts():
    first = find_equilibria(bistable(0.3))
    second = find_equilibria(bistable(-2.5))
    assert [tuple(e.state) for e in first] == [tuple(e.state) for e in second]
    assert [e.kind for e in first] == [e.kind for e in second]


def test_a_model_without_equilibria_gives_an_empty_list():
    drifting = define_model("drift", {"x": 0.0, "y": 1.0}, {"x": "1", "y": "-y"},
                            cycle_hz=1.0, loop_hz=100.0)
    assert find_equilibria(drifting) == []


def test_equilibrium_near_a_guess_is_the_nearby_one():
    found = equilibrium_near(bistable(), np.array([0.8, 0.1]))
    assert found is not None and np.allclose(found.state, [1.0, 0.0])
    assert found.stable and found.label() == "stable focus (1, 0)"


@pytest.mark.parametrize(("eigenvalues", "kind"), [
    ([-1.0, -2.0], "stable node"),
    ([1.0, 2.0], "unstable node"),
    ([-1 + 2j, -1 - 2j], "stable focus"),
    ([1 + 2j, 1 - 2j], "unstable focus"),
    ([1.0, -2.0], "saddle"),
    ([1 + 1j, 1 - 1j, -3.0], "saddle"),          # mixed signs of real parts
    ([3j, -3j], "center"),
    ([1e-12 + 3j, 1e-12 - 3j], "center"),        # a real part in the rounding noise
    ([0.0, -1.0], "degenerate"),                 # a zero eigenvalue
    ([0.0, 0.0], "degenerate"),
    ([2j, -2j, -1.0], "degenerate"),             # non-hyperbolic, and not a center
    ([-1.0, -1 + 1e-3j, -1 - 1e-3j], "stable focus"),
])
def test_classify(eigenvalues, kind):
    assert classify(np.array(eigenvalues, dtype=complex)) == kind
    assert kind in KINDS


def test_every_kind_has_a_plain_description():
    assert describe_kind("stable focus") == "stable focus: nearby states spiral in"
    for kind in KINDS:
        assert describe_kind(kind).startswith(kind + ": ")


def test_compiled_functions_agree_with_sympys_own_evaluation() -> None:
    # Source: sympy's exact evaluation (subs + evalf) of the same expressions.
    import sympy

    from orbitfix.gen.model.compiled import array_function, point_function, scalar_function

    x, y = sympy.symbols("x y", real=True)
    expressions = [x * y - sympy.Max(0, x) ** 2, sympy.Abs(y) + sympy.Integer(3), sympy.Integer(2)]
    points = np.array([[0.5, -1.25], [-2.0, 3.0], [1.5, 0.0]])
    exact = np.array([[float(e.subs({x: a, y: b}).evalf()) for e in expressions] for a, b in points])
    scalar = scalar_function((x, y), expressions)
    point = point_function((x, y), expressions)
    batch = array_function((x, y), expressions)
    for (a, b), want in zip(points, exact, strict=True):
        assert np.allclose(scalar(a, b), want, rtol=1e-15)
        assert np.allclose(point(np.array([a, b])), want, rtol=1e-15)
    together = batch(points.T)                  # shape (3 expressions, 3 points): constants broadcast
    assert together.shape == (3, 3)
    assert np.allclose(together, exact.T, rtol=1e-15)
