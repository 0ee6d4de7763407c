"""Outputs to actuators: declared in model files and in Python, planned as operations of the
integer program, run by golden, computed by the C and proved bit-exact, never leaving their limits
and never moving faster than their slew limit; bad declarations are refused with a clear error."""

from __future__ import annotations

import math
import re
import subprocess
from dataclasses import replace
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from conftest import HIP

from orbitfix.gen.c.emit import render_host_harness, render_model, render_trace, render_units
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.model.model_file import ModelFileError, load_model, read_model_file
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.verify.cli.main import main
from orbitfix.verify.proofs.bit_exact import random_memories
from orbitfix.verify.proofs.drift import run_drift
from orbitfix.verify.proofs.drift.harness import build_drift_module
from orbitfix.verify.proofs.host_check import check_on_host
from orbitfix.verify.report.drift import drift_json, drift_lines
from orbitfix.verify.targets.host_build import build_host_module

HOPF = dict(states={"x": 0.5, "y": 0.0},
            equations={"x": "(1 - x^2 - y^2) * x - 6.283185307179586 * y",
                       "y": "(1 - x^2 - y^2) * y + 6.283185307179586 * x"},
            cycle_hz=1.0, loop_hz=200)
HIP_OUTPUT = ('\n[outputs]\nhip = { value = "x", scale = 30.0, offset = 90.0, unit = "deg", '
              'min = 70.0, max = 110.0, slew = 100.0 }\n')


@pytest.fixture(scope="module")
def fin_drive():
    return design(load_model("fin_drive"))


@pytest.fixture(scope="module")
def limited():
    """Limits inside the cycle's swing (the output sits at them every cycle) and a slew limit
    slower than the cycle (it acts every cycle), both outputs reading the same state."""
    return design(define_model("limited", **HOPF, outputs={
        "pushed": {"value": "x", "scale": 30.0, "offset": 90.0, "unit": "deg", "min": 70.0,
                   "max": 110.0},
        "slowed": {"value": "x", "scale": 30.0, "offset": 90.0, "unit": "deg", "min": 60.0,
                   "max": 120.0, "slew": 60.0}}))


# --- declarations and bad input ----------------------------------------------------------------


def test_file_and_python_api_declare_the_same_output(tmp_path: Path) -> None:
    path = tmp_path / "hip.toml"
    path.write_text(HIP + HIP_OUTPUT)
    from_file = read_model_file(path)
    built = define_model("hip", {"x": 1.0, "y": 0.0},
                         {"x": "mu*x - omega*y - (x^2 + y^2)*x", "y": "omega*x + mu*y - (x^2 + y^2)*y"},
                         {"mu": 1.0, "omega": 6.283185307179586}, cycle_hz=1.0, loop_hz=500,
                         runtime={"omega": {"min": 3.0, "max": 9.0, "rate": 2.0}},
                         outputs={"hip": {"value": "x", "scale": 30.0, "offset": 90.0, "unit": "deg",
                                          "min": 70.0, "max": 110.0, "slew": 100.0}})
    assert from_file.outputs == built.outputs
    assert from_file.describe()["outputs"] == built.describe()["outputs"]


