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

from orbitfix.gen.errors import InputError
from orbitfix.gen.pipeline import Design
from orbitfix.verify.proofs.certificate.lattice import Lattice, band_masks, excluded_near
from orbitfix.verify.proofs.certificate.lattice_map import (
    next_state_table,
    path_states,
    reachable_from,
    steps_to_band,
)
from orbitfix.verify.proofs.certificate.uncertified import UncertifiedGroup, covering_radius, group_exceptions

DEFAULT_BAND = 0.03
DEFAULT_TOLERANCE = 0.08
BOX_SCALE = 1.5
LARGEST_DOMAIN = 1 << 28         # lattice points; the tables then take about 5 GiB at most


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
    lattice = Lattice(domain)
    phases: dict[str, float] = {}
    clock = time.perf_counter()

    def lap(name: str) -> None:
        nonlocal clock
        now = time.perf_counter()
        phases[name] = now - clock
        clock = now

    inner, within, distance_error, curve_error = band_masks(cycle.samples, half, scale, band_int,
                                                            lattice, band, tolerance)
    lap("bands")
    table, length = next_state_table(program, lattice)
    lap("next_state_table")
    invariant, reachable, path_index = reachable_from(table, length, inner, within)
    path = path_states(program, lattice, path_index)
    lap("invariance")

    in_box = lattice.box_mask(box_int)
    excluded, equilibria_excluded = excluded_near(design, lattice, in_box, half, scale, exclude_radius)
    steps, never = steps_to_band(table, length, inner)
    del table                                   # overwritten by the doubling
    considered = in_box & ~excluded
    certified = considered & ~never
    exceptions = considered & never
    exception_count = int(np.count_nonzero(exceptions))
    steps_bound = int(steps.max(where=certified, initial=0)) if np.any(certified) else None
    lap("attraction")
    groups, group_count, fates = group_exceptions(program, length, never, exceptions, lattice, scale,
                                                  design)
    cover_radius = covering_radius(design, lattice, exceptions, half, scale)
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

