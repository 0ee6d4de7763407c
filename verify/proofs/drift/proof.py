"""The long-run drift proof: the compiled C (layer L3) run for hours of loop time from several
starts, against the float step map (L1) and the continuous cycle (L0).

Every long run happens in C (``templates/drift_harness.c.j2``): the harness calls the firmware's
traced step and keeps running statistics, so nothing per step is stored or touched by Python. What
the harness measures, and what this module makes of it:

- amplitude: each swinging state's half peak-to-peak range over the last few cycles of the run (an
  angle state has none; a state at rest on the cycle is judged by its level, see
  ``gen/study/section.py``);
- period: crossings of the section (the crossing rule of ``gen/study/section.py``: state 0 rising
  through the middle of its range, or for a model with phases, the first turning phase passing a
  fixed angle, one crossing per turn), with sub-step linear interpolation at the first crossing
  after settling and at the last;
- phase drift: the period error accumulated over the whole run, in cycles;
- return spread: each state interpolated onto the section at every crossing after settling;
- saturation events: steps where an intermediate sits at the word's limit (visible only when the
  word saturates) and steps where one lies outside the planner's range (largest signal on the
  cycle times the margin), which holds for both overflow modes;
- the integer period: a finite-state orbit always ends up periodic; Brent's algorithm finds that
  exact period in steps.

Verdicts for all time: the integer map is deterministic on a finite lattice, so once the orbit from
a start is found periodic (Brent's algorithm with the plain step, then the first step on the cycle),
its whole future is that cycle. The harness then runs the transient and exactly one turn of the
cycle; the traced step must close the cycle (the state one cycle past its entry equals the entry),
and amplitude, mean period (cycle length over the crossings in it), return spread and saturation are
judged on the cycle itself: the verdict holds for unbounded time (``horizon = "unbounded"``). The
phase drift is the exact rate times the --hours horizon (any period error drifts without bound).

Angle models: when the step commutes with turning every angle by the same amount (decided exactly
from the program, ``gen/study/section.py``), states are compared modulo that common turn, so the
cycle found is that of the swinging states and the angles relative to one another (a few steps to a
few cycles long, where the full state may take up to 2**word_bits steps to repeat). Over each turn
of it the section angle advances by an exact number of word units, so the mean steps per turn
(cycle length times a turn over that advance) is exact for all time. The return points then slide
round the cycle from turn to turn, so their spread is judged by a sure bound: the range over the
whole cycle of each swinging state and of each angle relative to the section angle.
Only when no cycle is found within the budget is the orbit run for --hours (``horizon = "N hours"``).

Which runs decide: the model's initial state and the corners of the runtime ranges. The other starts
(random, asymmetric ones near the equilibria, near the basin's edge, near saturation, the user's)
test robustness: one that ends elsewhere is a finding with its explanation (a symmetric subspace,
a resting state, another attractor), and the report gives the fraction that reach the cycle.

Rooms: the C harness and the calls into it (``harness``), the starts and the float step map
(``references``); this module runs and judges the runs. The text and JSON renderings are in
``verify/report/drift.py``.
"""

from __future__ import annotations

import math
import time
from dataclasses import asdict, dataclass, field, replace

import numpy as np

from orbitfix.gen.errors import InputError
from orbitfix.gen.pipeline import Design
from orbitfix.gen.plain_data import plain_number
from orbitfix.gen.program import golden
from orbitfix.gen.program.integer_program import IntegerProgram
from orbitfix.gen.study.section import (
    Section,
    amplitude_errors,
    full_period,
    resting,
    steps_per_turn,
    turns_together,
    wrap_word,
)
from orbitfix.gen.work_size import Work, drift_work, refuse_beyond_machine
from orbitfix.verify.proofs.drift.harness import (
    build_drift_module,
    crossing_time,
    cycle_start,
    drift_section,
    harness_statistics,
    integer_period,
    output_statistics,
)
from orbitfix.verify.proofs.drift.references import (
    STEP_MAP_CYCLES,
    STEP_MAP_MEASURED,
    Start,
    StepMapReference,
    choose_starts,
    step_map_references,
)
from orbitfix.verify.targets.host_build import HostModule

