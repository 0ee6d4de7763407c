"""The golden interpreter (layer L2): runs the integer program in numpy, vectorised over a batch
of states, and gives the bits that the C must reproduce exactly. A batch of one state is run on
Python integers by the same rules (a numpy call on one value costs microseconds, an integer
operation tens of nanoseconds), which is what a run along one trajectory needs.

Rounding and overflow live here once for the Python side (``round_shift``, ``fit_word``, which
also marks the states whose step a clamp changed: a saturated step); the C side renders the same
rules from ``templates/fixed_point.c.j2``. What each operation computes
before them is its kind's golden rule (``gen/program/operations.py``). Values are held in the
integer type of the program's product width, like the C's. Both back ends are tested against
exact rational arithmetic.
"""

from __future__ import annotations

import numpy as np

from orbitfix.gen.model.limits import OVERFLOWS
from orbitfix.gen.program.integer_program import IntegerProgram, next_saturation_count
from orbitfix.gen.program.operations import kind_of


def wide_type(product_bits: int) -> type[np.signedinteger]:
    """The numpy integer type of a program's product width (the C's ``int<product_bits>_t``)."""
    try:
        return {32: np.int32, 64: np.int64}[product_bits]
    except KeyError:
        raise ValueError(f"no numpy integer type for {product_bits}-bit products") from None


def round_shift(product: np.ndarray | int, shift: int, rounding: str) -> np.ndarray | int:
    """Divide by 2**shift with the program's rounding rule (an array in place, keeping its integer
    type; a Python integer stays one).

    truncate: floor(product / 2**shift);
    half-up: floor(product / 2**shift + 1/2), ties toward plus infinity;
    half-even: nearest, ties to the even quotient.
    """
    if shift == 0:
        return product
    if rounding == "truncate":
        product >>= shift
        return product
    if rounding == "half-up":
        product += 1 << (shift - 1)
        product >>= shift
        return product
    if rounding == "half-even":
        remainder = product & ((1 << shift) - 1)
        product >>= shift
        half = 1 << (shift - 1)
        product += (remainder > half) | ((remainder == half) & ((product & 1) == 1))
        return product
    raise ValueError(f"unknown rounding {rounding!r}")


def fit_word(values: np.ndarray | int, word_bits: int, overflow: str,
             saturated: np.ndarray | None = None) -> np.ndarray | int:
    """Bring exact results into the word (an array in place): clamp (saturate) or reduce modulo
    2**word_bits (wrap). With ``saturated`` (bool, the values' shape), a clamp that changes a
    value marks its place there; wrapping never does."""
    low, high = -(1 << (word_bits - 1)), (1 << (word_bits - 1)) - 1
    single = not isinstance(values, np.ndarray)
    if (single or values.size == 1) and overflow in OVERFLOWS and low <= values <= high:
        return values  # in the word: neither rule changes or marks it (one state: a short cut)
    if overflow == "saturate":
        if saturated is not None:
            saturated |= (values < low) | (values > high)
        if single:
            return min(max(values, low), high)
        np.maximum(values, low, out=values)  # np.clip checks its limits on every call
        return np.minimum(values, high, out=values)
    if overflow == "wrap":
        if single:
            return ((values - low) & ((1 << word_bits) - 1)) + low
        values -= low
        values &= (1 << word_bits) - 1
        values += low
        return values
    raise ValueError(f"unknown overflow mode {overflow!r}")


_TABLE_ARRAYS: dict[tuple[int, type], tuple[tuple[int, ...], np.ndarray]] = {}


def _table_array(table: tuple[int, ...], wide: type) -> np.ndarray:
    """The table as a read-only numpy array of ``wide``, made once per table: a golden run reads
    it at every step, and converting up to 4097 entries each time was a large part of a
    network's run time."""
    key = (id(table), wide)  # the entry holds its table, so the id stays its own
    held = _TABLE_ARRAYS.get(key)
    if held is None:
        if len(_TABLE_ARRAYS) >= 256:
            _TABLE_ARRAYS.clear()
        array = np.asarray(table, dtype=wide)
        array.flags.writeable = False
        held = _TABLE_ARRAYS[key] = (table, array)
    return held[1]


class _Machine:
    """The program's integer semantics over a batch of states (numpy arrays of the product
    width), offered to each kind's golden rule."""

    def __init__(self, program: IntegerProgram, states) -> None:
        self.wide = wide_type(program.product_bits)
        self.word_bits = program.word_bits
        self.program = program
        self.states = states
        self.saturated: np.ndarray | None = None  # where a clamp of this value marks its step

    def number(self, value: int):
        return self.wide(value)

    def full(self, value: int):
        return np.full(self.states.shape[1:], value, dtype=self.wide)

    def table(self, entries: tuple[int, ...]):
        return _table_array(entries, self.wide)

    minimum = staticmethod(np.minimum)
    maximum = staticmethod(np.maximum)

    def state(self, index: int):
        return self.states[index]

    def round_shift(self, exact, shift: int, op):
        return round_shift(exact, shift, self.program.rounding_of(op))

    def fit(self, exact, wraps: bool):
        return fit_word(exact, self.word_bits, self.program.fit_rule(wraps), self.saturated)

    def hold(self, values, low: int, high: int):
        """``values`` held in [low, high] (a new value); a clamp that changes a value marks its
        step saturated (like ``fit``'s)."""
        if self.saturated is not None:
            self.saturated |= (values < low) | (values > high)
        return self.minimum(self.maximum(values, low), high)


class _OneState(_Machine):
    """The same semantics on Python integers, for a batch of one state: ``states`` is a list of
    integers and ``saturated`` a bool array of shape ()."""

    def number(self, value: int):
        return value

    def full(self, value: int):
        return value

    def table(self, entries: tuple[int, ...]):
        return entries

    minimum = staticmethod(min)
    maximum = staticmethod(max)


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
    wide = wide_type(program.product_bits)
    one = states.shape[1:] == (1,) and program.one_constant_each
    if one:
        machine: _Machine = _OneState(program, [int(v) for v in states[:, 0]])
        flag = np.zeros((), dtype=bool) if saturated is not None else None
    else:
        machine, flag = _Machine(program, states.astype(wide, copy=False)), saturated
    counted = program.counted_clamps if saturated is not None else frozenset()
    values: list = []
    for index, op in enumerate(program.ops):
        machine.saturated = flag if index in counted else None
        values.append(kind_of(op.kind).golden(op, [values[i] for i in op.args], machine))
    if not one:
        return values
    if flag:
        saturated[...] = True
    return list(np.array(values, dtype=wide).reshape(-1, 1))  # raises if one left the width


def value_with(program: IntegerProgram, states: np.ndarray, values: list[np.ndarray],
               index: int, op) -> np.ndarray:
    """Operation ``index`` computed as ``op`` (say, with another constant) from the batch's other
    values (``values``, from :func:`evaluate` on ``states``): what that one value would be."""
    machine = _Machine(program, np.asarray(states).astype(wide_type(program.product_bits),
                                                          copy=False))
    return kind_of(op.kind).golden(op, [values[i] for i in op.args], machine)


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
