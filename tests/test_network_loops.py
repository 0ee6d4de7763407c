"""Networks as loops (issue 10, item 2): a network of identical oscillators is lowered as one
repeat per piece of work (each oscillator's copy alike, ``IntegerProgram.repeats``), planned with
one format per position, and rendered as loops over arrays and one static function per routine
(gen/c/loops.py), with the coupling's numbers in per-oscillator tables. Checked: the coupling
read off the flattened equations is the rotation coupling of the network's description, the
firmware has the loop form, it is bit-exact with golden on the host, a table entry off by one
LSB fails the host proof, copies that differ are written out one by one, and the trot fits the
ATmega328P and the Cortex-M0 (image sizes)."""

from __future__ import annotations

import functools
import math
import re
from dataclasses import replace

import pytest
from test_boards_emulated import tools_or_skip

from orbitfix.gen.c.emit import render_model
from orbitfix.gen.c.naming import CNames
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import Design, design
from orbitfix.gen.program.lowering import identical_copies
from orbitfix.verify.proofs.board_stream import build_for_board
from orbitfix.verify.proofs.host_check import check_on_host

GAIT_MODELS = ("quadruped_trot", "quadruped_walk", "quadruped_pace", "quadruped_bound")


@functools.cache
def _design(name: str, word_bits: int = 16) -> Design:
    return design(load_model(name).with_fixed_point(word_bits=word_bits))


def _firmware(built: Design) -> str:
    return render_model(built.model, built.timing, built.integrator,
                        built.plan)[CNames(built.model.name).source]


@pytest.mark.parametrize("name", ["quadruped_trot", "quadruped_walk"])
def test_coupling_read_off_the_equations_is_the_rotation_coupling(name: str) -> None:
    # Rotation coupling of Hopf oscillators (Righetti and Ijspeert, ICRA 2008, written from
    # memory in gen/model/networks.py): (x_i, y_i)' += k R(theta_ij) (x_j, y_j), with
    # theta_ij = -2 pi (lag_i - lag_j); so x_i' gets k cos(theta) x_j - k sin(theta) y_j and
    # y_i' gets k sin(theta) x_j + k cos(theta) y_j. Computed here with math, independently.
    model = load_model(name)
    copies = identical_copies(model)
    assert copies is not None
    lags = model.network.wanted_lags
    k = model.parameter_values["k"]
    count = len(lags)
    for i in range(count):
        got = dict(zip(copies.coupling, copies.weights[i], strict=True))
        for r in range(1, count):
            j = (i + r) % count
            theta = -2 * math.pi * (lags[i] - lags[j])
            want = {(0, r, 0): k * math.cos(theta), (0, r, 1): -k * math.sin(theta),
                    (1, r, 0): k * math.sin(theta), (1, r, 1): k * math.cos(theta)}
            for place, value in want.items():
                assert got.get(place, 0.0) == pytest.approx(value, abs=1e-12)


def test_networks_that_are_not_identical_linear_copies_keep_the_straight_line_form() -> None:
    # the walking platform's coupling ramps with a runtime parameter; phase_chain has angles
    assert identical_copies(load_model("walking_platform")) is None
    assert identical_copies(load_model("phase_chain")) is None
    assert identical_copies(load_model("vanderpol")) is None


def test_every_copy_of_a_routine_has_one_format_per_position() -> None:
    program = _design("quadruped_trot").plan.program
    assert program.repeats and len(program.routines) == len(program.repeats)
    copies: dict[int, list] = {}
    for number, repeat in zip(program.routines, program.repeats, strict=True):
        copies.setdefault(number, []).extend(repeat)
    assert max(len(c) for c in copies.values()) == 16  # the rates: 4 stages x 4 legs
    for same in copies.values():
        for place in zip(*same, strict=True):
            assert len({(program.ops[i].kind, program.ops[i].fraction_bits) for i in place}) == 1
            if len(same) == 16:  # the rates: the same shifts and alignments too (the stage
                # points differ in their step constant, h/2 or h, so in a shift)
                assert len({(program.ops[i].shift, program.ops[i].align) for i in place}) == 1


