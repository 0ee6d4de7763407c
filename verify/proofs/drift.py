"""The long-run drift proof: the compiled C (layer L3) run for hours of loop time from several
starts, against the float step map (L1) and the continuous cycle (L0).

Every long run happens in C (``templates/drift_harness.c.j2``): the harness calls the firmware's
traced step and keeps running statistics, so nothing per step is stored or touched by Python. What
the harness measures, and what this module makes of it:

- amplitude: each state's half peak-to-peak range over the last few cycles of the run;
- period: upward crossings of state 0 through a section level (the middle of its range on the
  cycle), with sub-step linear interpolation at the first crossing after settling and at the last;
- phase drift: the period error accumulated over the whole run, in cycles;
- return spread: each state interpolated onto the section at every crossing after settling;
- saturation events: steps where an intermediate sits at the word's limit (visible only when the
  word saturates) and steps where one lies outside the planner's range (largest signal on the
  cycle times the margin), which holds for both overflow modes;
- the integer period: a finite-state orbit always ends up periodic; Brent's algorithm finds that
  exact period in steps over the run.
"""

from __future__ import annotations

import math
import time
from dataclasses import asdict, dataclass, field, replace

import numpy as np

from orbitfix.gen import __version__
from orbitfix.gen.c.emit import HARNESS_DECLARATIONS, environment, render_host_harness, render_model
from orbitfix.gen.c.naming import CNames
from orbitfix.gen.errors import InputError, UnsupportedError
from orbitfix.gen.pipeline import Design
from orbitfix.gen.program.lowering import evaluate_real
from orbitfix.gen.timing.work_size import Work, drift_work, refuse_beyond_machine
from orbitfix.verify.targets.host_build import HostModule, build_host_module

DRIFT_DECLARATIONS = """\
void orbitfix_drift_run(const int32_t *start, uint64_t steps, uint64_t settle, uint64_t window,
                        int32_t section_level, uint64_t *counts,
                        int32_t *ranges, int32_t *brackets, int32_t *end_state);
uint64_t orbitfix_drift_period(const int32_t *start, uint64_t budget, uint64_t *seen_at);
uint64_t orbitfix_drift_cycle_start(const int32_t *start, uint64_t period, uint64_t budget);
"""

# Slots of the harness's counts array (the enum at the top of drift_harness.c.j2).
COUNT_FIELDS = ("crossings", "settled_crossings", "first_settled_crossing", "last_crossing",
                "limit_steps", "limit_first", "limit_settled", "range_steps", "range_first",
                "range_settled", "period", "period_seen_at")
RANGE_GROUPS = ("settled_low", "settled_high", "first_low", "first_high", "final_low",
                "final_high", "return_low", "return_high")

NO_ANGLES = ("the long-run drift test does not handle angle states (phases) yet: its section and "
             "amplitudes assume states that swing rather than turn; run verify with --skip-drift")

