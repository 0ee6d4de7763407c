"""Pattern switching at run time in networks of phase oscillators (oscillator 'phase_amplitude'):
each coupling term's phase bias is blended by the runtime parameter pattern_mix through the
angle-difference identity (gen/model/networks.py, _phase_amplitude).

References: sin(d - phi) = cos(phi) sin(d) - sin(phi) cos(d) (the angle-difference identity,
common practice); the chain's lags i * waves / count of a cycle (common practice for swimming
robots, gen/model/networks.py chain_lags); a rate limiter's travel time, range / rate (common
practice); the phase-locking decay of a chain, exp(-w R 2 (1 - cos(k pi / n)) t) (the path
Laplacian's eigenvalues, spectral graph theory, common practice); the speed and acceleration
bounds of the phases, and the mean value theorem, for the jump checks (direct calculation)."""

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
    assert "eel.toml:7:" in err and "moves by 0 or half a turn" in err and "Traceback" not in err


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


# -- golden and C: a chain of four switched from one wave to half a wave while it runs ------------

STEER = """name = "steer"
description = "four fin joints, one wave along the body switched to half a wave at run time"
[network]
oscillator = "phase_amplitude"
pattern = "chain"
count = 4
waves = 1.0
switch_waves = 0.5
switch_rate = 0.5
[rhythm]
cycle_hz = 1.0
loop_hz = 100
[outputs]
""" + "".join(
    f'joint_{n} = {{ value = "r{n} * cos(theta{n})", scale = 20.0, offset = 90.0, unit = "deg", '
    f'min = 60.0, max = 120.0, slew = 250.0 }}\n' for n in range(1, 5))
# The slew limit, 250 deg/s, sits above the fastest any joint can ever swing: a phase turns at
# most at 2 pi nu + w * (two links) * R = 2 pi + 4 rad/s (each link's r_j (C sin d - S cos d) is
# at most R: (C, S) is a blend of two unit vectors), times 20 deg, about 206 deg/s; so on either
# pattern and through the switch the limiter must never act (direct calculation).
LOOP, SETTLE = 100, 1000  # steps a second; 10 cycles
RAMP = 200  # steps the mix takes from 0 to 1: range / rate = 1 / 0.5 s (a rate limiter's travel)


@pytest.fixture(scope="module")
def steer(tmp_path_factory):
    from orbitfix.gen.pipeline import design

    path = tmp_path_factory.mktemp("steer") / "steer.toml"
    path.write_text(STEER)
    return design(load_model(str(path)))


def _switched_run(built) -> tuple[np.ndarray, np.ndarray]:
    """Golden states and outputs: SETTLE steps at mix 0, then the setter writes the target 1 (as
    the C setter does) and 2 * SETTLE steps follow; rows are after each step (row 0 the start)."""
    from orbitfix.gen.program import golden

    program, plan = built.plan.program, built.plan
    target = program.state_names.index(f"{MIX}_target")
    start = np.array(plan.initial_state, dtype=np.int64)
    first, first_out = golden.run_with_outputs(program, start, plan.initial_outputs, SETTLE)
    told = first[-1].copy()
    told[target] = 1 << program.state_fraction_bits[target]
    then, then_out = golden.run_with_outputs(program, told, first_out[-1], 2 * SETTLE)
    return np.concatenate([first, then[1:]]), np.concatenate([first_out, then_out[1:]])


def _phase_lags(row: np.ndarray, program) -> np.ndarray:
    """Each oscillator's lag after oscillator 1, in cycles in [0, 1), from the integer phases
    (words of a whole turn): (theta_1 - theta_i) / 2 pi, modulo 1 (the lag convention of
    gen/model/networks.py)."""
    bits = program.state_fraction_bits[0]
    phases = np.array([row[program.state_names.index(f"theta{n}")] for n in range(1, 5)])
    return ((phases[0] - phases) % (1 << bits)) / 2.0 ** bits


def _lag_error(lags: np.ndarray, wanted: tuple[float, ...]) -> float:
    return float(np.max(np.abs((lags - np.array(wanted) + 0.5) % 1.0 - 0.5)))


