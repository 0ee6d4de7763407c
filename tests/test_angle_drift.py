"""Drift and the stepped-cycle study for models with phases: the crossing rule on the circle
against the closed form of a pure rotation, the C harness against the same rule in Python on one
orbit, the common-turn symmetry decided from the program, a seeded phase-rate fault the drift proof
and gen's warnings must catch, and verify phase_chain passing with default settings."""

from __future__ import annotations

import json
import math
from dataclasses import replace

import numpy as np
import pytest

from orbitfix.gen.model.definition import define_model
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design, program_states
from orbitfix.gen.program import golden
from orbitfix.gen.study.discrete_cycle import integer_cycle
from orbitfix.gen.study.section import Section, section_for, turns_together, wrap_word
from orbitfix.gen.study.start_path import check_start_path, plan_warnings
from orbitfix.verify.cli.main import main
from orbitfix.verify.proofs.drift import (
    build_drift_module,
    choose_starts,
    given_starts,
    harness_statistics,
    run_drift,
)
from orbitfix.verify.proofs.drift.harness import crossing_time, drift_section

HOURS = 1.0


@pytest.fixture(scope="module")
def fin():
    """phase_amplitude: theta' = 2 pi nu, a pure rotation, beside an amplitude at rest."""
    return design(load_model("phase_amplitude"))


@pytest.fixture(scope="module")
def fin_host(fin):
    return build_drift_module(fin)


def _increment(built) -> int:
    """The integer rotation's step: the wrapped change of the phase over one golden step."""
    program = built.plan.program
    start = np.asarray(built.plan.initial_state, dtype=np.int64)
    after = golden.run(program, start, 1)[-1]
    return wrap_word(int(after[0]) - int(start[0]), program.word_bits)


@pytest.mark.parametrize(("w_dt", "direction"), [(1 / 250, 1), (1 / 37.5, 1), (-1 / 80, -1)])
def test_a_pure_rotation_crosses_once_every_one_over_w_dt_steps(w_dt: float, direction: int) -> None:
    # Closed form (common practice): theta[k] = theta[0] + k w dt (turns) passes a fixed phase once
    # every 1 / |w dt| steps. The values are given wrapped into [-1/2, 1/2), so the rule must
    # unwrap them across the wrap; an angle turning backwards is counted in its own direction.
    steps = 5000
    theta = 0.123 + w_dt * np.arange(steps + 1)
    wrapped = (theta + 0.5) % 1.0 - 0.5
    section = Section(state=0, angle=True, level=0.25, direction=direction)
    times = section.crossing_times(wrapped.reshape(-1, 1))[0]
    passed = direction * (theta[[0, -1]] - 0.25)  # whole turns passed, in the turning direction
    assert times.size == math.floor(passed[1]) - math.floor(passed[0]) > 10
    assert np.allclose(np.diff(times), 1 / abs(w_dt), rtol=1e-9)
    # each crossing is where the unwrapped phase meets the section (0.25 + whole turns)
    at = 0.123 + w_dt * times
    assert np.allclose((at - 0.25) - np.round(at - 0.25), 0.0, atol=1e-9)


def test_the_integer_rule_matches_the_float_rule_step_by_step() -> None:
    # The same rule twice: on integer words (what the C harness computes) and on the values in
    # turns; every step of a rotation that crosses the wrap, forwards and backwards.
    word = 16
    for direction, step in ((1, 2917), (-1, -1311)):
        values = [wrap_word(-30000 + k * step, word) for k in range(1000)]
        section = Section(state=0, angle=True, level=0.1, direction=direction)
        level = section.integer_level(word)
        float_times = section.crossing_times(np.asarray(values, dtype=float).reshape(-1, 1) / 2**word)[0]
        int_times = []
        for k in range(1, len(values)):
            found = section.integer_crossing(values[k - 1], values[k], level, word)
            if found is not None:
                int_times.append(k - 1 + found[0] / found[1])
        # the level is rounded to the word, so the times differ by under one LSB over the step
        assert np.allclose(int_times, float_times, atol=1 / abs(step))
        assert len(int_times) == len(float_times) > 10


