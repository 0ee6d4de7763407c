"""Angle states (phases modulo 2 pi) in the analysis, and the built-in phase oscillator with
amplitude dynamics, checked against exact solutions and scipy."""

from __future__ import annotations

import functools
import math
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from orbitfix.gen.analysis.limit_cycle import find_limit_cycle
from orbitfix.gen.analysis.summary import analyse
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.model.model_file import load_model
from orbitfix.verify.cli.main import main
from orbitfix.verify.report.analysis import format_report


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


def test_an_angle_far_faster_than_the_motion_is_refused_before_its_samples_are_made(capsys) -> None:
    # Source: the case (common practice: size work before starting it). At nu = 1e6 (the
    # largest parameter value accepted) each phase turns about 1e8 times in one integrator step;
    # following the motion at an eighth of a turn needs hundreds of GiB, which must be an input
    # error naming the size, not an allocation failure. nu = 1e9 is refused as a parameter value.
    fast = load_model("phase_chain").with_parameters({"nu": 1e6})
    with pytest.raises(InputError, match=r"would need [\d,]+ values, [\d.]+ GiB.*smaller angular frequency"):
        find_limit_cycle(fast)
    assert main(["check", "phase_chain", "--set", "nu=1e6"]) == 2
    err = capsys.readouterr().err
    assert "GiB" in err and "Traceback" not in err
    assert main(["check", "phase_chain", "--set", "nu=1e9"]) == 2
    assert "not accepted as a parameter value" in capsys.readouterr().err


# -- the chain of phase oscillators (gen/model/networks.py, oscillator 'phase_amplitude') -----------


@functools.cache
def chain_analysis():
    return analyse(load_model("phase_chain"))


def test_chain_locks_at_the_biases_with_period_one_over_nu() -> None:
    # Ijspeert et al. (2007) / the standard analysis of sine coupling (direct calculation): with
    # equal intrinsic frequencies and antisymmetric biases phi_ji = -phi_ij, theta_j - theta_i =
    # phi_ij zeroes every sine, so every phase turns at 2 pi nu: period 1 / nu, lags i / 8
    analysis = chain_analysis()
    assert analysis.ok and analysis.network.phase_locked
    nu = analysis.model.parameter_values["nu"]
    assert analysis.cycle.period == pytest.approx(1.0 / nu, rel=1e-9)
    assert analysis.network.common_period == pytest.approx(1.0 / nu, rel=1e-9)
    assert np.allclose(analysis.network.lags, np.arange(8) / 8, atol=1e-9)
    assert list(analysis.cycle.turns[0::3]) == [1] * 8
    assert np.allclose(analysis.cycle.state_max[1::3], analysis.model.parameter_values["R"], rtol=1e-9)


def test_chain_phase_multipliers_are_the_path_laplacians() -> None:
    # direct calculation: on the locked wave r_j = R and every cosine is cos(0) = 1, so the phase
    # disturbances obey d' = -w R L d with L the Laplacian of the path of 8 (neighbour links),
    # whose eigenvalues are 2 (1 - cos(k pi / 8)), k = 0..7 (common practice, spectral graph
    # theory); the multipliers over one period T are exp(-w R 2 (1 - cos(k pi / 8)) T), the k = 0
    # one being the trivial 1. The amplitude disturbances decay as exp(-a T / 2), far smaller.
    analysis = chain_analysis()
    values = analysis.model.parameter_values
    period = analysis.cycle.period
    expected = np.sort([math.exp(-values["w"] * values["R"] * 2 * (1 - math.cos(k * math.pi / 8))
                                 * period) for k in range(1, 8)])
    nontrivial = np.sort(np.abs(analysis.cycle.nontrivial_multipliers))[-7:]
    assert np.allclose(nontrivial, expected, rtol=1e-6)
    assert analysis.cycle.stability_margin == pytest.approx(expected[-1], rel=1e-6)


def test_chain_lock_time_agrees_with_scipy() -> None:
    # reference library: scipy's DOP853 from the initial state; the lags after each period are
    # (theta_1 - theta_i) / 2 pi modulo 1; the first period from which every lag stays within
    # 0.01 cycles of i / 8 is the lock time
    model = load_model("phase_chain")
    marks = np.arange(1, 41, dtype=float)
    run = solve_ivp(model.vector_field(), (0.0, 40.0), model.initial_state, method="DOP853",
                    rtol=1e-11, atol=1e-11, t_eval=marks)
    thetas = run.y[0::3]
    errors = np.abs(((thetas[0] - thetas) / (2 * math.pi) - np.arange(8)[:, None] / 8 + 0.5) % 1.0 - 0.5)
    late = np.max(errors, axis=0) <= 0.01
    first_locked = next(k for k in range(len(late)) if late[k:].all())
    assert chain_analysis().network.cycles_to_lock == first_locked + 1
    assert first_locked >= 1   # the start is off the wave on purpose


