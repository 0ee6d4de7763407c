"""The expression language: what it accepts, and that everything else is refused with the
offending text named."""

from __future__ import annotations

import pytest
import sympy

from orbitfix.gen.model.expressions import ExpressionError, parse_expression

x, y, mu = sympy.symbols("x y mu", real=True)
TABLE = {"x": x, "y": y, "mu": mu}


@pytest.mark.parametrize(("text", "expected"), [
    ("mu * (1 - x^2) * y - x", mu * (1 - x**2) * y - x),
    ("mu*(1 - x**2)*y - x", mu * (1 - x**2) * y - x),
    ("-x/2 + 3", -x / 2 + 3),
    ("x^3", x**3),
    ("min(x, y, 1)", sympy.Min(x, y, 1)),
    ("max(x, 0)", sympy.Max(x, 0)),
    ("abs(x - y)", sympy.Abs(x - y)),
    ("clip(x, -1, 1)", sympy.Min(sympy.Max(x, -1), 1)),
    ("+x", x),
    ("sin(x) + cos(y - mu)", sympy.sin(x) + sympy.cos(y - mu)),
    ("tanh(2 * x)", sympy.tanh(2 * x)),
])
def test_accepted_expressions(text: str, expected: sympy.Expr) -> None:
    assert sympy.simplify(parse_expression(text, TABLE) - expected) == 0


def test_caret_binds_like_a_power_not_like_python_xor() -> None:
    # Regression: Python parses 1 - x^2 as (1 - x) ^ 2; it must mean 1 - x**2.
    assert parse_expression("1 - x^2", TABLE) == 1 - x**2


@pytest.mark.parametrize(("text", "offending"), [
    ("__import__('os')", "__import__"),
    ("x.real", "x.real"),
    ("z + 1", "z"),
    ("x ** y", "y"),
    ("x ** 0.5", "0.5"),
    ("exp(x)", "exp"),
    ("sin(x, y)", "sin(x, y)"),
    ("x if y else 1", "x if y else 1"),
    ("'text'", "'text'"),
    ("x < y", "x < y"),
    ("lambda: 1", "lambda: 1"),
    ("clip(x, 1)", "clip(x, 1)"),
    ("x / 0", "x / 0"),
    ("True", "True"),
])
def test_refused_expressions_name_the_offending_text(text: str, offending: str) -> None:
    with pytest.raises(ExpressionError) as caught:
        parse_expression(text, TABLE)
    assert caught.value.offending == offending
    assert "Accepted:" in str(caught.value)


def test_syntax_error_is_an_expression_error() -> None:
    with pytest.raises(ExpressionError, match="not a valid expression"):
        parse_expression("x +* y", TABLE)
