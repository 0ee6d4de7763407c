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
from orbitfix.gen.program.proven_fit import (
    held_ranges,
    range_corners_and_samples,
    refuted_fits,
    value_bounds,
)


@pytest.fixture(scope="module", params=[32, 16])
def planned(request, vanderpol_design):
    if request.param == 32:
        return vanderpol_design
    model = vanderpol_design.model.with_fixed_point(word_bits=16)
    return design(model, analysis=vanderpol_design.analysis)


def test_nearly_every_value_is_proven_and_no_proof_is_refuted(planned) -> None:
    program = planned.plan.program
    kept = [program.ops[i] for i in program.kept_values if program.ops[i].kind not in
            ("state", "const")]
    assert sum(op.proven for op in kept) >= 0.9 * len(kept)
    states = range_corners_and_samples(program, 20_000, np.random.default_rng(1))
    assert refuted_fits(program, states) == []


def test_the_integer_bounds_enclose_every_golden_value(planned) -> None:
    # Interval arithmetic encloses every result (common practice); here against golden's bits.
    program = planned.plan.program
    bounds, _ = value_bounds(program, held_ranges(program))
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


def test_a_state_outside_its_range_is_held_at_its_edge_and_counted() -> None:
    built = design(load_model("vanderpol"))
    program = built.plan.program
    load = next(op for op in program.ops if op.kind == "state" and op.state == 0)
    low, high = load.held
    outside = np.array([[high + 1000, high, low - 1], [0, 0, 0]], dtype=np.int64)
    _, saturated = golden.step_saturated(program, outside)
    assert saturated.tolist() == [True, False, True]
    values = golden.evaluate(program, outside)
    assert values[program.ops.index(load)].tolist() == [high, high, low]


def test_a_wrap_program_has_no_proofs_and_no_holds(vanderpol_design) -> None:
    model = vanderpol_design.model.with_fixed_point(overflow="wrap")
    program = design(model, analysis=vanderpol_design.analysis).plan.program
    assert not any(op.proven or op.held for op in program.ops)


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
    assert "marked proven to fit" in mismatch.reason and "sure integer bounds" in mismatch.reason


def test_the_bounds_of_a_table_lookup_are_its_value_and_a_slip_is_refuted(monkeypatch) -> None:
    # sin and cos round inside their lookup, so their bounds are the table's own (interpolation
    # stays between two entries). Seeded fault: those bounds rounded once more by the shift, as a
    # plain kind's are; the bounds then fail on golden's values and the check says so.
    from orbitfix.gen.model.definition import define_model
    from orbitfix.gen.program.operations import TableSine
    from orbitfix.gen.program.proven_fit import prove_fits

    model = define_model("lurch", {"theta": 0.0, "r": 0.5},
                         {"theta": "1 + 0.5*sin(theta)", "r": "1 - r"}, cycle_hz=1, loop_hz=200,
                         angles=("theta",))
    built = design(model)
    program = built.plan.program
    assert any(op.kind == "sin" for op in program.ops)
    states = range_corners_and_samples(program, 20_000, np.random.default_rng(4))
    assert refuted_fits(program, states) == []
    monkeypatch.setattr(TableSine, "rounds_itself", False)
    assert refuted_fits(prove_fits(program, built.plan.box), states)
