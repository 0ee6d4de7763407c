"""Networks of coupled oscillators (gen/networks.py) and their phase locking (gen/phase_locking.py):
the generated couplings hold the wanted lags, checked against scipy and against the polar form."""

from __future__ import annotations

import functools
import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from orbitfix.gen.analysis.summary import analyse
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.model.networks import GAITS, build_network, chain_lags
from orbitfix.verify.cli.main import main
from orbitfix.verify.report.analysis import format_report


@functools.cache
def analysis_of(name: str, **params: float):
    return analyse(load_model(name).with_parameters(params))


def test_gait_table_pairs_the_legs_as_the_gaits_require() -> None:
    # common practice (order LF, RF, LH, RH): trot moves diagonal legs together, pace same-side
    # legs, bound fore and hind pairs, each pair half a cycle apart; walk is a quarter cycle apart
    lf, rf, lh, rh = range(4)
    assert GAITS["trot"][lf] == GAITS["trot"][rh] and GAITS["trot"][rf] == GAITS["trot"][lh] == 0.5
    assert GAITS["pace"][lf] == GAITS["pace"][lh] and GAITS["pace"][rf] == GAITS["pace"][rh] == 0.5
    assert GAITS["bound"][lf] == GAITS["bound"][rf] and GAITS["bound"][lh] == GAITS["bound"][rh] == 0.5
    assert sorted(GAITS["walk"]) == [0.0, 0.25, 0.5, 0.75]
    assert chain_lags(8, 1.0) == tuple(i / 8 for i in range(8))


@pytest.mark.parametrize("name", ["quadruped_trot", "quadruped_walk"])
def test_gait_network_locks_at_the_wanted_lags(name: str) -> None:
    analysis = analysis_of(name)
    locking = analysis.network
    assert analysis.ok and locking.ok and locking.phase_locked
    assert max(abs(e) for e in locking.lag_errors) < 1e-6
    assert locking.cycles_to_lock is not None
    model = analysis.model
    mu, omega, gamma, k = (model.parameter_values[p] for p in ("mu", "omega", "gamma", "k"))
    # polar form of the rotation-coupled Hopf network on the wanted pattern (direct calculation):
    # each rotated neighbour equals the oscillator itself, so the coupling adds k * m * r to the
    # radial rate (m links) and nothing to the angle: radius sqrt(mu + k m / gamma), period
    # 2 pi / omega
    assert locking.common_period == pytest.approx(2 * math.pi / omega, rel=1e-8)
    radius = math.sqrt(mu + k * 3 / gamma)
    assert np.allclose(analysis.cycle.state_max, radius, rtol=1e-8)


def test_chain_holds_a_travelling_wave_and_reports_its_lock_time() -> None:
    analysis = analysis_of("chain_wave")
    assert analysis.ok
    lags = np.array(analysis.network.lags)
    assert np.allclose(lags, np.arange(8) / 8, atol=1e-6)
    assert analysis.network.cycles_to_lock >= 1   # the start is off the pattern on purpose
    # polar form on the wave (direct calculation): each rotated neighbour points along the
    # oscillator itself, so the coupling only adds k * (sum of the neighbours' radii) to the radial
    # rate; a steady radius r_i then balances gamma (mu - r_i^2) r_i + k sum_j r_j = 0, with the
    # ends (one neighbour) smaller than the inner oscillators (two)
    r = analysis.cycle.state_max[0::2]
    neighbours = np.concatenate([[0.0], r[:-1]]) + np.concatenate([r[1:], [0.0]])
    assert np.allclose((1.0 - r**2) * r + 1.0 * neighbours, 0.0, atol=1e-7)
    assert r[0] < r[3]


def test_lags_agree_with_scipy_from_the_initial_state() -> None:
    # reference library: scipy's DOP853 from the perturbed start; after 60 cycles the upward zero
    # crossings of each leg's x give the lags
    model = load_model("quadruped_walk")
    field = model.vector_field()
    events = []
    for i in range(4):
        def rising(t, x, i=i):
            return x[2 * i]
        rising.direction = 1.0
        events.append(rising)
    run = solve_ivp(field, (0.0, 60.0), model.initial_state, method="DOP853", rtol=1e-11,
                    atol=1e-12, events=events)
    first = run.t_events[0][-2]
    lags = [float(((e[e >= first][0] - first) / 1.0) % 1.0) for e in run.t_events]
    wanted = GAITS["walk"]
    assert np.allclose([((a - b + 0.5) % 1.0) - 0.5 for a, b in zip(lags, wanted, strict=True)],
                       0.0, atol=1e-6)
    assert np.allclose(lags, analysis_of("quadruped_walk").network.lags, atol=1e-6)


