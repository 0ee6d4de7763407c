"""The integer program: the single source of truth for the step function's arithmetic.

A straight-line list of typed operations. Every operation produces one value, named by its index.
The lowering fills in the real-valued structure (kinds, arguments, real constants); the fixed-point
planner fills in the integer part (stored constants, shifts, fraction bits). The numpy golden
interpreter (``gen/program/golden.py``) runs it and the C emitter (``gen/c/emit.py``) renders it;
neither adds an arithmetic decision of its own.

Every value is an integer standing for integer / 2**fraction_bits, each value with its own
``fraction_bits``. On two's complement words of ``word_bits`` (16 or 32) with products formed in
``product_bits`` (twice the word), an operation

1. forms the exact wide result from its arguments (for ``add``, ``sub``, ``min`` and ``max``,
   each first multiplied by 2**align[i], which brings them to one scale and never overflows the
   wide type, since no alignment exceeds word_bits - 2);
2. divides it by 2**shift with the program's ``rounding``: ``truncate`` (toward minus infinity),
   ``half-up`` (nearest, ties toward plus infinity) or ``half-even`` (nearest, ties to even);
   or, for a ``mixed`` program, with each operation's own ``rounding``: ``truncate`` where the
   planner found its error carried into the next state far below a state's LSB, else
   ``half-up`` (``IntegerProgram.rounding_of``);
3. brings it into the word: clamp (``overflow`` = ``saturate``) or reduce modulo 2**word_bits
   (``wrap``).

What each kind does (``state``, ``const``, ``add``, ``sub``, ``scaled_sum``, ``neg``, ``abs``,
``min``, ``max``, ``mul``, ``scale``, ``sin``, ``cos``) is defined once, in
``gen/program/operations.py``. ``scaled_sum`` takes any number of arguments from two, each with
its whole weight (``weights``), and a stored constant: an integrator's increment, its slopes
summed and scaled exactly in the product width and rounded once.

Angles (phases) are held in turns: an angle value has fraction_bits = word_bits, so the word
covers exactly one turn and wrapping modulo 2**word_bits is wrapping modulo a full turn. An
operation with ``wraps`` set brings its result into the word by wrapping, whatever the program's
``overflow`` (that is how angles add up without ever losing precision). ``sin`` and ``cos`` read
an angle through a table, after adding the operation's ``offset`` (a quarter turn for ``cos``).

Proven fits and held states. The planner proves, by interval arithmetic on the integers
(``gen/program/proven_fit.py``), which results can never leave the word for a state within a range
per state: such an operation is ``proven`` and enters the word by wrapping, which never acts. Each
state of a ``saturate`` program then carries that range (``held``, lowest and highest integer): the
step first holds the state in it, a clamp like any other (it counts). So no step, from any state,
meets an unproven overflow; and a state outside the proven range is a saturated step.

Saturated steps. A step is *saturated* when the clamp of step 3 changed at least one of the values
the next state depends on (an exact result outside the word; ``IntegerProgram.counted_clamps``).
Wrapping (angles, and every value of a ``wrap`` program) never counts, nor does a value the next
state does not use (the firmware does not compute it). Beside its states, the
firmware keeps a count of saturated steps, an unsigned integer of ``SATURATION_COUNT_BITS`` that
starts at 0 and sticks at its largest value (``next_saturation_count``). The count is not a state:
no value of the step reads it.

Outputs to actuators. A program may carry outputs (``outputs``, one ``OutputSlot`` each) and
their operations, ``output_program``: a program of its own that loads the step's states and
then one memory per output, and whose ``next_state`` is the states unchanged and then each
output's new value. After each step, from the NEW state x and the outputs' memories y_{k-1}
(the values the last step left), each output computes, in its own format covering [min, max]
in the actuator's unit:

    u_k = offset + scale * value(x)
    without a slew limit:  y_k = clamp(u_k, min, max)
    with slew s (actuator units per second) at the loop period dt (s):
        y_k = clamp(y_{k-1} + clamp(u_k - y_{k-1}, -s*dt, +s*dt), min, max)

where the memory y_{k-1} is first held in [min, max] (it always is, unless written by hand), and
every clamp is a ``max`` then a ``min`` operation with stored limits: always computed, never
proven away. The firmware keeps y_k beside the state, as the output's field; the init function
sets it to clamp(u, min, max) of the initial state (``OutputSlot.limited``), so the first step
does not ramp from zero. Every other result of the outputs is proven to fit the word from the
range the step's next state can take (the planner refuses outputs it cannot prove), so no
output's arithmetic clamps at the word, and a limit that acts is the intended behaviour, never a
saturated step: the outputs leave the next state and the count of saturated steps alone.

Repeated work. A network of identical oscillators does the same work once per oscillator:
``repeats`` records it, each repeat a tuple of copies (one per oscillator, in order), each copy
the indices of its operations, position by position alike in the lowering (same kinds, same
real constants but for the coupling's, arguments that are the same copy's values, a value of
another repeat's copy a fixed number of oscillators on, or one shared value). ``routines`` gives
each repeat a number: repeats with one number do the same work on different values (each stage's
rates of an explicit integrator). The planner gives every position one format over all the
copies of all the repeats of one routine. It changes no arithmetic: the golden interpreter runs
the operations as they are, and the C emitter may render a repeat as one loop over the
oscillators, only after checking that every copy's C is the same (``gen/c/loops.py``).
"""

