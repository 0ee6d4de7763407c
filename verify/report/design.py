"""A design (timing, integrator, fixed-point plan) and the plan's studies as text and as data:
what ``gen``, ``verify`` and ``plan`` print about the plan they use."""

from __future__ import annotations

from orbitfix.gen.pipeline import Design
from orbitfix.gen.program.integer_program import OutputSlot
from orbitfix.gen.study.dead_zones import DeadZone
from orbitfix.gen.study.discrete_cycle import CycleTolerance
from orbitfix.gen.study.plan_study import CoefficientEffect, SearchResult
from orbitfix.gen.study.start_path import StartPath
from orbitfix.gen.study.trim import ExactPeriod, Trim
from orbitfix.gen.timing.integrators import INTEGRATORS


def design_json(built: Design) -> dict:
    """The design as plain data: model, parameters, integrator, timing, formats, fingerprint."""
    return {
        "model": built.model.name,
        "params": built.model.parameter_values,
        "integrator": built.integrator.name,
        "step_size": built.timing.step,
        "timing": built.timing.to_json(),
        "formats": built.plan.formats_json(),
        "model_fingerprint": built.model.fingerprint(),
        "program_fingerprint": built.plan.program.fingerprint(),
        "warnings": list(built.plan.warnings),
        "trimmed": built.plan.trim or None,
        **({"outputs": [output_json(slot, built.plan.program.word_bits)
                        for slot in built.plan.program.outputs]}
           if built.plan.program.outputs else {}),
    }


def output_json(slot: OutputSlot, word_bits: int) -> dict:
    """One output's plan: its format, its limits as stored and in its unit, its slew step."""
    scale = 2.0 ** slot.fraction_bits
    return {"name": slot.name, "unit": slot.unit,
            "format": f"Q{word_bits - slot.fraction_bits}.{slot.fraction_bits}",
            "fraction_bits": slot.fraction_bits, "low": slot.low, "high": slot.high,
            "low_real": slot.low / scale, "high_real": slot.high / scale,
            "slew_step": slot.slew_step}


def design_lines(built: Design) -> list[str]:
    """Two lines (plus warnings): the timing, and the integer arithmetic of the plan."""
    t, plan = built.timing, built.plan
    lines = [
        f"model {built.model.name}: cycle period {t.model_period:.6g} model time units; "
        f"{t.cycle_hz:g} Hz at a {t.loop_hz:g} Hz loop gives a step of {t.step:.6g} "
        f"({t.steps_per_cycle:.1f} steps per cycle)",
        f"integrator {built.integrator.name}; states {plan.signal_format.name}, each "
        f"intermediate in its own format; {plan.program.word_bits}-bit words, "
        f"{plan.program.product_bits}-bit products, rounding "
        f"{plan.program.rounding}, overflow {plan.program.overflow}; largest state "
        f"{plan.largest_signal:.4g} on the cycle and start-up path, {plan.headroom_bits:.2f} bits "
        "of headroom",
    ]
    lines += [f"  warning: {w}" for w in plan.warnings]
    if plan.trim:
        lines.append(f"  {plan.trim}")
    return lines


def plan_json(built: Design) -> dict:
    """The plan's tables as data: every value's range and format, the constants, the warnings."""
    plan = built.plan
    return {"integrator": built.integrator.name, "step_size": built.timing.step,
            "formats": plan.formats_json(), "signals": plan.signal_table(),
            "warnings": list(plan.warnings)}


