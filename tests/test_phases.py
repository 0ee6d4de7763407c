"""Phases in fixed point: angles held as wrapping words of turns, sin and cos from a table with
linear interpolation sized to a stated error, bit-exact in C and free of undefined behaviour."""

from __future__ import annotations

import math
import subprocess
from pathlib import Path

import numpy as np
import pytest
from conftest import compilers

from orbitfix.gen.c.emit import render_host_harness, render_model, render_trace
from orbitfix.gen.errors import UnsupportedError
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.gen.program.integer_program import IntegerProgram, Op
from orbitfix.gen.program.lowering import lower_step
from orbitfix.gen.program.operations import sine_error_bound, sine_table, sine_table_bits
from orbitfix.gen.timing.integrators import EULER
from orbitfix.verify.proofs.host_check import check_on_host


def sine_program(word_bits: int, kind: str) -> IntegerProgram:
    f = word_bits - 2
    bits = sine_table_bits(word_bits, f)
    quarter_turn = 1 << (word_bits - 2)  # cos(a) = sin(a + a quarter turn) (trigonometric identity)
    ops = (Op("state", state=0, fraction_bits=word_bits),
           Op(kind, (0,), fraction_bits=f, table=sine_table(bits, f), shift=word_bits - bits,
              offset=quarter_turn if kind == "cos" else 0))
    return IntegerProgram(name="s", state_names=("a",), ops=ops, next_state=(1,),
                          word_bits=word_bits, product_bits=2 * word_bits,
                          state_fraction_bits=(word_bits,))


@pytest.mark.parametrize("kind", ["sin", "cos"])
def test_16_bit_table_meets_its_stated_error_at_every_angle(kind: str) -> None:
    # Reference: numpy's sin and cos, over all 65536 angles of a 16-bit word (exhaustive).
    program = sine_program(16, kind)
    angles = np.arange(-(1 << 15), 1 << 15, dtype=np.int64)
    got = golden.step(program, angles.reshape(1, -1))[0] / 2.0**14
    want = getattr(np, kind)(2 * np.pi * angles / 2.0**16)
    assert np.max(np.abs(got - want)) <= sine_error_bound(16, 14)


def test_32_bit_table_meets_its_stated_error() -> None:
    # Reference: numpy's sin at a million random angles and at the quarter turns.
    program = sine_program(32, "sin")
    rng = np.random.default_rng(5)
    angles = np.concatenate([rng.integers(-(1 << 31), 1 << 31, 1_000_000),
                             np.array([0, 1 << 30, -(1 << 30), -(1 << 31)])])
    got = golden.step(program, angles.reshape(1, -1))[0] / 2.0**30
    error = np.max(np.abs(got - np.sin(2 * np.pi * angles / 2.0**32)))
    assert error <= sine_error_bound(32, 30)
    assert sine_error_bound(32, 30) < 1e-6  # the table is sized to about one part in a million


@pytest.fixture(scope="module")
def phase_designs():
    return {w: design(load_model("phase_chain").with_fixed_point(word_bits=w)) for w in (16, 32)}


@pytest.mark.parametrize("word", [16, 32])
def test_phase_chain_is_bit_exact_in_c(phase_designs, word: int) -> None:
    outcome = check_on_host(phase_designs[word], states=20_000, steps=20_000)
    assert outcome.report.bit_exact, outcome.report.first_mismatch


def test_the_phase_turns_at_its_frequency_without_losing_precision() -> None:
    # theta' = 2 pi nu exactly: one turn per 1/nu model time units, i.e. loop_hz / cycle_hz
    # steps; held in turns, the angle wraps for free and never grows.
    built = design(load_model("phase_amplitude"))
    program = built.plan.program
    steps = 250 * 12
    run = golden.run(program, np.array(built.plan.initial_state), steps)[:, 0]
    wraps = int(np.count_nonzero(np.diff(run) < 0))
    assert wraps == pytest.approx(steps / built.timing.steps_per_cycle, abs=1)
    assert np.all(np.abs(run) < 1 << 31)


def test_angle_constants_turn_a_sine_into_a_cosine() -> None:
    # sin(theta + pi/2) = cos(theta) (trigonometric identity): both go through the same table.
    shifted = define_model("shifted", {"theta": 0.3, "x": 1.0, "y": 0.0},
                           {"theta": "1", "x": "sin(theta + 1.5707963267948966) - x + y",
                            "y": "cos(theta) - y - x"}, cycle_hz=1, loop_hz=100, angles=("theta",))
    program = lower_step(shifted, EULER, 0.01)
    kinds = [op.kind for op in program.ops]
    assert "sin" in kinds and "cos" in kinds
    angle_constant = next(op for op in program.ops if op.kind == "const" and op.wraps)
    assert angle_constant.real == pytest.approx(0.25)  # pi/2 is a quarter turn


