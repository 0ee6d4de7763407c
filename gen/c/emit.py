"""The C back end: renders a planned integer program through the jinja2 templates in
``templates/``. It decides names and layout, never arithmetic: every value comes from the program,
and every operation's C form from its kind (``gen/program/operations.py``).

Two pairs of files: the firmware ``NAME.h``/``NAME.c`` (init, step and setters, nothing else) and
the verification-only ``NAME_trace.h``/``NAME_trace.c`` (the same step, also writing every
intermediate value), which host builds add and firmware never ships.
"""

from __future__ import annotations

import importlib
import re
from dataclasses import dataclass, replace
from pathlib import Path

import jinja2

from orbitfix.gen import __version__
from orbitfix.gen.c.loops import LoopedStep, looped_step
from orbitfix.gen.c.naming import CNames, comment_text
from orbitfix.gen.model.definition import Model
from orbitfix.gen.program.fixed_point import FixedPointPlan
from orbitfix.gen.program.integer_program import SATURATION_COUNT_BITS, IntegerProgram, Op
from orbitfix.gen.program.operations import KINDS, CSite, int_literal, kind_of
from orbitfix.gen.program.outputs import output_bounds
from orbitfix.gen.program.proven_fit import held_ranges, value_bounds
from orbitfix.gen.safety import SAFETY_NOTE
from orbitfix.gen.timing.integrators import Integrator
from orbitfix.gen.timing.step_size import Timing


def templates_folder() -> Path:
    """The installed templates (package data of ``orbitfix.templates``, the top-level ``templates/``)."""
    package = importlib.import_module("orbitfix.templates")
    return Path(next(iter(package.__path__)))


# The harness's functions, declared once: in the harness C and in the verifier's cffi definitions.
HARNESS_DECLARATIONS = """\
void orbitfix_harness_init(int32_t *out);
uint32_t orbitfix_harness_init_saturated(void);
void orbitfix_harness_step_each(const int32_t *in, int32_t *out, size_t count);
void orbitfix_harness_step_each_counted(const int32_t *in, const uint32_t *saturated_in,
                                        int32_t *out, uint32_t *saturated_out, size_t count);
void orbitfix_harness_run(int32_t *state_io, size_t steps, int32_t *record);
void orbitfix_harness_run_counted(int32_t *state_io, uint32_t *saturated_io, size_t steps,
                                  int32_t *record, uint32_t *saturated_record);
void orbitfix_harness_trace(const int32_t *in, int32_t *out, int32_t *trace);
void orbitfix_harness_trace_each(const int32_t *in, int32_t *out, int32_t *trace, size_t count);
void orbitfix_harness_trace_each_counted(const int32_t *in, int32_t *out, int32_t *trace,
                                         uint32_t *saturated, size_t count);
void orbitfix_harness_set(const int32_t *in, int32_t *out, size_t which, int32_t target);
void orbitfix_harness_outputs_init(int32_t *memory);
void orbitfix_harness_step_outputs(const int32_t *in, const int32_t *memory_in, int32_t *out,
                                   int32_t *memory_out, size_t count);
void orbitfix_harness_run_outputs(int32_t *state_io, int32_t *memory_io, size_t steps,
                                  int32_t *record, int32_t *memory_record);
size_t orbitfix_harness_output_count(void);
size_t orbitfix_harness_setter_count(void);
size_t orbitfix_harness_state_count(void);
size_t orbitfix_harness_trace_length(void);
"""


@dataclass(frozen=True)
class CConstant:
    name: str
    literal: str
    comment: str
    stored: int = 0
    fraction_bits: int = 0


@dataclass(frozen=True)
class ShippedConstant:
    """One stored number of NAME.c as written there (a constant ``kN`` or one entry of a
    per-oscillator table, ``kcN[i]``) and the values whose constant it is: a one-LSB edit of it
    in the C changes all of them at once."""

    name: str
    stored: int
    fraction_bits: int
    step_values: tuple[int, ...]
    output_values: tuple[int, ...] = ()


