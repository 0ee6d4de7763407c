"""The integer map on the lattice as a finite functional graph: one golden step from every lattice
state (with the excursions outside the domain followed to where they come back), the states
reachable from the inner band (invariance), and the steps from every state to the band by pointer
doubling (attraction).
"""

from __future__ import annotations

import numpy as np

from orbitfix.gen.program import golden
from orbitfix.verify.proofs.certificate.lattice import Lattice

GATHER_SLICE = 1 << 22           # indices gathered at once
CHUNK = 1 << 16                  # states per golden step: small batches stay in cache
COUNT_CAP = np.uint32(2**31 - 1)     # step counts saturate here (only states that never arrive)
LONGEST_EXCURSION = 4096         # steps followed outside the domain before calling it gone


def next_state_table(program, lattice: Lattice) -> tuple[np.ndarray, Excursions]:
    """One golden step from every lattice state, as a lattice index, with the excursions.

    A step that leaves the domain is followed outside it with the golden step, up to
    ``LONGEST_EXCURSION`` steps, to where it comes back: the table then holds the state of return
    and the excursion's length. One that does not come back goes to the sink (index ``size``, which
    steps to itself).
    """
    size = lattice.size
    table = np.empty(size + 1, dtype=np.int32)
    for start in range(0, size, CHUNK):
        index = np.arange(start, min(start + CHUNK, size), dtype=np.int64)
        table[start:start + index.size] = lattice.index(golden.step(program, lattice.states(index)))
    table[size] = size
    away = np.flatnonzero(table[:size] == size)
    returned, lengths = follow_outside(program, lattice, away, table, away)
    return table, Excursions(returned, lengths)


def follow_outside(program, lattice: Lattice, away: np.ndarray, out: np.ndarray,
                   positions: np.ndarray) -> tuple[list[np.ndarray], list[np.ndarray]]:
    """Follow the lattice states ``away`` (whose first step leaves the domain) until they come
    back, writing each state of return to ``out[positions]``; returns who came back and after how
    many steps."""
    returned: list[np.ndarray] = []
    lengths: list[np.ndarray] = []
    if not away.size:
        return returned, lengths
    state = golden.step(program, lattice.states(away))
    for steps in range(2, LONGEST_EXCURSION + 1):
        state = golden.step(program, state)
        where = lattice.index(state)
        back = where < lattice.size
        out[positions[back]] = where[back]
        returned.append(away[back])
        lengths.append(np.full(np.count_nonzero(back), steps, dtype=np.int64))
        away, positions, state = away[~back], positions[~back], state[:, ~back]
        if not away.size:
            break
    return returned, lengths


def moves_of(program, lattice: Lattice, members: np.ndarray) -> np.ndarray:
    """The table's entries for the sorted lattice indices ``members`` (the sink included),
    computed again with the golden step, so that the full table need not outlive the doubling."""
    inside = members[members < lattice.size]
    moves = np.full(members.size, lattice.size, dtype=np.int64)
    for start in range(0, inside.size, CHUNK):
        part = inside[start:start + CHUNK]
        moves[start:start + part.size] = lattice.index(golden.step(program, lattice.states(part)))
    away = np.flatnonzero(moves[:inside.size] == lattice.size)
    follow_outside(program, lattice, inside[away], moves, away)
    return moves


class Excursions:
    """The table moves that leave the domain and come back: few, so kept sparse, sorted by state."""

    def __init__(self, index: list[np.ndarray], steps: list[np.ndarray]) -> None:
        index_all = np.concatenate(index) if index else np.zeros(0, dtype=np.int64)
        steps_all = np.concatenate(steps) if steps else np.zeros(0, dtype=np.int64)
        order = np.argsort(index_all)
        self.index, self.steps = index_all[order], steps_all[order]
        self._lookup = dict(zip(self.index.tolist(), self.steps.tolist(), strict=True))

    def of(self, index: np.ndarray) -> np.ndarray:
        """Golden steps of the table moves from ``index`` (1 for a move that stays inside)."""
        out = np.ones(index.shape, dtype=np.int64)
        if self.index.size:
            at = np.minimum(np.searchsorted(self.index, index), self.index.size - 1)
            hit = self.index[at] == index
            out[hit] = self.steps[at[hit]]
        return out

    def one(self, index: int) -> int:
        return self._lookup.get(index, 1)