def test_repulsive_coupling_fails_the_check_with_exit_1(capsys) -> None:
    code = main(["check", "chain_wave", "--set", "k=-0.3", "--json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 1
    network = data["network"]
    assert not network["ok"]
    for key in ("phase_locked", "lags", "wanted_lags", "lag_errors", "common_period",
                "cycles_to_lock"):
        assert key in network


def test_report_lists_each_oscillator() -> None:
    text = format_report(analysis_of("quadruped_trot"))
    assert "right_hind" in text and "cycles to lock" in text and "phase-locked" in text


NETWORK_FILE = """\
name = "three_fins"
description = "three fin oscillators a third of a cycle apart"

[network]
oscillator = "hopf"
lags = [0, 0.3333333333333333, 0.6666666666666666]
labels = ["left", "middle", "right"]

[parameters]
k = 0.8

[rhythm]
cycle_hz = 1.0
loop_hz = 200
"""


def test_network_file_with_custom_lags(tmp_path: Path) -> None:
    path = tmp_path / "fins.toml"
    path.write_text(NETWORK_FILE)
    model = load_model(str(path))
    assert model.state_names == ("x1", "y1", "x2", "y2", "x3", "y3")
    assert model.network.labels == ("left", "middle", "right")
    assert model.parameter_values["k"] == 0.8
    same = build_network("three_fins", lags=[0, 1 / 3, 2 / 3], cycle_hz=1, loop_hz=200,
                         parameters={"k": 0.8})
    assert same.equation_text == model.equation_text


@pytest.mark.parametrize(("change", "message"), [
    (("lags = [0, 0.3333333333333333, 0.6666666666666666]", 'pattern = "gallop"'), "unknown pattern"),
    (('oscillator = "hopf"', 'oscillator = "hopf"\npattern = "trot"'), "either a pattern or lags"),
    (("k = 0.8", "kappa = 0.8"), "no parameter 'kappa'"),
    (('labels = ["left", "middle", "right"]', 'labels = ["left"]'), "labels must be a list of 3"),
    (('oscillator = "hopf"', 'oscillator = "duffing"'), "unknown oscillator"),
    (('oscillator = "hopf"', 'oscillator = "chain_wave"'), "unknown oscillator"),
    (('oscillator = "hopf"', 'oscillator = "vanderpol"'), "needs coupling, a square matrix"),
    (('oscillator = "hopf"', 'oscillator = "hopf"\ncoupled_state = "x"'), "'coupled_state' is for"),
])
def test_broken_network_files_exit_2_with_a_clear_message(tmp_path: Path, capsys, change,
                                                          message) -> None:
    path = tmp_path / "fins.toml"
    path.write_text(NETWORK_FILE.replace(*change))
    with pytest.raises(InputError, match=message):
        load_model(str(path))
    assert main(["check", str(path)]) == 2
    assert "Traceback" not in capsys.readouterr().err


def test_a_runtime_parameter_of_a_network_file_is_carried_not_dropped(tmp_path: Path) -> None:
    # Regression: a runtime declaration in a network file was once silently ignored; a Hopf or
    # phase network now carries it (the firmware may change k between steps), while a network of
    # single built-in models, which cannot yet, refuses it.
    path = tmp_path / "fins.toml"
    path.write_text(NETWORK_FILE.replace("k = 0.8", "k = { value = 0.8, runtime = true, min = 0.5, "
                                         "max = 1, rate = 0.25 }"))
    (k,) = [p for p in load_model(str(path)).parameters if p.name == "k"]
    assert (k.value, k.runtime, k.low, k.high, k.rate) == (0.8, True, 0.5, 1.0, 0.25)
    pair = (Path(__file__).parent.parent / "gen" / "model" / "library" / "vanderpol_pair.toml")
    path.write_text(pair.read_text().replace("mu = 1.0", "mu = { value = 1.0, runtime = true, "
                                             "min = 0.5, max = 2 }"))
    with pytest.raises(InputError, match="has no runtime parameters yet"):
        load_model(str(path))


