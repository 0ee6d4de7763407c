"""Model files: the built-in model loads, and every broken file gets file, line and offending
text in its message."""

from __future__ import annotations

from pathlib import Path

import pytest

from orbitfix.gen.errors import InputError
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.model.model_file import builtin_names, load_model

GOOD = """\
name = "pump"
description = "a peristaltic pump's pacing oscillator"

[states]
x = { initial = 0.5, meaning = "roller phase" }
y = 0.0

[parameters]
mu = 1.5

[equations]
x = "y"
y = "mu * (1 - x^2) * y - x"

[rhythm]
cycle_hz = 0.5
loop_hz = 200
"""


def write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "model.toml"
    path.write_text(text)
    return path


def test_builtin_vanderpol_loads_by_name() -> None:
    assert "vanderpol" in builtin_names()
    model = load_model("vanderpol")
    assert model.state_names == ("x", "y")
    assert model.parameter_values == {"mu": 1.0}
    assert model.source == "built-in:vanderpol"


def test_file_and_python_api_give_the_same_model(tmp_path: Path) -> None:
    from_file = load_model(str(write(tmp_path, GOOD)))
    built = define_model("pump", {"x": 0.5, "y": 0.0}, {"x": "y", "y": "mu * (1 - x^2) * y - x"},
                         {"mu": 1.5}, cycle_hz=0.5, loop_hz=200,
                         description="a peristaltic pump's pacing oscillator")
    assert from_file.resolved_equations == built.resolved_equations
    assert from_file.with_parameters({"mu": 2}).parameter_values == {"mu": 2.0}


@pytest.mark.parametrize(("change", "line", "words"), [
    (('y = "mu * (1 - x^2) * y - x"', 'y = "mu * (1 - x^2) * y - log(x)"'), 13, "log"),
    (('y = "mu * (1 - x^2) * y - x"', 'y = "mu * (1 - q) * y - x"'), 13, "'q'"),
    (("mu = 1.5", 'mu = "fast"'), 9, "must be a number"),
    (("loop_hz = 200", "loop_hz = 200\nwobble = 3"), 18, "unknown key 'wobble'"),
    (('x = "y"', 'z = "y"'), 12, "not a state"),
    (("[rhythm]", "[rhythm"), 15, "not valid TOML"),
])
def test_broken_files_name_file_line_and_text(tmp_path: Path, change: tuple[str, str], line: int,
                                              words: str) -> None:
    path = write(tmp_path, GOOD.replace(*change))
    with pytest.raises(InputError) as caught:
        load_model(str(path))
    message = str(caught.value)
    assert f"{path}:{line}" in message
    assert words in message
    assert "accepted" in message


def test_unknown_name_lists_builtins() -> None:
    with pytest.raises(InputError, match=r"built-in: .*vanderpol"):
        load_model("no_such_oscillator")


def test_unknown_parameter_override_is_refused() -> None:
    with pytest.raises(InputError, match=r"no parameter 'nu'.*mu"):
        load_model("vanderpol").with_parameters({"nu": 1.0})


def test_loop_rate_must_exceed_cycle_rate() -> None:
    with pytest.raises(InputError, match="at least 4 times"):
        define_model("slow", {"x": 1}, {"x": "-x"}, cycle_hz=10, loop_hz=20)
