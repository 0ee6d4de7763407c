"""The continuous-model analysis (``check``) as text: equilibria, the limit cycle and, for a
network, its phase locking."""

from __future__ import annotations

import math

from orbitfix.gen.analysis.equilibria import KIND_MEANINGS, format_state, never_at_rest
from orbitfix.gen.analysis.phase_locking import PhaseLocking
from orbitfix.gen.analysis.summary import Analysis


def format_report(analysis: Analysis) -> str:
    """A plain-text report of the analysis, for people."""
    model, cycle = analysis.model, analysis.cycle
    names = model.state_names
    width = max(len(n) for n in names)
    lines = [f"Continuous-model analysis of '{model.name}'"]
    if model.description:
        lines.append(f"  {model.description}")
    if model.parameters:
        lines.append("  parameters: " + ", ".join(f"{p.name} = {p.value:.6g}"
                                                  for p in model.parameters))
    lines.append(f"  states: {', '.join(names)}; initial state {format_state(model.initial_state)}")
    lines.append("")

    count = len(analysis.equilibria)
    moving = never_at_rest(model)
    if count:
        lines.append(f"Equilibria: {count} found")
    elif moving is not None:
        lines.append(f"Equilibria: none ({moving})")
    else:
        lines.append("Equilibria: none found near the initial state")
    for number, equilibrium in enumerate(analysis.equilibria, start=1):
        lines.append(f"  {number}. ({', '.join(names)}) = {format_state(equilibrium.state)}")
        lines.append("     eigenvalues of the Jacobian: "
                     + ", ".join(_complex_text(v) for v in equilibrium.eigenvalues))
        lines.append(f"     {equilibrium.kind}: {KIND_MEANINGS[equilibrium.kind]}")
    lines.append("")

    lines.append("Limit cycle")
    if not cycle.found:
        lines.append("  found: no")
    else:
        lines.append(f"  found: yes; stable: {_yes(cycle.stable)}; isolated: {_yes(cycle.isolated)}")
        lines.append(f"  period: {cycle.period:.8g} model time units")
        lines.append("  range over one period:")
        turns = cycle.turns if cycle.turns is not None else [0] * len(names)
        for state, low, high, k in zip(model.states, cycle.state_min, cycle.state_max, turns,
                                       strict=True):
            note = ""
            if state.angle:
                note = (f"  (an angle: the full turn, {abs(k)} turn{'' if abs(k) == 1 else 's'} "
                        f"{'forward' if k > 0 else 'backward'} per period)" if k else
                        "  (an angle that swings without turning)")
            lines.append(f"    {state.name:<{width}}  from {low:.6g} to {high:.6g}{note}")
        lines.append("  Floquet multipliers (factor a disturbance keeps after one period):")
        for index, value in enumerate(cycle.multipliers):
            note = ("  trivial: a shift along the cycle, always 1" if index == cycle.trivial_index
                    else "")
            lines.append(f"    {_complex_text(value)}{note}")
        if model.dimension == 2:
            lines.append(f"  ln of the nontrivial multiplier, from the divergence integrated "
                         f"over one period: {cycle.floquet_log[0]:.8g}")
    lines.append(f"  verdict: {cycle.verdict}")
    if analysis.network is not None:
        lines.append("")
        lines += format_locking(analysis.network)
    return "\n".join(lines) + "\n"


def _yes(flag: bool) -> str:
    return "yes" if flag else "no"


def _complex_text(value: complex) -> str:
    value = complex(value)
    if value.imag == 0.0:
        return f"{value.real:.6g}"
    sign = "+" if value.imag > 0 else "-"
    return f"{value.real:.6g} {sign} {abs(value.imag):.6g}i"


def format_locking(locking: PhaseLocking) -> list[str]:
    """Report lines: one per oscillator with measured and wanted lags, then the verdict."""
    lines = ["Network phase locking (lags in cycles after oscillator 1)"]
    width = max(len(label) for label in locking.labels)
    for i, label in enumerate(locking.labels):
        measured = "-" if locking.lags is None else f"{locking.lags[i]:.6f}"
        error = "" if locking.lag_errors is None else f"  error {locking.lag_errors[i]:+.2e}"
        lines.append(f"  {i + 1}. {label:<{width}}  lag {measured}  wanted {locking.wanted_lags[i]:.6f}"
                     f"{error}")
    if locking.common_period is not None and math.isfinite(locking.common_period):
        lines.append(f"  common period: {locking.common_period:.8g} model time units")
    if locking.cycles_to_lock is not None:
        lines.append(f"  cycles to lock from the initial state: {locking.cycles_to_lock}")
    lines.append(f"  verdict: {locking.verdict}")
    return lines


