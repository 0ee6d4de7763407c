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
4. Branch: natural continuation of the cycle from the Hopf point into the side where it exists,
   one :func:`gen.limit_cycle.find_limit_cycle` per sample, each started from the last cycle's
   point (the first from the small cycle the normal form predicts).
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass, replace

import numpy as np
import sympy
from scipy.optimize import root

from orbitfix.gen.analysis.equilibria import Equilibrium, classify, find_equilibria
from orbitfix.gen.analysis.hopf import LyapunovCoefficient, first_lyapunov_coefficient
from orbitfix.gen.analysis.limit_cycle import find_limit_cycle
from orbitfix.gen.errors import InputError
from orbitfix.gen.fan_out import fan_out
from orbitfix.gen.model.definition import Model

DEFAULT_SAMPLES = 41
BISECTION_TOLERANCE = 1e-10    # relative to the sweep's span
SAME_POINT = 1e-6              # relative distance under which two equilibria are one
DEFAULT_SECONDS = 60.0         # wall-clock budget of the whole sweep, s
CYCLE_SECONDS = 10.0           # wall-clock budget of one cycle search on the branch, s
MAX_SAMPLES = 10_000
COUNT_TOLERANCE = 1e-14        # a real part above this fraction of the spectral radius is positive
SEARCH_EVERY = 5               # the full seeded search runs at every 5th sample; continuation between
LEAD_IN = (0.125, 0.25, 0.5)   # first branch points, as fractions of the sample spacing


@dataclass(frozen=True, eq=False)
class SweepSample:
    """The equilibria found at one parameter value."""

    param_value: float
    equilibria: tuple[Equilibrium, ...]


@dataclass(frozen=True, eq=False)
class HopfPoint:
    """Where a complex pair of one equilibrium's eigenvalues crosses the imaginary axis.

    param_value : float -- the parameter there (bisected).
    equilibrium : ndarray, shape (n,) -- the equilibrium there.
    eigenvalues : ndarray, shape (n,), complex -- of the Jacobian there.
    frequency : float -- imaginary part of the crossing pair, radians per model time unit.
    lyapunov : LyapunovCoefficient -- the first Lyapunov coefficient and the kind it gives.
    crossing_rate : float -- d(real part of the pair)/d(parameter) at the crossing.
    unstable_side : str -- 'above' or 'below': the side where the equilibrium has the more
        eigenvalues with positive real part.
    """

    param_value: float
    equilibrium: np.ndarray
    eigenvalues: np.ndarray
    frequency: float
    lyapunov: LyapunovCoefficient
    crossing_rate: float
    unstable_side: str

    @property
    def kind(self) -> str:
        return self.lyapunov.kind

    @property
    def cycle_side(self) -> str:
        """The side where the small cycle exists: the unstable side for a supercritical (and,
        followed by the forward flow, a degenerate) point, the stable side for a subcritical one."""
        if self.kind == "subcritical":
            return "below" if self.unstable_side == "above" else "above"
        return self.unstable_side


