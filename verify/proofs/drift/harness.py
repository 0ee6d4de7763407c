"""The drift harness in C (``templates/drift_harness.c.j2``) and the calls into it: one streaming
run from a start with its statistics kept in C, the exact integer period by Brent's algorithm, and
the step from which the integer orbit is periodic.

The harness times the cycle by the section of ``gen/study/section.py`` (:func:`drift_section`),
rendered into it in integer arithmetic; for a model whose step commutes with a common turn of its
angles, it compares states modulo that turn (:func:`turns_together`).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np

from orbitfix.gen import __version__
from orbitfix.gen.c.emit import (
    HARNESS_DECLARATIONS,
    environment,
    render_host_harness,
    render_model,
    render_trace,
)
from orbitfix.gen.c.naming import CNames
from orbitfix.gen.pipeline import Design
from orbitfix.gen.study.section import Section, section_for, turns_together
from orbitfix.verify.targets.host_build import HostModule, build_host_module

DRIFT_DECLARATIONS = """\
void orbitfix_drift_run(const int32_t *start, uint64_t steps, uint64_t settle, uint64_t window,
                        int32_t section_level, uint64_t *counts,
                        int32_t *ranges, int32_t *brackets, int32_t *end_state,
                        int32_t *settle_state, uint8_t *apart);
uint64_t orbitfix_drift_period(const int32_t *start, uint64_t budget, uint64_t *seen_at);
uint64_t orbitfix_drift_cycle_start(const int32_t *start, uint64_t period, uint64_t budget);
void orbitfix_drift_outputs(const int32_t *start, const int32_t *memory, uint64_t steps,
                            int32_t *low, int32_t *high, uint64_t *hits);
"""

# Slots of the harness's counts array (the enum at the top of drift_harness.c.j2).
COUNT_FIELDS = ("crossings", "settled_crossings", "first_settled_crossing", "last_crossing",
                "limit_steps", "limit_first", "limit_settled", "range_steps", "range_first",
                "range_settled", "period", "period_seen_at", "advance")
RANGE_GROUPS = ("settled_low", "settled_high", "first_low", "first_high", "final_low",
                "final_high", "return_low", "return_high")


@dataclass(frozen=True)
class HarnessStatistics:
    """What the C harness returns for one run: counts, ranges and crossing brackets (integers)."""

    counts: dict[str, int]
    ranges: dict[str, list[int]]
    first_bracket: tuple[list[int], list[int]]
    last_bracket: tuple[list[int], list[int]]
    end_state: list[int]
    settle_state: list[int]
    equal_pairs: list[tuple[int, int]]
    seconds: float


def drift_section(design: Design) -> Section:
    """The section the drift proof times the cycle by (the rule of ``gen/study/section.py``; a
    design built without an analysis, as tests build bare maps, gets it with no cycle known)."""
    program = design.plan.program
    if design.analysis is None:
        return section_for(program, None, None)
    cycle = design.analysis.cycle
    return section_for(program, cycle.state_min, cycle.state_max, cycle.turns)


def render_drift_harness(design: Design) -> str:
    """The drift harness C for one design."""
    model = design.model
    names = CNames(model.name)
    bits = design.plan.program.word_bits
    program = design.plan.program
    section = drift_section(design)
    angles = [i in program.angle_states for i in range(len(program.state_names))]
    together = turns_together(program)
    where = program.state_names[section.state]
    text = (f"{where} passing a fixed phase {'forwards' if section.direction > 0 else 'backwards'}, "
            "one crossing per turn" if section.angle else f"{where} rising through the level")
    return environment().get_template("drift_harness.c.j2").render(
        names=names, fields=[names.field(n) for n in program.state_names],
        count=len(program.state_names),
        version=__version__, word_type=f"int{bits}_t", word_bits=bits,
        declarations=DRIFT_DECLARATIONS, limits=design.plan.planned_limits(),
        angles=angles, section_state=section.state, section_angle=section.angle,
        section_sign=section.direction, section_text=text, together=together,
        reference=min(program.angle_states) if together else 0,
        outputs=[{"field": names.field(o.name), "low": o.low, "high": o.high,
                  "slew": 0 if o.slew_step is None else max(1, math.floor(
                      o.slew_step * 2.0 ** o.fraction_bits))} for o in program.outputs])


def build_drift_module(design: Design, sources: dict[str, str] | None = None) -> HostModule:
    """Firmware, host harness and drift harness compiled into one module (strict flags).

    sources : the firmware files NAME.h and NAME.c (e.g. from ``verify.host_check.read_sources``);
        generated afresh from the design when not given.
    """
    names = CNames(design.model.name)
    files = sources if sources is not None else render_model(
        design.model, design.timing, design.integrator, design.plan)
    traced = render_trace(design.model, design.timing, design.integrator, design.plan)
    return build_host_module(
        sources={**files, **traced, "drift_harness.c": render_drift_harness(design)},
        harness=render_host_harness(design.model, design.plan.program),
        header=names.header, declarations=HARNESS_DECLARATIONS + DRIFT_DECLARATIONS)


def harness_statistics(host: HostModule, start: tuple[int, ...], steps: int, settle: int,
                       window: int, section_level: int) -> HarnessStatistics:
    """One streaming run in C from ``start`` (integer units) with the statistics kept on the way.

    ``equal_pairs`` are the pairs of states (i < j) equal at every step of the first window after
    settling (only meaningful when that window has steps in it)."""
    n = len(start)
    ffi = host.ffi
    begin = np.array(start, dtype=np.int32)
    counts = np.zeros(len(COUNT_FIELDS), dtype=np.uint64)
    ranges = np.zeros(len(RANGE_GROUPS) * n, dtype=np.int32)
    brackets = np.zeros(4 * n, dtype=np.int32)
    end = np.zeros(n, dtype=np.int32)
    at_settle = np.zeros(n, dtype=np.int32)
    apart = np.zeros(n * n, dtype=np.uint8)
    started = time.perf_counter()
    host.lib.orbitfix_drift_run(ffi.from_buffer("int32_t[]", begin), steps, settle, window,
                                section_level,
                                ffi.from_buffer("uint64_t[]", counts),
                                ffi.from_buffer("int32_t[]", ranges),
                                ffi.from_buffer("int32_t[]", brackets),
                                ffi.from_buffer("int32_t[]", end),
                                ffi.from_buffer("int32_t[]", at_settle),
                                ffi.from_buffer("uint8_t[]", apart))
    seconds = time.perf_counter() - started
    b = [int(v) for v in brackets]
    return HarnessStatistics(
        counts={name: int(v) for name, v in zip(COUNT_FIELDS, counts, strict=True)},
        ranges={name: [int(v) for v in ranges[i * n:(i + 1) * n]]
                for i, name in enumerate(RANGE_GROUPS)},
        first_bracket=(b[:n], b[n:2 * n]), last_bracket=(b[2 * n:3 * n], b[3 * n:]),
        end_state=[int(v) for v in end], settle_state=[int(v) for v in at_settle],
        equal_pairs=[(i, j) for i in range(n) for j in range(i + 1, n) if not apart[i * n + j]],
        seconds=seconds)


def integer_period(host: HostModule, start: tuple[int, ...], budget: int) -> tuple[int | None, int]:
    """Brent's algorithm in C with the plain step: (exact period or None, step it was seen at)."""
    ffi = host.ffi
    seen = np.zeros(1, dtype=np.uint64)
    begin = np.array(start, dtype=np.int32)
    period = int(host.lib.orbitfix_drift_period(ffi.from_buffer("int32_t[]", begin), budget,
                                                ffi.from_buffer("uint64_t[]", seen)))
    return (period or None), int(seen[0])