def test_phase_network_file_keys_and_errors(tmp_path: Path, capsys) -> None:
    path = tmp_path / "fins.toml"
    path.write_text('name = "fins"\n[network]\noscillator = "phase_amplitude"\nlags = [0, 0.5]\n'
                    '[parameters]\nw = 1.0\n[rhythm]\ncycle_hz = 1\nloop_hz = 100\n')
    model = load_model(str(path))
    assert model.state_names == ("theta1", "r1", "r_dot1", "theta2", "r2", "r_dot2")
    assert model.states[0].angle and not model.states[1].angle
    # phi_12 = 2 pi (lag_1 - lag_2) = -pi
    assert "sin(theta2 - theta1 + 3.141592653589793)" in model.equation_text[0]
    path.write_text(path.read_text().replace("w = 1.0", "omega = 1.0"))
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "no parameter 'omega'" in err and "nu, R, a, w" in err and "Traceback" not in err


def test_gen_writes_a_phase_network_with_a_half_turn_bias(tmp_path: Path, capsys) -> None:
    # Phases are held as wrapping words of turns and sin comes from a table (tests/test_phases.py);
    # two fins half a cycle apart have a bias of half a turn, stored as the word's most negative
    # value (minus a half turn: the same angle), not refused as too large. (A two-oscillator
    # network keeps this test short; tests/test_angle_drift.py verifies the eight-joint chain.)
    path = tmp_path / "fins.toml"
    path.write_text('name = "fins"\n[network]\noscillator = "phase_amplitude"\nlags = [0, 0.5]\n'
                    '[rhythm]\ncycle_hz = 1\nloop_hz = 100\n')
    assert main(["gen", str(path), "-o", str(tmp_path / "out")]) == 0
    source = (tmp_path / "out" / "fins.c").read_text()
    assert "sine_lookup" in source
    (line,) = [t for t in source.splitlines() if "rad, in turns" in t and "static const" in t]
    assert "(-INT32_C(2147483647) - 1);" in line
    assert "stands for -0.5, the same angle a whole turn round, error +0" in line


# -- diffusive networks of a single built-in: two Van der Pol oscillators ---------------------------


@functools.cache
def pair_analysis():
    return analyse(load_model("vanderpol_pair"))


def test_van_der_pol_pair_synchronises_on_the_single_oscillators_cycle() -> None:
    # exact (Pikovsky, Rosenblum and Kurths, "Synchronization", 2001, identical systems, from
    # memory): diffusive coupling vanishes when x1 = x2, y1 = y2, so the in-phase motion is the
    # single Van der Pol cycle: same period, same range, lag 0
    pair, single = pair_analysis(), find_limit_cycle(load_model("vanderpol"))
    assert pair.ok and pair.network.phase_locked
    assert pair.cycle.period == pytest.approx(single.period, rel=1e-8)
    assert np.allclose(pair.cycle.state_max, np.tile(single.state_max, 2), rtol=1e-7)
    assert np.allclose(pair.network.lags, [0.0, 0.0], atol=1e-9)
    # Liouville's formula (exact): the trace of the pair's Jacobian is twice the single one's
    # minus 2 k (the coupling on y), so det(monodromy) = m^2 exp(-2 k T), m the single
    # oscillator's nontrivial multiplier
    k = 0.4
    expected = math.exp(2 * single.floquet_log[0] - 2 * k * single.period)
    assert np.linalg.det(pair.cycle.monodromy) == pytest.approx(expected, rel=1e-5)
    assert single.floquet_log[0] < np.log(pair.cycle.stability_margin) + 1e-6   # sync is kept


def test_van_der_pol_pair_synchronises_in_scipy_from_the_start() -> None:
    # reference library: scipy's DOP853 from the network's initial state (the copies start a
    # tenth of a turn apart): after 20 periods the two oscillators move as one
    model = load_model("vanderpol_pair")
    period = pair_analysis().cycle.period
    run = solve_ivp(model.vector_field(), (0.0, 20 * period), model.initial_state, method="DOP853",
                    rtol=1e-11, atol=1e-12)
    x1, y1, x2, y2 = run.y[:, -1]
    assert abs(model.initial_state[0] - model.initial_state[2]) > 0.1
    assert abs(x1 - x2) < 1e-8 and abs(y1 - y2) < 1e-8


