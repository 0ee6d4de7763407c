"""Parameter sweep: equilibria and their eigenvalues along one parameter, the Hopf points where a
complex pair crosses the imaginary axis, and the cycle born at each, followed along the parameter.

A rhythm generator is switched on and off, or retuned, by moving a parameter; the sweep says where
the rhythm starts (the Hopf point and its frequency), whether it starts gently from zero amplitude
(supercritical) or jumps in with hysteresis (subcritical), and how period, amplitude and the
cycle's stability change beyond it.

Method:

1. Tracking: at every ``SEARCH_EVERY``-th sampled parameter value (and the last) the equilibria
   are found from the usual seeds of :func:`gen.equilibria.find_equilibria`; each is then
   continued forward and backward through every sample (each root seeded by its neighbour's), so
   every sample lists every equilibrium reached, with its eigenvalues.
2. Detection: each equilibrium is continued to the next sample; where the number of eigenvalues
   with positive real part changes, the parameter is bisected (to ``BISECTION_TOLERANCE`` of the
   sweep's span) with the equilibrium continued at every step. A complex pair at the crossing is a
   Hopf point, its imaginary part the frequency; a real eigenvalue crossing zero is noted.
3. Kind: the first Lyapunov coefficient (:mod:`gen.hopf`) at the Hopf point.
4. Branch: pseudo-arclength continuation of the cycle in (cycle point, period, parameter) from
   the small cycle the normal form predicts (:mod:`.branch`), through folds of cycles, to the
   range's edge or back to a Hopf point; stable and unstable parts alike, with their multipliers.
   Where a Hopf branch is lost, the stable cycles the flow runs onto between the Hopf points are
   followed too, so a large stable cycle beyond a fold is still reported.

Rooms: continuation of equilibria (``continuation``), detection (``hopf_points``), the branch
(``branch``); this module holds the results and runs the steps.
"""

from __future__ import annotations

import itertools
import math
import time
from dataclasses import dataclass, replace

import numpy as np

from orbitfix.gen.analysis.equilibria import Equilibrium, find_equilibria
from orbitfix.gen.analysis.limit_cycle import find_limit_cycle
from orbitfix.gen.analysis.sweep.branch import BranchPoint, CycleBranch, Fold, follow_branch
from orbitfix.gen.analysis.sweep.continuation import ParameterFamily, continue_across, point_text
from orbitfix.gen.analysis.sweep.hopf_points import HopfPoint, locate_hopf, same_hopf
from orbitfix.gen.errors import InputError
from orbitfix.gen.fan_out import fan_out
from orbitfix.gen.model.definition import Model
from orbitfix.gen.plain_data import plain_number

DEFAULT_SAMPLES = 41
DEFAULT_SECONDS = 60.0         # wall-clock budget of the whole sweep, s
MAX_SAMPLES = 10_000
SEARCH_EVERY = 5               # the full seeded search runs at every 5th sample; continuation between


@dataclass(frozen=True, eq=False)
class SweepSample:
    """The equilibria found at one parameter value."""

    param_value: float
    equilibria: tuple[Equilibrium, ...]


