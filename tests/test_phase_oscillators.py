"""Angle states (phases modulo 2 pi) in the analysis, and the built-in phase oscillator with
amplitude dynamics, checked against exact solutions and scipy."""

from __future__ import annotations

import functools
import math
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from gen.analysis import analyse, format_report
from gen.errors import InputError
from gen.limit_cycle import find_limit_cycle
from gen.model import define_model
from gen.model_file import load_model
from verify.command_line import main


@functools.cache
def phase_cycle(**params: float):
    return find_limit_cycle(load_model("phase_amplitude").with_parameters(params))


def test_the_model_file_declares_theta_an_angle() -> None:
    model = load_model("phase_amplitude")
    assert [s.angle for s in model.states] == [True, False, False]
    assert model.describe()["states"][0]["angle"] is True
    assert "angle" not in model.describe()["states"][1]   # fingerprints of older models unchanged


@pytest.mark.parametrize(("nu", "big_r", "a"), [(1.0, 1.0, 20.0), (0.3, 2.5, 4.0), (2.0, 0.5, 10.0)])
def test_period_is_one_over_nu_and_the_amplitude_is_r(nu: float, big_r: float, a: float) -> None:
    # Ijspeert et al., Science 315 (2007): theta' = 2 pi nu, so the period is exactly 1 / nu, and
    # the amplitude equation's only rest point is r = R (r_dot = 0)
    cycle = phase_cycle(nu=nu, R=big_r, a=a)
    assert cycle.found and cycle.stable and cycle.isolated
    assert cycle.period == pytest.approx(1.0 / nu, rel=1e-9)
    assert list(cycle.turns) == [1, 0, 0]
    assert (cycle.state_min[0], cycle.state_max[0]) == (0.0, 2 * math.pi)   # the full turn
    assert cycle.state_min[1] == pytest.approx(big_r, rel=1e-9)
    assert cycle.state_max[1] == pytest.approx(big_r, rel=1e-9)
    assert abs(cycle.state_max[2]) < 1e-9 * a * big_r
    # exact (direct calculation): the amplitude part is linear with the double eigenvalue -a / 2
    # and theta's row of the monodromy is (1, 0, 0), so the monodromy has determinant
    # exp(-a T) (Liouville's formula, trace of the Jacobian -a) and trace 1 + 2 exp(-a T / 2)
    period = 1.0 / nu
    assert np.linalg.det(cycle.monodromy) == pytest.approx(math.exp(-a * period), rel=1e-6)
    assert np.trace(cycle.monodromy) == pytest.approx(1 + 2 * math.exp(-a * period / 2), rel=1e-8)
    assert abs(cycle.multipliers[cycle.trivial_index] - 1.0) < 1e-9


def test_amplitude_converges_as_a_critically_damped_system() -> None:
    # exact (common practice): with e = r - R, r'' = a (a/4 (R - r) - r') is e'' + a e' + a^2/4 e = 0,
    # critically damped: e(t) = (e0 + (e0' + a e0 / 2) t) exp(-a t / 2). Reference library: scipy's
    # DOP853 along one trajectory from the model's initial state
    model = load_model("phase_amplitude")
    a, big_r = model.parameter_values["a"], model.parameter_values["R"]
    times = np.linspace(0.0, 2.0, 41)
    run = solve_ivp(model.vector_field(), (0.0, 2.0), model.initial_state, method="DOP853",
                    rtol=1e-12, atol=1e-12, t_eval=times)
    e0, e0_dot = model.initial_state[1] - big_r, model.initial_state[2]
    exact = big_r + (e0 + (e0_dot + a * e0 / 2) * times) * np.exp(-a * times / 2)
    assert np.allclose(run.y[1], exact, atol=1e-10)
    nu = model.parameter_values["nu"]
    assert np.allclose(run.y[0], 2 * math.pi * nu * times, atol=1e-10)


def test_cycle_samples_follow_scipy_from_the_cycle_point() -> None:
    # reference library: scipy's DOP853 from the cycle's point; theta compared modulo 2 pi
    model = load_model("phase_amplitude")
    cycle = phase_cycle()
    count = cycle.samples.shape[1]
    times = np.arange(0, count, 100) * cycle.period / count
    run = solve_ivp(model.vector_field(), (0.0, times[-1]), cycle.point, method="DOP853",
                    rtol=1e-12, atol=1e-12, t_eval=times)
    ours = cycle.samples[:, ::100]
    gap = np.angle(np.exp(1j * (run.y[0] - ours[0])))
    assert np.allclose(gap, 0.0, atol=1e-9) and np.allclose(run.y[1:], ours[1:], atol=1e-9)
    assert np.all((ours[0] >= 0.0) & (ours[0] < 2 * math.pi))


