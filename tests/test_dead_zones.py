"""Dead zones of the integer map round a rest state: the search against a hand bound (the half-LSB
argument) and against brute force on the lattice, and the verdict on a start inside."""

from __future__ import annotations

import json
import math
import re
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from orbitfix.gen.model.definition import define_model
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.gen.program.fixed_point import plan_fixed_point
from orbitfix.gen.program.lowering import lower_step
from orbitfix.gen.study.dead_zones import dead_zone, dead_zones, path_lands_inside
from orbitfix.gen.timing.integrators import EULER
from orbitfix.verify.cli.main import main

GROWTH, TURN_RATE, STEP = 0.1, 1.0, 0.05  # x' = s x - w y, y' = w x + s y: an unstable focus
FOCUS = define_model("focus", {"x": 0.5, "y": 0.0},
                     {"x": "s*x - w*y", "y": "w*x + s*y"}, {"s": GROWTH, "w": TURN_RATE},
                     cycle_hz=1, loop_hz=100, integrator="euler")


@pytest.fixture(scope="module")
def focus_plan():
    program = lower_step(FOCUS, EULER, STEP)
    angle = np.linspace(0, 2 * np.pi, 64, endpoint=False)
    return plan_fixed_point(program, np.vstack([np.cos(angle), np.sin(angle)]),
                            FOCUS.initial_state, fraction_bits=12, word_bits=16)


def test_focus_dead_zone_holds_the_half_lsb_disc(focus_plan) -> None:
    """Half-LSB argument (common practice, derived by hand): an Euler step adds
    h (s x - w y) to x and h (w x + s y) to y; by Cauchy-Schwarz each is at most
    h sqrt(s^2 + w^2) |(x, y)|, so with rounding to nearest every state nearer the origin than
    1 / (2 h sqrt(s^2 + w^2)) LSB (less a little for the rounding of the finer intermediates)
    adds zero: it is a rest state and in the zone. Beyond a few times that, the unstable focus
    pushes every state out faster than rounding can hold it."""
    zone = dead_zone(focus_plan, np.zeros(2), sample_steps=0)
    assert zone is not None and zone.method == "exhaustive" and zone.exact
    hand = 1.0 / (2 * STEP * math.hypot(GROWTH, TURN_RATE))  # about 9.95 LSB
    assert min(zone.radius_lsb) >= math.floor(hand) - 1
    assert max(zone.radius_lsb) <= 3 * hand
    disc = [(a, b) for a in range(-8, 9) for b in range(-8, 9) if math.hypot(a, b) < hand - 1]
    assert all(point in zone.members for point in disc)


def test_focus_dead_zone_matches_brute_force_on_the_lattice(focus_plan) -> None:
    """Brute force: every lattice state of a box twice the zone's size, stepped one by one
    (batched) as many steps as the box has states; by the pigeonhole principle a state still in
    the box then never leaves it."""
    zone = dead_zone(focus_plan, np.zeros(2), sample_steps=0)
    half = 2 * max(zone.radius_lsb) + 2
    grid = np.array(np.meshgrid(np.arange(-half, half + 1), np.arange(-half, half + 1),
                                indexing="ij")).reshape(2, -1)
    state, stayed = grid.astype(np.int64), np.ones(grid.shape[1], dtype=bool)
    for _ in range(grid.shape[1] + 1):
        state = golden.step(focus_plan.program, state)
        stayed &= np.all(np.abs(state) <= half, axis=0)
        if not stayed.any():
            break
    brute = {(int(a), int(b)) for a, b in grid[:, stayed].T}
    assert brute == set(zone.members)
    assert zone.states == len(brute)


def test_a_start_inside_the_zone_fails_and_the_initial_state_does_not() -> None:
    """vanderpol at 16 bits: its default initial state never reaches the zone; the seeded fault,
    an initial state at the origin (the 'reset to zero' mistake), lands inside at step 0."""
    model = load_model("vanderpol")
    model16 = replace(model, fixed_point=replace(model.fixed_point, word_bits=16))
    built = design(model16)
    zones = dead_zones(built)
    assert len(zones) == 1 and zones[0].method == "exhaustive"
    assert zones[0].radius_lsb[0] > 0 and zones[0].radius_lsb[1] > 0
    assert path_lands_inside(built, zones, 1000) is None
    at_rest = replace(built, plan=replace(built.plan, initial_state=(0, 0)))
    landed = path_lands_inside(at_rest, zones, 1000)
    assert landed is not None and landed[0] == 0