LONGEST_RUN = 1 << 62
CYCLE_BUDGET = 20_000_000  # steps of the plain step searched for the exact cycle before falling back
FEWEST_CYCLES = 16      # a run shorter than this cannot settle and still measure a period
WINDOW_CYCLES = 3       # the amplitude windows, in cycles


@dataclass(frozen=True)
class DriftTolerances:
    """What a long run may deviate by and still pass.

    amplitude : relative error of each state's amplitude (half its peak-to-peak range) at the end
        of the run, against the continuous cycle (L0) and the float step map (L1). 2 % is below
        what a drive notices in stroke or force (common practice for rhythm generators).
    period_ppm : error of the mean period after settling, parts per million, against L0 and L1.
        1000 ppm (0.1 %) is finer than any gait or pump needs (common practice).
    phase_drift_cycles : the phase the C may lose or gain over the whole run against the float step
        map (L1), in cycles. Quantisation should not make the generator skip or add a single beat
        relative to its float design, so the default is 1 cycle; the comparison is with L1, not L0,
        because the period tolerance already bounds the discretisation's own detuning (at 1000 ppm
        a day at 1.5 Hz is 130 cycles), while this one isolates what the integer words add.
    return_spread : the spread (largest minus least) of each state's return points on the Poincare
        section after settling, as a fraction of that state's peak-to-peak range on L0. On a
        locked cycle it is a few LSB; 2 % allows the rounding's jitter and nothing more.
    """

    amplitude: float = 0.02
    period_ppm: float = 1000.0
    phase_drift_cycles: float = 1.0
    return_spread: float = 0.02

    def __post_init__(self) -> None:
        for name, value in asdict(self).items():
            if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
                raise InputError(f"the drift tolerance '{name}' must be a positive number, "
                                 f"got {value!r}")


@dataclass
class DriftRun:
    """The outcome of one long run from one start."""

    start: Start
    amplitude: list[float | None]
    amplitude_first: list[float | None]
    amplitude_error: float | None
    amplitude_error_step_map: float | None
    period_steps: float | None
    period_error_ppm: float | None
    period_error_ppm_step_map: float | None
    phase_drift_cycles: float | None
    phase_drift_cycles_continuous: float | None
    return_spread: list[float] | None
    crossings: int
    settled_crossings: int
    integer_period_steps: int | None
    integer_period_seen_at: int | None
    cycle_entered_at_step: int | None
    saturation_events: dict
    step_map_returns: bool
    reasons: list[str]
    seconds: float
    against: dict | None = None
    horizon: str = "unbounded"
    steps_to_cycle: int | None = None
    cycle_length: int | None = None
    crossings_per_cycle: int | None = None
    phase_drift_cycles_per_hour: float | None = None
    decides: bool = True
    explanation: str | None = None
    equal_states: list[tuple[str, str]] = field(default_factory=list)
    cycle_turns: float | None = None
    return_spread_bound: bool = False
    middle: list[float | None] = field(default_factory=list)  # each swinging state's mid-range
    # per output to an actuator, over the run in C: its range and how often it met a limit
    outputs: list[dict] = field(default_factory=list)

    @property
    def verdict(self) -> str:
        return "fail" if self.reasons else "pass"

    @property
    def outcome(self) -> str:
        """pass or fail for a run that decides the verdict; pass or finding for a robustness run."""
        if not self.reasons:
            return "pass"
        return "fail" if self.decides else "finding"


