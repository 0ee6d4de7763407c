"""Networks of coupled oscillators, built from a declarative description into one ordinary model.

A robot's rhythm generator is often N copies of one oscillator, coupled so that each keeps a chosen
phase lag to the others: four legs in a gait, or the segments of a body in a travelling wave.
Coupling matrices written by hand are where off-by-one mistakes leave an oscillator uncoupled, so
here they are generated from the wanted lags, and the result is a plain :class:`Model` (states
x1, y1, x2, y2, ...) that the whole pipeline -- analysis, code generation, verification -- takes as
it is. The description (which states belong to which oscillator, the wanted lags) rides along in
``Model.network`` for the phase-locking analysis (gen/phase_locking.py).

Lag convention: the lag of oscillator i is how much later than oscillator 1 it passes the same
point of its cycle, in cycles, in [0, 1). Oscillator 1 has lag 0.

Coupling: rotation coupling between Hopf oscillators, the form common in the CPG literature (for
example Righetti and Ijspeert, "Pattern generators with sensory feedback for the control of
quadruped locomotion", ICRA 2008; Ijspeert, "Central pattern generators for locomotion control in
animals and robots: a review", Neural Networks 21, 2008; written here from memory):

    d/dt (x_i, y_i) = F(x_i, y_i) + k * sum over linked j of R(theta_ij) (x_j, y_j)

with R the rotation by theta_ij, the wanted phase of i minus that of j. On the wanted pattern the
rotated state of j is the state of i, so the coupling only pushes along the radius and the lags are
an exact solution. cos(theta_ij) and sin(theta_ij) are numbers computed here, so the equations stay
polynomial and have a fixed-point form.

Phase oscillators with amplitude dynamics (oscillator 'phase_amplitude'; Ijspeert, Crespi, Ryczko
and Cabelguen, "From swimming to walking with a salamander robot driven by a spinal cord model",
Science 315, 2007): states theta_i (an angle), r_i, r_dot_i, with sine coupling and phase biases

    theta_i' = 2 pi nu + sum over linked j of r_j w sin(theta_j - theta_i - phi_ij)
    r_i'' = a (a / 4 (R - r_i) - r_i')

and phi_ij = 2 pi (lag_i - lag_j), so that theta_j - theta_i = phi_ij on the wanted pattern: every
sine vanishes there, every phase turns at 2 pi nu, and the wanted lags are an exact solution.

Switching pattern at run time: Hopf rotations and phase biases alike are blended by a runtime
parameter; a bias through sin(d - phi) = cos(phi) sin(d) - sin(phi) cos(d), so that only the
numbers cos(phi) and sin(phi) are blended (exact at either end, the lags moving between).

Diffusive networks (:func:`build_diffusive_network`): N copies of any single oscillator, with a
user-given coupling matrix k acting on one chosen state s, s_i' += sum_j k_ij (s_j - s_i): the
common linear diffusive coupling of identical oscillators (Pikovsky, Rosenblum and Kurths,
"Synchronization", Cambridge University Press 2001, the chapter on synchronisation of identical
systems, from memory). The coupling vanishes when all copies are equal, so the in-phase motion is
the single oscillator's own.
"""

from __future__ import annotations

import ast
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace

from orbitfix.gen.errors import InputError
from orbitfix.gen.model.definition import FixedPointRequest, Model, Parameter, Rhythm, State
from orbitfix.gen.model.gaits import GAITS

PATTERNS = (*GAITS, "chain")
OSCILLATORS = ("hopf", "phase_amplitude")   # coupled from the wanted lags; others diffusively
LINKS = ("all", "neighbours")

