"""The golden interpreter (layer L2): runs the integer program in numpy, vectorised over a batch
of states, and gives the bits that the C must reproduce exactly.

Rounding and overflow live here once for the Python side (``round_shift``, ``fit_word``, which
also marks the states whose step a clamp changed: a saturated step); the C side renders the same
rules from ``templates/fixed_point.c.j2``. What each operation computes
before them is its kind's golden rule (``gen/program/operations.py``). Values are held in the
integer type of the program's product width, like the C's. Both back ends are tested against
exact rational arithmetic.
"""

from __future__ import annotations

import numpy as np

from orbitfix.gen.program.integer_program import OVERFLOWS, IntegerProgram, next_saturation_count
from orbitfix.gen.program.operations import kind_of


def wide_type(product_bits: int) -> type[np.signedinteger]:
    """The numpy integer type of a program's product width (the C's ``int<product_bits>_t``)."""
    try:
        return {32: np.int32, 64: np.int64}[product_bits]
    except KeyError:
        raise ValueError(f"no numpy integer type for {product_bits}-bit products") from None


def round_shift(product: np.ndarray, shift: int, rounding: str) -> np.ndarray:
    """Divide by 2**shift with the program's rounding rule, in place (the array's own integer
    type in and out).

    truncate: floor(product / 2**shift);
    half-up: floor(product / 2**shift + 1/2), ties toward plus infinity;
    half-even: nearest, ties to the even quotient.
    """
    if shift == 0:
        return product
    number = product.dtype.type
    if rounding == "truncate":
        product >>= number(shift)
        return product
    if rounding == "half-up":
        product += number(1 << (shift - 1))
        product >>= number(shift)
        return product
    if rounding == "half-even":
        remainder = product & number((1 << shift) - 1)
        product >>= number(shift)
        half = number(1 << (shift - 1))
        product += (remainder > half) | ((remainder == half) & ((product & 1) == 1))
        return product
    raise ValueError(f"unknown rounding {rounding!r}")


def fit_word(values: np.ndarray, word_bits: int, overflow: str,
             saturated: np.ndarray | None = None) -> np.ndarray:
    """Bring exact results into the word, in place: clamp (saturate) or reduce modulo 2**word_bits
    (wrap). With ``saturated`` (bool, the values' shape), a clamp that changes a value marks its
    place there; wrapping never does."""
    low, high = -(1 << (word_bits - 1)), (1 << (word_bits - 1)) - 1
    if values.size == 1 and low <= values.item() <= high and overflow in OVERFLOWS:
        return values  # in the word: neither rule changes or marks it (one state: a short cut)
    if overflow == "saturate":
        number = values.dtype.type
        if saturated is not None:
            saturated |= (values < number(low)) | (values > number(high))
        np.maximum(values, number(low), out=values)  # np.clip checks its limits on every call
        return np.minimum(values, number(high), out=values)
    if overflow == "wrap":
        number = values.dtype.type
        values -= number(low)
        values &= number((1 << word_bits) - 1)
        values += number(low)
        return values
    raise ValueError(f"unknown overflow mode {overflow!r}")


class _Machine:
    """The program's integer semantics, offered to each kind's golden rule."""

    def __init__(self, program: IntegerProgram, states: np.ndarray) -> None:
        self.wide = wide_type(program.product_bits)
        self.word_bits = program.word_bits
        self.rounding = program.rounding
        self.program = program
        self.batch = states.shape[1:]
        self.states = states
        self.saturated: np.ndarray | None = None  # where a clamp of this value marks its step

    def state(self, index: int) -> np.ndarray:
        return self.states[index]

    def round_shift(self, exact: np.ndarray, shift: int) -> np.ndarray:
        return round_shift(exact, shift, self.rounding)

    def fit(self, exact: np.ndarray, wraps: bool) -> np.ndarray:
        return fit_word(exact, self.word_bits, self.program.fit_rule(wraps), self.saturated)

    def hold(self, values: np.ndarray, low: int, high: int) -> np.ndarray:
        """A copy of ``values`` held in [low, high]; a clamp that changes a value marks its step
        saturated (like ``fit``'s)."""
        number = values.dtype.type
        if self.saturated is not None:
            self.saturated |= (values < number(low)) | (values > number(high))
        return np.minimum(np.maximum(values, number(low)), number(high))


def evaluate(program: IntegerProgram, states: np.ndarray,
             saturated: np.ndarray | None = None) -> list[np.ndarray]:
    """Every value of one step, in the integer type of the program's product width.

    states : int ndarray, shape (n_states, batch), each a word of the program.
    saturated : bool ndarray, shape (batch,), or None; set True where the step is saturated
        (some clamp changed a value; see ``integer_program``), left alone elsewhere.
    """
    if not program.is_planned:
        raise ValueError("the program has no fixed-point plan yet")
    states = np.asarray(states)
    if states.size and (states.min() < program.word_min or states.max() > program.word_max):
        raise ValueError(f"a state is outside the {program.word_bits}-bit word")
    machine = _Machine(program, states.astype(wide_type(program.product_bits), copy=False))
    counted = program.counted_clamps if saturated is not None else frozenset()
    values: list[np.ndarray] = []
    for index, op in enumerate(program.ops):
        machine.saturated = saturated if index in counted else None
        values.append(kind_of(op.kind).golden(op, [values[i] for i in op.args], machine))
    return values


