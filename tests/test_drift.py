"""The long-run drift proof: Brent's algorithm in the C harness against brute force and the
Hull-Dobell theorem, the harness's streaming statistics against numpy on the golden trajectory,
and the verdicts on a healthy and on broken designs."""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pytest
from conftest import brute_force_cycle

from orbitfix.gen.errors import InputError
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.pipeline import Design, design
from orbitfix.gen.program import golden
from orbitfix.gen.program.fixed_point import ConstantReport, FixedPointPlan, QFormat
from orbitfix.gen.program.integer_program import IntegerProgram, Op
from orbitfix.gen.program.proven_fit import without_proofs
from orbitfix.gen.timing.integrators import EULER
from orbitfix.gen.timing.step_size import Timing
from orbitfix.verify.proofs.drift import (
    DriftTolerances,
    build_drift_module,
    cycle_start,
    harness_statistics,
    integer_period,
    run_drift,
)
from orbitfix.verify.report.drift import drift_json, drift_lines

# ---------------------------------------------------------------------------------------------
# Brent's algorithm on small integer maps, compiled through the real emitter and harness


def congruential_design(a: int, c: int) -> Design:
    """x -> a*x + c modulo 2**16 (16-bit wrap-around words), y -> x: a linear congruential map
    with a one-step delay, so the cycle is found on the whole state tuple."""
    model = define_model("lcg", {"x": 0.0, "y": 0.0}, {"x": "y", "y": "-x"}, cycle_hz=1,
                         loop_hz=100)
    ops = (Op("state", state=0, note="x", fraction_bits=0),
           Op("state", state=1, note="y", fraction_bits=0),
           Op("scale", (0,), real=float(a), note="a*x", constant=a, shift=0, fraction_bits=0),
           Op("const", real=float(c), note="c", constant=c, fraction_bits=0),
           Op("add", (2, 3), note="a*x + c", fraction_bits=0, align=(0, 0), shift=0))
    program = IntegerProgram(name="lcg", state_names=("x", "y"), ops=ops, next_state=(4, 0),
                             word_bits=16, product_bits=32, rounding="truncate", overflow="wrap",
                             state_fraction_bits=(0, 0))
    word = QFormat(16, 0)
    plan = FixedPointPlan(signal_format=word, largest_signal=1.0, largest_signal_note="x",
                          margin=1.0, program=program,
                          constants=(ConstantReport(2, "a*x", float(a), a, word, "multiplier"),
                                     ConstantReport(3, "c", float(c), c, word, "added")),
                          initial_state=(0, 0), warnings=())
    timing = Timing(model_period=1.0, cycle_hz=1.0, loop_hz=100.0, time_scale=1.0, step=0.01,
                    steps_per_cycle=100.0)
    return Design(model=model, analysis=None, timing=timing, integrator=EULER, plan=plan)




def congruential_orbit(a: int, c: int, start: tuple[int, int], steps: int):
    """The map in Python's exact integers, from its definition: x -> (a*x + c) mod 2**16 read as
    a signed 16-bit word, y -> x."""
    x, y = start
    yield x, y
    for _ in range(steps):
        x, y = (a * x + c + (1 << 15)) % (1 << 16) - (1 << 15), x
        yield x, y


def golden_checked_trajectory(host, program: IntegerProgram, start: tuple[int, ...],
                              steps: int) -> np.ndarray:
    """A trajectory recorded by the C, every step of which is checked against one golden step
    (vectorised over the whole trajectory). Row k is the state after k steps."""
    io = np.array(start, dtype=np.int32)
    record = np.empty((steps, len(start)), dtype=np.int32)
    host.lib.orbitfix_harness_run(host.ffi.from_buffer("int32_t[]", io), steps,
                                  host.ffi.from_buffer("int32_t[]", record))
    x = np.vstack([np.array(start).reshape(1, -1), record]).astype(np.int64)
    assert np.array_equal(golden.step(program, x[:-1].T), x[1:].T)
    return x


def test_brent_finds_the_full_period_of_a_hull_dobell_generator() -> None:
    # Source: Hull and Dobell, "Random number generators", SIAM Review 4 (1962): x -> a*x + c mod m
    # has period m exactly when c is coprime to m, a - 1 is divisible by every prime factor of m,
    # and by 4 when 4 divides m. Here m = 2**16, a = 4*1234 + 1, c odd: period 65536.
    built = congruential_design(4 * 1234 + 1, 12345)
    host = build_drift_module(built)
    period, seen_at = integer_period(host, (17, 0), budget=1 << 20)
    assert period == 1 << 16
    assert seen_at >= period
    assert cycle_start(host, (17, 0), period, budget=1 << 20) == 1  # y joins x's cycle after one step
    # The drift run's own Brent (inside the traced loop) finds the same period.
    stats = harness_statistics(host, (17, 0), steps=300_000, settle=10, window=10,
                               section_level=0)
    assert stats.counts["period"] == 1 << 16


