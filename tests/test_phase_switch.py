"""Pattern switching at run time in networks of phase oscillators (oscillator 'phase_amplitude'):
each coupling term's phase bias is blended by the runtime parameter pattern_mix through the
angle-difference identity (gen/model/networks.py, _phase_amplitude).

References: sin(d - phi) = cos(phi) sin(d) - sin(phi) cos(d) (the angle-difference identity,
common practice); the chain's lags i * waves / count of a cycle (common practice for swimming
robots, gen/model/networks.py chain_lags); a rate limiter's travel time, range / rate (common
practice)."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

import orbitfix.gen.model as model_package
from orbitfix.gen.errors import InputError
from orbitfix.gen.model import networks
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.model.networks import GAITS, MIX, build_network, chain_lags
from orbitfix.verify.cli.main import main

COUNT = 4


def _chain(waves: float, switch_waves: float | None = None, **extra: object):
    switch = {} if switch_waves is None else {"switch_to": chain_lags(COUNT, switch_waves),
                                              "switch_rate": 0.5}
    return build_network("chain4", lags=chain_lags(COUNT, waves), cycle_hz=1.0, loop_hz=100,
                         oscillator="phase_amplitude", links="neighbours", pattern="chain",
                         **switch, **extra)


def _field(model, states: np.ndarray) -> np.ndarray:
    return np.array([model.vector_field()(0.0, x) for x in states.T]).T


def _random_states(seed: int = 1, columns: int = 16) -> np.ndarray:
    rng = np.random.default_rng(seed)
    states = rng.uniform(-1.5, 1.5, size=(3 * COUNT, columns))
    states[0::3] = rng.uniform(0.0, 2 * math.pi, size=(COUNT, columns))
    return states


@pytest.mark.parametrize("second", [-0.5, 0.5])
def test_the_blend_is_each_pattern_at_its_end_and_the_identity_between(second: float) -> None:
    # The angle-difference identity: at pattern_mix 0 the switching chain's right-hand side is the
    # one-pattern chain's of the first wave count, at 1 that of the second, at any states (the
    # phases anywhere on the circle). Between, the coupling of j on i is r_j (C sin d - S cos d),
    # d = theta_j - theta_i, with C, S the mix's blend of cos and sin of the two biases, computed
    # here from the biases directly.
    switching = _chain(1.0, second)
    states = _random_states()
    for mix, waves in ((0.0, 1.0), (1.0, second)):
        got = _field(switching.with_parameters({MIX: mix}), states)
        assert np.allclose(got, _field(_chain(waves), states), rtol=1e-12, atol=1e-12)
    mix = 0.3
    got = _field(switching.with_parameters({MIX: mix}), states)
    values = switching.parameter_values
    first, other = chain_lags(COUNT, 1.0), chain_lags(COUNT, second)
    for i in range(COUNT):
        rate = np.full(states.shape[1], 2 * math.pi * values["nu"])
        for j in (i - 1, i + 1):
            if not 0 <= j < COUNT:
                continue
            phi1, phi2 = 2 * math.pi * (first[i] - first[j]), 2 * math.pi * (other[i] - other[j])
            c = (1 - mix) * math.cos(phi1) + mix * math.cos(phi2)
            s = (1 - mix) * math.sin(phi1) + mix * math.sin(phi2)
            d = states[3 * j] - states[3 * i]
            rate += values["w"] * states[3 * j + 1] * (c * np.sin(d) - s * np.cos(d))
        assert np.allclose(got[3 * i], rate, rtol=1e-12, atol=1e-12)


def test_the_blend_the_wrong_way_round_is_caught(monkeypatch) -> None:
    # Seeded fault: the blend runs from the second pattern to the first; at pattern_mix 0 the
    # network is then the second pattern's, which the end check above must see.
    real = networks._blend
    monkeypatch.setattr(networks, "_blend", lambda first, second: real(second, first))
    states = _random_states()
    got = _field(_chain(1.0, 0.5).with_parameters({MIX: 0.0}), states)
    assert not np.allclose(got, _field(_chain(1.0), states), rtol=1e-12, atol=1e-12)


def test_a_network_that_does_not_switch_keeps_its_one_pattern_form() -> None:
    # phi_ij = 2 pi (lag_i - lag_j): one wave along four, a quarter turn between neighbours; the
    # text is today's (so the program, and its fingerprint, of a network that does not switch is
    # unchanged).
    equations = _chain(1.0).equation_text
    assert equations[0] == "6.283185307179586 * nu + w * (r2 * sin(theta2 - theta1 + 1.5707963267948966))"
    assert equations[3] == ("6.283185307179586 * nu + w * (r1 * sin(theta1 - theta2 - "
                            "1.5707963267948966) + r3 * sin(theta3 - theta2 + 1.5707963267948966))")
    assert MIX not in _chain(1.0).parameter_values


def test_terms_whose_biases_agree_keep_the_one_pattern_form() -> None:
    # Only the last oscillator's lag changes (0.75 to 0.5), so only the links to it are blended.
    model = build_network("four", lags=[0, 0.25, 0.5, 0.75], switch_to=[0, 0.25, 0.5, 0.5],
                          switch_rate=1.0, cycle_hz=1.0, loop_hz=100, oscillator="phase_amplitude",
                          links="neighbours")
    assert MIX not in model.equation_text[0] and MIX not in model.equation_text[3]
    assert "sin(theta1 - theta2 - 1.5707963267948966)" in model.equation_text[3]
    assert MIX in model.equation_text[6] and MIX in model.equation_text[9]
    assert model.network.switch_lags == (0.0, 0.25, 0.5, 0.5)
    (mix,) = model.runtime_parameters
    assert (mix.name, mix.low, mix.high, mix.rate) == (MIX, 0.0, 1.0, 1.0)


@pytest.mark.parametrize("change, said", [
    ({"switch_to": [0.0, 0.5]}, "has 2 lags for 4 oscillators"),
    ({"switch_to": chain_lags(COUNT, 0.5)}, "needs a positive switch_rate"),
    ({"switch_to": chain_lags(COUNT, 0.5), "switch_rate": 0.0}, "needs a positive switch_rate"),
    ({"switch_to": chain_lags(COUNT, 5.0), "switch_rate": 0.5}, "same lags as the chain"),
    # 1 wave along 4 is a quarter turn per link, -1 wave minus a quarter: half a turn apart on
    # every link, the first pattern an unstable solution of the second's coupling
    ({"switch_to": chain_lags(COUNT, -1.0), "switch_rate": 0.5}, "moves by 0 or half a turn"),
])
def test_a_bad_switch_is_refused(change: dict, said: str) -> None:
    with pytest.raises(InputError, match=said):
        build_network("chain4", lags=chain_lags(COUNT, 1.0), cycle_hz=1.0, loop_hz=100,
                      oscillator="phase_amplitude", links="neighbours", pattern="chain", **change)


def test_a_hopf_switch_between_opposed_gaits_is_refused_too() -> None:
    # trot (0, 1/2, 1/2, 0) and pace (0, 1/2, 0, 1/2) (gait tables, common practice): each pair of
    # legs is together in one and half a cycle apart in the other, or the same in both
    with pytest.raises(InputError, match="moves by 0 or half a turn"):
        build_network("legs", lags=GAITS["trot"], switch_to=GAITS["pace"], switch_rate=0.5,
                      pattern="trot", switch_pattern="pace", cycle_hz=1.0, loop_hz=100)


# -- the model file: a chain switches its wave count (switch_waves), a gait network its gait ---------

EEL = """name = "eel"
[network]
oscillator = "phase_amplitude"
pattern = "chain"
count = 8
waves = 1.0
switch_waves = -1.0
switch_rate = 0.5
[rhythm]
cycle_hz = 1.0
loop_hz = 100
"""


def test_a_chain_file_switches_its_wave_count(tmp_path: Path) -> None:
    path = tmp_path / "eel.toml"
    path.write_text(EEL)
    model = load_model(str(path))
    # the lags of -1 wave along 8: i * 7/8 of a cycle (the wave running the other way)
    assert model.network.wanted_lags == tuple(i / 8 for i in range(8))
    assert model.network.switch_lags == tuple((-i / 8) % 1.0 for i in range(8))
    assert model.network.switch_pattern == "chain of -1 waves"
    (mix,) = model.runtime_parameters
    assert (mix.name, mix.value, mix.low, mix.high, mix.rate) == (MIX, 0.0, 0.0, 1.0, 0.5)
    # a hopf chain switches alike
    path.write_text(EEL.replace('"phase_amplitude"', '"hopf"'))
    assert load_model(str(path)).network.switch_lags == tuple((-i / 8) % 1.0 for i in range(8))


def test_a_chain_file_whose_wave_only_turns_over_is_refused(tmp_path: Path, capsys) -> None:
    # 1 wave along 4 is a quarter turn per link, -1 wave minus a quarter: half a turn apart
    path = tmp_path / "eel.toml"
    path.write_text(EEL.replace("count = 8", "count = 4"))
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "moves by 0 or half a turn" in err and "Traceback" not in err


def test_a_phase_gait_network_switches_gait(tmp_path: Path) -> None:
    base = (Path(model_package.__file__).parent / "library" / "walking_platform.toml").read_text()
    path = tmp_path / "platform.toml"
    path.write_text(base.replace('oscillator = "hopf"', 'oscillator = "phase_amplitude"')
                    .split("[parameters]")[0] + "[rhythm]\ncycle_hz = 1.0\nloop_hz = 250\n")
    model = load_model(str(path))
    assert model.network.switch_lags == GAITS["trot"] and model.network.switch_pattern == "trot"
    assert [p.name for p in model.runtime_parameters] == [MIX]


@pytest.mark.parametrize("old, new, line, said", [
    ("switch_waves = -1.0\n", "", 7, "needs switch_waves"),
    ("switch_waves = -1.0", 'switch_waves = "back"', 7, "switch_waves must be a number"),
    ("switch_waves = -1.0", 'switch_to = "trot"', 7, "with switch_waves, not switch_to"),
    ("switch_waves = -1.0", "switch_waves = 9.0", 7, "gives the same lags as waves"),
    ("switch_rate = 0.5\n", "", 2, "needs switch_rate"),
    ("switch_rate = 0.5", "switch_rate = -1.0", 8, "switch_rate: -1 is not accepted"),
    ('pattern = "chain"\ncount = 8\nwaves = 1.0', "lags = [0, 0.25, 0.5, 0.75]", 5,
     "only a network with a gait or a chain"),
    ('pattern = "chain"\ncount = 8\nwaves = 1.0', 'pattern = "walk"', 5, "switch_waves is for a chain"),
    ('oscillator = "phase_amplitude"\npattern = "chain"\ncount = 8\nwaves = 1.0',
     'oscillator = "vanderpol"\ncoupling = [[0, 1], [1, 0]]\ncoupled_state = "y"', 6,
     "'switch_waves' is for hopf and phase_amplitude networks"),
])
def test_a_bad_switch_in_a_file_is_refused_with_its_line(tmp_path: Path, capsys, old: str,
                                                         new: str, line: int, said: str) -> None:
    path = tmp_path / "eel.toml"
    assert old in EEL
    path.write_text(EEL.replace(old, new))
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert f"eel.toml:{line}:" in err and said in err and "accepted:" in err
    assert "Traceback" not in err