@dataclass
class DriftReport:
    """All runs of one drift proof, with the references they were held against."""

    model: str
    hours: float
    loop_hz: float
    steps: int
    settle_steps: int
    window_steps: int
    section_level: int
    planned_limits: list[int]
    fraction_bits: int
    state_names: tuple[str, ...]
    tolerances: DriftTolerances
    continuous_period_steps: float
    continuous_amplitude: list[float | None]
    step_map: StepMapReference
    runs: list[DriftRun]
    notes: list[str] = field(default_factory=list)
    seconds: dict[str, float] = field(default_factory=dict)
    seed: int | None = None
    cycle_budget: int = CYCLE_BUDGET
    section: Section | None = None
    state_fraction_bits: tuple[int, ...] = ()
    word_bits: int = 32
    turns_together: bool = False
    continuous_low: list[float] = field(default_factory=list)
    continuous_high: list[float] = field(default_factory=list)
    equal_on_cycle: set[tuple[int, int]] = field(default_factory=set)  # equal on the designed cycle

    @property
    def verdict(self) -> str:
        """Decided by the runs from the model's initial state and the runtime corners only."""
        return "fail" if any(run.decides and run.reasons for run in self.runs) else "pass"

    @property
    def resting(self) -> list[bool]:
        """Per model state: at rest on the continuous cycle (judged by its level, not its swing)."""
        if not self.continuous_low:
            return [False] * len(self.state_names)
        return [bool(v) for v in resting(self.continuous_low, self.continuous_high)]

    @property
    def robustness(self) -> dict:
        """The robustness starts: how many, and the fraction that reach the cycle."""
        others = [run for run in self.runs if not run.decides]
        reached = sum(1 for run in others if not run.reasons)
        return {"starts": len(others), "reach_the_cycle": reached,
                "fraction": reached / len(others) if others else None}


def run_drift(design: Design, hours: float = 24.0, tolerances: DriftTolerances | None = None,
              settle_fraction: float = 0.25, equilibrium_offset: float = 1e-3,
              host: HostModule | None = None, seed: int = 1,
              extra_starts: tuple[dict[str, float], ...] = (),
              cycle_budget: int = CYCLE_BUDGET) -> DriftReport:
    """The long-run drift proof: steps = round(hours * 3600 * loop rate) from every start, and,
    for a model with runtime parameters, from its initial state at every corner of their ranges
    (judged against the cycle at that corner).

    settle_fraction : the first part of each run that is left out of the period, return-point
        and after-settling counts (the way onto the cycle from a far start).
    host : a module from ``build_drift_module`` (built here when not given).
    seed : of the random, asymmetric starts near the equilibria (reported).
    extra_starts : the user's starts (model units by state name; states not named keep their
        initial values); robustness starts, like the random ones.
    cycle_budget : plain steps searched for the exact integer cycle from each start before the
        run falls back to --hours.
    """
    refuse_beyond_machine(drift_size(design, hours, len(extra_starts)),
                          "give fewer --hours or a lower loop_hz")
    if host is None:
        started = time.perf_counter()
        host = build_drift_module(design)
        built_in = time.perf_counter() - started
    else:
        built_in = 0.0
    tolerances = tolerances if tolerances is not None else DriftTolerances()
    views = [design, *(_at_corner(design, corner, cycle) for corner, cycle in design.corners)]
    for view in views:  # every input checked before any work
        _run_length(view, hours, settle_fraction)
    chosen = [choose_starts(design, equilibrium_offset, seed=seed, extra=extra_starts)]
    chosen += [(choose_starts(view, equilibrium_offset)[0][:1], []) for view in views[1:]]
    sections = [drift_section(view) for view in views]
    # The float step map's references of every view (the same program) in one run.
    started = time.perf_counter()
    references = step_map_references(
        [(view, section, starts) for view, section, (starts, _) in zip(views, sections, chosen,
                                                                        strict=True)],
        tolerances.amplitude)
    reference_seconds = time.perf_counter() - started
    report = _drift_report(design, hours, tolerances, settle_fraction, host, sections[0],
                           *chosen[0], references[0], seed=seed, cycle_budget=cycle_budget)
    report.seconds["host_build"] = built_in
    report.seconds["step_map_reference"] = reference_seconds
    for (corner, _), view, section, (starts, notes), reference in zip(
            design.corners, views[1:], sections[1:], chosen[1:], references[1:], strict=True):
        where = ", ".join(f"{name} = {value:g}" for name, value in corner.items())
        at_corner = _drift_report(view, hours, tolerances, settle_fraction, host, section, starts,
                                  notes, reference, seed=None, cycle_budget=cycle_budget)
        for run in at_corner.runs:
            run.start = replace(run.start, name=where,
                                why=f"the initial state with {where} (a corner of the runtime "
                                    "ranges), judged against the cycle there")
            run.against = {"continuous_period_steps": at_corner.continuous_period_steps,
                           "continuous_amplitude": at_corner.continuous_amplitude,
                           "step_map_period_steps": at_corner.step_map.period_steps}
            report.runs.append(run)
    return report


