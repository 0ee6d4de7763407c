"""Starts near the model's unstable equilibria: random, asymmetric points a small distance from
each unstable equilibrium inside the cycle, from which the rhythm must build up.

They are chosen once, here, because two stages use them: the fixed-point plan covers the float step
map's path from each (a start the proof uses must not leave the planning box), and the drift proof
runs the integer map from each. The offsets are random in sign and size, per state, so a start
leaves any symmetric subspace of a network (identical units holding equal states), which the
integer map would otherwise keep exactly.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from orbitfix.gen.analysis.summary import Analysis

RANDOM_STARTS = 3      # random starts round each unstable equilibrium inside the cycle
OFFSET = 1e-3          # their typical distance, as a fraction of each state's range on the cycle
SEED = 1


@dataclass(frozen=True)
class NearRest:
    """One start near an unstable equilibrium, in model units."""

    name: str
    point: np.ndarray      # shape (n_states,)
    offset: np.ndarray     # the point minus the equilibrium
    why: str


def near_rest_starts(analysis: Analysis, offset: float = OFFSET, seed: int = SEED,
                     ) -> tuple[list[NearRest], list[str]]:
    """The starts near each unstable equilibrium inside the cycle's bounding box, and notes on
    the equilibria left out (none inside; a stable one, which is not expected to reach the cycle).

    Each state's offset has its own random sign and a size between 0.5 and 1.5 times ``offset``
    times the state's range on the cycle (seeded with ``seed``, so the same model always gets the
    same starts)."""
    cycle = analysis.cycle
    names = analysis.model.state_names
    low, high = np.asarray(cycle.state_min, dtype=float), np.asarray(cycle.state_max, dtype=float)
    inside = [e for e in analysis.equilibria if np.all(e.state >= low) and np.all(e.state <= high)]
    notes: list[str] = []
    if not inside:
        notes.append("no equilibrium lies inside the cycle's bounding box, so there is no run "
                     "from near an equilibrium")
    generator = np.random.default_rng(seed)
    typical = offset * (high - low)
    found: list[NearRest] = []
    for number, equilibrium in enumerate(inside, start=1):
        where = ", ".join(f"{name} = {value:.4g}"
                          for name, value in zip(names, equilibrium.state, strict=False))
        if equilibrium.stable:
            notes.append(f"the equilibrium at {where} is a {equilibrium.kind} of the continuous "
                         "model, so starts near it are not expected to reach the cycle; they are "
                         "left out")
            continue
        label = "near the equilibrium" if len(inside) == 1 else f"near equilibrium {number}"
        for k in range(1, RANDOM_STARTS + 1):
            signs = generator.choice((-1.0, 1.0), size=len(names))
            sizes = generator.uniform(0.5, 1.5, size=len(names))
            step = signs * sizes * typical
            found.append(NearRest(f"{label} ({k})", np.asarray(equilibrium.state) + step, step,
                                  f"the {equilibrium.kind} at {where} plus a random asymmetric "
                                  f"offset of about {offset:g} of the cycle's range (seed {seed})"))
    return found, notes