LONGEST_RUN = 1 << 62
FEWEST_CYCLES = 16      # a run shorter than this cannot settle and still measure a period
WINDOW_CYCLES = 3       # the amplitude windows, in cycles
STEP_MAP_CYCLES = 40    # the float step map's reference run, in cycles
STEP_MAP_MEASURED = 15  # of which the last this many are measured


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

    def to_json(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class Start:
    """One initial state of a drift run, in integer units, and why it was chosen."""

    name: str
    state: tuple[int, ...]
    why: str


@dataclass(frozen=True)
class HarnessStatistics:
    """What the C harness returns for one run: counts, ranges and crossing brackets (integers)."""

    counts: dict[str, int]
    ranges: dict[str, list[int]]
    first_bracket: tuple[list[int], list[int]]
    last_bracket: tuple[list[int], list[int]]
    end_state: list[int]
    seconds: float


@dataclass(frozen=True)
class StepMapReference:
    """The float step map (L1) run from the continuous cycle's point: period and amplitudes
    (``period_steps`` is None when the step map does not go round the cycle at all).

    reached : for each start, whether the float step map from it is on the cycle after
        STEP_MAP_CYCLES cycles (amplitudes within the amplitude tolerance of the reference).
    """

    period_steps: float | None
    amplitude: list[float]
    reached: dict[str, bool]


@dataclass
class DriftRun:
    """The outcome of one long run from one start."""

    start: Start
    amplitude: list[float]
    amplitude_first: list[float]
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

    @property
    def verdict(self) -> str:
        return "fail" if self.reasons else "pass"

    def to_json(self, fraction_bits: int, model_states: int) -> dict:
        return {
            "start": self.start.name,
            "why": self.start.why,
            "initial_state": list(self.start.state),
            "initial_state_real": [v / 2.0 ** fraction_bits
                                   for v in self.start.state[:model_states]],
            "amplitude": self.amplitude,
            "amplitude_first_window": self.amplitude_first,
            "amplitude_error": self.amplitude_error,
            "amplitude_error_step_map": self.amplitude_error_step_map,
            "period_steps": self.period_steps,
            "period_error_ppm": self.period_error_ppm,
            "period_error_ppm_step_map": self.period_error_ppm_step_map,
            "phase_drift_cycles": self.phase_drift_cycles,
            "phase_drift_cycles_continuous": self.phase_drift_cycles_continuous,
            "return_spread": self.return_spread,
            "crossings": self.crossings,
            "settled_crossings": self.settled_crossings,
            "integer_period_steps": self.integer_period_steps,
            "integer_period_seen_at_step": self.integer_period_seen_at,
            "cycle_entered_at_step": self.cycle_entered_at_step,
            "saturation_events": self.saturation_events,
            "step_map_returns_from_this_start": self.step_map_returns,
            "verdict": self.verdict,
            "reasons": list(self.reasons),
            "seconds": self.seconds,
            **({"references": self.against} if self.against else {}),
        }


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
    continuous_amplitude: list[float]
    step_map: StepMapReference
    runs: list[DriftRun]
    notes: list[str] = field(default_factory=list)
    seconds: dict[str, float] = field(default_factory=dict)

    @property
    def verdict(self) -> str:
        return "fail" if any(run.verdict == "fail" for run in self.runs) else "pass"

    def to_json(self) -> dict:
        """The ``drift`` object of ``verify --json``: plain Python types only."""
        scale = 2.0 ** -self.fraction_bits
        return {
            "steps": self.steps,
            "hours": self.hours,
            "loop_hz": self.loop_hz,
            "settle_steps": self.settle_steps,
            "window_steps": self.window_steps,
            "section": {"state": self.state_names[0], "level": self.section_level,
                        "level_real": self.section_level * scale, "direction": "upward"},
            "planned_limits": self.planned_limits,
            "tolerances": self.tolerances.to_json(),
            "references": {
                "continuous": {"period_steps": self.continuous_period_steps,
                               "amplitude": self.continuous_amplitude},
                "step_map": {"period_steps": self.step_map.period_steps,
                             "amplitude": [_finite(v) for v in self.step_map.amplitude]},
            },
            "runs": [run.to_json(self.fraction_bits, len(self.state_names)) for run in self.runs],
            "notes": list(self.notes),
            "seconds": dict(self.seconds),
            "verdict": self.verdict,
        }

    def describe(self) -> list[str]:
        """The report as readable lines."""
        names = self.state_names
        lines = [f"Long-run drift of '{self.model}': {self.steps:,} steps "
                 f"({self.hours:g} h at {self.loop_hz:g} Hz) from {len(self.runs)} starts, in "
                 "compiled C",
                 f"  references: continuous cycle {self.continuous_period_steps:.6f} steps per "
                 "cycle, float step map " + _maybe(self.step_map.period_steps, lambda v: f"{v:.6f}",
                                                   "has no cycle at this step size"),
                 "  amplitudes (continuous / float step map): " + ", ".join(
                     f"{n} {a:.6g} / {b:.6g}" for n, a, b in
                     zip(names, self.continuous_amplitude, self.step_map.amplitude, strict=True)),
                 f"  tolerances: amplitude {100 * self.tolerances.amplitude:g} %, period "
                 f"{self.tolerances.period_ppm:g} ppm, phase drift "
                 f"{self.tolerances.phase_drift_cycles:g} cycles over the run, return spread "
                 f"{100 * self.tolerances.return_spread:g} % of the range"]
        for run in self.runs:
            lines.append(f"  from {run.start.name} ({run.start.why}): {run.verdict.upper()}")
            lines.append("    amplitude at the end: " + ", ".join(
                f"{n} {a:.6g}" for n, a in zip(names, run.amplitude, strict=True))
                + _maybe(run.amplitude_error, lambda v: f"; worst error {100 * v:.4g} %"))
            if run.period_steps is not None:
                lines.append(f"    period {run.period_steps:.6f} steps: {run.period_error_ppm:+.4g} ppm "
                             "against the continuous cycle" + _maybe(
                                 run.period_error_ppm_step_map,
                                 lambda v: f", {v:+.4g} ppm against the float step map") + _maybe(
                                 run.phase_drift_cycles,
                                 lambda v: f"; phase drift {v:+.4g} cycles over the run"))
            if run.integer_period_steps is not None:
                lines.append(f"    the integer orbit repeats exactly every {run.integer_period_steps:,} "
                             f"steps ({run.integer_period_steps / self.continuous_period_steps:.4g} "
                             f"continuous periods), from step {run.cycle_entered_at_step:,} on")
            else:
                lines.append("    the integer orbit did not repeat within the run")
            events = run.saturation_events
            lines.append(f"    word limit reached on {events['count']:,} steps"
                         + _maybe(events["first_step"], lambda v: f" (first at step {v:,})")
                         + f"; outside the planned range on "
                         f"{events['outside_planned_range']['count']:,} steps")
            lines += [f"    reason: {reason}" for reason in run.reasons]
        lines += [f"  note: {note}" for note in self.notes]
        lines.append(f"  verdict: {self.verdict.upper()}")
        return lines


def _finite(value: float) -> float | None:
    return value if math.isfinite(value) else None


def _maybe(value: object, text, absent: str = "") -> str:
    return absent if value is None else text(value)


def render_drift_harness(design: Design) -> str:
    """The drift harness C for one design."""
    model = design.model
    names = CNames(model.name)
    bits = design.plan.program.word_bits
    program = design.plan.program
    return environment().get_template("drift_harness.c.j2").render(
        names=names, fields=[names.field(n) for n in program.state_names],
        count=len(program.state_names),
        version=__version__, word_type=f"int{bits}_t", word_bits=bits,
        declarations=DRIFT_DECLARATIONS, limits=design.plan.planned_limits())


def build_drift_module(design: Design, sources: dict[str, str] | None = None) -> HostModule:
    """Firmware, host harness and drift harness compiled into one module (strict flags).

    sources : the firmware files NAME.h and NAME.c (e.g. from ``verify.host_check.read_sources``);
        generated afresh from the design when not given.
    """
    names = CNames(design.model.name)
    files = sources if sources is not None else render_model(
        design.model, design.timing, design.integrator, design.plan)
    return build_host_module(
        sources={**files, "drift_harness.c": render_drift_harness(design)},
        harness=render_host_harness(design.model, design.plan.program),
        header=names.header, declarations=HARNESS_DECLARATIONS + DRIFT_DECLARATIONS)


def harness_statistics(host: HostModule, start: tuple[int, ...], steps: int, settle: int,
                       window: int, section_level: int) -> HarnessStatistics:
    """One streaming run in C from ``start`` (integer units) with the statistics kept on the way."""
    n = len(start)
    ffi = host.ffi
    begin = np.array(start, dtype=np.int32)
    counts = np.zeros(len(COUNT_FIELDS), dtype=np.uint64)
    ranges = np.zeros(len(RANGE_GROUPS) * n, dtype=np.int32)
    brackets = np.zeros(4 * n, dtype=np.int32)
    end = np.zeros(n, dtype=np.int32)
    started = time.perf_counter()
    host.lib.orbitfix_drift_run(ffi.from_buffer("int32_t[]", begin), steps, settle, window,
                                section_level,
                                ffi.from_buffer("uint64_t[]", counts),
                                ffi.from_buffer("int32_t[]", ranges),
                                ffi.from_buffer("int32_t[]", brackets),
                                ffi.from_buffer("int32_t[]", end))
    seconds = time.perf_counter() - started
    b = [int(v) for v in brackets]
    return HarnessStatistics(
        counts={name: int(v) for name, v in zip(COUNT_FIELDS, counts, strict=True)},
        ranges={name: [int(v) for v in ranges[i * n:(i + 1) * n]]
                for i, name in enumerate(RANGE_GROUPS)},
        first_bracket=(b[:n], b[n:2 * n]), last_bracket=(b[2 * n:3 * n], b[3 * n:]),
        end_state=[int(v) for v in end], seconds=seconds)


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
                  level: float) -> float:
    """The (fractional) step at which state 0 crossed ``level`` between steps step-1 and step."""
    low, high = float(before[0]), float(after[0])
    return step - 1 + (level - low) / (high - low)