@dataclass(frozen=True, eq=False)
class Sweep:
    """Everything the sweep found."""

    model: Model
    parameter: str
    start: float
    stop: float
    samples: tuple[SweepSample, ...]
    hopf: tuple[HopfPoint, ...]
    branch: tuple[BranchPoint, ...]
    notes: tuple[str, ...]
    complete: bool
    branches: tuple[CycleBranch, ...] = ()
    reason: str = ""

    @property
    def folds(self) -> tuple[Fold, ...]:
        return tuple(f for b in self.branches for f in b.folds if f.kind == "fold")

    @property
    def branch_points(self) -> tuple[Fold, ...]:
        return tuple(f for b in self.branches for f in b.folds if f.kind != "fold")

    def to_json(self) -> dict:
        """Plain data for ``json.dump`` (non-finite numbers as None)."""
        return {
            "model": self.model.name,
            "parameter": self.parameter,
            "from": self.start,
            "to": self.stop,
            "states": list(self.model.state_names),
            "complete": self.complete,
            "hopf": [{
                "param_value": h.param_value,
                "equilibrium": _numbers(h.equilibrium),
                "frequency": h.frequency,
                "kind": h.kind,
                "first_lyapunov_coefficient": plain_number(h.lyapunov.value),
                "crossing_rate": plain_number(h.crossing_rate),
                "unstable_side": h.unstable_side,
                "cycle_side": h.cycle_side,
            } for h in self.hopf],
            "branch": [{
                "hopf_index": b.hopf_index,
                "param_value": b.param_value,
                "found": b.found,
                "stable": b.stable,
                "period": plain_number(b.period),
                "amplitude": plain_number(b.amplitude),
                "max_multiplier": plain_number(b.max_multiplier),
                "verdict": b.verdict,
                "branch_index": b.branch_index,
                "multipliers": _complex(b.multipliers),
            } for b in self.branch],
            "samples": [{
                "param_value": s.param_value,
                "equilibria": [{"state": _numbers(e.state),
                                "eigenvalues": [[plain_number(v.real), plain_number(v.imag)]
                                                for v in e.eigenvalues],
                                "kind": e.kind} for e in s.equilibria],
            } for s in self.samples],
            "branches": [{
                "index": b.index,
                "hopf_index": b.hopf_index,
                "end_hopf_index": b.end_hopf,
                "complete": b.complete,
                "reason": b.reason,
                "born_stable": b.born_stable,
                "points": [_row_json(p) for p in b.points],
            } for b in self.branches],
            "folds": [{
                "branch_index": f.branch_index,
                "param_value": f.param_value,
                "period": f.period,
                "amplitude": f.amplitude,
                "multipliers": _complex(f.multipliers),
            } for f in self.folds],
            "branch_points": [{
                "branch_index": f.branch_index,
                "param_value": f.param_value,
                "period": f.period,
                "amplitude": f.amplitude,
                "multipliers": _complex(f.multipliers),
            } for f in self.branch_points],
            "reason": self.reason,
            "notes": list(self.notes),
        }


