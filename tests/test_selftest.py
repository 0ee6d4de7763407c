"""The generated self-test (NAME_selftest.c): it passes on the C it was generated with, under every
compiler of the warning matrix, and fails when a constant of NAME.c is changed by one LSB: always
when the change moves the orbit from the init state within the test's span (found independently,
by stepping the original and the changed C side by side: common practice, a differential run), and
for as many changes as the header says its probes catch."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest
from conftest import compilers

from orbitfix.verify.cli.main import main

STRICT = ["-std=c99", "-Wall", "-Wextra", "-Wconversion", "-Wsign-conversion", "-pedantic",
          "-Werror", "-O2"]
CONSTANT = re.compile(r"static const int(16|32)_t (k\d+) = INT(?:16|32)_C\((-?\d+)\);")

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


def test_it_fails_when_a_constant_changes_by_one_lsb(firmware) -> None:
    source = (firmware / "vanderpol.c").read_text()
    span = _last_checkpoint(firmware)
    (firmware / "side_by_side.c").write_text(SIDE_BY_SIDE % span)
    caught = 0
    for match in CONSTANT.finditer(source):
        bits, name, value = match.group(1), match.group(2), int(match.group(3))
        for change in (1, -1):
            new = value + change
            if not -(1 << (int(bits) - 1)) <= new < (1 << (int(bits) - 1)):
                continue
            text = source.replace(match.group(0), match.group(0).replace(f"({value})", f"({new})"))
            (firmware / "vanderpol.c").write_text(text)
            selftest = _run(firmware, ["vanderpol.c", "vanderpol_selftest.c", "run_selftest.c"])
            renamed = text.replace("vanderpol_init(", "changed_init(").replace(
                "vanderpol_step(", "changed_step(")
            (firmware / "changed.c").write_text(renamed)
            (firmware / "vanderpol.c").write_text(source)
            moved_at = int(_run(firmware, ["vanderpol.c", "changed.c", "side_by_side.c"],
                                flags=["-std=c99", "-O2"]).stdout)
            if 0 < moved_at <= span:
                assert selftest.returncode != 0, (name, change, moved_at)
            caught += selftest.returncode != 0
    claimed = re.search(r"\((\d+) of the (\d+) such changes show there",
                        " ".join((firmware / "vanderpol_selftest.h").read_text().split()))
    assert claimed is not None
    assert caught >= int(claimed.group(1)) >= 1


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
