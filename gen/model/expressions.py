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
from orbitfix.gen.model import limits

# Size limits of one equation. Python's parser and every later tree walk (sympy, the lowering)
# recurse once per level of the expression tree, so an equation is refused before it is parsed
# when it could make a tree deeper than they can walk. The limits are far above any oscillator's
# equation: the largest built-in network (64 oscillators, all linked) needs about 300 operators.
MOST_CHARACTERS = 20_000
MOST_OPERATORS = 600        # + - * / ** ^ and commas between a function's arguments
MOST_NESTING = 40           # parentheses (of grouping and of function calls) inside one another
MOST_DEPTH = 64             # levels of the tree once chains of + - and of * / are flattened

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
    _check_size(text)
    # '^' binds looser than '-' in Python's grammar, so it is rewritten before parsing.
    source = text.strip().replace("^", "**")
    try:
        tree = ast.parse(source, mode="eval")
    except SyntaxError as exc:
        column = max((exc.offset or 1) - 1, 0)
        raise ExpressionError(source, column, source[column:column + 12] or source,
                              "not a valid expression") from None
    except (RecursionError, MemoryError):
        raise _too_large(source, "it is too deeply nested for the parser") from None
    depth = _flat_depth(tree.body)
    if depth > MOST_DEPTH:
        raise _too_large(source, f"its tree is {depth} levels deep once sums and products are "
                                 f"flattened, more than {MOST_DEPTH}")
    return _Converter(source, symbols).convert(tree.body)


def _too_large(text: str, problem: str) -> ExpressionError:
    shown = text if len(text) <= 60 else text[:40] + " ... " + text[-12:]
    return ExpressionError(shown, 0, shown[:20],
                           f"the equation is too large: {problem} (accepted: at most "
                           f"{MOST_CHARACTERS} characters, {MOST_OPERATORS} operators, "
                           f"{MOST_NESTING} nested parentheses and {MOST_DEPTH} levels; split it "
                           "with a helper state or simplify it)")


def _check_size(text: str) -> None:
    """Refuse an equation too large to parse and walk safely, before parsing it."""
    if len(text) > MOST_CHARACTERS:
        raise _too_large(text, f"{len(text)} characters, more than {MOST_CHARACTERS}")
    operators = sum(text.count(c) for c in "+-/^,") + text.count("*") - text.count("**")
    if operators > MOST_OPERATORS:
        raise _too_large(text, f"{operators} operators, more than {MOST_OPERATORS}")
    depth = deepest = 0
    for ch in text:
        depth += (ch == "(") - (ch == ")")
        deepest = max(deepest, depth)
    if deepest > MOST_NESTING:
        raise _too_large(text, f"{deepest} parentheses inside one another, more than "
                               f"{MOST_NESTING}")


def _chain_kind(node: ast.AST) -> str | None:
    """'sum' or 'product' for a node that continues a flat chain, else None."""
    if isinstance(node, ast.BinOp):
        if isinstance(node.op, ast.Add | ast.Sub):
            return "sum"
        if isinstance(node.op, ast.Mult | ast.Div):
            return "product"
    return None


def _flat_depth(root: ast.AST) -> int:
    """Depth of the tree the converter walks (without recursion): a child that continues its
    parent's chain of + - (or of * /) adds no level, since chains are converted as one list."""
    deepest = 0
    stack = [(root, 1)]
    while stack:
        node, depth = stack.pop()
        deepest = max(deepest, depth)
        kind = _chain_kind(node)
        for child in ast.iter_child_nodes(node):
            if isinstance(child, ast.operator | ast.unaryop | ast.expr_context):
                continue
            same = kind is not None and _chain_kind(child) == kind
            stack.append((child, depth if same else depth + 1))
    return deepest


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
            complaint = limits.problem(node.value, limits.LITERAL)
            if complaint:
                raise self.fail(node, f"{complaint} (accepted: {limits.LITERAL.accepted()})")
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
        kind = _chain_kind(node)
        if kind is None:
            raise self.fail(node, "this operator is not accepted")
        # A chain a + b - c + ... (or a * b / c ...) is walked down its left spine without
        # recursion and built as one sum (product), so a long flat chain costs no depth.
        spine: list[ast.BinOp] = []
        left: ast.AST = node
        while _chain_kind(left) == kind:
            spine.append(left)  # type: ignore[arg-type]
            left = left.left  # type: ignore[attr-defined]
        items = [self.convert(left)]
        for link in reversed(spine):
            right = self.convert(link.right)
            if isinstance(link.op, ast.Sub):
                right = -right
            elif isinstance(link.op, ast.Div):
                if right == 0:
                    raise self.fail(link, "division by zero")
                right = 1 / right
            items.append(right)
        return sympy.Add(*items) if kind == "sum" else sympy.Mul(*items)

    def integer_exponent(self, node: ast.AST) -> int:
        sign = 1
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub):
            sign, node = -1, node.operand
        exponent = None
        if isinstance(node, ast.Constant) and type(node.value) is int:
            exponent = node.value
        elif (isinstance(node, ast.Constant) and isinstance(node.value, float)
              and node.value.is_integer()):
            exponent = int(node.value)
        if exponent is None:
            raise self.fail(node, "a power must have a whole-number exponent")
        complaint = limits.problem(sign * exponent, limits.EXPONENT)
        if complaint:
            raise self.fail(node, f"{complaint} (accepted: whole numbers from "
                                  f"-{limits.EXPONENT.high:g} to {limits.EXPONENT.high:g})")
        return sign * exponent

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
