"""The period trim (gen/study/trim.py) and ``gen --plan FILE``.

The trim's exact periods are checked against an independent exact period finder: the naive cycle
search (conftest ``brute_force_cycle``: remember every state of a plain golden trajectory until one
repeats; common practice, independent of the trim's vectorised Brent's algorithm), with the
crossings of the section counted on the found cycle by hand. Period errors are exact rationals
(Python's ``fractions``) against the wanted steps per period.
"""

from __future__ import annotations

import json
from dataclasses import replace
from fractions import Fraction

import numpy as np
import pytest
from conftest import brute_force_cycle, refused

from orbitfix.gen.program import golden

NEIGHBOURHOOD_LSB = 2  # the brute force measures the trim's pick and this many shifts either side


def naive_period(program, start, level: int, budget: int = 40_000) -> Fraction | None:
    """The exact mean period of the orbit from ``start``: a plain golden trajectory, one step at a
    time until a state repeats, its cycle by the naive search, the upward crossings of ``level``
    (x_k < level <= x_k+1) counted on it."""
    state = np.asarray(start, dtype=np.int64).reshape(-1, 1)
    rows, seen = [state[:, 0]], {tuple(state[:, 0].tolist())}
    while len(rows) <= budget:
        state = golden.step(program, state)
        rows.append(state[:, 0])
        key = tuple(state[:, 0].tolist())
        if key in seen:
            break
        seen.add(key)
    rows = np.array(rows)
    entry, period = brute_force_cycle(rows)
    first = rows[entry:entry + period + 1, 0]
    turns = int(np.sum((first[:-1] < level) & (first[1:] >= level)))
    return Fraction(period, turns) if turns else None


def shifted(program, lead_value: int):
    """The program with every constant labelled as a step constant by the lowering ("h*..." or
    "h times ...") scaled by lead_value / its lead's stored value, rounded to nearest (the test's
    own reading of "scale every step constant by one ratio", independent of the trim's search)."""
    carriers = [i for i, op in enumerate(program.ops) if op.kind in ("scale", "scaled_sum")
                and (op.note.startswith("h*") or op.note.startswith("h times"))]
    lead = max(carriers, key=lambda i: abs(program.ops[i].constant))
    ratio = Fraction(lead_value, program.ops[lead].constant)
    ops = list(program.ops)
    for i in carriers:
        ops[i] = replace(ops[i], constant=round(ops[i].constant * ratio))
    return replace(program, ops=tuple(ops)), lead


def error_ppm(mean: Fraction, wanted: float) -> float:
    return float((mean / Fraction(wanted) - 1) * 1_000_000)


def within_best(error: float, best: float, granularity: float) -> bool:
    """The comparison the trim must pass: its error is no worse than the best of the brute-forced
    neighbourhood plus one granularity."""
    return abs(error) <= abs(best) + granularity


@pytest.fixture(scope="module")
def vanderpol_16_trim():
    """16-bit Van der Pol rounding half up (its untrimmed integer orbit runs about 250 ppm fast),
    trimmed."""
    from orbitfix.gen.model.model_file import load_model
    from orbitfix.gen.pipeline import design
    from orbitfix.gen.study.trim import trim_design

    built = design(load_model("vanderpol").with_fixed_point(word_bits=16, rounding="half-up"))
    trimmed, record = trim_design(built)
    return built, trimmed, record


@pytest.mark.slow
def test_trim_brings_16_bit_vanderpol_to_the_best_of_its_neighbourhood(vanderpol_16_trim):
    from orbitfix.gen.study.trim import section_level

    built, trimmed, record = vanderpol_16_trim
    wanted = built.timing.steps_per_cycle
    level = section_level(built)
    start = built.plan.initial_state
    before = naive_period(built.plan.program, start, level)
    after = naive_period(trimmed.plan.program, start, level)
    # the trim's exact periods agree with the independent finder, before and after
    assert before == record.before.mean and after == record.after.mean
    assert error_ppm(before, wanted) == pytest.approx(-250.0, abs=1.0)  # measured (issue 10)
    assert abs(error_ppm(after, wanted)) < abs(error_ppm(before, wanted))
    # brute force over the neighbourhood of the trim's pick, and the untrimmed plan
    program = built.plan.program
    _, lead = shifted(program, 1)
    lead_stored = program.ops[lead].constant
    pick = record.lead_shift
    errors = {}
    for d in sorted({0, *range(pick - NEIGHBOURHOOD_LSB, pick + NEIGHBOURHOOD_LSB + 1)}):
        variant, _ = shifted(program, lead_stored + d)
        mean = naive_period(variant, start, level)
        errors[d] = error_ppm(mean, wanted) if mean is not None else float("inf")
    best = min(errors.values(), key=abs)
    # the trimmed program is the test's own shift by the trim's pick, constant for constant
    assert shifted(program, lead_stored + pick)[0].ops == trimmed.plan.program.ops
    assert within_best(record.error_after_ppm, best, record.granularity_ppm)
    assert record.granularity_ppm == pytest.approx(1e6 / lead_stored)
    # seeded fault: a trim off by any neighbouring shift whose orbit differs must fail the same
    # comparison (the orbit locks onto lattice cycles, so a neighbour can be exactly as good)
    worse = [d for d in errors if errors[d] != errors[pick]]
    assert worse
    for d in worse:
        assert not within_best(errors[d], best, record.granularity_ppm), d