# Lag tolerance: on the pattern every sine vanishes, so the lock is an exact rest point of any
# one-step method too; what is left after 10 cycles is the slowest mode's decay, exp(-w R 2 (1 -
# cos(pi / 4)) T) = exp(-11.7) (the path of 4's Laplacian, as tests/test_phase_oscillators.py), of
# at most half a cycle: 4e-6 cycles, plus the rounding of the biases and of the sine table (a
# few 2^-30 of a turn). 1e-4 cycles (0.036 degrees) keeps a margin of 25 over that.
LAG_TOLERANCE = 1e-4


def _smooth(states: np.ndarray, built) -> bool:
    """Whether no state jumps from 100 steps before the switch to 300 after the ramp's end."""
    program, values = built.plan.program, built.model.parameter_values
    bits = program.state_fraction_bits
    h = 1.0 / LOOP
    around = slice(SETTLE - 100, SETTLE + RAMP + 300)
    for n in range(1, 5):
        theta = program.state_names.index(f"theta{n}")
        r = program.state_names.index(f"r{n}")
        turn = 1 << bits[theta]
        advance = np.diff(states[around, theta]) % turn / turn  # turns a step
        # the speed bound above: no step advances the phase by more than (nu + 2 w R / 2 pi) h
        # turns nor by less than (nu - 2 w R / 2 pi) h (> 0: the phase never runs back)
        fastest = (values["nu"] + 2 * values["w"] * values["R"] / (2 * math.pi)) * h
        slowest = (values["nu"] - 2 * values["w"] * values["R"] / (2 * math.pi)) * h
        # and the advance changes smoothly: |theta''| <= w * 2 links * R * (|d'| + |(C, S)'|),
        # with |d'| <= 2 * 2 w R (two phases' coupling speeds) and |(C, S)'| <= |(c2 - c1, s2 -
        # s1)| * rate <= 2 * 0.5; a step's change of advance is at most h^2 |theta''| (mean value
        # theorem), in turns, with a tenth more for the integrator's own error
        accel = values["w"] * 2 * values["R"] * (4 * values["w"] * values["R"] + 1.0)
        # r has no coupling at all: settled before the switch, it moves by at most two last places
        if not (slowest <= advance.min() and advance.max() <= fastest
                and np.abs(np.diff(advance)).max() <= 1.1 * accel * h * h / (2 * math.pi)
                and np.abs(np.diff(states[around, r])).max() <= 2):
            return False
    return True


def test_the_chain_switches_its_wave_in_golden_without_a_jump(steer) -> None:
    program = steer.plan.program
    states, outputs = _switched_run(steer)
    at = program.state_names.index(MIX)
    one = 1 << program.state_fraction_bits[at]
    mix = states[:, at]
    # before the switch the first pattern's lags, after the ramp and 10 cycles the second's
    assert _lag_error(_phase_lags(states[SETTLE], program), chain_lags(COUNT, 1.0)) < LAG_TOLERANCE
    assert _lag_error(_phase_lags(states[-1], program), chain_lags(COUNT, 0.5)) < LAG_TOLERANCE
    # the ramp: mix moves only after the setter, by at most rate / loop_hz a step, reaching 1
    # within RAMP steps (plus one for the rounding of the per-step move)
    assert np.all(mix[:SETTLE + 1] == 0) and mix[-1] == one
    moves = np.diff(mix)
    assert np.all(moves >= 0) and moves.max() <= 0.5 / LOOP * one + 1
    reached = int(np.argmax(mix == one))
    assert SETTLE + RAMP <= reached <= SETTLE + RAMP + 1
    assert reached + SETTLE <= len(mix)

    # no state jumps across the switch (never reset)
    assert _smooth(states, steer)
    # every output within its limits, no step at its slew limit (the limiter never acted)
    for j, slot in enumerate(program.outputs):
        lsb = 2.0 ** -slot.fraction_bits
        assert outputs[:, j].min() >= slot.low and outputs[:, j].max() <= slot.high
        assert np.abs(np.diff(outputs[:, j])).max() * lsb < slot.slew_step - lsb


