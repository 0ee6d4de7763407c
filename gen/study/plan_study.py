"""Studies that help choose a plan: how each integrator keeps the cycle at the loop rate, and a
search for the cheapest word size and integrator that keep it within tolerance."""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from orbitfix.gen import work_size
from orbitfix.gen.errors import InputError
from orbitfix.gen.fan_out import fan_out
from orbitfix.gen.model.limits import WORD_SIZES
from orbitfix.gen.pipeline import Design, design, program_states
from orbitfix.gen.program.operations import kind_of
from orbitfix.gen.progress import tell
from orbitfix.gen.study.discrete_cycle import (
    START_POINTS,
    STUDY_ADVICE,
    CycleTolerance,
    SteppedCycle,
    float_cycle,
    integer_cycle,
    lowest_loop_rate,
    lowest_loop_rate_work,
    needed_loop_rate,
    stepped_cycle_work,
)
from orbitfix.gen.timing.integrators import INTEGRATORS, Integrator


@dataclass(frozen=True)
class IntegratorStudy:
    """One integrator at the model's loop rate, in the model's word size."""

    integrator: str
    operations: int
    products: int
    float_cycle: SteppedCycle
    integer_cycle: SteppedCycle
    lowest_loop_hz: float | None
    needed_loop_hz: float | None

    def to_json(self) -> dict:
        return {"integrator": self.integrator, "operations": self.operations,
                "products": self.products, "float_map": self.float_cycle.to_json(),
                "integer_map": self.integer_cycle.to_json(),
                "lowest_loop_hz": self.lowest_loop_hz, "needed_loop_hz": self.needed_loop_hz}


@dataclass(frozen=True)
class Candidate:
    """One word size and integrator tried by the search, with its cost and outcome."""

    word_bits: int
    integrator: str
    signal_format: str
    products: int
    operations: int
    cycle: SteppedCycle | None
    problem: str = ""

    @property
    def cost(self) -> tuple[int, int, int]:
        """Cheaper first: a narrower word, then fewer products, then fewer operations."""
        return (self.word_bits, self.products, self.operations)

    @property
    def kept(self) -> bool:
        return self.cycle is not None and self.cycle.kept

    def to_json(self) -> dict:
        return {"word_bits": self.word_bits, "integrator": self.integrator,
                "format": self.signal_format, "products": self.products,
                "operations": self.operations, "kept": self.kept,
                "cycle": self.cycle.to_json() if self.cycle else None, "problem": self.problem}


@dataclass(frozen=True)
class SearchResult:
    """The cheapest candidate that keeps the cycle, and which tolerance binds it."""

    best: Candidate | None
    binding: str
    candidates: tuple[Candidate, ...]

    def to_json(self) -> dict:
        return {"best": self.best.to_json() if self.best else None, "binding": self.binding,
                "candidates": [c.to_json() for c in self.candidates]}


@dataclass(frozen=True)
class CoefficientEffect:
    """How much rounding the constants alone moves the stepped cycle: the float step map with the
    constants' real values against the same map with the values the stored integers stand for."""

    period_shift_ppm: float | None
    amplitude_shift: float | None
    worst_constants: tuple[str, ...]
    warning: str | None

    def to_json(self) -> dict:
        return {"period_shift_ppm": self.period_shift_ppm,
                "amplitude_shift": self.amplitude_shift,
                "worst_constants": list(self.worst_constants), "warning": self.warning}