@pytest.mark.slow
def test_the_trimmed_design_carries_its_constants_into_the_c(vanderpol_16_trim):
    from orbitfix.gen.c.emit import render_model

    built, trimmed, record = vanderpol_16_trim
    assert trimmed.plan.program.fingerprint() != built.plan.program.fingerprint()
    assert [c.stored for c in trimmed.plan.constants] == [
        trimmed.plan.program.ops[c.index].constant for c in trimmed.plan.constants]
    header, source = render_model(trimmed.model, trimmed.timing, trimmed.integrator,
                                  trimmed.plan).values()
    assert "Period trimmed" in header and "-250.0 ppm -> +0.0 ppm" in " ".join(header.split())
    assert trimmed.plan.program.fingerprint() in header
    for change in record.changed:
        assert str(change.new) in source
    # the report shows both exact periods, the granularity and every constant old -> new
    from orbitfix.verify.report.design import trim_lines

    text = "\n".join(trim_lines(record))
    assert "-250.0 ppm" in text and "+0.0 ppm" in text and f"{record.granularity_ppm:.3g} ppm" in text
    for change in record.changed:
        assert f"{change.old:>12} -> {change.new:<12}" in text
    # only the step constants moved: every other operation is the untrimmed one
    moved = {c.index for c in record.changed}
    for i, (a, b) in enumerate(zip(built.plan.program.ops, trimmed.plan.program.ops, strict=True)):
        assert (a == b) != (i in moved), i


def test_the_step_constants_are_the_ones_the_lowering_scales_by_h(vanderpol_design):
    from orbitfix.gen.study.trim import step_constants

    found = step_constants(vanderpol_design)
    labelled = [i for i, op in enumerate(vanderpol_design.plan.program.ops)
                if op.kind in ("scale", "scaled_sum") and op.note.startswith("h*")]
    # rk4 on two states: per state three stage points and one combined update
    assert found == tuple(labelled) and len(found) == 8


@pytest.mark.slow
def test_the_batched_exact_periods_equal_one_by_one(vanderpol_16_trim):
    """The trim runs its variants as columns of one golden run; each column must be the run of its
    own program (here 16-bit Van der Pol and two shifts of its step constants)."""
    from orbitfix.gen.study.trim import exact_periods, scaled_constants, section_level, step_constants

    built = vanderpol_16_trim[0]
    program = built.plan.program
    carriers = step_constants(built)
    lead = max(carriers, key=lambda i: abs(program.ops[i].constant))
    variants = [scaled_constants(program, carriers, lead, program.ops[lead].constant + d)
                for d in (0, 18)]
    start, level = built.plan.initial_state, section_level(built)
    together = exact_periods(program, variants, start, level, budget=40_000)
    alone = [exact_periods(program, [v], start, level, budget=40_000)[0] for v in variants]
    assert together == alone and all(p is not None and p.turns > 0 for p in together)


def test_trim_refuses_a_model_with_angle_states(capsys, tmp_path):
    err = refused(["gen", "phase_amplitude", "--trim", "-o", str(tmp_path)], capsys)
    assert "--trim does not handle models with angle states" in err
    assert not list(tmp_path.iterdir())  # nothing written


@pytest.mark.slow
def test_gen_takes_the_plan_that_plan_search_chose(capsys, tmp_path):
    from orbitfix.verify.cli.main import main

    assert main(["plan", "vanderpol", "--search", "--json", "--workers", "1"]) == 0
    chosen = json.loads(capsys.readouterr().out)
    best, choice = chosen["search"]["best"], chosen["choice"]
    assert (choice["word_bits"], choice["integrator"]) == (best["word_bits"], best["integrator"])
    assert f"Q{best['word_bits'] - choice['fraction_bits']}.{choice['fraction_bits']}" == best["format"]
    plan_file = tmp_path / "plan.json"
    plan_file.write_text(json.dumps(chosen))
    assert main(["gen", "vanderpol", "--plan", str(plan_file), "-o", str(tmp_path / "c"),
                 "--json"]) == 0
    written = json.loads(capsys.readouterr().out)
    assert written["integrator"] == best["integrator"]
    assert written["formats"]["word_bits"] == best["word_bits"]
    assert set(written["formats"]["states"].values()) == {best["format"]}


def _choice(**changes) -> dict:
    choice = {"model": "vanderpol", "params": {"mu": 1.0}, "cycle_hz": 1.5, "loop_hz": 1000.0,
              "word_bits": 16, "integrator": "rk4", "fraction_bits": 11, "rounding": "half-up",
              "overflow": "saturate"}
    return {"ok": True, "choice": {**choice, **changes}}