def plan_lines(built: Design) -> list[str]:
    """The plan's tables for people: every value's range, sure bound and format; every constant."""
    plan, timing = built.plan, built.timing
    program = plan.program
    lines = [
        f"fixed-point plan for {built.model.name}: {built.integrator.name}, step "
        f"{timing.step:.6g} model time units ({timing.loop_hz:g} Hz loop, {timing.cycle_hz:g} Hz "
        "cycle)",
        f"states {plan.signal_format.name}, each intermediate in its own format: "
        f"{program.word_bits}-bit words, {program.product_bits}-bit products, rounding "
        f"{program.rounding}, overflow {program.overflow}",
        "formats hold each value's sure bound over the planning box ("
        + ", ".join(f"{n} in [{lo:.4g}, {hi:.4g}]" for n, (lo, hi) in
                    zip(program.state_names, plan.box, strict=True))
        + f") times a margin of {plan.margin:g}",
        "",
        f"  {'value':>5}  {'kind':<6} {'range on the cycle':>24}  {'sure bound':>10}  "
        f"{'format':<7} {'headroom':>9}  what it is",
    ]
    for row in plan.signal_table():
        bound = max(abs(row["sure_min"]), abs(row["sure_max"]))
        lines.append(f"  v{row['value']:<4}  {row['kind']:<6} {row['min']:>11.5g} .. "
                     f"{row['max']:<10.5g}  {bound:>10.4g}  {row['format']:<7} "
                     f"{row['headroom_bits']:>5.2f} bit  {row['note']}")
    lines.append(f"  quantisation step of the states: {plan.signal_format.step:.3g}")
    lines += ["", f"  {'constant':<10} {'format':<8} {'stored':>12}  {'stands for':>22}  "
                  f"{'relative error':>14}  first use"]
    for c in plan.constants:
        relative = c.error / c.real if c.real else 0.0
        lines.append(f"  v{c.index:<9} {c.format.name:<8} {c.stored:>12}  {c.real:>22.15g}  "
                     f"{relative:>14.2e}  {c.note}")
    lines += [f"  warning: {w}" for w in plan.warnings]
    return lines


def coefficient_line(effect: CoefficientEffect) -> str:
    """What rounding the constants alone does to the cycle, in one line."""
    if effect.warning:
        return f"  warning: {effect.warning}"
    if effect.period_shift_ppm is None:
        return "  rounding of the constants: not measured (no cycle in the float step map)"
    return (f"  rounding the constants moves the cycle's period by {effect.period_shift_ppm:+.3g} ppm "
            f"and its amplitude by {100 * (effect.amplitude_shift or 0):.2g} % (within tolerance)")


def integrator_lines(built: Design, studies: list, tolerance: CycleTolerance) -> list[str]:
    """One row per integrator: its cost, the float and integer maps' errors, the lowest loop rate."""
    lines = [
        f"integrators at {built.timing.loop_hz:g} Hz, against the continuous cycle (tolerance "
        f"{tolerance.period_ppm:g} ppm in period, positive when the stepped orbit runs slow; "
        f"{100 * tolerance.amplitude:g} % in amplitude):",
        f"  {'integrator':<17} {'ops':>4} {'products':>8}  {'float map':>12}  {'integer map':>12}"
        f"  {'amplitude':>9}  lowest loop rate that keeps the cycle",
    ]
    for s in studies:
        floats, ints = s.float_cycle, s.integer_cycle
        f_ppm = f"{floats.period_error_ppm:+.1f} ppm" if floats.period_error_ppm is not None else "-"
        i_ppm = f"{ints.period_error_ppm:+.1f} ppm" if ints.period_error_ppm is not None else "-"
        amp = f"{100 * ints.amplitude_error:.3f} %" if ints.amplitude_error is not None else "-"
        if s.lowest_loop_hz is not None:
            rate = f"{s.lowest_loop_hz:.4g} Hz"
        elif s.needed_loop_hz is not None:
            rate = (f"not kept at this rate; about {s.needed_loop_hz:.4g} Hz needed (estimate "
                    f"from its order {INTEGRATORS[s.integrator].order})")
        else:
            rate = f"not kept: {ints.verdict}"
        lines.append(f"  {s.integrator:<17} {s.operations:>4} {s.products:>8}  {f_ppm:>12}  "
                     f"{i_ppm:>12}  {amp:>9}  {rate}")
    return lines


