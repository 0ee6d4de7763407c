"""The continuous-model analysis (layer L0): equilibria and the limit cycle, as data and as a report.

This is the first check in the chain: if the ODE itself has no stable, isolated limit cycle, no
choice of step size or fixed-point format downstream can give the controller a dependable rhythm.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from orbitfix.gen.analysis.equilibria import (
    KIND_MEANINGS,
    Equilibrium,
    find_equilibria,
    format_state,
    never_at_rest,
)
from orbitfix.gen.analysis.limit_cycle import LimitCycle, find_limit_cycle
from orbitfix.gen.analysis.phase_locking import PhaseLocking, analyse_locking, format_locking
from orbitfix.gen.model.definition import Model

CAUTION = (
    "Caution: this is an analysis of the mathematical model, not of the machine. Bench-test the "
    "firmware with the load disconnected first, keep an independent hardware stop, and follow "
    "local codes and the machine's own safety standard; orbitfix certifies nothing."
)


@dataclass(frozen=True, eq=False)
class Analysis:
    """Equilibria and limit cycle of one model; for a network, its phase locking too."""

    model: Model
    equilibria: tuple[Equilibrium, ...]
    cycle: LimitCycle
    network: PhaseLocking | None = None

    @property
    def ok(self) -> bool:
        """True when the model has a stable, isolated limit cycle: a rhythm worth shipping (and, for
        a network, it locks at the wanted phase lags)."""
        cycle_ok = bool(self.cycle.found and self.cycle.stable and self.cycle.isolated)
        return cycle_ok and (self.network is None or self.network.ok)

    def to_json(self) -> dict:
        """Plain data (floats, lists, bools, None; never numpy types), ready for ``json.dump``.
        Numbers that are not finite (an underflowed logarithm, say) are written as None."""
        cycle = self.cycle
        network = None if self.network is None else {
            key: (_numbers(value) if isinstance(value, list) and key != "labels" else value)
            for key, value in self.network.to_json().items()}
        return {
            "model": self.model.name,
            "params": {name: _number(value) for name, value in self.model.parameter_values.items()},
            "states": list(self.model.state_names),
            "ok": self.ok,
            "equilibria": [_equilibrium_json(e) for e in self.equilibria],
            "cycle": {
                "found": bool(cycle.found),
                "stable": bool(cycle.stable),
                "isolated": bool(cycle.isolated),
                "period": _number(cycle.period),
                "state_min": _numbers(cycle.state_min),
                "state_max": _numbers(cycle.state_max),
                "turns": None if cycle.turns is None else [int(k) for k in cycle.turns],
                "floquet": _complex_pairs(cycle.multipliers),
                "trivial_index": cycle.trivial_index,
                "floquet_log": _numbers(cycle.floquet_log),
                "stability_margin": _number(cycle.stability_margin),
                "verdict": cycle.verdict,
                "outcome": cycle.outcome,
                "point": _numbers(cycle.point),
                "closing_error": _number(cycle.closing_error),
                "method": cycle.method or None,
                "settled_at": (None if cycle.settled_at is None
                               else _equilibrium_json(cycle.settled_at)),
            },
            **({} if network is None else {"network": network}),
        }


def analyse(model: Model) -> Analysis:
    """Find the model's equilibria and the limit cycle its initial state runs onto."""
    cycle = find_limit_cycle(model)
    network = None if model.network is None else analyse_locking(model, cycle)
    return Analysis(model=model, equilibria=tuple(find_equilibria(model)), cycle=cycle,
                    network=network)


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
    lines.append("")
    if analysis.network is not None:
        lines += format_locking(analysis.network)
        lines.append("")
    lines.append(CAUTION)
    return "\n".join(lines) + "\n"


def _yes(flag: bool) -> str:
    return "yes" if flag else "no"


def _complex_text(value: complex) -> str:
    value = complex(value)
    if value.imag == 0.0:
        return f"{value.real:.6g}"
    sign = "+" if value.imag > 0 else "-"
    return f"{value.real:.6g} {sign} {abs(value.imag):.6g}i"


def _number(value: float | None) -> float | None:
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _numbers(values: np.ndarray | None) -> list[float | None] | None:
    return None if values is None else [_number(v) for v in np.asarray(values, dtype=float)]


def _complex_pairs(values: np.ndarray | None) -> list[list[float | None]] | None:
    if values is None:
        return None
    return [[_number(v.real), _number(v.imag)] for v in np.asarray(values, dtype=complex)]


def _equilibrium_json(equilibrium: Equilibrium) -> dict:
    return {
        "state": _numbers(equilibrium.state),
        "eigenvalues": _complex_pairs(equilibrium.eigenvalues),
        "kind": equilibrium.kind,
    }