def test_the_phase_is_the_section_and_amplitudes_are_the_swinging_states(fin) -> None:
    section = drift_section(fin)
    assert section.angle and section.state == 0 and section.turns == 1 and section.direction == 1
    assert section.swinging == (1, 2)  # r and r_dot; theta turns and has no amplitude
    chain = load_model("phase_chain")
    assert [chain.states[i].angle for i in range(0, 24, 3)] == [True] * 8


def test_the_c_harness_crosses_where_the_python_rule_does(fin, fin_host) -> None:
    # One orbit (golden bits, which the C gives: verify proves it), timed by the C harness and by
    # Section.crossing_times on the same integers: same count, same first and last crossing.
    program = fin.plan.program
    section = drift_section(fin)
    start = tuple(fin.plan.initial_state)
    steps = 3000
    for level in (0, 1 << 30, -(1 << 31) + 5):  # phase 0, a quarter turn, just past the half turn
        stats = harness_statistics(fin_host, start, steps, settle=0, window=10, section_level=level)
        orbit = golden.run(program, np.asarray(start), steps)[:, 0] / 2.0**32
        moved = replace(section, level=level / 2.0**32)
        times = moved.crossing_times(orbit.reshape(-1, 1))[0]
        assert stats.counts["crossings"] == times.size > 10
        first = crossing_time(*stats.first_bracket, stats.counts["first_settled_crossing"], level,
                              section, 32)
        last = crossing_time(*stats.last_bracket, stats.counts["last_crossing"], level, section, 32)
        assert first == pytest.approx(times[0], abs=1e-6)
        assert last == pytest.approx(times[-1], abs=1e-6)


def test_an_angle_at_minus_a_half_turn_is_inside_the_planned_range(fin, fin_host) -> None:
    # The word's most negative value is an angle like any other (minus a half turn, the same
    # point as plus a half turn: common practice): a step from it leaves no value outside the
    # planned range (the harness counted it as outside, and failed a two-joint chain whose phase
    # sums met it).
    program = fin.plan.program
    start = list(fin.plan.initial_state)
    start[program.angle_states[0]] = -(1 << 31)
    stats = harness_statistics(fin_host, tuple(start), 1, settle=0, window=1, section_level=0)
    assert stats.counts["range_steps"] == 0


def test_drift_of_a_pure_rotation_is_exactly_a_turn_over_its_increment(fin, fin_host) -> None:
    # Closed form (common practice): an integer rotation by c word units per step makes a turn
    # (2**32 units) every 2**32 / c steps, for all time; the float rotation by w dt = 1/250 turn
    # every 250 steps. The drift proof must find exactly the former, within its rounding of the
    # latter.
    c = _increment(fin)
    report = run_drift(fin, hours=HOURS, host=fin_host)
    nominal = report.runs[0]
    assert report.verdict == "pass" and nominal.horizon == "unbounded", nominal.reasons
    assert report.turns_together
    assert nominal.period_steps == pytest.approx(2**32 / c, rel=1e-15)
    assert nominal.cycle_turns * 2**32 == pytest.approx(c * nominal.cycle_length, abs=1e-6)
    assert nominal.integer_period_steps == nominal.cycle_length * 2**32 // math.gcd(c, 2**32)
    assert abs(nominal.period_steps - 250) < 250 * 4 / c  # a few LSB of rounding per step
    assert fin.timing.steps_per_cycle == pytest.approx(250)


def _faulty_rate(built, factor: float):
    """Seeded fault: the stored 2 pi nu constant (the phase's rate) off by ``factor`` in every
    stage. Golden and the C still agree bit for bit; the rhythm is wrong."""
    plan = built.plan
    rate = {i for i, op in enumerate(plan.program.ops)
            if op.kind == "const" and op.real == pytest.approx(2 * math.pi)}
    assert rate
    ops = tuple(replace(op, constant=round(op.constant * factor)) if i in rate else op
                for i, op in enumerate(plan.program.ops))
    constants = tuple(replace(c, stored=ops[c.index].constant) if c.index in rate else c
                      for c in plan.constants)  # what the C emitter writes
    return replace(built, plan=replace(plan, program=replace(plan.program, ops=ops),
                                       constants=constants))


def test_a_phase_rate_off_by_half_a_percent_fails_the_drift_proof(fin) -> None:
    wrong = _faulty_rate(fin, 1.005)
    report = run_drift(wrong, hours=HOURS)
    nominal = report.runs[0]
    assert report.verdict == "fail" and nominal.horizon == "unbounded"
    assert nominal.period_error_ppm == pytest.approx(-1e6 * 0.005 / 1.005, rel=0.01)
    assert any("ppm off the continuous cycle" in reason for reason in nominal.reasons)
    assert any("phase drifts" in reason for reason in nominal.reasons)


