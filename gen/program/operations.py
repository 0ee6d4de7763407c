"""The operation kinds of the integer program, each defined once.

Every reading of the program asks an operation's kind what it means: the real reading (layer L1,
``lowering.evaluate_real``), the interval rule (``ranges.interval_ranges``), the format rule
(``fixed_point``), the golden rule (``golden``) and the C form (``c.emit`` with the helpers of
``templates/fixed_point.c.j2``). A kind is one subclass of ``OperationKind`` registered here, and
``tests/test_operations.py`` checks every registered kind against exact rational arithmetic,
its own interval rule and the compiled C.

Rounding and overflow are not a kind's business: the golden interpreter writes them once
(``golden.round_shift``, ``golden.fit_word``) and the C once (``round_shift``, ``fit_word`` and
``wrap_word`` in the helpers template); a kind only says what exact result they apply to, and
(``fit_wraps``) whether it brings that result into the word by wrapping. Whether a result is
clamped is the program's rule (``IntegerProgram.clamps``: not when the planner proved it fits),
and the C back end renders the rounding and the fit around a kind's exact C expression.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, replace
from fractions import Fraction
from typing import TYPE_CHECKING, Protocol

import numpy as np

from orbitfix.gen.errors import InputError
from orbitfix.gen.program.quantisation import quantise, quantise_limit

if TYPE_CHECKING:
    from orbitfix.gen.program.integer_program import Op

Bounds = tuple[float, float]


class Machine(Protocol):
    """What the golden interpreter offers a kind's golden rule (see ``golden.evaluate``).

    Values are numpy arrays over a batch of states, or Python integers when the interpreter
    follows one state (much faster there); a rule uses the operators both understand (+, -, *,
    >>, &, comparisons, ``abs``) and the machine's methods for the rest, so it is written once.
    """

    word_bits: int

    def number(self, value: int) -> int | np.signedinteger: ...  # of the product width

    def full(self, value: int) -> np.ndarray | int: ...  # the same value for every state

    def table(self, entries: tuple[int, ...]) -> np.ndarray | tuple[int, ...]: ...  # indexable

    def minimum(self, x: np.ndarray, y: np.ndarray) -> np.ndarray: ...

    def maximum(self, x: np.ndarray, y: np.ndarray) -> np.ndarray: ...

    def state(self, index: int) -> np.ndarray: ...

    def hold(self, values: np.ndarray, low: int, high: int) -> np.ndarray: ...  # marks a clamp

    def round_shift(self, exact: np.ndarray, shift: int, op: Op) -> np.ndarray: ...  # op's rule

    def fit(self, exact: np.ndarray, wraps: bool) -> np.ndarray: ...  # marks a clamp, see golden


@dataclass(frozen=True)
class CHelper:
    """A ``static inline`` C function that computes one kind of value whole (rounding and fit
    included), for a kind with no single C expression.

    ``parameters``, ``prelude`` and ``exact`` are C text in which ``{word}``, ``{wide}``,
    ``{unsigned}``, ``{prefix}`` and ``{PREFIX}`` stand for the word type, the product type, the
    unsigned word type and the model's C prefix (of functions, and of macros). A helper whose
    result is clamped (``counts``) gets a last parameter ``unsigned int *saturated``, the step's
    flag, which its clamp sets; ``{saturated}`` stands for the flag as the last argument of the
    clamp.
    """

    name: str
    parameters: str
    exact: str
    prelude: tuple[str, ...] = ()
    comment: str = ""

    def function(self, prefix: str) -> str:
        return f"{prefix}_{self.name}"

    def render(self, prefix: str, word: str, wide: str, unsigned: str, counts: bool) -> dict:
        def fill(text: str) -> str:
            return text.format(word=word, wide=wide, unsigned=unsigned, prefix=prefix,
                               PREFIX=prefix.upper(), saturated=", saturated" if counts else "")

        return {"function": self.function(prefix), "parameters": fill(self.parameters),
                "prelude": [fill(line) for line in self.prelude], "exact": fill(self.exact),
                "comment": self.comment, "counts": counts}


@dataclass(frozen=True)
class CSite:
    """What the C form of one operation may refer to.

    args -- the C names of its arguments' values; word_bits, word, wide -- the word size, the C
    word type and the C product type; prefix -- the model's C prefix (of every helper); field --
    the state struct field a ``state`` reads; symbol -- the C name of the operation's stored
    constant or table; saturated -- the last argument of a helper whose result is clamped
    (``", &saturated"``, the step's flag), else "".
    """

    args: tuple[str, ...]
    word_bits: int
    wide: str = "int64_t"
    word: str = "int32_t"
    prefix: str = "step"
    field: str = ""
    symbol: str = ""
    saturated: str = ""


class OperationKind:
    """What one kind of operation means, in every reading of the integer program.

    A new kind is a subclass decorated with ``@register``. It provides:

    1. ``name`` and ``arity``: its name in the program (and the program's JSON) and how many
       earlier values it reads; and its meaning in one line as the class docstring.
    2. ``real(op, args, states)``: the real reading (layer L1): the exact real operation on
       float64 arrays, with the operation's real constant and no rounding.
    3. ``interval(op, args, box)``: sure bounds of the real result from sure bounds of the
       arguments (interval arithmetic); they must enclose every real result.
    4. The format rule, which the planner runs for every value: ``forced_bits`` (a format the
       kind dictates, or None), ``first_bits`` (the result's fraction bits from the arguments'
       and from ``natural``, the most that hold the value's sure bound), ``settle_bits`` (the
       correction the planner repeats until nothing changes: no result finer than its exact
       value), ``aligns`` (the arguments are brought to one scale before they meet), and
       ``fill`` (the integer fields of the planned operation: shift, alignments, constant,
       table, offset). A kind that stores a constant names its ``constant_role`` and the
       constant's format in ``constant_bits``, and quantises it with ``quantise``. Backwards:
       ``bits_kept`` says how many of an argument's fraction bits the result depends on, where
       the rest are rounded away on their own; a kind whose value may then drop them names how
       in ``coarsens`` ("constant": stored once, it keeps the most any reader keeps;
       "monotone": a min or max, whose rounded result is the same operation on rounded
       arguments, drops to the bits every reader keeps alike; "product": a product, rounded
       once to the bits every reader keeps alike instead of twice, first to its own format and
       then by its reader: the same bits where both truncate, the nearer value where they round
       to nearest).
    5. The golden rule: ``exact(op, args, machine)``, the exact result in the program's product
       width as a fresh array (the interpreter rounds it in place), to which the interpreter
       applies the one rounding by ``op.shift`` and the one overflow rule; a kind that rounds
       elsewhere overrides ``golden`` and still uses ``machine.round_shift`` and
       ``machine.fit`` (with ``fit_wraps``), never rules of its own. ``fit_wraps`` says how the
       result enters the word: by wrapping (True), by the program's overflow rule (False), or not
       at all (None: a load or a constant).
    6. The C form: ``c_exact(op, site)``, the exact result as a C expression of the product
       type, around which the C back end writes the one rounding and the one fit; or, for a
       kind with no such expression (a load, a constant, a table), ``c_call(op, site)``, the C
       expression of the whole value, with ``c_helper`` the helper function it calls, if any.
    7. ``exact_bounds(op, args, word_bits)``: sure integer bounds of the exact result (before
       rounding by ``op.shift``; of the value itself for a kind that ``rounds_itself``) from sure
       integer bounds of the arguments' stored values, which the planner's proof of fits
       (``gen/program/proven_fit.py``) and the emitter's sums in the word read.
    """

    name = ""
    arity: int | None = 0  # None: two or more arguments, each with its whole weight (Op.weights)
    aligns = False
    provable = True  # whether the planner may prove its result fits (and drop its clamp)
    rounds_itself = False  # its golden rule rounds inside: exact_bounds bound the value itself
    constant_role: str | None = None  # "added" or "multiplier" for a kind with a stored constant
    coarsens: str | None = None  # "constant", "monotone" or "product": see point 4
    c_helper: CHelper | None = None

    def real(self, op: Op, args: list[np.ndarray], states: np.ndarray) -> np.ndarray:
        raise NotImplementedError

    def interval(self, op: Op, args: list[Bounds], box: tuple[np.ndarray, np.ndarray]) -> Bounds:
        raise NotImplementedError

    def forced_bits(self, op: Op, word_bits: int, state_formats: list[int]) -> int | None:
        return None

    def alignment_headroom(self, op: Op) -> int:
        """Bits by which an aligned operand stays below the planner's usual limit (word_bits - 2
        left), so that the exact result of a kind that adds more than two aligned terms still
        fits the product width."""
        return 0

    def first_bits(self, op: Op, f_args: list[int], natural: int, word_bits: int) -> int:
        raise NotImplementedError(f"{self.name} always has a forced format")

    def settle_bits(self, op: Op, bits: int, f_args: list[int], word_bits: int) -> int:
        return bits

    def bits_kept(self, op: Op, position: int, bits: int, f_args: list[int]) -> int | None:
        """The fraction bits of the argument at ``position`` that the result (of ``bits``
        fraction bits) depends on, when fewer than the argument's own: its extra bits are
        rounded away on their own. None: every bit counts."""
        return None

    def constant_bits(self, op: Op, bits: int, word_bits: int) -> int:
        raise NotImplementedError(f"{self.name} stores no constant")

    def fill(self, op: Op, bits: int, f_args: list[int], word_bits: int) -> Op:
        return op

    def exact(self, op: Op, args: list[np.ndarray], machine: Machine) -> np.ndarray:
        raise NotImplementedError

    def fit_wraps(self, op: Op) -> bool | None:
        return op.wraps or op.proven  # a proven result never leaves the word from a held state

    def golden(self, op: Op, args: list[np.ndarray], machine: Machine) -> np.ndarray:
        return machine.fit(machine.round_shift(self.exact(op, args, machine), op.shift, op),
                           self.fit_wraps(op))

    def exact_bounds(self, op: Op, args: list[tuple[int, int]],
                     word_bits: int) -> tuple[int, int]:
        return self.interval(op, args, None)

    def c_exact(self, op: Op, site: CSite) -> str | None:
        return None

    def c_call(self, op: Op, site: CSite) -> str:
        raise NotImplementedError


def int_literal(value: int, word_bits: int) -> str:
    """A C literal of the word type that is right on every compiler, the most negative too."""
    macro = f"INT{word_bits}_C"
    if value == -(1 << (word_bits - 1)):
        return f"(-{macro}({(1 << (word_bits - 1)) - 1}) - 1)"
    return f"{macro}({value})"


def c_widened(value: str, site: CSite, align: int = 0) -> str:
    """A word value in the product type, times 2**align (exact: a multiplication, since a left
    shift of a negative value is undefined in C)."""
    if align == 0:
        return f"({site.wide}){value}"
    return f"({site.wide}){value} * {1 << align}"


KINDS: dict[str, OperationKind] = {}


def register(cls: type[OperationKind]) -> type[OperationKind]:
    """Add a kind to the registry (a class decorator)."""
    if not cls.name or cls.name in KINDS:
        raise ValueError(f"operation kind {cls.name!r} has no name or is registered twice")
    KINDS[cls.name] = cls()
    return cls


def kind_of(name: str) -> OperationKind:
    """The registered kind called ``name``."""
    try:
        return KINDS[name]
    except KeyError:
        raise ValueError(f"unknown operation kind {name!r} (known: {', '.join(KINDS)})") from None


# --- loads and constants ---------------------------------------------------------------------


@register
class State(OperationKind):
    """The state variable ``op.state`` at the start of the step."""

    name = "state"

    def real(self, op, args, states):
        return np.asarray(states[op.state], dtype=float)

    def interval(self, op, args, box):
        return float(box[0][op.state]), float(box[1][op.state])

    def forced_bits(self, op, word_bits, state_formats):
        return state_formats[op.state]

    def fit_wraps(self, op):
        return None

    def golden(self, op, args, machine):
        if op.held:
            return machine.hold(machine.state(op.state), *op.held)
        return machine.state(op.state)

    def c_call(self, op, site):
        # A held state (``op.held``) is read as it is: the step holds every held state in its
        # range before it reads any (``holds`` of the C back end: one check, and the clamps
        # out of line), which is golden's ``machine.hold`` above.
        return f"state->{site.field}"


@register
class Const(OperationKind):
    """The stored integer ``op.constant``, in the value's own format (a limit, ``op.limit``,
    rounded inward: see ``gen/program/quantisation.py``)."""

    name = "const"
    constant_role = "added"
    coarsens = "constant"

    def real(self, op, args, states):
        return np.full(np.shape(states[0]), op.real)

    def interval(self, op, args, box):
        return op.real, op.real

    def first_bits(self, op, f_args, natural, word_bits):
        return min(constant_fraction_bits(op.real, word_bits, op.note), natural)

    def constant_bits(self, op, bits, word_bits):
        return bits

    def fill(self, op, bits, f_args, word_bits):
        stored = quantise_limit(op.real, bits, op.limit) if op.limit else quantise(op.real, bits)
        if op.wraps:  # an angle: it enters the word by wrapping, a whole turn is the same angle
            half = 1 << (word_bits - 1)
            return replace(op, constant=(stored + half) % (2 * half) - half)
        if abs(stored) > (1 << (word_bits - 1)) - 1:
            raise InputError(f"the constant {op.real:.6g} ({op.note}) does not fit "
                             f"Q{word_bits - bits}.{bits}")
        return replace(op, constant=stored)

    def fit_wraps(self, op):
        return None

    def golden(self, op, args, machine):
        return machine.full(op.constant)

    def exact_bounds(self, op, args, word_bits):
        return op.constant, op.constant

    def c_call(self, op, site):
        return site.symbol


# --- sums, extremes and sign -----------------------------------------------------------------

class Aligned(OperationKind):
    """Two arguments, each first multiplied by 2**op.align[i] (exact in the product width, since
    no alignment exceeds word_bits - 2), then combined exactly."""

    arity = 2
    aligns = True

    def combine(self, x: np.ndarray, y: np.ndarray, machine: Machine) -> np.ndarray:
        raise NotImplementedError

    def first_bits(self, op, f_args, natural, word_bits):
        return min(natural, max(f_args))

    def fill(self, op, bits, f_args, word_bits):
        top = max(*f_args, bits)
        return replace(op, align=tuple(top - g for g in f_args), shift=top - bits)

    def bits_kept(self, op, position, bits, f_args):
        # the other arguments on the result's grid: the sum's rounding rounds this one alone
        # (but for a tie under half-even, whose way the others' parity decides)
        others = [f for k, f in enumerate(f_args) if k != position]
        return bits if f_args[position] > bits and all(f <= bits for f in others) else None

    def exact(self, op, args, machine):
        x, y = (v * machine.number(1 << k) if k else v
                for v, k in zip(args, op.align, strict=True))
        return self.combine(x, y, machine)

    def c_combine(self, x: str, y: str) -> str:
        raise NotImplementedError

    def exact_bounds(self, op, args, word_bits):
        return self.interval(op, [(lo << k, hi << k) for (lo, hi), k in
                                  zip(args, op.align, strict=True)], None)

    def c_exact(self, op, site):
        return self.c_combine(*(c_widened(a, site, k) for a, k in
                                zip(site.args, op.align, strict=True)))


@register
class Add(Aligned):
    """The sum of the aligned arguments."""

    name = "add"

    def real(self, op, args, states):
        return args[0] + args[1]

    def interval(self, op, args, box):
        return args[0][0] + args[1][0], args[0][1] + args[1][1]

    def combine(self, x, y, machine):
        return x + y

    def c_combine(self, x, y):
        return f"{x} + {y}"


@register
class Sub(Aligned):
    """The first aligned argument less the second."""

    name = "sub"

    def real(self, op, args, states):
        return args[0] - args[1]

    def interval(self, op, args, box):
        return args[0][0] - args[1][1], args[0][1] - args[1][0]

    def combine(self, x, y, machine):
        return x - y

    def c_combine(self, x, y):
        return f"{x} - {y}"


class Extreme(Aligned):
    """The smaller or larger aligned argument. Every rounding rule is monotone, so the rounded
    extreme is the extreme of the rounded arguments: an argument's extra bits are rounded away on
    their own, and the value itself may drop to the bits its readers keep."""

    coarsens = "monotone"

    def bits_kept(self, op, position, bits, f_args):
        return bits if f_args[position] > bits else None


@register
class Min(Extreme):
    """The smaller aligned argument."""

    name = "min"

    def real(self, op, args, states):
        return np.minimum(args[0], args[1])

    def interval(self, op, args, box):
        return min(args[0][0], args[1][0]), min(args[0][1], args[1][1])

    def combine(self, x, y, machine):
        return machine.minimum(x, y)

    def c_combine(self, x, y):
        return f"({x} < {y} ? {x} : {y})"


@register
class Max(Extreme):
    """The larger aligned argument."""

    name = "max"

    def real(self, op, args, states):
        return np.maximum(args[0], args[1])

    def interval(self, op, args, box):
        return max(args[0][0], args[1][0]), max(args[0][1], args[1][1])

    def combine(self, x, y, machine):
        return machine.maximum(x, y)

    def c_combine(self, x, y):
        return f"({x} > {y} ? {x} : {y})"


@register
class ScaledSum(Aligned):
    """The sum of the aligned arguments, each times its whole weight ``op.weights[i]``, times the
    stored integer ``op.constant``: an integrator's increment h/6 (k1 + 2 k2 + 2 k3 + k4), the
    sum and the product both formed exactly in the product width and rounded once, where a chain
    of sums would round at every link and a sum rounded to a word and then scaled rounds twice.
    The constant has as many bits as let the product of any words (the arguments' whole range,
    aligned and weighted) and it fit the product width."""

    name = "scaled_sum"
    arity = None  # any number of arguments; the alignments are Aligned's
    constant_role = "multiplier"
    coarsens = "product"

    def bits_kept(self, op, position, bits, f_args):
        return None  # whole weights: an argument's extra bits add up with the others'

    def _sum(self, op, args):
        total = args[0] * op.weights[0]
        for value, weight in zip(args[1:], op.weights[1:], strict=True):
            total = total + value * weight
        return total

    def _sum_interval(self, op, args):
        low = sum(w * (lo if w > 0 else hi) for w, (lo, hi) in zip(op.weights, args, strict=True))
        high = sum(w * (hi if w > 0 else lo) for w, (lo, hi) in zip(op.weights, args, strict=True))
        return low, high

    def real(self, op, args, states):
        return self._sum(op, args) * op.real

    def interval(self, op, args, box):
        low, high = self._sum_interval(op, args)
        corners = [low * op.real, high * op.real]
        return min(corners), max(corners)

    def alignment_headroom(self, op):
        # each aligned operand is below 2**(2w - 3 - e): the weighted sum stays below 2**(2w - 2)
        # when the weights' magnitudes add up to at most 2**(e + 1)
        return max(0, (sum(abs(w) for w in op.weights) - 1).bit_length() - 1)

    def first_bits(self, op, f_args, natural, word_bits):
        return min(natural, max(f_args) + self._own_bits(op, f_args, word_bits))

    def settle_bits(self, op, bits, f_args, word_bits):
        return min(bits, max(f_args) + self._own_bits(op, f_args, word_bits))

    def constant_bits(self, op, bits, word_bits):
        top = max(op.align)
        return self._own_bits(op, [top - k for k in op.align], word_bits)

    def fill(self, op, bits, f_args, word_bits):
        top = max(f_args)
        own = self._own_bits(op, f_args, word_bits)
        return replace(op, align=tuple(top - g for g in f_args), constant=quantise(op.real, own),
                       shift=top + own - bits)

    def exact(self, op, args, machine):
        total = None
        for value, weight, k in zip(args, op.weights, op.align, strict=True):
            term = value * machine.number(weight << k)
            total = term if total is None else total + term
        return total * machine.number(op.constant)

    def exact_bounds(self, op, args, word_bits):
        low, high = self._sum_interval(op, [(lo << k, hi << k) for (lo, hi), k in
                                            zip(args, op.align, strict=True)])
        corners = [low * op.constant, high * op.constant]
        return min(corners), max(corners)

    def c_exact(self, op, site):
        terms = []
        for value, weight, k in zip(site.args, op.weights, op.align, strict=True):
            factor = weight << k
            terms.append(f"({site.wide}){value}" + ("" if factor == 1 else f" * {factor}"))
        return f"({' + '.join(terms)}) * {site.symbol}"

    @staticmethod
    def _own_bits(op: Op, f_args: list[int], word_bits: int) -> int:
        """The constant's fraction bits: the most with which it fits a word and the product of
        the largest possible sum (every argument at the word's edge) and it stays below the
        product width's limit by 1/64, so that a trim of the constant by a few ppm still fits."""
        top = max(f_args)
        largest_sum = sum(abs(w) << (top - f) for w, f in zip(op.weights, f_args, strict=True)) \
            << (word_bits - 1)
        limit = ((1 << (2 * word_bits - 1)) - 1) // largest_sum * 63 // 64
        bits = _constant_fraction_bits(op.real, word_bits,
                                       min(limit, (1 << (word_bits - 1)) - 1))
        if bits < 0:
            raise InputError(f"the multiplier {op.real:.6g} ({op.note}) times its sum does not fit "
                             f"a {2 * word_bits}-bit product; rescale the model")
        return bits


class Unary(OperationKind):
    """One argument; the result keeps the argument's format (the word's edge saturates)."""

    arity = 1

    def first_bits(self, op, f_args, natural, word_bits):
        return f_args[0]

    def settle_bits(self, op, bits, f_args, word_bits):
        return f_args[0]

    def fill(self, op, bits, f_args, word_bits):
        return replace(op, shift=f_args[0] - bits)


@register
class Neg(Unary):
    """The negated argument."""

    name = "neg"

    def real(self, op, args, states):
        return -args[0]

    def interval(self, op, args, box):
        return -args[0][1], -args[0][0]

    def exact(self, op, args, machine):
        return -args[0]

    def c_exact(self, op, site):
        return f"-{c_widened(site.args[0], site)}"


@register
class Abs(Unary):
    """The argument's absolute value."""

    name = "abs"

    def real(self, op, args, states):
        return np.abs(args[0])

    def interval(self, op, args, box):
        lo, hi = args[0]
        return (0.0 if lo <= 0 <= hi else min(abs(lo), abs(hi))), max(abs(lo), abs(hi))

    def exact(self, op, args, machine):
        return abs(args[0])

    def c_exact(self, op, site):
        a = site.args[0]
        return f"({a} < 0 ? -{c_widened(a, site)} : {c_widened(a, site)})"


# --- products --------------------------------------------------------------------------------


@register
class Mul(OperationKind):
    """The product of two values, formed in the product width."""

    name = "mul"
    arity = 2
    coarsens = "product"

    def real(self, op, args, states):
        return args[0] * args[1]

    def interval(self, op, args, box):
        if op.args[0] == op.args[1]:  # a square is never negative
            lo, hi = args[0]
            return (0.0 if lo <= 0 <= hi else min(lo * lo, hi * hi)), max(lo * lo, hi * hi)
        corners = [x * y for x in args[0] for y in args[1]]
        return min(corners), max(corners)

    def first_bits(self, op, f_args, natural, word_bits):
        return min(natural, f_args[0] + f_args[1])

    def settle_bits(self, op, bits, f_args, word_bits):
        return min(bits, f_args[0] + f_args[1])

    def fill(self, op, bits, f_args, word_bits):
        return replace(op, shift=f_args[0] + f_args[1] - bits)

    def exact(self, op, args, machine):
        return args[0] * args[1]

    def c_exact(self, op, site):
        a, b = site.args
        return f"{c_widened(a, site)} * {b}"


@register
class Scale(OperationKind):
    """The product of a value and the stored integer ``op.constant`` (in its own format)."""

    name = "scale"
    arity = 1
    constant_role = "multiplier"
    coarsens = "product"

    def real(self, op, args, states):
        return args[0] * op.real

    def interval(self, op, args, box):
        corners = [args[0][0] * op.real, args[0][1] * op.real]
        return min(corners), max(corners)

    def first_bits(self, op, f_args, natural, word_bits):
        return min(natural, f_args[0] + constant_fraction_bits(op.real, word_bits, op.note))

    def settle_bits(self, op, bits, f_args, word_bits):
        return min(bits, f_args[0] + constant_fraction_bits(op.real, word_bits, op.note))

    def constant_bits(self, op, bits, word_bits):
        return constant_fraction_bits(op.real, word_bits, op.note)

    def fill(self, op, bits, f_args, word_bits):
        own = constant_fraction_bits(op.real, word_bits, op.note)
        return replace(op, constant=quantise(op.real, own), shift=f_args[0] + own - bits)

    def exact(self, op, args, machine):
        return args[0] * machine.number(op.constant)

    def exact_bounds(self, op, args, word_bits):
        corners = [args[0][0] * op.constant, args[0][1] * op.constant]
        return min(corners), max(corners)

    def c_exact(self, op, site):
        return f"{c_widened(site.args[0], site)} * {site.symbol}"


# --- sine and cosine of an angle in turns ----------------------------------------------------

_SINE_LOOKUP = CHelper(
    "sine_lookup", "{word} angle, const {word} *table, unsigned int shift, {unsigned} offset",
    "{prefix}_fit_word(low + {PREFIX}_ROUND_SHIFT(rise * ({wide})within, shift, {wide}){saturated})",
    prelude=("const {unsigned} phase = ({unsigned})(({unsigned})angle + offset);",
             "const {unsigned} index = ({unsigned})(phase >> shift);",
             "const {unsigned} within = ({unsigned})(phase & ((({unsigned})1 << shift) - 1u));",
             "const {wide} low = {PREFIX}_TABLE_ENTRY(table, index);",
             "const {wide} rise = ({wide}){PREFIX}_TABLE_ENTRY(table, index + 1u) - low;"),
    comment="sin of an angle in turns (a word is one turn) plus offset, from a table of "
            "2^(word - shift) + 1 entries with linear interpolation. The phase is read as an "
            "unsigned word, so it wraps for free.")


class TableSine(OperationKind):
    """sin(2 pi (angle + turn_offset)) of an angle held in turns, from ``op.table``: with p the
    angle read as an unsigned word plus ``op.offset`` (modulo 2**word_bits), i = p >> shift and
    r = p mod 2**shift, the result is table[i] + round_shift((table[i + 1] - table[i]) * r,
    shift): linear interpolation. The offset is ``turn_offset`` quantised to the word."""

    arity = 1
    provable = False  # its helper rounds and clamps inside
    rounds_itself = True
    turn_offset = Fraction(0)
    function = staticmethod(np.sin)
    c_helper = _SINE_LOOKUP

    def real(self, op, args, states):
        return self.function(2 * np.pi * args[0])

    def interval(self, op, args, box):
        return -1.0, 1.0

    def forced_bits(self, op, word_bits, state_formats):
        return word_bits - 2

    def fit_wraps(self, op):
        return False  # a sine is never an angle: the program's overflow rule, even on a wrapped op

    def fill(self, op, bits, f_args, word_bits):
        index_bits = sine_table_bits(word_bits, bits)
        return replace(op, table=sine_table(index_bits, bits), shift=word_bits - index_bits,
                       offset=quantise(self.turn_offset, word_bits) % (1 << word_bits))

    def golden(self, op, args, machine):
        number, bits = machine.number, machine.word_bits
        phase = (args[0] + number(op.offset)) & number((1 << bits) - 1)  # an unsigned word
        table = machine.table(op.table)
        index = phase >> number(op.shift)
        within = phase & number((1 << op.shift) - 1)
        low = table[index]
        return machine.fit(low + machine.round_shift((table[index + 1] - low) * within, op.shift,
                                                     op),
                           self.fit_wraps(op))

    def exact_bounds(self, op, args, word_bits):
        return min(op.table), max(op.table)  # interpolation stays between two entries

    def c_call(self, op, site):
        offset = f"UINT{site.word_bits}_C({op.offset})" if op.offset else "0u"
        return (f"{self.c_helper.function(site.prefix)}({site.args[0]}, {site.symbol}, "
                f"{op.shift}u, {offset}{site.saturated})")


@register
class Sin(TableSine):
    """sin of an angle in turns."""

    name = "sin"


@register
class Cos(TableSine):
    """cos of an angle in turns: the sine a quarter turn on."""

    name = "cos"
    turn_offset = Fraction(1, 4)
    function = staticmethod(np.cos)


# --- format rules shared by several kinds ----------------------------------------------------


def constant_fraction_bits(real: float, word_bits: int, note: str = "") -> int:
    """The most fraction bits with which a constant still fits one word.

    The shift after a product may not exceed 2 * word_bits - 2, so the widened product is never
    shifted by its full width.
    """
    bits = _constant_fraction_bits(real, word_bits)
    if bits < 0:
        raise InputError(f"the multiplier {real:.6g} ({note}) is too large for a "
                         f"{word_bits}-bit word; rescale the model")
    return bits


@functools.lru_cache(maxsize=4096)
def _constant_fraction_bits(real: float, word_bits: int, limit: int | None = None) -> int:
    """The most fraction bits (at most 2 * word_bits - 2) with which the stored constant's
    magnitude is at most ``limit`` (default: the word's largest); -1 where none does."""
    limit = (1 << (word_bits - 1)) - 1 if limit is None else limit
    if real == 0:
        return word_bits - 1
    bits = min(2 * word_bits - 2, word_bits - 1 - math.floor(math.log2(abs(real))))
    while bits >= 0 and abs(quantise(real, bits)) > limit:
        bits -= 1
    return bits


def sine_table_bits(word_bits: int, fraction_bits: int) -> int:
    """Index bits of the sine table: the fewest for which linear interpolation's error,
    (2 pi / 2**bits)**2 / 8 at most (the second derivative of sin is at most 1), stays below one
    step of the result's format; at most 12 (4097 entries)."""
    lsb = 2.0 ** -fraction_bits
    bits = 4
    while bits < min(12, word_bits - 2) and (2 * math.pi / 2**bits) ** 2 / 8 > lsb:
        bits += 1
    return bits


@functools.lru_cache(maxsize=64)
def sine_table(index_bits: int, fraction_bits: int) -> tuple[int, ...]:
    """sin over one turn at 2**index_bits + 1 points (the last repeats the first), each rounded
    once in the result's format."""
    count = 1 << index_bits
    return tuple(quantise(math.sin(2 * math.pi * k / count), fraction_bits)
                 for k in range(count + 1))


def sine_error_bound(word_bits: int, fraction_bits: int) -> float:
    """The stated largest error of the sine table with interpolation: the interpolation's own
    error plus half a step for rounding each entry and one step for rounding the product."""
    bits = sine_table_bits(word_bits, fraction_bits)
    return (2 * math.pi / 2**bits) ** 2 / 8 + 1.5 * 2.0 ** -fraction_bits
