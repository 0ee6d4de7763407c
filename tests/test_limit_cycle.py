"""The limit cycle (gen/analysis/limit_cycle/) and the combined analysis (gen/analysis/summary.py)."""

from __future__ import annotations

import functools
import json
import math
import time

import numpy as np
import pytest
from scipy.integrate import simpson, solve_ivp

from orbitfix.gen.analysis.limit_cycle import find_limit_cycle
from orbitfix.gen.analysis.summary import analyse
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.model.model_file import load_model
from orbitfix.verify.report.analysis import format_report


def vanderpol(mu: float):
    return load_model("vanderpol").with_parameters({"mu": mu})


@functools.cache
def cycle_at(mu: float, reverse_time: bool = False):
    return find_limit_cycle(vanderpol(mu), reverse_time=reverse_time)


def planar(name: str, x_rate: str, y_rate: str, x0: float = 1.0, y0: float = 0.0):
    return define_model(name, {"x": x0, "y": y0}, {"x": x_rate, "y": y_rate},
                        cycle_hz=1.0, loop_hz=100.0)


def upward_zero_crossings(model, method: str, rtol: float, t_end: float) -> np.ndarray:
    """Times where x crosses 0 going up, from scipy alone (the model's own numpy functions)."""
    field, jacobian = model.vector_field(), model.jacobian()

    def rising(t, x):
        return x[0]

    rising.direction = 1.0
    options = {"jac": lambda t, x: jacobian(x)} if method == "Radau" else {}
    run = solve_ivp(field, (0.0, t_end), model.initial_state, method=method, rtol=rtol,
                    atol=1e-12, events=rising, **options)
    assert run.success
    return run.t_events[0]


# -- Van der Pol against published and reference values ------------------------------------------


def test_vanderpol_period_and_amplitude_at_mu_1():
    cycle = cycle_at(1.0)
    assert cycle.found and cycle.stable and cycle.isolated
    assert abs(cycle.period - 6.6633) < 5e-4       # from memory: the tabulated period 6.6633 at mu = 1
    assert round(float(cycle.state_max[0]), 2) == 2.01   # from memory: amplitude 2.01 at mu = 1
    assert cycle.state_min[0] == pytest.approx(-cycle.state_max[0], abs=1e-9)  # odd symmetry


@pytest.mark.parametrize("mu", [0.01, 0.1, 0.2])
def test_small_mu_period_follows_the_lindstedt_series(mu):
    # Lindstedt-Poincare series, standard texts (e.g. Nayfeh, Perturbation Methods, 1973):
    # T = 2 pi (1 + mu^2 / 16 + O(mu^4)); the tolerance scales as mu^4, so a wrong mu^2
    # coefficient fails
    series = 2 * math.pi * (1 + mu**2 / 16)
    assert abs(cycle_at(mu).period - series) < 2 * math.pi * 0.01 * mu**4


@pytest.mark.parametrize("mu", [1.0, 2.0])
def test_nontrivial_multiplier_obeys_liouvilles_formula(mu):
    cycle = cycle_at(mu)
    values = np.linalg.eigvals(cycle.monodromy)
    from_monodromy = values[np.argmax(np.abs(values - 1.0))].real
    # Liouville's formula, standard texts (e.g. Hartman, Ordinary Differential Equations, 1964):
    # the product of the multipliers is exp(integral of the divergence over one period), and the
    # trivial one is 1. The integral here is Simpson's rule over the cycle's own samples.
    divergence = vanderpol(mu).divergence()
    closed = np.hstack([cycle.samples, cycle.samples[:, :1]])
    integral = simpson([divergence(closed[:, i]) for i in range(closed.shape[1])],
                       dx=cycle.period / cycle.samples.shape[1])
    assert abs(from_monodromy - math.exp(integral)) <= 1e-9 * math.exp(integral) + 1e-13
    assert cycle.floquet_log[0] == pytest.approx(integral, abs=1e-9)


@pytest.mark.parametrize(("mu", "t_end"), [(1.0, 75.0), (5.0, 50.0)])
def test_period_matches_scipy_at_tight_tolerance(mu, t_end):
    # reference library: scipy's DOP853 at rtol 1e-12, successive upward crossings of x = 0 after
    # a transient (the multiplier is below 1e-3 per period, so the transient is long gone)
    crossings = upward_zero_crossings(vanderpol(mu), "DOP853", 1e-12, t_end)
    assert crossings.size >= 3
    reference = crossings[-1] - crossings[-2]
    assert cycle_at(mu).period == pytest.approx(reference, rel=1e-8)


