"""The host bit-exact proof (L2 golden = L3 host C): it passes on generated C, at full size, and
it fails on C that was edited by hand, naming the first failing step and operation."""

from __future__ import annotations

import math
import re
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from conftest import slip_the_square

from orbitfix.gen.c.emit import render_host_harness, render_model, render_trace
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.gen.program.fixed_point import plan_fixed_point
from orbitfix.gen.program.integer_program import IntegerProgram, Op
from orbitfix.gen.program.lowering import lower_step
from orbitfix.gen.timing.integrators import EULER
from orbitfix.gen.timing.step_size import Timing
from orbitfix.verify.proofs.bit_exact import Mismatch, _c_run, prove_bit_exact, state_units
from orbitfix.verify.proofs.host_check import check_on_host
from orbitfix.verify.report.host import mismatch_lines
from orbitfix.verify.targets.host_build import build_host_module


def write_firmware(folder: Path, built) -> dict[str, str]:
    files = render_model(built.model, built.timing, built.integrator, built.plan)
    for name, text in files.items():
        (folder / name).write_text(text)
    return files


def test_generated_c_is_bit_exact_at_full_size(vanderpol_design) -> None:
    outcome = check_on_host(vanderpol_design)
    report = outcome.report
    assert report.first_mismatch is None
    assert report.bit_exact
    assert report.states_compared >= 1_000_000
    assert report.steps_compared >= 1_000_000


def test_trajectory_compares_every_step_against_an_independent_golden_run(vanderpol_design,
                                                                          tmp_path) -> None:
    # The C's whole trajectory equals the golden trajectory run one step at a time.
    outcome = check_on_host(vanderpol_design, states=1000, steps=5000)
    assert outcome.report.steps_compared == 5000
    plan = vanderpol_design.plan
    run = golden.run(plan.program, np.array(plan.initial_state), 5000)
    files = {**render_model(vanderpol_design.model, vanderpol_design.timing,
                            vanderpol_design.integrator, plan),
             **render_trace(vanderpol_design.model, vanderpol_design.timing,
                            vanderpol_design.integrator, plan)}
    host = build_host_module(files, render_host_harness(vanderpol_design.model, plan.program),
                             "vanderpol.h")
    _, record = _c_run(host, np.array(plan.initial_state), 5000)
    assert np.array_equal(record, run[1:])


def test_sources_folder_with_untouched_files_is_bit_exact(vanderpol_design, tmp_path) -> None:
    write_firmware(tmp_path, vanderpol_design)
    outcome = check_on_host(vanderpol_design, tmp_path, states=20_000, steps=20_000)
    assert outcome.report.bit_exact
    assert outcome.notes == []


def test_hand_edited_constant_fails_and_names_the_step_and_operation(vanderpol_design,
                                                                     tmp_path) -> None:
    files = write_firmware(tmp_path, vanderpol_design)
    source = files["vanderpol.c"]
    found = re.search(r"static const int32_t k1 = INT32_C\((\d+)\);", source)
    assert found
    edited = source.replace(found.group(0),
                            f"static const int32_t k1 = INT32_C({int(found.group(1)) + 1});")
    (tmp_path / "vanderpol.c").write_text(edited)
    outcome = check_on_host(vanderpol_design, tmp_path, states=20_000, steps=20_000)
    mismatch = outcome.report.first_mismatch
    assert not outcome.report.bit_exact
    assert mismatch is not None
    assert mismatch.operation is not None
    assert mismatch.operation["kind"] == "scale"
    assert mismatch.expected != mismatch.got
    # The named state really is where they part: golden from it gives 'expected'.
    want = golden.step(vanderpol_design.plan.program, np.array(mismatch.state_before).reshape(-1, 1))
    assert want[:, 0].tolist() == mismatch.expected


def test_edit_seen_only_on_the_trajectory_names_its_first_step(vanderpol_design, tmp_path) -> None:
    # A hand edit that corrupts exactly one call: the proof must name that very step.
    files = write_firmware(tmp_path, vanderpol_design)
    source = files["vanderpol.c"]
    store = re.search(r"    state->y = (v\d+);", source)
    assert store
    edited = source.replace("void vanderpol_step(",
                            "static uint32_t calls = 0u;\n\nvoid vanderpol_step(", 1)
    edited = edited.replace(store.group(0),
                            f"    state->y = (++calls == 12345u) ? {store.group(1)} + 1 : {store.group(1)};")
    (tmp_path / "vanderpol.c").write_text(edited)
    outcome = check_on_host(vanderpol_design, tmp_path, states=10, steps=50_000)
    mismatch = outcome.report.first_mismatch
    assert mismatch is not None and mismatch.part == "trajectory"
    assert mismatch.step == 12345 - 10  # ten calls went to the random states first
    assert mismatch.operation is None  # every intermediate agrees; the store was edited
    assert mismatch.got[1] == mismatch.expected[1] + 1


