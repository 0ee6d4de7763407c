"""The naming policy (gen/c/naming.py) refuses, when the model is read and with the reason, every
name that cannot be used safely in the generated C on any of our targets; it never escapes."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

from orbitfix.gen.c.naming import check_names, name_problem
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.definition import define_model
from orbitfix.verify.cli.main import main

MODEL = """\
name = "{name}"

[states]
{state} = {{ initial = 2.0 }}
y = 0.0

[parameters]
mu = {{ value = 1.0, runtime = true, min = 0.5, max = 2.0 }}

[equations]
{state} = "y"
y = "mu * (1 - {state}^2) * y - {state}"

[rhythm]
cycle_hz = 1.0
loop_hz = 200
"""


def refused(tmp_path: Path, capsys: pytest.CaptureFixture, name: str = "pump", state: str = "x") -> str:
    path = tmp_path / "model.toml"
    path.write_text(MODEL.format(name=name, state=state))
    code = main(["gen", str(path), "-o", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert code == 2, err
    assert "Traceback" not in err and "internal error" not in err
    assert not (tmp_path / "out").exists()  # refused before any work
    return err


@pytest.mark.parametrize(("state", "reason"), [
    ("INT32_MAX", "limit macros of <stdint.h>"),
    ("SIZE_MAX", "limit macros of <stdint.h>"),
    ("INT8_C", "limit macros of <stdint.h>"),
    ("int32_t", "_t"),
    ("size_t", "_t"),
    ("PUMP_H_INCLUDED", "header guard PUMP_H_INCLUDED"),
    ("PUMP_FRACTION_BITS", "prefix of the macros"),
    ("int", "C keyword"),
    ("restrict", "C keyword"),
    ("namespace", "C++ keyword"),
    ("asm", "C++ keyword"),
    ("typeof", "C keyword"),
    ("linux", "predefine it as a macro"),
    ("unix", "predefine it as a macro"),
    ("errno", "C library"),
    ("NULL", "C library"),
    ("EDOM", "<errno.h>"),
    ("PRId32", "<inttypes.h>"),
    ("x__y", "double underscore"),
    ("M_PI", "<math.h>"),
    ("BIG_ENDIAN", "<endian.h>"),
    ("HAVE_UNISTD_H", "pyconfig.h"),
    ("orbitfix_x", "orbitfix"),
    ("mu_target", "target of the runtime parameter 'mu'"),
    ("saturated_steps", "count of saturated steps"),
])
def test_unsafe_state_names_are_refused_with_the_reason(tmp_path: Path, capsys, state: str,
                                                        reason: str) -> None:
    err = refused(tmp_path, capsys, state=state)
    assert repr(state) in err and reason in err


@pytest.mark.parametrize(("name", "reason"), [
    ("stdint", "hide the system's <stdint.h>"),
    ("stddef", "hide the system's <stddef.h>"),
    ("assert", "C library"),            # a traceback before
    ("Math", "hide the system's <math.h>"),  # file systems may ignore case
    ("Python", "hide the system's <python.h>"),
    ("orbitfix_harness", "orbitfix"),   # its functions would clash with the host harness's
    ("linux", "predefine it as a macro"),
])
def test_unsafe_model_names_are_refused_with_the_reason(tmp_path: Path, capsys, name: str,
                                                        reason: str) -> None:
    err = refused(tmp_path, capsys, name=name)
    assert repr(name) in err and reason in err


@pytest.mark.parametrize("key", ['"x\\n"', '"\u03b8"', '"x y"', '"x-y"', '"x\\u0000"'])
def test_names_that_are_not_plain_ascii_identifiers_are_refused(tmp_path: Path, capsys,
                                                               key: str) -> None:
    # quoted TOML keys can hold anything; a trailing newline passed the old check
    path = tmp_path / "odd.toml"
    path.write_text(f"name = \"pump\"\n[states]\n{key} = 1.0\ny = 0.0\n[equations]\n{key} = \"y\"\n"
                    "y = \"-y\"\n[rhythm]\ncycle_hz = 1.0\nloop_hz = 200\n")
    code = main(["check", str(path)])
    err = capsys.readouterr().err
    assert code == 2 and "Traceback" not in err, err
    assert "plain ASCII identifier" in err or "letters, digits and underscores" in err


def test_trailing_newline_in_a_python_built_model_is_refused() -> None:
    with pytest.raises(InputError, match="letters, digits and underscores"):
        define_model("pump\n", {"x": 1.0, "y": 0.0}, {"x": "y", "y": "-x"}, cycle_hz=1, loop_hz=100)
    with pytest.raises(InputError, match=r"'x\\n'"):
        define_model("pump", {"x\n": 1.0, "y": 0.0}, {"x\n": "y", "y": "-x"}, cycle_hz=1,
                     loop_hz=100)


def test_no_escaping_so_no_collisions_after_escaping() -> None:
    # the old policy escaped 'int' to 'int_', so a state 'int' beside a state 'int_' made two
    # fields named int_; now 'int' is refused and 'int_' stands for itself
    with pytest.raises(InputError, match="C keyword"):
        check_names("pump", ["int", "int_"], [])
    check_names("pump", ["int_", "y"], [])
    # runtime parameters' macros are made in capitals: two that differ only in case collide
    with pytest.raises(InputError, match="only in capitals"):
        check_names("pump", ["x"], ["k", "K"], runtime=["k", "K"])
    check_names("pump", ["r"], ["R"])  # a state and a folded parameter never meet in the C


@pytest.mark.parametrize("name", ["x", "R", "I", "E", "theta_1", "r_dot", "omega", "sizes",
                                  "left_fore", "tau", "integral", "x_target"])
def test_ordinary_names_are_accepted(name: str) -> None:
    assert name_problem(name) is None


@pytest.mark.skipif(shutil.which("gcc") is None, reason="needs gcc")
@pytest.mark.parametrize("name", ["INT32_MAX", "SIZE_MAX", "linux", "int"])
def test_the_refused_names_do_break_c_as_the_reasons_say(tmp_path: Path, name: str) -> None:
    # The reason for the policy, checked against the compiler itself: a struct field with the
    # name does not compile under gcc's default (GNU) mode (common practice: linux is predefined
    # there on Linux hosts; the others are macros of <stdint.h> and a keyword).
    if name == "linux" and not Path("/proc/version").exists():
        pytest.skip("linux is predefined only on Linux hosts")
    source = tmp_path / "probe.c"
    source.write_text(f"#include <stdint.h>\nstruct probe {{ int32_t {name}; }};\n")
    done = subprocess.run(["gcc", "-c", str(source), "-o", str(tmp_path / "probe.o")],
                          capture_output=True, text=True, check=False)
    assert done.returncode != 0
    accepted = tmp_path / "fine.c"
    accepted.write_text("#include <stdint.h>\nstruct probe { int32_t x_target; int32_t R; };\n")
    done = subprocess.run(["gcc", "-c", str(accepted), "-o", str(tmp_path / "fine.o")],
                          capture_output=True, text=True, check=False)
    assert done.returncode == 0, done.stderr
