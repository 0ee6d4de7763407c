"""The long-run drift proof as text and as JSON, both made from the one :class:`DriftReport`."""

from __future__ import annotations

from dataclasses import asdict

from orbitfix.gen.plain_data import plain_number
from orbitfix.verify.proofs.drift import DriftReport, DriftRun, DriftTolerances


def drift_lines(report: DriftReport) -> list[str]:
    """The report as readable lines."""
    names = report.state_names
    exact = sum(1 for run in report.runs if run.horizon == "unbounded")
    lines = [f"Long-run drift of '{report.model}' from {len(report.runs)} starts, in compiled C: "
             f"{exact} judged on the exact integer cycle (for all time), "
             f"{len(report.runs) - exact} run for {report.hours:g} h ({report.steps:,} steps at "
             f"{report.loop_hz:g} Hz) since no cycle was found within {report.cycle_budget:,} steps",
             f"  references: continuous cycle {report.continuous_period_steps:.6f} steps per "
             "cycle, float step map " + _maybe(report.step_map.period_steps, lambda v: f"{v:.6f}",
                                               "has no cycle at this step size"),
             "  amplitudes (continuous / float step map): " + ("; ".join(part for part in (", ".join(
                 f"{n} {a:.6g} / {_number(b)}" for n, a, b, rests in
                 zip(names, report.continuous_amplitude, report.step_map.amplitude, report.resting,
                     strict=True) if a is not None and not rests), _rest_note(report),
                 _angles_note(report)) if part)),
             f"  section: {_section_text(report)}",
             f"  tolerances: amplitude {100 * report.tolerances.amplitude:g} %, period "
             f"{report.tolerances.period_ppm:g} ppm, phase drift "
             f"{report.tolerances.phase_drift_cycles:g} cycles over the run, return spread "
             f"{100 * report.tolerances.return_spread:g} % of the range"]
    if report.seed is not None:
        lines.append(f"  random starts near the equilibria: seed {report.seed}")
    for run in report.runs:
        role = "decides the verdict" if run.decides else "robustness"
        lines.append(f"  from {run.start.name} ({run.start.why}; {role}): {run.outcome.upper()}, "
                     f"horizon {run.horizon}")
        if run.horizon == "unbounded" and run.cycle_turns is not None:
            modulo = " modulo a common turn of the angles" if report.turns_together else ""
            lines.append(f"    on the integer cycle{modulo} from step {run.steps_to_cycle:,}: "
                         f"{run.cycle_length:,} steps, in which {names[report.section.state]} turns "
                         f"{run.cycle_turns:.9g} times"
                         + _maybe(run.integer_period_steps,
                                  lambda v: f" (the whole state repeats every {v:,} steps)"))
        elif run.horizon == "unbounded":
            lines.append(f"    on the integer cycle from step {run.steps_to_cycle:,}: "
                         f"{run.cycle_length:,} steps, {run.crossings_per_cycle} crossings of the "
                         "section per turn")
        lines.append(f"    amplitude {'on the cycle' if run.horizon == 'unbounded' else 'at the end'}: "
                     + ", ".join(_run_amplitude(run, report))
            + _maybe(run.amplitude_error, lambda v: f"; worst error {100 * v:.4g} %"))
        if run.period_steps is not None:
            lines.append(f"    period {run.period_steps:.6f} steps: {run.period_error_ppm:+.4g} ppm "
                         "against the continuous cycle" + _maybe(
                             run.period_error_ppm_step_map,
                             lambda v: f", {v:+.4g} ppm against the float step map") + _maybe(
                             run.phase_drift_cycles,
                             lambda v: f"; phase drift {v:+.4g} cycles over {report.hours:g} h"))
        if run.return_spread_bound and run.return_spread is not None:
            lines.append(f"    return spread at most {100 * max(run.return_spread):.3g} % (a sure bound: "
                         "the crossings slide round the cycle from turn to turn)")
        if run.horizon == "unbounded":
            pass
        elif run.integer_period_steps is not None:
            lines.append(f"    the integer orbit repeats exactly every {run.integer_period_steps:,} "
                         f"steps ({run.integer_period_steps / report.continuous_period_steps:.4g} "
                         f"continuous periods), from step {run.cycle_entered_at_step:,} on")
        else:
            lines.append("    the integer orbit did not repeat within the run")
        events = run.saturation_events
        lines.append(f"    word limit reached on {events['count']:,} steps"
                     + _maybe(events["first_step"], lambda v: f" (first at step {v:,})")
                     + f"; outside the planned range on "
                     f"{events['outside_planned_range']['count']:,} steps")
        lines += [_output_line(output) for output in run.outputs]
        lines += [f"    reason: {reason}" for reason in run.reasons]
        if run.explanation:
            lines.append(f"    finding: {run.explanation}")
    robust = report.robustness
    if robust["starts"]:
        lines.append(f"  robustness: {robust['reach_the_cycle']} of {robust['starts']} other starts "
                     f"reach the cycle ({100 * robust['fraction']:.0f} %); the verdict rests on the "
                     "model's initial state and the runtime corners")
    lines += [f"  note: {note}" for note in report.notes]
    lines.append(f"  verdict: {report.verdict.upper()}")
    return lines


