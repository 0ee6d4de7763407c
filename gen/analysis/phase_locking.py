"""Phase locking of a network of coupled oscillators: the lags it holds against the lags wanted.

A gait or a travelling wave is only delivered if every oscillator settles at its wanted phase lag
and stays there, and the user wants to know how long that takes after a disturbance. This module
reads the lags off the network's limit cycle and follows the network from its initial state (the
built-in networks start off the wanted pattern on purpose) to count the cycles it needs to lock.

Phase of an oscillator: the times its first state crosses its mean over the cycle going up. Lag of
oscillator i: how much later than oscillator 1 it crosses, in cycles, in [0, 1) (gen/networks.py).
Oscillators with a phase state (an angle, ``NetworkLayout.phases``) give their lags directly:
lag_i = (theta_1 - theta_i) / 2 pi modulo 1, the part of a turn by which i trails oscillator 1.
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass

import numpy as np
from scipy.integrate import solve_ivp

from orbitfix.gen.analysis.limit_cycle import LimitCycle
from orbitfix.gen.model.angles import TURN, part_of_turn, wrap_turns
from orbitfix.gen.model.compiled import scalar_function
from orbitfix.gen.model.definition import Model

LOCK_TOLERANCE = 0.01      # cycles: a lag this close to the wanted one counts as locked
STEADY_TOLERANCE = 1e-3    # cycles: lags this close to the cycle's own count as settled
STEADY_CYCLES = 5          # settled for this many cycles in a row ends the run: phase-locked
MAX_CYCLES = 300           # periods the run may take before the verdict 'not locked'
CHUNK_CYCLES = 10          # periods integrated at a time between checks
RUN_SECONDS = 15.0         # wall-clock budget of the run, s
RUN_RTOL = 1e-9


@dataclass(frozen=True)
class PhaseLocking:
    """The network's lags, measured and wanted, in cycles.

    phase_locked : bool -- the run from the initial state settled on constant lags (those of a
        stable limit cycle of the whole network).
    lags, wanted_lags, lag_errors : tuple of float -- per oscillator, relative to oscillator 1;
        an error is measured minus wanted, wrapped into [-0.5, 0.5). lags are None without a cycle.
    common_period : float or None, model time units -- the network's cycle period.
    cycles_to_lock : int or None -- cycles of oscillator 1 from the initial state until every lag
        is within LOCK_TOLERANCE of its wanted value for good; None if that never happened.
    verdict : str -- one plain sentence for reports.
    """

    labels: tuple[str, ...]
    phase_locked: bool
    wanted_lags: tuple[float, ...]
    lags: tuple[float, ...] | None
    lag_errors: tuple[float, ...] | None
    common_period: float | None
    cycles_to_lock: int | None
    verdict: str

    @property
    def ok(self) -> bool:
        """Locked, and every lag within LOCK_TOLERANCE of the wanted one."""
        return bool(self.phase_locked and self.lag_errors is not None
                    and max(abs(e) for e in self.lag_errors) <= LOCK_TOLERANCE)

    def to_json(self) -> dict:
        return {"phase_locked": self.phase_locked, "labels": list(self.labels),
                "lags": None if self.lags is None else list(self.lags),
                "wanted_lags": list(self.wanted_lags),
                "lag_errors": None if self.lag_errors is None else list(self.lag_errors),
                "lag_tolerance": LOCK_TOLERANCE, "common_period": self.common_period,
                "cycles_to_lock": self.cycles_to_lock, "ok": self.ok, "verdict": self.verdict}


def analyse_locking(model: Model, cycle: LimitCycle) -> PhaseLocking:
    """Lags on the network's limit cycle and the cycles needed to lock from the initial state."""
    layout = model.network
    if layout is None:
        raise ValueError(f"model '{model.name}' is not a network")
    wanted = tuple(layout.wanted_lags)
    labels = tuple(layout.labels)
    if not (cycle.found and cycle.stable):
        return PhaseLocking(labels, False, wanted, None, None, None, None,
                            "not phase-locked: the network has no stable limit cycle to lock onto")
    if layout.phases is not None:
        return _locking_of_phases(model, cycle, labels, wanted)
    first = [members[0] for members in layout.members]
    samples = cycle.samples[first]
    levels = samples.mean(axis=1)
    crossings = [_cycle_crossing(row, level, cycle.period) for row, level in zip(samples, levels,
                                                                                strict=True)]
    if any(c is None for c in crossings):
        return PhaseLocking(labels, False, wanted, None, None, cycle.period, None,
                            "not phase-locked: some oscillator does not oscillate on the cycle")
    lags = tuple(_tidy_lag((c - crossings[0]) / cycle.period) for c in crossings)
    locked, to_lock, note = _run_to_lock(model, first, levels, cycle.period, lags, wanted)
    return _judged(labels, wanted, lags, cycle.period, locked, to_lock, note)


