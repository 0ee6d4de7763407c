"""Pattern switching at run time in networks of phase oscillators (oscillator 'phase_amplitude'):
each coupling term's phase bias is blended by the runtime parameter pattern_mix through the
angle-difference identity (gen/model/networks.py, _phase_amplitude).

References: sin(d - phi) = cos(phi) sin(d) - sin(phi) cos(d) (the angle-difference identity,
common practice); the chain's lags i * waves / count of a cycle (common practice for swimming
robots, gen/model/networks.py chain_lags); a rate limiter's travel time, range / rate (common
practice)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from orbitfix.gen.errors import InputError
from orbitfix.gen.model import networks
from orbitfix.gen.model.networks import MIX, build_network, chain_lags

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


@pytest.mark.parametrize("second", [-1.0, 0.5])
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
    got = _field(_chain(1.0, -1.0).with_parameters({MIX: 0.0}), states)
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
    # Only the last oscillator's lag changes (0.75 to 0.25), so only the links to it are blended.
    model = build_network("four", lags=[0, 0.25, 0.5, 0.75], switch_to=[0, 0.25, 0.5, 0.25],
                          switch_rate=1.0, cycle_hz=1.0, loop_hz=100, oscillator="phase_amplitude",
                          links="neighbours")
    assert MIX not in model.equation_text[0] and MIX not in model.equation_text[3]
    assert "sin(theta1 - theta2 - 1.5707963267948966)" in model.equation_text[3]
    assert MIX in model.equation_text[6] and MIX in model.equation_text[9]
    assert model.network.switch_lags == (0.0, 0.25, 0.5, 0.25)
    (mix,) = model.runtime_parameters
    assert (mix.name, mix.low, mix.high, mix.rate) == (MIX, 0.0, 1.0, 1.0)


@pytest.mark.parametrize("change, said", [
    ({"switch_to": [0.0, 0.5]}, "has 2 lags for 4 oscillators"),
    ({"switch_to": chain_lags(COUNT, -1.0)}, "needs a positive switch_rate"),
    ({"switch_to": chain_lags(COUNT, -1.0), "switch_rate": 0.0}, "needs a positive switch_rate"),
])
def test_a_bad_switch_is_refused(change: dict, said: str) -> None:
    with pytest.raises(InputError, match=said):
        build_network("chain4", lags=chain_lags(COUNT, 1.0), cycle_hz=1.0, loop_hz=100,
                      oscillator="phase_amplitude", links="neighbours", **change)