def coefficient_effect(built: Design, tolerance: CycleTolerance | None = None) -> CoefficientEffect:
    """Measure the cycle shift caused by quantising the constants, and warn past the tolerance.

    The first of the plan studies, so it sizes them all (:func:`study_work`) before it starts:
    no study runs for minutes only for a later one to be refused."""
    tolerance = tolerance or CycleTolerance()
    work_size.refuse_beyond_machine(study_work(built), STUDY_ADVICE)
    program = built.plan.program
    represented = {c.index: c.represents for c in built.plan.constants}
    rounded = replace(program, ops=tuple(replace(op, real=represented[i]) if i in represented
                                          else op for i, op in enumerate(program.ops)))
    cycle = built.analysis.cycle
    loose = CycleTolerance(period_ppm=1e9, amplitude=1e9)
    starts = program_states(built.model, cycle.samples)
    exact, quantised = (float_cycle(p, starts, built.timing.steps_per_cycle,
                                    cycle.state_min, cycle.state_max, tolerance=loose)
                        for p in (program, rounded))
    ranked = sorted(built.plan.constants, key=lambda c: -abs(c.error / c.real) if c.real else 0.0)
    worst = tuple(f"{c.note} ({c.error / c.real:+.2e})" for c in ranked[:3] if c.real and c.error)
    if exact.period_steps is None or quantised.period_steps is None:
        return CoefficientEffect(None, None, worst, "the float step map keeps no cycle to compare")
    period = (quantised.period_steps / exact.period_steps - 1) * 1e6  # positive: runs slow
    amplitude = quantised.amplitude_shift(exact)
    warning = None
    if abs(period) > tolerance.period_ppm or amplitude > tolerance.amplitude:
        warning = (f"rounding the constants alone moves the cycle by {period:+.1f} ppm in "
                   f"period and {100 * amplitude:.3f} % in amplitude, past the tolerance; the "
                   f"largest relative errors: {', '.join(worst)}")
    return CoefficientEffect(period, amplitude, worst, warning)


def _counts(built: Design) -> tuple[int, int]:
    ops = built.plan.program.ops
    return len(ops), sum(op.kind == "mul" or kind_of(op.kind).constant_role == "multiplier" for op in ops)


def _cycle_of(built: Design, tolerance: CycleTolerance, integer: bool) -> SteppedCycle:
    cycle = built.analysis.cycle
    measure = integer_cycle if integer else float_cycle
    return measure(built.plan.program, program_states(built.model, cycle.samples),
                   built.timing.steps_per_cycle,
                   cycle.state_min, cycle.state_max, tolerance=tolerance)


def _scaled_work(base: Design, integrator: Integrator, work: work_size.Work) -> work_size.Work:
    """``work`` measured on the base design's program, scaled to another integrator's: the
    program grows with the number of stages (the lowering is cheap, the planning of each
    integrator's corners is not, so the size is estimated before any of it)."""
    ratio = max(1, integrator.stages) / max(1, base.integrator.stages)
    return work_size.Work(work.what, work.seconds * ratio, work.bytes)


def study_work(base: Design, search: bool = False, workers: int = 1) -> work_size.Work:
    """The size of the plan studies of ``base`` (:func:`coefficient_effect`,
    :func:`study_integrators` and, with ``search``, :func:`search`), before any of them starts."""
    program, spc = base.plan.program, base.timing.steps_per_cycle
    timing = base.timing
    floats = stepped_cycle_work(program, spc, 6.0, START_POINTS, integer=False)
    ints = stepped_cycle_work(program, spc, 6.0, START_POINTS, integer=True)
    lowest = lowest_loop_rate_work(program, spc, timing.cycle_hz, timing.loop_hz)
    seconds = 2 * floats.seconds
    for integrator in INTEGRATORS.values():
        for part in (floats, ints, lowest):
            seconds += _scaled_work(base, integrator, part).seconds
    if search:
        per_word = sum(_scaled_work(base, i, ints).seconds for i in INTEGRATORS.values())
        seconds += len(WORD_SIZES) * per_word / max(1, workers)
    return work_size.Work(f"the plan studies at {spc:,.0f} steps per cycle", seconds,
                          max(floats.bytes, ints.bytes, lowest.bytes))


