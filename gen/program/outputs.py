"""Planning the outputs to actuators: each output's format (covering [min, max] in the actuator's
unit), the formats of its intermediate values, the proof that none of its arithmetic can leave
the word from any state the step can reach, and the memory the init function sets. The semantics
are the integer program's (``gen/program/integer_program.py``); the lowering is
``lowering.lower_outputs``.

The step's own operations, formats and proofs are not touched: the outputs read the next state
and never feed it, so the oscillator is the same bit for bit with or without them.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from orbitfix.gen.errors import InputError
from orbitfix.gen.model.definition import Model
from orbitfix.gen.program import golden
from orbitfix.gen.program.fixed_point import FixedPointPlan, _fill, integer_bits_for
from orbitfix.gen.program.integer_program import IntegerProgram, OutputSlot
from orbitfix.gen.program.lowering import lower_outputs
from orbitfix.gen.program.operations import kind_of
from orbitfix.gen.program.proven_fit import held_ranges, value_bounds
from orbitfix.gen.program.ranges import interval_ranges


def plan_outputs(model: Model, plan: FixedPointPlan, loop_hz: float) -> FixedPointPlan:
    """``plan`` with the model's outputs planned into its program (unchanged without outputs).
    loop_hz : the control-loop rate, Hz: a slew limit moves an output by slew / loop_hz per step.
    Refuses (InputError) an output whose arithmetic is not proven to fit the word, whose format
    cannot hold its limits, or whose slew step or range is below its format's resolution."""
    if not model.outputs:
        return plan
    program = plan.program
    w, margin = program.word_bits, plan.margin
    section, found = lower_outputs(model, program, loop_hz)
    n, m = len(program.state_names), len(model.outputs)
    reached = next_state_ranges(program)
    low = [-0.5 if i in program.angle_states else lo / 2.0 ** f
           for i, ((lo, _), f) in enumerate(zip(reached, program.state_fraction_bits, strict=True))]
    high = [0.5 if i in program.angle_states else hi / 2.0 ** f
            for i, ((_, hi), f) in enumerate(zip(reached, program.state_fraction_bits, strict=True))]
    low += [o.low for o in model.outputs]
    high += [o.high for o in model.outputs]
    formats = []
    for output in model.outputs:
        bits = w - integer_bits_for(max(abs(output.low), abs(output.high)) * margin)
        if bits < 0:
            raise InputError(f"model '{model.name}', [outputs] '{output.name}': its limits "
                             f"[{output.low:g}, {output.high:g}] with a margin of {margin:g} do not "
                             f"fit a {w}-bit word; give the limits in a smaller unit")
        formats.append(bits)
    sure = interval_ranges(section, np.array(low), np.array(high))
    peaks = [max(abs(a), abs(b)) * margin for a, b in sure]
    if not all(np.isfinite(peaks)):
        raise InputError(f"model '{model.name}': an output's value is not finite over the states "
                         "the step can reach; check its expression")
    state_formats = [*program.state_fraction_bits, *formats, *formats]
    ops, constants = _fill(section, state_formats, peaks, w)
    planned = replace(section, ops=tuple(ops), word_bits=w, product_bits=2 * w,
                      rounding=program.rounding, overflow=program.overflow,
                      state_fraction_bits=tuple(state_formats[:n + m]),
                      next_state=section.next_state[:n + m])
    checked, proven = value_bounds(replace(planned, overflow="saturate"),
                                   _section_ranges(program, reached, m))
    for index, op in enumerate(planned.ops):
        kind = kind_of(op.kind)
        if kind.fit_wraps(op) is None or op.wraps or not kind.provable or index in proven:
            continue
        owner = next((o.name for o in model.outputs if op.note.startswith(f"output {o.name}:")
                      or op.note.startswith(f"{o.name}:")), "an output")
        raise InputError(f"model '{model.name}', [outputs] '{owner}': '{op.note}' (Q"
                         f"{w - op.fraction_bits}.{op.fraction_bits}) can leave the {w}-bit word for "
                         "some state the step can reach, by interval arithmetic on the stored "
                         "integers; narrow the output's scale or offset or its value")
    planned = replace(planned, ops=tuple(replace(op, proven=i in proven)
                                         for i, op in enumerate(planned.ops)))
    slots = []
    for output, bits, (limited, value) in zip(model.outputs, formats, found, strict=True):
        y_low, y_high = checked[value]
        if y_low >= y_high:
            raise InputError(f"model '{model.name}', [outputs] '{output.name}': min and max are "
                             f"the same in its format Q{w - bits}.{bits}; give them further apart")
        step = None if output.slew is None else output.slew / loop_hz
        if step is not None and step < 2.0 ** -bits:
            raise InputError(f"model '{model.name}', [outputs] '{output.name}': a slew of "
                             f"{output.slew:g} per second at {loop_hz:g} Hz is {step:.3g} per step, "
                             f"below one step of its format Q{w - bits}.{bits} "
                             f"({2.0 ** -bits:.3g}); give a larger slew limit")
        slots.append(OutputSlot(name=output.name, unit=output.unit, fraction_bits=bits,
                                limited=limited, value=value, low=y_low, high=y_high,
                                slew_step=step))
    program = replace(program, outputs=tuple(slots), output_program=planned)
    initial = golden.initial_outputs(program, np.asarray(plan.initial_state, dtype=np.int64))
    return replace(plan, program=program, initial_outputs=tuple(int(v) for v in initial),
                   output_constants=tuple(constants))


def next_state_ranges(program: IntegerProgram) -> list[tuple[int, int]]:
    """The sure integer range of each state after one step from the held ranges: what the
    outputs may read."""
    bounds, _ = value_bounds(program, held_ranges(program))
    return [bounds[i] for i in program.next_state]


def _section_ranges(program: IntegerProgram, reached: list[tuple[int, int]],
                    outputs: int) -> list[tuple[int, int]]:
    return [*reached, *([(program.word_min, program.word_max)] * outputs)]


def output_bounds(program: IntegerProgram) -> list[tuple[int, int]]:
    """Sure integer bounds of every value of ``program.output_program`` (each output's memory
    anywhere in the word), which the C's sums in the word read."""
    section = program.output_program
    ranges = _section_ranges(program, next_state_ranges(program), len(program.outputs))
    return value_bounds(section, ranges)[0]