def verification_host(built, edit_trace=None):
    """Firmware and trace files of a design built for the host, the trace file edited first."""
    files = {**render_model(built.model, built.timing, built.integrator, built.plan),
             **render_trace(built.model, built.timing, built.integrator, built.plan)}
    name = f"{built.model.name}_trace.c"
    if edit_trace is not None:
        edited = edit_trace(files[name])
        assert edited != files[name]
        files[name] = edited
    return build_host_module(files, render_host_harness(built.model, built.plan.program),
                             f"{built.model.name}.h")


def prove(built, host, states: int = 5000, steps: int = 200):
    plan = built.plan
    return prove_bit_exact(plan.program, host, np.array(plan.initial_state),
                           np.full(len(plan.initial_state), 1 << 20), states=states, steps=steps)


def test_fault_in_the_traced_step_is_caught_and_names_the_operation(vanderpol_design) -> None:
    # Seeded fault: one constant of the verification-only trace file is off by one, while the
    # firmware is untouched. The firmware step alone would pass; the value-by-value comparison
    # of the traced step with golden must not.
    def edit(text: str) -> str:
        found = re.search(r"static const int32_t k1 = INT32_C\((\d+)\);", text)
        assert found
        return text.replace(found.group(0),
                            f"static const int32_t k1 = INT32_C({int(found.group(1)) + 1});")

    report = prove(vanderpol_design, verification_host(vanderpol_design, edit))
    mismatch = report.first_mismatch
    assert mismatch is not None and mismatch.part == "traced step"
    assert mismatch.operation is not None and mismatch.operation["kind"] == "scale"
    want = golden.evaluate(vanderpol_design.plan.program,
                           np.array(mismatch.state_before).reshape(-1, 1))
    assert mismatch.operation["expected"] == int(want[mismatch.operation["index"]][0])
    assert mismatch.operation["got"] != mismatch.operation["expected"]
    assert "traced step" in "\n".join(mismatch_lines(mismatch))


def test_traced_step_storing_another_state_than_the_firmware_is_caught(vanderpol_design) -> None:
    # Seeded fault: the trace file computes every value right but stores y one unit off; the
    # proof checks the traced step's next state against the firmware step's.
    def edit(text: str) -> str:
        store = re.search(r"    state->y = (v\d+);", text)
        assert store
        return text.replace(store.group(0), f"    state->y = {store.group(1)} - 1;")

    report = prove(vanderpol_design, verification_host(vanderpol_design, edit))
    mismatch = report.first_mismatch
    assert mismatch is not None and mismatch.part == "traced step"
    assert mismatch.operation is None
    assert mismatch.got[1] == mismatch.expected[1] - 1
    assert mismatch.got[0] == mismatch.expected[0]


def test_untouched_trace_and_firmware_pass_every_comparison(vanderpol_design) -> None:
    report = prove(vanderpol_design, verification_host(vanderpol_design), states=20_000)
    assert report.bit_exact and report.states_compared == 20_000


def test_a_firmware_fault_is_still_named_by_operation_with_the_trace_outside(vanderpol_design,
                                                                           tmp_path) -> None:
    # The firmware holds no trace: the mismatch is located with a traced copy of the firmware's
    # own step, so the edited multiplication is named although the trace file is correct.
    files = write_firmware(tmp_path, vanderpol_design)
    (tmp_path / "vanderpol.c").write_text(slip_the_square(files["vanderpol.c"]))
    outcome = check_on_host(vanderpol_design, tmp_path, states=5000, steps=100)
    mismatch = outcome.report.first_mismatch
    assert mismatch is not None and mismatch.part == "random states"
    assert mismatch.operation is not None and mismatch.operation["kind"] == "mul"


def test_mismatch_reads_each_state_in_its_own_format() -> None:
    # Q format (common practice): a state of f fraction bits stands for integer / 2**f; an angle
    # held in turns stands for integer / 2**word turns, 2 pi radians to the turn. Each state has
    # its own format: here an angle, a plain state and a runtime parameter with its target.
    program = IntegerProgram(
        name="spin", state_names=("theta", "r", "omega", "omega_target"),
        ops=tuple(Op("state", state=i, fraction_bits=f) for i, f in enumerate((32, 28, 26, 26))),
        next_state=(0, 1, 2, 3), state_fraction_bits=(32, 28, 26, 26), model_states=2,
        angle_states=(0,))
    assert state_units(program) == (2 * math.pi / 2**32, 2.0**-28, 2.0**-26, 2.0**-26)
    before = [1 << 30, 3 << 27, 6 << 26, -(9 << 26)]
    mismatch = Mismatch(part="random states", step=0, state_before=before, expected=before,
                        got=before, operation=None, units=state_units(program))
    assert mismatch.to_json()["state_before_real"] == [math.pi / 2, 1.5, 6.0, -9.0]


