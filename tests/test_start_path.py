"""The plan holds the start-up path, and the integer map's first cycles follow the float step map
(L2 against L1), with seeded faults each check must catch."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest

from orbitfix.gen.analysis.near_rest import near_rest_starts
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design, plan_step, start_path_steps
from orbitfix.gen.program import golden
from orbitfix.gen.program.lowering import evaluate_real
from orbitfix.gen.study.start_path import check_start_path, plan_warnings


@pytest.fixture(scope="module")
def fin():
    return design(load_model("phase_amplitude"))


def _cycle_only_plan(built):
    """The seeded fault: the plan as it was before it held the path (the cycle's box only, so
    r_dot, zero on the cycle, gets a range of almost zero width)."""
    return plan_step(built.model, built.integrator, built.timing.step, built.analysis.cycle.samples)


def test_the_path_plan_never_saturates_and_follows_the_float_map(fin) -> None:
    path = check_start_path(fin)
    assert path.saturation is None and path.saturated_steps == 0
    assert path.parting < 1e-4
    assert path.ok


def test_a_cycle_only_plan_saturates_and_is_named(fin) -> None:
    path = check_start_path(fin, plan=_cycle_only_plan(fin))
    assert not path.ok
    assert path.saturation is not None
    # r_dot, held near zero on the cycle, leaves the range the step was proved for at once: the
    # step holds it at the range's edge (it was the product 20*r_dot at the word's edge before
    # the step held its states)
    assert path.saturation.note == "r_dot" and path.saturation.held
    assert path.saturation.step == 2
    assert path.saturation.format.startswith("Q")
    held = next(op.held for op in _cycle_only_plan(fin).program.ops if op.note == "r_dot")
    assert path.saturation.integer in held
    assert any("saturates at step 2" in p and "range's edge" in p for p in path.problems())


def test_a_wrong_constant_parts_from_the_float_map(fin) -> None:
    """Seeded fault: the stored constant 100 (a^2/4) off by a tenth in every stage; golden and C
    would still agree bit for bit, but the integer map is no longer the model's."""
    plan = fin.plan
    ops = list(plan.program.ops)
    for index, op in enumerate(ops):
        if op.kind == "scale" and op.note.endswith("100*r"):
            ops[index] = replace(op, constant=int(op.constant * 1.1))
    wrong = replace(plan, program=replace(plan.program, ops=tuple(ops)))
    path = check_start_path(fin, plan=wrong)
    assert path.saturation is None
    assert path.parting > path.tolerance
    assert not path.ok


def _critically_damped(r0: float, target: float, a: float, t: np.ndarray) -> np.ndarray:
    """x'' + 2 w x' + w^2 x = 0 with x = r - R, x(0) = r0 - R, x'(0) = 0 has the solution
    x(t) = x(0) (1 + w t) exp(-w t) (the standard critically damped solution, common practice).
    The model's r'' = a (a/4 (R - r) - r') is that equation with w = a / 2."""
    w = a / 2.0
    return target + (r0 - target) * (1.0 + w * t) * np.exp(-w * t)


@pytest.fixture(scope="module")
def phase_chain():
    """The eight-joint chain's design, made once for the tests that read it."""
    return design(load_model("phase_chain"))


@pytest.mark.slow
def test_phase_chain_amplitude_follows_the_closed_form_solution(phase_chain) -> None:
    """The generated 32-bit step (golden; verify proves the C gives its bits) from the model's
    own initial state against the closed-form solution, and the old cycle-only plan against it."""
    built = phase_chain
    program = built.plan.program
    r = program.state_names.index("r1")
    params = built.model.parameter_values
    steps = math.ceil(2 * built.timing.steps_per_cycle)
    t = np.arange(steps + 1) * built.timing.step
    exact = _critically_damped(built.model.initial_state[r], params["R"], params["a"], t)
    run = golden.run(program, np.asarray(built.plan.initial_state), steps)
    amplitude = run[:, r] / 2.0 ** program.state_fraction_bits[r]
    assert np.max(np.abs(amplitude - exact)) < 1e-4
    assert amplitude.max() <= params["R"] + 1e-6  # critically damped: never overshoots
    wrong = _cycle_only_plan(built)
    bad = golden.run(wrong.program, np.asarray(wrong.initial_state), steps)
    bad_amplitude = bad[:, r] / 2.0 ** wrong.program.state_fraction_bits[r]
    assert np.max(np.abs(bad_amplitude - exact)) > 0.01
    assert not check_start_path(built, plan=wrong).ok


def _critically_damped_from(x0: float, v0: float, target: float, a: float, t: np.ndarray) -> np.ndarray:
    """The closed form of a critically damped second-order system (common practice): with
    x = r - R, x'' + 2 w x' + w^2 x = 0 from x(0) = x0, x'(0) = v0 has the solution
    x(t) = (x0 + (v0 + w x0) t) exp(-w t). The model file's r'' = a (a/4 (R - r) - r') is that
    equation with w = a / 2 (2 w = a, w^2 = a^2 / 4)."""
    w = a / 2.0
    return target + (x0 + (v0 + w * x0) * t) * np.exp(-w * t)