def drift_size(design: Design, hours: float, extra_starts: int = 0) -> Work:
    """The size of :func:`run_drift` before it starts, as if no start found its integer cycle and
    every run went the full hours (every start, and one run per corner of the runtime ranges)."""
    program, timing = design.plan.program, design.timing
    starts = len(choose_starts(design)[0]) + extra_starts

    def one(runs: int) -> Work:
        return drift_work(len(program.ops), len(program.state_names), timing.steps_per_cycle,
                          timing.loop_hz, hours, runs, STEP_MAP_CYCLES, STEP_MAP_MEASURED,
                          reference_columns=runs + 1)

    total = one(starts)
    for _ in design.corners:
        total = total + one(1)
    return replace(total, what=f"the drift proof ({hours:g} h at {timing.loop_hz:g} Hz)")


def _at_corner(design: Design, corner: dict[str, float], cycle: object) -> Design:
    """The design seen from one corner: parameters, cycle, period and initial state there."""
    model = design.model.with_parameters(corner)
    plan = design.plan
    program = plan.program
    n = program.model_state_count
    held = []
    for k, p in enumerate(model.runtime_parameters):
        bits = program.state_fraction_bits[n + 2 * k]
        held += [round(p.value * 2**bits)] * 2
    return replace(design, model=model, analysis=replace(design.analysis, cycle=cycle),
                   timing=replace(design.timing, steps_per_cycle=cycle.period / design.timing.step),
                   plan=replace(plan, initial_state=tuple(plan.initial_state[:n]) + tuple(held)))


def _run_length(design: Design, hours: float, settle_fraction: float) -> tuple[int, int]:
    """The steps of a run over ``hours`` and of its settling part; bad settings are input errors."""
    timing = design.timing
    if not (isinstance(hours, int | float) and math.isfinite(hours) and hours > 0):
        raise InputError(f"--hours must be a positive number, got {hours!r}")
    if not 0 < settle_fraction < 0.9:
        raise InputError(f"the settling fraction must lie between 0 and 0.9, got {settle_fraction}")
    spc = timing.steps_per_cycle
    steps = round(hours * 3600 * timing.loop_hz)
    if steps < FEWEST_CYCLES * spc:
        fewest = FEWEST_CYCLES * spc / (3600 * timing.loop_hz)
        raise InputError(f"{hours:g} h at {timing.loop_hz:g} Hz is {steps:,} steps, fewer than the "
                         f"{FEWEST_CYCLES} cycles a drift run needs to settle and measure a "
                         f"period; give at least {fewest:.3g} hours")
    if steps > LONGEST_RUN:
        raise InputError(f"{hours:g} h is more steps than the harness counts; give fewer hours")
    return steps, round(settle_fraction * steps)


def _drift_report(design: Design, hours: float, tolerances: DriftTolerances,
                  settle_fraction: float, host: HostModule, section: Section, starts: list[Start],
                  notes: list[str], reference: StepMapReference, seed: int | None,
                  cycle_budget: int = CYCLE_BUDGET) -> DriftReport:
    """The runs of one design (at one setting of the runtime parameters) from ``starts``, held
    against ``reference`` (its float step map, from ``step_map_references``)."""
    timing, plan = design.timing, design.plan
    program = plan.program
    steps, settle = _run_length(design, hours, settle_fraction)
    spc = timing.steps_per_cycle
    window = max(1, round(WINDOW_CYCLES * spc))
    fraction = plan.signal_format.fraction_bits
    cycle = design.analysis.cycle
    low, high = np.asarray(cycle.state_min), np.asarray(cycle.state_max)
    n = program.model_state_count
    bits = tuple(program.state_fraction_bits[:n])
    level = section.integer_level(bits[section.state])
    seconds: dict[str, float] = {}

    continuous_amplitude = [None if i in program.angle_states else float((high[i] - low[i]) / 2)
                            for i in range(n)]
    report = DriftReport(
        model=design.model.name, hours=float(hours), loop_hz=timing.loop_hz, steps=steps,
        settle_steps=settle, window_steps=window, section_level=level,
        planned_limits=plan.planned_limits(), fraction_bits=fraction,
        state_names=program.state_names[:program.model_state_count],
        tolerances=tolerances, continuous_period_steps=spc,
        continuous_amplitude=continuous_amplitude, step_map=reference, runs=[], notes=notes,
        seconds=seconds, seed=seed, cycle_budget=cycle_budget,
        section=section, state_fraction_bits=bits, word_bits=program.word_bits,
        turns_together=turns_together(program),
        continuous_low=[float(v) for v in low], continuous_high=[float(v) for v in high],
        equal_on_cycle=_equal_on_cycle(cycle.samples, program.angle_states))
    started = time.perf_counter()
    for start in starts:
        report.runs.append(_one_run(report, host, start, program.overflow, program))
    nominal = report.runs[0]
    for run in report.runs[1:]:
        if run.explanation and nominal.reasons and _same_cycle(run, nominal):
            run.explanation = ("the same integer cycle as the run from the model's initial state "
                               "(same length, mean period and ranges): its reasons are that run's")
    seconds["runs"] = time.perf_counter() - started
    return report


