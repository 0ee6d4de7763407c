"""The stepped cycle: measured periods of float step maps against their published discrete facts,
the lowest loop rate, and the search for the cheapest plan."""

from __future__ import annotations

import cmath
import math
from dataclasses import replace

import numpy as np
import pytest

from orbitfix.gen.model.definition import define_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.program.lowering import lower_step
from orbitfix.gen.study.discrete_cycle import (
    CycleTolerance,
    SteppedCycle,
    float_cycle,
    integer_cycle,
    lowest_loop_rate,
    needed_loop_rate,
)
from orbitfix.gen.study.plan_study import coefficient_effect, search
from orbitfix.gen.timing.integrators import INTEGRATORS

HARMONIC = define_model("harmonic", {"x": 1.0, "y": 0.0}, {"x": "y", "y": "-x"},
                        cycle_hz=1, loop_hz=100)
angles = np.linspace(0, 2 * np.pi, 400, endpoint=False)
CIRCLE = np.vstack([np.cos(angles), -np.sin(angles)])
LOW, HIGH = np.array([-1.0, -1.0]), np.array([1.0, 1.0])


@pytest.mark.parametrize("h", [0.05, 0.2])
def test_symplectic_euler_period_is_2pi_over_its_rotation_angle(h: float) -> None:
    # Semi-implicit Euler turns the harmonic oscillator by acos(1 - h^2/2) per step (Hairer,
    # Lubich, Wanner, Geometric Numerical Integration, section I.1.2), so the period in steps is
    # 2 pi / acos(1 - h^2/2).
    program = lower_step(HARMONIC, INTEGRATORS["symplectic-euler"], h)
    measured = float_cycle(program, CIRCLE, 2 * math.pi / h, LOW, HIGH, cycles=8,
                           tolerance=CycleTolerance(period_ppm=1e6, amplitude=1.0))
    assert measured.period_steps == pytest.approx(2 * math.pi / math.acos(1 - h * h / 2), rel=2e-5)


def test_rk4_period_follows_the_phase_of_its_stability_polynomial() -> None:
    # RK4's step multiplies the harmonic oscillator's phasor by R(ih) = 1 + z + z^2/2 + z^3/6 +
    # z^4/24 (Hairer, Norsett, Wanner, section IV.2): the period is 2 pi / arg R(ih) steps.
    h = 0.3
    z = 1j * h
    r = 1 + z + z**2 / 2 + z**3 / 6 + z**4 / 24
    program = lower_step(HARMONIC, INTEGRATORS["rk4"], h)
    measured = float_cycle(program, CIRCLE, 2 * math.pi / h, LOW, HIGH, cycles=8)
    assert measured.period_steps == pytest.approx(2 * math.pi / cmath.phase(r), rel=2e-5)
    expected_ppm = (h / cmath.phase(r) - 1) * 1e6  # period error: positive runs slow
    assert measured.period_error_ppm == pytest.approx(expected_ppm, abs=30)


def test_integer_map_matches_the_float_map_closely_in_32_bits(vanderpol_design) -> None:
    built, cycle = vanderpol_design, vanderpol_design.analysis.cycle
    args = (built.plan.program, cycle.samples, built.timing.steps_per_cycle, cycle.state_min,
            cycle.state_max)
    floats, ints = float_cycle(*args, cycles=3), integer_cycle(*args, cycles=3)
    assert floats.kept and ints.kept
    assert ints.period_error_ppm == pytest.approx(floats.period_error_ppm, abs=1.0)


def test_lowest_loop_rate_is_where_the_cycle_stops_being_kept(vanderpol_design) -> None:
    cycle = vanderpol_design.analysis.cycle
    model = vanderpol_design.model.with_fixed_point(integrator="heun")
    tolerance = CycleTolerance()
    heun = INTEGRATORS["heun"]
    lowest = lowest_loop_rate(model, heun, cycle.period, cycle.samples, cycle.state_min,
                              cycle.state_max, tolerance)
    assert lowest is not None and 4 * model.rhythm.cycle_hz < lowest < model.rhythm.loop_hz

    def kept_at(loop_hz: float) -> bool:
        slower = design(_with_loop(model, loop_hz), analysis=vanderpol_design.analysis)
        return integer_cycle(slower.plan.program, cycle.samples, slower.timing.steps_per_cycle,
                             cycle.state_min, cycle.state_max, cycles=3, points=8,
                             tolerance=tolerance).kept

    assert kept_at(lowest)
    assert not kept_at(lowest / 1.1)


def _with_loop(model, loop_hz: float):
    return replace(model, rhythm=replace(model.rhythm, loop_hz=loop_hz))


def test_needed_rate_scales_with_the_integrators_order() -> None:
    cycle = SteppedCycle(False, "", 100.0, 4000.0, (1.0,), 0.0)
    tolerance = CycleTolerance(period_ppm=1000.0)
    assert needed_loop_rate(100.0, cycle, INTEGRATORS["euler"], tolerance) == pytest.approx(400.0)
    assert needed_loop_rate(100.0, cycle, INTEGRATORS["heun"], tolerance) == pytest.approx(200.0)


def test_search_picks_the_cheapest_candidate_that_keeps_the_cycle(vanderpol_design) -> None:
    found = search(vanderpol_design, workers=2)
    assert found.best is not None and found.best.kept
    costs = [c.cost for c in found.candidates]
    assert costs == sorted(costs)
    cheaper = [c for c in found.candidates if c.cost < found.best.cost]
    assert cheaper and not any(c.kept for c in cheaper)
    assert found.binding.startswith(("period", "amplitude"))


def test_constant_rounding_shifts_frequency_by_the_step_weights_error(vanderpol_design) -> None:
    # Rounding the final weights h*b_i by a common relative error e rescales time by (1 + e), so
    # the frequency moves by e and the period by -e to first order (direct calculation); the stage
    # weights enter at higher order only.
    built = design(vanderpol_design.model.with_fixed_point(word_bits=16),
                   analysis=vanderpol_design.analysis)
    finals = [c for c in built.plan.constants if c.note.startswith("h*1/6") or
              c.note.startswith("h*1/3")]
    errors = {round(c.error / c.real, 12) for c in finals}
    assert len(errors) == 1  # h/6 and h/3 share their mantissa, so their rounding too
    expected_ppm = -errors.pop() * 1e6  # the period moves the other way (positive: runs slow)
    effect = coefficient_effect(built)
    assert effect.period_shift_ppm == pytest.approx(expected_ppm, rel=0.05, abs=0.2)
    assert effect.warning is None
    strict = coefficient_effect(built, CycleTolerance(period_ppm=abs(expected_ppm) / 10))
    assert strict.warning is not None and "past the tolerance" in strict.warning
