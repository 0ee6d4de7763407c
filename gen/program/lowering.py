"""Lowering: the model's equations and an integrator's tableau at a fixed step, as straight-line
operations with real constants (the structure of the integer program, before any format is chosen).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from fractions import Fraction

import numpy as np
import sympy

from orbitfix.gen.errors import UnsupportedError
from orbitfix.gen.model import angles
from orbitfix.gen.model.definition import Model, Parameter
from orbitfix.gen.program.integer_program import IntegerProgram, Op
from orbitfix.gen.program.operations import kind_of
from orbitfix.gen.timing.integrators import Integrator


def lower_step(model: Model, integrator: Integrator, step: float) -> IntegerProgram:
    """One integrator step of ``model`` with step size ``step`` (model time units)."""
    builder = _Builder(model)
    names = model.state_names
    start = [builder.add(Op("state", state=i, note=name)) for i, name in enumerate(names)]
    angle_states = model.angle_states
    builder.angles.update(start[i] for i in angle_states)
    runtime = model.runtime_parameters
    current, target = [], []
    for k, p in enumerate(runtime):
        current.append(builder.add(Op("state", state=len(names) + 2 * k, note=p.name)))
        target.append(builder.add(Op("state", state=len(names) + 2 * k + 1,
                                     note=f"{p.name} target")))
    builder.parameters = dict(zip((sympy.Symbol(p.name, real=True) for p in runtime), current,
                                  strict=True))
    if integrator.sweep:
        finish = list(start)
        for i, name in enumerate(names):
            slope = builder.slope(finish, stage=i + 1, only=i)[0]
            finish[i] = builder.combine(start[i], [(Fraction(step), slope,
                                                   f"h times the slope of {name}")],
                                        f"next {name}", angle=i in angle_states)
    else:
        copies = identical_copies(model)
        if copies is not None:  # each oscillator's states, loaded: the first repeat
            builder.repeats.append(tuple(tuple(start[i] for i in m) for m in copies.members))
            builder.routines.append(builder.routine(None))
        slopes: list[list[int]] = []

        def combined(weights: tuple[Fraction, ...], what: str) -> list[int]:
            def one(i: int) -> int:
                return builder.combine(start[i], _terms(step, weights, slopes, i, names[i]),
                                       what.format(name=names[i]), angle=i in angle_states)
            if copies is None:
                return [one(i) for i in range(len(names))]
            return builder.per_copy(len(copies.members),
                                    lambda c: [one(i) for i in copies.members[c]],
                                    routine="points" if what.startswith("stage") else None)

        for stage, row in enumerate(integrator.a, start=1):
            point = combined(row, f"stage {stage} point, {{name}}") if any(row) else start
            if copies is None:
                slopes.append(builder.slope(point, stage))
            else:
                slopes.append(builder.per_copy(len(copies.members), lambda c, p=point, s=stage:
                                               copies.slope(builder, p, s, c), routine="rates"))
        finish = combined(integrator.b, "next {name}")
    ramps = [builder.ramp(p, cur, tgt, model.rhythm.loop_hz)
             for p, cur, tgt in zip(runtime, current, target, strict=True)]
    extra_names = tuple(n for p in runtime for n in (p.name, f"{p.name}_target"))
    extra_next = tuple(v for ramp, tgt in zip(ramps, target, strict=True) for v in (ramp, tgt))
    return IntegerProgram(name=model.name, state_names=names + extra_names,
                          ops=tuple(builder.ops), next_state=tuple(finish) + extra_next,
                          model_states=len(names), angle_states=angle_states,
                          repeats=tuple(builder.repeats), routines=tuple(builder.routines))


@dataclass(frozen=True)
class NetworkCopies:
    """A network whose oscillators are identical copies, linearly coupled: each state's rate is
    the copy's own part (the first oscillator's, renamed) plus a sum of the other oscillators'
    states times numbers. The coupling is read off the network's flattened equations (which the
    network builder generated from its declarative description), never written here.

    members -- each oscillator's state indices (contiguous, in order); own -- each member's own
    rate, in the first oscillator's symbols; coupling -- positions (member, r, member of the
    oscillator r on, modulo the count), in order; weights -- per oscillator, each position's
    number (0 where that oscillator has no such link)."""

    members: tuple[tuple[int, ...], ...]
    symbols: tuple[sympy.Symbol, ...]
    own: tuple[sympy.Expr, ...]
    coupling: tuple[tuple[int, int, int], ...]
    weights: tuple[tuple[float, ...], ...]

    def slope(self, builder: _Builder, point: list[int], stage: int, copy: int) -> list[int]:
        """The rates of oscillator ``copy``'s states at the stage point: its own part, walked
        from the same expression for every copy, then each coupling term added in the positions'
        order, a term the other state times this oscillator's number (added one by one, as the
        straight-line lowering adds a sum's terms: quadruped_trot at 16 bits keeps its period
        error, -37 ppm; a separate coupling sum gave -77)."""
        count = len(self.members)
        mine = self.members[copy]
        table = {**builder.parameters, **dict(zip(self.symbols, (point[i] for i in mine),
                                                  strict=True))}
        memo: dict[sympy.Expr, int] = {}
        rates = []
        for m, expr in enumerate(self.own):
            name = builder.model.state_names[mine[m]]
            rate = builder.expression(expr, table, memo, stage, name)
            for place, (member, r, other) in enumerate(self.coupling):
                if member != m:
                    continue
                source = builder.model.state_names[self.members[(copy + r) % count][other]]
                term = builder.add(Op("scale", (point[self.members[(copy + r) % count][other]],),
                                      real=self.weights[copy][place],
                                      note=f"stage {stage}: coupling of {name} to {source}"),
                                   fresh=True)
                rate = builder.add(Op("add", (rate, term),
                                      note=f"stage {stage}: rate of {name}, plus its coupling to "
                                           f"{source}"))
            rates.append(rate)
        return rates


def identical_copies(model: Model) -> NetworkCopies | None:
    """The network's oscillators as identical, linearly coupled copies, or None where they are
    not (no network, angle states, an own part that differs, a coupling that is not a number
    times another oscillator's state, such as one ramped by a runtime parameter)."""
    layout = model.network
    if layout is None or model.angle_states:
        return None
    members = tuple(tuple(m) for m in layout.members)
    size, count = len(members[0]), len(members)
    if size * count != len(model.state_names) or any(
            m != tuple(range(size * c, size * (c + 1))) for c, m in enumerate(members)):
        return None
    symbols = model.state_symbols
    equations = model.fixed_equations
    first = tuple(symbols[i] for i in members[0])
    own: list[sympy.Expr] = []
    found: list[dict[tuple[int, int, int], float]] = []
    for c, mine in enumerate(members):
        others = {s: 0 for k, s in enumerate(symbols) if k not in mine}
        rename = dict(zip((symbols[i] for i in mine), first, strict=True))
        weights: dict[tuple[int, int, int], float] = {}
        for m, i in enumerate(mine):
            part = equations[i].subs(others)
            rest = sympy.expand(equations[i] - part)
            linear = sympy.Integer(0)
            for k, s in enumerate(symbols):
                if k in mine:
                    continue
                weight = sympy.diff(rest, s)
                if not weight.is_Number:
                    return None
                if weight != 0:
                    weights[(m, (k // size - c) % count, k % size)] = float(weight)
                    linear += weight * s
            if sympy.expand(rest - linear) != 0:
                return None
            renamed = part.xreplace(rename)
            if c == 0:
                own.append(renamed)
            elif sympy.expand(renamed - own[m]) != 0:
                return None
        found.append(weights)
    places = tuple(sorted({p for weights in found for p in weights}))
    return NetworkCopies(members=members, symbols=first, own=tuple(own), coupling=places,
                         weights=tuple(tuple(w.get(p, 0.0) for p in places) for w in found))


def _terms(step: float, weights: tuple[Fraction, ...], slopes: list[list[int]], state: int,
           name: str) -> list[tuple[Fraction, int, str]]:
    """The weighted slopes h * w_j * k_j of one state, labelled for the C comments."""
    return [(Fraction(step) * w, k[state], f"h*{w} times slope {j} of {name}")
            for j, (w, k) in enumerate(zip(weights, slopes, strict=False), start=1)]


TURN = Fraction(angles.TURN)  # radians in a turn (as the float nearest 2 pi)


def _factored(terms: list[tuple[Fraction, int, str]],
              ) -> tuple[Fraction, list[tuple[int, list[int]]], str, str] | None:
    """(unit, [(multiple, values)], the unit's name, the sum's name) when two or more weights
    are whole multiples of the smallest, all of one sign; None otherwise."""
    if len(terms) < 2:
        return None
    unit = min((w for w, _, _ in terms), key=abs)
    multiples = [w / unit for w, _, _ in terms]
    if any(m.denominator != 1 or m < 1 for m in multiples):
        return None
    groups: dict[int, list[int]] = {}
    parts = []
    coefficient = "the smallest weight"
    for m, (_, value, label) in zip(multiples, terms, strict=True):
        groups.setdefault(int(m), []).append(value)
        weight, _, what = label.rpartition(" times ")  # "h*1/6 times slope 1 of x"
        if m == 1 and weight:
            coefficient = weight
        parts.append(what if m == 1 else f"{int(m)} {what}")
    return unit, sorted(groups.items()), coefficient, "(" + " + ".join(parts) + ")"


class _Builder:
    """Appends operations, sharing identical ones, and walks sympy expressions."""

    def __init__(self, model: Model) -> None:
        self.model = model
        self.ops: list[Op] = []
        self.seen: dict[tuple, int] = {}
        self.symbols = model.state_symbols
        self.equations = model.fixed_equations
        self.parameters: dict[sympy.Symbol, int] = {}
        self.angles: set[int] = set()  # values that are angles held in turns
        self.repeats: list[tuple[tuple[int, ...], ...]] = []
        self.routines: list[int] = []
        self.routine_names: dict[str, int] = {}
        self.copy: tuple[int, int] | None = None  # (repeat, copy) while a copy is lowered

    def routine(self, name: str | None) -> int:
        """The number of the routine called ``name`` (a new one for None)."""
        if name is None:
            return len(set(self.routines) | set(self.routine_names.values()))
        return self.routine_names.setdefault(name, len(set(self.routines)
                                                       | set(self.routine_names.values())))

    def per_copy(self, count: int, work, routine: str | None = None) -> list[int]:
        """The values of ``work(c)`` (a list per copy c) for c in 0 .. count - 1, lowered copy
        after copy, each copy's operations together and recorded as one repeat (see
        ``integer_program``). Constants a copy needs are made first, shared by every copy; a
        repeat whose copies came out of different lengths is not recorded (the operations stay,
        straight-line)."""
        mark, seen, angles = len(self.ops), dict(self.seen), set(self.angles)
        self.copy = (len(self.repeats), 0)
        work(0)  # a trial, for the constants alone
        constants = [op for op in self.ops[mark:] if not op.args and op.kind == "const"]
        del self.ops[mark:]
        self.seen, self.angles = seen, angles
        self.copy = None
        for op in constants:
            self.add(op)
        values: list[int] = []
        copies = []
        for c in range(count):
            first = len(self.ops)
            self.copy = (len(self.repeats), c)
            values += work(c)
            copies.append(tuple(range(first, len(self.ops))))
        self.copy = None
        if len({len(copy) for copy in copies}) == 1 and copies[0]:
            number = self.routine(routine)
            if any(n == number and len(r[0]) != len(copies[0])
                   for n, r in zip(self.routines, self.repeats, strict=True)):
                number = self.routine(None)
            self.repeats.append(tuple(copies))
            self.routines.append(number)
        return values

    def add(self, op: Op, fresh: bool = False) -> int:
        """The index of ``op``: a new operation, or an identical one already made (not when
        ``fresh``: a copy's coupling term stays its own, so every copy has the same length)."""
        if fresh:
            self.ops.append(op)
            return len(self.ops) - 1
        key = (op.kind, op.args, op.state, op.real, op.wraps, op.weights, op.limit)
        if self.copy is not None and op.args:  # a copy's work is its own, never another copy's
            key = (*key, self.copy)
        if key in self.seen:
            return self.seen[key]
        self.ops.append(op)
        self.seen[key] = len(self.ops) - 1
        return len(self.ops) - 1

    def constant(self, value: Fraction, note: str, limit: str = "") -> int:
        """A stored constant; a ``limit`` ("low" or "high") is rounded inward when planned, so
        the firmware never lets a value past the declared limit or move faster than a declared
        rate."""
        return self.add(Op("const", real=float(value), note=note, limit=limit))

    def scaled(self, value: int, factor: Fraction, note: str) -> int:
        if factor == 1:
            return value
        if factor == -1:
            return self.add(Op("neg", (value,), note=note))
        return self.add(Op("scale", (value,), real=float(factor), note=note))

    def angle_op(self, op: Op) -> int:
        """An operation whose result is an angle in turns (it wraps at a full turn)."""
        index = self.add(replace(op, wraps=True))
        self.angles.add(index)
        return index

    def combine(self, base: int, terms: list[tuple[Fraction, int, str]], note: str,
                angle: bool = False) -> int:
        """base + sum(weight * value), skipping zero weights. For an angle state the weighted
        rates (radians) are turned into turns and the sums wrap at a full turn.

        When every weight is a whole multiple of the smallest, with one sign (RK4's h/6 times
        1, 2, 2, 1), the values are summed first, with whole multiples, and the sum is scaled
        once, the sum and the product exact in the product width and rounded once
        (``scaled_sum``): base + unit * (k1 + 2 k2 + 2 k3 + k4). One product and one rounding
        into the state instead of one per term, so no increment under half an LSB is lost on its
        own."""
        live = [(w, v, label) for w, v, label in terms if w != 0]
        for _, value, _ in live:
            if value in self.angles:
                raise UnsupportedError(f"model '{self.model.name}': {note} adds an angle as a "
                                       "rate; only sin and cos of an angle can enter a rate")
        factored = _factored(live)
        if factored is not None:
            unit, groups, coefficient, label = factored
            values = [value for _, group in groups for value in group]
            weights = [multiple for multiple, group in groups for _ in group]
            factor = abs(unit) / TURN if angle else abs(unit)
            term = self.add(Op("scaled_sum", tuple(values), weights=tuple(weights),
                               real=float(factor), note=f"{coefficient} times {label}"
                               + (", in turns" if angle else "")))
            kind = "sub" if unit < 0 else "add"
            return (self.angle_op(Op(kind, (base, term), note=note)) if angle else
                    self.add(Op(kind, (base, term), note=note)))
        total = base
        for weight, value, label in live:
            kind = "sub" if weight < 0 else "add"
            if angle:
                term = self.scaled(value, abs(weight) / TURN, f"{label}, in turns")
                total = self.angle_op(Op(kind, (total, term), note=note))
            else:
                total = self.add(Op(kind, (total, self.scaled(value, abs(weight), label)),
                                    note=note))
        return total

    def turns(self, value: int, note: str) -> int:
        """An angle in turns from a plain value in radians."""
        if value in self.angles:
            return value
        return self.angle_op(Op("scale", (value,), real=float(1 / TURN), note=f"{note}, in turns"))

    def ramp(self, parameter: Parameter, current: int, target: int, loop_hz: float) -> int:
        """The parameter's value after one step: toward its target (held in [low, high]) by at
        most rate / loop_hz, or all the way when it has no rate."""
        name = parameter.name
        held = self.add(Op("max", (target, self.constant(Fraction(parameter.low), f"{name} low",
                                                          "low")),
                           note=f"{name} target, at least its low limit"))
        held = self.add(Op("min", (held, self.constant(Fraction(parameter.high), f"{name} high",
                                                       "high")),
                           note=f"{name} target, held in its range"))
        if parameter.rate is None:
            return held
        step = Fraction(parameter.rate) / Fraction(loop_hz)
        change = self.add(Op("sub", (held, current), note=f"{name}: distance to its target"))
        change = self.add(Op("max", (change, self.constant(-step, f"{name} largest fall per step",
                                                           "low")),
                             note=f"{name}: change, limited"))
        change = self.add(Op("min", (change, self.constant(step, f"{name} largest rise per step",
                                                           "high")),
                             note=f"{name}: change, limited"))
        return self.add(Op("add", (current, change), note=f"next {name}"))

    def slope(self, point: list[int], stage: int, only: int | None = None) -> list[int]:
        """Values of f at the stage point, one per state (or of state ``only`` alone)."""
        table = {**self.parameters, **dict(zip(self.symbols, point, strict=True))}
        memo: dict[sympy.Expr, int] = {}
        chosen = range(len(self.equations)) if only is None else [only]
        return [self.expression(self.equations[i], table, memo, stage, self.model.state_names[i])
                for i in chosen]

    def expression(self, expr: sympy.Expr, table: dict, memo: dict, stage: int, name: str) -> int:
        if expr in memo:
            return memo[expr]
        result = self._expression(expr, table, memo, stage, name)
        memo[expr] = result
        return result

    def _expression(self, expr: sympy.Expr, table: dict, memo: dict, stage: int, name: str) -> int:
        note = f"stage {stage}: {sympy.sstr(expr)}"
        walk = lambda e: self.expression(e, table, memo, stage, name)  # noqa: E731
        if expr in table:
            return table[expr]
        if expr.is_Number:
            return self.constant(_exact(expr), note)
        if isinstance(expr, sympy.sin | sympy.cos):
            kind = "sin" if isinstance(expr, sympy.sin) else "cos"
            return self.add(Op(kind, (self.turns(walk(expr.args[0]), note),), note=note))
        if expr.is_Add and any(self._is_angle(t, table) for t in expr.args):
            return self._angle_sum(expr, table, walk, note, name)
        if expr.is_Add:
            terms = sorted(expr.args, key=_has_negative_sign)
            first = terms[0]
            if _has_negative_sign(first):
                total = self.add(Op("neg", (walk(-first),), note=note))
            else:
                total = walk(first)
            for term in terms[1:]:
                if _has_negative_sign(term):
                    total = self.add(Op("sub", (total, walk(-term)), note=note))
                else:
                    total = self.add(Op("add", (total, walk(term)), note=note))
            return total
        if expr.is_Mul and any(self._is_angle(f, table) for f in expr.args):
            coefficient, factors = expr.as_coeff_mul()
            if coefficient == -1 and len(factors) == 1:
                return self.angle_op(Op("neg", (walk(factors[0]),), note=note))
            raise self._angle_misuse(expr, name)
        if expr.is_Mul:
            coefficient, factors = expr.as_coeff_mul()
            product = None
            for factor in factors:
                value = walk(factor)
                product = value if product is None else self.add(Op("mul", (product, value),
                                                                    note=note))
            if product is None:
                return self.constant(_exact(coefficient), note)
            return self.scaled(product, _exact(coefficient), note)
        if expr.is_Pow:
            base, exponent = expr.args
            if not (exponent.is_Integer and int(exponent) >= 1):
                raise UnsupportedError(
                    f"model '{self.model.name}', equation for '{name}': '{sympy.sstr(expr)}' "
                    "divides by a signal, which fixed point cannot do safely; rewrite the model "
                    "so that only constants divide")
            value = walk(base)
            result = value
            for _ in range(int(exponent) - 1):
                result = self.add(Op("mul", (result, value), note=note))
            return result
        if isinstance(expr, sympy.Min | sympy.Max):
            kind = "min" if isinstance(expr, sympy.Min) else "max"
            values = [walk(arg) for arg in expr.args]
            result = values[0]
            for value in values[1:]:
                result = self.add(Op(kind, (result, value), note=note))
            return result
        if isinstance(expr, sympy.Abs):
            return self.add(Op("abs", (walk(expr.args[0]),), note=note))
        raise UnsupportedError(f"model '{self.model.name}', equation for '{name}': "
                               f"'{sympy.sstr(expr)}' has no fixed-point form yet")

    def _is_angle(self, expr: sympy.Expr, table: dict) -> bool:
        """Whether a subexpression stands for an angle: an angle state, or a sum of angles."""
        if expr in table:
            return table[expr] in self.angles
        if expr.is_Mul:
            return any(self._is_angle(f, table) for f in expr.as_coeff_mul()[1])
        if expr.is_Add:
            return any(self._is_angle(t, table) for t in expr.args)
        return False

    def _angle_misuse(self, expr: sympy.Expr, name: str) -> UnsupportedError:
        return UnsupportedError(
            f"model '{self.model.name}', equation for '{name}': '{sympy.sstr(expr)}' uses an "
            "angle in a way that has no fixed-point form: an angle may only be added to or "
            "subtracted from angles and constants, negated, or passed to sin and cos")

    def _angle_sum(self, expr: sympy.Expr, table: dict, walk, note: str, name: str) -> int:
        """A sum of angles and constant offsets (in radians), as a wrapping sum in turns."""
        total = None
        for term in sorted(expr.args, key=_has_negative_sign):
            negative = _has_negative_sign(term)
            magnitude = -term if negative else term
            if magnitude.is_Number:
                value = self.angle_op(Op("const", real=float(_exact(magnitude) / TURN),
                                         note=f"{sympy.sstr(magnitude)} rad, in turns"))
            elif self._is_angle(magnitude, table):
                value = walk(magnitude)
            else:
                raise self._angle_misuse(expr, name)
            if total is None:
                total = self.angle_op(Op("neg", (value,), note=note)) if negative else value
            else:
                total = self.angle_op(Op("sub" if negative else "add", (total, value), note=note))
        return total


def _has_negative_sign(term: sympy.Expr) -> bool:
    return term.could_extract_minus_sign()


def _exact(number: sympy.Expr) -> Fraction:
    """The exact rational value of a sympy number (a float's exact binary value)."""
    if number.is_Rational:
        return Fraction(int(number.p), int(number.q))
    return Fraction(float(number))


def evaluate_real(program: IntegerProgram, states: np.ndarray,
                  added: dict[int, np.ndarray] | None = None) -> list[np.ndarray]:
    """Every value of the program in float64 with its real constants and no rounding: the
    integrator's step map at layer L1. ``states`` : ndarray, shape (n_states, batch).
    ``added`` : per value index, an amount added to that value where it is made (shape (batch,)),
    to see how an error made there moves what follows."""
    values: list[np.ndarray] = []
    for index, op in enumerate(program.ops):
        value = kind_of(op.kind).real(op, [values[i] for i in op.args], states)
        if added is not None and index in added:
            value = value + added[index]
        values.append(angles.wrap_turns(value) if op.wraps else value)
    return values


def lower_outputs(model: Model, program: IntegerProgram,
                  loop_hz: float) -> tuple[IntegerProgram, list[tuple[int, int]]]:
    """The outputs of ``model`` as their own straight-line program (see ``integer_program``): it
    loads the states of ``program`` (read as the NEW state) and one memory per output, and its
    ``next_state`` is the states unchanged, each output's new value y_k, then each output's
    clamp(u, min, max) (that last part only for the planner, which gives it the output's format;
    ``gen/program/outputs.py`` drops it). Returns the section and, per output, the indices of
    (clamp(u, min, max), y_k)."""
    builder = _Builder(model)
    names = program.state_names
    loads = [builder.add(Op("state", state=i, note=f"{name}, after the step"))
             for i, name in enumerate(names)]
    builder.angles.update(loads[i] for i in program.angle_states)
    runtime = model.runtime_parameters
    n = program.model_state_count
    builder.parameters = {sympy.Symbol(p.name, real=True): loads[n + 2 * k]
                          for k, p in enumerate(runtime)}
    memories = [builder.add(Op("state", state=len(names) + j, note=f"{o.name}, its last value"))
                for j, o in enumerate(model.outputs)]
    table = {**builder.parameters, **dict(zip(builder.symbols, loads[:n], strict=True))}
    found = []
    for output, memory in zip(model.outputs, memories, strict=True):
        name = output.name
        first = len(builder.ops)
        value = builder.expression(model.output_expression(output), table, {}, 0, name)
        for index in range(first, len(builder.ops)):
            op = builder.ops[index]
            builder.ops[index] = replace(op, note=op.note.replace("stage 0:", f"output {name}:", 1))
        if value in builder.angles:
            raise UnsupportedError(f"model '{model.name}', [outputs] '{name}': the value is an "
                                   "angle itself, which wraps at a full turn; give the actuator "
                                   "sin or cos of it, or another state")
        unit = f" {output.unit}" if output.unit else ""
        scaled = builder.scaled(value, Fraction(output.scale), f"{name}: scale * value, in{unit}")
        if output.offset:
            offset = builder.constant(Fraction(output.offset), f"{name}: offset")
            scaled = builder.add(Op("add", (scaled, offset),
                                    note=f"{name}: u = offset + scale * value, in{unit}"))
        low = builder.constant(Fraction(output.low), f"{name}: min", "low")
        high = builder.constant(Fraction(output.high), f"{name}: max", "high")

        def clamp(x: int, what: str, limits: tuple[int, int] = (low, high), name: str = name) -> int:
            held = builder.add(Op("max", (x, limits[0]), note=f"{name}: {what}, at least min"))
            return builder.add(Op("min", (held, limits[1]), note=f"{name}: {what}, at most max"))

        limited = clamp(scaled, "u")
        if output.slew is None:
            found.append((limited, limited))
            continue
        step = Fraction(output.slew) / Fraction(loop_hz)
        last = clamp(memory, "last value")
        change = builder.add(Op("sub", (scaled, last), note=f"{name}: u less its last value"))
        change = builder.add(Op("max", (change, builder.constant(-step, f"{name}: largest fall per "
                                                                         "step", "low")),
                                note=f"{name}: change, at least the largest fall"))
        change = builder.add(Op("min", (change, builder.constant(step, f"{name}: largest rise per "
                                                                        "step", "high")),
                                note=f"{name}: change, at most the largest rise"))
        moved = builder.add(Op("add", (last, change), note=f"{name}: last value plus the change"))
        found.append((limited, clamp(moved, "new value")))
    next_state = (*loads, *(y for _, y in found), *(c for c, _ in found))
    section = IntegerProgram(name=f"{model.name} outputs",
                             state_names=names + tuple(o.name for o in model.outputs),
                             ops=tuple(builder.ops), next_state=next_state,
                             model_states=program.model_state_count,
                             angle_states=program.angle_states)
    return section, found