from __future__ import annotations

import functools
import hashlib
import json
from dataclasses import dataclass, field

from orbitfix.gen.model.limits import OVERFLOWS, ROUNDINGS, WORD_SIZES

SATURATION_COUNT_BITS = 32
SATURATION_COUNT_MAX = (1 << SATURATION_COUNT_BITS) - 1


def next_saturation_count(count, saturated):
    """The count of saturated steps after one more step: one more if the step was saturated,
    never past SATURATION_COUNT_MAX (it sticks there, it never wraps to zero). Works on Python
    integers and on numpy arrays (count: unsigned or int64, saturated: bool)."""
    if hasattr(count, "dtype"):  # a numpy array
        import numpy as np

        wide = np.asarray(count, dtype=np.int64) + np.asarray(saturated, dtype=np.int64)
        return np.minimum(wide, SATURATION_COUNT_MAX)
    return min(int(count) + int(bool(saturated)), SATURATION_COUNT_MAX)


def _check_repeats(repeats: tuple, count: int) -> None:
    """Each repeat has two or more copies of one length; no operation is in two copies."""
    seen: set[int] = set()
    for repeat in repeats:
        if len(repeat) < 2 or len({len(c) for c in repeat}) != 1:
            raise ValueError(f"a repeat needs two or more copies of one length: {repeat}")
        for copy in repeat:
            if any(i < 0 or i >= count or i in seen for i in copy):
                raise ValueError(f"a repeat's operation is outside the program or in two copies: "
                                 f"{copy}")
            seen.update(copy)