def choose_starts(design: Design, equilibrium_offset: float = 1e-3) -> tuple[list[Start], list[str]]:
    """The initial states of the drift runs, and notes on any that had to be left out.

    equilibrium_offset : the distance from the equilibrium, as a fraction of each state's range on
        the cycle (at least 4 LSB), so that the start can leave an unstable equilibrium at all: a
        start only a few LSB away sits in the rounding's dead zone, where every increment rounds
        to nothing (that would be a finding about starting from rest, not about drift).
    """
    plan = design.plan
    program = plan.program
    fraction = plan.signal_format.fraction_bits
    scale = 2.0 ** fraction
    cycle = design.analysis.cycle
    low, high = np.asarray(cycle.state_min), np.asarray(cycle.state_max)
    centre, half = (low + high) / 2, (high - low) / 2
    word_max = program.word_max
    n = program.model_state_count
    held = tuple(plan.initial_state[n:])  # runtime parameters stay at their nominal values
    starts = [Start("nominal", tuple(plan.initial_state), "the model's initial state")]
    notes: list[str] = []

    inside = [e for e in design.analysis.equilibria
              if np.all(e.state >= low) and np.all(e.state <= high)]
    if not inside:
        notes.append("no equilibrium lies inside the cycle's bounding box, so there is no run "
                     "from near the equilibrium")
    else:
        equilibrium = min(inside, key=lambda e: float(np.max(np.abs(e.state - centre))))
        if equilibrium.stable:
            notes.append(f"the equilibrium inside the cycle is a {equilibrium.kind} of the "
                         "continuous model, so a start near it is not expected to reach the cycle; "
                         "that run is left out")
        else:
            offset = np.maximum(np.round(equilibrium_offset * 2 * half * scale), 4)
            point = np.round(equilibrium.state * scale) + offset
            starts.append(Start("near the equilibrium", _fit(point, word_max) + held,
                                f"the {equilibrium.kind} plus {equilibrium_offset:g} of the "
                                "cycle's range"))

    corner = centre + 0.95 * plan.margin * half
    starts.append(Start("near the basin edge", _fit(np.round(corner * scale), word_max) + held,
                        f"just inside the upper corner of the cycle's bounding box scaled by the "
                        f"planner's margin of {plan.margin:g} (a stand-in for the basin's edge)"))
    near = np.array(plan.initial_state, dtype=float)
    near[0] = word_max - word_max // 64
    starts.append(Start("near saturation", _fit(near, word_max),
                        f"{program.state_names[0]} at 63/64 of the word's limit, the other states "
                        "at their initial values"))
    return starts, notes