@pytest.mark.parametrize(("a", "c", "start"), [(4 * 77 + 3, 1001, (5, 9)), (6, 1, (3, 0)),
                                               (4 * 99 + 1, 4, (8, 2)), (12, 7, (1000, -4))])
def test_brent_agrees_with_brute_force_on_maps_with_tails_and_short_cycles(a: int, c: int,
                                                                          start) -> None:
    # Reference: brute force (every state remembered) on the golden interpreter's trajectory.
    # a = 6 or 12 is not invertible mod 2**16, so these orbits have a tail before their cycle.
    built = congruential_design(a, c)
    host = build_drift_module(built)
    mu, period = brute_force_cycle(congruential_orbit(a, c, start, 140_000))
    golden_checked_trajectory(host, built.plan.program, start, 1000)  # the C is that map
    found, _ = integer_period(host, start, budget=1 << 20)
    assert found == period
    assert cycle_start(host, start, found, budget=1 << 20) == mu


def test_brent_reports_no_repeat_when_the_budget_is_too_small() -> None:
    built = congruential_design(4 * 1234 + 1, 12345)  # period 65536 (Hull and Dobell, above)
    host = build_drift_module(built)
    assert integer_period(host, (17, 0), budget=60_000)[0] is None


# ---------------------------------------------------------------------------------------------
# Streaming statistics of the C harness against numpy on the golden trajectory


def numpy_statistics(x: np.ndarray, program: IntegerProgram, settle: int, window: int, level: int,
                     limits: list[int]) -> dict:
    """The harness's statistics recomputed from a golden trajectory ``x`` (row k: the state after
    k steps), written from their definitions: an independent reference for the C's streaming
    bookkeeping."""
    steps = len(x) - 1
    start = tuple(x[0])
    k = np.arange(steps + 1)
    up = np.flatnonzero((x[:-1, 0] < level) & (x[1:, 0] >= level)) + 1
    settled_up = up[up > settle]
    at_limit = np.zeros(steps, dtype=bool)  # golden's saturated steps (a clamp acted)
    values = golden.evaluate(program, x[:-1].T, at_limit)  # every intermediate of steps 1..steps
    trace = np.stack(values)
    outside = np.any(np.abs(trace) > np.array(limits, dtype=np.int64).reshape(-1, 1), axis=0)
    step_no = k[1:]

    def first(mask: np.ndarray) -> int:
        return int(step_no[mask][0]) if mask.any() else 0

    returns = []
    for s in settled_up:
        before, after = x[s - 1], x[s]
        num, den = level - int(before[0]), int(after[0]) - int(before[0])
        assert den < (1 << 29)  # the harness interpolates without rescaling below this
        row = []
        for i in range(len(start)):
            rise = int(after[i]) - int(before[i])
            q = abs(rise * num) // den
            row.append(int(before[i]) + (q if rise * num >= 0 else -q))  # toward zero, as C99
        returns.append(row)
    returns = np.array(returns)
    mu, period = brute_force_cycle(x)
    settled = x[settle + 1:]
    first_window = x[settle + 1:settle + 1 + window]
    final = x[steps - window + 1:]
    return {
        "counts": {"crossings": len(up), "settled_crossings": len(settled_up),
                   "first_settled_crossing": int(settled_up[0]), "last_crossing": int(up[-1]),
                   "limit_steps": int(at_limit.sum()), "limit_first": first(at_limit),
                   "limit_settled": int(at_limit[settle:].sum()),
                   "range_steps": int(outside.sum()), "range_first": first(outside),
                   "range_settled": int(outside[settle:].sum()), "period": period},
        "ranges": {"settled_low": settled.min(0).tolist(), "settled_high": settled.max(0).tolist(),
                   "first_low": first_window.min(0).tolist(),
                   "first_high": first_window.max(0).tolist(),
                   "final_low": final.min(0).tolist(), "final_high": final.max(0).tolist(),
                   "return_low": returns.min(0).tolist(), "return_high": returns.max(0).tolist()},
        "first_bracket": (x[settled_up[0] - 1].tolist(), x[settled_up[0]].tolist()),
        "last_bracket": (x[up[-1] - 1].tolist(), x[up[-1]].tolist()),
        "end": x[-1].tolist(),
        "mu": mu,
    }


