"""Integrators as data: every registered tableau meets its order conditions, and the lowered step
map reproduces the tableau's float step and the published harmonic-oscillator facts."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest

from orbitfix.gen.model.definition import define_model
from orbitfix.gen.program.lowering import evaluate_real, lower_step
from orbitfix.gen.timing.integrators import INTEGRATORS, Integrator

# Butcher's order conditions up to order 4 (Hairer, Norsett, Wanner, Solving ODEs I, Table II.2.1).


def order_conditions(m: Integrator) -> list[tuple[int, Fraction, Fraction]]:
    s = m.stages
    a = [[m.a[i][j] if j < len(m.a[i]) else Fraction(0) for j in range(s)] for i in range(s)]
    b, c = m.b, m.c
    ac = [sum(a[i][j] * c[j] for j in range(s)) for i in range(s)]
    return [
        (1, sum(b), Fraction(1)),
        (2, sum(b[i] * c[i] for i in range(s)), Fraction(1, 2)),
        (3, sum(b[i] * c[i] ** 2 for i in range(s)), Fraction(1, 3)),
        (3, sum(b[i] * ac[i] for i in range(s)), Fraction(1, 6)),
        (4, sum(b[i] * c[i] ** 3 for i in range(s)), Fraction(1, 4)),
        (4, sum(b[i] * c[i] * ac[i] for i in range(s)), Fraction(1, 8)),
        (4, sum(b[i] * a[i][j] * c[j] ** 2 for i in range(s) for j in range(s)), Fraction(1, 12)),
        (4, sum(b[i] * a[i][j] * ac[j] for i in range(s) for j in range(s)), Fraction(1, 24)),
    ]


@pytest.mark.parametrize("method", INTEGRATORS.values(), ids=list(INTEGRATORS))
def test_tableau_meets_the_order_conditions_of_its_order(method: Integrator) -> None:
    for row, ci in zip(method.a, method.c, strict=True):
        assert sum(row, Fraction(0)) == ci  # c_i = sum_j a_ij (row-sum condition)
    for order, got, want in order_conditions(method):
        if order <= method.order:
            assert got == want, (order, got, want)


HARMONIC = define_model("harmonic", {"x": 1.0, "y": 0.0}, {"x": "y", "y": "-x"},
                        cycle_hz=1, loop_hz=100)
VANDERPOL = define_model("vdp", {"x": 0.5, "y": 0.0}, {"x": "y", "y": "mu*(1 - x^2)*y - x"},
                         {"mu": 1.3}, cycle_hz=1, loop_hz=100)


@pytest.mark.parametrize("method", INTEGRATORS.values(), ids=list(INTEGRATORS))
def test_lowered_program_equals_the_tableau_step(method: Integrator) -> None:
    rng = np.random.default_rng(1)
    states = rng.uniform(-3, 3, size=(2, 500))
    h = 0.05
    program = lower_step(VANDERPOL, method, h)
    values = evaluate_real(program, states)
    lowered = np.stack([values[i] for i in program.next_state])
    f = VANDERPOL.vector_field()
    reference = method.step(lambda x: f(0.0, x), states, h)
    np.testing.assert_allclose(lowered, reference, rtol=1e-13, atol=1e-13)


def test_rk4_sums_each_state_increments_once_in_the_wide_type() -> None:
    # RK4's update x + h/6 (k1 + 2 k2 + 2 k3 + k4) (Hairer, Norsett, Wanner, Solving ODEs I,
    # sec. II.1): the four slopes of each state enter one scaled sum with weights 1, 2, 2, 1
    # (k1 and k4 first, then k2 and k3) and the constant h/6, which the planned program rounds
    # once (one shift), then one sum into the state; no other sum of slopes is formed.
    from orbitfix.gen.program.fixed_point import plan_fixed_point

    program = lower_step(VANDERPOL, INTEGRATORS["rk4"], 0.05)
    sums = [op for op in program.ops if op.kind == "scaled_sum"]
    assert [op.weights for op in sums] == [(1, 1, 2, 2)] * 2
    assert all(len(set(op.args)) == 4 and op.real == 0.05 / 6 for op in sums)
    assert not any(op.kind == "add" and op.args[0] == op.args[1] for op in program.ops)
    for state, op in enumerate(sums):
        update = program.ops[program.next_state[state]]
        assert update.kind == "add" and update.args[0] == state
        assert program.ops[update.args[1]] is op
    samples = np.array([[2.0, -2.0, 0.5], [1.0, -1.0, 2.5]])
    plan = plan_fixed_point(program, samples, np.array([0.5, 0.0]))
    planned = [op for op in plan.program.ops if op.kind == "scaled_sum"]
    assert all(op.shift >= 0 and len(op.align) == 4 for op in planned)
    # each increment is planned in its state's format: it enters the state with no second
    # rounding (the update's own shift is zero)
    for state in range(2):
        update = plan.program.ops[plan.program.next_state[state]]
        assert update.shift == 0 and update.align == (0, 0)


def one_step_gain(method: Integrator, h: float) -> tuple[float, float]:
    program = lower_step(HARMONIC, method, h)
    values = evaluate_real(program, np.array([[1.0], [0.0]]))
    x, y = (float(values[i][0]) for i in program.next_state)
    return math.hypot(x, y), math.atan2(-y, x)


@pytest.mark.parametrize("h", [0.01, 0.1, 0.5])
def test_euler_amplifies_the_harmonic_oscillator_by_sqrt_1_plus_h2(h: float) -> None:
    # Exact discrete fact (Hairer, Lubich, Wanner, Geometric Numerical Integration, section I.1).
    gain, _ = one_step_gain(INTEGRATORS["euler"], h)
    assert gain == pytest.approx(math.sqrt(1 + h * h), rel=1e-14)


@pytest.mark.parametrize("h", [0.01, 0.1, 0.5, 1.0])
def test_rk4_gain_and_phase_follow_its_stability_polynomial(h: float) -> None:
    # R(z) = 1 + z + z^2/2 + z^3/6 + z^4/24 at z = i h (Hairer, Norsett, Wanner, section IV.2).
    z = 1j * h
    r = 1 + z + z**2 / 2 + z**3 / 6 + z**4 / 24
    gain, phase = one_step_gain(INTEGRATORS["rk4"], h)
    assert gain == pytest.approx(abs(r), rel=1e-14)
    assert phase == pytest.approx(math.atan2(r.imag, r.real), rel=1e-13)


@pytest.mark.parametrize("h", [0.01, 0.1, 0.5, 1.0])
def test_symplectic_euler_rotates_by_acos_1_minus_h2_over_2_and_keeps_area(h: float) -> None:
    # Semi-implicit Euler on the harmonic oscillator is the linear map [[1, h], [-h, 1 - h^2]]:
    # determinant 1 (area kept) and rotation angle acos(1 - h^2/2) (Hairer, Lubich, Wanner,
    # Geometric Numerical Integration, section I.1.2).
    program = lower_step(HARMONIC, INTEGRATORS["symplectic-euler"], h)
    values = evaluate_real(program, np.array([[1.0, 0.0], [0.0, 1.0]]))
    matrix = np.array([values[i] for i in program.next_state])
    assert np.linalg.det(matrix) == pytest.approx(1.0, abs=1e-14)
    angle = math.acos(np.trace(matrix) / 2)
    assert angle == pytest.approx(math.acos(1 - h * h / 2), rel=1e-13)


def test_heun_gain_follows_its_stability_polynomial() -> None:
    # R(z) = 1 + z + z^2/2 for any explicit two-stage second-order method (Hairer, Norsett,
    # Wanner, section IV.2), at z = i h.
    h = 0.3
    r = 1 + 1j * h + (1j * h) ** 2 / 2
    gain, phase = one_step_gain(INTEGRATORS["heun"], h)
    assert gain == pytest.approx(abs(r), rel=1e-14)
    assert phase == pytest.approx(math.atan2(r.imag, r.real), rel=1e-13)
