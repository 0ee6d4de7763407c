"""Runtime parameters: declared in a model file, held in the generated state with a setter,
moved toward their target at a limited rate and never out of range, covered by the plan at every
corner, and bit-exact in C."""

from __future__ import annotations

import math
import re
import subprocess
from pathlib import Path

import numpy as np
import pytest
from conftest import HIP

from orbitfix.gen.errors import InputError
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import CornerError, design
from orbitfix.gen.program import golden
from orbitfix.verify.cli.main import main
from orbitfix.verify.proofs.host_check import check_on_host


@pytest.fixture(scope="module")
def hip(tmp_path_factory):
    path = tmp_path_factory.mktemp("hip") / "hip.toml"
    path.write_text(HIP)
    return design(load_model(str(path)))


def test_the_program_carries_each_parameter_and_its_target(hip) -> None:
    program = hip.plan.program
    assert program.state_names == ("x", "y", "omega", "omega_target")
    assert program.model_state_count == 2
    # the target is left as it is by the step
    assert program.next_state[3] == 3


def set_target(hip, state: np.ndarray, value: float) -> np.ndarray:
    bits = hip.plan.program.state_fraction_bits[3]
    state = state.copy()
    state[3] = round(value * 2**bits)
    return state


def test_ramp_moves_at_the_rate_limit_and_never_leaves_the_range(hip) -> None:
    # A rate limiter (common practice): |change per step| <= rate / loop_hz, stopping at the target;
    # the stored largest change rounds down, so with no slack.
    program = hip.plan.program
    bits = program.state_fraction_bits[2]
    per_step = 2.0 / 500 * 2**bits
    # Far above the high limit of 9: the largest target the setter's word can carry.
    top = program.word_max / 2**program.state_fraction_bits[3]
    assert top > 30
    state = set_target(hip, np.array(hip.plan.initial_state, dtype=np.int64), top)
    omegas = [state[2]]
    for _ in range(800):
        state = golden.step(program, state.reshape(-1, 1))[:, 0]
        omegas.append(state[2])
    steps = np.diff(np.array(omegas, dtype=float))
    assert np.all(np.abs(steps) <= per_step)
    assert omegas[-1] == round(9.0 * 2**bits)  # held at its high limit, not at the target
    assert np.all(np.array(omegas) <= round(9.0 * 2**bits))
    rising = steps[steps > 0]
    assert rising.size == pytest.approx((9.0 - 2 * math.pi) / 2.0 * 500, abs=2)


def test_the_ramp_limits_round_inward(hip) -> None:
    # Python's fractions: the stored low and high limits and the largest rise and fall per step
    # are on the safe side of the declared ones (low up, high down, rates toward zero) and within
    # one LSB of them, so no parameter leaves its range or moves faster than its rate.
    from fractions import Fraction

    parameter = hip.model.runtime_parameters[0]
    step = Fraction(parameter.rate) / Fraction(hip.model.rhythm.loop_hz)
    declared = {"low": (Fraction(parameter.low), "low"), "high": (Fraction(parameter.high), "high"),
                "largest rise per step": (step, "high"), "largest fall per step": (-step, "low")}
    for what, (limit, side) in declared.items():
        op = next(op for op in hip.plan.program.ops if op.note == f"{parameter.name} {what}")
        stored = Fraction(op.constant, 1 << op.fraction_bits)
        lsb = Fraction(1, 1 << op.fraction_bits)
        assert (limit <= stored < limit + lsb) if side == "low" else (limit - lsb < stored <= limit)


