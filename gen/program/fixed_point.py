"""The fixed-point planner: chooses the Q format from the signals' ranges on the cycle and on the
float step map's start-up paths, rounds every constant once, and fills the integer part of the
program.

Q formats are written Qm.n: m integer bits counting the sign bit, n fraction bits, m + n = word
size; Q8.24 holds [-128, 128) in steps of 2**-24 (common practice).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, replace
from fractions import Fraction

import numpy as np

from orbitfix.gen.errors import InputError
from orbitfix.gen.model.angles import radians_to_turns
from orbitfix.gen.model.definition import Parameter
from orbitfix.gen.model.limits import OVERFLOWS, ROUNDINGS, WORD_SIZES
from orbitfix.gen.program.integer_program import IntegerProgram
from orbitfix.gen.program.lowering import evaluate_real
from orbitfix.gen.program.operations import constant_fraction_bits, kind_of
from orbitfix.gen.program.proven_fit import prove_fits
from orbitfix.gen.program.quantisation import quantise
from orbitfix.gen.program.ranges import interval_ranges, planning_box

SENSITIVITY_POINTS = 32   # points of the cycle where a mixed plan measures each rounding's reach
TRUNCATION_BUDGET = 1 / 4   # what all truncations together may move a next state, in its LSBs


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
    wraps: bool = False  # an angle: stored modulo the word's span, a whole turn is the same angle

    @property
    def represents(self) -> float:
        return float(Fraction(self.stored, 1 << self.format.fraction_bits))

    @property
    def error(self) -> float:
        """What is stored minus the real value (for an angle, the nearest way round)."""
        difference = self.represents - self.real
        if not self.wraps:
            return difference
        span = 2.0 ** (self.format.word_bits - self.format.fraction_bits)
        return (difference + span / 2) % span - span / 2

    def to_json(self) -> dict:
        return {"value_index": self.index, "note": self.note, "real": self.real,
                "stored": self.stored, "represents": self.represents, "error": self.error,
                "format": self.format.name, "role": self.role}


@dataclass(frozen=True)
class FixedPointPlan:
    """The chosen formats and the fully planned integer program.

    signal_format -- the format every state shares (one scale reads the whole state vector);
    each intermediate value has its own format, in ``program.ops[i].fraction_bits``.
    largest_signal -- the largest state magnitude met on the cycle and the start-up paths.
    signal_ranges -- per value, (min, max) met on the cycle, at the initial state and on the float
    step map's start-up paths (see :func:`start_paths`).
    sure_bounds -- per value, (min, max) by interval arithmetic over the planning box: no step
    from a state in the box can exceed them, and every format holds them times the margin.
    """

    signal_format: QFormat
    largest_signal: float
    largest_signal_note: str
    margin: float
    program: IntegerProgram
    constants: tuple[ConstantReport, ...]
    initial_state: tuple[int, ...]
    warnings: tuple[str, ...]
    signal_ranges: tuple[tuple[float, float], ...] = ()
    sure_bounds: tuple[tuple[float, float], ...] = ()
    box: tuple[tuple[float, float], ...] = ()
    trim: str = ""  # what a period trim changed (gen/study/trim.py); empty when untrimmed
    # outputs to actuators (gen/program/outputs.py): the memory the init function gives each
    # output, and the constants of the outputs' operations (indices into program.output_program)
    initial_outputs: tuple[int, ...] = ()
    output_constants: tuple[ConstantReport, ...] = ()

    def value_format(self, index: int) -> QFormat:
        return QFormat(self.program.word_bits, self.program.ops[index].fraction_bits)

    def signal_table(self) -> list[dict]:
        """One row per value of the step: its range on the cycle, its sure bound over the box,
        its format, the headroom between format and sure bound, and its quantisation step."""
        rows = []
        for index, op in enumerate(self.program.ops):
            fmt = self.value_format(index)
            low, high = self.signal_ranges[index]
            sure_low, sure_high = self.sure_bounds[index]
            peak = max(abs(sure_low), abs(sure_high))
            rows.append({
                "value": index, "kind": op.kind, "note": op.note, "min": low, "max": high,
                "sure_min": sure_low, "sure_max": sure_high, "format": fmt.name,
                "headroom_bits": math.log2(fmt.largest / peak) if peak else float(fmt.word_bits - 1),
                "quantisation_step": fmt.step,
            })
        return rows

    def planned_limits(self) -> list[int]:
        """Per value, the largest magnitude (in its own integer units) the plan allows for: its
        sure bound times the margin, capped at the word. A value beyond it in a run means the
        run left the planned box; a limit of the word's largest value is the whole word (its most
        negative value too)."""
        word_max = self.program.word_max
        if not self.sure_bounds:
            return [word_max] * len(self.program.ops)
        limits = []
        for index, (low, high) in enumerate(self.sure_bounds):
            scale = 2.0 ** self.program.ops[index].fraction_bits
            limits.append(int(min(word_max, math.floor(max(abs(low), abs(high)) * self.margin
                                                       * scale))))
        return limits

    @property
    def headroom_bits(self) -> float:
        if self.largest_signal == 0:
            return float(self.signal_format.word_bits - 1)
        return math.log2(self.signal_format.largest / self.largest_signal)

    def formats_json(self) -> dict:
        """The Q format of every state, intermediate and constant (the verify report's
        ``formats``)."""
        return {
            "states": {name: self.signal_format.name for name in self.program.state_names},
            "signals": [self.value_format(i).name for i in range(len(self.program.ops))],
            "constants": [c.to_json() for c in self.constants],
            "box": [list(b) for b in self.box],
            "word_bits": self.program.word_bits,
            "product_bits": self.program.product_bits,
            "rounding": self.program.rounding,
            "overflow": self.program.overflow,
            "margin": self.margin,
            "largest_state_on_cycle": self.largest_signal,
            "headroom_bits": self.headroom_bits,
        }


def integer_bits_for(peak: float) -> int:
    """Integer bits, sign included, that hold magnitudes up to ``peak`` (at least 1)."""
    if peak <= 0:
        return 1
    bits = 1 + max(0, math.ceil(math.log2(peak)))
    return bits + 1 if peak >= 2.0 ** (bits - 1) else bits


def plan_fixed_point(program: IntegerProgram, samples: np.ndarray, initial: np.ndarray,
                     margin: float = 2.0, fraction_bits: int | None = None,
                     word_bits: int = 32, rounding: str = "half-up",
                     overflow: str = "saturate", box_scale: float = 1.5,
                     runtime: tuple[Parameter, ...] = (), path_steps: int = 0,
                     extra_starts: np.ndarray | None = None) -> FixedPointPlan:
    """Plan formats for ``program``.

    samples : ndarray, shape (n_states, k) -- states on the cycle.
    initial : ndarray, shape (n_states,) -- the initial state, which must be representable.
    margin : float -- every format holds its value's sure bound times ``margin`` (2 = one bit).
    fraction_bits : int -- the states' format, if the user sets it; else chosen from the bounds.
    word_bits, rounding, overflow -- the integer semantics (see ``gen.integer_program``).
    box_scale : float -- the planning box is the cycle's bounding box widened by this factor.
    runtime : the model's runtime parameters, in the program's order: each holds its whole
        [low, high] range, and its current value and target share one format.
    path_steps : int -- the box also covers the float step map's path over this many steps from
        every start the firmware uses (see :func:`start_paths`): a start-up transient that leaves
        the cycle's box (an amplitude settling from its initial value) is planned for too.
    extra_starts : ndarray, shape (n_states, k) -- more starts whose paths the box covers (the
        proof's starts near the unstable equilibria), model units, runtime parameters at their
        values.
    """
    _check_choice("word size", word_bits, WORD_SIZES)
    _check_choice("rounding", rounding, ROUNDINGS)
    _check_choice("overflow mode", overflow, OVERFLOWS)
    if margin < 1:
        raise InputError(f"the range margin must be at least 1, got {margin}")
    n = program.model_state_count
    angles = program.angle_states
    samples = np.array(samples, dtype=float)
    initial = np.array(initial, dtype=float)
    for i in angles:  # angle states are planned, and held, in turns
        samples[i], initial[i] = radians_to_turns(samples[i]), radians_to_turns(initial[i])
    nominal = [v for p in runtime for v in (p.value, p.value)]
    if path_steps > 0:
        extra = np.zeros((n, 0)) if extra_starts is None else np.array(extra_starts, dtype=float)
        for i in angles:
            extra[i] = radians_to_turns(extra[i])
        path = start_paths(program, np.concatenate([initial, nominal]), runtime, path_steps, extra)
        samples = np.hstack([samples, path[:n]])
    points = np.hstack([np.asarray(samples, dtype=float), np.reshape(initial, (-1, 1))])
    points = np.vstack([points, np.repeat(np.reshape(nominal, (-1, 1)), points.shape[1], axis=1)])
    with np.errstate(over="ignore", invalid="ignore"):  # a diverging path: refused just below
        met = tuple((float(np.min(v)), float(np.max(v))) for v in evaluate_real(program, points))
    low, high = planning_box(samples, initial, box_scale, angles)
    low = np.concatenate([low, [v for p in runtime for v in (p.low, p.low)]])
    high = np.concatenate([high, [v for p in runtime for v in (p.high, p.high)]])
    sure = interval_ranges(program, low, high)
    peaks = [max(abs(a), abs(b)) for a, b in sure]
    if not all(math.isfinite(p) for p in peaks):
        raise InputError("a signal of the step is not finite over the planning box; the step size "
                         "is too large for this model or the model has no bounded cycle")
    states = [i for i, op in enumerate(program.ops)
              if op.kind == "state" and op.state < n and op.state not in angles]
    if not states:
        raise InputError("the model has only angle states; give it at least one other state")
    plain_next = [v for i, v in enumerate(program.next_state[:n]) if i not in angles]
    state_peak = max(peaks[i] for i in [*states, *plain_next])
    warnings: list[str] = []
    needed = integer_bits_for(state_peak * margin)
    if fraction_bits is None:
        fraction_bits = word_bits - needed
        if fraction_bits < 1:
            raise InputError(f"the states reach {state_peak:.4g} over the planning box; with a "
                             f"margin of {margin} they do not fit a {word_bits}-bit word")
    else:
        if not 1 <= fraction_bits <= word_bits - 1:
            raise InputError(f"fraction bits must be between 1 and {word_bits - 1}, "
                             f"got {fraction_bits}")
        fmt = QFormat(word_bits, fraction_bits)
        if state_peak >= fmt.largest:
            raise InputError(
                f"format {fmt.name} overflows: the states reach {state_peak:.6g} over the planning "
                f"box but {fmt.name} holds at most {fmt.largest:.6g}; use at most "
                f"{word_bits - integer_bits_for(state_peak)} fraction bits (or leave the choice to "
                "the planner)")
        if state_peak * margin >= fmt.largest:
            warnings.append(f"format {fmt.name} leaves less headroom than the margin of {margin}: "
                            f"the states reach {state_peak:.6g} of {fmt.largest:.6g}")
    state_format = QFormat(word_bits, fraction_bits)
    formats = [word_bits if i in angles else fraction_bits for i in range(n)]
    for p in runtime:  # a runtime parameter's value and target share a format holding its range
        bits = word_bits - integer_bits_for(max(abs(p.low), abs(p.high)) * margin)
        formats += [bits, bits]
    ops, constants = _fill(program, formats, [p * margin for p in peaks], word_bits)
    initial_ints = tuple(quantise(x, f) if i in angles else
                         _state_integer(x, QFormat(word_bits, f), name)
                         for i, (x, f, name) in enumerate(zip([*initial, *nominal], formats,
                                                              program.state_names, strict=True)))
    planned = replace(program, ops=tuple(ops), word_bits=word_bits, product_bits=2 * word_bits,
                      rounding=rounding, overflow=overflow, state_fraction_bits=tuple(formats))
    if rounding == "mixed":
        planned = replace(planned, ops=_truncations(planned, points))
    box = tuple(zip(low.tolist(), high.tolist(), strict=True))
    planned = prove_fits(planned, box)
    state_met = [max(abs(met[i][0]), abs(met[i][1])) for i in states]
    worst = states[int(np.argmax(state_met))]
    return FixedPointPlan(signal_format=state_format, largest_signal=max(state_met),
                          largest_signal_note=program.ops[worst].note, margin=margin,
                          program=planned, constants=tuple(constants),
                          initial_state=initial_ints, warnings=tuple(warnings),
                          signal_ranges=met, sure_bounds=tuple(sure), box=box)


def _truncations(program: IntegerProgram, points: np.ndarray) -> tuple:
    """A mixed program's operations, those that may truncate marked so: truncating instead of
    rounding half up costs at most one more LSB of the value, with a bias, and what matters is
    how far that moves the next state. The float step map measures it: each operation's value
    moved by one of its LSBs, at up to SENSITIVITY_POINTS of ``points`` (states on the cycle,
    the initial one), gives the most it moves each next state, in that state's LSBs. The
    operations that move the states least truncate, while the sum of what they move each state
    stays within TRUNCATION_BUDGET of its LSB. An angle's or a table's rounding stays."""
    ops = program.ops
    candidates = [i for i, op in enumerate(ops)
                  if op.shift and not op.wraps and not kind_of(op.kind).rounds_itself]
    if not candidates:
        return ops
    picks = points[:, np.unique(np.linspace(0, points.shape[1] - 1,
                                            SENSITIVITY_POINTS).astype(int))]
    count = picks.shape[1]
    batch = np.tile(picks, (1, len(candidates) + 1))  # block 0 as it is, block b + 1 moved
    added = {}
    for b, i in enumerate(candidates):
        bump = np.zeros(batch.shape[1])
        bump[(b + 1) * count:(b + 2) * count] = 2.0 ** -ops[i].fraction_bits
        added[i] = bump
    with np.errstate(over="ignore", invalid="ignore"):
        values = evaluate_real(program, batch, added)
    nexts = np.stack([np.broadcast_to(np.asarray(values[j], dtype=float), batch.shape[1:])
                      for j in program.next_state])  # a next state may be a constant
    moved = nexts - np.tile(nexts[:, :count], (1, len(candidates) + 1))
    for j in program.angle_states:  # in turns: the shorter way round
        moved[j] = (moved[j] + 0.5) % 1.0 - 0.5
    moved = np.abs(moved) * (2.0 ** np.array(program.state_fraction_bits, dtype=float))[:, None]
    carried = {i: np.nan_to_num(moved[:, (b + 1) * count:(b + 2) * count], nan=np.inf).max(axis=1)
               for b, i in enumerate(candidates)}
    budget = np.full(len(program.state_names), TRUNCATION_BUDGET)
    chosen = set()
    for i in sorted(candidates, key=lambda i: float(carried[i].max())):
        if np.all(carried[i] <= budget):
            budget -= carried[i]
            chosen.add(i)
    return tuple(replace(op, rounding="truncate" if i in chosen else "")
                 for i, op in enumerate(ops))


def start_points(initial: np.ndarray, runtime: tuple[Parameter, ...],
                 extra: np.ndarray | None = None) -> np.ndarray:
    """Every start the firmware can step from, shape (n_states + 2 * runtime, k): the model's
    initial state with each runtime parameter at its value, and, for every corner of the runtime
    ranges, the parameters held at the corner and ramping from their value to the corner; then
    each column of ``extra`` (model states only) with the parameters at their values."""
    starts = [np.asarray(initial, dtype=float)]
    n = len(initial) - 2 * len(runtime)
    if extra is not None:
        starts += [np.concatenate([column, initial[n:]]) for column in np.asarray(extra).T]
    for corner in itertools.product(*((p.low, p.high) for p in runtime)):
        held = [v for c in corner for v in (c, c)]
        ramp = [v for p, c in zip(runtime, corner, strict=True) for v in (p.value, c)]
        starts += [np.concatenate([initial[:n], held]), np.concatenate([initial[:n], ramp])]
    return np.stack(starts, axis=1)


def start_paths(program: IntegerProgram, initial: np.ndarray, runtime: tuple[Parameter, ...],
                steps: int, extra: np.ndarray | None = None) -> np.ndarray:
    """The float step map's (L1) states over ``steps`` steps from every start of
    :func:`start_points`, shape (n_states + 2 * runtime, k); angle states in turns. A path that
    stops being finite is cut where it does (the planner then refuses the box)."""
    state = start_points(np.asarray(initial, dtype=float), runtime, extra)
    met = [state]
    with np.errstate(over="ignore", invalid="ignore"):  # a diverging path is cut just below
        for _ in range(steps):
            values = evaluate_real(program, state)
            state = np.stack([values[i] for i in program.next_state])
            if not np.all(np.isfinite(state)):
                break
            met.append(state)
    return np.hstack(met)


def _check_choice(what: str, value: object, choices: tuple) -> None:
    if value not in choices:
        raise InputError(f"unknown {what} {value!r} (choose one of: "
                         f"{', '.join(str(c) for c in choices)})")


def _fill(program: IntegerProgram, state_formats: list[int], bounds: list[float],
          w: int) -> tuple[list, list[ConstantReport]]:
    """Give every value its format and every operation its integer fields (words of w bits), by
    each kind's format rule (``gen/program/operations.py``)."""
    ops = program.ops
    kinds = [kind_of(op.kind) for op in ops]
    for op, kind in zip(ops, kinds, strict=True):
        if kind.constant_role:  # refuses a constant too large for the word, naming it
            constant_fraction_bits(op.real, w, op.note)
    forced = {value: state_formats[i] for i, value in enumerate(program.next_state)}
    forced.update({i: w for i, op in enumerate(ops) if op.wraps})  # angles: a word is one turn
    for i, (op, kind) in enumerate(zip(ops, kinds, strict=True)):
        dictated = kind.forced_bits(op, w, state_formats)
        if dictated is not None:
            forced[i] = dictated
    bits: list[int] = []
    for index, (op, kind) in enumerate(zip(ops, kinds, strict=True)):
        if index in forced:
            bits.append(forced[index])
        else:
            natural = w - integer_bits_for(bounds[index])
            bits.append(kind.first_bits(op, [bits[i] for i in op.args], natural, w))
    readers: list[list[tuple[int, int]]] = [[] for _ in ops]
    for r, op in enumerate(ops):
        for position, a in enumerate(op.args):
            readers[a].append((r, position))
    while (_limit_alignment(ops, kinds, bits, forced, w) | _settle(ops, kinds, bits, w)
           | _same_over_copies(program, bits, forced) | _coarsen(ops, kinds, bits, forced, readers)):
        pass
    filled: list = []
    constants: list[ConstantReport] = []
    for index, (op, kind) in enumerate(zip(ops, kinds, strict=True)):
        f = bits[index]
        op = replace(kind.fill(op, f, [bits[i] for i in op.args], w), fraction_bits=f)
        if kind.constant_role:
            constants.append(ConstantReport(index, op.note, op.real, op.constant,
                                            QFormat(w, kind.constant_bits(op, f, w)),
                                            kind.constant_role, wraps=op.wraps))
        filled.append(op)
    return filled, constants


def _same_over_copies(program: IntegerProgram, bits: list[int], forced: dict[int, int]) -> bool:
    """One format for each position of a routine (``IntegerProgram.repeats`` and ``routines``):
    the fewest fraction bits any copy of any of its repeats needs there, so every copy holds the
    widest copy's bound (a coarser format is never an overflow, only a coarser step). A position
    with a format forced on one of its values is left alone (the C emitter then finds the copies
    differ and writes them out one by one). Returns True if anything changed."""
    copies: dict[int, list[tuple[int, ...]]] = {}
    for number, repeat in zip(program.routines, program.repeats, strict=True):
        copies.setdefault(number, []).extend(repeat)
    changed = False
    for same in copies.values():
        for place in zip(*same, strict=True):
            fewest = min(bits[i] for i in place)
            if any(i in forced and forced[i] != fewest for i in place):
                continue
            for i in place:
                if bits[i] != fewest:
                    bits[i] = fewest
                    changed = True
    return changed


def _coarsen(ops: tuple, kinds: list, bits: list[int], forced: dict[int, int],
             readers: list[list[tuple[int, int]]]) -> bool:
    """Fewer fraction bits for a value whose readers round its extra bits away on their own
    (each kind's ``bits_kept`` and ``coarsens``): a constant is then stored as finely as its
    readers use it, so each of its bits counts (and no shift undoes them), and a min, max or
    product is rounded once where its readers rounded it (a product's increment goes into its
    sum with no second rounding and no alignment shift). Returns True if anything changed."""
    changed = False
    for index, kind in enumerate(kinds):
        if kind.coarsens is None or index in forced or not readers[index]:
            continue
        kept = {kinds[r].bits_kept(ops[r], position, bits[r], [bits[a] for a in ops[r].args])
                for r, position in readers[index]}
        if None in kept or (kind.coarsens != "constant" and len(kept) != 1):
            continue
        if max(kept) < bits[index]:
            bits[index] = max(kept)
            changed = True
    return changed


def _settle(ops: tuple, kinds: list, bits: list[int], w: int) -> bool:
    """Each kind's settling rule (no result finer than its exact value: a product has at most
    the sum of its factors' fraction bits, a negation or absolute value its operand's). Returns
    True if anything changed."""
    changed = False
    for index, (op, kind) in enumerate(zip(ops, kinds, strict=True)):
        settled = kind.settle_bits(op, bits[index], [bits[i] for i in op.args], w)
        if settled != bits[index]:
            bits[index] = settled
            changed = True
    return changed


def _limit_alignment(ops: tuple, kinds: list, bits: list[int], forced: dict[int, int],
                     w: int) -> bool:
    """Keep every aligned operand within 2 * w - 3 bits of the wide type: no operand of a kind
    that aligns may be shifted left by more than w - 2. Where that would happen, the finer value
    (or result) is given fewer fraction bits, which never makes it overflow. Returns True if
    anything changed."""
    changed_any = False
    changed = True
    while changed:
        changed = False
        for index, (op, kind) in enumerate(zip(ops, kinds, strict=True)):
            if not kind.aligns:
                continue
            coarse = min(bits[i] for i in op.args)
            ceiling = coarse + w - 2 - kind.alignment_headroom(op)
            for i in op.args:
                if bits[i] > ceiling:
                    if ops[i].kind == "state" or i in forced:
                        raise InputError(f"operation {index} ({op.note}) adds values whose "
                                         "formats are too far apart for the word; rescale the model")
                    bits[i] = ceiling
                    changed = True
            if bits[index] > ceiling:
                if index in forced:
                    raise InputError(f"operation {index} ({op.note}) adds values whose formats are "
                                     "too far apart for the word; rescale the model")
                bits[index] = ceiling
                changed = True
        changed_any |= changed
    return changed_any


def _state_integer(value: float, fmt: QFormat, name: str) -> int:
    if abs(value) >= fmt.largest:
        raise InputError(f"the initial value {value} of '{name}' does not fit {fmt.name} "
                         f"(largest {fmt.largest:.6g}); start nearer the cycle")
    return quantise(value, fmt.fraction_bits)