@dataclass(frozen=True)
class BranchPoint:
    """The cycle followed from Hopf point ``hopf_index`` at one parameter value.

    amplitude : half the peak-to-peak range of the first state over the cycle.
    max_multiplier : the largest nontrivial Floquet multiplier modulus (below 1: stable).
    """

    hopf_index: int
    param_value: float
    found: bool
    verdict: str
    period: float | None = None
    amplitude: float | None = None
    max_multiplier: float | None = None
    stable: bool = False


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
                "first_lyapunov_coefficient": _number(h.lyapunov.value),
                "crossing_rate": _number(h.crossing_rate),
                "unstable_side": h.unstable_side,
                "cycle_side": h.cycle_side,
            } for h in self.hopf],
            "branch": [{
                "hopf_index": b.hopf_index,
                "param_value": b.param_value,
                "found": b.found,
                "stable": b.stable,
                "period": _number(b.period),
                "amplitude": _number(b.amplitude),
                "max_multiplier": _number(b.max_multiplier),
                "verdict": b.verdict,
            } for b in self.branch],
            "samples": [{
                "param_value": s.param_value,
                "equilibria": [{"state": _numbers(e.state),
                                "eigenvalues": [[_number(v.real), _number(v.imag)]
                                                for v in e.eigenvalues],
                                "kind": e.kind} for e in s.equilibria],
            } for s in self.samples],
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
    family = _Family(model, parameter)
    notes: list[str] = []

    searched = sorted(set(range(0, samples, SEARCH_EVERY)) | {samples - 1})
    found = fan_out(_equilibria_at, [(model, parameter, float(values[k])) for k in searched],
                    workers, scheduler)
    states: list[list[np.ndarray]] = [[] for _ in values]
    for k, points in zip(searched, found, strict=True):
        states[k] = points
    states = _continue_across(family, values, states)
    table = tuple(SweepSample(float(v), tuple(family.equilibrium(s, float(v)) for s in found))
                  for v, found in zip(values, states, strict=True))

    hopf: list[HopfPoint] = []
    for k in range(samples - 1):
        for state in states[k]:
            try:
                found = _crossing(family, model, parameter, state, float(values[k]),
                                  float(values[k + 1]), abs(stop - start), notes)
            except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
                notes.append(f"the eigenvalues of the equilibrium near {_text(state)} could not be "
                             f"followed from {parameter} = {values[k]:.6g} ({exc})")
                continue
            if found is not None and not any(_same_hopf(found, h, abs(stop - start)) for h in hopf):
                hopf.append(found)
    hopf.sort(key=lambda h: (h.param_value - start) / (stop - start))

    branch: list[BranchPoint] = []
    complete = True
    if follow_cycles and hopf:
        jobs = []
        for index, point in enumerate(hopf):
            sign = 1.0 if point.cycle_side == "above" else -1.0
            spacing = abs(stop - start) / (samples - 1)
            ahead = sorted([float(v) for v in values if (v - point.param_value) * sign > 0.5 * spacing]
                           + [point.param_value + sign * f * spacing for f in LEAD_IN],
                           key=lambda v: abs(v - point.param_value))
            ahead = [v for v in ahead if min(start, stop) <= v <= max(start, stop)]
            jobs.append((model, parameter, index, point, ahead, deadline))
        for points, note, finished in fan_out(_follow_branch, jobs, workers, scheduler):
            branch.extend(points)
            notes.extend([note] if note else [])
            complete = complete and finished
    if not hopf:
        notes.append(f"no Hopf point between {parameter} = {start:.6g} and {stop:.6g}: no complex "
                     "pair of eigenvalues crosses the imaginary axis between neighbouring samples")
    return Sweep(model=model, parameter=parameter, start=float(start), stop=float(stop),
                 samples=table, hopf=tuple(hopf), branch=tuple(branch), notes=tuple(notes),
                 complete=complete)


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


def _equilibria_at(model: Model, parameter: str, value: float) -> list[np.ndarray]:
    """The equilibria's states at one parameter value, from the usual seeds."""
    return [np.array(e.state) for e in find_equilibria(model.with_parameters({parameter: value}))]


# -- the family of vector fields along the parameter -------------------------------------------


class _Family:
    """f(x; p) and its Jacobian with the swept parameter p left free, compiled once."""

    def __init__(self, model: Model, parameter: str) -> None:
        fixed = {symbol: sympy.Float(p.value) for symbol, p in zip(model.parameter_symbols,
                                                                   model.parameters, strict=True)
                 if p.name != parameter}
        swept = sympy.Symbol(parameter, real=True)
        states = list(model.state_symbols)
        rates = [eq.xreplace(fixed) for eq in model.equations]
        jacobian = sympy.Matrix(rates).jacobian(sympy.Matrix(states))
        self.n = len(states)
        self._field = sympy.lambdify([*states, swept], rates, modules="math", cse=True)
        self._jacobian = sympy.lambdify([*states, swept], list(jacobian), modules="math", cse=True)

    def field(self, x: np.ndarray, p: float) -> np.ndarray:
        return np.array(self._field(*x.tolist(), p), dtype=float)

    def jacobian(self, x: np.ndarray, p: float) -> np.ndarray:
        return np.array(self._jacobian(*x.tolist(), p), dtype=float).reshape(self.n, self.n)

    def eigenvalues(self, x: np.ndarray, p: float) -> np.ndarray:
        return np.linalg.eigvals(self.jacobian(x, p)).astype(complex)

    def equilibrium(self, x: np.ndarray, p: float) -> Equilibrium:
        values = self.eigenvalues(x, p)
        values = np.array(sorted(values, key=lambda v: (-v.real, -v.imag)), dtype=complex)
        return Equilibrium(state=np.array(x, dtype=float), eigenvalues=values, kind=classify(values))

    def root(self, seed: np.ndarray, p: float) -> np.ndarray | None:
        """A root of f(.; p) from ``seed`` (scipy's hybrid method, analytic Jacobian), or None."""
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            try:
                result = root(lambda x: self.field(x, p), seed, jac=lambda x: self.jacobian(x, p),
                              method="hybr", options={"xtol": 1e-13})
                x = np.asarray(result.x, dtype=float)
                if not np.all(np.isfinite(x)):
                    return None
                size = max(1.0, float(np.max(np.abs(x))))
                rate = max(1.0, float(np.max(np.abs(self.jacobian(x, p)))))
                left = np.abs(self.field(x, p))
            except (ValueError, ArithmeticError, OverflowError, np.linalg.LinAlgError):
                return None
        if not np.all(np.isfinite(left)) or float(np.max(left)) > 1e-9 * size * rate:
            return None
        return x

    def follow(self, x: np.ndarray, p_from: float, p_to: float, steps: int = 2) -> np.ndarray | None:
        """The equilibrium at ``x`` (parameter ``p_from``) continued to ``p_to`` in small steps,
        each seeded by the last, or None when it is lost (a fold, where it meets another)."""
        for p in np.linspace(p_from, p_to, steps + 1)[1:]:
            x = self.root(x, float(p))
            if x is None:
                return None
        return x

    def unstable_count(self, x: np.ndarray, p: float) -> int:
        values = self.eigenvalues(x, p)
        scale = float(np.max(np.abs(values))) if values.size else 0.0
        return int(np.sum(values.real > COUNT_TOLERANCE * scale))