def _judged(labels: tuple[str, ...], wanted: tuple[float, ...], lags: tuple[float, ...],
            period: float, locked: bool, to_lock: int | None, note: str) -> PhaseLocking:
    """The verdict from the lags on the cycle and the run from the initial state."""
    errors = tuple(float(wrap_turns(m - w)) for m, w in zip(lags, wanted, strict=True))
    worst = max(abs(e) for e in errors)
    if not locked:
        verdict = f"not phase-locked from the initial state: {note}"
    elif worst > LOCK_TOLERANCE:
        verdict = (f"phase-locked, but not at the wanted lags: the worst lag is {worst:.3g} cycles "
                   f"off (tolerance {LOCK_TOLERANCE:g})")
    else:
        verdict = (f"phase-locked at the wanted lags (worst error {worst:.2g} cycles), common period "
                   f"{period:.6g} model time units; locked within {LOCK_TOLERANCE:g} cycles "
                   f"after {to_lock} cycle{'' if to_lock == 1 else 's'} from the initial state")
    return PhaseLocking(labels, locked, wanted, lags, errors, float(period), to_lock, verdict)


def _phase_lags(thetas: np.ndarray) -> np.ndarray:
    """Lags in cycles, in [0, 1), from phases (rows: oscillators; columns: instants, averaged
    on the circle): the part of a turn by which each trails oscillator 1."""
    trail = np.exp(1j * (thetas[:1] - thetas)).mean(axis=-1)
    return part_of_turn(np.angle(trail) / TURN)