def study_integrators(base: Design, tolerance: CycleTolerance | None = None) -> list[IntegratorStudy]:
    """Every registered integrator at the base design's loop rate and number format."""
    tolerance = tolerance or CycleTolerance()
    work_size.refuse_beyond_machine(study_work(base), STUDY_ADVICE)
    studies = []
    for done, (name, integrator) in enumerate(INTEGRATORS.items()):
        tell(f"studying the integrators at the loop rate ({name})", done, len(INTEGRATORS))
        built = design(base.model.with_fixed_point(integrator=name), analysis=base.analysis)
        operations, products = _counts(built)
        floats = _cycle_of(built, tolerance, integer=False)
        ints = _cycle_of(built, tolerance, integer=True)
        cycle = built.analysis.cycle
        corners = [c.samples for _, c in built.corners]
        lowest = lowest_loop_rate(built.model, integrator, cycle.period, cycle.samples,
                                  cycle.state_min, cycle.state_max, tolerance,
                                  plan_samples=np.hstack([cycle.samples, *corners]))
        needed = None if lowest else needed_loop_rate(built.timing.loop_hz, ints, integrator,
                                                      tolerance)
        studies.append(IntegratorStudy(name, operations, products, floats, ints, lowest, needed))
    return studies


def _try(base: Design, word_bits: int, name: str, tolerance: CycleTolerance) -> Candidate:
    try:
        built = design(base.model.with_fixed_point(integrator=name, word_bits=word_bits,
                                                   fraction_bits=None),
                       analysis=base.analysis)
    except InputError as exc:
        return Candidate(word_bits, name, "-", 0, 0, None, problem=str(exc))
    operations, products = _counts(built)
    return Candidate(word_bits, name, built.plan.signal_format.name, products, operations,
                     _cycle_of(built, tolerance, integer=True))


def search(base: Design, tolerance: CycleTolerance | None = None, workers: int | None = None,
           scheduler: object | None = None) -> SearchResult:
    """Try every word size and integrator (over a local process pool, or the Dask cluster at
    ``scheduler``), and pick the cheapest that keeps the cycle within tolerance at the model's
    loop rate."""
    tolerance = tolerance or CycleTolerance()
    ints = stepped_cycle_work(base.plan.program, base.timing.steps_per_cycle, 6.0, START_POINTS,
                              integer=True)
    per_word = sum(_scaled_work(base, i, ints).seconds for i in INTEGRATORS.values())
    work_size.refuse_beyond_machine(
        work_size.Work("the search over word sizes and integrators",
                       len(WORD_SIZES) * per_word, ints.bytes), STUDY_ADVICE)
    jobs = [(base, w, name, tolerance) for w in WORD_SIZES for name in INTEGRATORS]
    candidates = fan_out(_try, jobs, workers, scheduler)
    candidates.sort(key=lambda c: c.cost)
    best = next((c for c in candidates if c.kept), None)
    cheaper = [c for c in candidates if best is None or c.cost < best.cost]
    return SearchResult(best, _binding(best, cheaper[-1] if cheaper else None, tolerance),
                        tuple(candidates))


def _binding(best: Candidate | None, cheaper: Candidate | None, tolerance: CycleTolerance) -> str:
    """Which tolerance is nearest its limit for the chosen candidate, and what the next cheaper
    candidate broke."""
    if best is None or best.cycle is None:
        return "no candidate keeps the cycle within tolerance"
    why_not = ""
    if cheaper is not None:
        reason = cheaper.problem or (cheaper.cycle.verdict if cheaper.cycle else "")
        why_not = f"; the next cheaper ({cheaper.word_bits}-bit {cheaper.integrator}) fails: {reason}"
    period = abs(best.cycle.period_error_ppm or 0.0) / tolerance.period_ppm
    amplitude = (best.cycle.amplitude_error or 0.0) / tolerance.amplitude
    if period >= amplitude:
        return (f"period: {abs(best.cycle.period_error_ppm or 0):.1f} ppm of the "
                f"{tolerance.period_ppm:g} ppm allowed{why_not}")
    return (f"amplitude: {100 * (best.cycle.amplitude_error or 0):.3f} % of the "
            f"{100 * tolerance.amplitude:g} % allowed{why_not}")