def _fit(point: np.ndarray, word_max: int) -> tuple[int, ...]:
    return tuple(int(min(max(v, -word_max), word_max)) for v in point)


def step_map_reference(design: Design, level: float, starts: list[Start],
                       amplitude_tolerance: float) -> StepMapReference:
    """Run the float step map (L1) from the cycle's point and from every start, vectorised."""
    program = design.plan.program
    n = program.model_state_count
    scale = 2.0 ** -np.array(program.state_fraction_bits, dtype=float)
    spc = design.timing.steps_per_cycle
    total = round(STEP_MAP_CYCLES * spc)
    measured = round(STEP_MAP_MEASURED * spc)
    nominal = [v for p in design.model.runtime_parameters for v in (p.value, p.value)]
    columns = [np.concatenate([np.asarray(design.analysis.cycle.point, dtype=float), nominal])]
    columns += [np.array(s.state, dtype=float) * scale for s in starts]
    x = np.stack(columns, axis=1)
    record = np.empty((measured + 1, x.shape[0], x.shape[1]))
    with np.errstate(all="ignore"):
        for k in range(total):
            if k >= total - measured - 1:
                record[k - (total - measured - 1)] = x
            values = evaluate_real(program, x)
            x = np.stack([values[i] for i in program.next_state])
        record[-1] = x
    amplitude = (np.max(record, axis=0) - np.min(record, axis=0))[:n] / 2
    first = record[:-1, 0, 0]
    second = record[1:, 0, 0]
    up = np.flatnonzero((first < level) & (second >= level))
    reference = amplitude[:, 0]
    if up.size < 2 or not np.all(np.isfinite(reference)):
        return StepMapReference(period_steps=None, amplitude=[float("nan")] * len(reference),
                                reached={s.name: False for s in starts})
    times = up + (level - first[up]) / (second[up] - first[up])
    period = float((times[-1] - times[0]) / (up.size - 1))
    reached = {}
    for index, start in enumerate(starts, start=1):
        error = np.abs(amplitude[:, index] - reference) / reference
        reached[start.name] = bool(np.all(np.isfinite(error)) and np.all(error <= amplitude_tolerance))
    return StepMapReference(period_steps=period, amplitude=[float(v) for v in reference],
                            reached=reached)


