"""The generated self-test (NAME_selftest.c): it passes on the C it was generated with, under every
compiler of the warning matrix, and fails when a constant of NAME.c is changed by one LSB: always
when the change moves the orbit from the init state within the test's span (found independently,
by stepping the original and the changed C side by side: common practice, a differential run), and
for every change its header does not name as changing no sampled step (constants, a network's
coupling table entries, outputs' and ramps' numbers)."""

from __future__ import annotations

import functools
import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest
from conftest import compilers

from orbitfix.gen.c.emit import render_model
from orbitfix.gen.c.selftest import render_selftest
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import Design, design
from orbitfix.gen.study.start_path import check_start_path
from orbitfix.verify.cli.main import main

STRICT = ["-std=c99", "-Wall", "-Wextra", "-Wconversion", "-Wsign-conversion", "-pedantic",
          "-Werror", "-O2"]
CONSTANT = re.compile(r"static const int(16|32)_t (k\d+) = INT(?:16|32)_C\((-?\d+)\);")
TABLE = re.compile(r"static const int(16|32)_t (kc\d+)\[\d+\] \w+ = \{([^}]*)\}")
ENTRY = re.compile(r"INT(?:16|32)_C\((-?\d+)\)")

RUN_SELFTEST = '#include "vanderpol_selftest.h"\nint main(void) { return vanderpol_selftest(); }\n'
SIDE_BY_SIDE = """\
#include <stdio.h>
#include "vanderpol.h"
void changed_init(vanderpol_state_t *s);
void changed_step(vanderpol_state_t *s);
int main(void)
{
    vanderpol_state_t a, b;
    long k;
    vanderpol_init(&a);
    changed_init(&b);
    for (k = 1; k <= %d; ++k) {
        vanderpol_step(&a);
        changed_step(&b);
        if (a.x != b.x || a.y != b.y) {
            printf("%%ld\\n", k);
            return 0;
        }
    }
    printf("0\\n");
    return 0;
}
"""