def _equal_on_cycle(samples: np.ndarray, angles: tuple[int, ...]) -> set[tuple[int, int]]:
    """Pairs of model states (i < j) equal at every sample of the continuous cycle (angles modulo a
    turn): a symmetric subspace the designed cycle itself lies on explains no finding."""
    samples = np.asarray(samples, dtype=float)
    n = samples.shape[0]
    scale = float(np.max(np.abs(samples))) or 1.0
    pairs = set()
    for i in range(n):
        for j in range(i + 1, n):
            gap = samples[i] - samples[j]
            if i in angles and j in angles:
                gap = (gap + math.pi) % (2 * math.pi) - math.pi
            elif i in angles or j in angles:
                continue
            if np.max(np.abs(gap)) <= 1e-9 * scale:
                pairs.add((i, j))
    return pairs


def _same_cycle(run: DriftRun, other: DriftRun) -> bool:
    """Both runs were judged on exact integer cycles of the same length, mean period and ranges."""
    return (run.horizon == other.horizon == "unbounded" and run.cycle_length == other.cycle_length
            and run.period_steps == other.period_steps and run.cycle_turns == other.cycle_turns
            and run.amplitude == other.amplitude and run.middle == other.middle)


def _one_run(report: DriftReport, host: HostModule, start: Start, overflow: str,
             program: IntegerProgram | None = None) -> DriftRun:
    """One run in C and its judgement against the references and the tolerances: on the exact
    integer cycle when one is found within the budget, else over --hours."""
    tol = report.tolerances
    section = report.section
    names = report.state_names
    n = len(names)
    word = report.word_bits
    angles = [i for i in range(n) if i not in section.swinging]
    scales = [2.0 ** -b for b in report.state_fraction_bits]
    started = time.perf_counter()
    budget = min(report.steps, report.cycle_budget)
    p, seen_at = integer_period(host, start.state, budget)
    mu = cycle_start(host, start.state, p, seen_at) if p is not None else None
    exact = p is not None and mu is not None
    if exact:
        steps, settle, window = mu + p, mu, p
    else:
        steps, settle, window = report.steps, report.settle_steps, report.window_steps
    stats = harness_statistics(host, start.state, steps, settle, window, report.section_level)
    outputs, output_reasons = ([], []) if program is None else _outputs(
        program, host, start, steps + (p if exact else 0))
    seconds = time.perf_counter() - started
    c = stats.counts
    advance = c["advance"] - (1 << 64) if c["advance"] >= 1 << 63 else c["advance"]
    r = {group: values[:n] for group, values in stats.ranges.items()}

    def swing(low: str, high: str) -> list[float | None]:
        return [None if i in angles else (r[high][i] - r[low][i]) / 2 * scales[i] for i in range(n)]

    amplitude, amplitude_first = swing("final_low", "final_high"), swing("first_low", "first_high")
    middle = [None if i in angles else (r["final_high"][i] + r["final_low"][i]) / 2 * scales[i]
              for i in range(n)]
    reasons: list[str] = []
    if exact and not _closes(stats.settle_state[:len(start.state)], stats.end_state, angles,
                             report.turns_together, word):
        reasons.append(f"the cycle found by Brent's algorithm ({p:,} steps from step {mu:,}) does not "
                       "close under the traced step: the plain and the traced step disagree, or the "
                       "harness is wrong; no verdict for all time can rest on it")

    reference_ok = report.step_map.period_steps is not None
    swinging = list(section.swinging)
    rest = resting([report.continuous_low[i] for i in swinging],
                   [report.continuous_high[i] for i in swinging])
    final_low = [r["final_low"][i] * scales[i] for i in swinging]
    final_high = [r["final_high"][i] * scales[i] for i in swinging]
    versus_l0 = amplitude_errors(final_low, final_high, [report.continuous_low[i] for i in swinging],
                                 [report.continuous_high[i] for i in swinging])
    versus_l1 = (amplitude_errors(final_low, final_high, [report.step_map.low[i] for i in swinging],
                                  [report.step_map.high[i] for i in swinging])
                 if reference_ok and report.step_map.low is not None else np.zeros(len(swinging)))
    if not reference_ok:
        reasons.append("the float step map (L1) itself does not go round the cycle at this step "
                       "size (a discretisation failure, before any rounding): raise the loop rate "
                       "or choose a higher-order integrator")
    where = "on the integer cycle" if exact else "at the end"
    for label, errors in (("the continuous cycle", versus_l0), ("the float step map", versus_l1)):
        bad = [(f"{names[i]} at rest at {middle[i]:.6g}" if rests else f"{names[i]} {amplitude[i]:.6g}")
               + f" ({100 * error:.3g} % off)"
               for i, error, rests in zip(swinging, errors, rest, strict=True) if error > tol.amplitude]
        if bad and (reference_ok or label == "the continuous cycle"):
            reasons.append(f"amplitude {where} against {label}: {', '.join(bad)} (tolerance "
                           f"{100 * tol.amplitude:g} %)")

    period = period_ppm = period_ppm_l1 = drift = drift_l0 = per_hour = None
    spread = None
    spread_bound = False
    level = report.section_level
    crossings_per_cycle = c["settled_crossings"] if exact else None
    cycle_turns = advance / 2.0**word if section.angle and exact else None
    whole_period = p
    if exact and report.turns_together:
        whole_period = full_period(p, advance, word)  # the full state, angles modulo the word
    if exact and section.angle:
        rhythm = advance > 0
    else:
        rhythm = c["settled_crossings"] >= (1 if exact else 2)
    if rhythm:
        if exact and section.angle:
            period = steps_per_turn(p, advance, word) * section.turns  # exact for all time
        elif exact:
            period = p / c["settled_crossings"]  # exact mean period for all time
        else:
            t_first = crossing_time(*stats.first_bracket, c["first_settled_crossing"], level, section,
                                    word)
            t_last = crossing_time(*stats.last_bracket, c["last_crossing"], level, section, word)
            period = section.turns * (t_last - t_first) / (c["settled_crossings"] - 1)
        period_ppm = 1e6 * (period - report.continuous_period_steps) / report.continuous_period_steps
        drift_l0 = report.steps * (1 / report.continuous_period_steps - 1 / period)
        if reference_ok:
            l1 = report.step_map.period_steps
            period_ppm_l1 = 1e6 * (period - l1) / l1
            drift = report.steps * (1 / l1 - 1 / period)
            per_hour = drift / report.hours
        for label, ppm in (("the continuous cycle", period_ppm), ("the float step map", period_ppm_l1)):
            if ppm is not None and abs(ppm) > tol.period_ppm:
                reasons.append(f"period {period:.6g} steps is {ppm:+.4g} ppm off {label} "
                               f"(tolerance {tol.period_ppm:g} ppm)")
        if drift is not None and abs(drift) > tol.phase_drift_cycles:
            reasons.append(f"phase drifts {drift:+.4g} cycles over {report.hours:g} h against the "
                           f"float step map (tolerance {tol.phase_drift_cycles:g})")
        # On a cycle found modulo a common turn that is not whole turns, the crossings slide round
        # the cycle from turn to turn: bound the return points by the ranges over the whole cycle.
        spread_bound = exact and report.turns_together and advance % (1 << word) != 0
        low_group, high_group = ("settled_low", "settled_high") if spread_bound else ("return_low",
                                                                                       "return_high")
        spread = []
        for i in range(n):
            width = r[high_group][i] - r[low_group][i]
            if i in angles:
                spread.append(width * 2.0**-word)  # a share of the turn
            else:
                full = report.continuous_high[i] - report.continuous_low[i]
                spread.append(width * scales[i] / full if full > 0 else 0.0)
        for name, value in zip(names, spread, strict=True):
            if value > tol.return_spread:
                reasons.append(f"return points of {name} on the Poincare section spread over "
                               f"{100 * value:.3g} % of its range (tolerance "
                               f"{100 * tol.return_spread:g} %)")
    elif exact and section.angle:
        reasons.append(f"no rhythm on the integer cycle: the phase {names[section.state]} does not "
                       f"turn {'forwards' if section.direction > 0 else 'backwards'} over its "
                       f"{p:,} steps")
    elif exact:
        reasons.append(f"no rhythm on the integer cycle: state {names[section.state]} never crosses "
                       f"the section in its {p:,} steps")
    else:
        reasons.append(f"no rhythm after settling: state {names[section.state]} crossed the section "
                       f"{c['settled_crossings']} times in {report.steps - report.settle_steps:,} "
                       "steps")

    if not exact:
        p = c["period"] or None
        if p is not None:
            mu = cycle_start(host, start.state, p, c["period_seen_at"])
        whole_period = None if report.turns_together else p  # modulo a turn: advance unknown here
    if whole_period is not None:
        if whole_period == 1:
            reasons.append("the integer orbit settled to a fixed point (integer period 1 step)")
        elif whole_period < report.continuous_period_steps / 2:
            reasons.append(f"the integer orbit locked into a short cycle of {whole_period} steps, less "
                           f"than half a period of the continuous cycle "
                           f"({report.continuous_period_steps:.4g} steps): a spurious cycle")

    reasons += output_reasons
    if c["limit_settled"]:
        reasons.append(f"an intermediate sat at the word's limit on {c['limit_settled']:,} steps "
                       f"{'of the integer cycle' if exact else 'after settling'} (saturation on the "
                       "cycle)")
    if c["range_settled"]:
        reasons.append(f"an intermediate left the planned range on {c['range_settled']:,} steps "
                       f"{'of the integer cycle' if exact else 'after settling'}")
    moving = [i for i, rests in zip(swinging, rest, strict=True) if not rests]
    if any(amplitude[i] > 2 * report.continuous_amplitude[i] for i in moving):
        reasons.append("the orbit grew to more than twice the cycle's amplitude")
    returns = report.step_map.reached[start.name]
    if reasons and reference_ok and not returns:
        reasons.append(f"the float step map from this start is not on its cycle after "
                       f"{STEP_MAP_CYCLES} cycles either: the start lies outside or at the edge "
                       "of the step map's own basin, so the step size shares the blame")
    events = {
        "count": c["limit_steps"],
        "first_step": c["limit_first"] or None,
        "after_settling": c["limit_settled"],
        "visible": overflow == "saturate",
        "outside_planned_range": {"count": c["range_steps"], "first_step": c["range_first"] or None,
                                  "after_settling": c["range_settled"]},
    }
    equal = [(names[i], names[j]) for i, j in stats.equal_pairs
             if j < len(names) and (i, j) not in report.equal_on_cycle]
    run = DriftRun(
        start=start, amplitude=amplitude, amplitude_first=amplitude_first,
        amplitude_error=plain_number(max(versus_l0, default=0.0)),
        amplitude_error_step_map=plain_number(max(versus_l1, default=0.0)) if reference_ok else None,
        period_steps=period, period_error_ppm=period_ppm, period_error_ppm_step_map=period_ppm_l1,
        phase_drift_cycles=drift, phase_drift_cycles_continuous=drift_l0, return_spread=spread,
        crossings=c["crossings"], settled_crossings=c["settled_crossings"],
        integer_period_steps=whole_period if exact else p,
        integer_period_seen_at=(seen_at if exact else c["period_seen_at"]) or None,
        cycle_entered_at_step=mu, saturation_events=events, step_map_returns=returns,
        reasons=reasons, seconds=seconds,
        horizon="unbounded" if exact else f"{report.hours:g} hours",
        steps_to_cycle=mu if exact else None, cycle_length=p if exact else None,
        crossings_per_cycle=crossings_per_cycle, phase_drift_cycles_per_hour=per_hour,
        decides=start.decides, equal_states=equal, cycle_turns=cycle_turns,
        return_spread_bound=spread_bound, middle=middle, outputs=outputs)
    if reasons and not start.decides:
        run.explanation = explain(run, names)
    return run