@pytest.mark.parametrize(("content", "message"), [
    (None, "cannot read the plan file"),
    ("not json {", "is not JSON"),
    (json.dumps({"ok": True, "model": "vanderpol"}), "holds no chosen plan"),
    (json.dumps({"ok": False, "search": {"best": None}}), "found no candidate within tolerance"),
    (json.dumps(_choice(model="hopf")), "was chosen for model 'hopf'"),
    (json.dumps(_choice(params={"mu": 2.0})), "was chosen for params"),
    (json.dumps(_choice(word_bits="sixteen")), "no valid 'word_bits'"),
])
def test_gen_refuses_a_bad_plan_file(capsys, tmp_path, content, message):
    plan_file = tmp_path / "plan.json"
    if content is not None:
        plan_file.write_text(content)
    err = refused(["gen", "vanderpol", "--plan", str(plan_file), "-o", str(tmp_path / "c")], capsys)
    assert message in err and str(plan_file) in err
    assert not (tmp_path / "c").exists()


def test_gen_refuses_a_plan_file_beside_a_fixed_point_option(capsys, tmp_path):
    plan_file = tmp_path / "plan.json"
    plan_file.write_text(json.dumps(_choice()))
    err = refused(["gen", "vanderpol", "--plan", str(plan_file), "--word", "32", "-o",
                   str(tmp_path / "c")], capsys)
    assert "leave out --word" in err


def test_trim_refuses_an_orbit_that_does_not_close_within_its_budget(vanderpol_design):
    """32-bit Van der Pol's orbit from its initial state closes after about 12,000 steps (verify's
    drift test finds its 2,000-step cycle from step 10,191); with a budget of 500 the trim has no
    exact period and must say so rather than guess."""
    from orbitfix.gen.errors import UnsupportedError
    from orbitfix.gen.study.trim import trim_design

    with pytest.raises(UnsupportedError, match="does not close into a cycle within 500 steps"):
        trim_design(vanderpol_design, budget=500)


@pytest.mark.slow
def test_verify_trim_shrinks_the_drift_reports_period_error(capsys):
    """verify --trim proves the trimmed C bit-exact and its drift test (Brent's algorithm in the
    compiled C, independent of the trim's golden runs) finds the trimmed period: 16-bit Van der
    Pol rounding half to even goes from -1,000 ppm (at the default tolerance's edge) to the trim's
    own figure, -250 ppm (the orbit locks onto 666.5 steps per period; with the increments summed
    in one rounding the lattice offers no 2000/3 within the trim's window), whose phase drifts
    about 32 cycles a day: the phase tolerance is widened to 40 so the run is judged on the rest.
    (Rounding toward minus infinity also parts from the float map on the start-up path, which the
    trim of the period does not mend.)"""
    from orbitfix.verify.cli.main import main

    code = main(["verify", "vanderpol", "--word", "16", "--rounding", "half-even", "--trim", "--json",
                 "--states", "2000", "--steps", "2000", "--max-phase-drift", "40"])
    report = json.loads(capsys.readouterr().out)
    assert code == 0 and report["ok"] and report["bit_exact"]
    trim = report["trim"]
    nominal = next(r for r in report["drift"]["runs"] if r["start"] == "nominal")
    assert nominal["period_error_ppm"] == pytest.approx(trim["after"]["error_ppm"], abs=1e-6)
    assert nominal["integer_period_steps"] % trim["after"]["cycle_steps"] == 0
    assert abs(nominal["period_error_ppm"]) < abs(trim["before"]["error_ppm"]) - 700
    stored = {c["value_index"]: c["stored"] for c in report["formats"]["constants"]}
    assert trim["changed"] and all(stored[c["value_index"]] == c["new"] for c in trim["changed"])
    assert report["trimmed"].startswith("Period trimmed")


@pytest.mark.slow
def test_trim_refuses_to_move_the_step_further_than_the_plan_was_sized_for(monkeypatch,
                                                                         vanderpol_16_trim):
    """16-bit Van der Pol needs about +650 ppm of step; with the reach cut to 100 ppm the trim
    must refuse and say what to do instead."""
    from orbitfix.gen.errors import UnsupportedError
    from orbitfix.gen.study import trim

    monkeypatch.setattr(trim, "MOST_STEP_CHANGE", 1e-4)
    with pytest.raises(UnsupportedError, match="raise the loop rate or the word size"):
        trim.trim_design(vanderpol_16_trim[0])


def test_verify_sources_written_with_trim_asks_for_trim(capsys, tmp_path, vanderpol_design):
    """C whose banner says it was trimmed is not verified against the untrimmed design; the
    message says to give --trim (the banner line is seeded here, the check reads only it)."""
    from orbitfix.gen.c.emit import render_model
    from orbitfix.gen.model.model_file import load_model
    from orbitfix.gen.pipeline import design

    built = design(load_model("vanderpol"))
    for name, text in render_model(built.model, built.timing, built.integrator, built.plan).items():
        (tmp_path / name).write_text(text.replace(" * Integrator", " * Period trimmed: seeded.\\n"
                                                  " * Integrator", 1))
    err = refused(["verify", "vanderpol", "--sources", str(tmp_path), "--skip-drift", "--states",
                   "10", "--steps", "10"], capsys)
    assert "give --trim" in err