def sweep(model: Model, parameter: str, start: float, stop: float, *,
          samples: int = DEFAULT_SAMPLES, workers: int | None = None, follow_cycles: bool = True,
          seconds: float = DEFAULT_SECONDS, scheduler: object | None = None) -> Sweep:
    """Sweep ``parameter`` from ``start`` to ``stop`` over ``samples`` evenly spaced values.

    workers : int -- processes for the independent parts (the equilibrium search at each sample,
        and the branches of different Hopf points); default one per core, 1 runs everything in
        this process.
    scheduler : a Dask scheduler address (or client) to run those parts on a cluster instead.
    follow_cycles : bool -- follow the cycle born at each Hopf point (the slow part).
    seconds : float, s -- wall-clock budget; when it runs out the sweep stops and says so.

    Raises InputError for an unknown parameter, an empty or non-finite range, or too few samples.
    """
    _check_request(model, parameter, start, stop, samples, workers, seconds)
    deadline = time.monotonic() + seconds
    values = np.linspace(start, stop, samples)
    family = ParameterFamily(model, parameter)
    notes: list[str] = []

    searched = sorted(set(range(0, samples, SEARCH_EVERY)) | {samples - 1})
    found = fan_out(_equilibria_at, [(model, parameter, float(values[k])) for k in searched],
                    workers, scheduler)
    states: list[list[np.ndarray]] = [[] for _ in values]
    for k, points in zip(searched, found, strict=True):
        states[k] = points
    states = continue_across(family, values, states)
    table = tuple(SweepSample(float(v), tuple(family.equilibrium(s, float(v)) for s in found))
                  for v, found in zip(values, states, strict=True))

    hopf: list[HopfPoint] = []
    for k in range(samples - 1):
        for state in states[k]:
            try:
                found = locate_hopf(family, model, parameter, state, float(values[k]),
                                    float(values[k + 1]), abs(stop - start), notes)
            except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
                notes.append(f"the eigenvalues of the equilibrium near {point_text(state)} could not "
                             f"be followed from {parameter} = {values[k]:.6g} ({exc})")
                continue
            if found is not None and not any(same_hopf(found, h, abs(stop - start)) for h in hopf):
                hopf.append(found)
    hopf.sort(key=lambda h: (h.param_value - start) / (stop - start))

    branches: list[CycleBranch] = []
    if follow_cycles and hopf:
        spacing = abs(stop - start) / (samples - 1)
        reached: set[int] = set()
        for index, point in enumerate(hopf):
            if index in reached:
                continue
            others = [h for k, h in enumerate(hopf) if k != index]
            begin = None
            if point.kind == "degenerate":
                begin = _cycle_near(model, parameter, point, values, spacing, deadline)
            followed = follow_branch(model, parameter, index, point, (start, stop), spacing, deadline,
                                     others, begin)
            if followed.end_hopf is not None:
                end = followed.end_hopf + (1 if followed.end_hopf >= index else 0)
                reached.add(end)
                followed = replace(followed, end_hopf=end)
            branches.append(followed)
    if follow_cycles and hopf and any(not b.complete for b in branches):
        branches += _branches_from_the_flow(model, parameter, values, hopf, branches, spacing, deadline)
    branch = [row for b in branches for row in b.points]
    lost = [b for b in branches if not b.complete]
    complete = not lost
    reason = "; ".join(f"branch {b.index + 1} ({_origin(b, hopf, parameter)}) is incomplete: {b.reason}"
                       for b in lost)
    if not hopf:
        notes.append(f"no Hopf point between {parameter} = {start:.6g} and {stop:.6g}: no complex "
                     "pair of eigenvalues crosses the imaginary axis between neighbouring samples")
    return Sweep(model=model, parameter=parameter, start=float(start), stop=float(stop),
                 samples=table, hopf=tuple(hopf), branch=tuple(branch), notes=tuple(notes),
                 complete=complete, branches=tuple(branches), reason=reason)


# -- checks and fan-out --------------------------------------------------------------------------


def _check_request(model: Model, parameter: str, start: float, stop: float, samples: int,
                   workers: int, seconds: float) -> None:
    known = model.parameter_values
    if parameter not in known:
        choices = ", ".join(known) or "none"
        raise InputError(f"model '{model.name}' has no parameter '{parameter}' to sweep "
                         f"(its parameters are: {choices})")
    for value, what in ((start, "start"), (stop, "end")):
        if not math.isfinite(value):
            raise InputError(f"the sweep's {what} value must be a finite number, got {value}")
    if start == stop:
        raise InputError(f"the sweep must cover a range: start and end are both {start:g}; "
                         "give two different values")
    if not 3 <= samples <= MAX_SAMPLES:
        raise InputError(f"the number of samples must be between 3 and {MAX_SAMPLES}, got {samples}")
    if workers is not None and workers < 1:
        raise InputError(f"workers must be at least 1, got {workers}")
    if not (math.isfinite(seconds) and seconds > 0):
        raise InputError(f"the time budget must be a positive number of seconds, got {seconds}")


def _origin(branch: CycleBranch, hopf: list[HopfPoint], parameter: str) -> str:
    if branch.hopf_index is None:
        first = branch.points[0].param_value if branch.points else float("nan")
        return f"a cycle the flow runs onto near {parameter} = {first:.6g}"
    return f"from the Hopf point at {parameter} = {hopf[branch.hopf_index].param_value:.8g}"


