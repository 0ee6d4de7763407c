"""The built-in model library: every model loads, documents itself and has the cycle its sources
predict; the ``models`` verb lists them."""

from __future__ import annotations

import functools
import json
import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from orbitfix.gen.analysis.limit_cycle import find_limit_cycle
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.model.model_file import builtin_names, load_model
from orbitfix.verify.cli.main import main

PLANAR = ("vanderpol", "rayleigh", "hopf", "fitzhugh_nagumo")


@functools.cache
def cycle_of(name: str, **params: float):
    return find_limit_cycle(load_model(name).with_parameters(params))


@pytest.mark.parametrize("name", [*PLANAR, "matsuoka", "phase_amplitude"])
def test_builtin_model_documents_itself_and_has_a_stable_cycle(name: str) -> None:
    model = load_model(name)
    assert model.description and model.source == f"built-in:{name}"
    assert all(s.meaning for s in model.states) and all(p.meaning for p in model.parameters)
    assert model.rhythm.loop_hz >= 4 * model.rhythm.cycle_hz
    cycle = cycle_of(name)
    assert cycle.found and cycle.stable and cycle.isolated
    assert cycle.stability_margin < 1.0
    assert abs(cycle.multipliers[cycle.trivial_index] - 1.0) < 1e-6


# -- Hopf normal form: exact ----------------------------------------------------------------------


@pytest.mark.parametrize(("mu", "omega", "gamma"), [(1.0, 2 * math.pi, 1.0), (0.25, 3.0, 2.0),
                                                    (4.0, 0.5, 0.1)])
def test_hopf_radius_period_and_multiplier_are_exact(mu: float, omega: float, gamma: float) -> None:
    # Exact, in polar form (Kuznetsov, Elements of Applied Bifurcation Theory, sec. 3.4, the
    # normal form): r' = gamma (mu - r^2) r, angle' = omega; so the cycle is the circle of radius
    # sqrt(mu), the period 2 pi / omega, and the radial multiplier exp(d r'/dr * T) =
    # exp(-2 gamma mu T)
    cycle = cycle_of("hopf", mu=mu, omega=omega, gamma=gamma)
    period = 2 * math.pi / omega
    assert cycle.period == pytest.approx(period, rel=1e-8)
    assert np.allclose(cycle.state_max, math.sqrt(mu), rtol=1e-8)
    assert np.allclose(cycle.state_min, -math.sqrt(mu), rtol=1e-8)
    assert cycle.floquet_log[0] == pytest.approx(-2 * gamma * mu * period, rel=1e-6)
    assert cycle.stability_margin == pytest.approx(math.exp(-2 * gamma * mu * period), rel=1e-6)


def test_hopf_below_the_bifurcation_rests() -> None:
    # Kuznetsov (sec. 3.4): for mu < 0 the origin is a stable focus and there is no cycle
    cycle = cycle_of("hopf", mu=-0.5)
    assert not cycle.found and cycle.outcome == "settles"


# -- Rayleigh: Van der Pol by differentiation ------------------------------------------------------


@pytest.mark.parametrize("mu", [0.5, 1.0, 3.0])
def test_rayleigh_speed_is_a_van_der_pol_oscillator(mu: float) -> None:
    # Differentiating Rayleigh's z'' - mu (z' - z'^3 / 3) + z = 0 gives, for v = z',
    # v'' - mu (1 - v^2) v' + v = 0: Van der Pol's equation (Strogatz, Nonlinear Dynamics and
    # Chaos, 1994, in its exercises on Rayleigh's equation, from memory; the relation itself is one
    # line of calculus).
    # The change of variables (z, v) -> (v, v') is a diffeomorphism, so the period, the range of
    # v and the Floquet multipliers agree with Van der Pol's x.
    rayleigh, vanderpol = cycle_of("rayleigh", mu=mu), cycle_of("vanderpol", mu=mu)
    assert rayleigh.period == pytest.approx(vanderpol.period, rel=1e-8)
    assert rayleigh.state_max[1] == pytest.approx(vanderpol.state_max[0], rel=1e-7)
    assert rayleigh.floquet_log[0] == pytest.approx(vanderpol.floquet_log[0], rel=1e-6)