def test_no_equilibrium_and_the_report_says_why() -> None:
    analysis = analyse(load_model("phase_amplitude"))
    assert analysis.ok and analysis.equilibria == ()
    assert analysis.cycle.settled_at is None
    text = format_report(analysis)
    assert "Equilibria: none (the rate of theta is the constant 6.28319, never zero)" in text
    assert "the full turn, 1 turn forward per period" in text


def test_a_backward_turning_phase_closes_with_minus_one_turn() -> None:
    # theta' = -2 pi nu: the phase turns backward once per 1 / nu (exact)
    model = define_model("backward", {"theta": 1.0, "r": 0.5, "r_dot": 0.0},
                         {"theta": "-6.283185307179586 * nu", "r": "r_dot",
                          "r_dot": "a * (a / 4 * (1 - r) - r_dot)"},
                         {"nu": 0.5, "a": 4.0}, cycle_hz=1, loop_hz=100, angles=("theta",))
    cycle = find_limit_cycle(model)
    assert cycle.stable and cycle.period == pytest.approx(2.0, rel=1e-9)
    assert list(cycle.turns) == [-1, 0, 0]


@pytest.mark.parametrize("with_amplitude", [False, True])
def test_nonuniform_phase_oscillator_period_is_adlers(with_amplitude: bool) -> None:
    # Strogatz, Nonlinear Dynamics and Chaos (1994), sec. 4.3, the nonuniform oscillator
    # theta' = w - b sin(theta): for w > b the period is 2 pi / sqrt(w^2 - b^2) (exact).
    # With the extra state r' = 1 - r the second multiplier is exp(-T): Liouville's formula, the
    # integral of -b cos(theta) over one turn being zero (direct calculation)
    states, equations = {"theta": 0.3}, {"theta": "w - b * sin(theta)"}
    if with_amplitude:
        states["r"], equations["r"] = 0.0, "1 - r"
    model = define_model("adler", states, equations, {"w": 2.0, "b": 1.5}, cycle_hz=1,
                         loop_hz=100, angles=("theta",))
    cycle = find_limit_cycle(model)
    period = 2 * math.pi / math.sqrt(2.0**2 - 1.5**2)
    assert cycle.found and cycle.stable
    assert cycle.period == pytest.approx(period, rel=1e-9)
    if with_amplitude:
        assert cycle.stability_margin == pytest.approx(math.exp(-period), rel=1e-6)


def test_adler_below_locking_settles_at_its_stable_rest_point() -> None:
    # Strogatz (sec. 4.3): for b > w the phase stops where w = b sin(theta); the stable root has
    # cos(theta) > 0 (the slope -b cos(theta) is negative there): theta = arcsin(w / b), reported
    # wrapped into [0, 2 pi) although the start is past one turn
    model = define_model("stuck", {"theta": 7.0}, {"theta": "w - b * sin(theta)"},
                         {"w": 1.0, "b": 2.0}, cycle_hz=1, loop_hz=100, angles=("theta",))
    cycle = find_limit_cycle(model)
    assert not cycle.found and cycle.outcome == "settles"
    assert cycle.settled_at.state[0] == pytest.approx(math.asin(0.5), abs=1e-9)   # wrapped


def test_angle_flag_must_be_true_or_false(tmp_path: Path, capsys) -> None:
    path = tmp_path / "bad.toml"
    path.write_text('name = "bad"\n[states]\ntheta = { initial = 0.0, angle = "yes" }\n'
                    '[equations]\ntheta = "1"\n[rhythm]\ncycle_hz = 1\nloop_hz = 100\n')
    with pytest.raises(InputError, match=r"bad.toml:3: 'angle' of 'theta' must be true or false"):
        load_model(str(path))
    assert main(["check", str(path)]) == 2
    assert "Traceback" not in capsys.readouterr().err
    with pytest.raises(InputError, match="angles must name states"):
        define_model("x", {"x": 0.0}, {"x": "1"}, cycle_hz=1, loop_hz=100, angles=("y",))


def test_check_of_the_phase_oscillator_exits_0(capsys) -> None:
    assert main(["check", "phase_amplitude"]) == 0
    assert "stable limit cycle" in capsys.readouterr().out