def reachable_from(table: np.ndarray, length: Excursions, inner: np.ndarray,
                   within: np.ndarray) -> tuple[bool, int, list[int]]:
    """The forward-reachable set of the inner band, to its fixed point, breadth first.

    Stops at the first state outside the tolerance band (a move that leaves the domain counts, as
    the domain holds the band) and returns the lattice indices of a path to it from the inner band;
    the path's last index is ``size`` when its last step leaves the domain.
    """
    size = inner.size
    seen = np.zeros(size + 1, dtype=bool)
    parent = np.full(size + 1, -1, dtype=np.int32)
    frontier = np.flatnonzero(inner).astype(np.int32)
    seen[frontier] = True
    total = frontier.size
    allowed = np.append(within, False)

    def path_to(index: int) -> list[int]:
        path = [index]
        while parent[path[-1]] >= 0:
            path.append(int(parent[path[-1]]))
        return path[::-1]

    while frontier.size:
        out = frontier[length.of(frontier) > 1]
        if out.size:
            return False, total, [*path_to(int(out[0])), size]
        after = table[frontier]
        fresh = ~seen[after]
        targets, first = np.unique(after[fresh], return_index=True)
        parent[targets] = frontier[fresh][first]
        seen[targets] = True
        total += targets.size
        bad = targets[~allowed[targets]]
        if bad.size:
            return False, total, path_to(int(bad[0]))
        frontier = targets
    return True, total, []


def path_states(program, lattice: Lattice, path: list[int]) -> list[tuple[int, ...]]:
    """Integer states of a path of lattice indices; a last step out of the domain is recomputed
    with the golden step so the state it reaches is named too."""
    if not path:
        return []
    inside = [p for p in path if p < lattice.size]
    states = [tuple(int(v) for v in s) for s in lattice.states(np.array(inside)).T]
    if len(inside) < len(path):
        after = golden.step(program, np.array(states[-1], dtype=np.int64).reshape(2, 1))[:, 0]
        states.append(tuple(int(v) for v in after))
    return states


def steps_to_band(table: np.ndarray, length: Excursions,
                  inner: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Steps from every lattice state to the inner band, by pointer doubling with the band made
    absorbing, and the mask of states that never enter it.

    After level k, ``jump`` is the table iterated 2**k times and ``count`` the summed length (in
    golden steps) of the first 2**k table moves that start outside the band: for a state that has
    entered the band by then, exactly its number of steps. The doubling stops when a level adds no
    newly arrived state: a state arriving later would have an orbit point arriving within that
    level, so none does.
    """
    size = inner.size
    absorbing = np.append(inner, False)
    jump = table                               # consumed: the caller no longer needs it
    jump[:size][inner] = np.flatnonzero(inner).astype(np.int32)
    count = (~absorbing).astype(np.uint32)
    count[length.index] = np.where(absorbing[length.index], 0, length.steps)
    spare_jump = np.empty_like(jump)
    spare_count = np.empty_like(count)
    outside = _count_outside(absorbing, jump)
    for _level in range(40):
        _gather(count, jump, spare_count)
        count += spare_count                   # both at most the cap, so the sum cannot wrap
        np.minimum(count, COUNT_CAP, out=count)
        _gather(jump, jump, spare_jump)
        jump, spare_jump = spare_jump, jump
        now = _count_outside(absorbing, jump)
        if now == outside:
            break
        outside = now
    del spare_jump, spare_count
    never = np.empty(size, dtype=bool)
    for start in range(0, size, GATHER_SLICE):
        never[start:start + GATHER_SLICE] = ~absorbing[jump[start:min(start + GATHER_SLICE, size)]]
    if count[:size].max(where=~never, initial=0) >= COUNT_CAP:
        raise RuntimeError("a step count reached its cap; the certificate cannot state its bound")
    return count[:size], never


def _gather(source: np.ndarray, index: np.ndarray, out: np.ndarray) -> None:
    """out = source[index], in slices, so numpy's wide copy of the indices stays small."""
    for start in range(0, index.size, GATHER_SLICE):
        np.take(source, index[start:start + GATHER_SLICE], out=out[start:start + GATHER_SLICE])


def _count_outside(absorbing: np.ndarray, jump: np.ndarray) -> int:
    """How many states ``jump`` sends outside the absorbing set, in slices."""
    return sum(int(np.count_nonzero(~absorbing[jump[start:start + GATHER_SLICE]]))
               for start in range(0, jump.size, GATHER_SLICE))
