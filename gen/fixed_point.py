"""The fixed-point planner: chooses the Q format from the signals' ranges on the cycle, rounds every
constant once, and fills the integer part of the program.

Q formats are written Qm.n: m integer bits counting the sign bit, n fraction bits, m + n = word
size; Q8.24 holds [-128, 128) in steps of 2**-24 (common practice).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from fractions import Fraction

import numpy as np

from gen.errors import InputError
from gen.integer_program import OVERFLOWS, ROUNDINGS, WORD_SIZES, IntegerProgram
from gen.lowering import evaluate_real


@dataclass(frozen=True)
class QFormat:
    """A signed two's complement fixed-point format."""

    word_bits: int
    fraction_bits: int

    @property
    def name(self) -> str:
        return f"Q{self.word_bits - self.fraction_bits}.{self.fraction_bits}"

    @property
    def largest(self) -> float:
        return ((1 << (self.word_bits - 1)) - 1) / 2.0 ** self.fraction_bits

    @property
    def step(self) -> float:
        return 2.0 ** -self.fraction_bits


@dataclass(frozen=True)
class ConstantReport:
    """One rounded constant: what it stands for, what is stored and what that really means."""

    index: int
    note: str
    real: float
    stored: int
    format: QFormat
    role: str

    @property
    def represents(self) -> float:
        return float(Fraction(self.stored, 1 << self.format.fraction_bits))

    @property
    def error(self) -> float:
        return self.represents - self.real

    def to_json(self) -> dict:
        return {"value_index": self.index, "note": self.note, "real": self.real,
                "stored": self.stored, "represents": self.represents, "error": self.error,
                "format": self.format.name, "role": self.role}


@dataclass(frozen=True)
class FixedPointPlan:
    """The chosen formats and the fully planned integer program."""

    signal_format: QFormat
    largest_signal: float
    largest_signal_note: str
    margin: float
    program: IntegerProgram
    constants: tuple[ConstantReport, ...]
    initial_state: tuple[int, ...]
    warnings: tuple[str, ...]
    signal_ranges: tuple[tuple[float, float], ...] = ()

    def signal_table(self) -> list[dict]:
        """One row per value of the step: its range on the cycle, format, headroom and the size
        of its quantisation step."""
        fmt = self.signal_format
        rows = []
        for index, (op, (low, high)) in enumerate(zip(self.program.ops, self.signal_ranges,
                                                      strict=True)):
            peak = max(abs(low), abs(high))
            rows.append({
                "value": index, "kind": op.kind, "note": op.note, "min": low, "max": high,
                "format": fmt.name,
                "headroom_bits": math.log2(fmt.largest / peak) if peak else float(fmt.word_bits - 1),
                "quantisation_step": fmt.step,
            })
        return rows

    @property
    def headroom_bits(self) -> float:
        if self.largest_signal == 0:
            return float(self.signal_format.word_bits - 1)
        return math.log2(self.signal_format.largest / self.largest_signal)

    def formats_json(self) -> dict:
        """The Q format of every state and constant (the verify report's ``formats``)."""
        return {
            "signals": self.signal_format.name,
            "states": {name: self.signal_format.name for name in self.program.state_names},
            "constants": [c.to_json() for c in self.constants],
            "word_bits": self.program.word_bits,
            "product_bits": self.program.product_bits,
            "rounding": self.program.rounding,
            "overflow": self.program.overflow,
            "largest_signal_on_cycle": self.largest_signal,
            "headroom_bits": self.headroom_bits,
        }


def quantise(real: float, fraction_bits: int) -> int:
    """round(real * 2**fraction_bits), exact, ties to even: the one rule for rounding constants."""
    return round(Fraction(real) * (1 << fraction_bits))


