"""The box states a lattice certificate cannot vouch for, grouped by where they end up: leaving
the domain, resting on an integer fixed point (named when it is the model's equilibrium), or
falling into an integer cycle; with the smallest radius about the equilibria that holds them all.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from orbitfix.gen.pipeline import Design
from orbitfix.verify.proofs.certificate.lattice import Lattice
from orbitfix.verify.proofs.certificate.lattice_map import Excursions, moves_of

EXAMPLES = 3                     # example starts named per group of uncertified states
GROUPS_SHOWN = 12                # groups of uncertified states described in full
LONGEST_WALK = 200_000           # steps walked to measure one terminal cycle


@dataclass(frozen=True)
class UncertifiedGroup:
    """Box states that never enter the inner band, grouped by where they end up.

    fate : 'leaves the domain', 'fixed point' or 'cycle'; ``cycle_length`` for the last two
    (None if the cycle is longer than the walk that measures it).
    """

    fate: str
    count: int
    cycle_length: int | None
    end_state: tuple[int, ...] | None
    end_state_real: tuple[float, ...] | None
    examples: tuple[tuple[int, ...], ...]
    examples_real: tuple[tuple[float, ...], ...]
    near_equilibrium: str | None = None


def group_exceptions(program, steps: Excursions, never: np.ndarray,
                     exceptions: np.ndarray, lattice: Lattice, scale: np.ndarray,
                     design: Design) -> tuple[list[UncertifiedGroup], int, dict]:
    """Group the box states that never enter the band by their terminal cycle (or the sink).

    The states that never enter the band form a set closed under the map; on it, doubling to at
    least its size lands every orbit on its terminal cycle, and the least index met over as many
    steps names that cycle.
    """
    if not np.any(exceptions):
        return [], 0, {}
    members = np.append(np.flatnonzero(never), lattice.size).astype(np.int64)
    local = np.searchsorted(members, moves_of(program, lattice, members)).astype(np.int64)
    least = np.arange(members.size, dtype=np.int64)
    jump = local
    reach = 1
    while reach < members.size:
        least = np.minimum(least, least[jump])
        jump = jump[jump]
        reach *= 2
    label = least[jump]                      # the least member of each orbit's terminal cycle
    wanted = np.searchsorted(members, np.flatnonzero(exceptions))
    ends, inverse, counts = np.unique(label[wanted], return_inverse=True, return_counts=True)
    end_index = members[ends]
    resting = np.zeros(ends.size, dtype=bool)         # fixed points at an equilibrium come first
    inside = end_index < lattice.size
    fixed = np.zeros(ends.size, dtype=bool)
    fixed[inside] = local[ends[inside]] == ends[inside]
    if np.any(fixed):
        at = lattice.states(end_index[fixed]) / scale[:, None]
        for eq in design.analysis.equilibria:
            state = np.asarray(eq.state, float)[:, None]
            resting[np.flatnonzero(fixed)[np.all(np.abs(at - state) <= 0.5 / scale[:, None],
                                                  axis=0)]] = True
    order = np.lexsort((-counts, ~resting))
    summary = {"leaves the domain": [0, 0], "fixed point": [0, 0], "cycle": [0, 0]}
    for fate, pick in (("leaves the domain", ~inside), ("fixed point", fixed),
                       ("cycle", inside & ~fixed)):
        summary[fate] = [int(counts[pick].sum()), int(np.count_nonzero(pick))]
    groups = []
    starts = np.flatnonzero(exceptions)
    for g in order[:GROUPS_SHOWN]:
        end = int(members[ends[g]])
        picked = starts[inverse == g][:EXAMPLES]
        examples = lattice.states(picked).T
        if end == lattice.size:
            groups.append(UncertifiedGroup("leaves the domain", int(counts[g]), None, None, None,
                                           _ints(examples), _reals(examples, scale)))
            continue
        length = _cycle_length(local, members, steps, int(ends[g]))
        state = lattice.states(np.array([end]))[:, 0]
        fate = "fixed point" if length == 1 else "cycle"
        groups.append(UncertifiedGroup(fate, int(counts[g]), length, tuple(int(v) for v in state),
                                       tuple(float(v) for v in state / scale), _ints(examples),
                                       _reals(examples, scale),
                                       _equilibrium_at(design, state / scale, scale) if length == 1
                                       else None))
    return groups, int(ends.size), summary


def covering_radius(design: Design, lattice: Lattice, exceptions: np.ndarray, half: np.ndarray,
                    scale: np.ndarray) -> float | None:
    """The smallest radius (normalised) about the equilibria that holds every uncertified state."""
    if not np.any(exceptions) or not design.analysis.equilibria:
        return None
    at = lattice.states(np.flatnonzero(exceptions)) / scale[:, None]
    nearest = np.full(at.shape[1], np.inf)
    for eq in design.analysis.equilibria:
        state = np.asarray(eq.state, float)[:, None]
        nearest = np.minimum(nearest, np.linalg.norm((at - state) / half[:, None], axis=0))
    return float(nearest.max())


def _cycle_length(local: np.ndarray, members: np.ndarray, steps: Excursions,
                  start: int) -> int | None:
    """Golden steps around the terminal cycle through member ``start`` (None if longer than the
    walk); ``local`` is the table on the members, in member positions."""
    here, total = int(local[start]), steps.one(int(members[start]))
    for _move in range(LONGEST_WALK):
        if here == start:
            return total
        total += steps.one(int(members[here]))
        here = int(local[here])
    return None


def _equilibrium_at(design: Design, point: np.ndarray, scale: np.ndarray) -> str | None:
    """The model's equilibrium whose nearest lattice state is ``point`` (real units), named."""
    for eq in design.analysis.equilibria:
        state = np.asarray(eq.state, float)
        if np.all(np.abs(state - point) <= 0.5 / scale):
            where = ", ".join(f"{v:.6g}" for v in state)
            return f"{eq.kind} at ({where})"
    return None


def _ints(states: np.ndarray) -> tuple[tuple[int, ...], ...]:
    return tuple(tuple(int(v) for v in s) for s in states)


def _reals(states: np.ndarray, scale: np.ndarray) -> tuple[tuple[float, ...], ...]:
    return tuple(tuple(float(v) for v in s / scale) for s in states)