def _outputs(program: IntegerProgram, host: HostModule, start: Start,
             steps: int) -> tuple[list[dict], list[str]]:
    """Each output over ``steps`` plain steps in C from ``start``, its memory starting as the init
    function sets it (clamp(u, min, max) of the start): its range, real and stored, and the steps
    at its limits and its slew step; and a reason for every output that left its limits."""
    if not program.outputs:
        return [], []
    memory = golden.initial_outputs(program, np.asarray(start.state, dtype=np.int64))
    found, reasons = [], []
    for slot, stats in zip(program.outputs,
                           output_statistics(host, program, start.state, tuple(memory), steps),
                           strict=True):
        unit = 2.0 ** -slot.fraction_bits
        found.append({"name": slot.name, "unit": slot.unit, "steps": steps,
                      "low": stats.low, "high": stats.high, "low_real": stats.low * unit,
                      "high_real": stats.high * unit, "min": slot.low * unit,
                      "max": slot.high * unit, "at_min_steps": stats.at_min,
                      "at_max_steps": stats.at_max,
                      "at_slew_steps": stats.at_slew if slot.slew_step is not None else None})
        if stats.low < slot.low or stats.high > slot.high:
            reasons.append(f"output {slot.name} left its limits [{slot.low * unit:.6g}, "
                           f"{slot.high * unit:.6g}] {slot.unit}: it reached {stats.low * unit:.6g} to "
                           f"{stats.high * unit:.6g} (stored {stats.low} to {stats.high}, limits "
                           f"{slot.low} to {slot.high}); do not ship this C")
    return found, reasons