def test_notes_say_when_sources_came_from_another_program(vanderpol_design, tmp_path) -> None:
    files = write_firmware(tmp_path, vanderpol_design)
    text = re.sub(r"integer program [0-9a-f]{16}", "integer program 0123456789abcdef",
                  files["vanderpol.c"])
    (tmp_path / "vanderpol.c").write_text(text)
    outcome = check_on_host(vanderpol_design, tmp_path, states=100, steps=100)
    assert outcome.report.bit_exact
    assert any("0123456789abcdef" in note for note in outcome.notes)


SEMANTICS = [(w, r, o) for w in (16, 32) for r in ("truncate", "half-up", "half-even", "mixed")
             for o in ("saturate", "wrap")]


@pytest.mark.parametrize(("word", "rounding", "overflow"), SEMANTICS)
def test_every_word_rounding_and_overflow_is_bit_exact(vanderpol_design, word: int, rounding: str,
                                                       overflow: str) -> None:
    model = vanderpol_design.model.with_fixed_point(word_bits=word, rounding=rounding,
                                                    overflow=overflow)
    built = design(model, analysis=vanderpol_design.analysis)
    assert built.plan.program.word_bits == word
    outcome = check_on_host(built, states=30_000, steps=30_000)
    assert outcome.report.bit_exact, outcome.report.first_mismatch


TIES = define_model("ties", {"a": 0.25, "b": 0.25}, {"a": "a*b", "b": "-a"}, cycle_hz=1,
                    loop_hz=100)


@pytest.mark.parametrize(("word", "rounding", "overflow"), SEMANTICS)
def test_c_products_round_like_exact_rationals_at_ties(word: int, rounding: str,
                                                       overflow: str) -> None:
    # Reference: Python's fractions, with each rounding rule written from its definition.
    fraction_bits = word // 2
    program = lower_step(TIES, EULER, 1.0)
    plan = plan_fixed_point(program, np.array([[0.5], [0.5]]), TIES.initial_state,
                            fraction_bits=fraction_bits, word_bits=word, rounding=rounding,
                            overflow=overflow)
    timing = Timing(model_period=1.0, cycle_hz=1.0, loop_hz=100.0, time_scale=1.0, step=1.0,
                    steps_per_cycle=100.0)
    files = {**render_model(TIES, timing, EULER, plan), **render_trace(TIES, timing, EULER, plan)}
    host = build_host_module(files, render_host_harness(TIES, plan.program), "ties.h")
    mul = next(i for i, op in enumerate(plan.program.ops) if op.kind == "mul")
    shift = plan.program.ops[mul].shift  # the product's own format decides the shift
    half = 1 << (shift - 1)
    low, high = -(1 << (word - 1)), (1 << (word - 1)) - 1
    cases = [(1, k * half) for k in (1, 3, 5, -1, -3, -5)] + [(3, half), (-3, half), (1, high),
                                                               (low, low), (high, high), (low, -1)]
    exact = {"truncate": math.floor, "half-up": lambda v: math.floor(v + Fraction(1, 2)),
             "half-even": round}[plan.program.rounding_of(plan.program.ops[mul])]
    for a, b in cases:
        trace = np.zeros(len(plan.program.ops), dtype=np.int32)
        out = np.zeros(2, dtype=np.int32)
        state = np.array([a, b], dtype=np.int32)
        host.lib.orbitfix_harness_trace(host.ffi.from_buffer("int32_t[]", state),
                                        host.ffi.from_buffer("int32_t[]", out),
                                        host.ffi.from_buffer("int32_t[]", trace))
        # The step first holds each state in its proven range (a saturating program's clamp).
        held = [op.held or (low, high) for op in plan.program.ops if op.kind == "state"]
        a, b = (min(max(v, lo), hi) for v, (lo, hi) in zip((a, b), held, strict=True))
        value = exact(Fraction(a * b, 1 << shift))
        if overflow == "saturate":
            value = min(max(value, low), high)
        else:
            value = (value - low) % (1 << word) + low
        assert int(trace[mul]) == value, (a, b)