def test_gen_warns_about_a_phase_rate_off_by_half_a_percent(fin) -> None:
    _, quiet = plan_warnings(fin, check_start_path(fin))
    assert quiet == []
    wrong = _faulty_rate(fin, 1.005)
    stepped, warnings = plan_warnings(wrong, check_start_path(fin))
    assert stepped is not None and not stepped.kept
    assert stepped.period_error_ppm == pytest.approx(-1e6 * 0.005 / 1.005, rel=0.01)
    assert any("ppm in period" in w for w in warnings)


def test_the_stepped_cycle_study_times_a_phase_model_per_turn(fin) -> None:
    cycle = fin.analysis.cycle
    stepped = integer_cycle(fin.plan.program, program_states(fin.model, cycle.samples),
                            fin.timing.steps_per_cycle, cycle.state_min, cycle.state_max,
                            turns=cycle.turns)
    assert stepped.kept and stepped.period_steps == pytest.approx(2**32 / _increment(fin), rel=1e-9)
    assert len(stepped.amplitude) == 2  # r and r_dot only


def test_starts_treat_a_phase_as_an_angle(fin) -> None:
    # A quarter turn is pi/2 radians (and so is 2 pi + pi/2): held in turns, 2**30 of a 32-bit word.
    quarter, again = given_starts(fin, ({"theta": math.pi / 2}, {"theta": 2 * math.pi + math.pi / 2}))
    assert quarter[0] == again[0] == 1 << 30
    starts, _ = choose_starts(fin)
    near = next(s for s in starts if s.name == "near saturation")
    assert near.state[0] == fin.plan.initial_state[0]  # a phase wraps: it has no limit to come near
    assert near.state[1] > 0.98 * fin.plan.program.word_max  # r does


def _forced():
    """A phase that drives a linear filter through cos(theta): the step reads the phase itself, not
    only differences of phases, so it does not commute with a common turn."""
    return define_model("forced", {"theta": 0.0, "x": 0.0, "y": 0.0},
                        {"theta": "6.283185307179586", "x": "cos(theta) - x",
                         "y": "sin(theta) - y"}, cycle_hz=1, loop_hz=100, angles=("theta",))


def test_the_common_turn_symmetry_is_decided_from_the_program(fin) -> None:
    assert turns_together(fin.plan.program)
    assert turns_together(design(load_model("phase_chain").with_fixed_point(word_bits=16)).plan.program)
    assert not turns_together(design(_forced()).plan.program)  # cos(theta) reads the phase itself
    assert not turns_together(design(load_model("vanderpol")).plan.program)  # no angles at all


def test_without_the_symmetry_the_whole_state_cycle_decides(fin) -> None:
    # At 16 bits the whole state (phase modulo the word) repeats within the budget: the verdict is
    # judged on that cycle, whole turns of the phase, exactly.
    built = design(_forced().with_fixed_point(word_bits=16))
    report = run_drift(built, hours=HOURS)
    nominal = report.runs[0]
    assert not report.turns_together
    assert nominal.horizon == "unbounded", nominal.reasons
    turns = nominal.cycle_turns
    assert turns == round(turns) and turns >= 1  # the whole state closes after whole turns
    assert nominal.period_steps == pytest.approx(nominal.cycle_length / turns)
    assert nominal.integer_period_steps == nominal.cycle_length
    assert section_for(built.plan.program, built.analysis.cycle.state_min,
                       built.analysis.cycle.state_max).angle


@pytest.mark.slow
def test_verify_phase_chain_passes_with_default_settings(capsys) -> None:
    code = main(["verify", "phase_chain", "--json"])
    data = json.loads(capsys.readouterr().out)
    drift = data["drift"]
    assert code == 0 and data["ok"], drift["runs"][0]["reasons"]
    assert drift["section"]["kind"] == "phase" and drift["section"]["modulo_common_turn"]
    nominal = drift["runs"][0]
    assert nominal["horizon"] == "unbounded" and nominal["verdict"] == "pass"
    assert abs(nominal["period_error_ppm"]) < 1000