def _shipped_constants(constants: list[CConstant], step_symbols: dict[int, str],
                       output_symbols: dict[int, str], looped: LoopedStep | None
                       ) -> list[ShippedConstant]:
    shipped = []
    from_tables: set[int] = set()
    for table in looped.tables if looped is not None else []:
        for c, uses in enumerate(table["uses"]):
            shipped.append(ShippedConstant(f"{table['name']}[{c}]", table["stored"][c],
                                           table["fraction_bits"], tuple(uses)))
            from_tables.update(uses)
    for constant in constants:
        steps = tuple(i for i, n in step_symbols.items() if n == constant.name
                      and i not in from_tables)
        outputs = tuple(i for i, n in output_symbols.items() if n == constant.name)
        if steps or outputs:
            shipped.append(ShippedConstant(constant.name, constant.stored,
                                           constant.fraction_bits, steps, outputs))
    return shipped


def environment() -> jinja2.Environment:
    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(templates_folder())),
        undefined=jinja2.StrictUndefined,
        keep_trailing_newline=True,
        trim_blocks=True,
        lstrip_blocks=True,
        autoescape=False,
    )
    env.filters["split_lines"] = str.splitlines
    return env


def render_model(model: Model, timing: Timing, integrator: Integrator,
                 plan: FixedPointPlan, dead_zones: tuple = ()) -> dict[str, str]:
    """The firmware files ``NAME.h`` and ``NAME.c`` for one planned model. ``dead_zones``
    (``gen/study/dead_zones.DeadZone``) are described in the header, with how to stay out."""
    names = CNames(model.name)
    context = _context(model, timing, integrator, plan, traced=False)
    context["dead_zones"] = [_dead_zone_text(zone) for zone in dead_zones]
    env = environment()
    return {
        names.header: env.get_template("model.h.j2").render(context),
        names.source: env.get_template("model.c.j2").render(context),
    }


def render_units(model: Model, timing: Timing, integrator: Integrator,
                 plan: FixedPointPlan) -> dict[str, str]:
    """``NAME_units.h``: macros between real values and each state's and runtime parameter's
    stored integers. They expand to floating point, so they live apart from ``NAME.h``: include
    them where constants are written (they fold at compile time) or where floating point is at
    hand, never in the step."""
    names = CNames(model.name)
    context = firmware_context(model, timing, integrator, plan)
    return {names.units_header: environment().get_template("units.h.j2").render(context)}


def firmware_context(model: Model, timing: Timing, integrator: Integrator,
                     plan: FixedPointPlan) -> dict:
    """The templates' context for the firmware's files (names, banner, states, formats), for the
    back-end rooms that render files beside NAME.h and NAME.c."""
    return _context(model, timing, integrator, plan, traced=False)


def _dead_zone_text(zone) -> dict:
    return {"where": ", ".join(f"{n} = {v:.6g}" for n, v in zip(zone.state_names, zone.equilibrium,
                                                                 strict=True)),
            "states": zone.states, "method": zone.method,
            "rest": ", ".join(f"{n} = {v}" for n, v in zip(zone.state_names, zone.rest_state,
                                                           strict=True)),
            "radius": [f"{n} within +/- {lsb} (+/- {r:.4g})" for n, r, lsb in
                       zip(zone.state_names, zone.radius, zone.radius_lsb, strict=True)]}


def render_trace(model: Model, timing: Timing, integrator: Integrator,
                 plan: FixedPointPlan) -> dict[str, str]:
    """The verification-only files ``NAME_trace.h`` and ``NAME_trace.c``: the traced step, which
    writes every value of the integer program into an array. Host builds add them beside the
    firmware; the firmware never includes them."""
    names = CNames(model.name)
    context = _context(model, timing, integrator, plan, traced=True)
    env = environment()
    return {
        names.trace_header: env.get_template("trace.h.j2").render(context),
        names.trace_source: env.get_template("trace.c.j2").render(context),
    }