# -- FitzHugh-Nagumo against scipy ----------------------------------------------------------------


def scipy_period(name: str, t_end: float, **params: float) -> float:
    """The spacing of the last two upward crossings of the first state through its mean, from
    scipy's DOP853 at tight tolerance (reference library)."""
    model = load_model(name).with_parameters(params)
    field = model.vector_field()
    level = float(np.mean(cycle_of(name, **params).samples[0]))

    def rising(t, x):
        return x[0] - level

    rising.direction = 1.0
    run = solve_ivp(field, (0.0, t_end), model.initial_state, method="DOP853", rtol=1e-12,
                    atol=1e-12, events=rising)
    crossings = run.t_events[0]
    assert run.success and crossings.size >= 3
    return float(crossings[-1] - crossings[-2])


def test_fitzhugh_nagumo_period_matches_scipy() -> None:
    cycle = cycle_of("fitzhugh_nagumo")
    # reference library: scipy's DOP853 at rtol 1e-12, after a transient of six periods (the
    # multiplier is about e^-38 per period, so the transient is long gone)
    assert cycle.period == pytest.approx(scipy_period("fitzhugh_nagumo", 280.0), rel=1e-8)


def test_fitzhugh_nagumo_without_input_rests() -> None:
    # FitzHugh (Biophysical Journal, 1961): with a = 0.7, b = 0.8, phi = 0.08 and no input
    # current the resting state is stable (from memory: the rest point near v = -1.20)
    cycle = cycle_of("fitzhugh_nagumo", I=0.0)
    assert not cycle.found and cycle.outcome == "settles"
    assert cycle.settled_at.state[0] == pytest.approx(-1.1994, abs=1e-3)


# -- Matsuoka's half-centre oscillator ------------------------------------------------------------


def matsuoka_frequency(tau: float, big_t: float, beta: float, w: float) -> float:
    """Matsuoka, 'Analysis of a neural oscillator', Biological Cybernetics 104 (2011), the
    describing-function estimate of the angular frequency (from memory):
    omega = (1 / T) sqrt(((tau + T) beta - tau w) / (tau w))."""
    return math.sqrt(((tau + big_t) * beta - tau * w) / (tau * w)) / big_t


@pytest.mark.parametrize(("tau", "big_t", "beta", "w"), [(1.0, 2.0, 2.5, 2.0), (0.5, 1.0, 2.5, 2.0),
                                                         (1.0, 3.0, 2.5, 2.0), (0.25, 0.5, 2.5, 2.5)])
def test_matsuoka_period_follows_the_describing_function_estimate(tau, big_t, beta, w) -> None:
    cycle = cycle_of("matsuoka", tau=tau, T=big_t, beta=beta, w=w)
    estimate = 2 * math.pi / matsuoka_frequency(tau, big_t, beta, w)
    # the estimate keeps only the first harmonic of max(0, u); Matsuoka (2011) reports it close
    # for adaptation times a few times the rise time, so 2 % here
    assert cycle.period == pytest.approx(estimate, rel=0.02)


def test_matsuoka_cycle_is_symmetric_between_the_two_neurons() -> None:
    # the two neurons are mirror images (swap 1 and 2): on the cycle each spans the same range
    cycle = cycle_of("matsuoka")
    assert np.allclose(cycle.state_min[:2], cycle.state_min[2:], rtol=1e-8)
    assert np.allclose(cycle.state_max[:2], cycle.state_max[2:], rtol=1e-8)


def test_matsuoka_with_weak_inhibition_does_not_oscillate() -> None:
    # Matsuoka (Biological Cybernetics 52, 1985): oscillation needs w > 1 + tau / T; here
    # 1 + tau / T = 1.5 > w = 1.2, so both neurons settle at a common rest point
    cycle = cycle_of("matsuoka", w=1.2)
    assert not cycle.found and cycle.outcome == "settles"


# -- robustness: quasi-periodic motion --------------------------------------------------------------