HOPF_PARAMETERS = {
    "mu": (1.0, "squared amplitude of each oscillator's cycle (mu > 0 oscillates)"),
    "omega": (2 * math.pi, "angular frequency of each oscillator, radians per model time unit"),
    "gamma": (1.0, "convergence gain: how fast each amplitude settles (gamma > 0)"),
    "k": (0.5, "coupling strength: how hard each oscillator is pulled to its wanted lags"),
}
PHASE_PARAMETERS = {
    "nu": (1.0, "intrinsic frequency of each oscillator, cycles per model time unit"),
    "R": (1.0, "wanted amplitude of each oscillator"),
    "a": (20.0, "amplitude convergence rate, per model time unit (critically damped)"),
    "w": (2.0, "coupling weight: how hard each phase is pulled to its wanted lags"),
}
PARAMETERS = {"hopf": HOPF_PARAMETERS, "phase_amplitude": PHASE_PARAMETERS}
MIX = "pattern_mix"  # the runtime parameter of a network that switches pattern
# the start is the wanted pattern moved off by these fractions of a cycle, in turn, so that the
# analysis can show the network locking by itself (oscillator 1 is the reference, never moved)
START_OFFSETS = (0.0, 0.12, -0.1, 0.08, -0.06, 0.1, -0.12, 0.05)


@dataclass(frozen=True)
class NetworkLayout:
    """What the phase-locking analysis needs to know about a network model.

    pattern : str -- gait name, 'chain', or 'custom'.
    oscillator : str -- the kind of oscillator copied ('hopf').
    labels : tuple of str -- one name per oscillator (e.g. 'left_fore').
    members : tuple of tuple of int -- state indices of each oscillator; the first is the one whose
        upward crossings mark its phase.
    wanted_lags : tuple of float -- cycles, in [0, 1), relative to oscillator 1.
    links : tuple of (int, int) -- (i, j): oscillator i is pulled by oscillator j (0-based).
    phases : tuple of int or None -- for oscillators with a phase state (an angle), its index in
        each oscillator; the lags are then read from the phases directly.
    switch_lags, switch_pattern : the second pattern's lags and name, for a network that can be
        switched to it at run time (the runtime parameter ``pattern_mix``: 0 holds the first
        pattern, 1 the second); None for a network with one pattern.
    """

    pattern: str
    oscillator: str
    labels: tuple[str, ...]
    members: tuple[tuple[int, ...], ...]
    wanted_lags: tuple[float, ...]
    links: tuple[tuple[int, int], ...]
    phases: tuple[int, ...] | None = None
    switch_lags: tuple[float, ...] | None = None
    switch_pattern: str | None = None

    @property
    def count(self) -> int:
        return len(self.members)


def gait_lags(gait: str) -> tuple[float, ...]:
    """Wanted lags of a four-limb gait (order LF, RF, LH, RH), in cycles."""
    if gait not in GAITS:
        raise InputError(f"unknown gait '{gait}' (gaits: {', '.join(GAITS)})")
    return GAITS[gait]


def chain_lags(count: int, waves: float) -> tuple[float, ...]:
    """Wanted lags along a chain of ``count`` oscillators carrying ``waves`` waves along the body:
    each oscillator lags its head-side neighbour by waves / count of a cycle (one oscillator per
    body segment, the common practice for swimming and crawling robots)."""
    return tuple((i * waves / count) % 1.0 for i in range(count))