def _context(model: Model, timing: Timing, integrator: Integrator, plan: FixedPointPlan,
             traced: bool) -> dict:
    """The templates' context. The traced step computes every value of the program; the firmware
    step only those the next state depends on (and so only their constants and helpers)."""
    names = CNames(model.name)
    program = plan.program
    kept = set(range(len(program.ops))) if traced else set(program.kept_values)
    constants, constant_of = _constants(plan.constants, kept, program.word_bits)
    tables, table_of = _tables(program, kept)
    word_type, wide_type = f"int{program.word_bits}_t", f"int{program.product_bits}_t"
    ops = [op for i, op in enumerate(program.ops) if i in kept]
    bounds = value_bounds(program, held_ranges(program))[0]
    section = program.output_program
    output_kept = _output_values(program)
    output_symbols = {}
    if section is not None:
        output_symbols = _constants(plan.output_constants, output_kept, program.word_bits,
                                    constants)[1]
        output_symbols.update(_tables(section, output_kept, tables)[1])
    output_ops = [section.ops[i] for i in sorted(output_kept)] if section is not None else []
    section_bounds = output_bounds(program) if section is not None else []
    all_ops = ops + output_ops
    holds = _holds(program, kept, names)
    looped = None if traced else _looped(program, kept, names, {**constant_of, **table_of},
                                         plan.constants, bounds)
    output_values = [] if section is None else [
        _value_line(i, section.ops[i], names, section, output_symbols,
                    section_bounds, prefix="o", counted=frozenset(),
                    spare="outputs_clamped")
        for i in sorted(output_kept)]
    if looped is not None:  # a constant each oscillator has its own of is read from its table
        text = "\n".join([*looped.lines, *(line for r in looped.routines for line in r["lines"]),
                          *(v["expression"] for v in output_values)])
        constants = [c for c in constants if re.search(rf"\b{c.name}\b", text)]
    return {
        "names": names,
        "version": __version__,
        "model": model,
        "description": comment_text(model.description or model.name),
        "model_fingerprint": model.fingerprint(),
        "program_fingerprint": program.fingerprint(),
        "timing": timing,
        "integrator": integrator,
        "plan": plan,
        "program": program,
        "helpers": _helpers(program, ops, names.prefix, word_type, wide_type, output_ops),
        "uses_wrap": any(op.wraps or op.proven for op in all_ops),
        # a result brought into the word by the program's overflow rule, not by wrapping
        "uses_fit": any(kind_of(op.kind).fit_wraps(op) is False for op in all_ops),
        "uses_held": any(op.held for op in ops),
        "holds": holds,
        # the step's check before the rare path: a magnitude bound, or the range itself
        "uses_beyond": any(h["bound"] is not None for h in holds),
        "uses_outside": any(h["bound"] is None for h in holds),
        "held_ranges": [{"field": names.field(program.state_names[op.state]), "low": op.held[0],
                         "high": op.held[1],
                         "low_real": op.held[0] / 2.0 ** program.state_fraction_bits[op.state],
                         "high_real": op.held[1] / 2.0 ** program.state_fraction_bits[op.state]}
                        for op in program.ops if op.kind == "state" and op.held],
        "tables": tables,
        "word_type": word_type,
        "wide_type": wide_type,
        "word_bits": program.word_bits,
        "states": _state_fields(model, plan, names),
        "counts_saturation": program.counts_saturation,
        # the holds are the step's only counted clamps: the rare path counts the saturated step
        # itself, and the step keeps no flag
        "hold_counts": hold_counts(program),
        # the traced step also computes values the next state does not use: their clamps go
        # to a flag of their own, never counted
        "unkept_clamps": any(i in kept and i not in program.kept_values and program.clamps(op)
                             for i, op in enumerate(program.ops)),
        "saturation_field": names.saturation_field,
        "saturation_type": f"uint{SATURATION_COUNT_BITS}_t",
        "saturation_max": f"UINT{SATURATION_COUNT_BITS}_MAX",
        "setters": [
            {"name": names.setter(p.name), "target": names.field(f"{p.name}_target"),
             "parameter": names.field(p.name), "low": p.low, "high": p.high, "rate": p.rate,
             "format": f"Q{program.word_bits - f}.{f}", "fraction_bits": f,
             "fraction_macro": names.macro(f"{p.name}_fraction_bits"),
             "meaning": comment_text(p.meaning or p.name)}
            for p, f in zip(model.runtime_parameters,
                            program.state_fraction_bits[program.model_state_count::2], strict=True)
        ],
        "constants": constants,
        # every stored number the step and the outputs read, with the values it feeds (the
        # self-test's probes change each by one LSB, gen/c/selftest.py)
        "shipped_constants": _shipped_constants(constants, constant_of, output_symbols, looped),
        "values": [_value_line(i, op, names, program, {**constant_of, **table_of}, bounds)
                   for i, op in enumerate(program.ops) if i in kept],
        "value_count": len(program.ops),
        "next_state": [{"field": names.field(n),
                        "value": looped.value_name(i) if looped is not None else f"v{i}"}
                       for n, i in zip(program.state_names, program.next_state, strict=True)],
        # the firmware step with a network's repeated work as loops (gen/c/loops.py), or None
        "step_lines": looped.lines if looped is not None else None,
        "constant_tables": looped.tables if looped is not None else [],
        "step_routines": looped.routines if looped is not None else [],
        "outputs": _output_fields(model, plan, names),
        "output_values": output_values,
        # an output's table lookup clamps inside its helper (never acting: a table's entries are
        # words); the flag it sets is not counted
        "outputs_clamp_flag": section is not None and any(section.clamps(section.ops[i])
                                                           for i in output_kept),
        "safety": SAFETY_NOTE,
        "rounding_words": ROUNDING_WORDS[program.rounding],
        "overflow_words": OVERFLOW_WORDS[program.overflow].format(bits=program.word_bits),
        "comment": comment_text,
    }


