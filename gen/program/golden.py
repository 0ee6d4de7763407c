"""The golden interpreter (layer L2): runs the integer program in numpy, vectorised over a batch
of states, and gives the bits that the C must reproduce exactly.

The arithmetic rules live here once for the Python side; the C side renders the same rules from
``templates/fixed_point.c.j2``. Both are tested against exact rational arithmetic.
"""

from __future__ import annotations

import numpy as np

from orbitfix.gen.program.integer_program import IntegerProgram


def round_shift(product: np.ndarray, shift: int, rounding: str) -> np.ndarray:
    """Divide by 2**shift with the program's rounding rule, in place (int64 in, int64 out).

    truncate: floor(product / 2**shift);
    half-up: floor(product / 2**shift + 1/2), ties toward plus infinity;
    half-even: nearest, ties to the even quotient.
    """
    if shift == 0:
        return product
    if rounding == "truncate":
        product >>= np.int64(shift)
        return product
    if rounding == "half-up":
        product += np.int64(1 << (shift - 1))
        product >>= np.int64(shift)
        return product
    if rounding == "half-even":
        remainder = product & np.int64((1 << shift) - 1)
        product >>= np.int64(shift)
        half = np.int64(1 << (shift - 1))
        product += (remainder > half) | ((remainder == half) & ((product & 1) == 1))
        return product
    raise ValueError(f"unknown rounding {rounding!r}")


def fit_word(values: np.ndarray, word_bits: int, overflow: str) -> np.ndarray:
    """Bring exact results into the word, in place: clamp (saturate) or reduce modulo 2**word_bits
    (wrap)."""
    low, high = -(1 << (word_bits - 1)), (1 << (word_bits - 1)) - 1
    if overflow == "saturate":
        return np.clip(values, low, high, out=values)
    if overflow == "wrap":
        values -= np.int64(low)
        values &= np.int64((1 << word_bits) - 1)
        values += np.int64(low)
        return values
    raise ValueError(f"unknown overflow mode {overflow!r}")


def evaluate(program: IntegerProgram, states: np.ndarray) -> list[np.ndarray]:
    """Every value of one step. ``states`` : int ndarray, shape (n_states, batch)."""
    if not program.is_planned:
        raise ValueError("the program has no fixed-point plan yet")
    bits, overflow = program.word_bits, program.overflow

    def fit(v: np.ndarray, wraps: bool = False) -> np.ndarray:
        return fit_word(v, bits, "wrap" if wraps else overflow)

    values: list[np.ndarray] = []
    batch = np.shape(states)[1:]
    rounding = program.rounding

    def aligned(op_args: list[np.ndarray], align: tuple[int, ...]) -> list[np.ndarray]:
        return [v * np.int64(1 << k) if k else v for v, k in zip(op_args, align, strict=True)]

    for op in program.ops:
        a = [values[i] for i in op.args]
        kind = op.kind
        if kind == "state":
            v = np.asarray(states[op.state], dtype=np.int64)
        elif kind == "const":
            v = np.full(batch, op.constant, dtype=np.int64)
        elif kind == "mul":
            v = fit(round_shift(np.multiply(a[0], a[1]), op.shift, rounding), op.wraps)
        elif kind == "scale":
            v = fit(round_shift(a[0] * np.int64(op.constant), op.shift, rounding), op.wraps)
        elif kind in ("neg", "abs"):
            exact = -a[0] if kind == "neg" else np.abs(a[0])
            v = fit(round_shift(exact, op.shift, rounding), op.wraps)
        elif kind in ("add", "sub", "min", "max"):
            x, y = aligned(a, op.align)
            exact = {"add": np.add, "sub": np.subtract, "min": np.minimum,
                     "max": np.maximum}[kind](x, y)
            v = fit(round_shift(exact, op.shift, rounding), op.wraps)
        elif kind in ("sin", "cos"):
            phase = a[0] & np.int64((1 << bits) - 1)  # the angle as an unsigned word
            if kind == "cos":
                phase = (phase + np.int64(1 << (bits - 2))) & np.int64((1 << bits) - 1)
            table = np.asarray(op.table, dtype=np.int64)
            index = phase >> np.int64(op.shift)
            within = phase & np.int64((1 << op.shift) - 1)
            low = table[index]
            step = round_shift((table[index + 1] - low) * within, op.shift, rounding)
            v = fit(low + step)
        else:
            raise ValueError(f"no golden rule for {kind!r}")
        values.append(v)
    return values


def step(program: IntegerProgram, states: np.ndarray) -> np.ndarray:
    """One step from each state of the batch. Returns int64 ndarray, shape (n_states, batch)."""
    values = evaluate(program, states)
    return np.stack([values[i] for i in program.next_state])


def run(program: IntegerProgram, initial: np.ndarray, steps: int) -> np.ndarray:
    """A trajectory of ``steps`` steps from one state; row k is the state after k steps."""
    out = np.empty((steps + 1, len(program.state_names)), dtype=np.int64)
    state = np.asarray(initial, dtype=np.int64).reshape(-1, 1)
    out[0] = state[:, 0]
    for k in range(steps):
        state = step(program, state)
        out[k + 1] = state[:, 0]
    return out