def build_network(
    name: str,
    *,
    lags: Sequence[float],
    cycle_hz: float,
    loop_hz: float,
    oscillator: str = "hopf",
    links: str = "all",
    parameters: Mapping[str, float] | None = None,
    labels: Sequence[str] | None = None,
    pattern: str = "custom",
    description: str = "",
    fixed_point: FixedPointRequest | None = None,
    source: str = "python",
    runtime: Mapping[str, Parameter] | None = None,
    switch_to: Sequence[float] | None = None,
    switch_pattern: str = "custom",
    switch_rate: float | None = None,
) -> Model:
    """N coupled copies of one oscillator as a single model, with the wanted lags enforced by
    rotation coupling (Hopf) or phase biases (phase_amplitude). ``links`` is 'all' (every pair,
    both ways) or 'neighbours' (a chain).

    runtime : parameters the firmware may change between steps (each a runtime
        :class:`Parameter` of the oscillator's own, e.g. omega to change the frequency).
    switch_to, switch_rate : a second pattern's lags: each rotation of a Hopf coupling becomes
        (1 - m) R(theta_ij) + m R(theta'_ij), and each phase bias's cosine and sine are blended
        alike (see :func:`_phase_amplitude`), m the runtime parameter ``pattern_mix`` in [0, 1]
        that ramps toward its setting at ``switch_rate`` per second, so the firmware switches
        pattern with a setter, never resetting the state."""
    count = len(lags)
    if oscillator not in OSCILLATORS:
        raise InputError(f"network '{name}': unknown oscillator '{oscillator}' "
                         f"(networks can copy: {', '.join(OSCILLATORS)})")
    if count < 2:
        raise InputError(f"network '{name}': a network needs at least two oscillators")
    if links not in LINKS:
        raise InputError(f"network '{name}': links must be one of {', '.join(LINKS)}, got '{links}'")
    wanted = tuple(float(v) % 1.0 for v in lags)
    if not all(math.isfinite(v) for v in wanted):
        raise InputError(f"network '{name}': every lag must be a finite number of cycles")
    if wanted[0] != 0.0:
        wanted = tuple((v - wanted[0]) % 1.0 for v in wanted)   # oscillator 1 is the reference
    names = tuple(labels) if labels is not None else tuple(f"oscillator_{i + 1}" for i in range(count))
    if len(names) != count:
        raise InputError(f"network '{name}': {len(names)} labels for {count} oscillators")
    table = PARAMETERS[oscillator]
    values = {key: default for key, (default, _) in table.items()}
    for key, value in (parameters or {}).items():
        if key not in values:
            raise InputError(f"network '{name}': a {oscillator} network has no parameter '{key}' "
                             f"(its parameters are: {', '.join(table)})")
        values[key] = float(value)
    pairs = link_pairs(count, links)
    runtime = dict(runtime or {})
    for key, parameter in runtime.items():
        if key not in values or not parameter.runtime:
            raise InputError(f"network '{name}': '{key}' is not a runtime parameter of a "
                             f"{oscillator} network (its parameters are: {', '.join(table)})")
    second = None
    if switch_to is not None:
        if len(switch_to) != count:
            raise InputError(f"network '{name}': the pattern to switch to has {len(switch_to)} "
                             f"lags for {count} oscillators")
        if switch_rate is None or not switch_rate > 0:
            raise InputError(f"network '{name}': switching pattern needs a positive switch_rate "
                             "(the fraction of the change made per second)")
        second = tuple((float(v) - float(switch_to[0])) % 1.0 for v in switch_to)
        problem = switch_problem(wanted, second, pairs, pattern, switch_pattern)
        if problem:
            raise InputError(f"network '{name}': {problem}")
        kind = "gait" if pattern in GAITS and switch_pattern in GAITS else "pattern"
        runtime[MIX] = Parameter(MIX, 0.0, f"{kind} mix, 0 the {pattern} and 1 the "
                                 f"{switch_pattern}; set it to switch, the step ramps it at "
                                 f"{switch_rate:g} per second", runtime=True, low=0.0, high=1.0,
                                 rate=float(switch_rate))
    if oscillator == "phase_amplitude":
        states, equations, layout = _phase_amplitude(wanted, pairs, values, names, pattern,
                                                     second, switch_pattern)
        return _network_model(name, description or f"{count} coupled phase oscillators "
                              f"({pattern})", states, equations, values, table, cycle_hz,
                              loop_hz, fixed_point, source, layout, runtime)

    states, equations = [], []
    radius = math.sqrt(values["mu"]) if values["mu"] > 0 else 1.0
    for i in range(count):
        offset = START_OFFSETS[i % len(START_OFFSETS)]
        angle = -2 * math.pi * (wanted[i] + offset)
        states.append(State(f"x{i + 1}", _tidy(radius * math.cos(angle)),
                            f"output of oscillator {i + 1} ({names[i]})"))
        states.append(State(f"y{i + 1}", _tidy(radius * math.sin(angle)),
                            f"quadrature partner of x{i + 1} (a quarter cycle ahead of it)"))
        x_terms, y_terms = [], []
        for a, b in pairs:
            if a != i:
                continue
            c, s = _rotation(wanted, i, b)
            if second is not None:
                c2, s2 = _rotation(second, i, b)
                c, s = _blend(c, c2), _blend(s, s2)
            x_terms += [(c, f"x{b + 1}"), (_negated(s), f"y{b + 1}")]
            y_terms += [(s, f"x{b + 1}"), (c, f"y{b + 1}")]
        n = i + 1
        growth = f"gamma * (mu - x{n}^2 - y{n}^2)"
        equations.append(f"{growth} * x{n} - omega * y{n}{_coupling(x_terms)}")
        equations.append(f"{growth} * y{n} + omega * x{n}{_coupling(y_terms)}")

    layout = NetworkLayout(pattern=pattern, oscillator=oscillator, labels=names,
                           members=tuple((2 * i, 2 * i + 1) for i in range(count)),
                           wanted_lags=wanted, links=pairs, switch_lags=second,
                           switch_pattern=switch_pattern if second is not None else None)
    return _network_model(name, description or f"{count} coupled {oscillator} oscillators "
                          f"({pattern})", states, equations, values, HOPF_PARAMETERS, cycle_hz,
                          loop_hz, fixed_point, source, layout, runtime)


