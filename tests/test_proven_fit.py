"""The proof of fits (gen/program/proven_fit.py): results the planner marks ``proven`` never leave
the word from any state in the proven ranges, checked by running golden (itself checked against
Python's ``fractions`` in test_operations.py) with and without the proofs on random states and
every corner of the ranges; a wrong proof is caught; the step keeps its states in the ranges."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.gen.program.proven_fit import range_corners_and_samples, refuted_fits, value_bounds


@pytest.fixture(scope="module", params=[32, 16])
def planned(request, vanderpol_design):
    if request.param == 32:
        return vanderpol_design
    model = vanderpol_design.model.with_fixed_point(word_bits=16)
    return design(model, analysis=vanderpol_design.analysis)


def test_nearly_every_value_is_proven_and_no_proof_is_refuted(planned) -> None:
    program = planned.plan.program
    kept = [program.ops[i] for i in program.kept_values if program.ops[i].kind not in
            ("state", "const", "hold")]
    assert sum(op.proven for op in kept) >= 0.9 * len(kept)
    states = range_corners_and_samples(program, 20_000, np.random.default_rng(1))
    assert refuted_fits(program, states) == []


def test_the_integer_bounds_enclose_every_golden_value(planned) -> None:
    # Interval arithmetic encloses every result (common practice); here against golden's bits.
    program = planned.plan.program
    ranges = [op.held or (program.word_min, program.word_max)
              for op in program.ops if op.kind == "state"]
    bounds, _ = value_bounds(program, ranges)
    states = range_corners_and_samples(program, 20_000, np.random.default_rng(2))
    for index, value in enumerate(golden.evaluate(program, states)):
        assert bounds[index][0] <= int(value.min()) and int(value.max()) <= bounds[index][1], index


def test_a_proof_for_ranges_it_was_not_made_for_is_refuted(planned) -> None:
    # Seeded fault: the proven ranges widened four times about their centre, the proofs kept.
    program = planned.plan.program
    word = (program.word_min, program.word_max)

    def widened(op):
        if not op.held:
            return op
        low, high = op.held
        return replace(op, held=(max(4 * low, word[0]), min(4 * high, word[1])))

    wrong = replace(program, ops=tuple(widened(op) for op in program.ops))
    states = range_corners_and_samples(wrong, 20_000, np.random.default_rng(3))
    assert refuted_fits(wrong, states)


def test_a_state_outside_its_range_is_counted_and_the_next_state_held() -> None:
    built = design(load_model("vanderpol"))
    program = built.plan.program
    load = next(op for op in program.ops if op.kind == "state" and op.state == 0)
    low, high = load.held
    outside = np.array([[high + 1000, high, low], [0, 0, 0]], dtype=np.int64)
    after, saturated = golden.step_saturated(program, outside)
    assert saturated.tolist() == [True, False, False]
    holds = [program.ops[v] for v in program.next_state]
    assert [op.kind for op in holds] == ["hold", "hold"]
    for op, row in zip(holds, after, strict=True):
        assert np.all((op.held[0] <= row) & (row <= op.held[1]))


def test_a_wrap_program_has_no_proofs_and_no_holds(vanderpol_design) -> None:
    model = vanderpol_design.model.with_fixed_point(overflow="wrap")
    program = design(model, analysis=vanderpol_design.analysis).plan.program
    assert not any(op.proven or op.held or op.kind == "hold" for op in program.ops)


def test_the_host_proof_fails_a_program_with_a_wrong_proof(vanderpol_design) -> None:
    # C and golden both wrap a proven value, so they agree on a wrong proof: the host proof checks
    # the proofs themselves. Seeded fault: the first state's range widened eight times.
    from orbitfix.verify.proofs.host_check import check_on_host

    program = vanderpol_design.plan.program
    word = (program.word_min, program.word_max)
    ops = tuple(replace(op, held=(max(8 * op.held[0], word[0]), min(8 * op.held[1], word[1])))
                if op.held and op.state == 0 else op for op in program.ops)
    wrong = replace(vanderpol_design, plan=replace(vanderpol_design.plan,
                                                   program=replace(program, ops=ops)))
    outcome = check_on_host(wrong, states=5000, steps=100, sanitized_states=0)
    mismatch = outcome.report.first_mismatch
    assert mismatch is not None and mismatch.part == "proven fits"
    assert "marked proven to fit" in mismatch.reason
