"""The lattice of the certificate: the rectangular domain of integer states, numbered row by row,
and the masks on it: the inner and tolerance bands about the cycle's curve, and the
neighbourhoods of equilibria left out of the claim.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import interpolate, ndimage

from orbitfix.gen.pipeline import Design

STRIP_ROWS = 2048                # rows of the band's distance transform done at once


class Lattice:
    """The rectangular domain of integer states, numbered row by row: index = i * ny + j."""

    def __init__(self, bounds: list[tuple[int, int]]) -> None:
        self.low = np.array([b[0] for b in bounds], dtype=np.int64)
        self.high = np.array([b[1] for b in bounds], dtype=np.int64)
        self.shape = tuple(int(s) for s in self.high - self.low + 1)
        self.size = self.shape[0] * self.shape[1]

    def states(self, index: np.ndarray) -> np.ndarray:
        """Integer states, shape (2, k), of lattice indices."""
        index = np.asarray(index, dtype=np.int64)
        return np.stack([index // self.shape[1] + self.low[0], index % self.shape[1] + self.low[1]])

    def index(self, states: np.ndarray) -> np.ndarray:
        """Lattice indices of integer states, shape (2, k); ``size`` (the sink) if outside."""
        offset = states - self.low.reshape(2, 1)
        inside = np.all((offset >= 0) & (offset < np.array(self.shape).reshape(2, 1)), axis=0)
        return np.where(inside, offset[0] * self.shape[1] + offset[1], self.size)

    def box_mask(self, bounds: list[tuple[int, int]]) -> np.ndarray:
        grid = np.zeros(self.shape, dtype=bool)
        (a0, a1), (b0, b1) = bounds
        grid[a0 - self.low[0]:a1 - self.low[0] + 1, b0 - self.low[1]:b1 - self.low[1] + 1] = True
        return grid.reshape(-1)


def band_masks(samples: np.ndarray, half: np.ndarray, scale: np.ndarray,
               region: list[tuple[int, int]], lattice: Lattice, band: float,
               tolerance: float) -> tuple[np.ndarray, np.ndarray, float, float]:
    """The lattice states within ``band`` and within ``tolerance`` (normalised distance) of the
    cycle's curve (none outside ``region``), with a bound on the raster error of that distance and
    an estimate of the curve's own error.

    The curve is a periodic cubic spline through the cycle's samples, resampled so that consecutive
    points lie less than half a lattice step apart, each marked on its nearest lattice state;
    scipy's exact Euclidean distance transform then measures, with per-axis sampling in
    normalised units, the distance to the nearest marked state.
    """
    samples = np.asarray(samples, float)
    count = samples.shape[1]
    closed = np.hstack([samples, samples[:, :1]])
    spline = interpolate.CubicSpline(np.arange(count + 1), closed, axis=1, bc_type="periodic")
    # the curve's own error, estimated from a spline through every other sample
    even = np.hstack([samples[:, ::2], samples[:, :1]])
    coarse = interpolate.CubicSpline(np.arange(0, count + 1, 2), even, axis=1, bc_type="periodic")
    odd = np.arange(1, count, 2)
    curve_error = float(np.max(np.linalg.norm((coarse(odd) - samples[:, odd]) / half[:, None],
                                              axis=0)))
    in_steps = closed * scale[:, None]
    length = float(np.sum(np.linalg.norm(np.diff(in_steps, axis=1), axis=0)))
    dense_count = max(4 * count, math.ceil(4 * length))
    dense = spline(np.linspace(0, count, dense_count, endpoint=False))
    step_norm = 1.0 / (half * scale)              # one lattice step, in normalised units
    dense_norm = dense / half[:, None]
    gaps = np.linalg.norm(np.diff(np.hstack([dense_norm, dense_norm[:, :1]]), axis=1), axis=0)
    distance_error = float(0.5 * np.linalg.norm(step_norm) + 0.5 * gaps.max())

    lo = np.array([r[0] for r in region])
    shape = tuple(int(r[1] - r[0] + 1) for r in region)
    marks = np.rint(dense * scale[:, None]).astype(np.int64) - lo[:, None]
    keep = np.all((marks >= 0) & (marks < np.array(shape)[:, None]), axis=0)
    free = np.ones(shape, dtype=bool)
    free[marks[0, keep], marks[1, keep]] = False
    # in strips of rows, each with a halo wider than the tolerance: a mark farther away than the
    # halo cannot decide whether a state of the strip is within the tolerance
    halo = math.ceil(tolerance / step_norm[0]) + 2
    o = lo - lattice.low
    masks = [np.zeros(lattice.shape, dtype=bool) for _ in (band, tolerance)]
    for first in range(0, shape[0], STRIP_ROWS):
        last = min(first + STRIP_ROWS, shape[0])
        top, bottom = max(0, first - halo), min(shape[0], last + halo)
        window = free[top:bottom]
        if window.all():                      # no mark near these rows: none of them is in a band
            continue
        near = ndimage.distance_transform_edt(window, sampling=tuple(step_norm))
        near = near[first - top:last - top]
        for mask, width in zip(masks, (band, tolerance), strict=True):
            mask[o[0] + first:o[0] + last, o[1]:o[1] + shape[1]] = near <= width
    masks = [m.reshape(-1) for m in masks]
    return masks[0], masks[1], distance_error, curve_error


def excluded_near(design: Design, lattice: Lattice, in_box: np.ndarray, half: np.ndarray,
                  scale: np.ndarray, radius: float) -> tuple[np.ndarray, list[str]]:
    """Lattice states within ``radius`` (normalised) of an equilibrium that lies in the box."""
    mask = np.zeros(lattice.size, dtype=bool)
    named = []
    if radius <= 0:
        return mask, named
    grid = mask.reshape(lattice.shape)
    box = in_box.reshape(lattice.shape)
    for eq in design.analysis.equilibria:
        state = np.asarray(eq.state, float)
        # the window of lattice rows and columns that can lie within the radius
        first = np.maximum(np.floor((state - radius * half) * scale).astype(np.int64) - lattice.low, 0)
        last = np.minimum(np.ceil((state + radius * half) * scale).astype(np.int64) - lattice.low,
                          np.array(lattice.shape) - 1)
        if np.any(first > last):
            continue
        rows = (np.arange(first[0], last[0] + 1) + lattice.low[0]) / scale[0]
        cols = (np.arange(first[1], last[1] + 1) + lattice.low[1]) / scale[1]
        near = (((rows - state[0]) / half[0]) ** 2)[:, None] + (((cols - state[1]) / half[1]) ** 2)
        near = near <= radius ** 2
        window = (slice(first[0], last[0] + 1), slice(first[1], last[1] + 1))
        if np.any(near & box[window]):
            grid[window] |= near
            named.append(f"the {eq.kind} at (" + ", ".join(f"{s:.6g}" for s in state) + ")")
    return mask, named