@pytest.mark.slow
def test_phase_chain_compiled_c_follows_the_critically_damped_closed_form(phase_chain) -> None:
    """The generated 32-bit C itself, started by its own init function, against the closed form
    for every joint's amplitude r_i and rate r_dot_i (the coupling does not enter r's equation).
    The tolerance is the start-up path's: 1e-4 of the set point here, far inside the 5 % parting
    verify allows."""
    from orbitfix.verify.proofs.drift import build_drift_module

    built = phase_chain
    program = built.plan.program
    host = build_drift_module(built)
    ffi, lib = host.ffi, host.lib
    count = len(program.state_names)
    state = np.zeros(count, dtype=np.int32)
    lib.orbitfix_harness_init(ffi.from_buffer("int32_t[]", state))
    initial = state.copy()  # what the C's own init function set
    steps = math.ceil(2 * built.timing.steps_per_cycle)
    record = np.zeros(steps * count, dtype=np.int32)
    lib.orbitfix_harness_run(ffi.from_buffer("int32_t[]", state), steps,
                             ffi.from_buffer("int32_t[]", record))
    rows = np.vstack([initial, record.reshape(steps, count)])
    params = built.model.parameter_values
    t = np.arange(steps + 1) * built.timing.step
    w = params["a"] / 2
    for joint in range(1, 9):
        r, r_dot = program.state_names.index(f"r{joint}"), program.state_names.index(f"r_dot{joint}")
        x0 = built.model.initial_state[r] - params["R"]
        v0 = built.model.initial_state[r_dot]
        exact = _critically_damped_from(x0, v0, params["R"], params["a"], t)
        rate = (v0 - w * (v0 + w * x0) * t) * np.exp(-w * t)  # its derivative, the same closed form
        got = rows[:, r] / 2.0 ** program.state_fraction_bits[r]
        got_rate = rows[:, r_dot] / 2.0 ** program.state_fraction_bits[r_dot]
        assert np.max(np.abs(got - exact)) < 1e-4 * params["R"], joint
        assert np.max(np.abs(got_rate - rate)) < 1e-4 * params["a"] * params["R"], joint
        assert got.max() <= params["R"] + 1e-6  # critically damped from below: never overshoots


@pytest.mark.slow
def test_gen_warns_when_the_16_bit_orbit_runs_slow() -> None:
    model = load_model("vanderpol")
    # Heun's method rounding toward minus infinity: about +1,100 ppm (measured; rounding half up
    # keeps it at -340 ppm, and RK4 at +630 ppm)
    built = design(replace(model, fixed_point=replace(model.fixed_point, word_bits=16,
                                                      rounding="truncate", integrator="heun")))
    stepped, warnings = plan_warnings(built, check_start_path(built))
    assert stepped is not None and stepped.period_error_ppm > 1000
    assert any("ppm in period" in w for w in warnings)
    _, quiet = plan_warnings(design(model), check_start_path(design(model)))
    assert quiet == []


def test_the_plan_covers_the_paths_from_the_starts_near_rest() -> None:
    # The drift proof's starts near the unstable equilibrium are planned for: the float step map
    # from each stays inside the plan's box over the planned steps.
    built = design(load_model("vanderpol"))
    near, _ = near_rest_starts(built.analysis)
    assert len(near) == 3 and not any(np.allclose(s.offset, s.offset[0]) for s in near)
    low, high = np.array(built.plan.box).T[:2]
    program = built.plan.program
    state = np.stack([s.point for s in near], axis=1)
    for _ in range(start_path_steps(built.model)):
        values = evaluate_real(program, state)
        state = np.stack([values[i] for i in program.next_state])
        assert np.all(state >= low[:2, None]) and np.all(state <= high[:2, None])


def test_a_start_far_from_the_cycle_widens_the_box() -> None:
    # The seeded fault for the test above: a start three times the cycle's size must widen the box,
    # so a plan that ignored extra starts would be caught.
    built = design(load_model("vanderpol"))
    far = 3.0 * np.asarray(built.analysis.cycle.state_max, dtype=float).reshape(-1, 1)
    plain = plan_step(built.model, built.integrator, built.timing.step, built.analysis.cycle.samples,
                      path_steps=start_path_steps(built.model))
    wider = plan_step(built.model, built.integrator, built.timing.step, built.analysis.cycle.samples,
                      path_steps=start_path_steps(built.model), extra_starts=far)
    assert wider.box[0][1] > 2.5 * plain.box[0][1] / 1.5
    assert wider.signal_format.fraction_bits < plain.signal_format.fraction_bits