def _same(a: np.ndarray, b: np.ndarray) -> bool:
    size = max(1.0, float(np.max(np.abs(a))), float(np.max(np.abs(b))))
    return float(np.max(np.abs(a - b))) <= SAME_POINT * size


def _continue_across(family: _Family, values: np.ndarray,
                     states: list[list[np.ndarray]]) -> list[list[np.ndarray]]:
    """Add to each sample the equilibria continued from its neighbours (forward, then backward),
    so an equilibrium the seeds missed at one sample is still tracked there."""
    states = [list(found) for found in states]
    order = list(range(1, len(values))), list(range(len(values) - 2, -1, -1))
    for indices, step in zip(order, (-1, 1), strict=True):
        for k in indices:
            for x in states[k + step]:
                y = family.follow(x, float(values[k + step]), float(values[k]))
                if y is not None and not any(_same(y, other) for other in states[k]):
                    states[k].append(y)
    for found in states:
        found.sort(key=lambda x: tuple(float(f"{v:.9g}") for v in x))
    return states


# -- detection ---------------------------------------------------------------------------------


def _crossing(family: _Family, model: Model, parameter: str, x: np.ndarray, lo: float, hi: float,
              span: float, notes: list[str]) -> HopfPoint | None:
    """The Hopf point of the equilibrium at ``x`` (parameter ``lo``) before ``hi``, if any."""
    y = family.follow(x, lo, hi)
    if y is None:
        return None
    count_lo, count_hi = family.unstable_count(x, lo), family.unstable_count(y, hi)
    if count_lo == count_hi:
        return None
    x_lo, x_hi, first_hi = x, y, count_hi
    while abs(hi - lo) > BISECTION_TOLERANCE * span:
        mid = 0.5 * (lo + hi)
        x_mid = family.root(x_lo, mid)
        if x_mid is None:
            notes.append(f"the equilibrium near {_text(x_lo)} was lost at {parameter} = {mid:.8g} "
                         "while locating a change in its stability")
            return None
        if family.unstable_count(x_mid, mid) == count_lo:
            lo, x_lo = mid, x_mid
        else:
            hi, x_hi = mid, x_mid
    value = 0.5 * (lo + hi)
    x_at = family.root(x_lo, value)
    if x_at is None:
        return None
    eigenvalues = family.eigenvalues(x_at, value)
    critical = int(np.argmin(np.abs(eigenvalues.real)))
    scale = float(np.max(np.abs(eigenvalues)))
    frequency = abs(float(eigenvalues[critical].imag))
    if frequency <= 1e-6 * scale:
        notes.append(f"a real eigenvalue crosses zero at {parameter} = {value:.10g} at the "
                     f"equilibrium {_text(x_at)} (a fold or branch point of equilibria, not a "
                     "Hopf bifurcation)")
        return None
    if abs(first_hi - count_lo) != 2:
        notes.append(f"more than one pair of eigenvalues changes side between {parameter} = "
                     f"{lo:.8g} and {hi:.8g}; the first crossing found is reported")
    at = model.with_parameters({parameter: value})
    try:
        lyapunov = first_lyapunov_coefficient(at, x_at)
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        notes.append(f"the first Lyapunov coefficient at {parameter} = {value:.10g} could not be "
                     f"computed ({exc}); the Hopf point is reported as degenerate")
        lyapunov = LyapunovCoefficient(value=float("nan"), frequency=frequency, scale=0.0,
                                       kind="degenerate")
    step = 1e-6 * span
    rate = _crossing_rate(family, x_at, value, step)
    side = "above" if family.unstable_count(x_hi, hi) > count_lo else "below"
    if hi < lo:
        side = "below" if side == "above" else "above"
    return HopfPoint(param_value=value, equilibrium=x_at, eigenvalues=eigenvalues,
                     frequency=frequency, lyapunov=lyapunov, crossing_rate=rate, unstable_side=side)