def _holds(program: IntegerProgram, kept: set[int], names: CNames) -> list[dict]:
    """The held states (``Op.held``), each with its range as C literals: the step checks them all
    at once and holds them, in place, before it reads any state; the values then read each state
    as it is (``State.c_call``). Every state is read by the step (its next value starts from it),
    so each hold counts. ``bound`` is the C literal of the check's magnitude bound
    (``filter_bound``), or None where the check compares with the range itself."""
    holds = []
    for index, op in enumerate(program.ops):
        if op.kind != "state" or not op.held:
            continue
        if index not in kept or index not in program.counted_clamps:
            raise ValueError(f"held state {op.note!r} is not read by the step")
        low, high = (int_literal(v, program.word_bits) for v in op.held)
        bound = filter_bound(*op.held)
        holds.append({"field": names.field(program.state_names[op.state]), "low": low, "high": high,
                      "bound": None if bound is None else
                      f"UINT{program.word_bits}_C({bound})"})
    return holds


def hold_counts(program: IntegerProgram) -> bool:
    """Whether the step's rare path (``NAME_hold``) counts the saturated step itself: when every
    clamp the count reads (``IntegerProgram.counted_clamps``) is a held state's, nothing else in
    the step can saturate it, so the step needs no flag of its own; the hold adds one to the
    count when it changed a state, once per step, as the step would have."""
    counted = program.counted_clamps
    return bool(counted) and all(program.ops[i].kind == "state" and program.ops[i].held
                                 for i in counted)


# How far (a fraction of the range's half width) the step's cheap check may fall inside the range:
# a state in that margin takes the rare path, which then changes and counts nothing.
FILTER_SLACK = 64
# The significant bits of a constant an Arm Thumb-2 compare takes as an immediate (a "modified
# immediate": 8 bits shifted into place, Arm v7-M Architecture Reference Manual, A5.3.2), so the
# compiler loads no constant from the literal pool.
IMMEDIATE_BITS = 8


def filter_bound(low: int, high: int) -> int | None:
    """The bound B of the step's cheap check that a state is inside its range [low, high]:
    ``(unsigned)(v ^ (v >> (bits - 1))) <= B``. ``v ^ (v >> (bits - 1))`` is v for v >= 0 and
    -v - 1 (its ones' complement) below 0, so the check passes exactly the states in
    [-B - 1, B]; B <= high and -B - 1 >= low keep that inside [low, high], so the check never
    passes a state the hold would change. The check is only a filter: a state in the range that
    fails it takes the rare path, which holds nothing and counts nothing.

    B is the largest number of at most IMMEDIATE_BITS significant bits not above the range's
    inner half width min(high, -low - 1) (a compare with no constant load on Arm), or that half
    width itself where the rounding would lose more than 1/FILTER_SLACK of it. None (compare with
    the range itself) for a range that is not near-symmetric about -1/2: its two half widths
    differ by more than 1/FILTER_SLACK."""
    inner, outer = min(high, -low - 1), max(high, -low - 1)
    if inner <= 0 or FILTER_SLACK * (outer - inner) > inner:
        return None
    shift = max(0, inner.bit_length() - IMMEDIATE_BITS)
    bound = inner >> shift << shift
    return inner if FILTER_SLACK * (inner - bound) > inner else bound


def _looped(program: IntegerProgram, kept: set[int], names: CNames, symbol_of: dict[int, str],
            reports: tuple, bounds: list[tuple[int, int]]) -> LoopedStep | None:
    """The firmware step's lines with each repeat of the program as a loop over the
    oscillators where its copies' C agree (``gen/c/loops.py``); None without repeats."""
    stored = {r.index: (r.stored, r.format.fraction_bits) for r in reports}

    def render(index: int, arg_names: tuple[str, ...], symbol: str | None) -> tuple[str, str]:
        line = _value_line(index, program.ops[index], names, program, symbol_of, bounds,
                           arg_names=arg_names, symbol=symbol)
        return line["expression"], line["note"]

    return looped_step(program, kept, render, symbol_of, stored, f"int{program.word_bits}_t",
                       f"{names.macro_prefix}_TABLE_ENTRY", names.prefix)


