"""Basin sampling (gen/analysis/basin.py) and the basin verb, on radial models whose basins are exact.

Each model here is x' = P(r^2) x - y, y' = x + P(r^2) y, which in polar form is r' = P(r^2) r,
theta' = 1 (common practice: a radial polynomial puts cycles exactly at the roots of P). A start's
fate then follows from its radius alone, which is the reference every outcome is checked against.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from orbitfix.gen.analysis.basin import CYCLE, GROWS, box_starts, sample_basin
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.definition import define_model


def radial(name: str, rate: str, x0: float = 1.0, **parameters: float):
    s = "(x^2 + y^2)"
    p = rate.replace("S", s)
    return define_model(name, {"x": x0, "y": 0.0},
                        {"x": f"({p})*x - y", "y": f"x + ({p})*y"}, parameters,
                        cycle_hz=1.0, loop_hz=100.0)


def radii(sample) -> np.ndarray:
    return np.hypot(sample.starts[:, 0], sample.starts[:, 1])


def test_stable_origin_inside_an_unstable_cycle():
    # r' = r (mu + r^2 - r^4), mu = -0.1: cycles at r^2 = (1 -+ sqrt(1 + 4 mu)) / 2 (exact): the
    # inner one unstable, the outer one stable; the origin is stable
    model = radial("subcritical_drive", "-0.1 + S - S^2")
    box = {"x": (-1.5, 1.5), "y": (-1.5, 1.5)}
    sample = sample_basin(model, box_starts(model, box, grid=16), box)
    border = math.sqrt((1 - math.sqrt(1 - 0.4)) / 2)
    r = radii(sample)
    clear = np.abs(r - border) > 0.05
    assert clear.sum() > 200
    for radius, outcome in zip(r[clear], np.array(sample.outcomes)[clear], strict=True):
        expected = CYCLE if radius > border else "settles at the stable focus (0, 0)"
        assert outcome == expected
    assert sample.fraction_on_cycle == pytest.approx(np.mean(r > border), abs=0.02)


def test_outer_starts_grow_without_bound():
    # r' = r (r^2 - 1)(r^2 - 4): the cycle r = 1 is stable, r = 2 unstable, beyond it r blows up
    model = radial("runaway", "(S - 1)*(S - 4)", x0=0.5)
    box = {"x": (-3.0, 3.0), "y": (-3.0, 3.0)}
    sample = sample_basin(model, box_starts(model, box, grid=14), box, periods=20)
    r = radii(sample)
    clear = np.abs(r - 2.0) > 0.1
    outcomes = np.array(sample.outcomes)
    assert np.all(outcomes[clear & (r < 2)] == CYCLE)
    assert np.all(outcomes[clear & (r > 2)] == GROWS)


def test_another_cycle_is_named():
    # r' = -0.2 r (r^2 - 1)(r^2 - 2.25)(r^2 - 4): stable cycles at r = 1 and r = 2, unstable at 1.5
    model = radial("two_rhythms", "-0.2*(S - 1)*(S - 2.25)*(S - 4)", x0=0.5)
    box = {"x": (-2.4, 2.4), "y": (-2.4, 2.4)}
    sample = sample_basin(model, box_starts(model, box, random=120, seed=3), box)
    assert sample.cycle.period == pytest.approx(2 * math.pi, rel=1e-8)   # theta' = 1, exact
    r = radii(sample)
    clear = np.abs(r - 1.5) > 0.1
    for radius, outcome in zip(r[clear], np.array(sample.outcomes)[clear], strict=True):
        if radius < 1.5:
            assert outcome == CYCLE
        else:
            assert outcome.startswith("reaches another cycle (period 6.28319")


def test_grid_and_random_starts():
    model = radial("plain", "1 - S")
    grid = box_starts(model, {"x": (-1.0, 1.0)}, grid=5)
    assert grid.shape == (5, 2) and np.all(grid[:, 1] == 0.0)      # y held at its initial value
    assert np.allclose(grid[:, 0], [-1.0, -0.5, 0.0, 0.5, 1.0])
    draws = box_starts(model, {"x": (2.0, 3.0), "y": (-1.0, 0.0)}, random=50, seed=1)
    assert draws.shape == (50, 2) and np.all((draws[:, 0] >= 2) & (draws[:, 0] <= 3))
    again = box_starts(model, {"x": (2.0, 3.0), "y": (-1.0, 0.0)}, random=50, seed=1)
    assert np.array_equal(draws, again)


@pytest.mark.parametrize(("box", "options", "message"), [
    ({"z": (0.0, 1.0)}, {"grid": 4}, "no state 'z'"),
    ({"x": (1.0, 0.0)}, {"grid": 4}, "lower to a higher"),
    ({"x": (0.0, math.inf)}, {"grid": 4}, "finite"),
    ({"x": (0.0, 1.0)}, {"grid": 1}, "at least 2"),
    ({"x": (0.0, 1.0)}, {}, "either"),
    ({}, {"grid": 4}, "box"),
])
def test_bad_boxes_are_input_errors(box, options, message):
    with pytest.raises(InputError, match=message):
        box_starts(radial("plain", "1 - S"), box, **options)


def test_basin_command_json_and_exit_codes(capsys, tmp_path):
    from orbitfix.verify.cli.main import main

    path = tmp_path / "fin_drive.toml"
    # an invented demo: a fin drive's rhythm with a unit-radius cycle
    path.write_text('name = "fin_drive"\n[states]\nx = { initial = 0.5 }\ny = { initial = 0.0 }\n'
                    '[parameters]\nmu = { value = 1.0 }\n[equations]\n'
                    'x = "(mu - x^2 - y^2)*x - y"\ny = "x + (mu - x^2 - y^2)*y"\n'
                    '[rhythm]\ncycle_hz = 1.0\nloop_hz = 100\n')
    code = main(["basin", str(path), "--box", "x=-2:2", "--box", "y=-2:2", "--samples", "6", "--json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 0
    # every start but the origin reaches r = 1 (r' = r (1 - r^2)); a 6 x 6 grid misses the origin
    assert data["fraction_on_cycle"] == 1.0 and data["starts"] == 36
    code = main(["basin", str(path), "--box", "x=-2:2", "--set", "mu=-1"])
    out, _ = capsys.readouterr()
    assert code == 1 and "no basin" in out
    code = main(["basin", str(path), "--box", "x=-2"])
    _, err = capsys.readouterr()
    assert code == 2 and "NAME=LOW:HIGH" in err


@pytest.mark.slow
def test_a_stiff_model_stops_at_the_wall_clock_budget_inside_a_check():
    # Regression (common practice: a budget bounds all the work): Van der Pol at mu = 1000 needs
    # millions of RK4 steps between two checks; the integration read the clock only at the checks,
    # so a 1 s budget ran for hours. Now it stops, says so once, and leaves the starts undecided.
    from orbitfix.gen.analysis.basin import UNDECIDED
    from orbitfix.gen.model.model_file import load_model

    model = load_model("vanderpol").with_parameters({"mu": 1000.0})
    box = {"x": (-3.0, 3.0)}
    sample = sample_basin(model, box_starts(model, box, grid=3), box, seconds=1.0)
    ran_out = [note for note in sample.notes if "1 s budget ran out" in note]
    assert len(ran_out) == 1
    assert set(sample.outcomes) == {UNDECIDED}