def link_pairs(count: int, links: str) -> tuple[tuple[int, int], ...]:
    """(i, j) for each oscillator i pulled by j (0-based): every pair both ways ('all'), or each
    oscillator's neighbours along a chain ('neighbours')."""
    if links == "all":
        return tuple((i, j) for i in range(count) for j in range(count) if i != j)
    return tuple((i, j) for i in range(count) for j in (i - 1, i + 1) if 0 <= j < count)


def switch_problem(first: Sequence[float], second: Sequence[float],
                   pairs: tuple[tuple[int, int], ...], pattern: str, switch_pattern: str
                   ) -> str | None:
    """Why a switch between two patterns' lags is refused, or None: the patterns agree on every
    link, or differ on each by 0 or half a turn.

    In the latter case each link that changes has its coupling times (1 - 2 m): at pattern_mix 1
    it is the first pattern's negated, for which the first pattern is still an exact solution, an
    unstable one. Leaving it then rests on the residue of settling and on rounding alone, at no
    time one can state: measured in golden, a phase chain of 4 switched from 1 wave to -1 after
    10 cycles of settling turned over within 2 s, after 100 cycles not within 40 s; four Hopf
    legs switched from trot to pace after 40 cycles left the trot about 4 s after the ramp."""
    moves = [((first[i] - first[j]) - (second[i] - second[j])) % 1.0 for i, j in pairs]
    nothing = [min(v, 1.0 - v) < 1e-9 for v in moves]
    if all(nothing):
        return f"the pattern to switch to has the same lags as the {pattern}: nothing to switch to"
    if all(n or abs(v - 0.5) < 1e-9 for n, v in zip(nothing, moves, strict=True)):
        return (f"from the {pattern} to the {switch_pattern} every link's wanted phase difference "
                "moves by 0 or half a turn, so the first pattern stays an (unstable) solution of "
                "the second's coupling and the network may leave it late or never; pick patterns "
                "apart by less than half a turn on some link (a chain of 4 from 1 wave to 0.5, or "
                "of 8 from 1 to -1; the walk from or to any other gait)")
    return None


def _network_model(name: str, description: str, states: list[State], equations: list[str],
                   values: Mapping[str, float], table: Mapping[str, tuple[float, str]],
                   cycle_hz: float, loop_hz: float, fixed_point: FixedPointRequest | None,
                   source: str, layout: NetworkLayout,
                   runtime: Mapping[str, Parameter]) -> Model:
    """The flattened model of a network, its parameters described by ``table`` (a runtime one
    keeps its range and rate; ``pattern_mix`` comes last)."""
    parameters = [replace(runtime[key], value=values[key], meaning=runtime[key].meaning or meaning)
                  if key in runtime else Parameter(key, values[key], meaning)
                  for key, (_, meaning) in table.items()]
    if MIX in runtime:
        parameters.append(runtime[MIX])
    return Model(
        name=name,
        description=description,
        states=tuple(states),
        parameters=tuple(parameters),
        equation_text=tuple(equations),
        rhythm=Rhythm(float(cycle_hz), float(loop_hz)),
        fixed_point=fixed_point or FixedPointRequest(),
        source=source,
        network=layout,
    )