def _helpers(program: IntegerProgram, ops: list[Op], prefix: str, word_type: str,
             wide_type: str, output_ops: list[Op] = ()) -> list[dict]:
    """The C helper functions of the kinds that compute a value whole (a table lookup), once
    each, in the registry's order. A helper whose result the program clamps
    (``IntegerProgram.clamps``) takes the step's saturation flag (or the outputs' own flag)."""
    unsigned = f"uint{program.word_bits}_t"
    used = {kind_of(op.kind).c_helper: program.clamps(op) for op in ops}
    for op in output_ops:
        helper = kind_of(op.kind).c_helper
        used[helper] = used.get(helper, False) or program.output_program.clamps(op)
    helpers = dict.fromkeys(kind.c_helper for kind in KINDS.values()
                            if kind.c_helper is not None and kind.c_helper in used)
    return [helper.render(prefix, word_type, wide_type, unsigned, used[helper]) for helper in helpers]


def render_host_harness(model: Model, program: IntegerProgram) -> str:
    """The verification-only C that drives the firmware functions in bulk from the host. It
    includes ``NAME_trace.h``: build it with the files of ``render_trace`` beside the firmware."""
    names = CNames(model.name)
    word_bits = program.word_bits
    return environment().get_template("host_harness.c.j2").render(
        names=names, fields=[names.field(n) for n in program.state_names],
        saturation_field=names.saturation_field,
        count=len(program.state_names), version=__version__, word_type=f"int{word_bits}_t",
        declarations=HARNESS_DECLARATIONS,
        setters=[names.setter(p.name) for p in model.runtime_parameters],
        outputs=[names.field(o.name) for o in program.outputs])


def _output_values(program: IntegerProgram) -> set[int]:
    """The values of the outputs' program each output's new value depends on (all but the loads
    nothing reads): what the step computes for the outputs."""
    section = program.output_program
    if section is None:
        return set()
    kept = {o.value for o in program.outputs}
    for index in range(len(section.ops) - 1, -1, -1):
        if index in kept:
            kept.update(section.ops[index].args)
    return kept


def _output_fields(model: Model, plan: FixedPointPlan, names: CNames) -> list[dict]:
    """The state struct's output fields: each output's latest value, in its own format."""
    program = plan.program
    declared = {o.name: o for o in model.outputs}
    fields = []
    for slot, initial in zip(program.outputs, plan.initial_outputs, strict=True):
        output = declared[slot.name]
        f = slot.fraction_bits
        unit = output.unit or "the actuator's unit"
        fields.append({
            "field": names.field(slot.name), "value": f"o{slot.value}", "macro": names.macro(slot.name),
            "fraction_bits": f, "format": f"Q{program.word_bits - f}.{f}", "unit": comment_text(unit),
            "meaning": comment_text(output.meaning or f"output {slot.name}"),
            "expression": comment_text(f"{output.offset:g} + {output.scale:g} * ({output.value})"),
            "low": slot.low, "high": slot.high, "low_real": output.low, "high_real": output.high,
            "slew": output.slew, "initial": int_literal(initial, program.word_bits),
            "initial_real": initial / 2.0 ** f})
    return fields


def _state_fields(model: Model, plan: FixedPointPlan, names: CNames) -> list[dict]:
    """The state struct's fields: the model's states, then each runtime parameter's current
    value and target."""
    program = plan.program
    meanings = [s.meaning or s.name for s in model.states]
    reals = [s.initial for s in model.states]
    for p in model.runtime_parameters:
        meanings += [f"runtime parameter {p.name} ({p.meaning or 'set at run time'}): its value "
                     "now, moved toward its target by the step",
                     f"target for {p.name}; write it with {names.setter(p.name)}()"]
        reals += [p.value, p.value]
    return [{"field": names.field(name), "meaning": comment_text(meaning),
             "initial": int_literal(v, program.word_bits), "initial_real": real,
             "format": f"Q{program.word_bits - f}.{f}", "fraction_bits": f,
             "macro": names.macro(name), "model_state": i < program.model_state_count,
             "angle": i in program.angle_states}
            for i, (name, meaning, v, real, f) in enumerate(zip(
                program.state_names, meanings, plan.initial_state, reals,
                program.state_fraction_bits, strict=True))]