def test_two_uncoupled_oscillators_at_incommensurate_frequencies_are_not_a_cycle() -> None:
    # frequencies 1 and sqrt(2): the motion fills a torus and never repeats (common practice)
    model = define_model("torus", {"x1": 1, "y1": 0, "x2": 0.5, "y2": 0},
                         {"x1": "(1 - x1^2 - y1^2) * x1 - y1", "y1": "(1 - x1^2 - y1^2) * y1 + x1",
                          "x2": "(1 - x2^2 - y2^2) * x2 - w * y2",
                          "y2": "(1 - x2^2 - y2^2) * y2 + w * x2"},
                         {"w": math.sqrt(2)}, cycle_hz=1, loop_hz=100)
    cycle = find_limit_cycle(model)
    assert not cycle.found and cycle.outcome == "no repeat"
    assert "quasi-periodic" in cycle.verdict


# -- the models verb --------------------------------------------------------------------------------


def test_models_verb_lists_every_builtin(capsys) -> None:
    assert main(["models"]) == 0
    out = capsys.readouterr().out
    for name in builtin_names():
        assert any(line.split()[0] == name for line in out.splitlines()[1:])


def test_models_verb_json(capsys) -> None:
    assert main(["models", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert next(iter(data)) == "ok" and data["ok"] is True
    entries = data["models"]
    assert [e["name"] for e in entries] == builtin_names()
    hopf = next(e for e in entries if e["name"] == "hopf")
    assert hopf["states"] == ["x", "y"] and set(hopf["params"]) == {"mu", "omega", "gamma"}
    assert all(set(e) == {"name", "states", "params", "description", "network"} and e["description"]
               for e in entries)
    for entry in entries:  # the list is read from the files; the built model must agree with it
        model = load_model(entry["name"])
        assert entry["states"] in (None, list(model.state_names))
        assert (entry["states"] is None) == (entry["network"] is not None)
        if entry["network"] is not None:  # and the count of oscillators, a gait's four limbs too
            assert entry["network"]["count"] == model.network.count, entry["name"]
    platform = next(e for e in entries if e["name"] == "walking_platform")
    assert platform["network"]["switch_to"] == "trot"


# -- sin and cos: analysed exactly, refused by the fixed-point lowering with a clear message --------


def test_a_model_with_sin_is_generated_and_tanh_is_refused_with_exit_2(tmp_path, capsys) -> None:
    # a Van der Pol-like oscillator with a pendulum's restoring force sin(x) (a demo of our own):
    # the analysis handles sin exactly and the lowering through its table; tanh has no
    # fixed-point form yet
    model = define_model("swing", {"x": 0.5, "y": 0.0},
                         {"x": "y", "y": "0.2 * (1 - x^2) * y - sin(x)"}, cycle_hz=1, loop_hz=200)
    cycle = find_limit_cycle(model)
    assert cycle.found and cycle.stable
    path = tmp_path / "swing.toml"
    path.write_text('name = "swing"\n[states]\nx = 0.5\ny = 0.0\n[equations]\nx = "y"\n'
                    'y = "0.2 * (1 - x^2) * y - sin(x)"\n[rhythm]\ncycle_hz = 1\nloop_hz = 200\n')
    assert main(["gen", str(path), "-o", str(tmp_path / "out")]) == 0
    assert (tmp_path / "out" / "swing.c").exists()
    capsys.readouterr()
    path.write_text(path.read_text().replace("sin(x)", "tanh(x)"))
    assert main(["gen", str(path), "-o", str(tmp_path / "out2")]) == 2
    err = capsys.readouterr().err
    assert "no fixed-point form yet" in err and "Traceback" not in err


@pytest.mark.parametrize("name", ["phase_amplitude", "phase_chain", "vanderpol_pair"])
def test_check_of_the_newer_builtins_gives_a_clear_verdict_and_exit_0(name: str, capsys) -> None:
    assert main(["check", name]) == 0
    out = capsys.readouterr().out
    assert "verdict: stable limit cycle" in out
    model = load_model(name)
    assert all(s.meaning for s in model.states) and all(p.meaning for p in model.parameters)