@dataclass(frozen=True)
class Op:
    """One operation. Integer fields are ``None`` until the fixed-point planner has run."""

    kind: str
    args: tuple[int, ...] = ()
    state: int | None = None
    real: float | None = None
    note: str = ""
    constant: int | None = None
    shift: int | None = None
    fraction_bits: int | None = None
    align: tuple[int, ...] = ()
    wraps: bool = False
    table: tuple[int, ...] = ()
    offset: int | None = None
    held: tuple[int, ...] = ()
    proven: bool = False
    weights: tuple[int, ...] = ()
    rounding: str = ""  # a mixed program's rule for this operation ("": half-up)
    limit: str = ""  # a stored constant that bounds a value: "low" or "high" (it rounds inward)

    def __post_init__(self) -> None:
        from orbitfix.gen.program.operations import kind_of  # numpy: not needed to read options

        arity = kind_of(self.kind).arity
        if arity is None:  # any number of arguments from two, each with its whole weight
            if len(self.args) < 2 or len(self.weights) != len(self.args) or 0 in self.weights:
                raise ValueError(f"{self.kind} takes two or more arguments with one nonzero weight "
                                 f"each, got {self.args} and weights {self.weights}")
        elif len(self.args) != arity or self.weights:
            raise ValueError(f"{self.kind} takes {arity} arguments and no weights, got {self.args}")

    def to_json(self) -> dict:
        data: dict = {"kind": self.kind, "args": list(self.args)}
        for key in ("state", "real", "constant", "shift", "fraction_bits", "offset"):
            value = getattr(self, key)
            if value is not None:
                data[key] = value
        if self.align:
            data["align"] = list(self.align)
        if self.wraps:
            data["wraps"] = True
        if self.table:
            data["table"] = list(self.table)
        if self.held:
            data["held"] = list(self.held)
        if self.weights:
            data["weights"] = list(self.weights)
        if self.proven:
            data["proven"] = True
        if self.rounding:
            data["rounding"] = self.rounding
        if self.limit:
            data["limit"] = self.limit
        if self.note:
            data["note"] = self.note
        return data


@dataclass(frozen=True)
class OutputSlot:
    """One output of the program: where its values are in ``output_program`` and its format.

    limited -- the value clamp(u, min, max) (the memory the init function sets); value -- the
    output's new value y_k; low, high -- the sure integer range of y_k (its limits as stored);
    slew_step -- the largest change per step in real actuator units (None: no slew limit).
    """

    name: str
    unit: str
    fraction_bits: int
    limited: int
    value: int
    low: int
    high: int
    slew_step: float | None = None

    def to_json(self) -> dict:
        return {"name": self.name, "unit": self.unit, "fraction_bits": self.fraction_bits,
                "limited": self.limited, "value": self.value, "low": self.low, "high": self.high,
                "slew_step": self.slew_step}


