"""Absurd numbers and over-large equations end in exit 2 with the place, the key and what is
accepted, never in a traceback (the ranges live in gen/model/limits.py)."""

from __future__ import annotations

import inspect
import sys
from pathlib import Path

import pytest
import sympy
from conftest import refused

from orbitfix.gen.errors import InputError
from orbitfix.gen.model import limits
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.model.expressions import MOST_DEPTH, MOST_OPERATORS, ExpressionError, parse_expression

OSCILLATOR = """\
name = "pump"
description = "Van der Pol oscillator pacing a peristaltic pump"

[states]
x = {x}
y = 0.0

[parameters]
mu = {mu}

[equations]
x = "{equation}"
y = "mu * (1 - x^2) * y - x"

[rhythm]
cycle_hz = {cycle_hz}
loop_hz = {loop_hz}

[fixed_point]
margin = {margin}
"""

GOOD = {"x": "2.0", "mu": "1.0", "equation": "y", "cycle_hz": "1.0", "loop_hz": "200",
        "margin": "2.0"}


def write(tmp_path: Path, **changes: str) -> Path:
    path = tmp_path / "pump.toml"
    path.write_text(OSCILLATOR.format(**{**GOOD, **changes}))
    return path




@pytest.mark.parametrize("value", ["1e308", "-1e308", "inf", "nan", "1e7"])
def test_set_refuses_absurd_parameters(value: str, capsys) -> None:
    err = refused(["check", "vanderpol", "--set", f"mu={value}"], capsys)
    assert "mu" in err
    assert "finite" in err or "accepted" in err


@pytest.mark.parametrize(("key", "value", "words"), [
    ("mu", "1e308", "'mu'"),
    ("mu", "inf", "'mu'"),
    ("mu", "-inf", "'mu'"),
    ("mu", "nan", "'mu'"),
    ("x", "1e300", "'x'"),
    ("cycle_hz", "1e-300", "cycle_hz"),
    ("cycle_hz", "0", "cycle_hz"),
    ("loop_hz", "1e9", "loop_hz"),
    ("loop_hz", "inf", "loop_hz"),
    ("margin", "1e300", "margin"),
])
def test_model_file_refuses_absurd_numbers_with_file_line_and_key(tmp_path: Path, capsys, key: str,
                                                                   value: str, words: str) -> None:
    path = write(tmp_path, **{key: value})
    err = refused(["check", str(path)], capsys)
    assert f"{path}:" in err  # the file and its line
    assert words in err
    assert "accepted" in err


def test_too_many_steps_per_cycle_is_refused(tmp_path: Path, capsys) -> None:
    # each rate alone is accepted, but 1e6 Hz loops for a 0.01 Hz cycle is 1e8 steps per cycle
    path = write(tmp_path, cycle_hz="0.01", loop_hz="1e6")
    err = refused(["check", str(path)], capsys)
    assert "steps per cycle" in err and "accepted" in err


@pytest.mark.parametrize("entry", ["min = -inf, max = 2.0", "min = 0.5, max = 1e308",
                                   "min = 0.5, max = 2.0, rate = 1e300"])
def test_runtime_ranges_are_checked_too(tmp_path: Path, capsys, entry: str) -> None:
    path = write(tmp_path, mu="{ value = 1.0, runtime = true, " + entry + " }")
    err = refused(["check", str(path)], capsys)
    assert "'mu'" in err and "accepted" in err


@pytest.mark.parametrize(("equation", "words"), [
    ("+".join(["y"] * 3000), "operators"),                # a flat chain: RecursionError before
    ("(" * 300 + "y" + ")" * 300, "nested parentheses"),
    ("-" * 300 + "y", "levels"),
    ("1e308 * y", "number in an equation"),
    ("1e309 * y", "number in an equation"),              # Python reads it as inf
    ("y ** 100000", "exponent"),
    ("y" + " " * 30000, "characters"),
])
def test_over_large_equations_are_refused(tmp_path: Path, capsys, equation: str, words: str) -> None:
    path = write(tmp_path, equation=equation)
    err = refused(["check", str(path)], capsys)
    assert f"{path}:" in err and words in err