def _locking_of_phases(model: Model, cycle: LimitCycle, labels: tuple[str, ...],
                       wanted: tuple[float, ...]) -> PhaseLocking:
    """Lags read from the phase states on the cycle, and the run from the initial state sampled
    once per period (the phases' differences are the lags at every instant)."""
    phases = list(model.network.phases)
    lags = tuple(_tidy_lag(v) for v in _phase_lags(cycle.samples[phases]))
    rates = _rates_with_deadline(model)

    period = float(cycle.period)
    x, history = model.initial_state.astype(float), []
    note = (f"after {MAX_CYCLES} periods the lags still had not settled on the cycle's")
    locked = False
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore", RuntimeWarning)
        for chunk in range(MAX_CYCLES // CHUNK_CYCLES):
            marks = period * (chunk * CHUNK_CYCLES + np.arange(1, CHUNK_CYCLES + 1))
            try:
                run = solve_ivp(rates, (marks[0] - period, marks[-1]), x, method="DOP853",
                                rtol=RUN_RTOL, atol=1e-9, t_eval=marks)
            except TimeoutError:
                note = f"the run used up its {RUN_SECONDS:g} s budget"
                break
            if run.status == -1 or not np.all(np.isfinite(run.y)):
                note = f"the integration failed near t = {run.t[-1] if run.t.size else marks[0]:.4g}"
                break
            history += [tuple(float(v) for v in _phase_lags(run.y[phases, k:k + 1]))
                        for k in range(run.y.shape[1])]
            x = run.y[:, -1]
            if len(history) >= STEADY_CYCLES and all(
                    max(abs(wrap_turns(a - b)) for a, b in zip(row, lags, strict=True))
                    <= STEADY_TOLERANCE for row in history[-STEADY_CYCLES:]):
                locked = True
                break
    to_lock = _cycles_to_lock(history, wanted) if locked else None
    if to_lock is not None:
        to_lock += 1   # history[k] is the lags after k + 1 periods
    return _judged(labels, wanted, lags, period, locked, to_lock, "" if locked else note)


def _tidy_lag(value: float) -> float:
    lag = float(part_of_turn(value))
    return 0.0 if lag > 1.0 - 1e-12 else lag


def _cycle_crossing(row: np.ndarray, level: float, period: float) -> float | None:
    """Time of the upward crossing of ``level`` in one period of evenly spaced samples (cyclic),
    by linear interpolation between the two samples around it."""
    count = row.size
    below = row - level
    following = np.roll(below, -1)
    found = np.nonzero((below < 0.0) & (following >= 0.0))[0]
    if found.size == 0:
        return None
    k = int(found[0])
    fraction = below[k] / (below[k] - following[k])
    return (k + fraction) * period / count


def _run_to_lock(model: Model, first: list[int], levels: np.ndarray, period: float,
                 cycle_lags: tuple[float, ...], wanted: tuple[float, ...]
                 ) -> tuple[bool, int | None, str]:
    """Follow the network from its initial state: (settled on the cycle's lags, cycles until
    every lag stays within LOCK_TOLERANCE of the wanted one, why not when not settled)."""
    rates = _rates_with_deadline(model)

    events = []
    for index, level in zip(first, levels, strict=True):
        def rising(t: float, x: np.ndarray, index: int = index, level: float = level) -> float:
            return x[index] - level

        rising.direction = 1.0
        events.append(rising)
    times: list[list[float]] = [[] for _ in first]
    x, t = model.initial_state.astype(float), 0.0
    history: list[tuple[float, ...]] = []
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore", RuntimeWarning)
        while t < MAX_CYCLES * period:
            try:
                run = solve_ivp(rates, (t, t + CHUNK_CYCLES * period), x, method="DOP853",
                                rtol=RUN_RTOL, atol=1e-9, events=events)
            except TimeoutError:
                return False, None, f"the run used up its {RUN_SECONDS:g} s budget"
            if run.status == -1 or not np.all(np.isfinite(run.y[:, -1])):
                return False, None, f"the integration failed near t = {run.t[-1]:.4g}"
            for store, found in zip(times, run.t_events, strict=True):
                store.extend(float(v) for v in found)
            x, t = run.y[:, -1], float(run.t[-1])
            history = _lags_per_cycle(times, period)
            if len(history) >= STEADY_CYCLES and all(
                    max(abs(wrap_turns(a - b)) for a, b in zip(lags, cycle_lags, strict=True))
                    <= STEADY_TOLERANCE for lags in history[-STEADY_CYCLES:]):
                return True, _cycles_to_lock(history, wanted), ""
    return False, None, (f"after {MAX_CYCLES} periods the lags still had not settled on the "
                         "cycle's")


def _lags_per_cycle(times: list[list[float]], period: float) -> list[tuple[float, ...]]:
    """For each upward crossing of oscillator 1 (one per cycle), each oscillator's lag: the time to
    its next upward crossing, in cycles. Cycles whose crossings are not all in yet are left out."""
    history = []
    others = [np.asarray(t) for t in times]
    for start in times[0]:
        lags = []
        for crossings in others:
            later = crossings[crossings >= start - 1e-9 * period]
            if later.size == 0:
                return history
            lags.append(_tidy_lag((later[0] - start) / period))
        history.append(tuple(lags))
    return history


def _cycles_to_lock(history: list[tuple[float, ...]], wanted: tuple[float, ...]) -> int | None:
    """The first cycle from which every later cycle has every lag within LOCK_TOLERANCE."""
    locked_from = None
    for k in range(len(history) - 1, -1, -1):
        worst = max(abs(wrap_turns(a - b)) for a, b in zip(history[k], wanted, strict=True))
        if worst > LOCK_TOLERANCE:
            break
        locked_from = k
    return locked_from if locked_from is not None else None


def _rates_with_deadline(model: Model):
    """The vector field as fast scalar code, raising TimeoutError once RUN_SECONDS have passed
    (every run of the network has a time budget)."""
    field = scalar_function(model.state_symbols, model.resolved_equations)
    deadline = time.monotonic() + RUN_SECONDS

    def rates(t: float, x: np.ndarray) -> list[float]:
        if time.monotonic() > deadline:
            raise TimeoutError
        return field(*x.tolist())

    return rates