@pytest.mark.parametrize(("entry", "words"), [
    ('{ value = "x", min = 110.0, max = 70.0 }', "min (110) must be below max (70)"),
    ('{ value = "x", min = 70.0, max = 70.0 }', "must be below max"),
    ('{ value = "x", min = 70.0, max = 110.0, slew = -5.0 }', "slew"),
    ('{ value = "x", min = 70.0, max = 110.0, slew = 0.0 }', "slew"),
    ('{ value = "x + speed", min = 70.0, max = 110.0 }', "unknown name"),
    ('{ value = "x", min = 70.0, max = 110.0, scale = 0.0 }', "scale is 0"),
    ('{ value = "x", max = 110.0 }', "missing keys ['min']"),
    ('{ value = "x", min = 70.0, max = 110.0, speed = 3 }', "unknown keys ['speed']"),
    ('{ value = "x", min = 70.0, max = 110.0, unit = 3 }', "unit must be a quoted string"),
    ('{ value = "x", min = 70.0, max = 1e300 }', "not accepted"),
])
def test_a_bad_output_is_refused_naming_the_output_and_its_line(tmp_path: Path, entry: str,
                                                                words: str) -> None:
    path = tmp_path / "hip.toml"
    path.write_text(HIP + f"\n[outputs]\nhip = {entry}\n")
    with pytest.raises(ModelFileError) as caught:
        read_model_file(path)
    message = str(caught.value)
    assert words in message
    assert "'hip'" in message and f"{path}:{len(HIP.splitlines()) + 3}" in message


@pytest.mark.parametrize(("name", "words"), [
    ("x", "already taken by 'x'"), ("Y", "already taken by 'y'"),
    ("omega_target", "already taken"), ("int", "C keyword"), ("saturated_steps", "already has a field"),
    ("HIP_angle", "starts with HIP_"), ("count_t", "_t"), ("t", "cannot be an output name"),
])
def test_an_output_name_unsafe_in_c_or_taken_is_refused(tmp_path: Path, name: str, words: str) -> None:
    path = tmp_path / "hip.toml"
    path.write_text(HIP + f'\n[outputs]\n{name} = {{ value = "x", min = 70.0, max = 110.0 }}\n')
    with pytest.raises(InputError) as caught:
        read_model_file(path)
    assert words in str(caught.value) and name in str(caught.value)


