"""The generated C: warning-free under strict flags with every compiler at hand and several
optimisation levels, free of floating point, heap and undefined behaviour, and safe with any
names and text a model may carry."""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import pytest
from conftest import compilers

from orbitfix.gen.c.emit import render_host_harness, render_model, render_trace
from orbitfix.gen.c.naming import CNames, comment_text, identifier
from orbitfix.gen.c.selftest import render_selftest
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.study.start_path import check_start_path

STRICT = ["-std=c99", "-pedantic", "-Werror", "-Wall", "-Wextra", "-Wconversion",
          "-Wsign-conversion", "-Wundef", "-Wshadow", "-Wcast-qual", "-Wstrict-prototypes",
          "-Wmissing-prototypes", "-Wredundant-decls", "-Wdouble-promotion", "-Wfloat-equal"]


def write_sources(folder: Path, built) -> dict[str, str]:
    files = render_model(built.model, built.timing, built.integrator, built.plan)
    files.update(render_trace(built.model, built.timing, built.integrator, built.plan))
    path = check_start_path(built)
    files.update(render_selftest(built.model, built.timing, built.integrator, built.plan,
                                 path.trajectory, path.counts))
    files["harness.c"] = render_host_harness(built.model, built.plan.program)
    for name, text in files.items():
        (folder / name).write_text(text)
    return files


@pytest.mark.parametrize("level", ["-O0", "-O2", "-Os"])
@pytest.mark.parametrize("cc", compilers())
def test_compiles_warning_free_under_strict_flags(tmp_path: Path, vanderpol_design, cc: str,
                                                  level: str) -> None:
    write_sources(tmp_path, vanderpol_design)
    for source in ("vanderpol.c", "vanderpol_trace.c", "vanderpol_selftest.c", "harness.c"):
        done = subprocess.run([cc, *STRICT, level, "-c", source], cwd=tmp_path,
                              capture_output=True, text=True, check=False)
        assert done.returncode == 0 and done.stderr == "", done.stderr


def test_no_floating_point_and_no_heap(tmp_path: Path, vanderpol_design) -> None:
    files = write_sources(tmp_path, vanderpol_design)
    code = re.sub(r"/\*.*?\*/", "", files["vanderpol.c"] + files["vanderpol.h"], flags=re.S)
    for word in ("float", "double", "malloc", "calloc", "realloc", "free"):
        assert not re.search(rf"\b{word}\b", code), word
    # On x86-64, -mgeneral-regs-only rejects any floating-point operation outright.
    done = subprocess.run(["gcc", *STRICT, "-O2", "-mgeneral-regs-only", "-c", "vanderpol.c"],
                          cwd=tmp_path, capture_output=True, text=True, check=False)
    if "unrecognized" in done.stderr:
        pytest.skip("this gcc has no -mgeneral-regs-only for the host")
    assert done.returncode == 0, done.stderr


UBSAN_DRIVER = r"""
#include <stdint.h>
#include <stdio.h>
#include "vanderpol_trace.h"

typedef WORD word_t;

/* xorshift64 (Marsaglia 2003): a plain pseudo-random source for states over the whole word. */
static uint64_t next(uint64_t *s) { *s ^= *s << 13; *s ^= *s >> 7; *s ^= *s << 17; return *s; }

int main(void)
{
    uint64_t seed = 88172645463325252u;
    long k;
    vanderpol_state_t st;
    word_t trace[VANDERPOL_TRACE_LENGTH];
    for (k = 0; k < 200000; ++k) {
        st.x = (word_t)next(&seed);
        st.y = (word_t)next(&seed);
        if (k % 3 == 0) { st.x = (k & 4) ? LOW : HIGH; }
        if (k % 5 == 0) { st.y = (k & 8) ? LOW : HIGH; }
        vanderpol_step_traced(&st, trace);
    }
    vanderpol_init(&st);
    for (k = 0; k < 100000; ++k) { vanderpol_step(&st); }
    printf("%ld %ld\n", (long)st.x, (long)st.y);
    return 0;
}
"""

SEMANTICS = [(w, r, o) for w in (16, 32) for r in ("truncate", "half-up", "half-even", "mixed")
             for o in ("saturate", "wrap")]


def variant(base, word: int, rounding: str, overflow: str):
    model = base.model.with_fixed_point(word_bits=word, rounding=rounding, overflow=overflow)
    return design(model, analysis=base.analysis)