def test_angles_used_as_plain_numbers_are_refused() -> None:
    model = define_model("bad", {"theta": 0.0, "x": 1.0}, {"theta": "1", "x": "theta * x - x"},
                         cycle_hz=1, loop_hz=100, angles=("theta",))
    with pytest.raises(UnsupportedError, match="uses an angle in a way"):
        lower_step(model, EULER, 0.01)


HARNESS_DRIVER = r"""
#include <stddef.h>
#include <stdint.h>
void orbitfix_harness_step_each(const int32_t *in, int32_t *out, size_t count);
size_t orbitfix_harness_state_count(void);

/* xorshift64 (Marsaglia 2003): states over the whole word. */
static uint64_t next(uint64_t *s) { *s ^= *s << 13; *s ^= *s >> 7; *s ^= *s << 17; return *s; }

int main(void)
{
    static int32_t in[64], out[64];
    uint64_t seed = 88172645463325252u;
    size_t n = orbitfix_harness_state_count(), k, j;
    for (k = 0; k < 100000u; ++k) {
        for (j = 0; j < n; ++j) {
            in[j] = (int32_t)(uint32_t)next(&seed) >> (32 - WORD);
        }
        orbitfix_harness_step_each(in, out, 1u);
    }
    return 0;
}
"""


@pytest.mark.parametrize("word", [16, 32])
def test_phase_c_runs_free_of_undefined_behaviour(tmp_path: Path, phase_designs, word) -> None:
    # -fsanitize=undefined with no recovery (common practice): any signed overflow, bad shift or
    # out-of-bounds table index aborts the run.
    built = phase_designs[word]
    files = render_model(built.model, built.timing, built.integrator, built.plan)
    files.update(render_trace(built.model, built.timing, built.integrator, built.plan))
    files["harness.c"] = render_host_harness(built.model, built.plan.program)
    files["driver.c"] = HARNESS_DRIVER
    for name, text in files.items():
        (tmp_path / name).write_text(text)
    for cc in compilers():
        build = subprocess.run([cc, "-std=c99", "-O1", "-fsanitize=undefined",
                                "-fsanitize=bounds", "-fno-sanitize-recover=all", f"-DWORD={word}",
                                "phase_chain.c", "phase_chain_trace.c", "harness.c", "driver.c",
                                "-o", "ub"],
                               cwd=tmp_path, capture_output=True, text=True, check=False)
        assert build.returncode == 0, build.stderr
        run = subprocess.run([str(tmp_path / "ub")], capture_output=True, text=True, check=False)
        assert run.returncode == 0 and "runtime error" not in run.stderr, (cc, run.stderr)


def test_sine_table_size_follows_the_stated_error() -> None:
    # Linear interpolation of sin errs by at most h^2/8 for a step h (common practice): the
    # planner picks the fewest index bits that keep it under one step of the output.
    for word in (16, 32):
        bits = sine_table_bits(word, word - 2)
        lsb = 2.0 ** -(word - 2)
        assert (2 * math.pi / 2**bits) ** 2 / 8 <= lsb or bits == 12
        assert bits == 4 or (2 * math.pi / 2 ** (bits - 1)) ** 2 / 8 > lsb


@pytest.mark.parametrize("word", [16, 32])
@pytest.mark.parametrize(("turns", "wanted"), [(0.5, -0.5), (0.75, -0.25), (-0.5, -0.5), (1.25, 0.25)])
def test_an_angle_constant_wraps_into_the_word(word: int, turns: float, wanted: float) -> None:
    """An angle constant is stored as the same angle within [-1/2, 1/2) turns (angles are equal
    modulo one turn, common practice): a half-turn phase bias is not refused as too large, and a
    plain constant of the same size still is."""
    from orbitfix.gen.errors import InputError
    from orbitfix.gen.program.operations import kind_of

    const = kind_of("const")
    angle = const.fill(Op("const", real=turns, wraps=True), word, [], word)
    assert angle.constant == round(wanted * 2**word)
    with pytest.raises(InputError, match="does not fit"):
        const.fill(Op("const", real=1.0, note="plain"), word, [], word)  # one turn, unwrapped