@dataclass(frozen=True)
class IntegerProgram:
    """A step function x[k+1] = F(x[k]) as straight-line integer operations.

    ``next_state[i]`` is the index of the value that becomes state ``i`` after the step. The first
    ``model_states`` states are the model's (0: all of them); each runtime parameter follows as
    two more states, its current value and its target (which the step leaves as it is).
    """

    name: str
    state_names: tuple[str, ...]
    ops: tuple[Op, ...]
    next_state: tuple[int, ...]
    word_bits: int = 32
    product_bits: int = 64
    rounding: str = "half-up"
    overflow: str = "saturate"
    state_fraction_bits: tuple[int, ...] = field(default=())
    model_states: int = 0
    angle_states: tuple[int, ...] = ()
    outputs: tuple[OutputSlot, ...] = ()
    output_program: IntegerProgram | None = None
    repeats: tuple[tuple[tuple[int, ...], ...], ...] = ()
    routines: tuple[int, ...] = ()

    def __post_init__(self) -> None:
        if self.word_bits not in WORD_SIZES:
            raise ValueError(f"unsupported word size {self.word_bits}")
        if self.rounding not in ROUNDINGS:
            raise ValueError(f"unknown rounding {self.rounding!r}")
        if any(op.rounding and (self.rounding != "mixed" or op.rounding not in ("truncate",
                                                                                "half-up"))
               for op in self.ops):
            raise ValueError("only a mixed program gives an operation a rounding of its own "
                             "(truncate or half-up)")
        if self.overflow not in OVERFLOWS:
            raise ValueError(f"unknown overflow mode {self.overflow!r}")
        for index, op in enumerate(self.ops):
            if any(a >= index or a < 0 for a in op.args):
                raise ValueError(f"operation {index} uses a value not yet computed: {op.args}")
        _check_repeats(self.repeats, len(self.ops))
        if len(self.routines) != len(self.repeats) or any(
                len(self.repeats[a][0]) != len(self.repeats[b][0])
                for a in range(len(self.repeats)) for b in range(a)
                if self.routines[a] == self.routines[b]):
            raise ValueError("every repeat needs a routine, and one routine's repeats one length")
        loads = [op.state for op in self.ops if op.kind == "state"]
        if loads != list(range(len(self.state_names))):
            raise ValueError("the program must load every state once, in order, first")

    @property
    def model_state_count(self) -> int:
        return self.model_states or len(self.state_names)

    @property
    def word_min(self) -> int:
        return -(1 << (self.word_bits - 1))

    @property
    def word_max(self) -> int:
        return (1 << (self.word_bits - 1)) - 1

    def fit_rule(self, wraps: bool) -> str:
        """How a result enters the word: ``wrap`` for an operation that wraps (an angle) and for
        every value of a ``wrap`` program, else ``saturate`` (a clamp). Only a ``saturate`` fit
        that changes a value makes the step saturated."""
        return "wrap" if wraps else self.overflow

    def clamps(self, op: Op) -> bool:
        """Whether ``op``'s result is clamped, so that a clamp that changes it makes the step
        saturated: a state held in its range (``held``), or a result brought into the word by a
        clamp (its kind brings it into the word, see ``OperationKind.fit_wraps``, not by
        wrapping) that is not ``proven`` to fit."""
        from orbitfix.gen.program.operations import kind_of

        if op.held:
            return True
        wraps = kind_of(op.kind).fit_wraps(op)
        return wraps is not None and not op.proven and self.fit_rule(wraps) == "saturate"

    @functools.cached_property
    def kept_values(self) -> frozenset[int]:
        """The values the next state depends on (the firmware's step computes only these)."""
        kept = set(self.next_state)
        for index in range(len(self.ops) - 1, -1, -1):
            if index in kept:
                kept.update(self.ops[index].args)
        return frozenset(kept)

    @functools.cached_property
    def counted_clamps(self) -> frozenset[int]:
        """The values whose clamp, when it changes the value, makes the step saturated: those the
        next state depends on and that are clamped into the word."""
        return frozenset(i for i in self.kept_values if self.clamps(self.ops[i]))

    @functools.cached_property
    def one_constant_each(self) -> bool:
        """Whether every stored constant is one integer (a period trim's search stores an array
        of candidates, one per state of its batch; golden's one-state path needs integers)."""
        return all(op.constant is None or type(op.constant) is int for op in self.ops)

    @property
    def counts_saturation(self) -> bool:
        """Whether any step can be saturated. False for a ``wrap`` program, whose count of
        saturated steps stays 0."""
        return bool(self.counted_clamps)

    @property
    def is_planned(self) -> bool:
        return all(op.fraction_bits is not None for op in self.ops)

    def constants(self) -> list[tuple[int, Op]]:
        """The operations that carry a stored constant, with their value index."""
        from orbitfix.gen.program.operations import kind_of

        return [(i, op) for i, op in enumerate(self.ops) if kind_of(op.kind).constant_role]

    def to_json(self) -> dict:
        outputs = {"outputs": [o.to_json() for o in self.outputs],
                   "output_program": self.output_program.to_json()} if self.outputs else {}
        return {
            **outputs,
            "name": self.name,
            "state_names": list(self.state_names),
            "word_bits": self.word_bits,
            "product_bits": self.product_bits,
            "rounding": self.rounding,
            "overflow": self.overflow,
            "state_fraction_bits": list(self.state_fraction_bits),
            "next_state": list(self.next_state),
            "model_states": self.model_state_count,
            "angle_states": list(self.angle_states),
            "ops": [op.to_json() for op in self.ops],
            **({"repeats": [[list(c) for c in r] for r in self.repeats],
                "routines": list(self.routines)} if self.repeats else {}),
        }

    def rounding_of(self, op: Op) -> str:
        """The rounding rule of one operation's shift: the program's, or in a mixed program the
        operation's own (half-up unless the planner chose truncate)."""
        if self.rounding != "mixed":
            return self.rounding
        return op.rounding or "half-up"

    def fingerprint(self) -> str:
        """A short hash of the whole program: same arithmetic, same fingerprint."""
        canonical = json.dumps(self.to_json(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(canonical.encode()).hexdigest()[:16]