def _tables(program: IntegerProgram, kept: set[int], tables: list[dict] | None = None
            ) -> tuple[list[dict], dict[int, str]]:
    """One C array per distinct sine table of the kept values, in order of first use; appended to
    ``tables`` (sharing an equal table) when given."""
    tables = [] if tables is None else tables
    by_content: dict[tuple[int, ...], str] = {t["content"]: t["name"] for t in tables}
    table_of: dict[int, str] = {}
    for index, op in enumerate(program.ops):
        if not op.table or index not in kept:
            continue
        if op.table not in by_content:
            name = f"sine_table{len(tables)}"
            by_content[op.table] = name
            fmt = f"Q{program.word_bits - op.fraction_bits}.{op.fraction_bits}"
            tables.append({"name": name, "length": len(op.table), "content": op.table,
                           "entries": [int_literal(v, program.word_bits) for v in op.table],
                           "comment": f"sin at {len(op.table) - 1} points of one turn (and the "
                                      f"first again), {fmt}, each rounded once"})
        table_of[index] = by_content[op.table]
    return tables, table_of


def _constants(reports: tuple, kept: set[int], bits: int, constants: list[CConstant] | None = None
               ) -> tuple[list[CConstant], dict[int, str]]:
    """One C constant per distinct stored value and format of the kept values, in order of first
    use; appended to ``constants`` (sharing an equal one) when given."""
    constants = [] if constants is None else constants
    by_key: dict[tuple[int, int], str] = {(c.stored, c.fraction_bits): c.name for c in constants}
    constant_of: dict[int, str] = {}
    for report in reports:
        if report.index not in kept:
            continue
        key = (report.stored, report.format.fraction_bits)
        if key not in by_key:
            name = f"k{len(constants)}"
            by_key[key] = name
            exact = "exact" if report.error == 0 else (
                f"stands for {report.represents:.17g}, error {report.error:+.3g}")
            if report.represents - report.real != report.error:  # an angle, a whole turn round
                exact = (f"stands for {report.represents:.17g}, the same angle a whole turn "
                         f"round, error {report.error:+.3g}")
            constants.append(CConstant(
                name=name, literal=int_literal(report.stored, bits), stored=report.stored,
                fraction_bits=report.format.fraction_bits,
                comment=comment_text(f"{report.real:.17g} in {report.format.name} "
                                     f"({report.role}, first use: {report.note}); {exact}")))
        constant_of[report.index] = by_key[key]
    return constants, constant_of


def _value_line(index: int, op: Op, names: CNames, program: IntegerProgram,
                symbol_of: dict[int, str], bounds: list[tuple[int, int]], prefix: str = "v",
                counted: frozenset[int] | None = None, spare: str = "unkept",
                arg_names: tuple[str, ...] | None = None, symbol: str | None = None) -> dict:
    """One value's C line: ``prefix`` names the values (v for the step's, o for the outputs');
    a clamp of a value in ``counted`` (default: the program's counted clamps) sets the step's
    flag, any other clamp the flag called ``spare``. ``arg_names`` and ``symbol``, when given,
    name the arguments and the stored constant (a loop's body, ``gen/c/loops.py``)."""
    counted = program.counted_clamps if counted is None else counted
    saturated = (", &saturated" if index in counted else
                 f", &{spare}" if program.clamps(op) else "")
    site = CSite(args=arg_names if arg_names is not None else tuple(f"{prefix}{i}" for i in op.args),
                 word_bits=program.word_bits,
                 wide=f"int{program.product_bits}_t", word=f"int{program.word_bits}_t",
                 prefix=names.prefix,
                 symbol=symbol if symbol is not None else symbol_of.get(index, ""),
                 field=names.field(program.state_names[op.state]) if op.kind == "state" else "",
                 saturated=saturated)
    fmt = f"Q{program.word_bits - op.fraction_bits}.{op.fraction_bits}"
    kind = kind_of(op.kind)
    exact = kind.c_exact(op, site)
    narrow = _sum_in_the_word(op, site, program, bounds, names) if op.proven else None
    if narrow is not None:
        expression = narrow
    elif exact is None:
        expression = kind.c_call(op, site)
    else:
        if op.shift:
            exact = f"{_shift_macro(program, op, names)}({exact}, {op.shift}, {site.wide})"
        if kind.fit_wraps(op):  # an angle, or a result proven to fit
            expression = f"{names.prefix}_wrap_word({exact})"
        else:
            expression = f"{names.prefix}_fit_word({exact}{saturated})"
    why = ", proven to fit" if op.proven else ""
    return {"name": f"{prefix}{index}", "index": index, "expression": expression,
            "note": comment_text(f"{fmt}{why}, {op.note}")}