def test_diffusive_network_file_errors_exit_2(tmp_path: Path, capsys) -> None:
    good = ('name = "pair"\n[network]\noscillator = "vanderpol"\ncoupling = [[0, 0.4], [0.4, 0]]\n'
            'coupled_state = "y"\n[rhythm]\ncycle_hz = 1\nloop_hz = 100\n')
    path = tmp_path / "pair.toml"
    path.write_text(good)
    assert load_model(str(path)).equation_text[1].endswith("+ 0.4 * (y2 - y1)")
    for change, message in [
            (("[[0, 0.4], [0.4, 0]]", "[[0, 0.4]]"), "square matrix"),
            (("[[0, 0.4], [0.4, 0]]", "[[1, 0.4], [0.4, 0]]"), "diagonal and must be 0"),
            (("[[0, 0.4], [0.4, 0]]", '[[0, "a"], [0.4, 0]]'), "must be a number"),
            (('coupled_state = "y"', 'coupled_state = "z"'), "coupled_state must name a state"),
            (('coupled_state = "y"', 'coupled_state = "y"\npattern = "trot"'), "takes a coupling")]:
        path.write_text(good.replace(*change))
        assert main(["check", str(path)]) == 2
        err = capsys.readouterr().err
        assert message in err and "pair.toml" in err and "Traceback" not in err


@pytest.mark.slow
def test_a_phase_a_million_times_faster_than_its_amplitude_still_closes() -> None:
    # Source: the exact solution theta' = 2 pi nu, so the period is 1 / nu. At nu = 1e6 one run of
    # the search holds millions of returns to the section; only the latest are refined (and the
    # budget is read between them), where refining all of them outran the search's budget.
    cycle = find_limit_cycle(load_model("phase_amplitude").with_parameters({"nu": 1e6}), seconds=60.0)
    assert cycle.found and cycle.stable
    assert cycle.period == pytest.approx(1e-6, rel=1e-9)


def test_work_sizes_are_stated_in_binary_units_and_refused_past_the_limit() -> None:
    # Source: IEC 80000-13 binary prefixes (1 KiB = 1024 bytes, 1 TiB = 2**40 bytes).
    from orbitfix.gen.work_size import LARGEST_ARRAY, byte_text, refuse_oversized

    assert byte_text(96) == "96 bytes"
    assert byte_text(1536) == "1.5 KiB"
    assert byte_text(4.79 * 2**40) == "4.79 TiB"
    refuse_oversized(LARGEST_ARRAY // 8, "an array at the limit", "never refused")
    with pytest.raises(InputError, match=r"a grid would need 67,108,865 values, 512 MiB.*use fewer"):
        refuse_oversized(LARGEST_ARRAY // 8 + 1, "a grid", "use fewer")
    with pytest.raises(InputError, match="unbounded"):
        refuse_oversized(float("inf"), "a grid", "use fewer")


def test_angle_helpers_agree_with_pythons_remainder_and_modulo() -> None:
    # Source: Python's math.remainder (IEEE 754 remainder, the nearest way round to within a tie)
    # and float % (the sign of the divisor); one turn is math.tau.
    from orbitfix.gen.model.angles import (
        TURN,
        part_of_turn,
        radians_to_turns,
        whole_turns,
        wrap_angles,
        wrap_difference,
        wrap_turns,
    )

    assert TURN == math.tau
    rng = np.random.default_rng(7)
    values = rng.uniform(-50.0, 50.0, size=(2, 200))
    mask = np.array([True, False])
    near = wrap_difference(values, mask)
    assert np.allclose(near[0], [math.remainder(v, math.tau) for v in values[0]], atol=1e-12)
    assert np.array_equal(near[1], values[1])                 # not an angle: untouched
    assert np.all((near[0] >= -math.pi) & (near[0] < math.pi))
    ahead = wrap_angles(values, mask)
    assert np.array_equal(ahead[0], [v % math.tau for v in values[0]])
    assert np.array_equal(whole_turns(values[:, 0], mask), [round(values[0, 0] / math.tau), 0])
    turns = values[0] / 7.0
    assert np.allclose(wrap_turns(turns), [math.remainder(v, 1.0) for v in turns], atol=1e-12)
    assert np.allclose(radians_to_turns(values[0]), near[0] / math.tau, atol=1e-12)
    assert np.array_equal(part_of_turn(turns), [v % 1.0 for v in turns])
    assert wrap_turns(0.5) == -0.5 and part_of_turn(-0.25) == 0.75     # the ranges' ends