@pytest.mark.parametrize(("word", "rounding", "overflow"), SEMANTICS)
def test_every_semantics_compiles_clean_and_runs_free_of_undefined_behaviour(
        tmp_path: Path, vanderpol_design, word: int, rounding: str, overflow: str) -> None:
    # -fsanitize=undefined with no recovery: any signed overflow or bad shift aborts the run
    # (common practice for proving C free of undefined behaviour on the inputs given).
    built = variant(vanderpol_design, word, rounding, overflow)
    write_sources(tmp_path, built)
    (tmp_path / "driver.c").write_text(UBSAN_DRIVER)
    for cc in compilers():
        for source in ("vanderpol.c", "vanderpol_trace.c", "harness.c"):
            done = subprocess.run([cc, *STRICT, "-O2", "-c", source], cwd=tmp_path,
                                  capture_output=True, text=True, check=False)
            assert done.returncode == 0 and done.stderr == "", (cc, done.stderr)
        build = subprocess.run([cc, "-std=c99", "-O1", "-fsanitize=undefined",
                                "-fno-sanitize-recover=all", f"-DWORD=int{word}_t",
                                f"-DLOW=INT{word}_MIN", f"-DHIGH=INT{word}_MAX",
                                "vanderpol.c", "vanderpol_trace.c", "driver.c", "-o", "ub"],
                               cwd=tmp_path, capture_output=True, text=True, check=False)
        assert build.returncode == 0, build.stderr
        run = subprocess.run([str(tmp_path / "ub")], capture_output=True, text=True, check=False)
        assert run.returncode == 0 and "runtime error" not in run.stderr, (cc, run.stderr)


def test_output_is_reproducible_and_carries_no_timestamp(vanderpol_design) -> None:
    first = render_model(vanderpol_design.model, vanderpol_design.timing,
                         vanderpol_design.integrator, vanderpol_design.plan)
    again = design(vanderpol_design.model)
    second = render_model(again.model, again.timing, again.integrator, again.plan)
    assert first == second
    assert not re.search(r"20\d\d-\d\d-\d\d|\d\d:\d\d:\d\d", first["vanderpol.c"])


def test_every_file_opens_with_an_spdx_line(tmp_path: Path, vanderpol_design) -> None:
    # The SPDX specification's short-form identifier (an open standard; "MIT" is on the SPDX
    # License List): the exact line, first in the file, where license scanners look.
    for name, text in write_sources(tmp_path, vanderpol_design).items():
        if name != "harness.c":
            assert text.splitlines()[0] == "/* SPDX-License-Identifier: MIT */", name


def test_every_constant_comment_shows_real_value_and_error(vanderpol_design) -> None:
    source = render_model(vanderpol_design.model, vanderpol_design.timing,
                          vanderpol_design.integrator, vanderpol_design.plan)["vanderpol.c"]
    lines = [line for line in source.splitlines() if line.startswith("static const int32_t")]
    assert lines
    for line in lines:
        assert re.search(r"/\* -?[0-9.e+-]+ in Q-?\d+\.\d+ .*(exact|error [+-][0-9.e+-]+) \*/", line), line


def test_user_text_and_names_cannot_break_the_c(tmp_path: Path) -> None:
    # C keywords as names are refused when the model is read (tests/test_names.py)
    with pytest.raises(InputError, match="C keyword"):
        define_model("double", {"int": 0.5, "y": 0.0}, {"int": "y", "y": "-int"},
                     cycle_hz=1, loop_hz=100)
    model = define_model("doubled", {"integral": 0.5, "y": 0.0},
                         {"integral": "y", "y": "(1 - integral^2) * y - integral"},
                         cycle_hz=1, loop_hz=100,
                         description="ends a comment */ early ??/ and \u00e9 too")
    model = model.with_parameters({})
    built = design(model)
    write_sources(tmp_path, built)
    assert "*/ early" not in (tmp_path / "doubled.c").read_text()
    for source in ("doubled.c", "doubled_trace.c", "harness.c"):
        done = subprocess.run(["gcc", *STRICT, "-Wtrigraphs", "-c", source], cwd=tmp_path,
                              capture_output=True, text=True, check=False)
        assert done.returncode == 0 and done.stderr == "", done.stderr


def test_naming_policy() -> None:
    with pytest.raises(InputError, match="C keyword"):  # refused, never escaped (tests/test_names.py)
        identifier("int")
    assert identifier("x") == "x"
    assert comment_text("a */ b /* c ??/\nd") == "a * / b / * c ? ?/ d"
    names = CNames("Fin_Drive")
    assert (names.state_type, names.guard, names.step) == (
        "fin_drive_state_t", "FIN_DRIVE_H_INCLUDED", "fin_drive_step")