def _closes(entry: list[int], end: list[int], angles: list[int], together: bool, word: int) -> bool:
    """Whether the state one found cycle past its entry equals the entry: exactly, or, for a step
    that commutes with a common turn of the angles, up to one (every angle moved by the same
    amount modulo the word, every other state equal)."""
    if not together:
        return list(entry) == list(end)
    plain = all(a == b for i, (a, b) in enumerate(zip(entry, end, strict=True)) if i not in angles)
    turned = {wrap_word(end[i] - entry[i], word) for i in angles}
    return plain and len(turned) <= 1


def explain(run: DriftRun, names: tuple[str, ...]) -> str:
    """Why a robustness start ended somewhere other than the cycle (a finding, not a failure)."""
    if run.integer_period_steps == 1:
        return ("resting state: the integer orbit from this start comes to rest, as in a dead zone "
                "round an equilibrium where every increment rounds to nothing; firmware must "
                "never be reset to such a state")
    if run.equal_states:
        pairs = ", ".join(" = ".join(group) for group in equal_groups(run.equal_states, names))
        index = {name: i for i, name in enumerate(names)}
        kept = all(run.start.state[index[a]] == run.start.state[index[b]] for a, b in run.equal_states)
        how = ("the start has them equal and the integer map keeps that symmetry exactly"
               if kept else "the orbit fell onto that subspace from an asymmetric start")
        return (f"symmetric subspace: {pairs} at every step of the orbit it ends on ({how}); the "
                "designed cycle lies off that subspace")
    if not run.step_map_returns:
        return ("another attractor, or outside the basin: the float step map (L1) from this start "
                "does not reach the cycle either")
    return ("another attractor of the integer map: the float step map (L1) from this start reaches "
            "the cycle, but the integer orbit settles elsewhere")


def equal_groups(pairs: list[tuple[str, str]], names: tuple[str, ...]) -> list[list[str]]:
    """Pairs of equal states gathered into groups of states all equal to one another."""
    group = {name: {name} for name in names}
    for a, b in pairs:
        joined = group[a] | group[b]
        for name in joined:
            group[name] = joined
    seen: list[list[str]] = []
    for name in names:
        members = [m for m in names if m in group[name]]
        if len(members) > 1 and members not in seen:
            seen.append(members)
    return seen