def step(program: IntegerProgram, states: np.ndarray) -> np.ndarray:
    """One step from each state of the batch. Returns int64 ndarray, shape (n_states, batch)."""
    values = evaluate(program, states)
    return np.stack([values[i] for i in program.next_state]).astype(np.int64, copy=False)


def step_saturated(program: IntegerProgram, states: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """One step from each state of the batch, and whether it was saturated. Returns (int64
    ndarray, shape (n_states, batch); bool ndarray, shape (batch,))."""
    states = np.asarray(states)
    saturated = np.zeros(states.shape[1:], dtype=bool)
    values = evaluate(program, states, saturated)
    return np.stack([values[i] for i in program.next_state]).astype(np.int64, copy=False), saturated


def step_counted(program: IntegerProgram, states: np.ndarray,
                 counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """One step from each state of the batch with its count of saturated steps, as the firmware
    takes it. Returns (next states, int64 ndarray shape (n_states, batch); next counts, int64
    ndarray shape (batch,))."""
    after, saturated = step_saturated(program, states)
    return after, next_saturation_count(np.asarray(counts, dtype=np.int64), saturated)


def run_counted(program: IntegerProgram, initial: np.ndarray, steps: int,
                count: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """``run`` with the firmware's count of saturated steps, starting at ``count``: (the
    trajectory; int64 ndarray, shape (steps + 1,), the count after k steps in row k)."""
    out = np.empty((steps + 1, len(program.state_names)), dtype=np.int64)
    counts = np.empty(steps + 1, dtype=np.int64)
    state = np.asarray(initial, dtype=np.int64).reshape(-1, 1)
    out[0], counts[0] = state[:, 0], count
    for k in range(steps):
        state, saturated = step_saturated(program, state)
        out[k + 1], counts[k + 1] = state[:, 0], next_saturation_count(int(counts[k]), saturated[0])
    return out, counts


def run(program: IntegerProgram, initial: np.ndarray, steps: int) -> np.ndarray:
    """A trajectory of ``steps`` steps from one state; row k is the state after k steps."""
    out = np.empty((steps + 1, len(program.state_names)), dtype=np.int64)
    state = np.asarray(initial, dtype=np.int64).reshape(-1, 1)
    out[0] = state[:, 0]
    for k in range(steps):
        state = step(program, state)
        out[k + 1] = state[:, 0]
    return out


def output_values(program: IntegerProgram, states: np.ndarray,
                  memory: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The outputs from each NEW state of the batch and each output's memory (its last value):
    (the new values y_k, clamp(u, min, max)), each int64 ndarray, shape (n_outputs, batch).
    states : shape (n_states, batch); memory : shape (n_outputs, batch), each a word."""
    section = program.output_program
    states = np.asarray(states, dtype=np.int64)
    if section is None:
        empty = np.zeros((0, states.shape[1]), dtype=np.int64)
        return empty, empty
    memory = np.asarray(memory, dtype=np.int64).reshape(len(program.outputs), -1)
    values = evaluate(section, np.vstack([states, memory]))
    pick = lambda which: np.stack([values[getattr(o, which)] for o in program.outputs]).astype(  # noqa: E731
        np.int64, copy=False)
    return pick("value"), pick("limited")


def initial_outputs(program: IntegerProgram, state: np.ndarray) -> np.ndarray:
    """The memory the init function gives each output: clamp(u, min, max) of ``state`` (the
    initial state), int64 ndarray, shape (n_outputs,)."""
    state = np.asarray(state, dtype=np.int64).reshape(-1, 1)
    return output_values(program, state, np.zeros((len(program.outputs), 1), dtype=np.int64))[1][:, 0]


def step_with_outputs(program: IntegerProgram, states: np.ndarray, memory: np.ndarray,
                      counts: np.ndarray | None = None
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """One step from each state of the batch as the firmware takes it: the next states, the
    outputs' new values from them (and from ``memory``, each output's last value, shape
    (n_outputs, batch)), and, given ``counts``, the counts of saturated steps after the step."""
    if counts is None:
        after = step(program, states)
        counted = None
    else:
        after, counted = step_counted(program, states, counts)
    return after, output_values(program, after, memory)[0], counted


def run_with_outputs(program: IntegerProgram, initial: np.ndarray, memory: np.ndarray,
                     steps: int) -> tuple[np.ndarray, np.ndarray]:
    """``run`` with the outputs: (the states, shape (steps + 1, n_states); the outputs, shape
    (steps + 1, n_outputs)), row k after k steps (row 0: ``initial`` and ``memory``)."""
    states = run(program, initial, steps)
    outputs = np.empty((steps + 1, len(program.outputs)), dtype=np.int64)
    outputs[0] = np.asarray(memory, dtype=np.int64)
    last = outputs[0].reshape(-1, 1)
    for k in range(steps):
        last = output_values(program, states[k + 1].reshape(-1, 1), last)[0]
        outputs[k + 1] = last[:, 0]
    return states, outputs