def _phase_amplitude(wanted: tuple[float, ...], pairs: tuple[tuple[int, int], ...],
                     values: dict[str, float], names: tuple[str, ...], pattern: str,
                     second: tuple[float, ...] | None = None, switch_pattern: str = "custom"
                     ) -> tuple[list[State], list[str], NetworkLayout]:
    """States, equations and layout of a chain or web of phase oscillators with amplitude
    dynamics, the phase biases phi_ij = 2 pi (lag_i - lag_j) making the wanted lags exact.

    With a second pattern's lags (``second``), a coupling term whose two biases differ is written
    by the angle-difference identity sin(d - phi) = cos(phi) sin(d) - sin(phi) cos(d), d =
    theta_j - theta_i, as r_j (C sin(d) - S cos(d)) with C and S the cosines and sines of the two
    biases blended by ``pattern_mix`` (exact at 0 and 1, where the term is the first or the second
    pattern's; a number times a runtime parameter, so it keeps a fixed-point form). A term whose
    two biases agree keeps the one-pattern form, so a network that does not switch is unchanged."""
    states, equations = [], []
    for i in range(len(wanted)):
        n = i + 1
        offset = START_OFFSETS[i % len(START_OFFSETS)]
        phase = (-2 * math.pi * (wanted[i] + offset)) % (2 * math.pi)
        states.append(State(f"theta{n}", _tidy(phase), f"phase of oscillator {n} ({names[i]}), "
                            "radians (modulo 2 pi)", angle=True))
        states.append(State(f"r{n}", _tidy(0.2 * values["R"]),
                            f"amplitude of oscillator {n}; its output is r{n} * (1 + cos(theta{n}))"))
        states.append(State(f"r_dot{n}", 0.0, f"rate of change of r{n}, per model time unit"))
        terms = []
        for a, b in pairs:
            if a != i:
                continue
            bias = _tidy(2 * math.pi * (wanted[i] - wanted[b]))
            if second is not None:
                c, s = _bias_terms(wanted, i, b)
                c2, s2 = _bias_terms(second, i, b)
                if (c, s) != (c2, s2):
                    terms.append(_blended_sine(_blend(c, c2), _blend(s, s2), b + 1, n))
                    continue
            shift = "" if bias == 0.0 else (f" - {bias!r}" if bias > 0 else f" + {-bias!r}")
            terms.append(f"r{b + 1} * sin(theta{b + 1} - theta{n}{shift})")
        coupling = f" + w * ({' + '.join(terms)})" if terms else ""
        equations += [f"6.283185307179586 * nu{coupling}", f"r_dot{n}",
                      f"a * (a / 4 * (R - r{n}) - r_dot{n})"]
    layout = NetworkLayout(pattern=pattern, oscillator="phase_amplitude", labels=names,
                           members=tuple((3 * i + 1, 3 * i, 3 * i + 2) for i in range(len(wanted))),
                           wanted_lags=wanted, links=pairs, phases=tuple(3 * i for i in range(len(wanted))),
                           switch_lags=second,
                           switch_pattern=switch_pattern if second is not None else None)
    return states, equations, layout


def _bias_terms(lags: tuple[float, ...], i: int, j: int) -> tuple[float, float]:
    """cos and sin of the phase bias phi_ij = 2 pi (lag_i - lag_j) (rounding noise snapped)."""
    bias = 2 * math.pi * (lags[i] - lags[j])
    return _tidy(math.cos(bias)), _tidy(math.sin(bias))


def _blended_sine(c: float | str, s: float | str, j: int, i: int) -> str:
    """r_j * sin(theta_j - theta_i - phi) written as r_j * (C sin(d) - S cos(d)), d = theta_j -
    theta_i, with C = cos(phi) and S = sin(phi) numbers or pattern_mix blends; zero terms left
    out (the rotation's coefficients at mix 0 and 1 may each be 0)."""
    difference = f"theta{j} - theta{i}"
    parts = []
    for coefficient, function, sign in ((c, "sin", 1.0), (s, "cos", -1.0)):
        if isinstance(coefficient, float):
            if coefficient == 0.0:
                continue
            coefficient = repr(sign * coefficient)
        elif sign < 0:
            coefficient = f"(-{coefficient})"
        parts.append(f"{coefficient} * {function}({difference})")
    return f"r{j} * ({' + '.join(parts) or '0.0'})"