def search_lines(found: SearchResult) -> list[str]:
    """The search's candidates, cheapest first, the chosen one marked, and what binds it."""
    lines = ["search (cheapest first: word size, then products, then operations):"]
    for c in found.candidates:
        mark = "<- chosen" if c is found.best else ""
        outcome = "keeps the cycle" if c.kept else (c.problem or (c.cycle.verdict if c.cycle else ""))
        lines.append(f"  {c.word_bits:>2}-bit {c.integrator:<17} {c.signal_format:<7} "
                     f"{c.products:>3} products  {outcome} {mark}".rstrip())
    if found.best is None:
        lines.append("  no word size and integrator keeps the cycle within tolerance at this loop "
                     "rate: raise the loop rate or loosen the tolerances")
    else:
        lines.append(f"  binding tolerance: {found.binding}")
    return lines


def start_path_lines(path: StartPath) -> list[str]:
    """The start-up path's verdict in one line, then each problem."""
    if path.ok:
        return [f"start-up path: the integer map follows the float step map from the initial state "
                f"over {path.steps} steps (parting {path.parting:.3g} of a state's range, tolerance "
                f"{path.tolerance:g}), with no saturation"]
    return ["start-up path: FAILS", *(f"  {p}" for p in path.problems())]


def dead_zone_json(zones: tuple[DeadZone, ...]) -> list[dict]:
    """The dead zones as data (JSON ``dead_zones``): equilibrium, radius per state, method."""
    return [zone.to_json() for zone in zones]


def dead_zone_lines(zones: tuple[DeadZone, ...], landed: tuple[int, DeadZone] | None = None) -> list[str]:
    """One line per dead zone, and whether the path from the initial state lands in one."""
    if not zones:
        return ["dead zones: none (the integer map keeps no equilibrium as a rest state)"]
    lines = [f"{zone.describe()}; never reset the state to the rest state" for zone in zones]
    if landed is not None:
        lines.append(f"  FAILS: the run from the initial state is inside it at step {landed[0]}: the "
                     "firmware would never start; move the initial state out of the zone")
    return lines


def trim_json(trim: Trim) -> dict:
    """The period trim as data (JSON ``trim``): errors before and after, granularity, constants."""
    return trim.to_json()


def trim_lines(trim: Trim) -> list[str]:
    """The period trim for people: the exact period before and after, the granularity, and every
    step constant it moved (old and new stored integers)."""
    def period(label: str, p: ExactPeriod) -> str:
        return (f"  {label}: {p.cycle_steps:,} steps for {p.turns} period(s) = "
                f"{float(p.mean):.6f} steps per period, {trim.error_ppm(p):+.1f} ppm "
                f"(wanted {trim.wanted_period_steps:.6f}; positive when the orbit runs slow)")

    lines = [f"period trim ({trim.seconds:.1f} s): exact cycle of the integer orbit from the initial "
             "state",
             period("before", trim.before), period("after ", trim.after),
             f"  granularity: one LSB of the lead step constant v{trim.lead_index} ({trim.lead_note}) "
             f"moves the step by {trim.granularity_ppm:.3g} ppm; the orbit locks onto lattice cycles, "
             "so the errors met over "
             f"{len(trim.tried)} shifts were: "
             + ", ".join(f"{e:+.1f}" for e in trim.reachable_errors_ppm) + " ppm"]
    if not trim.changed:
        lines.append("  no constant changed: the untrimmed plan is already the best found")
        return lines
    lines.append(f"  {len(trim.changed)} step constants moved by {trim.lead_shift:+d} LSB of the lead "
                 "constant (each rounded in its own format):")
    lines += [f"    v{c.index:<4} {c.format:<8} {c.old:>12} -> {c.new:<12} ({c.new - c.old:+d} LSB)  "
              f"{c.note}" for c in trim.changed]
    return lines