def test_an_edited_init_literal_is_caught_and_named(vanderpol_design, tmp_path) -> None:
    # Every initial-state literal of NAME_init, one LSB off, must fail the proof (the init function
    # is what firmware and boards start from).
    files = write_firmware(tmp_path, vanderpol_design)
    source = files["vanderpol.c"]
    literals = list(re.finditer(r"state->(\w+) = INT32_C\((-?\d+)\);", source))
    assert len(literals) == len(vanderpol_design.plan.program.state_names)
    for found in literals:
        edited = (source[:found.start(2)] + str(int(found.group(2)) + 1) + source[found.end(2):])
        (tmp_path / "vanderpol.c").write_text(edited)
        outcome = check_on_host(vanderpol_design, tmp_path, states=1000, steps=1000)
        mismatch = outcome.report.first_mismatch
        assert mismatch is not None and mismatch.part == "init"
        assert found.group(1) in mismatch.reason
        assert mismatch.expected == list(vanderpol_design.plan.initial_state)
        assert any("the init function" in line for line in mismatch_lines(mismatch))


def test_random_states_stay_inside_the_word_however_little_the_headroom() -> None:
    # With under a bit of headroom, twice the cycle's size is beyond the word; no state may be.
    from orbitfix.verify.proofs.bit_exact import random_states

    for bits in (16, 32):
        low, high = -(1 << (bits - 1)), (1 << (bits - 1)) - 1
        program = IntegerProgram(name="edge", state_names=("x", "y"),
                                 ops=(Op("state", state=0, note="x"),
                                      Op("state", state=1, note="y")),
                                 next_state=(0, 1), word_bits=bits,
                                 product_bits=2 * bits)
        states = random_states(program, 40_000, np.array([high - 5, high // 3]),
                               np.random.default_rng(1))
        assert states.min() >= low and states.max() <= high
        near = states[:, 10_000:20_000]  # the near-cycle quarter still reaches the word's edges
        assert near[0].max() > high * 0.9 and near[0].min() < low * 0.9


def test_a_state_outside_the_word_is_refused_as_a_verifier_bug(vanderpol_design) -> None:
    from orbitfix.verify.proofs.bit_exact import _require_inside_word

    program = vanderpol_design.plan.program
    with pytest.raises(ValueError, match="outside the 32-bit word"):
        _require_inside_word(program, np.array([[-2149444361], [0]]), "a random state")
    _require_inside_word(program, np.array([[program.word_min], [program.word_max]]), "a state")


def test_little_headroom_is_no_false_alarm(vanderpol_design) -> None:
    # The false alarm of `verify vanderpol --fraction-bits 28`: states near the cycle at twice the
    # sure bound went past int32 and were compared wrapped in C, unwrapped in golden.
    model = vanderpol_design.model.with_fixed_point(fraction_bits=28)
    built = design(model, analysis=vanderpol_design.analysis)
    assert built.plan.headroom_bits < 2
    outcome = check_on_host(built, states=100_000, steps=10_000, sanitized_states=1000)
    assert outcome.report.bit_exact, outcome.report.first_mismatch


def test_a_short_proof_catches_every_one_lsb_change_of_a_constant(tmp_path, monkeypatch) -> None:
    # The proof compares the self-test's probe states first (gen/c/selftest.choose_probes), so even
    # 2,000 states and steps catch each stored constant of NAME.c moved up or down by one LSB.
    from orbitfix.gen.model.model_file import load_model
    from orbitfix.verify.proofs import host_check

    built = design(load_model("vanderpol"))
    files = render_model(built.model, built.timing, built.integrator, built.plan)
    source = files["vanderpol.c"]
    constants = re.findall(r"static const int32_t (k\d+) = INT32_C\((-?\d+)\);", source)
    assert len(constants) >= 4

    def missed(tag: str) -> list[str]:
        passed = []
        for name, value in constants:
            for change in (1, -1):
                folder = tmp_path / f"{tag}-{name}{change:+d}"
                folder.mkdir()
                old = f"static const int32_t {name} = INT32_C({value});"
                (folder / "vanderpol.c").write_text(source.replace(
                    old, f"static const int32_t {name} = INT32_C({int(value) + change});"))
                (folder / "vanderpol.h").write_text(files["vanderpol.h"])
                report = check_on_host(built, folder, states=2000, steps=2000,
                                       sanitized_states=0).report
                if report.bit_exact:
                    passed.append(f"{name}{change:+d}")
        return passed

    assert missed("probed") == []
    # seeded fault: without the probes the same short proof lets a one-LSB change through
    # (h one LSB up: measured)
    monkeypatch.setattr(host_check, "probe_states", lambda _: None)
    assert missed("random only") != []