def _branches_from_the_flow(model: Model, parameter: str, values: np.ndarray, hopf: list[HopfPoint],
                            branches: list[CycleBranch], spacing: float,
                            deadline: float) -> list[CycleBranch]:
    """Branches of stable cycles the Hopf branches did not reach (a large cycle beyond a fold the
    shooting could not pass): the flow from the model's initial state at the samples midway
    between Hopf points, and a sample past each end, finds them; each new one is followed both
    ways."""
    found: list[CycleBranch] = []
    marks = sorted(h.param_value for h in hopf)
    lo, hi = float(min(values)), float(max(values))
    probes = [0.5 * (a + b) for a, b in itertools.pairwise(marks)]
    probes += [v for v in (marks[0] - 2 * spacing, marks[-1] + 2 * spacing) if lo <= v <= hi]
    for value in probes:
        if deadline - time.monotonic() <= 1.0:
            break
        at = model.with_parameters({parameter: value})
        cycle = find_limit_cycle(at, seconds=min(10.0, deadline - time.monotonic()))
        if not cycle.found or not cycle.stable:
            continue
        amplitude = 0.5 * float(cycle.state_max[0] - cycle.state_min[0])
        if any(_on_branch(b, value, amplitude, spacing) for b in [*branches, *found]):
            continue
        point = min(hopf, key=lambda h: abs(h.param_value - value))
        index = len(branches) + len(found)
        new = follow_branch(model, parameter, index, point, (lo, hi), spacing, deadline, list(hopf),
                            (np.array(cycle.point, dtype=float), float(cycle.period), value))
        found.append(replace(new, hopf_index=None, points=tuple(replace(p, hopf_index=None,
                                                                        branch_index=index)
                                                                for p in new.points),
                             folds=tuple(replace(f, branch_index=index) for f in new.folds)))
    return found


def _on_branch(branch: CycleBranch, value: float, amplitude: float, spacing: float) -> bool:
    rows = sorted(branch.points, key=lambda r: abs(r.param_value - value))[:4]
    return any(abs(r.param_value - value) <= spacing and r.amplitude is not None
               and abs(r.amplitude - amplitude) <= 0.05 * max(amplitude, 1e-9) for r in rows)


def _cycle_near(model: Model, parameter: str, point: HopfPoint, values: np.ndarray, spacing: float,
                deadline: float) -> tuple[np.ndarray, float, float] | None:
    """A cycle found by following the flow at the samples nearest a degenerate Hopf point (forward
    on the side where the equilibrium is unstable, backward on the other), to start the branch
    from where the normal form says nothing."""
    sign = 1.0 if point.unstable_side == "above" else -1.0
    near = sorted((float(v) for v in values if abs(v - point.param_value) > 0.5 * spacing),
                  key=lambda v: abs(v - point.param_value))
    for value in near[:4]:
        left = deadline - time.monotonic()
        if left <= 0.0:
            return None
        at = model.with_parameters({parameter: value})
        nudge = 1e-2 * max(1.0, float(np.max(np.abs(point.equilibrium))))
        at = replace(at, states=tuple(replace(s, initial=float(v)) for s, v in
                                      zip(at.states, point.equilibrium + nudge, strict=True)))
        cycle = find_limit_cycle(at, reverse_time=(value - point.param_value) * sign < 0,
                                 seconds=min(10.0, left))
        if cycle.found:
            return np.array(cycle.point, dtype=float), float(cycle.period), value
    return None


def _equilibria_at(model: Model, parameter: str, value: float) -> list[np.ndarray]:
    """The equilibria's states at one parameter value, from the usual seeds."""
    return [np.array(e.state) for e in find_equilibria(model.with_parameters({parameter: value}))]


# -- JSON numbers ----------------------------------------------------------------------------------


def _complex(values: tuple[complex, ...]) -> list[list[float | None]]:
    return [[plain_number(v.real), plain_number(v.imag)] for v in values]


def _row_json(b: BranchPoint) -> dict:
    return {"param_value": b.param_value, "period": plain_number(b.period),
            "amplitude": plain_number(b.amplitude), "stable": b.stable,
            "max_multiplier": plain_number(b.max_multiplier), "multipliers": _complex(b.multipliers)}


def _numbers(values: np.ndarray) -> list[float | None]:
    return [plain_number(v) for v in np.asarray(values, dtype=float)]