def test_a_reset_at_the_switch_is_caught(steer) -> None:
    # Seeded fault: a firmware that switches by starting afresh on the second pattern (the state
    # reset the issue forbids): the jump check must see it.
    from orbitfix.gen.program import golden

    program, plan = steer.plan.program, steer.plan
    states, _ = _switched_run(steer)
    restart = np.array(plan.initial_state, dtype=np.int64)
    restart[program.state_names.index(MIX)] = restart[program.state_names.index(f"{MIX}_target")] \
        = 1 << program.state_fraction_bits[program.state_names.index(MIX)]
    reset = np.concatenate([states[:SETTLE + 1], golden.run(program, restart, 2 * SETTLE)])
    assert not _smooth(reset, steer)


def test_the_second_patterns_biases_negated_fail_the_lag_check(steer, monkeypatch) -> None:
    # Seeded fault: the second pattern's biases negated (its sines' sign lost); the first pattern
    # is right, so the design is made, and the chain settles after the switch on the wave running
    # the other way, half a wave toward the tail: the lag check must see it. (Blending the wrong
    # way round is caught before: the analysis at mix 0 finds the chain off its wanted lags.)
    from orbitfix.gen.pipeline import design

    real, second = networks._bias_terms, chain_lags(COUNT, 0.5)

    def negated(lags, i, j):
        c, s = real(lags, i, j)
        return (c, -s) if lags == second else (c, s)

    monkeypatch.setattr(networks, "_bias_terms", negated)
    wrong = design(load_model(steer.model.source))  # the same file, read again
    states, _ = _switched_run(wrong)
    program = wrong.plan.program
    assert _lag_error(_phase_lags(states[SETTLE], program), chain_lags(COUNT, 1.0)) < LAG_TOLERANCE
    assert _lag_error(_phase_lags(states[-1], program), chain_lags(COUNT, 0.5)) > LAG_TOLERANCE
    assert _lag_error(_phase_lags(states[-1], program), chain_lags(COUNT, -0.5)) < LAG_TOLERANCE


@pytest.mark.slow
def test_the_c_is_bit_exact_through_the_switch(steer) -> None:
    # The C through the same switch, every state and output at every step, bit for bit with
    # golden (as tests/test_outputs.py does for walking_platform); then the host proof with its
    # setter checks (as tests/test_pattern_switch.py).
    from orbitfix.gen.c.emit import render_host_harness, render_model, render_trace
    from orbitfix.verify.proofs.host_check import check_on_host
    from orbitfix.verify.targets.host_build import build_host_module

    program, plan = steer.plan.program, steer.plan
    states, outputs = _switched_run(steer)
    sources = render_model(steer.model, steer.timing, steer.integrator, plan)
    traced = render_trace(steer.model, steer.timing, steer.integrator, plan)
    host = build_host_module({**sources, **traced}, render_host_harness(steer.model, program),
                             "steer.h")
    ffi = host.ffi

    def run_c(start: np.ndarray, memory: np.ndarray, count: int) -> tuple[np.ndarray, np.ndarray]:
        io, memory = start.astype(np.int32), memory.astype(np.int32)
        record = np.empty((count, io.size), dtype=np.int32)
        memory_record = np.empty((count, memory.size), dtype=np.int32)
        host.lib.orbitfix_harness_run_outputs(
            ffi.from_buffer("int32_t[]", io), ffi.from_buffer("int32_t[]", memory), count,
            ffi.from_buffer("int32_t[]", record), ffi.from_buffer("int32_t[]", memory_record))
        return record, memory_record

    record, memory_record = run_c(states[0], outputs[0], SETTLE)
    assert np.array_equal(record, states[1:SETTLE + 1])
    assert np.array_equal(memory_record, outputs[1:SETTLE + 1])
    told = states[SETTLE].copy()
    target = program.state_names.index(f"{MIX}_target")
    told[target] = 1 << program.state_fraction_bits[target]  # what the setter writes
    record, memory_record = run_c(told, outputs[SETTLE], 2 * SETTLE)
    # golden's rows after the setter carry the target too (row SETTLE is before it was written)
    assert np.array_equal(record, states[SETTLE + 1:])
    assert np.array_equal(memory_record, outputs[SETTLE + 1:])
    report = check_on_host(steer, states=2_000, steps=2_000).report
    assert report.bit_exact, report.first_mismatch
    assert report.setters_checked == 1 and report.ramp_steps > 0