def _sum_in_the_word(op: Op, site: CSite, program: IntegerProgram,
                     bounds: list[tuple[int, int]], names: CNames) -> str | None:
    """A proven sum or difference written in the word, not the product type, when the sure
    integer bounds show no part of it can overflow the word: an argument aligned by k >= shift
    contributes a * 2**(k - shift) exactly, outside the rounding (floor((a 2^k + b + r) / 2^s)
    = a 2^(k-s) + floor((b + r) / 2^s) for k >= s); the other is rounded alone, by the same
    rounding macro (a subtracted one is negated first: rounding -b is not minus the rounding of
    b). Ties to even read the whole quotient's parity, so that rule keeps the wide form. None
    where the wide form must stay."""
    rule = program.rounding_of(op)
    if op.kind not in ("add", "sub") or rule == "half-even":
        return None
    macro = _shift_macro(program, op, names)
    word = (program.word_min, program.word_max)
    fits = lambda low, high: word[0] <= low and high <= word[1]  # noqa: E731
    terms = []
    rounded = 0
    subtract = op.kind == "sub"  # until the subtracted term is negated into the rounding
    for place, (arg, value, k) in enumerate(zip(op.args, site.args, op.align, strict=True)):
        low, high = bounds[arg]
        if k >= op.shift:
            factor = 1 << (k - op.shift)
            if not fits(low * factor, high * factor):
                return None
            terms.append(value if factor == 1 else f"{value} * {factor}")
            continue
        negated = op.kind == "sub" and place == 1  # rounding -b is not minus the rounding of b
        if negated:
            low, high, value, subtract = -high, -low, f"-{value}", False
        rounded += 1
        shift = op.shift - k
        if not fits(low, high + (1 << (shift - 1) if rule == "half-up" else 0)):
            return None
        terms.append(f"{macro}({value}, {shift}, {site.word})")
    if rounded > 1:  # both rounded: the whole exact sum in the word, when it fits with the half
        low, high = kind_of(op.kind).exact_bounds(op, [bounds[a] for a in op.args],
                                                  program.word_bits)
        half = 1 << (op.shift - 1) if rule == "half-up" else 0
        aligned = [bounds[a][i] << k for a, k in zip(op.args, op.align, strict=True)
                   for i in (0, 1)]
        if not (fits(low, high + half) and fits(min(aligned), max(aligned))):
            return None
        exact = kind_of(op.kind).c_exact(op, replace(site, wide=site.word))
        return f"({site.word}){macro}({exact}, {op.shift}, {site.word})"
    return f"({site.word})({terms[0]}{' - ' if subtract else ' + '}{terms[1]})"


ROUNDING_WORDS = {
    "truncate": "toward minus infinity (an arithmetic shift right)",
    "half-up": "to nearest, ties toward plus infinity (add half an LSB, then shift right)",
    "half-even": "to nearest, ties to the even neighbour",
    "mixed": "to nearest, ties toward plus infinity, except where the plan found the error "
             "carried into the next state far below a state's LSB: there toward minus infinity "
             "(an arithmetic shift right)",
}
OVERFLOW_WORDS = {
    "saturate": "saturates to",
    "wrap": "wraps around (modulo 2^{bits}) into",
}


def _shift_macro(program: IntegerProgram, op: Op, names: CNames) -> str:
    """The C macro of one operation's rounding shift (a mixed program's truncated operations
    have their own)."""
    if program.rounding == "mixed" and program.rounding_of(op) == "truncate":
        return f"{names.macro_prefix}_TRUNCATE_SHIFT"
    return f"{names.macro_prefix}_ROUND_SHIFT"


def program_summary(program: IntegerProgram) -> dict[str, int]:
    """How many operations of each kind the step costs (for reports)."""
    counts: dict[str, int] = {}
    for op in program.ops:
        counts[op.kind] = counts.get(op.kind, 0) + 1
    return counts