@pytest.fixture(scope="module", params=[32, 16])
def firmware(request, tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp(f"selftest{request.param}")
    assert main(["gen", "vanderpol", "--word", str(request.param), "-o", str(folder)]) == 0
    (folder / "run_selftest.c").write_text(RUN_SELFTEST)
    return folder


def _run(folder: Path, sources: list[str], cc: str = "gcc",
         flags: list[str] = STRICT) -> subprocess.CompletedProcess:
    program = folder / f"program_{os.getpid()}"
    subprocess.run([cc, *flags, *sources, "-o", str(program)], cwd=folder, check=True,
                   capture_output=True, text=True)
    return subprocess.run([str(program)], cwd=folder, capture_output=True, text=True, check=False)


def _last_checkpoint(folder: Path) -> int:
    text = (folder / "vanderpol_selftest.c").read_text()
    table = text[text.index("checkpoint_steps["):text.index("};", text.index("checkpoint_steps["))]
    return int(re.findall(r"UINT32_C\((\d+)\)", table)[-1])


@pytest.mark.parametrize("cc", compilers())
def test_the_self_test_passes_on_its_own_c(firmware, cc, capsys) -> None:
    capsys.readouterr()
    done = _run(firmware, ["vanderpol.c", "vanderpol_selftest.c", "run_selftest.c"], cc)
    assert done.returncode == 0


def one_lsb_changes(source: str):
    """Every stored number of a generated NAME.c (each constant ``kN`` and each entry ``kcN[i]``
    of a per-oscillator table) moved up and down by one: (its name as the self-test's header
    writes it, e.g. ``kc0[2]+1``, the changed source)."""
    for match in CONSTANT.finditer(source):
        bits, name, value = int(match.group(1)), match.group(2), int(match.group(3))
        for change in (1, -1):
            if -(1 << (bits - 1)) <= value + change < (1 << (bits - 1)):
                yield (f"{name}{change:+d}", source.replace(
                    match.group(0), match.group(0).replace(f"({value})", f"({value + change})")))
    for match in TABLE.finditer(source):
        bits, name, body = int(match.group(1)), match.group(2), match.group(3)
        entries = list(ENTRY.finditer(body))
        for i, entry in enumerate(entries):
            value = int(entry.group(1))
            for change in (1, -1):
                if -(1 << (bits - 1)) <= value + change < (1 << (bits - 1)):
                    changed = (body[:entry.start()] + f"INT{bits}_C({value + change})"
                               + body[entry.end():])
                    yield (f"{name}[{i}]{change:+d}", source.replace(
                        match.group(0), match.group(0).replace(body, changed)))


def named_in_header(header: str) -> tuple[int, int, set[str]]:
    """What the self-test's header says of one-LSB changes: (caught, tried, the names of those
    that changed no sampled step, listed one indented comment line after another)."""
    claimed = re.search(r"(\d+) of the (\d+) such changes are caught by a probe",
                        " ".join(header.split()))
    assert claimed is not None
    lines = header.splitlines()
    names: set[str] = set()
    for k, line in enumerate(lines):
        if line.endswith("may catch them:"):
            for listed in lines[k + 1:]:
                if not listed.startswith(" *   "):
                    break
                names.update(n.strip() for n in listed[5:].split(",") if n.strip())
    return int(claimed.group(1)), int(claimed.group(2)), names


def test_it_fails_when_a_constant_changes_by_one_lsb(firmware) -> None:
    # every one-LSB change of a constant fails the self-test, except the ones its header names
    # as changing no sampled step; of those, any that moves the orbit from the init state within
    # the test's span (found independently, by stepping the original and the changed C side by
    # side: common practice, a differential run) must still fail it
    source = (firmware / "vanderpol.c").read_text()
    span = _last_checkpoint(firmware)
    (firmware / "side_by_side.c").write_text(SIDE_BY_SIDE % span)
    caught, tried, hidden = named_in_header((firmware / "vanderpol_selftest.h").read_text())
    changes = list(one_lsb_changes(source))
    assert tried == len(changes) and caught + len(hidden) == tried
    # every bit of every constant counts: the planner stores a constant as finely as its readers
    # use it (the 1 of 1 - x**2 was Q3.13 where the sum kept Q6.10, so +-1 LSB changed nothing)
    assert not hidden
    for name, text in changes:
        (firmware / "vanderpol.c").write_text(text)
        selftest = _run(firmware, ["vanderpol.c", "vanderpol_selftest.c", "run_selftest.c"])
        renamed = text.replace("vanderpol_init(", "changed_init(").replace(
            "vanderpol_step(", "changed_step(")
        (firmware / "changed.c").write_text(renamed)
        (firmware / "vanderpol.c").write_text(source)
        moved_at = int(_run(firmware, ["vanderpol.c", "changed.c", "side_by_side.c"],
                            flags=["-std=c99", "-O2"]).stdout)
        if name not in hidden or 0 < moved_at <= span:
            assert selftest.returncode != 0, (name, moved_at)


@functools.cache
def _design(name: str, word_bits: int) -> Design:
    return design(load_model(name).with_fixed_point(word_bits=word_bits))


@pytest.mark.parametrize(("name", "word_bits"), [("quadruped_trot", 16), ("walking_platform", 16)])
def test_every_stored_number_one_lsb_off_fails_unless_the_header_names_it(
        name: str, word_bits: int, tmp_path: Path) -> None:
    # the looped trot (its coupling in per-oscillator tables) and the walking platform (outputs
    # with clamps and slew limits, a runtime setting that ramps): every constant and table entry
    # one LSB up or down fails the self-test, except those the header names; the trot's coupling
    # tables are all caught. The files as gen writes them, from the design (gen's studies add
    # minutes and nothing here).
    built = _design(name, word_bits)
    start = check_start_path(built)
    texts = {**render_model(built.model, built.timing, built.integrator, built.plan),
             **render_selftest(built.model, built.timing, built.integrator, built.plan,
                               start.trajectory, start.counts)}
    for file, text in texts.items():
        (tmp_path / file).write_text(text)
    (tmp_path / "run.c").write_text(f'#include "{name}_selftest.h"\n'
                                    f"int main(void) {{ return {name}_selftest(); }}\n")
    for part in (f"{name}_selftest.c", "run.c"):
        subprocess.run(["gcc", *STRICT, "-c", part], cwd=tmp_path, check=True, capture_output=True)
    objects = [f"{name}_selftest.o", "run.o"]

    def selftest(source: str) -> int:
        (tmp_path / "step.c").write_text(source)
        subprocess.run(["gcc", "-std=c99", "-O1", "step.c", *objects, "-o", "selftest"],
                       cwd=tmp_path, check=True, capture_output=True)
        return subprocess.run([str(tmp_path / "selftest")], check=False).returncode

    source = texts[f"{name}.c"]
    assert selftest(source) == 0
    caught, tried, hidden = named_in_header(texts[f"{name}_selftest.h"])
    changes = list(one_lsb_changes(source))
    assert tried == len(changes) and caught + len(hidden) == tried
    missed = [change for change, text in changes if selftest(text) == 0]
    assert set(missed) <= hidden, set(missed) - hidden
    if name == "quadruped_trot":
        assert any("[" in change for change, _ in changes)
        assert not any("[" in change for change in hidden)


@pytest.mark.parametrize(("old", "new"), [
    ("state->saturated_steps = 0u;", "state->saturated_steps = 1u;"),           # init leaves 1
    ("state->saturated_steps += 1u;", ""),                                    # never counts
])
def test_it_fails_when_the_count_of_saturated_steps_is_wrong(firmware, tmp_path, old, new) -> None:
    # Seeded faults in the firmware's count: the checkpoints compare the count (0 on the path) and
    # the probes the count after one step (1 from the probe just beyond a proven range).
    source = (firmware / "vanderpol.c").read_text()
    assert old in source
    for name in ("vanderpol.h", "vanderpol_selftest.h", "vanderpol_selftest.c", "run_selftest.c"):
        (tmp_path / name).write_text((firmware / name).read_text())
    (tmp_path / "vanderpol.c").write_text(source.replace(old, new, 1))
    done = _run(tmp_path, ["vanderpol.c", "vanderpol_selftest.c", "run_selftest.c"])
    assert done.returncode != 0


@pytest.mark.skipif(shutil.which("arm-none-eabi-gcc") is None, reason="arm-none-eabi-gcc is not installed")
def test_the_self_test_builds_warning_free_for_a_cortex_m0(firmware) -> None:
    flags = [*STRICT, "-mcpu=cortex-m0", "-mthumb", "-c"]
    for name in ("vanderpol.c", "vanderpol_selftest.c"):
        subprocess.run(["arm-none-eabi-gcc", *flags, name, "-o", f"{name}.o"], cwd=firmware,
                       check=True, capture_output=True)
