"""Trimming the period: move the step constants by whole LSBs so that the integer orbit's mean
period matches the wanted cycle as closely as the lattice allows.

Why it can be done exactly: the integer step is a map on a finite lattice, so the orbit from the
initial state always ends on a cycle of the lattice, and its mean period for all time is that
cycle's length in steps over the number of rhythm periods in it (upward crossings of the first
state through the middle of its range on the continuous cycle, the drift proof's section). A
16-bit word rounds the step constants coarsely enough that this exact period can sit over a
thousand ppm off the wanted one while the float step map is right.

What is changed: only the constants that carry the step size h (the ``scale`` operations whose
real value is proportional to h, found by lowering the step at 2 h and comparing). Every one is
scaled by the same ratio and rounded in its own format, so the integrator's weights stay
consistent and no format, shift or rounding changes; the trimmed plan is an ordinary plan, read by
golden and by the C emitter alike, so bit-exactness holds by construction. The real values the
constants stand for (``op.real``) are left as they were: the float step map (L1) and the planning
box keep the untrimmed step.

The period trimmed is the one from the model's initial state, with any runtime parameters at their
values (the start the firmware's init sets, and the drift proof's deciding run); starts that end on
another lattice cycle may keep another mean period.

How: the ratio is expressed in LSBs of the lead constant (the step constant with the largest
stored value, so the finest relative step). The untrimmed orbit's exact period gives the first
guess (the period in steps goes as 1/h); the shifts round it are measured, all variants in one
vectorised golden run, and the window moves while its best lies on an edge. When the guess is
near, the whole way from the untrimmed plan to it is measured: the orbit locks onto lattice cycles
of whole steps (16-bit Van der Pol: 667, 666.5, 2000/3 or 666 steps per period), so the period is
a staircase in the step constant, not the smooth 1/h, and the best shift can lie short of the
guess. A trim moves the step by at most MOST_STEP_CHANGE: the plan's ranges and sure bounds were
sized at the planned step, with a margin far wider than that.

The granularity is what one LSB of the lead constant does to the step (1e6 / lead constant, in
ppm), the period's first-order change per LSB; locking makes the reachable periods coarser than
that, and the record lists every error met.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, replace
from fractions import Fraction

import numpy as np

from orbitfix.gen import work_size
from orbitfix.gen.errors import UnsupportedError
from orbitfix.gen.pipeline import Design
from orbitfix.gen.program import golden
from orbitfix.gen.program.fixed_point import FixedPointPlan
from orbitfix.gen.program.integer_program import IntegerProgram
from orbitfix.gen.program.lowering import lower_step
from orbitfix.gen.program.operations import kind_of
from orbitfix.gen.program.outputs import plan_outputs
from orbitfix.gen.program.proven_fit import prove_fits
from orbitfix.gen.program.quantisation import quantise
from orbitfix.gen.progress import tell
from orbitfix.gen.study.section import section_for

TRIM_SECONDS = 120.0         # the golden run allowed for one orbit to close into its exact cycle
WINDOW_LSB = 3               # variants either side of the guess, in LSBs of the lead constant
MOST_ROUNDS = 4              # windows measured after the first guess, at most
MOST_SPAN_LSB = 48           # a guess this near is searched all the way from the untrimmed plan
MOST_STEP_CHANGE = 0.01      # the largest trim of the step: the plan's ranges were sized at its step

NO_ANGLES = ("--trim does not handle models with angle states (phases) yet: it times the rhythm by "
             "crossings of a state that swings rather than turns; leave out --trim")


@dataclass(frozen=True)
class ExactPeriod:
    """The integer orbit's cycle from one start: its length in steps and the rhythm periods
    (upward crossings of the section) in it. Mean period = steps / turns, exact for all time."""

    cycle_steps: int
    turns: int
    closed_by_step: int

    @property
    def mean(self) -> Fraction | None:
        return Fraction(self.cycle_steps, self.turns) if self.turns else None


@dataclass(frozen=True)
class ChangedConstant:
    """One step constant the trim moved, in its own (unchanged) format."""

    index: int
    note: str
    format: str
    old: int
    new: int

    def to_json(self) -> dict:
        return {"value_index": self.index, "note": self.note, "format": self.format,
                "old": self.old, "new": self.new, "lsb": self.new - self.old}


@dataclass(frozen=True)
class Trim:
    """What the trim did: the exact mean period before and after against the wanted one, the
    granularity, and every step constant it moved."""

    wanted_period_steps: float
    before: ExactPeriod
    after: ExactPeriod
    lead_index: int
    lead_note: str
    lead_shift: int
    granularity_ppm: float
    reachable_errors_ppm: tuple[float, ...]
    changed: tuple[ChangedConstant, ...]
    tried: tuple[tuple[int, float | None], ...]
    seconds: float

    def error_ppm(self, period: ExactPeriod) -> float | None:
        mean = period.mean
        if mean is None:
            return None
        return (float(mean) / self.wanted_period_steps - 1) * 1e6  # positive: runs slow

    @property
    def error_before_ppm(self) -> float | None:
        return self.error_ppm(self.before)

    @property
    def error_after_ppm(self) -> float | None:
        return self.error_ppm(self.after)

    def summary(self) -> str:
        """One line, for reports and the generated header."""
        if not self.changed:
            return (f"Period trim: no change (the integer orbit's period error "
                    f"{self.error_before_ppm:+.1f} ppm is already the best of the {len(self.tried)} "
                    "step-constant shifts tried, "
                    f"granularity {self.granularity_ppm:.3g} ppm per LSB).")
        return (f"Period trimmed: the step constants stand for a step {self.step_change_ppm:+.0f} ppm "
                f"off the planned one ({self.lead_shift:+d} LSB of the lead constant, "
                f"{len(self.changed)} constants changed, each in its own format); the integer "
                f"orbit's exact period error {self.error_before_ppm:+.1f} ppm -> "
                f"{self.error_after_ppm:+.1f} ppm, granularity {self.granularity_ppm:.3g} ppm per "
                "LSB.")

    @property
    def step_change_ppm(self) -> float:
        """How far the trimmed step constants stand from the planned step, ppm."""
        return self.lead_shift * self.granularity_ppm

    def to_json(self) -> dict:
        def period(p: ExactPeriod) -> dict:
            return {"cycle_steps": p.cycle_steps, "turns": p.turns,
                    "mean_period_steps": float(p.mean) if p.mean else None,
                    "error_ppm": self.error_ppm(p), "closed_by_step": p.closed_by_step}

        return {"wanted_period_steps": self.wanted_period_steps, "before": period(self.before),
                "after": period(self.after), "lead_constant": {"value_index": self.lead_index,
                                                               "note": self.lead_note},
                "lead_shift_lsb": self.lead_shift, "granularity_ppm": self.granularity_ppm,
                "reachable_errors_ppm": list(self.reachable_errors_ppm),
                "changed": [c.to_json() for c in self.changed],
                "tried": [{"lead_shift_lsb": d, "error_ppm": e} for d, e in self.tried],
                "seconds": self.seconds}


def step_constants(built: Design) -> tuple[int, ...]:
    """Indices of the constants that carry the step size h: the stored multipliers whose real
    value doubles exactly when the step is lowered at 2 h (everything else stays)."""
    program = built.plan.program
    doubled = lower_step(built.model, built.integrator, 2 * built.timing.step)
    if len(doubled.ops) != len(program.ops):
        raise UnsupportedError("cannot tell which constants carry the step size (the step lowered "
                               "at twice the step has another shape); leave out --trim")
    found = []
    for index, (op, other) in enumerate(zip(program.ops, doubled.ops, strict=True)):
        if op.kind != other.kind or op.args != other.args:
            raise UnsupportedError("cannot tell which constants carry the step size (the step "
                                   "lowered at twice the step has another shape); leave out --trim")
        if kind_of(op.kind).constant_role == "multiplier" and op.real != other.real:
            if other.real != 2 * op.real:
                raise UnsupportedError(f"the constant of value {index} ({op.note}) is not "
                                       "proportional to the step size; leave out --trim")
            found.append(index)
    return tuple(found)


def scaled_constants(program: IntegerProgram, carriers: tuple[int, ...], lead: int,
                     lead_value: int) -> dict[int, int]:
    """Every step constant scaled by lead_value / (the lead's stored value), each rounded in its
    own format by the house rule (ties to even, as gen/program/quantisation.py)."""
    ratio = Fraction(lead_value, program.ops[lead].constant)
    return {i: quantise(program.ops[i].constant * ratio, 0) for i in carriers}


def section_level(built: Design) -> int:
    """The section's level in its state's integer units, from the one crossing rule
    (gen/study/section.py: for a model without angles, state 0 rising through the middle of its
    range on the continuous cycle, the drift proof's section)."""
    cycle = built.analysis.cycle
    program = built.plan.program
    section = section_for(program, cycle.state_min, cycle.state_max, cycle.turns)
    if section.angle or section.state != 0:
        raise UnsupportedError("the trim times the orbit by its first state, and this model's "
                               "section is another state or an angle; leave out --trim")
    return section.integer_level(program.state_fraction_bits[0])


def exact_periods(program: IntegerProgram, variants: list[dict[int, int]], start: tuple[int, ...],
                  level: int, budget: int) -> list[ExactPeriod | None]:
    """The exact cycle of the orbit from ``start`` for each variant of ``program`` (a variant
    gives new stored values for some constants), all in one golden run: variant j is column j,
    its constants carried as one array per operation. Brent's algorithm per column finds each
    cycle's length and a state on it; one more turn of every cycle counts its crossings of
    ``level`` (x_k[0] < level <= x_{k+1}[0]). None for a variant whose orbit does not close within
    ``budget`` steps."""
    count = len(variants)
    changed = sorted({i for v in variants for i in v})
    ops = list(program.ops)
    for i in changed:
        ops[i] = replace(ops[i], constant=np.array([v.get(i, ops[i].constant) for v in variants],
                                                   dtype=np.int64))
    batched = replace(program, ops=tuple(ops))
    hare = np.repeat(np.asarray(start, dtype=np.int64).reshape(-1, 1), count, axis=1)
    tortoise = hare.copy()
    power = np.ones(count, dtype=np.int64)
    lam = np.zeros(count, dtype=np.int64)
    period = np.zeros(count, dtype=np.int64)
    closed = np.zeros(count, dtype=np.int64)
    on_cycle = hare.copy()
    found = np.zeros(count, dtype=bool)
    steps = 0
    while not found.all() and steps < budget:
        hare = golden.step(batched, hare)
        steps += 1
        lam += 1
        hit = ~found & np.all(hare == tortoise, axis=0)
        period[hit] = lam[hit]
        closed[hit] = steps
        found |= hit
        on_cycle[:, hit] = hare[:, hit]
        reset = ~found & (lam == power)
        tortoise[:, reset] = hare[:, reset]
        power[reset] *= 2
        lam[reset] = 0
        if steps % 4096 == 0:
            tell("trimming the period: finding the integer orbit's exact cycle", steps, budget)
    turns = np.zeros(count, dtype=np.int64)
    state = on_cycle
    for k in range(int(period.max(initial=0))):
        after = golden.step(batched, state)
        turns += (k < period) & (state[0] < level) & (after[0] >= level)
        state = after
    return [ExactPeriod(int(period[j]), int(turns[j]), int(closed[j])) if found[j] else None
            for j in range(count)]


def cycle_budget(program: IntegerProgram) -> int:
    """Golden steps allowed for an orbit to close into its exact cycle: TRIM_SECONDS of the
    house's estimate of a golden step of ``program`` (gen/work_size.py), so a larger program gets
    fewer steps and no trim runs for long before it finds it cannot close."""
    one = work_size.golden_run("one golden step", len(program.ops), 1).seconds
    return max(1, int(TRIM_SECONDS / one))


def trim_design(built: Design, budget: int | None = None,
                window: int = WINDOW_LSB) -> tuple[Design, Trim]:
    """The design with its step constants trimmed (see the module's docstring), and the record of
    what was done. Raises UnsupportedError (exit 2) where it cannot trim: angle states, no step
    constant, an orbit that does not close into a cycle within ``budget`` steps (default
    :func:`cycle_budget`) or has no rhythm."""
    started = time.perf_counter()
    program = built.plan.program
    budget = budget or cycle_budget(program)
    if program.angle_states:
        raise UnsupportedError(NO_ANGLES)
    carriers = step_constants(built)
    if not carriers:
        raise UnsupportedError("no constant of the step carries the step size; nothing to trim")
    lead = max(carriers, key=lambda i: abs(program.ops[i].constant))
    lead_stored = program.ops[lead].constant
    wanted = built.timing.steps_per_cycle
    start, level = built.plan.initial_state, section_level(built)
    limit = program.word_max
    measured: dict[int, ExactPeriod | None] = {}

    def measure(shifts: list[int]) -> None:
        shifts = [d for d in dict.fromkeys(shifts) if d not in measured]
        variants = [scaled_constants(program, carriers, lead, lead_stored + d) for d in shifts]
        fits = [all(abs(c) <= limit for c in v.values()) and lead_stored + d != 0
                for d, v in zip(shifts, variants, strict=True)]
        for d, ok in zip(shifts, fits, strict=True):
            if not ok:
                measured[d] = None  # a constant would leave its word
        shifts = [d for d, ok in zip(shifts, fits, strict=True) if ok]
        variants = [v for v, ok in zip(variants, fits, strict=True) if ok]
        if shifts:
            measured.update(zip(shifts, exact_periods(program, variants, start, level, budget),
                                strict=True))

    def error(d: int) -> float | None:
        found = measured.get(d)
        if found is None or found.mean is None:
            return None
        return (float(found.mean) / wanted - 1) * 1e6

    measure([0])
    before = measured[0]
    if before is None:
        raise UnsupportedError(f"the integer orbit from the initial state does not close into a "
                               f"cycle within {budget:,} steps (about {TRIM_SECONDS:g} s of golden "
                               "steps), so its exact period is not known to trim; leave out --trim "
                               "(verify's drift test still measures the exact period, in C)")
    if before.mean is None:
        raise UnsupportedError("the integer orbit from the initial state settles without a rhythm "
                               "(no crossing of the section on its cycle); there is no period to "
                               "trim")
    guess = round(lead_stored * before.mean / Fraction(wanted)) - lead_stored
    reach = int(MOST_STEP_CHANGE * abs(lead_stored))
    if abs(guess) > reach:
        raise UnsupportedError(
            f"the integer orbit's period is {error(0):+,.0f} ppm off the wanted cycle; trimming it "
            f"would move the step by more than {100 * MOST_STEP_CHANGE:g} %, beyond what the plan's "
            "ranges were sized for: raise the loop rate or the word size (plan --search finds the "
            "cheapest that keeps the cycle) instead of trimming")
    low, high = guess - window, guess + window
    if abs(guess) <= MOST_SPAN_LSB:  # the orbit locks, so the way from 0 to the guess counts too
        low, high = min(low, -window), max(high, window)
    measure(list(range(max(low, -reach), min(high, reach) + 1)))
    for _ in range(MOST_ROUNDS):
        best = _best(measured, error)
        if best not in (low, high) or error(best) == 0:
            break
        low, high = (best - 2 * window, best) if best == low else (best, best + 2 * window)
        measure(list(range(max(low, -reach), min(high, reach) + 1)))
    best = _best(measured, error)
    trimmed = _trimmed_plan(built.plan, scaled_constants(program, carriers, lead, lead_stored + best))
    # the outputs read the next state, whose proven ranges the new constants may move: re-plan them
    trimmed = plan_outputs(built.model, trimmed, built.timing.loop_hz)
    changed = tuple(ChangedConstant(i, program.ops[i].note, _constant_format(built.plan, i),
                                    program.ops[i].constant, trimmed.program.ops[i].constant)
                    for i in carriers if trimmed.program.ops[i].constant != program.ops[i].constant)
    record = Trim(
        wanted_period_steps=wanted, before=before, after=measured[best], lead_index=lead,
        lead_note=program.ops[lead].note, lead_shift=best,
        granularity_ppm=1e6 / abs(lead_stored),
        reachable_errors_ppm=tuple(sorted({round(e, 3) for d in measured
                                           if (e := error(d)) is not None})),
        changed=changed, tried=tuple(sorted((d, error(d)) for d in measured)),
        seconds=time.perf_counter() - started)
    kept = trimmed if changed else built.plan  # unchanged: the same program, the same fingerprint
    return replace(built, plan=replace(kept, trim=record.summary())), record


def _best(measured: dict[int, ExactPeriod | None], error) -> int:
    """The shift with the smallest absolute error; ties go to the smaller change."""
    usable = [d for d in measured if error(d) is not None]
    return min(usable, key=lambda d: (abs(error(d)), abs(d)))


def _constant_format(plan: FixedPointPlan, index: int) -> str:
    return next(c.format.name for c in plan.constants if c.index == index)


def _trimmed_plan(plan: FixedPointPlan, constants: dict[int, int]) -> FixedPointPlan:
    """``plan`` with new stored values for some constants: the program's operations and the
    constants' table both (formats, shifts and real values unchanged), its fits proved again."""
    ops = tuple(replace(op, constant=constants[i]) if i in constants else op
                for i, op in enumerate(plan.program.ops))
    reports = tuple(replace(c, stored=constants[c.index]) if c.index in constants else c
                    for c in plan.constants)
    program = prove_fits(replace(plan.program, ops=ops), plan.box)
    return replace(plan, program=program, constants=reports)