def build_diffusive_network(
    name: str,
    base: Model,
    *,
    coupling: Sequence[Sequence[float]],
    coupled_state: str,
    cycle_hz: float,
    loop_hz: float,
    lags: Sequence[float] | None = None,
    parameters: Mapping[str, float] | None = None,
    labels: Sequence[str] | None = None,
    description: str = "",
    fixed_point: FixedPointRequest | None = None,
    source: str = "python",
) -> Model:
    """N copies of the single oscillator ``base`` with diffusive coupling on ``coupled_state``:
    s_i' += sum_j coupling[i][j] (s_j - s_i). The matrix is N x N (its diagonal is ignored, being
    multiplied by s_i - s_i = 0, and must be 0). ``lags`` are the wanted lags in cycles (default:
    all 0, in phase, what positive coupling of identical oscillators gives)."""
    if base.network is not None:
        raise InputError(f"network '{name}': the oscillator '{base.name}' is itself a network; "
                         "copy a single oscillator")
    if coupled_state not in base.state_names:
        raise InputError(f"network '{name}': coupled_state '{coupled_state}' is not a state of "
                         f"'{base.name}' (its states are: {', '.join(base.state_names)})")
    if base.angle_mask.any():
        raise InputError(f"network '{name}': '{base.name}' has an angle state; couple phase "
                         "oscillators with oscillator = \"phase_amplitude\" instead")
    matrix = _square_matrix(name, coupling)
    count = len(matrix)
    wanted = tuple(float(v) % 1.0 for v in (lags if lags is not None else [0.0] * count))
    if len(wanted) != count:
        raise InputError(f"network '{name}': {len(wanted)} lags for a {count} x {count} coupling "
                         "matrix")
    if wanted[0] != 0.0:
        wanted = tuple((v - wanted[0]) % 1.0 for v in wanted)
    names = tuple(labels) if labels is not None else tuple(f"oscillator_{i + 1}" for i in range(count))
    if len(names) != count:
        raise InputError(f"network '{name}': {len(names)} labels for {count} oscillators")
    base = base.with_parameters(parameters or {})
    digit = any(s.name[-1].isdigit() for s in base.states)
    rename = [{s.name: f"{s.name}_{i + 1}" if digit else f"{s.name}{i + 1}" for s in base.states}
              for i in range(count)]
    states, equations = [], []
    target = base.state_names.index(coupled_state)
    for i in range(count):
        for k, (state, text) in enumerate(zip(base.states, base.equation_text, strict=True)):
            new = rename[i][state.name]
            states.append(State(new, state.initial, f"{state.meaning} (oscillator {i + 1}, "
                                f"{names[i]})" if state.meaning else f"oscillator {i + 1}, {names[i]}"))
            equation = _renamed(text, rename[i])
            if k == target:
                mine = rename[i][coupled_state]
                terms = [(matrix[i][j], rename[j][coupled_state]) for j in range(count)
                         if j != i and matrix[i][j] != 0.0]
                if terms:
                    equation = f"{equation} + " + " + ".join(
                        f"{value!r} * ({other} - {mine})" for value, other in terms)
            equations.append(equation)
    # the copies start apart, so that the analysis shows the network locking by itself: copy i
    # starts at the single oscillator's start with its first two states turned about the origin
    # by START_OFFSETS[i] of a turn (copy 1 is not moved)
    n = base.dimension
    for i in range(count):
        angle = 2 * math.pi * START_OFFSETS[i % len(START_OFFSETS)]
        first, second = states[n * i], states[n * i + 1]
        x, y = first.initial, second.initial
        states[n * i] = replace_initial(first, _tidy(x * math.cos(angle) - y * math.sin(angle)))
        states[n * i + 1] = replace_initial(second, _tidy(x * math.sin(angle) + y * math.cos(angle)))
    pairs = tuple((i, j) for i in range(count) for j in range(count) if i != j and matrix[i][j] != 0.0)
    layout = NetworkLayout(pattern="custom", oscillator=base.name, labels=names,
                           members=tuple(tuple(range(n * i, n * (i + 1))) for i in range(count)),
                           wanted_lags=wanted, links=pairs)
    return Model(
        name=name,
        description=description or f"{count} diffusively coupled {base.name} oscillators",
        states=tuple(states),
        parameters=base.parameters,
        equation_text=tuple(equations),
        rhythm=Rhythm(float(cycle_hz), float(loop_hz)),
        fixed_point=fixed_point or FixedPointRequest(),
        source=source,
        network=layout,
    )