def run_drift(design: Design, hours: float = 24.0, tolerances: DriftTolerances | None = None,
              settle_fraction: float = 0.25, equilibrium_offset: float = 1e-3,
              host: HostModule | None = None) -> DriftReport:
    """The long-run drift proof: steps = round(hours * 3600 * loop rate) from every start, and,
    for a model with runtime parameters, from its initial state at every corner of their ranges
    (judged against the cycle at that corner).

    settle_fraction : the first part of each run that is left out of the period, return-point
        and after-settling counts (the way onto the cycle from a far start).
    host : a module from ``build_drift_module`` (built here when not given).
    """
    if design.plan.program.angle_states:
        raise UnsupportedError(NO_ANGLES)
    refuse_beyond_machine(drift_size(design, hours), "give fewer --hours or a lower loop_hz")
    if host is None:
        started = time.perf_counter()
        host = build_drift_module(design)
        built_in = time.perf_counter() - started
    else:
        built_in = 0.0
    report = _drift_report(design, hours, tolerances, settle_fraction, equilibrium_offset, host)
    report.seconds["host_build"] = built_in
    for corner, cycle in design.corners:
        where = ", ".join(f"{name} = {value:g}" for name, value in corner.items())
        at_corner = _drift_report(_at_corner(design, corner, cycle), hours, tolerances,
                                  settle_fraction, equilibrium_offset, host, only_nominal=True)
        for run in at_corner.runs:
            run.start = replace(run.start, name=where,
                                why=f"the initial state with {where} (a corner of the runtime "
                                    "ranges), judged against the cycle there")
            run.against = {"continuous_period_steps": at_corner.continuous_period_steps,
                           "continuous_amplitude": at_corner.continuous_amplitude,
                           "step_map_period_steps": at_corner.step_map.period_steps}
            report.runs.append(run)
    return report