@pytest.mark.parametrize("name", GAIT_MODELS)
def test_gait_networks_render_as_loops_and_routines(name: str) -> None:
    built = _design(name)
    source = _firmware(built)
    step = source[source.index(f"void {name}_step("):]
    routines = re.findall(rf"static void ({name}_routine\d+)\(", source)
    assert routines, "no routine function"
    calls = {r: len(re.findall(rf"\b{r}\(v", step)) for r in routines}
    assert 4 in calls.values()  # the rates, once per RK4 stage
    assert "for (unsigned int oscillator = 0u; oscillator < 4u; oscillator++)" in source
    # the coupling's numbers, where the oscillators' differ (not in the pace, whose every leg
    # has the same), sit in per-oscillator tables read through the flash macro
    differ = len(set(identical_copies(built.model).weights)) > 1
    assert differ == (name != "quadruped_pace")
    assert bool(re.search(rf"static const int16_t kc\d+\[4\] {name.upper()}_IN_FLASH", source)) == differ
    assert (f"{name.upper()}_TABLE_ENTRY(kc" in source) == differ
    # far fewer lines than one per value of the program
    assert len(re.findall(r"^\s+const int16_t v\d+ =", step, re.M)) < len(built.plan.program.ops) / 4


@pytest.mark.parametrize("word_bits", [16, 32])
def test_trot_in_loops_is_bit_exact_on_the_host(word_bits: int) -> None:
    outcome = check_on_host(_design("quadruped_trot", word_bits), states=20_000, steps=20_000,
                            sanitized_states=2000)
    assert outcome.report.bit_exact, outcome.report.first_mismatch


def test_walk_in_loops_is_bit_exact_on_the_host() -> None:
    outcome = check_on_host(_design("quadruped_walk"), states=20_000, steps=20_000,
                            sanitized_states=0)
    assert outcome.report.bit_exact, outcome.report.first_mismatch


def test_a_coupling_table_entry_off_by_one_lsb_fails_the_host_proof(tmp_path) -> None:
    # the seeded fault: one oscillator's coupling number one LSB off in the shipped table
    built = _design("quadruped_trot")
    files = render_model(built.model, built.timing, built.integrator, built.plan)
    for name, text in files.items():
        (tmp_path / name).write_text(text)
    source = files["quadruped_trot.c"]
    table = re.search(r"(static const int16_t kc0\[4\] QUADRUPED_TROT_IN_FLASH = \{\s*INT16_C\()"
                      r"(-?\d+)\)", source)
    assert table
    edited = source.replace(table.group(0), f"{table.group(1)}{int(table.group(2)) + 1})", 1)
    (tmp_path / "quadruped_trot.c").write_text(edited)
    outcome = check_on_host(built, tmp_path, states=5000, steps=5000, sanitized_states=0)
    assert not outcome.report.bit_exact
    assert outcome.report.first_mismatch is not None
    # and the untouched files pass
    (tmp_path / "quadruped_trot.c").write_text(source)
    assert check_on_host(built, tmp_path, states=5000, steps=5000,
                         sanitized_states=0).report.bit_exact


def test_copies_whose_c_differs_are_written_out_one_by_one() -> None:
    # one copy's value marked not proven (so its C clamps where the others wrap): the check
    # must refuse the loop for that repeat and write its copies out into the same arrays
    built = _design("quadruped_trot")
    program = built.plan.program
    last = program.repeats[-1]
    index = last[2][0]
    ops = list(program.ops)
    ops[index] = replace(ops[index], proven=False)
    changed = replace(built, plan=replace(built.plan, program=replace(program, ops=tuple(ops))))
    before, after = _firmware(built), _firmware(changed)
    first = last[0][-1]  # the last value of the first copy: the next state, kept in an array
    assert f"v{first}[oscillator] =" in before
    assert f"v{first}[oscillator] =" not in after
    assert all(f"v{first}[{c}] =" in after for c in range(4))
    assert after.count("for (unsigned int oscillator") == before.count("for (unsigned int oscillator") - 1


@pytest.mark.slow
@pytest.mark.parametrize("board", ["atmega328p", "microbit"])
def test_trot_16_bit_fits_the_small_parts(board: str) -> None:
    # the goal of issue 10, item 2: under 8 KB of flash and 512 B of stack with the board's
    # streaming harness (figures deterministic for one compiler; bench_network_loops prints them)
    profile = tools_or_skip(board)
    image = build_for_board(_design("quadruped_trot"), profile)
    assert image.size["text"] < 8 * 1024
    assert image.stack_bytes is not None and image.stack_bytes < 512
