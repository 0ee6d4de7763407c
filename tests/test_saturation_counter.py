"""The count of saturated steps in the state struct: the integer program defines which clamp
counts, golden and the compiled C count the same steps bit for bit, the count sticks at its
largest value, and the host proof fails on C that counts wrongly (seeded faults: a step that never
counts, one that counts every step, one whose count wraps to 0).

References: a saturating counter that holds at its largest value instead of wrapping (common
practice for fault counters); clamping of two's complement words (common practice). Saturation is
checked against exact integer arithmetic written here from the word's limits."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from orbitfix.gen.c.emit import render_host_harness, render_model, render_trace
from orbitfix.gen.program import golden
from orbitfix.gen.program.integer_program import (
    SATURATION_COUNT_MAX,
    IntegerProgram,
    Op,
    next_saturation_count,
)
from orbitfix.verify.proofs.bit_exact import c_run_counted, compare_sanitized
from orbitfix.verify.proofs.host_check import check_on_host
from orbitfix.verify.targets.host_build import build_host_module, build_sanitized_program

COUNT = "state->saturated_steps += 1u;"
COUNTS_IF_SATURATED = "if (saturated != 0u && state->saturated_steps != UINT32_MAX) {"


@pytest.fixture(scope="module")
def vanderpol_host(vanderpol_design):
    built = vanderpol_design
    files = {**render_model(built.model, built.timing, built.integrator, built.plan),
             **render_trace(built.model, built.timing, built.integrator, built.plan)}
    return build_host_module(files, render_host_harness(built.model, built.plan.program),
                             "vanderpol.h")


def edge_start(program: IntegerProgram) -> np.ndarray:
    """x near the top of its word, y at 0: x squared is far outside the planned box, so the first
    steps clamp."""
    start = np.zeros(len(program.state_names), dtype=np.int64)
    start[0] = program.word_max - 1000
    return start


def test_golden_and_c_count_the_same_steps_from_a_start_at_the_word_edge(vanderpol_design,
                                                                         vanderpol_host) -> None:
    program = vanderpol_design.plan.program
    steps = 3000
    trajectory, counts = golden.run_counted(program, edge_start(program), steps)
    end, end_count, record, c_counts = c_run_counted(vanderpol_host, edge_start(program), 0, steps)
    assert np.array_equal(record, trajectory[1:])
    assert np.array_equal(c_counts, counts[1:])
    assert end_count == counts[-1] > 0
    assert np.array_equal(end, trajectory[-1])
    # Independently of golden's flag: a step whose C count rose started from a state outside its
    # proven range, or left some value at the word's edge (a clamp leaves it there); and the count
    # never falls.
    assert np.all(np.diff(counts) >= 0)
    for k in np.flatnonzero(np.diff(counts))[:50]:
        values = golden.evaluate(program, trajectory[k].reshape(-1, 1))
        at_edge = [int(values[i][0]) in (program.word_min, program.word_max)
                   for i, op in enumerate(program.ops) if i in program.counted_clamps
                   and op.kind != "state"]
        outside = [not op.held[0] <= int(trajectory[k][op.state]) <= op.held[1]
                   for op in program.ops if op.kind == "state" and op.held]
        assert any(at_edge) or any(outside)


def test_the_nominal_run_from_the_init_state_counts_nothing(vanderpol_design,
                                                             vanderpol_host) -> None:
    program = vanderpol_design.plan.program
    steps = int(3 * vanderpol_design.timing.steps_per_cycle)
    initial = np.array(vanderpol_design.plan.initial_state, dtype=np.int64)
    _, counts = golden.run_counted(program, initial, steps)
    assert counts[-1] == 0
    assert int(vanderpol_host.lib.orbitfix_harness_init_saturated()) == 0
    _, end_count, _, c_counts = c_run_counted(vanderpol_host, initial, 0, steps)
    assert end_count == 0 and not c_counts.any()


def test_the_count_sticks_at_its_largest_value(vanderpol_design, vanderpol_host) -> None:
    # The struct's count forced one below its largest value, then saturating steps: it reaches
    # the largest value and stays there, in C and in golden; it never wraps to 0.
    program = vanderpol_design.plan.program
    assert SATURATION_COUNT_MAX == 2**32 - 1
    start = edge_start(program)
    _, first_flags = golden.step_saturated(program, start.reshape(-1, 1))
    assert first_flags[0]
    _, end_count, _, c_counts = c_run_counted(vanderpol_host, start, SATURATION_COUNT_MAX - 1, 50)
    _, counts = golden.run_counted(program, start, 50, count=SATURATION_COUNT_MAX - 1)
    assert np.array_equal(c_counts, counts[1:])
    assert c_counts[0] == SATURATION_COUNT_MAX and end_count == SATURATION_COUNT_MAX
    assert next_saturation_count(SATURATION_COUNT_MAX, True) == SATURATION_COUNT_MAX
    assert next_saturation_count(SATURATION_COUNT_MAX - 1, False) == SATURATION_COUNT_MAX - 1


def adder(overflow: str, wraps: bool, w: int = 16) -> IntegerProgram:
    """a + a in a's own format (it overflows for |a| above half the word), the next state, and a
    dead a - a that the next state does not use."""
    bits = w - 2
    return IntegerProgram(
        name="adder", state_names=("a",), word_bits=w, product_bits=2 * w, overflow=overflow,
        state_fraction_bits=(w if wraps else bits,),
        ops=(Op("state", state=0, fraction_bits=w if wraps else bits),
             Op("add", (0, 0), fraction_bits=w if wraps else bits, align=(0, 0), shift=0,
                wraps=wraps),
             Op("sub", (0, 0), fraction_bits=bits, align=(0, 0), shift=0)),
        next_state=(1,))


def test_only_clamps_of_kept_values_count_never_a_wrap() -> None:
    every = np.arange(-(1 << 15), 1 << 15, dtype=np.int64).reshape(1, -1)
    exact = 2 * every[0]  # the exact sum, against the word's limits
    outside = (exact > (1 << 15) - 1) | (exact < -(1 << 15))
    saturating = adder("saturate", wraps=False)
    _, flags = golden.step_saturated(saturating, every)
    assert np.array_equal(flags, outside) and outside.any()
    assert saturating.counted_clamps == {1}  # the dead a - a is not counted
    for program in (adder("wrap", wraps=False), adder("saturate", wraps=True)):
        _, flags = golden.step_saturated(program, every)
        assert not flags.any()
    assert not adder("wrap", wraps=False).counts_saturation


def test_the_header_documents_the_count_and_a_wrap_program_says_it_stays_zero(
        vanderpol_design) -> None:
    built = vanderpol_design
    header = render_model(built.model, built.timing, built.integrator, built.plan)["vanderpol.h"]
    assert "uint32_t saturated_steps;" in header
    assert "treat a count above 0 as a fault" in header and "Never reset it silently" in header
    wrapping = built.model.with_fixed_point(overflow="wrap")
    from orbitfix.gen.pipeline import design

    wrapped = design(wrapping, analysis=built.analysis)
    files = render_model(wrapped.model, wrapped.timing, wrapped.integrator, wrapped.plan)
    assert "the count stays 0" in files["vanderpol.h"]
    assert "saturated" not in files["vanderpol.c"].split("void vanderpol_step(")[1].split("\n}\n")[0]


def seeded(tmp_path: Path, built, old: str, new: str) -> Path:
    files = render_model(built.model, built.timing, built.integrator, built.plan)
    assert old in files["vanderpol.c"]
    for name, text in files.items():
        (tmp_path / name).write_text(text.replace(old, new, 1) if name == "vanderpol.c" else text)
    return tmp_path


@pytest.mark.parametrize(("old", "new", "what"), [
    (COUNT, "", "never counts"),
    (COUNTS_IF_SATURATED, "if (state->saturated_steps != UINT32_MAX) {", "counts every step"),
    (COUNTS_IF_SATURATED, "if (saturated != 0u) {", "wraps to 0"),
    ("state->saturated_steps = 0u;", "state->saturated_steps = 1u;", "init leaves 1"),
])
def test_the_host_proof_fails_on_a_wrong_count(vanderpol_design, tmp_path, old: str, new: str,
                                               what: str) -> None:
    folder = seeded(tmp_path, vanderpol_design, old, new)
    outcome = check_on_host(vanderpol_design, folder, states=5000, steps=2000, sanitized_states=0)
    mismatch = outcome.report.first_mismatch
    assert mismatch is not None, what
    assert "count of saturated steps" in mismatch.reason
    assert not outcome.report.bit_exact


def test_the_untouched_count_passes_and_is_reported(vanderpol_design) -> None:
    outcome = check_on_host(vanderpol_design, states=5000, steps=2000, sanitized_states=0)
    assert outcome.report.bit_exact
    assert outcome.report.trajectory_saturated_steps == 0


def test_the_sanitized_build_compares_the_count_too(vanderpol_design, tmp_path) -> None:
    built = vanderpol_design
    program = built.plan.program
    initial = np.array(built.plan.initial_state, dtype=np.int64)
    typical = np.array([1 << 28, 1 << 28])
    traced = render_trace(built.model, built.timing, built.integrator, built.plan)
    harness = render_host_harness(built.model, program)
    good = render_model(built.model, built.timing, built.integrator, built.plan)
    bad = {**good, "vanderpol.c": good["vanderpol.c"].replace(COUNT, "", 1)}
    for sources, wrong in ((good, False), (bad, True)):
        executable = build_sanitized_program({**sources, **traced}, harness, "-O2")
        run, mismatch = compare_sanitized(program, str(executable), "-O2", initial, typical,
                                          4096, 500)
        assert run.undefined is None
        assert (mismatch is not None) == wrong
        if wrong:
            assert "count of saturated steps" in mismatch.reason


def test_clamps_of_values_the_step_does_not_keep_are_not_counted_in_either_step() -> None:
    # phase_amplitude's RK4 computes stage points of its phase that no slope reads: the firmware
    # step leaves them out, the traced step computes them; neither counts their clamps, like
    # golden. The proof compares both counts on random states, many of them saturating. The
    # planner proves every value of it fits; with those proofs taken back, the unkept values clamp.
    from dataclasses import replace

    from orbitfix.gen.model.model_file import load_model
    from orbitfix.gen.pipeline import design

    built = design(load_model("phase_amplitude"))
    program = replace(built.plan.program, ops=tuple(replace(op, proven=False)
                                                    for op in built.plan.program.ops))  # clamps back
    built = replace(built, plan=replace(built.plan, program=program))
    unkept = [i for i, op in enumerate(program.ops)
              if i not in program.kept_values and program.clamps(op)]
    assert unkept and not set(unkept) & program.counted_clamps
    outcome = check_on_host(built, states=20_000, steps=2000, sanitized_states=0)
    assert outcome.report.bit_exact, outcome.report.first_mismatch