def integer_period(program, state: np.ndarray, steps: int) -> float:
    """Mean steps between upward zero crossings of x after the given run."""
    x = golden.run(program, state, steps)[:, 0].astype(float)
    up = np.flatnonzero((x[:-1] < 0) & (x[1:] >= 0))
    times = up + (-x[up]) / (x[up + 1] - x[up])
    tail = times[len(times) // 2:]
    return float((tail[-1] - tail[0]) / (len(tail) - 1))


def test_setting_the_frequency_changes_the_integer_cycles_period(hip) -> None:
    # Hopf normal form: the cycle's period is 2 pi / omega exactly, so at the loop's fixed step
    # the period in steps scales as omega_0 / omega_1.
    program = hip.plan.program
    start = set_target(hip, np.array(hip.plan.initial_state, dtype=np.int64), 1.25 * 2 * math.pi)
    period = integer_period(program, start, 8000)
    assert period == pytest.approx(500 / 1.25, rel=2e-4)
    # a target beyond the range is held at its limit: omega = 9, period 500 * 2 pi / 9
    start = set_target(hip, np.array(hip.plan.initial_state, dtype=np.int64), 1.5 * 2 * math.pi)
    assert integer_period(program, start, 8000) == pytest.approx(500 * 2 * math.pi / 9, rel=2e-4)


def test_c_is_bit_exact_with_any_target(hip) -> None:
    # Random states put the target anywhere in the word, so the range clamp runs in both back ends.
    outcome = check_on_host(hip, states=50_000, steps=50_000)
    assert outcome.report.bit_exact, outcome.report.first_mismatch


def test_the_plan_covers_every_corner(hip) -> None:
    assert sorted(c["omega"] for c, _ in hip.corners) == [3.0, 9.0]
    bits = hip.plan.program.state_fraction_bits[2]
    assert 9.0 * 2 < 2.0 ** (31 - bits)  # the parameter's format holds its range with the margin


def test_a_corner_without_a_cycle_fails_with_exit_1(tmp_path: Path, capsys) -> None:
    path = tmp_path / "hip.toml"
    path.write_text(HIP.replace("mu = 1.0",
                                "mu = { value = 1.0, runtime = true, min = -0.5, max = 2.0 }"))
    with pytest.raises(CornerError, match=r"mu = -0\.5"):
        design(load_model(str(path)))
    assert main(["gen", str(path), "-o", str(tmp_path / "out")]) == 1
    assert "corner of its runtime ranges" in capsys.readouterr().err


@pytest.mark.parametrize(("entry", "words"), [
    ("omega = { value = 6.0, runtime = true, min = 9.0, max = 3.0 }", "min < max"),
    ("omega = { value = 10.0, runtime = true, min = 3.0, max = 9.0 }", "outside its runtime range"),
    ("omega = { value = 6.0, runtime = true, min = 3.0, max = 9.0, rate = -1 }", "positive"),
    ("omega = { value = 6.0, min = 3.0, max = 9.0 }", "not runtime = true"),
    ("omega = { value = 6.0, runtime = true, max = 9.0 }", "needs runtime = true, min and max"),
])
def test_broken_runtime_declarations_are_refused(tmp_path: Path, entry: str, words: str) -> None:
    path = tmp_path / "hip.toml"
    text = HIP.split("omega = {")[0] + entry + "\n" + HIP.split("meaning = \"angular frequency\" }\n")[1]
    path.write_text(text)
    with pytest.raises(InputError, match=words):
        load_model(str(path))


def test_mismatch_reads_every_state_in_its_own_format(hip, tmp_path) -> None:
    # Seeded fault: the firmware's first constant is off by one. The mismatch's real reading of
    # the state before it uses each state's own Q format (common practice: integer / 2**f), not
    # state 0's: omega and its target have fewer fraction bits than x and y here.
    from orbitfix.gen.c.emit import render_model

    files = render_model(hip.model, hip.timing, hip.integrator, hip.plan)
    found = re.search(r"static const int32_t k0 = INT32_C\((-?\d+)\);", files["hip.c"])
    assert found
    files["hip.c"] = files["hip.c"].replace(
        found.group(0), f"static const int32_t k0 = INT32_C({int(found.group(1)) + 1});")
    for name, text in files.items():
        (tmp_path / name).write_text(text)
    # one LSB of h/2 shows in about one step in 6,500 from the proven ranges: enough states to see it
    outcome = check_on_host(hip, tmp_path, states=200_000, steps=100, sanitized_states=0)
    mismatch = outcome.report.first_mismatch
    assert mismatch is not None
    bits = hip.plan.program.state_fraction_bits
    assert bits[2] != bits[0]
    shown = mismatch.to_json()["state_before_real"]
    assert shown == [v / 2**f for v, f in zip(mismatch.state_before, bits, strict=True)]


def test_firmware_holds_only_init_step_and_setters(hip, tmp_path) -> None:
    # The shipped pair carries no trace path: the object defines exactly init, step and the
    # setter (read with nm, the toolchain's symbol lister), and the text never names a trace.
    from orbitfix.gen.c.emit import render_model

    files = render_model(hip.model, hip.timing, hip.integrator, hip.plan)
    for name, text in files.items():
        assert "trace" not in text.lower(), name
        (tmp_path / name).write_text(text)
    subprocess.run(["gcc", "-std=c99", "-O2", "-c", "hip.c"], cwd=tmp_path, check=True)
    listed = subprocess.run(["nm", "-g", "--defined-only", "hip.o"], cwd=tmp_path, check=True,
                            capture_output=True, text=True).stdout
    assert {line.split()[-1] for line in listed.splitlines()} == {"hip_init", "hip_step",
                                                                 "hip_set_omega"}


def test_header_declares_the_setter(hip) -> None:
    from orbitfix.gen.c.emit import render_model

    header = render_model(hip.model, hip.timing, hip.integrator, hip.plan)["hip.h"]
    assert "void hip_set_omega(hip_state_t *state, int32_t target);" in header
    assert "HIP_OMEGA_FRACTION_BITS" in header


def test_drift_runs_at_every_corner_against_the_cycle_there(hip) -> None:
    # Hopf normal form: period 2 pi / omega exactly, so at omega = 3 and 9 the loop's 500 steps
    # per nominal cycle become 500 * 2 pi / omega steps.
    from orbitfix.verify.proofs.drift import run_drift

    report = run_drift(hip, hours=0.02)
    corners = {run.start.name: run for run in report.runs if run.against}
    assert set(corners) == {"omega = 3", "omega = 9"}
    for name, omega in (("omega = 3", 3.0), ("omega = 9", 9.0)):
        run = corners[name]
        assert run.verdict == "pass", run.reasons
        assert run.period_steps == pytest.approx(500 * 2 * math.pi / omega, rel=1e-6)
    assert report.verdict == "pass"


def test_stepped_cycle_studies_carry_the_runtime_states(hip) -> None:
    # The studies run the whole program, runtime parameter and target included, held at the
    # model's value: the Hopf cycle (radius sqrt(mu) = 1, period 2 pi / omega) is kept.
    from orbitfix.gen.pipeline import program_states
    from orbitfix.gen.study.discrete_cycle import float_cycle, integer_cycle
    from orbitfix.gen.study.plan_study import coefficient_effect

    cycle = hip.analysis.cycle
    starts = program_states(hip.model, cycle.samples)
    assert starts.shape == (4, cycle.samples.shape[1])
    assert np.all(starts[2:] == hip.model.parameter_values["omega"])
    for measure in (float_cycle, integer_cycle):
        stepped = measure(hip.plan.program, starts, hip.timing.steps_per_cycle, cycle.state_min,
                          cycle.state_max, cycles=3)
        assert stepped.kept, stepped.verdict
    with pytest.raises(ValueError, match="program_states"):
        float_cycle(hip.plan.program, cycle.samples, hip.timing.steps_per_cycle, cycle.state_min,
                    cycle.state_max)
    assert coefficient_effect(hip).warning is None


@pytest.mark.slow
def test_plan_verb_works_on_a_model_with_a_runtime_parameter(tmp_path: Path, capsys) -> None:
    # The README's runtime omega put into the built-in hopf model (issue: `plan` ended in an
    # internal error because the studies planned the program a second way, without runtime=).
    from orbitfix.gen.model.model_file import MODELS_FOLDER

    text = (MODELS_FOLDER / "hopf.toml").read_text()
    lines = [("omega = { value = 6.2832, runtime = true, min = 3.0, max = 9.0, rate = 2.0 }"
              if line.startswith("omega =") else line) for line in text.splitlines()]
    path = tmp_path / "hopf_runtime.toml"
    path.write_text("\n".join(lines) + "\n")
    assert main(["plan", str(path), "--json"]) == 0
    captured = capsys.readouterr()
    assert "Traceback" not in captured.err
    import json

    result = json.loads(captured.out)
    assert [s["integrator"] for s in result["integrators"]] == ["euler", "symplectic-euler", "heun", "rk4"]
    rk4 = result["integrators"][-1]
    assert rk4["integer_map"]["kept"] and rk4["lowest_loop_hz"] is not None


def test_the_proof_drives_every_setter_and_ramp_through_the_c(hip) -> None:
    outcome = check_on_host(hip, states=2000, steps=2000, sanitized_states=0)
    report = outcome.report
    assert report.bit_exact and report.init_checked
    assert report.setters_checked == 1
    # four targets, each followed across the whole range at 2 per second and 500 Hz: (9 - 3) /
    # (2 / 500) = 1500 steps and two more (common practice: a rate limiter's travel time); omega
    # moves in whole LSBs of 2^-26, and 2 / 500 is 268,435.456 of them, so a step may move
    # 268,435: 1501 steps and two more.
    assert hip.plan.program.state_fraction_bits[2] == 26
    assert report.ramp_steps == 4 * 1503


def test_a_rate_the_word_cannot_hold_exactly_still_passes_the_ramp_proof() -> None:
    # The pump at 16 bits (speed in LSBs of 2^-12): 0.5 per second at 1 kHz is 2.048 LSBs a step,
    # which the step keeps by moving 2; the ramp over 0.25 .. 2 takes 1.75 / (2 * 2^-12) = 3584
    # steps, not 3500, and the proof must wait for them (it failed the 16-bit pump before).
    built = design(load_model("peristaltic_pump").with_fixed_point(word_bits=16))
    assert built.plan.program.state_fraction_bits[2] == 12
    report = check_on_host(built, states=2000, steps=2000, sanitized_states=0).report
    assert report.bit_exact, report.first_mismatch
    assert report.setters_checked == 1 and report.ramp_steps == 4 * (3584 + 2)


@pytest.mark.parametrize(("old", "new", "words"), [
    ("    state->omega_target = target;\n", "    state->omega_target = (int32_t)(target / 2);\n",
     "does not write just its target"),
    ("    state->omega_target = target;\n", "    state->omega = target;\n",
     "does not write just its target"),
])
def test_a_wrong_setter_is_caught(hip, tmp_path, old: str, new: str, words: str) -> None:
    from orbitfix.gen.c.emit import render_model

    files = render_model(hip.model, hip.timing, hip.integrator, hip.plan)
    assert old in files["hip.c"]
    files["hip.c"] = files["hip.c"].replace(old, new)
    for name, text in files.items():
        (tmp_path / name).write_text(text)
    outcome = check_on_host(hip, tmp_path, states=2000, steps=2000)
    mismatch = outcome.report.first_mismatch
    assert mismatch is not None and mismatch.part == "setter"
    assert words in mismatch.reason


@pytest.mark.parametrize(("change", "words"), [
    ({"per_step": 1.0 / 500}, "more than its rate allows"),
    ({"high": 8.0}, "leaves its range"),
    # a ramp slower than declared (2 per second where 3 are declared) does not arrive in time
    ({"per_step": 3.0 / 500}, "not at its target"),
])
def test_a_ramp_that_breaks_the_declared_rate_or_range_is_caught(hip, change: dict,
                                                                 words: str) -> None:
    # The ramp is judged against the model's declaration, not only golden: a program whose ramp
    # moves faster (or further) than declared fails even though C and golden agree.
    from dataclasses import replace

    from orbitfix.gen.c.emit import render_host_harness, render_model, render_trace
    from orbitfix.verify.proofs.bit_exact import Ramp, prove_bit_exact
    from orbitfix.verify.targets.host_build import build_host_module

    files = {**render_model(hip.model, hip.timing, hip.integrator, hip.plan),
             **render_trace(hip.model, hip.timing, hip.integrator, hip.plan)}
    host = build_host_module(files, render_host_harness(hip.model, hip.plan.program), "hip.h")
    declared = Ramp("omega", 3.0, 9.0, 2.0 / 500)
    initial = np.array(hip.plan.initial_state, dtype=np.int64)
    typical = np.abs(initial) + 1
    good = prove_bit_exact(hip.plan.program, host, initial, typical, states=100, steps=100,
                           ramps=(declared,))
    assert good.bit_exact
    bad = prove_bit_exact(hip.plan.program, host, initial, typical, states=100, steps=100,
                          ramps=(replace(declared, **change),))
    assert bad.first_mismatch is not None and bad.first_mismatch.part == "ramp"
    assert words in bad.first_mismatch.reason