def test_long_flat_chains_within_the_limit_convert_without_deep_recursion() -> None:
    # A chain of MOST_OPERATORS additions is parsed (Python's parser takes about a frame per
    # term) and converted as one sum with 700 frames to spare; the old converter recursed twice
    # per term and needed over 1200.
    x, y = sympy.Symbol("x"), sympy.Symbol("y")
    text = "+".join(["x", "y"] * (MOST_OPERATORS // 2 + 1))[:-2]
    assert text.count("+") == MOST_OPERATORS
    old = sys.getrecursionlimit()
    sys.setrecursionlimit(len(inspect.stack(0)) + 700)
    try:
        expression = parse_expression(text, {"x": x, "y": y})
    finally:
        sys.setrecursionlimit(old)
    assert expression == text.count("x") * x + text.count("y") * y
    # subtraction and division chains keep their meaning (checked against sympy's own reading)
    chain = "x - y - x / y / 2 - 3 * x * y / 5"
    assert sympy.simplify(parse_expression(chain, {"x": x, "y": y})
                          - sympy.sympify(chain, locals={"x": x, "y": y})) == 0


def test_depth_limit_counts_unflattened_levels_only() -> None:
    x = sympy.Symbol("x")
    deep = "(" * 30 + "x" + ")" * 30  # parentheses alone add no tree level
    assert parse_expression(deep, {"x": x}) == x
    with pytest.raises(ExpressionError, match="levels"):
        parse_expression("-" * (MOST_DEPTH + 1) + "x", {"x": x})


def test_python_built_models_meet_the_same_limits() -> None:
    with pytest.raises(InputError, match=r"cycle_hz.*accepted: a finite number from"):
        define_model("osc", {"x": 1.0, "y": 0.0}, {"x": "y", "y": "-x"},
                     cycle_hz=1e-300, loop_hz=100)
    with pytest.raises(InputError, match=r"'k'.*accepted"):
        define_model("osc", {"x": 1.0, "y": 0.0}, {"x": "y", "y": "-k*x"}, {"k": 1e308},
                     cycle_hz=1, loop_hz=100)


@pytest.mark.parametrize(("limit", "inside", "outside"), [
    (limits.PARAMETER, [0.0, 1e-6, -1e6, 3.5], [1e308, float("inf"), float("nan"), 1e7, 10**400]),
    (limits.CYCLE_HZ, [1e-4, 1e5], [0.0, -1.0, 1e-300, 2e5]),
    (limits.STEPS_PER_CYCLE, [4, 1e6], [3.9, 1e7]),
])
def test_limits_accept_their_range_and_nothing_else(limit, inside, outside) -> None:
    assert all(limit.accepts(v) for v in inside)
    assert not any(limit.accepts(v) for v in outside)
    assert not limit.accepts(True)


@pytest.mark.parametrize(("model", "old", "new", "words"), [
    ("phase_chain", "count = 8", "count = 1000000000", "count"),
    ("phase_chain", "waves = 1.0", "waves = inf", "waves"),
    ("vanderpol_pair", "coupling = [[0, 0.4], [0.4, 0]]", "coupling = [[0, 1e308], [0.4, 0]]",
     "coupling strength"),
])
def test_network_files_refuse_absurd_sizes_and_numbers(tmp_path: Path, capsys, model: str, old: str,
                                                       new: str, words: str) -> None:
    from orbitfix.gen.model.model_file import MODELS_FOLDER

    text = (MODELS_FOLDER / f"{model}.toml").read_text()
    assert old in text
    path = tmp_path / f"{model}.toml"
    path.write_text(text.replace(old, new))
    err = refused(["check", str(path)], capsys)
    assert f"{path}:" in err and words in err and "accepted" in err