def replace_initial(state: State, initial: float) -> State:
    return State(state.name, float(initial), state.meaning, state.angle)


def _square_matrix(name: str, coupling: Sequence[Sequence[float]]) -> list[list[float]]:
    """The coupling matrix as floats, checked square (at least 2 x 2), finite, zero diagonal."""
    rows = [list(row) for row in coupling] if isinstance(coupling, Sequence) else []
    count = len(rows)
    if count < 2 or any(len(row) != count for row in rows):
        raise InputError(f"network '{name}': the coupling must be a square matrix of at least 2 x 2 "
                         "numbers, one row per oscillator, e.g. [[0, 0.5], [0.5, 0]]")
    matrix = []
    for i, row in enumerate(rows):
        values = []
        for j, value in enumerate(row):
            if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
                raise InputError(f"network '{name}': coupling row {i + 1}, column {j + 1} must be a "
                                 f"finite number, got {value!r}")
            if i == j and value != 0:
                raise InputError(f"network '{name}': coupling row {i + 1}, column {j + 1} is on the "
                                 "diagonal and must be 0 (an oscillator is not coupled to itself)")
            values.append(float(value))
        matrix.append(values)
    return matrix


def _renamed(text: str, names: Mapping[str, str]) -> str:
    """An equation's text with its state names replaced (parameters and functions kept)."""
    tree = ast.parse(text.strip().replace("^", "**"), mode="eval")
    for node in ast.walk(tree):
        if isinstance(node, ast.Name) and node.id in names:
            node.id = names[node.id]
    return ast.unparse(tree)


def _tidy(value: float) -> float:
    """Snap rounding noise: cos(pi / 2) is 0, cos(pi) is -1, so such terms fold away exactly."""
    nearest = round(value * 2) / 2
    return nearest if abs(value - nearest) < 1e-12 else value


def _rotation(lags: tuple[float, ...], i: int, j: int) -> tuple[float, float]:
    """cos and sin of the rotation that carries oscillator j's state onto i's on the pattern."""
    theta = -2 * math.pi * (lags[i] - lags[j])
    return _tidy(math.cos(theta)), _tidy(math.sin(theta))


def _blend(first: float, second: float) -> float | str:
    """A coupling coefficient that moves from ``first`` to ``second`` as pattern_mix goes 0 -> 1
    (a number when the two patterns agree on it)."""
    if first == second:
        return first
    return f"({first!r} + {_tidy(second - first)!r} * {MIX})"


def _negated(coefficient: float | str) -> float | str:
    return -coefficient if isinstance(coefficient, float) else f"(-{coefficient})"


def _coupling(terms: list[tuple[float | str, str]]) -> str:
    """' + k * (c1 * s1 + c2 * s2 ...)' with zero coefficients left out and unit ones unwritten
    (a coefficient that is an expression is written as it is)."""
    parts = []
    for coefficient, state in terms:
        if isinstance(coefficient, str):
            parts.append(f"+ {coefficient} * {state}")
            continue
        if coefficient == 0.0:
            continue
        sign = "-" if coefficient < 0 else "+"
        size = abs(coefficient)
        body = state if size == 1.0 else f"{size!r} * {state}"
        parts.append(f"{sign} {body}")
    if not parts:
        return ""
    text = " ".join(parts)
    text = text[2:] if text.startswith("+ ") else "-" + text[2:]
    return f" + k * ({text})"