@pytest.mark.parametrize("word", [32, 16])
def test_harness_statistics_equal_numpy_on_the_golden_trajectory(vanderpol_design, word) -> None:
    # Reference: the same statistics from their definitions in numpy, on gen.golden's bits; every
    # integer quantity must agree exactly. The start near saturation makes the limit counts live.
    # The plan's proofs taken back (every result clamped, no state held), so that a run from
    # there leaves the planned box and meets the word's limit.
    built = design(vanderpol_design.model.with_fixed_point(word_bits=word),
                   analysis=vanderpol_design.analysis)
    built = replace(built, plan=replace(built.plan, program=without_proofs(built.plan.program)))
    plan = built.plan
    program = plan.program
    limits = plan.planned_limits()
    start = (program.word_max - program.word_max // 64, 0)
    steps, settle, window = 20_000, 3_000, 1_500
    host = build_drift_module(built)
    trajectory = golden_checked_trajectory(host, program, start, steps)
    # A level the orbit lands on exactly during an upward move, so the edge case of the crossing
    # rule (x_{k-1} < level <= x_k) is exercised.
    rising = np.flatnonzero(np.diff(trajectory[settle:, 0]) > 0)
    level = int(trajectory[settle + rising[len(rising) // 2] + 1, 0])
    got = harness_statistics(host, start, steps, settle, window, level)
    want = numpy_statistics(trajectory, program, settle, window, level, limits)
    assert want["counts"]["limit_steps"] > 0 and want["counts"]["range_steps"] > 0
    for name, value in want["counts"].items():
        assert got.counts[name] == value, name
    assert got.counts["period_seen_at"] >= want["mu"] + want["counts"]["period"]
    assert got.ranges == want["ranges"]
    assert got.first_bracket == want["first_bracket"]
    assert got.last_bracket == want["last_bracket"]
    assert got.end_state == want["end"]
    assert cycle_start(host, start, got.counts["period"], steps) == want["mu"]


# ---------------------------------------------------------------------------------------------
# Verdicts


def test_healthy_van_der_pol_passes_from_every_start(vanderpol_design) -> None:
    report = run_drift(vanderpol_design, hours=0.01)
    data = drift_json(report)
    json.dumps(data, allow_nan=False)  # plain JSON, no NaN or numpy types
    assert data["steps"] == 36_000  # round(0.01 h * 3600 s/h * 1000 Hz)
    assert data["verdict"] == "pass"
    names = [run["start"] for run in data["runs"]]
    assert names == ["nominal", "near the equilibrium (1)", "near the equilibrium (2)",
                     "near the equilibrium (3)", "near the basin edge", "near saturation"]
    assert data["seed"] == 1 and data["robustness"]["fraction"] == 1.0
    assert [run["decides_verdict"] for run in data["runs"]] == [True] + [False] * 5
    for run in data["runs"]:
        assert run["verdict"] == "pass", run["reasons"]
        # Van der Pol's integer orbit closes within the budget: the verdict holds for all time.
        assert run["horizon"] == "unbounded"
        assert run["steps_to_cycle"] is not None and run["cycle_length"] >= 600
        assert run["cycle_length"] == run["integer_period_steps"]
        assert run["amplitude_error"] < 0.02
        assert abs(run["period_error_ppm"]) < 1000
        assert abs(run["phase_drift_cycles"]) < 1
        assert run["integer_period_steps"] is not None
        assert set(run["saturation_events"]) >= {"count", "first_step"}
    # Van der Pol with mu = 1: amplitude of x close to 2 (Strogatz, Nonlinear Dynamics and Chaos,
    # section 7.5: the cycle's x-amplitude is near 2 for every mu; 2.0086 at mu = 1, from memory).
    assert abs(report.runs[0].amplitude[0] - 2.0086) < 0.001
    assert "verdict: PASS" in drift_lines(report)[-1]


def test_sixteen_bit_words_with_four_fraction_bits_collapse_and_fail(vanderpol_design) -> None:
    built = design(vanderpol_design.model.with_fixed_point(word_bits=16, fraction_bits=4),
                   analysis=vanderpol_design.analysis)
    report = run_drift(built, hours=0.01)
    assert report.verdict == "fail"
    nominal = report.runs[0]
    assert nominal.verdict == "fail"
    # With steps of 1/16 the increments h*y round to nothing: the orbit stops dead.
    assert nominal.integer_period_steps == 1
    assert any("fixed point" in reason for reason in nominal.reasons)
    assert any("no rhythm" in reason for reason in nominal.reasons)


def test_euler_at_too_low_a_loop_rate_fails_on_the_discretisation(vanderpol_design) -> None:
    # Forward Euler at 8 steps per cycle: its step map no longer has the cycle (common practice:
    # Euler's stability region is the unit disc around -1, which the focus at 0.5 +- 0.87i leaves).
    from dataclasses import replace

    from orbitfix.gen.pipeline import plan_step
    from orbitfix.gen.timing.integrators import get_integrator
    from orbitfix.gen.timing.step_size import plan_timing

    model = vanderpol_design.model
    slow = replace(model, rhythm=replace(model.rhythm, loop_hz=12.0)).with_fixed_point(
        integrator="euler")
    # The design refuses it already: the float step map's start-up path diverges.
    with pytest.raises(InputError, match="not finite over the planning box"):
        design(slow, analysis=vanderpol_design.analysis)
    # Planned from the cycle alone (no path), the drift proof must still fail it on its own.
    timing = plan_timing(slow, vanderpol_design.analysis.cycle.period)
    euler = get_integrator("euler")
    plan = plan_step(slow, euler, timing.step, vanderpol_design.analysis.cycle.samples)
    built = replace(vanderpol_design, model=slow, timing=timing, integrator=euler, plan=plan)
    report = run_drift(built, hours=0.5)
    assert report.verdict == "fail"
    assert report.step_map.period_steps is None
    run = report.runs[0]
    assert any("float step map (L1) itself" in reason for reason in run.reasons)
    assert any("grew to more than twice" in reason for reason in run.reasons)


def test_a_tight_phase_tolerance_fails_with_its_reason(vanderpol_design) -> None:
    report = run_drift(vanderpol_design, hours=0.01,
                       tolerances=DriftTolerances(phase_drift_cycles=1e-12))
    assert report.verdict == "fail"
    assert all(any("phase drifts" in r for r in run.reasons) for run in report.runs)


@pytest.mark.parametrize("hours", [0.0, -1.0, float("nan"), 0.001])
def test_bad_run_lengths_are_refused_with_a_clear_message(vanderpol_design, hours) -> None:
    with pytest.raises(InputError, match="hours"):
        run_drift(vanderpol_design, hours=hours)


def test_bad_tolerances_are_refused() -> None:
    with pytest.raises(InputError, match="period_ppm"):
        DriftTolerances(period_ppm=-5)


def test_the_batched_step_map_references_have_the_bits_of_one_run_each(tmp_path) -> None:
    # The drift proof runs the float step map of the nominal design and of every corner of the
    # runtime ranges side by side (one program, states as columns). Every real rule is
    # elementwise, so each view must come out bit for bit as its own run (IEEE 754 arithmetic is
    # deterministic per element: common practice); the hip model's omega gives two corners.
    from conftest import HIP

    from orbitfix.gen.model.model_file import load_model
    from orbitfix.verify.proofs.drift.harness import drift_section
    from orbitfix.verify.proofs.drift.proof import _at_corner
    from orbitfix.verify.proofs.drift.references import (
        choose_starts,
        step_map_reference,
        step_map_references,
    )

    path = tmp_path / "hip.toml"
    path.write_text(HIP.replace("loop_hz = 500", "loop_hz = 100"))
    built = design(load_model(str(path)))
    views = [built, *(_at_corner(built, corner, cycle) for corner, cycle in built.corners)]
    assert len(views) == 3 and len({v.timing.steps_per_cycle for v in views}) == 3
    runs = [(view, drift_section(view), choose_starts(view)[0]) for view in views]
    batched = step_map_references(runs, 0.02)
    alone = [step_map_reference(*run, 0.02) for run in runs]
    assert batched == alone  # floats compared with ==: the same bits
    assert all(ref.period_steps is not None for ref in alone)
    # a seeded fault: a view recorded over another view's window (its steps per cycle) differs
    shifted = replace(views[1], timing=views[2].timing)
    runs[1] = (shifted, runs[1][1], runs[1][2])
    assert step_map_references(runs, 0.02)[1] != alone[1]


def test_the_step_map_reference_records_every_step_of_its_window(vanderpol_design,
                                                                 monkeypatch) -> None:
    # The reference's period and amplitudes are read off the states after each step of its
    # measured window; a crossing is placed between the two steps it falls between, so no step
    # may be missing (the state after the second-to-last step once was). Checked against the
    # float step map stepped one step at a time by hand.
    from orbitfix.gen.program.lowering import evaluate_real
    from orbitfix.verify.proofs.drift import references
    from orbitfix.verify.proofs.drift.harness import drift_section

    records = []
    judged = references._judged
    monkeypatch.setattr(references, "_judged",
                        lambda record, *rest: records.append(record) or judged(record, *rest))
    built = vanderpol_design
    references.step_map_reference(built, drift_section(built), [], 0.02)
    spc = built.timing.steps_per_cycle
    total = round(references.STEP_MAP_CYCLES * spc)
    first = total - round(references.STEP_MAP_MEASURED * spc) - 1
    program = built.plan.program
    x = np.array(built.analysis.cycle.point, dtype=float).reshape(-1, 1)
    expected = []
    for k in range(total + 1):
        if k >= first:
            expected.append(x[:, 0].copy())
        values = evaluate_real(program, x)
        x = np.stack([values[i] for i in program.next_state])
    assert np.array_equal(records[0][:, :, 0], np.array(expected))