def test_stiff_vanderpol_at_mu_10():
    cycle = cycle_at(10.0)
    assert cycle.found and cycle.stable and cycle.isolated
    # reference library: scipy's Radau with the analytic Jacobian (the multiplier is about
    # e^-312 per period, so the second crossing is already on the cycle)
    crossings = upward_zero_crossings(vanderpol(10.0), "Radau", 1e-8, 29.0)
    assert cycle.period == pytest.approx(crossings[-1] - crossings[-2], rel=1e-7)
    assert abs(cycle.period - 19.08) < 0.005        # from memory: T is about 19.08 at mu = 10
    # Strogatz (1994) sec. 7.5: relaxation period (3 - 2 ln 2) mu to leading order; the next term,
    # from memory about 7.01 mu^(-1/3), is positive and overshoots at mu = 10
    leading = (3 - 2 * math.log(2)) * 10.0
    assert leading < cycle.period < leading + 7.01 * 10.0 ** (-1 / 3)
    # far below what the monodromy resolves: the log comes from the divergence integral
    assert -400.0 < cycle.floquet_log[0] < -250.0


# -- outcomes without an isolated stable cycle ---------------------------------------------------


def test_negative_damping_settles_at_the_stable_focus():
    cycle = cycle_at(-1.0)
    assert not cycle.found and not cycle.stable
    assert cycle.outcome == "settles"
    assert "settles at the stable focus (0, 0)" in cycle.verdict


def test_zero_damping_gives_a_family_of_cycles_not_an_isolated_one():
    cycle = cycle_at(0.0)
    assert cycle.found and not cycle.isolated and not cycle.stable
    assert cycle.period == pytest.approx(2 * math.pi, rel=1e-9)   # harmonic oscillator: 2 pi
    assert "continuous family" in cycle.verdict and "center" in cycle.verdict
    assert abs(cycle.floquet_log[0]) < 1e-9


def test_unbounded_growth_is_reported_quickly():
    start = time.monotonic()
    cycle = find_limit_cycle(planar("runaway", "x", "y", 1.0, 1.0))
    assert time.monotonic() - start < 2.0
    assert not cycle.found and cycle.outcome == "grows"
    assert "grow without bound" in cycle.verdict


def test_a_linear_stable_spiral_settles():
    cycle = find_limit_cycle(planar("spiral", "-0.1*x + y", "-x - 0.1*y"))
    assert not cycle.found
    assert "settles at the stable focus (0, 0)" in cycle.verdict


def test_a_singular_field_gives_a_verdict_not_a_traceback():
    # x' = y / x reaches x = 0 in finite time with infinite speed
    cycle = find_limit_cycle(planar("singular", "y / x", "-x", 0.5, 0.0))
    assert not cycle.found and cycle.outcome == "failed"
    assert "stalled" in cycle.verdict


def test_motion_that_never_repeats_gives_a_verdict():
    # Lorenz (1963), "Deterministic nonperiodic flow": at sigma 10, rho 28, beta 8/3 the motion is
    # chaotic and no periodic orbit attracts it
    model = define_model("lorenz", {"x": 1.0, "y": 1.0, "z": 1.0},
                         {"x": "10*(y - x)", "y": "x*(28 - z) - y", "z": "x*y - 8/3*z"},
                         cycle_hz=1.0, loop_hz=100.0)
    cycle = find_limit_cycle(model)
    assert not cycle.found and cycle.outcome == "no repeat"
    assert "had not repeated" in cycle.verdict


def test_a_start_on_an_unstable_equilibrium_is_nudged_onto_the_cycle():
    cycle = find_limit_cycle(planar("vdp_at_rest", "y", "(1 - x^2)*y - x", 0.0, 0.0))
    assert cycle.stable and cycle.period == pytest.approx(cycle_at(1.0).period, rel=1e-9)


def test_a_start_on_a_stable_equilibrium_stays_there():
    cycle = find_limit_cycle(planar("damped_at_rest", "y", "-(1 - x^2)*y - x", 0.0, 0.0))
    assert not cycle.found
    assert "starts at and stays at the stable focus (0, 0)" in cycle.verdict


def test_an_exhausted_budget_gives_a_verdict():
    cycle = find_limit_cycle(vanderpol(1.0), evaluations=500)
    assert not cycle.found and cycle.outcome == "no repeat"
    assert "budget" in cycle.verdict


def test_backward_time_finds_the_unstable_cycle():
    # symmetry of the equation (direct calculation): (t, y, mu) -> (-t, -y, -mu) maps Van der Pol
    # onto itself, so at mu = -1 there is an unstable cycle with the period of mu = 1 and the
    # opposite Floquet exponent
    unstable, stable = cycle_at(-1.0, reverse_time=True), cycle_at(1.0)
    assert unstable.found and unstable.isolated and not unstable.stable
    assert unstable.outcome == "unstable cycle"
    assert unstable.period == pytest.approx(stable.period, rel=1e-10)
    assert unstable.floquet_log[0] == pytest.approx(-stable.floquet_log[0], rel=1e-8)


