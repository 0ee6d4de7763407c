"""The lattice certificate: a proof by exhaustive computation over every integer state of a box that
the integer program (layer L2) holds its cycle, for 16-bit planar models.

Simulation samples a few starts; here every lattice point is stepped once with ``golden.step``, and
the resulting next-state table (a finite functional graph) settles two questions exactly:

- invariance: the states reachable from the inner band B (lattice points within ``band`` of the
  continuous cycle, in normalised units) never leave the tolerance band T (within ``tolerance``);
- attraction: every state of the box, outside small excluded neighbourhoods of the equilibria,
  enters B within a bounded number of steps (pointer doubling on the graph with B made absorbing).

Together: from any such state the controller is inside T after at most that many steps and stays
there for ever, whatever the run length. Normalised units divide each state by the cycle's half
range, so a band of 0.03 is 3 % of the cycle's size along each axis.
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import interpolate, ndimage

from orbitfix.gen.errors import InputError
from orbitfix.gen.pipeline import Design
from orbitfix.gen.program import golden

DEFAULT_BAND = 0.03
DEFAULT_TOLERANCE = 0.08
BOX_SCALE = 1.5
LARGEST_DOMAIN = 1 << 28         # lattice points; the tables then take about 5 GiB at most
STRIP_ROWS = 2048                # rows of the band's distance transform done at once
GATHER_SLICE = 1 << 22           # indices gathered at once
CHUNK = 1 << 16                  # states per golden step: small batches stay in cache
EXAMPLES = 3                     # example starts named per group of uncertified states
GROUPS_SHOWN = 12                # groups of uncertified states described in full
LONGEST_WALK = 200_000           # steps walked to measure one terminal cycle
COUNT_CAP = np.uint32(2**31 - 1)     # step counts saturate here (only states that never arrive)
LONGEST_EXCURSION = 4096         # steps followed outside the domain before calling it gone


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

    def text(self) -> str:
        if self.fate == "leaves the domain":
            what = (f"leave the lattice domain and do not come back within {LONGEST_EXCURSION} "
                    "steps")
        elif self.fate == "fixed point":
            what = f"rest on the integer fixed point {_pair(self.end_state, self.end_state_real)}"
        elif self.cycle_length is None:
            what = (f"fall into an integer cycle longer than {LONGEST_WALK} steps through "
                    f"{_pair(self.end_state, self.end_state_real)}")
        else:
            what = (f"fall into an integer cycle of length {self.cycle_length} through "
                    f"{_pair(self.end_state, self.end_state_real)}")
        if self.near_equilibrium:
            what += f", which is the model's {self.near_equilibrium}"
        starts = "; ".join(_pair(a, b) for a, b in zip(self.examples, self.examples_real, strict=True))
        return f"{self.count} state(s) {what}; for example {starts}"

    def to_json(self) -> dict:
        return {"fate": self.fate, "count": self.count, "cycle_length": self.cycle_length,
                "end_state": list(self.end_state) if self.end_state else None,
                "end_state_real": list(self.end_state_real) if self.end_state_real else None,
                "near_equilibrium": self.near_equilibrium,
                "examples": [list(e) for e in self.examples],
                "examples_real": [list(e) for e in self.examples_real]}


@dataclass(frozen=True)
class Certificate:
    """The outcome of :func:`certify`: what was proved, over which states, and what breaks it."""

    model: str
    state_names: tuple[str, ...]
    state_formats: tuple[str, ...]
    proved: bool
    reasons: tuple[str, ...]
    band: float
    tolerance: float
    half_range: tuple[float, ...]
    distance_error: float
    curve_error: float
    box: tuple[tuple[float, float], ...]
    box_integer: tuple[tuple[int, int], ...]
    domain_integer: tuple[tuple[int, int], ...]
    states_checked: int
    box_states: int
    inner_band_states: int
    tolerance_band_states: int
    reachable_states: int
    invariant: bool
    escape_path: tuple[tuple[int, ...], ...]
    certified_states: int
    steps_bound: int | None
    exception_count: int
    exceptions: tuple[UncertifiedGroup, ...]
    exception_groups: int
    fates: dict
    cover_radius: float | None
    exclude_radius: float
    excluded_states: int
    equilibria_excluded: tuple[str, ...]
    seconds: float
    phase_seconds: dict
    tables: dict = field(default_factory=dict, repr=False)

    @property
    def certified_fraction(self) -> float:
        considered = self.box_states - self.excluded_states
        return self.certified_states / considered if considered else 0.0

    def to_json(self) -> dict:
        return {
            "proved": self.proved,
            "reasons": list(self.reasons),
            "band": {"units": "normalised: each state divided by the cycle's half range",
                     "half_range": dict(zip(self.state_names, self.half_range, strict=True)),
                     "inner": self.band, "tolerance": self.tolerance,
                     "distance_error": self.distance_error, "curve_error": self.curve_error,
                     "inner_states": self.inner_band_states,
                     "tolerance_states": self.tolerance_band_states},
            "states_checked": self.states_checked,
            "formats": dict(zip(self.state_names, self.state_formats, strict=True)),
            "box": {name: {"low": lo, "high": hi, "low_integer": ilo, "high_integer": ihi}
                    for name, (lo, hi), (ilo, ihi) in zip(self.state_names, self.box,
                                                          self.box_integer, strict=True)},
            "box_states": self.box_states,
            "domain": {name: {"low_integer": lo, "high_integer": hi}
                       for name, (lo, hi) in zip(self.state_names, self.domain_integer, strict=True)},
            "invariance": {"holds": self.invariant, "reachable_states": self.reachable_states,
                           "escape_path": [list(s) for s in self.escape_path]},
            "steps_bound": self.steps_bound,
            "certified_states": self.certified_states,
            "certified_fraction": self.certified_fraction,
            "exceptions": {"count": self.exception_count, "groups": self.exception_groups,
                           "by_fate": {fate: {"states": n, "ends": e}
                                       for fate, (n, e) in self.fates.items()},
                           "within_radius_of_an_equilibrium": self.cover_radius,
                           "shown": [g.to_json() for g in self.exceptions]},
            "excluded": {"radius": self.exclude_radius, "states": self.excluded_states,
                         "equilibria": list(self.equilibria_excluded)},
            "seconds": self.seconds,
            "phase_seconds": self.phase_seconds,
        }

    def describe(self) -> list[str]:
        """The certificate as plain text lines."""
        names = self.state_names
        verdict = "PROVED" if self.proved else "NOT PROVED"
        lines = [f"Lattice certificate for '{self.model}': {verdict}",
                 "  formats: " + ", ".join(f"{n} {f}" for n, f in zip(names, self.state_formats,
                                                                       strict=True)),
                 "  bands, in units of the cycle's half range ("
                 + ", ".join(f"{n}: {h:.6g}" for n, h in zip(names, self.half_range, strict=True))
                 + f"): inner {self.band:g} ({self.inner_band_states} states), tolerance "
                   f"{self.tolerance:g} ({self.tolerance_band_states} states); band edges are "
                   f"exact to {self.distance_error:.2g} about the cycle's curve, itself known to "
                   f"about {self.curve_error:.1g}",
                 "  box: " + ", ".join(f"{n} in [{lo:.6g}, {hi:.6g}]" for n, (lo, hi)
                                       in zip(names, self.box, strict=True))
                 + f" ({self.box_states} lattice states)",
                 f"  states stepped once each: {self.states_checked}"]
        if self.invariant:
            lines.append(f"  invariance holds: the {self.reachable_states} states reachable from "
                         f"the inner band all lie in the tolerance band")
        else:
            first = self.escape_path[-1] if self.escape_path else None
            lines.append(f"  invariance FAILS: starting in the inner band at {self.escape_path[0]}, "
                         f"the integer map leaves the tolerance band at {first} after "
                         f"{len(self.escape_path) - 1} step(s)")
        if self.excluded_states:
            lines.append(f"  excluded: {self.excluded_states} states within {self.exclude_radius:g} "
                         f"of " + ", ".join(self.equilibria_excluded))
        considered = self.box_states - self.excluded_states
        lines.append(f"  attraction: {self.certified_states} of {considered} states "
                     f"({100 * self.certified_fraction:.4f} %) enter the inner band"
                     + (f" within {self.steps_bound} steps" if self.steps_bound is not None else ""))
        if self.exception_count:
            lines.append(f"  {self.exception_count} state(s) never enter it "
                         f"({self.exception_groups} group(s) by fate):")
            lines.extend(f"    - {g.text()}" for g in self.exceptions)
            if self.exception_groups > len(self.exceptions):
                lines.append(f"    - and {self.exception_groups - len(self.exceptions)} smaller "
                             "group(s)")
            ends = {"leaves the domain": "leave the domain", "fixed point": "integer fixed point(s)",
                    "cycle": "integer cycle(s)"}
            lines.append("    in all: " + "; ".join(
                f"{n} state(s) leave the domain" if fate == "leaves the domain"
                else f"{n} state(s) end on {e} {ends[fate]}"
                for fate, (n, e) in self.fates.items() if n))
            if self.cover_radius is not None:
                lines.append(f"    all of them lie within {self.cover_radius:.4g} (normalised) of an "
                             "equilibrium; an exclusion radius above that leaves them out")
        for reason in self.reasons:
            lines.append(f"  why not proved: {reason}")
        if self.proved:
            lines.append(f"  so: from every state of the box outside the excluded neighbourhoods, "
                         f"the integer program is inside the tolerance band after at most "
                         f"{self.steps_bound} steps and never leaves it, however long it runs")
        lines.append(f"  time: {self.seconds:.1f} s")
        lines.append("  This proves a property of the integer program's arithmetic, not the safety of a "
                     "machine: bench-test with the load disconnected and keep an independent "
                     "hardware stop.")
        return lines


def certify(design: Design, band: float = DEFAULT_BAND, tolerance: float = DEFAULT_TOLERANCE,
            box: Mapping[str, tuple[float, float]] | Sequence[tuple[float, float]] | None = None,
            exclude_radius: float = 0.0, keep_tables: bool = False) -> Certificate:
    """Prove, over every lattice state of ``box``, that the integer program enters the inner band
    and then never leaves the tolerance band (bands and radius in normalised units; the box in
    real units, default the cycle's bounding box scaled by 1.5 about the equilibrium inside it).

    ``keep_tables`` keeps the per-state arrays (steps, masks, the lattice) in ``Certificate.tables``
    for checking; they take about 6 bytes a state."""
    started = time.perf_counter()
    program = design.plan.program
    names = tuple(program.state_names)
    if len(names) != 2:
        raise InputError(f"the lattice certificate is for planar models (two states); "
                         f"'{design.model.name}' has {len(names)} states. Check it with the "
                         "drift and host proofs instead")
    if program.word_bits != 16:
        raise InputError(f"the lattice is too large to enumerate with {program.word_bits}-bit "
                         "words; use --word 16")
    _check_bands(band, tolerance, exclude_radius)
    cycle = design.analysis.cycle
    low_c, high_c = np.asarray(cycle.state_min, float), np.asarray(cycle.state_max, float)
    half = 0.5 * (high_c - low_c)
    if np.any(half <= 0):
        raise InputError("the cycle has no extent in some state; there is no band to certify")
    scale = 2.0 ** np.asarray(program.state_fraction_bits, float)
    word = (program.word_min, program.word_max)
    real_box = _box(box, names, design, low_c, high_c)
    box_int = [(max(word[0], math.ceil(lo * s)), min(word[1], math.floor(hi * s)))
               for (lo, hi), s in zip(real_box, scale, strict=True)]
    if any(lo > hi for lo, hi in box_int):
        raise InputError("the box holds no lattice state; widen it")
    band_int = [(max(word[0], math.floor((lo - tolerance * h) * s) - 1),
                 min(word[1], math.ceil((hi + tolerance * h) * s) + 1))
                for lo, hi, h, s in zip(low_c, high_c, half, scale, strict=True)]
    domain = [(min(a[0], b[0]), max(a[1], b[1])) for a, b in zip(box_int, band_int, strict=True)]
    sizes = [hi - lo + 1 for lo, hi in domain]
    total = sizes[0] * sizes[1]
    if total > LARGEST_DOMAIN:
        raise InputError(f"the lattice domain holds {total} states, more than the {LARGEST_DOMAIN} "
                         "this certificate enumerates; use fewer fraction bits or a smaller box")
    lattice = _Lattice(domain)
    phases: dict[str, float] = {}
    clock = time.perf_counter()

    def lap(name: str) -> None:
        nonlocal clock
        now = time.perf_counter()
        phases[name] = now - clock
        clock = now

    inner, within, distance_error, curve_error = _band_masks(cycle.samples, half, scale, band_int,
                                                             lattice, band, tolerance)
    lap("bands")
    table, length = _next_state_table(program, lattice)
    lap("next_state_table")
    invariant, reachable, path_index = _reachable_from(table, length, inner, within)
    path = _path_states(program, lattice, path_index)
    lap("invariance")

    in_box = lattice.box_mask(box_int)
    excluded, equilibria_excluded = _excluded(design, lattice, in_box, half, scale, exclude_radius)
    steps, never = _steps_to_band(table, length, inner)
    del table                                   # overwritten by the doubling
    considered = in_box & ~excluded
    certified = considered & ~never
    exceptions = considered & never
    exception_count = int(np.count_nonzero(exceptions))
    steps_bound = int(steps.max(where=certified, initial=0)) if np.any(certified) else None
    lap("attraction")
    groups, group_count, fates = _group_exceptions(program, length, never, exceptions, lattice, scale,
                                                   design)
    cover_radius = _cover_radius(design, lattice, exceptions, half, scale)
    lap("exceptions")
    reasons = []
    if not np.any(considered):
        reasons.append("no state of the box is left once the neighbourhoods are excluded; use a "
                       "smaller exclusion radius or a larger box")
    if not invariant:
        reasons.append(f"a state reachable from the inner band leaves the tolerance band "
                       f"(first found at {path[-1]})")
    if exception_count:
        reasons.append(f"{exception_count} box state(s) outside the excluded neighbourhoods never "
                       "enter the inner band")
        resting = [g for g in groups if g.near_equilibrium]
        if resting:
            reasons.append(f"the box holds the model's {resting[0].near_equilibrium}, which the "
                           "integer map keeps as a resting state, so no box that holds it can be "
                           "certified in full: exclude a small neighbourhood of it "
                           "(exclude_radius)")
    return Certificate(
        model=design.model.name, state_names=names,
        state_formats=tuple(f"Q{program.word_bits - n}.{n}" for n in program.state_fraction_bits),
        proved=invariant and exception_count == 0 and bool(np.any(considered)),
        reasons=tuple(reasons), band=band,
        tolerance=tolerance, half_range=tuple(float(h) for h in half),
        distance_error=distance_error, curve_error=curve_error,
        box=tuple((float(lo), float(hi)) for lo, hi in real_box), box_integer=tuple(box_int),
        domain_integer=tuple(domain), states_checked=total,
        box_states=int(np.count_nonzero(in_box)), inner_band_states=int(np.count_nonzero(inner)),
        tolerance_band_states=int(np.count_nonzero(within)), reachable_states=reachable,
        invariant=invariant, escape_path=tuple(path), certified_states=int(np.count_nonzero(certified)),
        steps_bound=steps_bound, exception_count=exception_count, exceptions=tuple(groups),
        exception_groups=group_count, fates=fates, cover_radius=cover_radius,
        exclude_radius=exclude_radius,
        excluded_states=int(np.count_nonzero(in_box & excluded)),
        equilibria_excluded=tuple(equilibria_excluded),
        seconds=time.perf_counter() - started, phase_seconds=phases,
        tables=({"steps": steps, "never": never, "inner": inner, "within": within, "in_box": in_box,
                 "excluded": excluded, "lattice": lattice} if keep_tables else {}))


class _Lattice:
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


def _check_bands(band: float, tolerance: float, exclude_radius: float) -> None:
    for what, value in (("band", band), ("tolerance", tolerance), ("exclude radius", exclude_radius)):
        if not math.isfinite(value) or value < 0:
            raise InputError(f"the {what} must be a finite number at least 0, got {value}")
    if band <= 0:
        raise InputError(f"the inner band must be wider than 0, got {band}")
    if tolerance <= band:
        raise InputError(f"the tolerance band ({tolerance}) must be wider than the inner band "
                         f"({band})")


def _box(box: Mapping[str, tuple[float, float]] | Sequence[tuple[float, float]] | None,
         names: tuple[str, ...], design: Design, low_c: np.ndarray,
         high_c: np.ndarray) -> list[tuple[float, float]]:
    """The basin box in real units: given, or the cycle's bounding box scaled about its centre."""
    if box is None:
        centre = 0.5 * (low_c + high_c)
        for eq in design.analysis.equilibria:
            point = np.asarray(eq.state, float)
            if np.all((point > low_c) & (point < high_c)):
                centre = point
                break
        return [(float(c + BOX_SCALE * (lo - c)), float(c + BOX_SCALE * (hi - c)))
                for c, lo, hi in zip(centre, low_c, high_c, strict=True)]
    if isinstance(box, Mapping):
        unknown = sorted(set(box) - set(names))
        if unknown or set(box) != set(names):
            raise InputError(f"the box needs bounds for exactly the states {', '.join(names)}; "
                             f"got {', '.join(map(str, box))}")
        pairs = [box[n] for n in names]
    else:
        pairs = list(box)
        if len(pairs) != len(names):
            raise InputError(f"the box needs {len(names)} (low, high) pairs, one per state "
                             f"({', '.join(names)}); got {len(pairs)}")
    out = []
    for name, pair in zip(names, pairs, strict=True):
        try:
            lo, hi = (float(v) for v in pair)
        except (TypeError, ValueError):
            raise InputError(f"the box bounds of {name} must be two numbers (low, high); "
                             f"got {pair!r}") from None
        if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
            raise InputError(f"the box bounds of {name} must be finite with low < high; "
                             f"got {lo}, {hi}")
        out.append((lo, hi))
    return out


def _band_masks(samples: np.ndarray, half: np.ndarray, scale: np.ndarray,
                region: list[tuple[int, int]], lattice: _Lattice, band: float,
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


def _next_state_table(program, lattice: _Lattice) -> tuple[np.ndarray, _Excursions]:
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
    returned, lengths = _follow_outside(program, lattice, away, table, away)
    return table, _Excursions(returned, lengths)


def _follow_outside(program, lattice: _Lattice, away: np.ndarray, out: np.ndarray,
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


def _moves_of(program, lattice: _Lattice, members: np.ndarray) -> np.ndarray:
    """The table's entries for the sorted lattice indices ``members`` (the sink included),
    computed again with the golden step, so that the full table need not outlive the doubling."""
    inside = members[members < lattice.size]
    moves = np.full(members.size, lattice.size, dtype=np.int64)
    for start in range(0, inside.size, CHUNK):
        part = inside[start:start + CHUNK]
        moves[start:start + part.size] = lattice.index(golden.step(program, lattice.states(part)))
    away = np.flatnonzero(moves[:inside.size] == lattice.size)
    _follow_outside(program, lattice, inside[away], moves, away)
    return moves


class _Excursions:
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


def _reachable_from(table: np.ndarray, length: _Excursions, inner: np.ndarray,
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


def _path_states(program, lattice: _Lattice, path: list[int]) -> list[tuple[int, ...]]:
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


def _steps_to_band(table: np.ndarray, length: _Excursions,
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


def _group_exceptions(program, steps: _Excursions, never: np.ndarray,
                      exceptions: np.ndarray, lattice: _Lattice, scale: np.ndarray,
                      design: Design) -> tuple[list[UncertifiedGroup], int, dict]:
    """Group the box states that never enter the band by their terminal cycle (or the sink).

    The states that never enter the band form a set closed under the map; on it, doubling to at
    least its size lands every orbit on its terminal cycle, and the least index met over as many
    steps names that cycle.
    """
    if not np.any(exceptions):
        return [], 0, {}
    members = np.append(np.flatnonzero(never), lattice.size).astype(np.int64)
    local = np.searchsorted(members, _moves_of(program, lattice, members)).astype(np.int64)
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


def _cover_radius(design: Design, lattice: _Lattice, exceptions: np.ndarray, half: np.ndarray,
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


def _cycle_length(local: np.ndarray, members: np.ndarray, steps: _Excursions,
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


def _excluded(design: Design, lattice: _Lattice, in_box: np.ndarray, half: np.ndarray,
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


def _ints(states: np.ndarray) -> tuple[tuple[int, ...], ...]:
    return tuple(tuple(int(v) for v in s) for s in states)


def _reals(states: np.ndarray, scale: np.ndarray) -> tuple[tuple[float, ...], ...]:
    return tuple(tuple(float(v) for v in s / scale) for s in states)


def _pair(integers: Sequence[int] | None, reals: Sequence[float] | None) -> str:
    if integers is None or reals is None:
        return "-"
    return (f"({', '.join(str(v) for v in integers)}) = ("
            f"{', '.join(f'{v:.6g}' for v in reals)})")
