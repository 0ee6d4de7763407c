"""Layer L4 on every board we can run here: 100,000 steps streamed from the firmware and compared
bit for bit with the golden model, for Van der Pol with 32-bit and with 16-bit words and for a
network (two coupled Van der Pol oscillators), and for the four-legged trot where it fits.

The golden model is the reference outside the board: every state the board sends is checked
against ``golden.step`` run from the board's own previous state (``compare_samples``).

Time (the whole file took 4 minutes with every format at 100,000 steps, so it was cut): each
board streams 100,000 steps of one format with every state sent (``every=1``); on the Arm boards
the other Van der Pol format and the pair also run 100,000 steps but send every 10th state, each sample
checked against ten golden steps from the board's previous sample (the emulators are bound by
the link, so this takes seconds, not twenty), and the trot runs 20,000. The ATmega328P is slow by
nature (about 5,400 simulated cycles per 16-bit step, 14,700 per 32-bit one): its 100,000-step
runs (both formats and the pair) send every 10th state, and every state is sent in a 10,000-step
32-bit run.
The trot at 16 bits, its oscillators in loops (gen/c/loops.py), runs on every board too (20,000
steps on the Arm boards, 5,000 on the ATmega328P, every 10th state sent): the loop form is what
fits it in the small parts. Measured on a shared two-core machine: about 3 minutes for the file
before the 16-bit trot joined it.

Skips only when a board's tools are missing on a developer's machine; with CI set it must run.
"""

from __future__ import annotations

import functools
import time
from pathlib import Path

import pytest
from test_boards_emulated import tools_or_skip

import orbitfix.gen.model as model_package
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import Design, design
from orbitfix.verify.proofs.board_stream import stream_on_board
from orbitfix.verify.targets.board_profiles import all_profiles, load_profile

STEPS = 100_000
EMULATED = [p.name for p in all_profiles() if p.kind == "emulated"]

# (model, word bits): the 32-bit and 16-bit formats and the network of the check, and
# the trot, a four-oscillator network, where the board has room for it.
VDP32, VDP16, PAIR32, PAIR16, TROT32 = (("vanderpol", 32), ("vanderpol", 16), ("vanderpol_pair", 32),
                                       ("vanderpol_pair", 16), ("quadruped_trot", 32))
TROT16 = ("quadruped_trot", 16)

# board -> [(model, word bits, steps, every)]
TROT_STEPS = 20_000
CASES = {
    "host": [(*VDP32, STEPS, 1), (*VDP16, STEPS, 1), (*PAIR32, STEPS, 1), (*TROT32, STEPS, 1),
             (*TROT16, STEPS, 1)],
    "mps2-an385": [(*VDP32, STEPS, 1), (*VDP16, STEPS, 10), (*PAIR32, STEPS, 10),
                   (*TROT32, TROT_STEPS, 10), (*TROT16, TROT_STEPS, 10)],
    "mps2-an386": [(*VDP16, STEPS, 1), (*VDP32, STEPS, 10), (*PAIR32, STEPS, 10),
                   (*TROT32, TROT_STEPS, 10), (*TROT16, TROT_STEPS, 10)],
    "microbit": [(*VDP16, STEPS, 1), (*VDP32, STEPS, 10), (*PAIR32, STEPS, 10),
                 (*TROT32, TROT_STEPS, 10), (*TROT16, TROT_STEPS, 10)],
    # the pair at 16 bits here: 32-bit products cost an 8-bit part about 38,000 cycles a step
    "atmega328p": [(*VDP16, STEPS, 10), (*VDP32, 10_000, 1), (*VDP32, STEPS, 10), (*PAIR16, STEPS, 10),
                   (*TROT16, 5_000, 10)],
}


def _params() -> list:
    params = []
    for board, cases in CASES.items():
        for model, word_bits, steps, every in cases:
            marks = () if board == "host" else (pytest.mark.slow,)
            params.append(pytest.param(board, model, word_bits, steps, every, marks=marks,
                                       id=f"{board}-{model}-{word_bits}bit-{steps}x{every}"))
    return params


@functools.cache
def _design(model: str, word_bits: int) -> Design:
    return design(load_model(model).with_fixed_point(word_bits=word_bits))


def test_every_emulated_board_is_streamed() -> None:
    # a new emulated profile must join the streaming check, with 100,000 steps of at least one format
    assert set(EMULATED) | {"host"} == set(CASES)
    for cases in CASES.values():
        assert max(steps for _, _, steps, _ in cases) >= STEPS
        assert any(every == 1 for _, _, _, every in cases)
        assert {(m, w) for m, w, _, _ in cases} >= {VDP32, VDP16} and any(
            m == "vanderpol_pair" for m, _, _, _ in cases)


@pytest.mark.parametrize(("board", "model", "word_bits", "steps", "every"), _params())
def test_the_stream_is_bit_exact(board: str, model: str, word_bits: int, steps: int, every: int) -> None:
    profile = load_profile(board) if board == "host" else tools_or_skip(board)
    built = _design(model, word_bits)
    started = time.perf_counter()
    report = stream_on_board(built, profile, steps=steps, every=every)
    seconds = time.perf_counter() - started
    assert report.ok and report.bit_exact, report.to_json()
    assert report.steps_compared == steps and report.states_compared == steps // every
    assert report.missing_states == 0 and report.conflicts == 0
    hello = report.hello
    assert hello["fingerprint"] == built.plan.program.fingerprint()
    assert hello["word_bits"] == word_bits and hello["int_bits"] == profile.int_bits
    assert hello["states"] == len(built.plan.program.state_names)
    assert report.frames["corrupt"] == report.frames["dropped"] == report.frames["resent"] == 0
    assert report.cost["unit"] == profile.cost_unit and report.cost["per_step"] > 0
    assert report.size["stack"] > 0
    if profile.flash_bytes:
        assert report.size["text"] + report.size["data"] <= profile.flash_bytes
    print(f"\n{board} {model} {word_bits}-bit: {steps:,} steps (every {every}) in {seconds:.1f} s "
          f"(stream {report.seconds['stream']:.1f} s); {report.cost['per_step']:,.0f} "
          f"{report.cost['unit']} a step; text {report.size['text']:,} bytes, stack "
          f"{report.size['stack']} bytes")


@pytest.mark.slow
def test_a_sine_table_is_read_from_flash_on_the_atmega328p(tmp_path) -> None:
    """A step with a sine table (phase_chain cut to two joints: sine coupling, and a half-turn
    phase bias that must wrap into the word) streams bit-exact from the ATmega328P, and its table
    stays out of RAM: the image's initialised data is smaller than the table alone."""
    profile = tools_or_skip("atmega328p")
    text = (Path(model_package.__file__).parent / "library" / "phase_chain.toml").read_text()
    text = text.replace("count = 8", "count = 2")
    text = "\n".join('labels = ["head", "tail"]' if line.startswith("labels") else line
                     for line in text.splitlines())
    (tmp_path / "two_joints.toml").write_text(text)
    built = design(load_model(tmp_path / "two_joints.toml").with_fixed_point(word_bits=16))
    table = max(len(op.table) for op in built.plan.program.ops if op.table)
    report = stream_on_board(built, profile, steps=10_000, every=10)
    assert report.ok and report.bit_exact, report.to_json()
    assert report.size["data"] < 2 * table, report.size