def test_verify_fails_a_model_that_starts_in_its_dead_zone(tmp_path, capsys) -> None:
    """Seeded fault through the command line: vanderpol with its initial state at the origin
    (inside the 16-bit zone) is bit-exact, yet verify fails and names the zone in its JSON."""
    library = Path(__file__).resolve().parents[1] / "gen" / "model" / "library" / "vanderpol.toml"
    text = library.read_text()
    text = re.sub(r"initial = [-0-9.e]+", "initial = 0.0", text)
    text = re.sub(r'^name = ".*"', 'name = "vdp_zero"', text, flags=re.M)
    model_file = tmp_path / "vdp_zero.toml"
    model_file.write_text(text)
    code = main(["verify", str(model_file), "--word", "16", "--skip-drift", "--states", "1000",
                 "--steps", "1000", "--json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 1 and data["ok"] is False
    assert data["initial_state_in_dead_zone"] is True
    zone = data["dead_zones"][0]
    # one rounding per state update (issue 10) shrank the zone from 219 x 85 LSB to 99 x 53; the
    # increment scaled and rounded once, straight into the state's format, leaves 100 x 50 (measured)
    assert zone["method"] == "exhaustive" and zone["radius_lsb"] == {"x": 100, "y": 50}


def test_the_rest_search_of_a_large_network_is_a_bounded_sample() -> None:
    # A 16-state network: the whole 5^16 cube would need over a terabyte (it crashed verify
    # chain_wave); the search takes the centre, every one-coordinate neighbour and a sample.
    from orbitfix.gen.study.dead_zones import MOST_REST_CANDIDATES, REST_SEARCH, _rest_offsets

    offsets = _rest_offsets(16)
    assert offsets.shape == (16, 1 + 16 * 2 * REST_SEARCH + MOST_REST_CANDIDATES)
    assert not offsets[:, 0].any() and np.abs(offsets).max() == REST_SEARCH
    assert _rest_offsets(2).shape == (2, (2 * REST_SEARCH + 1) ** 2)  # small models: every state


def _followed_every_step(plan, rest: np.ndarray, half: int, steps: int, step) -> np.ndarray:
    """The sampled method written plainly: every seeded sample stepped every step until it
    leaves the box; the offsets of those still inside after ``steps``."""
    from orbitfix.gen.study import dead_zones as zones

    n = plan.program.model_state_count
    offsets = np.random.default_rng(zones.SEED).integers(-half, half + 1, size=(n, zones.SAMPLES))
    states, stayed = rest.reshape(-1, 1) + offsets, np.ones(zones.SAMPLES, dtype=bool)
    for _ in range(steps):
        states = step(plan.program, states)
        stayed &= np.all(np.abs(states - rest.reshape(-1, 1)) <= half, axis=0)
    return offsets[:, stayed]


def test_the_sampled_zone_equals_every_sample_followed_every_step(focus_plan, monkeypatch) -> None:
    # The sampled method stops stepping a sample the step leaves in place inside the box (it stays
    # there for ever: the map is a function of the state alone). Against the plain method on the
    # focus, whose box of half width 16 LSB holds rest states and states that leave: the same
    # samples. Seeded fault: a map with memory (it holds every state for its first step only)
    # breaks that premise, and the comparison sees the difference.
    from orbitfix.gen.study import dead_zones as zones

    found = {}
    keep = zones._result
    monkeypatch.setattr(zones, "_result", lambda plan, eq, rest, dead, *rest_of: (
        found.__setitem__("dead", dead), keep(plan, eq, rest, dead, *rest_of))[1])
    rest = np.zeros(2, dtype=np.int64)
    for half in (8, 16, 32):
        zone = zones._sampled_box(focus_plan, np.zeros(2), rest, half, 300)
        plain = _followed_every_step(focus_plan, rest, half, 300, golden.step)
        assert np.array_equal(found["dead"], plain) and zone.states == plain.shape[1]
    assert 0 < zone.states < zones.SAMPLES  # some samples rest, some leave

    calls, step = [], golden.step

    def with_memory(program, states):
        calls.append(1)
        return states.copy() if len(calls) == 1 else step(program, states)

    monkeypatch.setattr(zones.golden, "step", with_memory)
    zones._sampled_box(focus_plan, np.zeros(2), rest, 32, 300)
    calls.clear()
    assert not np.array_equal(found["dead"], _followed_every_step(focus_plan, rest, 32, 300,
                                                                  with_memory))