def drift_json(report: DriftReport) -> dict:
    """The ``drift`` object of ``verify --json``: plain Python types only."""
    scale = 2.0 ** -report.fraction_bits
    section = report.section
    return {
        "steps": report.steps,
        "hours": report.hours,
        "loop_hz": report.loop_hz,
        "settle_steps": report.settle_steps,
        "window_steps": report.window_steps,
        "section": ({**section.to_json(report.state_names, report.state_fraction_bits[section.state]),
                     "modulo_common_turn": report.turns_together} if section is not None else
                    {"state": report.state_names[0], "level": report.section_level,
                     "level_real": report.section_level * scale, "direction": "upward"}),
        "planned_limits": report.planned_limits,
        "tolerances": tolerances_json(report.tolerances),
        "references": {
            "continuous": {"period_steps": report.continuous_period_steps,
                           "amplitude": report.continuous_amplitude},
            "step_map": {"period_steps": report.step_map.period_steps,
                         "amplitude": [plain_number(v) for v in report.step_map.amplitude]},
        },
        "cycle_budget_steps": report.cycle_budget,
        "seed": report.seed,
        "runs": [run_json(run, report.fraction_bits, len(report.state_names),
                          report.state_fraction_bits) for run in report.runs],
        "robustness": report.robustness,
        "notes": list(report.notes),
        "seconds": dict(report.seconds),
        "verdict": report.verdict,
    }


def run_json(run: DriftRun, fraction_bits: int, model_states: int,
             state_fraction_bits: tuple[int, ...] = ()) -> dict:
    """One run as plain data (``state_fraction_bits``: each model state's, when they differ; an
    angle's real value is in turns)."""
    bits = list(state_fraction_bits) or [fraction_bits] * model_states
    return {
        "start": run.start.name,
        "why": run.start.why,
        "decides_verdict": run.decides,
        "horizon": run.horizon,
        "steps_to_cycle": run.steps_to_cycle,
        "cycle_length": run.cycle_length,
        "crossings_per_cycle": run.crossings_per_cycle,
        "cycle_turns": run.cycle_turns,
        "initial_state": list(run.start.state),
        "initial_state_real": [v / 2.0 ** b for v, b in zip(run.start.state[:model_states], bits,
                                                             strict=True)],
        "amplitude": run.amplitude,
        "amplitude_first_window": run.amplitude_first,
        "amplitude_error": run.amplitude_error,
        "amplitude_error_step_map": run.amplitude_error_step_map,
        "period_steps": run.period_steps,
        "period_error_ppm": run.period_error_ppm,
        "period_error_ppm_step_map": run.period_error_ppm_step_map,
        "phase_drift_cycles": run.phase_drift_cycles,
        "phase_drift_cycles_continuous": run.phase_drift_cycles_continuous,
        "phase_drift_cycles_per_hour": run.phase_drift_cycles_per_hour,
        "return_spread": run.return_spread,
        "return_spread_is_bound": run.return_spread_bound,
        "middle": run.middle,
        "crossings": run.crossings,
        "settled_crossings": run.settled_crossings,
        "integer_period_steps": run.integer_period_steps,
        "integer_period_seen_at_step": run.integer_period_seen_at,
        "cycle_entered_at_step": run.cycle_entered_at_step,
        "saturation_events": run.saturation_events,
        "step_map_returns_from_this_start": run.step_map_returns,
        "verdict": run.outcome,
        "reasons": list(run.reasons),
        "explanation": run.explanation,
        "equal_states": [list(pair) for pair in run.equal_states],
        "outputs": [dict(output) for output in run.outputs],
        "seconds": run.seconds,
        **({"references": run.against} if run.against else {}),
    }


def tolerances_json(tolerances: DriftTolerances) -> dict:
    """The tolerances as plain data."""
    return asdict(tolerances)


def _output_line(output: dict) -> str:
    """One output over one run: its range and how often it met each limit."""
    unit = f" {output['unit']}" if output["unit"] else ""
    slew = ("" if output["at_slew_steps"] is None else
            f", moved by its slew step on {output['at_slew_steps']:,}")
    return (f"    output {output['name']}: {output['low_real']:.6g} to {output['high_real']:.6g}{unit}"
            f" (stored {output['low']} to {output['high']}; limits {output['min']:.6g} to "
            f"{output['max']:.6g}) over {output['steps']:,} steps; at min on "
            f"{output['at_min_steps']:,}, at max on {output['at_max_steps']:,}{slew}")


def _number(value: float | None) -> str:
    return "-" if value is None else f"{value:.6g}"


def _rest_note(report: DriftReport) -> str:
    rest = [f"{n} {0.5 * (lo + hi):.6g}" for n, lo, hi, rests, a in
            zip(report.state_names, report.continuous_low, report.continuous_high, report.resting,
                report.continuous_amplitude, strict=False) if rests and a is not None]
    return f"at rest on the cycle (judged by level): {', '.join(rest)}" if rest else ""


def _run_amplitude(run: DriftRun, report: DriftReport) -> list[str]:
    parts = []
    for i, (n, a) in enumerate(zip(report.state_names, run.amplitude, strict=True)):
        if a is None:
            continue
        rests = report.resting[i] and i < len(run.middle) and run.middle[i] is not None
        parts.append(f"{n} at {run.middle[i]:.9g}" if rests else f"{n} {a:.6g}")
    return parts


def _angles_note(report: DriftReport) -> str:
    turning = [n for n, a in zip(report.state_names, report.continuous_amplitude, strict=True) if a is None]
    return f"{', '.join(turning)}: angles, no amplitude" if turning else ""


def _section_text(report: DriftReport) -> str:
    section = report.section
    if section is None:
        return f"{report.state_names[0]} rising through {report.section_level}"
    name = report.state_names[section.state]
    if section.angle:
        way = "forwards" if section.direction > 0 else "backwards"
        return (f"{name} passing the phase {section.level:g} turn {way}, one crossing per turn, "
                f"{section.turns} turn(s) per cycle"
                + ("; states compared modulo a common turn of the angles" if report.turns_together
                   else ""))
    return f"{name} rising through {section.level:.6g} (the middle of its range on the cycle)"


def _maybe(value: object, text, absent: str = "") -> str:
    return absent if value is None else text(value)

