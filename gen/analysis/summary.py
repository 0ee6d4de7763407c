"""The continuous-model analysis (layer L0): equilibria and the limit cycle, as data (the report is
rendered in ``orbitfix.verify.report.analysis``).

This is the first check in the chain: if the ODE itself has no stable, isolated limit cycle, no
choice of step size or fixed-point format downstream can give the controller a dependable rhythm.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from orbitfix.gen.analysis.equilibria import Equilibrium, find_equilibria
from orbitfix.gen.analysis.limit_cycle import LimitCycle, find_limit_cycle
from orbitfix.gen.analysis.phase_locking import PhaseLocking, analyse_locking
from orbitfix.gen.model.definition import Model
from orbitfix.gen.plain_data import plain_number


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
            "params": {name: plain_number(value) for name, value in self.model.parameter_values.items()},
            "states": list(self.model.state_names),
            "ok": self.ok,
            "equilibria": [_equilibrium_json(e) for e in self.equilibria],
            "cycle": {
                "found": bool(cycle.found),
                "stable": bool(cycle.stable),
                "isolated": bool(cycle.isolated),
                "period": plain_number(cycle.period),
                "state_min": _numbers(cycle.state_min),
                "state_max": _numbers(cycle.state_max),
                "turns": None if cycle.turns is None else [int(k) for k in cycle.turns],
                "floquet": _complex_pairs(cycle.multipliers),
                "trivial_index": cycle.trivial_index,
                "floquet_log": _numbers(cycle.floquet_log),
                "stability_margin": plain_number(cycle.stability_margin),
                "verdict": cycle.verdict,
                "outcome": cycle.outcome,
                "point": _numbers(cycle.point),
                "closing_error": plain_number(cycle.closing_error),
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


def _numbers(values: np.ndarray | None) -> list[float | None] | None:
    return None if values is None else [plain_number(v) for v in np.asarray(values, dtype=float)]


def _complex_pairs(values: np.ndarray | None) -> list[list[float | None]] | None:
    if values is None:
        return None
    return [[plain_number(v.real), plain_number(v.imag)] for v in np.asarray(values, dtype=complex)]


def _equilibrium_json(equilibrium: Equilibrium) -> dict:
    return {
        "state": _numbers(equilibrium.state),
        "eigenvalues": _complex_pairs(equilibrium.eigenvalues),
        "kind": equilibrium.kind,
    }