def drift_size(design: Design, hours: float) -> Work:
    """The size of :func:`run_drift` before it starts (at most four starts, and one run per
    corner of the runtime ranges)."""
    program, timing = design.plan.program, design.timing

    def one(runs: int) -> Work:
        return drift_work(len(program.ops), len(program.state_names), timing.steps_per_cycle,
                          timing.loop_hz, hours, runs, STEP_MAP_CYCLES, STEP_MAP_MEASURED,
                          reference_columns=runs + 1)

    total = one(4)
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


def _drift_report(design: Design, hours: float, tolerances: DriftTolerances | None,
                  settle_fraction: float, equilibrium_offset: float, host: HostModule,
                  only_nominal: bool = False) -> DriftReport:
    """The runs of one design (at one setting of the runtime parameters)."""
    tolerances = tolerances if tolerances is not None else DriftTolerances()
    timing, plan = design.timing, design.plan
    program = plan.program
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
    settle = round(settle_fraction * steps)
    window = max(1, round(WINDOW_CYCLES * spc))
    fraction = plan.signal_format.fraction_bits
    scale = 2.0 ** fraction
    cycle = design.analysis.cycle
    low, high = np.asarray(cycle.state_min), np.asarray(cycle.state_max)
    level = round(float(low[0] + high[0]) / 2 * scale)
    starts, notes = choose_starts(design, equilibrium_offset)
    if only_nominal:
        starts, notes = starts[:1], []
    seconds: dict[str, float] = {}

    started = time.perf_counter()
    reference = step_map_reference(design, level / scale, starts, tolerances.amplitude)
    seconds["step_map_reference"] = time.perf_counter() - started

    continuous_amplitude = [float(v) for v in (high - low) / 2]
    report = DriftReport(
        model=design.model.name, hours=float(hours), loop_hz=timing.loop_hz, steps=steps,
        settle_steps=settle, window_steps=window, section_level=level,
        planned_limits=plan.planned_limits(), fraction_bits=fraction,
        state_names=program.state_names[:program.model_state_count],
        tolerances=tolerances, continuous_period_steps=spc,
        continuous_amplitude=continuous_amplitude, step_map=reference, runs=[], notes=notes,
        seconds=seconds)
    started = time.perf_counter()
    for start in starts:
        report.runs.append(_one_run(report, host, start, program.overflow))
    seconds["runs"] = time.perf_counter() - started
    return report