@pytest.mark.parametrize("reverse_time", [False, True])
def test_samples_run_forward_in_time_from_the_section_point(reverse_time):
    mu = -1.0 if reverse_time else 1.0
    cycle = cycle_at(mu, reverse_time)
    field = vanderpol(mu).vector_field()
    samples, step = cycle.samples, cycle.period / cycle.samples.shape[1]
    assert samples.shape == (2, 2000)
    assert np.array_equal(samples[:, 0], cycle.point)
    # one sample step is one Euler step to first order, in forward time
    assert np.allclose(samples[:, 1], cycle.point + step * field(0.0, cycle.point), atol=1e-4)
    assert np.all(samples.max(axis=1) <= cycle.state_max + 1e-12)
    assert np.allclose(samples.max(axis=1), cycle.state_max, atol=1e-4)


def test_floquet_multipliers_of_a_three_state_cycle():
    # polar form of this Hopf oscillator (direct calculation): r' = r (1 - r^2), angle' = 2, and
    # z' = -3 z + x; so the cycle r = 1 has period pi and multipliers 1, e^(-2 pi) (radial) and
    # e^(-3 pi) (z)
    model = define_model("hopf_with_lag", {"x": 0.1, "y": 0.0, "z": 1.0},
                         {"x": "(1 - x^2 - y^2)*x - 2*y", "y": "(1 - x^2 - y^2)*y + 2*x",
                          "z": "-3*z + x"}, cycle_hz=1.0, loop_hz=100.0)
    cycle = find_limit_cycle(model)
    assert cycle.stable and cycle.period == pytest.approx(math.pi, rel=1e-9)
    assert cycle.multipliers[cycle.trivial_index] == pytest.approx(1.0, abs=1e-8)
    assert np.allclose(sorted(cycle.floquet_log), [-3 * math.pi, -2 * math.pi], atol=1e-7)
    assert cycle.stability_margin == pytest.approx(math.exp(-2 * math.pi), rel=1e-7)


# -- the combined analysis -----------------------------------------------------------------------


def _plain(value) -> bool:
    if isinstance(value, dict):
        return all(isinstance(k, str) and _plain(v) for k, v in value.items())
    if isinstance(value, list):
        return all(_plain(v) for v in value)
    return value is None or type(value) in (bool, int, float, str)


def test_analysis_json_is_plain_data_with_the_agreed_keys():
    analysis = analyse(vanderpol(1.0))
    data = analysis.to_json()
    assert _plain(data)
    json.dumps(data, allow_nan=False)
    assert analysis.ok
    assert {"model", "params", "equilibria", "cycle"} <= set(data)
    assert data["model"] == "vanderpol" and data["params"] == {"mu": 1.0}
    assert data["equilibria"] == [{"state": [0.0, 0.0],
                                   "eigenvalues": data["equilibria"][0]["eigenvalues"],
                                   "kind": "unstable focus"}]
    assert {"found", "stable", "period", "state_min", "state_max", "floquet", "floquet_log",
            "isolated", "verdict", "stability_margin"} <= set(data["cycle"])
    assert len(data["cycle"]["floquet"]) == 2 and all(len(p) == 2 for p in data["cycle"]["floquet"])


def test_json_of_a_model_without_a_cycle_is_plain_too():
    data = analyse(vanderpol(-1.0)).to_json()
    assert _plain(data)
    assert data["cycle"]["found"] is False and data["cycle"]["period"] is None


def test_report_names_the_equilibrium_the_cycle_and_the_trivial_multiplier():
    text = format_report(analyse(vanderpol(1.0)))
    assert "unstable focus: nearby states spiral out" in text
    assert "period: 6.66328" in text
    assert "trivial" in text
    assert "stable limit cycle" in text


@pytest.mark.parametrize(("mu", "t_end"), [(0.1, 320.0), (0.5, 120.0), (2.0, 60.0), (10.0, 80.0)])
def test_period_and_multiplier_to_the_issue_accuracy_over_the_damping_range(mu, t_end):
    # Reference library: scipy's DOP853 at rtol 1e-13 from (2, 0); after the transient two
    # successive upward crossings of x = 0 give the period, and the divergence mu (1 - x^2)
    # integrated over that period along the same dense solution gives ln of the nontrivial
    # multiplier (Liouville's formula). Targets: period to 1e-8 relative, multiplier to 1e-6.
    model = vanderpol(mu)
    f = model.vector_field()

    def rising(t, x):
        return x[0]

    rising.direction = 1.0
    solution = solve_ivp(f, (0.0, t_end), [2.0, 0.0], method="DOP853", rtol=1e-13, atol=1e-13,
                         events=rising, dense_output=True)
    crossings = solution.t_events[0]
    start, end = crossings[-2], crossings[-1]
    times = np.linspace(start, end, 200_001)
    x = solution.sol(times)[0]
    log_multiplier = simpson(mu * (1 - x**2), x=times)
    cycle = cycle_at(mu)
    assert cycle.period == pytest.approx(end - start, rel=1e-8)
    assert abs(cycle.floquet_log[0] - log_multiplier) <= 1e-6  # the multiplier to 1e-6 relative
