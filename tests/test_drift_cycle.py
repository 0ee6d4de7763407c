"""Drift verdicts for all time and starts that mean something: the statistics judged on the exact
integer cycle against brute force on the golden bits, the seeded faults the cycle check must catch,
the fallback to --hours, the random asymmetric starts, symmetric-subspace and resting-state
findings, and the --start option."""

from __future__ import annotations

import json

import numpy as np
import pytest
from conftest import brute_force_cycle

from orbitfix.gen.c.emit import render_model
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.verify.cli.main import main
from orbitfix.verify.proofs.drift import build_drift_module, choose_starts, run_drift
from orbitfix.verify.proofs.drift import proof as drift_proof
from orbitfix.verify.report.drift import drift_json, drift_lines


@pytest.fixture(scope="module")
def matsuoka_design():
    return design(load_model("matsuoka"))




def test_the_exact_cycle_and_its_statistics_equal_brute_force_on_golden(vanderpol_design) -> None:
    # Reference: gen.golden's bits run step by step and a dictionary of every state seen (brute
    # force); the amplitude on the cycle is half the range of each state over one turn of it, and
    # the mean period is the cycle's length over its upward crossings (definitions, common practice).
    report = run_drift(vanderpol_design, hours=0.01)
    nominal = report.runs[0]
    assert nominal.horizon == "unbounded"
    program = vanderpol_design.plan.program
    rows = golden.run(program, np.array(nominal.start.state), nominal.steps_to_cycle
                      + 2 * nominal.cycle_length + 2)
    mu, period = brute_force_cycle(rows)
    assert (mu, period) == (nominal.steps_to_cycle, nominal.cycle_length)
    turn = rows[mu:mu + period + 1]
    scale = 2.0 ** -report.fraction_bits
    want = [(turn[:, i].max() - turn[:, i].min()) / 2 * scale for i in range(2)]
    assert nominal.amplitude == want
    x = turn[:, 0]
    level = report.section_level
    ups = int(np.sum((x[:-1] < level) & (x[1:] >= level)))
    assert nominal.crossings_per_cycle == ups
    assert nominal.period_steps == period / ups


def test_a_found_cycle_that_does_not_close_fails(vanderpol_design, monkeypatch) -> None:
    # Seeded fault: the cycle's entry step reported one too early, so the run judged is not on
    # the cycle; the traced step must refuse to close it.
    real = drift_proof.cycle_start

    def early(host, start, period, budget):
        mu = real(host, start, period, budget)
        return None if mu is None else max(mu - 1, 0)

    monkeypatch.setattr(drift_proof, "cycle_start", early)
    report = run_drift(vanderpol_design, hours=0.01)
    assert report.verdict == "fail"
    assert any("does not close under the traced step" in r for r in report.runs[0].reasons)


def faulty_plain_step(built, old: str, new: str):
    """The drift module with a seeded fault in the firmware's plain step only (Brent's algorithm
    uses the plain step; the statistics and the closing check use the traced step)."""
    files = render_model(built.model, built.timing, built.integrator, built.plan)
    body = files["vanderpol.c"]
    line = next(t for t in body.splitlines() if "const int32_t v7 = " in t)
    assert old in line
    return build_drift_module(built, {**files, "vanderpol.c": body.replace(line, line.replace(old, new))})


def test_a_plain_step_with_another_cycle_fails(vanderpol_design) -> None:
    # Seeded C fault: the plain step's first stage point of x uses one shift more (half its
    # increment), so Brent's algorithm finds a cycle of another map (within four hours' steps);
    # the traced step must refuse to close it.
    host = faulty_plain_step(vanderpol_design, "37,", "38,")
    report = run_drift(vanderpol_design, hours=4, host=host)
    assert report.runs[0].horizon == "unbounded"
    assert report.verdict == "fail"
    assert any("does not close" in r for r in report.runs[0].reasons)


@pytest.mark.slow
def test_the_closing_check_is_sound_when_the_plain_step_is_slightly_off(vanderpol_design) -> None:
    # Seeded C fault of one LSB in the plain step: each run either fails the closing check, or the
    # stretch it judged is truly a cycle of the traced step (checked on golden's bits, which the
    # traced step equals), so no run is judged on a cycle the firmware does not have.
    host = faulty_plain_step(vanderpol_design, ");", ") + 1;")
    report = run_drift(vanderpol_design, hours=0.01, host=host)
    program = vanderpol_design.plan.program
    caught = 0
    for run in report.runs:
        if any("does not close" in r for r in run.reasons):
            caught += 1
            continue
        mu, p = run.steps_to_cycle, run.cycle_length
        rows = golden.run(program, np.array(run.start.state), mu + p)
        assert rows[mu].tolist() == rows[mu + p].tolist(), run.start.name
    assert caught >= 1


def test_without_a_cycle_in_the_budget_the_run_falls_back_to_the_hours(vanderpol_design) -> None:
    report = run_drift(vanderpol_design, hours=0.01, cycle_budget=100)
    data = drift_json(report)
    assert data["cycle_budget_steps"] == 100
    for run in data["runs"]:
        assert run["horizon"] == "0.01 hours"
        assert run["steps_to_cycle"] is None and run["cycle_length"] is None
    assert data["verdict"] == "pass"
    assert "run for 0.01 h" in drift_lines(report)[0]