def test_the_command_line_refuses_a_bad_output_with_exit_2(tmp_path: Path, capsys) -> None:
    path = tmp_path / "hip.toml"
    path.write_text(HIP + '\n[outputs]\nhip = { value = "x", min = 110.0, max = 70.0 }\n')
    assert main(["gen", str(path), "-o", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert "[outputs] 'hip'" in err and "Traceback" not in err
    assert not (tmp_path / "out" / "hip.h").exists()


def test_the_python_api_refuses_a_bad_output() -> None:
    with pytest.raises(InputError, match=r"\[outputs\] 'a'.*slew"):
        define_model("osc", **HOPF, outputs={"a": {"value": "x", "min": 0, "max": 1, "slew": -1}})
    with pytest.raises(InputError, match=r"\[outputs\] 'a'.*unknown name"):
        define_model("osc", **HOPF, outputs={"a": {"value": "z", "min": 0, "max": 1}})


def test_limits_too_wide_for_the_word_are_refused_by_the_planner() -> None:
    model = define_model("osc", **HOPF, outputs={"a": {"value": "x", "min": -30000, "max": 30000}})
    with pytest.raises(InputError, match=r"\[outputs\] 'a'.*do not fit a 16-bit word"):
        design(model.with_fixed_point(word_bits=16))


def test_a_slew_below_one_step_of_the_format_is_refused() -> None:
    model = define_model("osc", **HOPF, outputs={"a": {"value": "x", "min": -1, "max": 1,
                                                       "slew": 1e-8}})
    with pytest.raises(InputError, match=r"\[outputs\] 'a'.*below one step of its format"):
        design(model)


def test_an_angle_itself_is_refused_as_an_output_value() -> None:
    model = define_model("phase", {"theta": 0.0}, {"theta": "6.283185307179586"}, cycle_hz=1.0,
                         loop_hz=100, angles=["theta"],
                         outputs={"a": {"value": "theta", "min": -4, "max": 4}})
    with pytest.raises(InputError, match=r"\[outputs\] 'a'.*angle"):
        from orbitfix.gen.program.lowering import lower_outputs, lower_step
        from orbitfix.gen.timing.integrators import get_integrator
        lower_outputs(model, lower_step(model, get_integrator("rk4"), 0.01), 100.0)


# --- the integer program -----------------------------------------------------------------------


def test_outputs_leave_the_oscillator_unchanged_bit_for_bit(fin_drive) -> None:
    # The same model without outputs must give the same step: every operation, format, proof
    # and initial state, and so the same trajectory and count of saturated steps.
    bare = design(replace(fin_drive.model, outputs=()))
    with_outputs = fin_drive.plan.program
    assert with_outputs.ops == bare.plan.program.ops
    assert with_outputs.next_state == bare.plan.program.next_state
    assert with_outputs.counted_clamps == bare.plan.program.counted_clamps
    assert fin_drive.plan.initial_state == bare.plan.initial_state
    assert bare.plan.program.output_program is None and with_outputs.outputs


def test_golden_outputs_follow_the_exact_rule_from_fractions(limited) -> None:
    # Reference: the brief's rule evaluated in exact rationals (Python's fractions) on golden's
    # own states: u = offset + scale * x, y = clamp(u) or clamp(y' + clamp(u - y', -s dt, s dt)),
    # clamp and slew as common practice. Golden may differ only by the rounding of its stored
    # constants and of u (a few steps of u's format; the limits are exact to their own format).
    program = limited.plan.program
    rng = np.random.default_rng(3)
    fx = program.state_fraction_bits[0]
    x = rng.integers(-(1 << fx), 1 << fx, size=400)
    states = np.vstack([x, np.zeros_like(x)])
    memory = random_memories(program, 400, rng)
    new, limited_values = golden.output_values(program, states, memory)
    for j, (slot, spec) in enumerate(zip(program.outputs, limited.model.outputs, strict=True)):
        unit = Fraction(1, 1 << slot.fraction_bits)
        low, high = Fraction(spec.low), Fraction(spec.high)
        clamp = lambda v, a, b: min(max(v, a), b)  # noqa: E731
        tolerance = 8 * Fraction(1, 1 << 22)
        for k in range(x.size):
            u = Fraction(spec.offset) + Fraction(spec.scale) * Fraction(int(x[k]), 1 << fx)
            if spec.slew is None:
                want = clamp(u, low, high)
            else:
                last = clamp(int(memory[j, k]) * unit, low, high)
                step = Fraction(spec.slew) / Fraction(limited.model.rhythm.loop_hz)
                want = clamp(last + clamp(u - last, -step, step), low, high)
            assert abs(int(new[j, k]) * unit - want) <= tolerance
            assert abs(int(limited_values[j, k]) * unit - clamp(u, low, high)) <= tolerance
            assert slot.low <= new[j, k] <= slot.high


def test_limits_are_exact_to_the_output_format(limited) -> None:
    for slot, spec in zip(limited.plan.program.outputs, limited.model.outputs, strict=True):
        # Python's fractions: the stored limits are min and max rounded once to the format,
        # inward (min up, max down).
        scale = 1 << slot.fraction_bits
        assert slot.low == math.ceil(Fraction(spec.low) * scale)
        assert slot.high == math.floor(Fraction(spec.high) * scale)


def stored_limits_inward(built) -> bool:
    """Whether every stored limit of the output section is on the safe side of the declared one
    and within one LSB of it (Python's fractions): min and max, and the largest rise and fall per
    step (slew / loop rate)."""
    section = built.plan.program.output_program
    loop_hz = Fraction(built.model.rhythm.loop_hz)
    ok = True
    for spec in built.model.outputs:
        declared = {"min": (Fraction(spec.low), "low"), "max": (Fraction(spec.high), "high")}
        if spec.slew is not None:
            declared["largest rise per step"] = (Fraction(spec.slew) / loop_hz, "high")
            declared["largest fall per step"] = (-Fraction(spec.slew) / loop_hz, "low")
        for what, (limit, side) in declared.items():
            op = next(op for op in section.ops if op.note == f"{spec.name}: {what}")
            stored = Fraction(op.constant, 1 << op.fraction_bits)
            lsb = Fraction(1, 1 << op.fraction_bits)
            ok &= (limit <= stored < limit + lsb) if side == "low" else (limit - lsb < stored <= limit)
    return ok


def test_limits_and_rates_round_inward_so_no_output_passes_them(monkeypatch) -> None:
    # A limit that rounded to nearest could let an output half an LSB past its declared min or
    # max, or move half an LSB a step faster than its slew (common practice for a hard limit:
    # round it toward the safe side). Neither 70.3, 109.7 nor 61.7 / 200 is a binary fraction.
    model = define_model("inward", **HOPF, outputs={
        "hip": {"value": "x", "scale": 30.0, "offset": 90.0, "unit": "deg", "min": 70.3,
                "max": 109.7, "slew": 61.7}})
    built = design(model)
    assert stored_limits_inward(built)
    # golden over two cycles from the initial state: every move within the declared rate, exactly
    program = built.plan.program
    slot = program.outputs[0]
    _, outputs = golden.run_with_outputs(program, list(built.plan.initial_state),
                                         built.plan.initial_outputs, 400)
    moves = {abs(int(a) - int(b)) for a, b in zip(outputs[1:, 0], outputs[:-1, 0], strict=True)}
    assert Fraction(max(moves), 1 << slot.fraction_bits) <= Fraction(61.7) / 200
    assert max(moves) > 0 and Fraction(70.3) <= Fraction(int(outputs[:, 0].min()),
                                                           1 << slot.fraction_bits)
    # seeded fault: limits rounded to nearest, as every other constant
    from orbitfix.gen.program import operations
    from orbitfix.gen.program.quantisation import quantise

    monkeypatch.setattr(operations, "quantise_limit", lambda real, bits, side: quantise(real, bits))
    assert not stored_limits_inward(design(model))


def test_reaching_a_limit_is_not_a_saturated_step(limited) -> None:
    program = limited.plan.program
    _, outputs = golden.run_with_outputs(program, limited.plan.initial_state,
                                         limited.plan.initial_outputs, 1000)
    _, counts = golden.run_counted(program, limited.plan.initial_state, 1000)
    assert counts[-1] == 0
    pushed, slowed = program.outputs
    assert np.sum(outputs[:, 0] == pushed.high) > 50 and np.sum(outputs[:, 0] == pushed.low) > 50
    # the slew limit acts: some steps move by the largest step, in the output's own units
    moves = np.abs(np.diff(outputs[:, 1])) / 2.0 ** slowed.fraction_bits
    assert np.sum(np.isclose(moves, slowed.slew_step, atol=2.0 ** -slowed.fraction_bits)) > 50
    assert moves.max() <= slowed.slew_step + 2.0 ** -slowed.fraction_bits


def test_init_starts_the_memory_at_the_clamped_value_of_the_initial_state(limited) -> None:
    plan = limited.plan
    want = golden.output_values(plan.program, np.reshape(plan.initial_state, (-1, 1)),
                                np.zeros((2, 1), dtype=np.int64))[1][:, 0]
    assert list(plan.initial_outputs) == want.tolist()
    # x = 0.5 gives u = 105 deg, inside both outputs' limits: the memories start there, and the
    # first step moves them by the cycle's own motion (under the slew step), no ramp from zero
    first = golden.run_with_outputs(plan.program, plan.initial_state, plan.initial_outputs, 1)[1]
    for j, slot in enumerate(plan.program.outputs):
        assert first[0, j] / 2.0 ** slot.fraction_bits == pytest.approx(105.0, abs=1e-6)
        assert abs(first[1, j] - first[0, j]) / 2.0 ** slot.fraction_bits < 0.3


# --- C: header, units, bit-exact proof and seeded faults ---------------------------------------


def test_header_and_units_give_each_output_its_format_unit_and_macros(fin_drive) -> None:
    files = render_model(fin_drive.model, fin_drive.timing, fin_drive.integrator, fin_drive.plan)
    header, source = files["fin_drive.h"], files["fin_drive.c"]
    slot = fin_drive.plan.program.outputs[0]
    assert f"FIN_DRIVE_FIN_ANGLE_FRACTION_BITS = {slot.fraction_bits}, /* output fin_angle, in deg" in header
    assert "int32_t fin_angle; /* output, Q9.23 in deg" in header
    assert "FIN_DRIVE_OUTPUT_COUNT = 1" in header
    assert re.search(r"state->fin_angle = INT32_C\(-?\d+\);", source)
    assert "state->fin_angle = o" in source
    assert "double" not in source and "float" not in source
    units = render_units(fin_drive.model, fin_drive.timing, fin_drive.integrator,
                         fin_drive.plan)["fin_drive_units.h"]
    assert "#define FIN_DRIVE_FIN_ANGLE_FROM_REAL(r)" in units
    assert "#define FIN_DRIVE_FIN_ANGLE_TO_REAL(v)" in units


def test_outputs_are_bit_exact_on_the_host(fin_drive) -> None:
    outcome = check_on_host(fin_drive, states=50_000, steps=50_000)
    assert outcome.report.bit_exact, outcome.report.first_mismatch
    assert outcome.report.output_states_compared == 50_000
    assert outcome.report.output_steps_compared == 50_000


def _seeded(fin_drive, tmp_path: Path, note: str, sign: int) -> object:
    """The C with the output constant first used at ``note`` moved by one step of the output's
    format (a change finer than that can round away: the same bits, an equivalent mutant)."""
    plan = fin_drive.plan
    report = next(c for c in plan.output_constants if c.note == note)
    shift = max(0, report.format.fraction_bits - plan.program.outputs[0].fraction_bits)
    change = lambda v: v + sign * (1 << shift)  # noqa: E731
    files = render_model(fin_drive.model, fin_drive.timing, fin_drive.integrator, plan)
    source = files["fin_drive.c"]
    found = re.search(r"static const int32_t (k\d+) = (?:INT32_C\((-?\d+)\)|\(-INT32_C\(\d+\) - 1\));"
                      rf" /\* [^*]*first use: {re.escape(note)}\)", source)
    assert found, note
    edited = source.replace(found.group(0), found.group(0).replace(
        f"INT32_C({found.group(2)})", f"INT32_C({change(int(found.group(2)))})"))
    assert edited != source
    for name, text in files.items():
        (tmp_path / name).write_text(edited if name == "fin_drive.c" else text)
    return check_on_host(fin_drive, tmp_path, states=20_000, steps=20_000, sanitized_states=0)


@pytest.mark.parametrize(("note", "sign"), [
    ("fin_angle: max", -1),                       # the upper end stop one LSB in
    ("fin_angle: min", +1),                       # the lower end stop one LSB in
    ("fin_angle: max", +1),                       # ... and out
    ("fin_angle: largest rise per step", -1),     # the slew step one LSB short
    ("fin_angle: largest fall per step", +1),
    ("fin_angle: offset", +1),                    # the offset one LSB off
])
def test_a_seeded_fault_in_an_output_is_caught(fin_drive, tmp_path: Path, note: str, sign: int) -> None:
    outcome = _seeded(fin_drive, tmp_path, note, sign)
    mismatch = outcome.report.first_mismatch
    assert mismatch is not None and mismatch.part.startswith("outputs")
    assert "fin_angle" in mismatch.reason


def test_an_edited_output_init_literal_is_caught(fin_drive, tmp_path: Path) -> None:
    files = render_model(fin_drive.model, fin_drive.timing, fin_drive.integrator, fin_drive.plan)
    source = files["fin_drive.c"]
    found = re.search(r"state->fin_angle = INT32_C\((-?\d+)\);", source)
    edited = source.replace(found.group(0), f"state->fin_angle = INT32_C({int(found.group(1)) + 1});")
    for name, text in files.items():
        (tmp_path / name).write_text(edited if name == "fin_drive.c" else text)
    outcome = check_on_host(fin_drive, tmp_path, states=1000, steps=1000, sanitized_states=0)
    assert outcome.report.first_mismatch is not None
    assert outcome.report.first_mismatch.part == "init"
    assert "clamp(u, min, max)" in outcome.report.first_mismatch.reason


# --- drift: ranges and limits over the long runs, at every runtime corner ----------------------


@pytest.fixture(scope="module")
def hip(tmp_path_factory):
    """The shared runtime-parameter model with an output whose limits and slew act every cycle."""
    path = tmp_path_factory.mktemp("hip") / "hip.toml"
    path.write_text(HIP + HIP_OUTPUT)
    return design(read_model_file(path))


def test_outputs_stay_in_their_limits_over_drift_runs_at_every_runtime_corner(hip) -> None:
    report = run_drift(hip, hours=0.02)
    corners = [run for run in report.runs if "omega =" in run.start.name]
    assert len(corners) == 2 ** len(hip.model.runtime_parameters)
    slot = hip.plan.program.outputs[0]
    for run in report.runs:
        assert run.verdict == "pass" or not run.decides, run.reasons
        (output,) = run.outputs
        # C over the whole run, from every start: never outside [min, max]
        assert slot.low <= output["low"] and output["high"] <= slot.high
    by_start = {run.start.name: run.outputs[0] for run in report.runs}
    # u swings from 60 to 120 deg, so both limits act every cycle where the output can follow;
    # at omega = 9 the slew limit keeps it from swinging down to its lower limit (72.5 deg)
    for name in ("nominal", "omega = 3"):
        assert by_start[name]["at_min_steps"] > 0 and by_start[name]["at_max_steps"] > 0
    assert by_start["omega = 9"]["at_min_steps"] == 0 < by_start["omega = 9"]["low"] - slot.low
    # the slew limit (100 deg/s) acts where the swing moves faster: at omega = 6.28 and 9 rad/s
    # (30 deg * omega at the middle), not at 3 rad/s (90 deg/s)
    slewed = {run.start.name: run.outputs[0]["at_slew_steps"] for run in report.runs}
    assert slewed["nominal"] > 0 and slewed["omega = 9"] > 0 and slewed["omega = 3"] == 0
    lines = "\n".join(drift_lines(report))
    assert "output hip: 70 to 110 deg" in lines and "moved by its slew step on" in lines
    assert drift_json(report)["runs"][0]["outputs"][0]["name"] == "hip"


def test_golden_outputs_keep_limits_and_slew_at_every_runtime_corner(hip) -> None:
    # Golden from the initial state at each corner of omega's range (held there): the output never
    # leaves its stored limits and never moves by more than slew / loop_hz (common practice: a
    # slew limiter's bound; the stored step rounds down, so no slack is needed).
    plan, program = hip.plan, hip.plan.program
    slot = program.outputs[0]
    n = program.model_state_count
    bits = program.state_fraction_bits[n]
    lsb = 2.0 ** -slot.fraction_bits
    for omega in (3.0, 9.0):
        start = list(plan.initial_state[:n]) + [round(omega * 2 ** bits)] * 2
        memory = golden.initial_outputs(program, np.array(start))
        _, outputs = golden.run_with_outputs(program, start, memory, 1500)
        assert outputs.min() >= slot.low and outputs.max() <= slot.high
        moves = np.abs(np.diff(outputs[:, 0])) * lsb
        assert moves.max() <= slot.slew_step
        assert np.sum(outputs[:, 0] == slot.high) > 0


def test_drift_catches_an_output_that_leaves_its_limits(hip) -> None:
    # Seeded fault: the C's upper limit moved out by 1000 steps of the output's format; the
    # drift runs in C must see the output above its declared limit and fail.
    files = render_model(hip.model, hip.timing, hip.integrator, hip.plan)
    report = next(c for c in hip.plan.output_constants if c.note == "hip: max")
    source = files["hip.c"]
    literal = f"INT32_C({report.stored})"
    shift = max(0, report.format.fraction_bits - hip.plan.program.outputs[0].fraction_bits)
    assert literal in source
    files["hip.c"] = source.replace(literal, f"INT32_C({report.stored + (1000 << shift)})", 1)
    host = build_drift_module(hip, files)
    outcome = run_drift(hip, hours=0.02, host=host)
    assert outcome.verdict == "fail"
    assert any("output hip left its limits" in reason for run in outcome.runs
               for reason in run.reasons)


@pytest.mark.slow
def test_a_trimmed_design_replans_its_outputs_and_stays_bit_exact(tmp_path: Path) -> None:
    # 16-bit Van der Pol rounding half up is trimmed (its constants move), so the proven ranges
    # of its next state may move too: the outputs are planned again on them.
    from orbitfix.gen.study.trim import trim_design

    (tmp_path / "hip.toml").write_text(HIP + HIP_OUTPUT)
    model = replace(load_model("vanderpol").with_fixed_point(word_bits=16, rounding="half-up"),
                    outputs=read_model_file(tmp_path / "hip.toml").outputs)
    built = design(model)
    trimmed, record = trim_design(built)
    assert record.changed
    assert trimmed.plan.program.outputs
    assert trimmed.plan.program.output_program is not built.plan.program.output_program
    outcome = check_on_host(trimmed, states=20_000, steps=20_000, sanitized_states=0)
    assert outcome.report.bit_exact and outcome.report.output_steps_compared == 20_000



def test_an_output_through_a_cosine_of_an_angle_is_bit_exact() -> None:
    # The issue's own example: hip = r * cos(theta), with theta an angle state (a table lookup
    # in the output, its table shared with the step's when equal).
    model = define_model(
        "polar", {"r": 0.5, "theta": 0.0},
        {"r": "2 * r * (1 - r^2)", "theta": "6.283185307179586 * (1 + 0.1 * sin(theta))"},
        cycle_hz=1.0, loop_hz=400, angles=["theta"],
        outputs={"hip": {"value": "r * cos(theta)", "scale": 30.0, "offset": 90.0, "unit": "deg",
                         "min": 45.0, "max": 135.0, "slew": 200.0}})
    built = design(model)
    assert any(op.kind == "cos" for op in built.plan.program.output_program.ops)
    outcome = check_on_host(built, states=20_000, steps=20_000)
    assert outcome.report.bit_exact, outcome.report.first_mismatch
    assert outcome.report.output_steps_compared == 20_000


def test_the_self_test_checks_the_outputs_and_fails_on_an_output_constant(fin_drive,
                                                                         tmp_path: Path) -> None:
    # The self-test compares the outputs' fields at its checkpoints: it passes on its own C and
    # fails when the output's offset is one LSB of its format off.
    assert main(["gen", "fin_drive", "-o", str(tmp_path)]) == 0
    (tmp_path / "run.c").write_text('#include "fin_drive_selftest.h"\n'
                                    "int main(void) { return fin_drive_selftest(); }\n")
    assert "and every output" in (tmp_path / "fin_drive_selftest.h").read_text()
    flags = ["-std=c99", "-Wall", "-Wextra", "-Wconversion", "-Wsign-conversion", "-pedantic",
             "-Werror", "-O2"]

    def run() -> int:
        subprocess.run(["gcc", *flags, "fin_drive.c", "fin_drive_selftest.c", "run.c", "-o", "run"],
                       cwd=tmp_path, check=True)
        return subprocess.run([str(tmp_path / "run")], check=False).returncode

    assert run() == 0
    report = next(c for c in fin_drive.plan.output_constants if c.note == "fin_angle: offset")
    shift = max(0, report.format.fraction_bits - fin_drive.plan.program.outputs[0].fraction_bits)
    source = (tmp_path / "fin_drive.c").read_text()
    literal = f"INT32_C({report.stored})"
    assert literal in source
    (tmp_path / "fin_drive.c").write_text(
        source.replace(literal, f"INT32_C({report.stored + (1 << shift)})", 1))
    # a checkpoint fails (u is one LSB coarser than the output, so the change shows where the
    # rounding turns, within the first checkpoints)
    assert 1 <= run() <= 16


@pytest.mark.slow
def test_switching_the_gait_keeps_every_output_within_its_limits_and_slew(tmp_path: Path) -> None:
    # The check: switching pattern (walk to trot, at run time, through the ramped
    # pattern_mix) keeps every output's step within its slew limit, in golden and in the C.
    # The built-in's hip outputs (gen/model/library/walking_platform.toml): the slew limit sits
    # above the cycle's fastest swing, so on the gaits it never acts; the switch must not make it.
    built = design(load_model("walking_platform"))
    assert len(built.plan.program.outputs) == 4
    program, plan = built.plan.program, built.plan
    n = program.model_state_count
    start = np.array(plan.initial_state, dtype=np.int64)
    start[n + 1] = 1 << program.state_fraction_bits[n + 1]  # pattern_mix's target: the trot
    states, outputs = golden.run_with_outputs(program, start, plan.initial_outputs, 2000)
    mix = states[:, n] / 2.0 ** program.state_fraction_bits[n]
    assert mix[0] == 0 and mix[-1] == pytest.approx(1.0, abs=1e-3)  # the switch happened
    for j, slot in enumerate(program.outputs):
        lsb = 2.0 ** -slot.fraction_bits
        assert outputs[:, j].min() >= slot.low and outputs[:, j].max() <= slot.high
        assert np.abs(np.diff(outputs[:, j])).max() * lsb <= slot.slew_step
        # and the switch never needed it: no step as large as the slew step (nor on the gaits)
        assert np.abs(np.diff(outputs[:, j])).max() * lsb < slot.slew_step - lsb
    # the C through the same switch: every state and output at every step, bit for bit
    sources = render_model(built.model, built.timing, built.integrator, plan)
    traced = render_trace(built.model, built.timing, built.integrator, plan)
    host = build_host_module({**sources, **traced}, render_host_harness(built.model, program),
                             "walking_platform.h")
    io, memory = start.astype(np.int32), np.array(plan.initial_outputs, dtype=np.int32)
    record = np.empty((2000, io.size), dtype=np.int32)
    memory_record = np.empty((2000, memory.size), dtype=np.int32)
    ffi = host.ffi
    host.lib.orbitfix_harness_run_outputs(
        ffi.from_buffer("int32_t[]", io), ffi.from_buffer("int32_t[]", memory), 2000,
        ffi.from_buffer("int32_t[]", record), ffi.from_buffer("int32_t[]", memory_record))
    assert np.array_equal(record, states[1:]) and np.array_equal(memory_record, outputs[1:])


def test_an_output_whose_arithmetic_is_not_proven_is_refused(monkeypatch) -> None:
    # Seeded fault: the formats of the outputs' values sized from ranges a hundred times too
    # small (as a wrong interval rule would); the integer proof from the next state's sure range
    # must then find a result that can leave the word, and the planner refuses the output.
    from orbitfix.gen.program import outputs as planning

    real = planning.interval_ranges
    monkeypatch.setattr(planning, "interval_ranges", lambda program, low, high: [
        (a / 100, b / 100) for a, b in real(program, low, high)])
    model = define_model("osc", **HOPF, outputs={"a": {"value": "x", "scale": 30.0, "offset": 90.0,
                                                       "min": 60.0, "max": 120.0}})
    with pytest.raises(InputError, match=r"\[outputs\] 'a'.*can leave the 32-bit word"):
        design(model)