def _one_run(report: DriftReport, host: HostModule, start: Start, overflow: str) -> DriftRun:
    """One long run in C and its judgement against the references and the tolerances."""
    tol = report.tolerances
    scale = 2.0 ** -report.fraction_bits
    stats = harness_statistics(host, start.state, report.steps, report.settle_steps,
                               report.window_steps, report.section_level)
    seconds = stats.seconds
    names = report.state_names
    c = stats.counts
    r = {group: values[:len(names)] for group, values in stats.ranges.items()}
    amplitude = [(hi - lo) / 2 * scale for lo, hi in zip(r["final_low"], r["final_high"], strict=True)]
    amplitude_first = [(hi - lo) / 2 * scale
                       for lo, hi in zip(r["first_low"], r["first_high"], strict=True)]
    reasons: list[str] = []

    reference_ok = report.step_map.period_steps is not None

    def relative(reference: list[float]) -> list[float]:
        return [abs(a - b) / b if b > 0 else math.inf for a, b in zip(amplitude, reference, strict=True)]

    versus_l0 = relative(report.continuous_amplitude)
    versus_l1 = relative(report.step_map.amplitude)
    if not reference_ok:
        reasons.append("the float step map (L1) itself does not go round the cycle at this step "
                       "size (a discretisation failure, before any rounding): raise the loop rate "
                       "or choose a higher-order integrator")
    for label, errors in (("the continuous cycle", versus_l0), ("the float step map", versus_l1)):
        bad = [f"{name} {value:.6g} ({100 * error:.3g} % off)"
               for name, error, value in zip(names, errors, amplitude, strict=True)
               if error > tol.amplitude]
        if bad and (reference_ok or label == "the continuous cycle"):
            reasons.append(f"amplitude at the end against {label}: {', '.join(bad)} (tolerance "
                           f"{100 * tol.amplitude:g} %)")

    period = period_ppm = period_ppm_l1 = drift = drift_l0 = None
    spread = None
    level = report.section_level
    if c["settled_crossings"] >= 2:
        t_first = crossing_time(*stats.first_bracket, c["first_settled_crossing"], level)
        t_last = crossing_time(*stats.last_bracket, c["last_crossing"], level)
        period = (t_last - t_first) / (c["settled_crossings"] - 1)
        period_ppm = 1e6 * (period - report.continuous_period_steps) / report.continuous_period_steps
        drift_l0 = report.steps * (1 / report.continuous_period_steps - 1 / period)
        if reference_ok:
            l1 = report.step_map.period_steps
            period_ppm_l1 = 1e6 * (period - l1) / l1
            drift = report.steps * (1 / l1 - 1 / period)
        for label, ppm in (("the continuous cycle", period_ppm), ("the float step map", period_ppm_l1)):
            if ppm is not None and abs(ppm) > tol.period_ppm:
                reasons.append(f"period {period:.6g} steps is {ppm:+.4g} ppm off {label} "
                               f"(tolerance {tol.period_ppm:g} ppm)")
        if drift is not None and abs(drift) > tol.phase_drift_cycles:
            reasons.append(f"phase drifts {drift:+.4g} cycles over the run against the float step "
                           f"map (tolerance {tol.phase_drift_cycles:g})")
        ranges = [2 * a for a in report.continuous_amplitude]
        spread = [(hi - lo) * scale / width if width > 0 else 0.0
                  for lo, hi, width in zip(r["return_low"], r["return_high"], ranges, strict=True)]
        for name, value in zip(names, spread, strict=True):
            if value > tol.return_spread:
                reasons.append(f"return points of {name} on the Poincare section spread over "
                               f"{100 * value:.3g} % of its range (tolerance "
                               f"{100 * tol.return_spread:g} %)")
    else:
        reasons.append(f"no rhythm after settling: state {names[0]} crossed the section "
                       f"{c['settled_crossings']} times in {report.steps - report.settle_steps:,} "
                       "steps")

    p = c["period"] or None
    mu = None
    if p is not None:
        started = time.perf_counter()
        mu = cycle_start(host, start.state, p, c["period_seen_at"])
        seconds += time.perf_counter() - started
        if p == 1:
            reasons.append("the integer orbit settled to a fixed point (integer period 1 step)")
        elif p < report.continuous_period_steps / 2:
            reasons.append(f"the integer orbit locked into a short cycle of {p} steps, less than half "
                           f"a period of the continuous cycle ({report.continuous_period_steps:.4g} "
                           "steps): a spurious cycle")

    if c["limit_settled"]:
        reasons.append(f"an intermediate sat at the word's limit on {c['limit_settled']:,} steps "
                       "after settling (saturation on the cycle)")
    if c["range_settled"]:
        reasons.append(f"an intermediate left the planned range on {c['range_settled']:,} steps "
                       "after settling")
    if any(a > 2 * b for a, b in zip(amplitude, report.continuous_amplitude, strict=True)):
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
    return DriftRun(
        start=start, amplitude=amplitude, amplitude_first=amplitude_first,
        amplitude_error=_finite(max(versus_l0)),
        amplitude_error_step_map=_finite(max(versus_l1)) if reference_ok else None,
        period_steps=period, period_error_ppm=period_ppm, period_error_ppm_step_map=period_ppm_l1,
        phase_drift_cycles=drift, phase_drift_cycles_continuous=drift_l0, return_spread=spread,
        crossings=c["crossings"], settled_crossings=c["settled_crossings"],
        integer_period_steps=p, integer_period_seen_at=c["period_seen_at"] or None,
        cycle_entered_at_step=mu, saturation_events=events, step_map_returns=returns,
        reasons=reasons, seconds=seconds)
