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
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from gen.errors import InputError
from gen.model import FixedPointRequest, Model, Parameter, Rhythm, State

# Four-limb gaits, oscillators in the order left fore, right fore, left hind, right hind (common
# practice: trot pairs the diagonals, pace the same-side legs, bound the fore and the hind legs,
# each pair half a cycle from the other; the walk is the lateral sequence LF, RH, RF, LH, a
# quarter cycle apart).
LIMBS = ("left_fore", "right_fore", "left_hind", "right_hind")
GAITS: dict[str, tuple[float, float, float, float]] = {
    "walk": (0.0, 0.5, 0.75, 0.25),
    "trot": (0.0, 0.5, 0.5, 0.0),
    "pace": (0.0, 0.5, 0.0, 0.5),
    "bound": (0.0, 0.0, 0.5, 0.5),
}
PATTERNS = (*GAITS, "chain")
OSCILLATORS = ("hopf",)
LINKS = ("all", "neighbours")

HOPF_PARAMETERS = {
    "mu": (1.0, "squared amplitude of each oscillator's cycle (mu > 0 oscillates)"),
    "omega": (2 * math.pi, "angular frequency of each oscillator, radians per model time unit"),
    "gamma": (1.0, "convergence gain: how fast each amplitude settles (gamma > 0)"),
    "k": (0.5, "coupling strength: how hard each oscillator is pulled to its wanted lags"),
}
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
    """

    pattern: str
    oscillator: str
    labels: tuple[str, ...]
    members: tuple[tuple[int, ...], ...]
    wanted_lags: tuple[float, ...]
    links: tuple[tuple[int, int], ...]

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
) -> Model:
    """N coupled copies of one oscillator as a single model, with the wanted lags enforced by
    rotation coupling. ``links`` is 'all' (every pair, both ways) or 'neighbours' (a chain)."""
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
    values = {key: default for key, (default, _) in HOPF_PARAMETERS.items()}
    for key, value in (parameters or {}).items():
        if key not in values:
            raise InputError(f"network '{name}': a {oscillator} network has no parameter '{key}' "
                             f"(its parameters are: {', '.join(HOPF_PARAMETERS)})")
        values[key] = float(value)
    if links == "all":
        pairs = tuple((i, j) for i in range(count) for j in range(count) if i != j)
    else:
        pairs = tuple((i, j) for i in range(count) for j in (i - 1, i + 1) if 0 <= j < count)

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
            theta = -2 * math.pi * (wanted[i] - wanted[b])
            c, s = _tidy(math.cos(theta)), _tidy(math.sin(theta))
            x_terms += [(c, f"x{b + 1}"), (-s, f"y{b + 1}")]
            y_terms += [(s, f"x{b + 1}"), (c, f"y{b + 1}")]
        n = i + 1
        growth = f"gamma * (mu - x{n}^2 - y{n}^2)"
        equations.append(f"{growth} * x{n} - omega * y{n}{_coupling(x_terms)}")
        equations.append(f"{growth} * y{n} + omega * x{n}{_coupling(y_terms)}")

    layout = NetworkLayout(pattern=pattern, oscillator=oscillator, labels=names,
                           members=tuple((2 * i, 2 * i + 1) for i in range(count)),
                           wanted_lags=wanted, links=pairs)
    return Model(
        name=name,
        description=description or f"{count} coupled {oscillator} oscillators ({pattern})",
        states=tuple(states),
        parameters=tuple(Parameter(key, values[key], meaning)
                         for key, (_, meaning) in HOPF_PARAMETERS.items()),
        equation_text=tuple(equations),
        rhythm=Rhythm(float(cycle_hz), float(loop_hz)),
        fixed_point=fixed_point or FixedPointRequest(),
        source=source,
        network=layout,
    )


def _tidy(value: float) -> float:
    """Snap rounding noise: cos(pi / 2) is 0, cos(pi) is -1, so such terms fold away exactly."""
    nearest = round(value * 2) / 2
    return nearest if abs(value - nearest) < 1e-12 else value


def _coupling(terms: list[tuple[float, str]]) -> str:
    """' + k * (c1 * s1 + c2 * s2 ...)' with zero coefficients left out and unit ones unwritten."""
    parts = []
    for coefficient, state in terms:
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
