"""Range analysis of every value of the step: sure bounds by interval arithmetic over the
operation graph, for every state in a box at once.

A bound from interval arithmetic holds for every state of the box, so a format sized from it can
never overflow on a step that starts in the box; it is wider than the values really met on the
cycle (each operation forgets how its inputs are related), which the planner reports beside it.
"""

from __future__ import annotations

import numpy as np

from orbitfix.gen.program.integer_program import IntegerProgram
from orbitfix.gen.program.operations import kind_of

DEGENERATE_FLOOR = 0.1  # of the model's largest half range: the least half range a state gets


def interval_ranges(program: IntegerProgram, low: np.ndarray,
                    high: np.ndarray) -> list[tuple[float, float]]:
    """Bounds (lo, hi) of every value of one step from any state with low <= x <= high."""
    bounds: list[tuple[float, float]] = []
    for op in program.ops:
        bounds.append(kind_of(op.kind).interval(op, [bounds[i] for i in op.args], (low, high)))
        if op.wraps:  # an angle in turns, wrapped into half a turn either way
            bounds[-1] = (-0.5, 0.5)
    return bounds


def planning_box(samples: np.ndarray, initial: np.ndarray, scale: float,
                 angles: tuple[int, ...] = ()) -> tuple[np.ndarray, np.ndarray]:
    """The states the plan must hold: the bounding box of the samples (the cycle, the paths from
    the starts) and the initial state, widened about its centre by ``scale``; an angle state (in
    turns) holds the whole turn. A state whose range is degenerate (zero on the cycle, say) gets
    a floor from the model's own scale, the largest half range of its other states, so neither it
    nor any value computed from it is planned for a range of zero width."""
    points = np.hstack([np.asarray(samples, dtype=float), np.reshape(initial, (-1, 1))])
    low, high = points.min(axis=1), points.max(axis=1)
    centre, half = 0.5 * (low + high), 0.5 * (high - low)
    plain = [i for i in range(len(half)) if i not in angles]
    model_scale = max([float(half[i]) for i in plain] + [0.0])
    floor = max(DEGENERATE_FLOOR * model_scale, 1e-9)
    half = np.maximum(half * scale, floor)
    low, high = centre - half, centre + half
    for i in angles:
        low[i], high[i] = -0.5, 0.5
    return low, high