def _crossing_rate(family: _Family, x: np.ndarray, p: float, step: float) -> float:
    """d(real part of the pair nearest the imaginary axis)/dp, by central differences."""
    parts = []
    for q in (p - step, p + step):
        y = family.root(x, q)
        if y is None:
            return float("nan")
        values = family.eigenvalues(y, q)
        parts.append(float(values[int(np.argmin(np.abs(values.real)))].real))
    return (parts[1] - parts[0]) / (2.0 * step)


def _same_hopf(a: HopfPoint, b: HopfPoint, span: float) -> bool:
    return (abs(a.param_value - b.param_value) <= 1e-8 * span
            and _same(a.equilibrium, b.equilibrium))


# -- the branch of cycles --------------------------------------------------------------------------


def _follow_branch(model: Model, parameter: str, index: int, point: HopfPoint, values: list[float],
                   deadline: float) -> tuple[list[BranchPoint], str, bool]:
    """Follow the cycle born at ``point`` through ``values`` (ordered away from the Hopf point).

    Returns the branch points, a note (empty when nothing needs saying) and whether the budget
    allowed the whole branch.
    """
    family = _Family(model, parameter)
    reverse = point.kind == "subcritical"    # an unstable cycle attracts when time runs backward
    points: list[BranchPoint] = []
    start: np.ndarray | None = None
    x_eq, p_eq = point.equilibrium, point.param_value
    where = f"the cycle from the Hopf point at {parameter} = {point.param_value:.8g}"
    for value in values:
        left = deadline - time.monotonic()
        if left <= 0.0:
            return points, f"{where} was followed only to {parameter} = {p_eq:.8g}: the sweep's " \
                           "time budget ran out", False
        y = family.follow(x_eq, p_eq, value, steps=4)
        if y is not None:
            x_eq, p_eq = y, value
        if start is None:
            try:
                start = _first_guess(family, point, x_eq, value)
            except (ValueError, ArithmeticError, np.linalg.LinAlgError):
                start = x_eq + 1e-3 * max(1.0, float(np.max(np.abs(x_eq))))
        at = model.with_parameters({parameter: value})
        at = replace(at, states=tuple(replace(s, initial=float(v))
                                      for s, v in zip(at.states, start, strict=True)))
        cycle = find_limit_cycle(at, reverse_time=reverse, seconds=min(CYCLE_SECONDS, left))
        if not cycle.found:
            points.append(BranchPoint(hopf_index=index, param_value=value, found=False,
                                      verdict=cycle.verdict))
            return points, f"{where} was lost at {parameter} = {value:.8g}: {cycle.verdict}", True
        amplitude = 0.5 * float(cycle.state_max[0] - cycle.state_min[0])
        points.append(BranchPoint(hopf_index=index, param_value=value, found=True,
                                  verdict=cycle.verdict, period=float(cycle.period),
                                  amplitude=amplitude, max_multiplier=cycle.stability_margin,
                                  stable=bool(cycle.stable)))
        start = np.array(cycle.point)
    return points, "", True


def _first_guess(family: _Family, point: HopfPoint, x_eq: np.ndarray, value: float) -> np.ndarray:
    """A point on the small cycle the Hopf normal form predicts at ``value``: with q the unit
    eigenvector of the pair (real part beta) and l1 the first Lyapunov coefficient, the cycle is
    x_eq + 2 Re(q z) with |z|^2 = -beta / (w l1) (Kuznetsov, sec. 3.5 and 5.4). Where the
    prediction is unusable (a degenerate point) the start is a small nudge along Re q."""
    values, vectors = np.linalg.eig(family.jacobian(x_eq, value))
    upper = [i for i in range(values.size) if values[i].imag > 0.0]
    if not upper:
        return x_eq + 1e-3 * max(1.0, float(np.max(np.abs(x_eq))))
    i = min(upper, key=lambda k: abs(values[k].imag - point.frequency))
    q = vectors[:, i] / np.linalg.norm(vectors[:, i])
    beta, l1 = float(values[i].real), point.lyapunov.value
    radius2 = -beta / (point.frequency * l1) if point.kind != "degenerate" else float("nan")
    if not (math.isfinite(radius2) and radius2 > 0.0):
        radius2 = (1e-3 * max(1.0, float(np.max(np.abs(x_eq))))) ** 2
    return x_eq + 2.0 * math.sqrt(radius2) * q.real


# -- text ------------------------------------------------------------------------------------------


def _text(x: np.ndarray) -> str:
    return "(" + ", ".join(f"{v:.6g}" for v in np.asarray(x, dtype=float)) + ")"


def _number(value: float | None) -> float | None:
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _numbers(values: np.ndarray) -> list[float | None]:
    return [_number(v) for v in np.asarray(values, dtype=float)]