def cycle_start(host: HostModule, start: tuple[int, ...], period: int, budget: int) -> int | None:
    """The first step from which the integer orbit is periodic (None if not within budget)."""
    begin = np.array(start, dtype=np.int32)
    mu = int(host.lib.orbitfix_drift_cycle_start(host.ffi.from_buffer("int32_t[]", begin), period,
                                                 budget))
    return None if mu > budget else mu


def crossing_time(before: list[int] | np.ndarray, after: list[int] | np.ndarray, step: int,
                  level: int, section: Section, word_bits: int) -> float:
    """The (fractional) step at which the section state crossed the section between steps step-1
    and step (the states the harness bracketed the crossing with, integer units)."""
    found = section.integer_crossing(int(before[section.state]), int(after[section.state]), level,
                                     word_bits)
    if found is None:
        raise ValueError(f"no crossing of the section between the bracketed steps {step - 1} and {step}")
    num, den = found
    return step - 1 + num / den



@dataclass(frozen=True)
class OutputStatistics:
    """One output over one run in C: its least and largest value (stored integers) and the steps
    at which it sat at its lower limit, at its upper limit, and moved by its slew step (a move
    of at least the slew step rounded down to whole LSBs; 0 without a slew limit)."""

    name: str
    low: int
    high: int
    at_min: int
    at_max: int
    at_slew: int


def output_statistics(host: HostModule, program, start: tuple[int, ...], memory: tuple[int, ...],
                      steps: int) -> list[OutputStatistics]:
    """The outputs over ``steps`` plain steps in C from ``start`` and the outputs' ``memory``."""
    m = len(program.outputs)
    if not m:
        return []
    ffi = host.ffi
    begin = np.array(start, dtype=np.int32)
    last = np.array(memory, dtype=np.int32)
    low, high = np.zeros(m, dtype=np.int32), np.zeros(m, dtype=np.int32)
    hits = np.zeros(3 * m, dtype=np.uint64)
    host.lib.orbitfix_drift_outputs(ffi.from_buffer("int32_t[]", begin),
                                    ffi.from_buffer("int32_t[]", last), steps,
                                    ffi.from_buffer("int32_t[]", low),
                                    ffi.from_buffer("int32_t[]", high),
                                    ffi.from_buffer("uint64_t[]", hits))
    return [OutputStatistics(o.name, int(low[j]), int(high[j]), int(hits[3 * j]),
                             int(hits[3 * j + 1]), int(hits[3 * j + 2]))
            for j, o in enumerate(program.outputs)]