def plan_fixed_point(program: IntegerProgram, samples: np.ndarray, initial: np.ndarray,
                     margin: float = 4.0, fraction_bits: int | None = None,
                     word_bits: int = 32, rounding: str = "half-up",
                     overflow: str = "saturate") -> FixedPointPlan:
    """Plan formats for ``program`` from states it will meet.

    samples : ndarray, shape (n_states, k) -- states on the cycle (and any others to cover).
    initial : ndarray, shape (n_states,) -- the initial state, which must be representable.
    margin : float -- the largest signal times ``margin`` must fit (4 leaves two bits of headroom).
    word_bits, rounding, overflow -- the integer semantics (see ``gen.integer_program``).
    """
    _check_choice("word size", word_bits, WORD_SIZES)
    _check_choice("rounding", rounding, ROUNDINGS)
    _check_choice("overflow mode", overflow, OVERFLOWS)
    if margin < 1:
        raise InputError(f"the range margin must be at least 1, got {margin}")
    points = np.hstack([np.asarray(samples, dtype=float), np.reshape(initial, (-1, 1))])
    values = evaluate_real(program, points)
    ranges = tuple((float(np.min(v)), float(np.max(v))) for v in values)
    peaks = [max(abs(low), abs(high)) for low, high in ranges]
    worst = int(np.argmax(peaks))
    largest = peaks[worst]
    if not math.isfinite(largest):
        raise InputError("a signal of the step is not finite on the cycle; the step size is too "
                         "large for this model or the model has no bounded cycle")
    needed_integer_bits = 1 + max(0, math.ceil(math.log2(largest * margin))) if largest else 1
    warnings: list[str] = []
    if fraction_bits is None:
        fraction_bits = word_bits - needed_integer_bits
        if fraction_bits < 1:
            raise InputError(f"the signals reach {largest:.4g} ({program.ops[worst].note}); with a "
                             f"margin of {margin} they do not fit a {word_bits}-bit word")
    else:
        if not 1 <= fraction_bits <= word_bits - 1:
            raise InputError(f"fraction bits must be between 1 and {word_bits - 1}, "
                             f"got {fraction_bits}")
        fmt = QFormat(word_bits, fraction_bits)
        if largest >= fmt.largest:
            raise InputError(
                f"format {fmt.name} overflows: '{program.ops[worst].note}' reaches {largest:.6g} "
                f"on the cycle but {fmt.name} holds at most {fmt.largest:.6g}; use at most "
                f"{word_bits - needed_integer_bits} fraction bits (or leave the choice to the planner)")
        if largest * margin >= fmt.largest:
            warnings.append(f"format {fmt.name} leaves less headroom than the margin of {margin}: "
                            f"'{program.ops[worst].note}' reaches {largest:.6g} of {fmt.largest:.6g}")
    fmt = QFormat(word_bits, fraction_bits)
    ops, constants = _fill(program, fmt)
    initial_ints = tuple(_state_integer(x, fmt, name) for x, name in
                         zip(initial, program.state_names, strict=True))
    planned = replace(program, ops=tuple(ops), word_bits=word_bits, product_bits=2 * word_bits,
                      rounding=rounding, overflow=overflow,
                      state_fraction_bits=tuple(fraction_bits for _ in program.state_names))
    return FixedPointPlan(signal_format=fmt, largest_signal=largest,
                          largest_signal_note=program.ops[worst].note, margin=margin,
                          program=planned, constants=tuple(constants),
                          initial_state=initial_ints, warnings=tuple(warnings),
                          signal_ranges=ranges)


def _check_choice(what: str, value: object, choices: tuple) -> None:
    if value not in choices:
        raise InputError(f"unknown {what} {value!r} (choose one of: "
                         f"{', '.join(str(c) for c in choices)})")


def _fill(program: IntegerProgram, fmt: QFormat) -> tuple[list, list[ConstantReport]]:
    ops = []
    constants: list[ConstantReport] = []
    limit = (1 << (fmt.word_bits - 1)) - 1
    for index, op in enumerate(program.ops):
        if op.kind == "const":
            stored = quantise(op.real, fmt.fraction_bits)
            if abs(stored) > limit:
                raise InputError(f"the constant {op.real:.6g} ({op.note}) does not fit {fmt.name}")
            op = replace(op, constant=stored)
            constants.append(ConstantReport(index, op.note, op.real, stored, fmt, "added"))
        elif op.kind == "scale":
            own = _constant_format(op.real, fmt.word_bits, op.note)
            stored = quantise(op.real, own.fraction_bits)
            op = replace(op, constant=stored, shift=own.fraction_bits)
            constants.append(ConstantReport(index, op.note, op.real, stored, own, "multiplier"))
        elif op.kind == "mul":
            op = replace(op, shift=fmt.fraction_bits)
        ops.append(replace(op, fraction_bits=fmt.fraction_bits))
    return ops, constants


def _constant_format(real: float, word_bits: int, note: str) -> QFormat:
    """The format with the most fraction bits that still holds a multiplier in one word.

    The shift after the product may not exceed 2 * word_bits - 2, so the widened product is
    never shifted by its full width.
    """
    limit = (1 << (word_bits - 1)) - 1
    if real == 0:
        return QFormat(word_bits, word_bits - 1)
    bits = min(2 * word_bits - 2, word_bits - 1 - math.floor(math.log2(abs(real))))
    while bits >= 0 and abs(quantise(real, bits)) > limit:
        bits -= 1
    if bits < 0:
        raise InputError(f"the multiplier {real:.6g} ({note}) is too large for a "
                         f"{word_bits}-bit word; rescale the model")
    return QFormat(word_bits, bits)


def _state_integer(value: float, fmt: QFormat, name: str) -> int:
    if abs(value) >= fmt.largest:
        raise InputError(f"the initial value {value} of '{name}' does not fit {fmt.name} "
                         f"(largest {fmt.largest:.6g}); start nearer the cycle")
    return quantise(value, fmt.fraction_bits)
