"""The model's small, safe expression language: parsed with ``ast`` under a whitelist, into sympy.

Accepted: numbers, the model's own state and parameter names, ``+ - * /``, integer powers written
``**`` or ``^``, parentheses, and the functions ``min``, ``max``, ``abs``, ``clip(x, lo, hi)``,
``sin``, ``cos`` and ``tanh`` (smooth functions the analysis handles exactly; the fixed-point
lowering has no form for them yet and says so). Nothing is ever evaluated by Python.
"""

from __future__ import annotations

import ast
from collections.abc import Mapping

import sympy

from orbitfix.gen.errors import InputError

FUNCTIONS = {"min": "min(a, b, ...)", "max": "max(a, b, ...)", "abs": "abs(a)", "clip": "clip(x, lo, hi)",
             "sin": "sin(a)", "cos": "cos(a)", "tanh": "tanh(a)"}
SMOOTH = {"sin": sympy.sin, "cos": sympy.cos, "tanh": sympy.tanh}   # one argument, radians

ACCEPTED = (
    "numbers, the model's state and parameter names, + - * /, integer powers (x**2 or x^2), "
    "parentheses, and the functions " + ", ".join(FUNCTIONS.values())
)


class ExpressionError(InputError):
    """An equation string is outside the language; carries the column of the offending text."""

    def __init__(self, text: str, column: int, offending: str, problem: str) -> None:
        self.text = text
        self.column = column
        self.offending = offending
        self.problem = problem
        super().__init__(
            f"{problem}: '{offending}' at column {column + 1} of '{text}'. Accepted: {ACCEPTED}."
        )


def parse_expression(text: str, symbols: Mapping[str, sympy.Symbol]) -> sympy.Expr:
    """Parse one equation string into a sympy expression over the given symbols."""
    if not isinstance(text, str) or not text.strip():
        raise ExpressionError(str(text), 0, str(text), "an equation must be a non-empty string")
    # '^' binds looser than '-' in Python's grammar, so it is rewritten before parsing.
    source = text.strip().replace("^", "**")
    try:
        tree = ast.parse(source, mode="eval")
    except SyntaxError as exc:
        column = max((exc.offset or 1) - 1, 0)
        raise ExpressionError(source, column, source[column:column + 12] or source,
                              "not a valid expression") from None
    return _Converter(source, symbols).convert(tree.body)


class _Converter:
    """Walks the whitelisted ``ast`` nodes and builds the sympy expression."""

    def __init__(self, text: str, symbols: Mapping[str, sympy.Symbol]) -> None:
        self.text = text
        self.symbols = symbols

    def fail(self, node: ast.AST, problem: str) -> ExpressionError:
        segment = ast.get_source_segment(self.text, node) or self.text
        return ExpressionError(self.text, getattr(node, "col_offset", 0), segment, problem)

    def convert(self, node: ast.AST) -> sympy.Expr:
        if isinstance(node, ast.Constant):
            if isinstance(node.value, bool) or not isinstance(node.value, int | float):
                raise self.fail(node, "only numbers are accepted as literals")
            if isinstance(node.value, int):
                return sympy.Integer(node.value)
            return sympy.Float(node.value)
        if isinstance(node, ast.Name):
            if node.id not in self.symbols:
                known = ", ".join(sorted(self.symbols)) or "none"
                raise self.fail(node, f"unknown name (the model's names are: {known})")
            return self.symbols[node.id]
        if isinstance(node, ast.UnaryOp):
            operand = self.convert(node.operand)
            if isinstance(node.op, ast.USub):
                return -operand
            if isinstance(node.op, ast.UAdd):
                return operand
            raise self.fail(node, "this unary operator is not accepted")
        if isinstance(node, ast.BinOp):
            return self.binary(node)
        if isinstance(node, ast.Call):
            return self.call(node)
        raise self.fail(node, "this construct is not accepted")

    def binary(self, node: ast.BinOp) -> sympy.Expr:
        if isinstance(node.op, ast.Pow):
            base = self.convert(node.left)
            exponent = self.integer_exponent(node.right)
            return sympy.Pow(base, exponent)
        left = self.convert(node.left)
        right = self.convert(node.right)
        if isinstance(node.op, ast.Add):
            return left + right
        if isinstance(node.op, ast.Sub):
            return left - right
        if isinstance(node.op, ast.Mult):
            return left * right
        if isinstance(node.op, ast.Div):
            if right == 0:
                raise self.fail(node, "division by zero")
            return left / right
        raise self.fail(node, "this operator is not accepted")

    def integer_exponent(self, node: ast.AST) -> int:
        sign = 1
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub):
            sign, node = -1, node.operand
        if isinstance(node, ast.Constant) and type(node.value) is int:
            return sign * node.value
        if isinstance(node, ast.Constant) and isinstance(node.value, float) and node.value.is_integer():
            return sign * int(node.value)
        raise self.fail(node, "a power must have a whole-number exponent")

    def call(self, node: ast.Call) -> sympy.Expr:
        if not isinstance(node.func, ast.Name) or node.func.id not in FUNCTIONS:
            raise self.fail(node.func, "unknown function")
        if node.keywords:
            raise self.fail(node, "functions take no keyword arguments")
        name = node.func.id
        args = [self.convert(arg) for arg in node.args]
        if name in ("min", "max"):
            if len(args) < 2:
                raise self.fail(node, f"{name} needs at least two arguments")
            return sympy.Min(*args) if name == "min" else sympy.Max(*args)
        if name in SMOOTH:
            if len(args) != 1:
                raise self.fail(node, f"{name} takes exactly one argument")
            return SMOOTH[name](args[0])
        if name == "abs":
            if len(args) != 1:
                raise self.fail(node, "abs takes exactly one argument")
            return sympy.Abs(args[0])
        if len(args) != 3:
            raise self.fail(node, "clip takes exactly three arguments: clip(x, lo, hi)")
        low, high = args[1], args[2]
        if low.is_number and high.is_number and float(low) > float(high):
            raise self.fail(node, "clip's lower limit is above its upper limit")
        return sympy.Min(sympy.Max(args[0], low), high)