def test_random_starts_are_seeded_asymmetric_and_reported(matsuoka_design) -> None:
    starts, _ = choose_starts(matsuoka_design, seed=7)
    again, _ = choose_starts(matsuoka_design, seed=7)
    other, _ = choose_starts(matsuoka_design, seed=8)
    near = [s for s in starts if s.name.startswith("near the equilibrium")]
    assert len(near) == 3 and near == [s for s in again if s.name.startswith("near the equilibrium")]
    assert near != [s for s in other if s.name.startswith("near the equilibrium")]
    for start in near:
        u1, v1, u2, v2 = start.state[:4]
        assert u1 != u2 and v1 != v2  # off the half-centre's symmetric subspace
        assert not start.decides
    assert [s.decides for s in starts] == [True] + [False] * (len(starts) - 1)


def test_a_start_on_the_symmetric_subspace_is_a_finding_not_a_failure() -> None:
    # The trot network of four identical Hopf oscillators is symmetric under permuting the legs
    # with their couplings; a start with every leg equal stays on the in-step subspace, where each
    # leg follows one Hopf oscillator alone (common practice: symmetric networks keep their
    # invariant subspaces exactly, and the integer map computes every leg the same way).
    built = design(load_model("quadruped_trot"))
    same = {f"{s}{k}": 0.3 for s in "xy" for k in range(1, 5)}
    report = run_drift(built, hours=0.01, extra_starts=(same,))
    given = report.runs[-1]
    assert given.start.name == "given start 1"
    assert given.outcome == "finding" and given.reasons
    assert given.explanation.startswith("symmetric subspace")
    assert "the start has them equal" in given.explanation
    assert ("x1", "x2") in given.equal_states and ("y3", "y4") in given.equal_states
    assert report.verdict == "pass"
    robust = drift_json(report)["robustness"]
    assert robust["reach_the_cycle"] < robust["starts"]
    text = "\n".join(drift_lines(report))
    assert "finding: symmetric subspace: x1 = x2 = x3 = x4, y1 = y2 = y3 = y4" in text


def test_equal_neurons_end_at_rest_a_finding(matsuoka_design) -> None:
    # Matsuoka's half-centre with both neurons equal: the continuous model stays on the symmetric
    # subspace and goes to the saddle there (Matsuoka, Biological Cybernetics 52, 1985: the
    # oscillation needs the neurons out of step, from memory); the integer map's rounding parts
    # them by a few LSB, which the rounding's dead zone round the saddle then holds at rest.
    report = run_drift(matsuoka_design, hours=0.01,
                       extra_starts=({"u1": 0.5, "v1": 0.1, "u2": 0.5, "v2": 0.1},))
    given = report.runs[-1]
    assert given.outcome == "finding" and given.integer_period_steps == 1
    assert given.explanation.startswith("resting state")
    assert report.verdict == "pass"


def test_a_resting_start_is_a_finding_with_its_explanation(vanderpol_design) -> None:
    # The origin is Van der Pol's equilibrium; the integer map keeps it exactly (every rate is 0).
    report = run_drift(vanderpol_design, hours=0.01, extra_starts=({"x": 0.0, "y": 0.0},))
    given = report.runs[-1]
    assert given.integer_period_steps == 1 and given.steps_to_cycle == 0
    assert given.outcome == "finding" and given.explanation.startswith("resting state")
    assert report.verdict == "pass"


def test_a_failing_initial_state_decides_the_verdict(vanderpol_design) -> None:
    built = design(vanderpol_design.model.with_fixed_point(word_bits=16, fraction_bits=4),
                   analysis=vanderpol_design.analysis)
    report = run_drift(built, hours=0.01)
    assert report.runs[0].decides and report.runs[0].outcome == "fail"
    assert report.verdict == "fail"


def run_cli(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.mark.parametrize("start, words", [
    ("x", "NAME=VALUE"), ("x=abc", "not a number"), ("q=1", "not a state"),
    ("x=1e9", "holds values"), ("x=1,x=2", "twice"), ("x=nan", "finite")])
def test_bad_starts_are_refused_with_exit_2(capsys, start, words) -> None:
    code, _, err = run_cli(capsys, "verify", "vanderpol", "--start", start, "--states", "10",
                             "--steps", "10")
    assert code == 2 and words in err and "Traceback" not in err


def test_given_starts_reach_the_json(capsys) -> None:
    code, out, _ = run_cli(capsys, "verify", "vanderpol", "--json", "--hours", "0.01", "--states",
                           "100", "--steps", "100", "--start", "x=0.5", "--start", "x=0,y=0")
    data = json.loads(out)
    assert code == 0 and data["ok"]
    runs = {run["start"]: run for run in data["drift"]["runs"]}
    assert runs["given start 1"]["verdict"] == "pass"
    assert runs["given start 1"]["initial_state_real"][0] == 0.5
    assert runs["given start 2"]["verdict"] == "finding"
    assert runs["nominal"]["horizon"] == "unbounded"


@pytest.mark.slow
@pytest.mark.parametrize("name", ["matsuoka", "quadruped_trot"])
def test_symmetric_networks_pass_verify_with_defaults(capsys, name) -> None:
    code, out, _ = run_cli(capsys, "verify", name, "--json")
    data = json.loads(out)
    assert code == 0 and data["ok"], data["drift"]["runs"]
    assert data["drift"]["runs"][0]["horizon"] == "unbounded"
