"""The command line's doors: one word per idea on every verb, help on every option, arguments
checked before any work, `ok` first in every JSON answer, `gen --json`, the caution only where code
is written or verified, numbers to their known digits, progress only on a terminal, a quick start,
and the housekeeping (benchmarks' quick mode, `make clean`, the slow marker)."""

from __future__ import annotations

import argparse
import hashlib
import io
import json
import math
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from conftest import slip_the_square

from orbitfix.gen.progress import reporting, tell
from orbitfix.gen.safety import CAUTION, SAFETY_NOTE
from orbitfix.verify.cli import basin as basin_verb
from orbitfix.verify.cli import sweep as sweep_verb
from orbitfix.verify.cli import verify as verify_verb
from orbitfix.verify.cli.main import build_parser, main
from orbitfix.verify.report.json_output import json_object, json_text
from orbitfix.verify.report.numbers import to_tolerance
from orbitfix.verify.report.progress_bar import ProgressBar, bar_line, terminal_bar

ROOT = Path(__file__).resolve().parents[1]
VERBS = ("check", "gen", "verify", "report", "plan", "sweep", "basin", "models", "boards", "board")


def run(capsys: pytest.CaptureFixture, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def verb_parsers() -> dict[str, argparse.ArgumentParser]:
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return dict(sub.choices)


def option_names(parser: argparse.ArgumentParser) -> set[str]:
    return {s for a in parser._actions for s in a.option_strings}


# -- one word per idea, help on every option ---------------------------------------------------------


def test_every_verb_is_there_and_every_option_has_help() -> None:
    parsers = verb_parsers()
    assert set(parsers) == set(VERBS)
    for verb, parser in parsers.items():
        for action in parser._actions:
            assert action.help and action.help.strip(), f"{verb} {action.option_strings or action.dest}"


def test_one_word_for_one_idea_on_every_verb() -> None:
    names = {verb: option_names(p) for verb, p in verb_parsers().items()}
    every = set().union(*names.values())
    assert "--max-frequency-error" not in every and "--grid" not in every
    assert {"--max-period-error", "--max-amplitude-error"} <= names["plan"] & names["verify"]
    assert "--samples" in names["sweep"] & names["basin"]
    assert {"--workers", "--scheduler"} <= names["plan"] & names["sweep"]
    fixed = {"--integrator", "--fraction-bits", "--word", "--rounding", "--overflow"}
    assert fixed <= names["gen"] & names["verify"] & names["plan"]
    for verb in VERBS:
        assert "--json" in names[verb]
    # report runs verify's checks under verify's options, and writes where gen writes: -o/--output;
    # the sweep and basin sample it draws on request say which with their option's first word
    assert names["report"] == (names["verify"] - {"--report"}) | {"-o", "--output", "--board",
                                                                  "--board-steps", "--sweep",
                                                                  "--sweep-samples", "--basin",
                                                                  "--basin-samples"}
    assert {"-o", "--output"} <= names["gen"] and "--report" in names["verify"] & names["board"]


def test_the_period_error_help_states_the_sign() -> None:
    for verb in ("plan", "verify"):
        action = next(a for a in verb_parsers()[verb]._actions
                      if "--max-period-error" in a.option_strings)
        assert "runs slow" in action.help


def test_command_line_defaults_and_choices_agree_with_the_program() -> None:
    # The command line keeps these beside its options to start without scipy; they must not drift.
    from orbitfix.gen.analysis import basin, sweep
    from orbitfix.gen.program.integer_program import OVERFLOWS, ROUNDINGS, WORD_SIZES
    from orbitfix.gen.timing.integrators import INTEGRATORS
    from orbitfix.verify.proofs import certificate

    assert (sweep_verb.DEFAULT_SAMPLES, sweep_verb.DEFAULT_SECONDS) == (sweep.DEFAULT_SAMPLES,
                                                                        sweep.DEFAULT_SECONDS)
    assert (basin_verb.DEFAULT_PERIODS, basin_verb.DEFAULT_SECONDS) == (basin.DEFAULT_PERIODS,
                                                                        basin.DEFAULT_SECONDS)
    assert (verify_verb.DEFAULT_BAND, verify_verb.DEFAULT_TOLERANCE) == (certificate.DEFAULT_BAND,
                                                                         certificate.DEFAULT_TOLERANCE)
    gen_parser = verb_parsers()["gen"]
    choices = {a.dest: a.choices for a in gen_parser._actions if a.choices}
    assert sorted(choices["integrator"]) == sorted(INTEGRATORS)
    assert tuple(choices["word_bits"]) == WORD_SIZES
    assert tuple(choices["rounding"]) == ROUNDINGS and tuple(choices["overflow"]) == OVERFLOWS


# -- arguments checked before any work ---------------------------------------------------------------


@pytest.mark.parametrize("argv", [
    ["verify", "vanderpol", "--hours", "-1"],
    ["verify", "vanderpol", "--hours", "nan"],
    ["verify", "vanderpol", "--states", "0"],
    ["verify", "vanderpol", "--steps", "many"],
    ["verify", "vanderpol", "--max-period-error", "0"],
    ["verify", "vanderpol", "--box", "x=3:-3", "--certify"],
    ["verify", "vanderpol", "--exclude-radius", "-0.5"],
    ["gen", "vanderpol", "-o", "out", "--fraction-bits", "-3"],
    ["plan", "vanderpol", "--workers", "0"],
    ["plan", "vanderpol", "--max-amplitude-error", "-2"],
    ["sweep", "vanderpol", "--param", "mu", "--from", "0", "--to", "1", "--samples", "-3"],
    ["sweep", "vanderpol", "--param", "mu", "--from", "0", "--to", "inf"],
    ["sweep", "vanderpol", "--param", "mu", "--from", "0", "--to", "1", "--workers", "-1"],
    ["sweep", "vanderpol", "--param", "mu", "--from", "0", "--to", "1", "--seconds", "0"],
    ["basin", "vanderpol", "--samples", "1"],
    ["basin", "vanderpol", "--samples", "5", "--random", "5"],
    ["basin", "vanderpol", "--box", "x=a:b"],
    ["basin", "vanderpol", "--periods", "-1"],
    ["check"],
    ["frobnicate"],
])
def test_bad_arguments_exit_2_before_any_work(capsys, monkeypatch, argv: list[str]) -> None:
    def no_work(*args, **kwargs):
        raise AssertionError("work started before the arguments were checked")

    import orbitfix.gen.model.model_file as model_file
    import orbitfix.gen.pipeline as pipeline

    monkeypatch.setattr(model_file, "load_model", no_work)
    monkeypatch.setattr(pipeline, "design", no_work)
    code, out, err = run(capsys, *argv)
    assert code == 2
    assert err.startswith("orbitfix") and "Traceback" not in err and out == ""
    assert len(err.strip().splitlines()) == 1  # one clear line, not a usage dump


def test_help_and_version_exit_0(capsys) -> None:
    assert main(["--help"]) == 0
    assert "models" in capsys.readouterr().out
    assert main(["--version"]) == 0
    assert capsys.readouterr().out.startswith("orbitfix ")


def test_bad_arguments_in_a_real_process_give_no_traceback(tmp_path: Path) -> None:
    done = subprocess.run([sys.executable, "-m", "orbitfix.verify.cli.main", "verify", "vanderpol",
                           "--hours", "-1"], capture_output=True, text=True, cwd=tmp_path, check=False)
    assert done.returncode == 2
    assert "--hours" in done.stderr and "Traceback" not in done.stderr


# -- JSON: ok first, one number policy ---------------------------------------------------------------


def test_json_number_policy_writes_null_for_non_finite_numbers() -> None:
    data = json_object(True, {"a": float("nan"), "b": [np.float64(np.inf), np.int64(3)],
                              "c": np.array([1.5, -np.inf]), "ok": False})
    assert list(data) == ["ok", "a", "b", "c"] and data["ok"] is True
    assert data == {"ok": True, "a": None, "b": [None, 3], "c": [1.5, None]}
    text = json_text(False, {"x": float("-inf")})
    assert json.loads(text) == {"ok": False, "x": None} and "Infinity" not in text


@pytest.mark.parametrize("argv", [
    ["models", "--json"],
    ["check", "vanderpol", "--json"],
    ["check", "vanderpol", "--set", "mu=-1", "--json"],
    ["check", "no_such_model", "--json"],
    ["plan", "phase_amplitude", "--json"],
    ["sweep", "hopf", "--param", "mu", "--from", "-1", "--to", "1", "--samples", "5", "--no-cycles",
     "--workers", "1", "--json"],
    ["basin", "vanderpol", "--box", "x=-3:3", "--box", "y=-3:3", "--samples", "4", "--json"],
    ["verify", "vanderpol", "--skip-drift", "--states", "500", "--steps", "500", "--json"],
])
def test_every_json_answer_is_one_object_with_ok_first(capsys, argv: list[str]) -> None:
    code, out, err = run(capsys, *argv)
    data = json.loads(out)
    assert isinstance(data, dict) and next(iter(data)) == "ok"
    assert data["ok"] is (code == 0)
    assert "NaN" not in out and "Infinity" not in out
    assert "\r" not in err  # no progress bar under --json


def test_gen_json_lists_the_files_with_their_fingerprints(capsys, tmp_path: Path) -> None:
    program = tmp_path / "program.json"
    code, out, _ = run(capsys, "gen", "vanderpol", "-o", str(tmp_path / "fw"), "--program-json",
                       str(program), "--json")
    assert code == 0
    data = json.loads(out)
    assert next(iter(data)) == "ok" and data["ok"] is True
    paths = [Path(f["path"]) for f in data["files"]]
    assert {p.name for p in paths} == {"vanderpol.h", "vanderpol.c", "vanderpol_units.h",
                                       "vanderpol_selftest.h", "vanderpol_selftest.c", "program.json"}
    for entry in data["files"]:
        # SHA-256 of the bytes on disk, computed independently with hashlib (Python's standard library)
        assert entry["sha256"] == hashlib.sha256(Path(entry["path"]).read_bytes()).hexdigest()
    assert data["formats"]["states"] and data["formats"]["constants"]
    header = (tmp_path / "fw" / "vanderpol.h").read_text()
    assert f"integer program {data['program_fingerprint']}" in header  # the banner names the same
    assert f"(fingerprint {data['model_fingerprint']})" in header
    assert data["caution"] == CAUTION


def test_gen_json_of_a_model_without_a_cycle_says_not_ok(capsys, tmp_path: Path) -> None:
    code, out, err = run(capsys, "gen", "vanderpol", "--set", "mu=-1", "-o", str(tmp_path), "--json")
    assert code == 1 and "no stable limit cycle" in err
    data = json.loads(out)
    assert data["ok"] is False and "no stable limit cycle" in data["error"]
    assert not list(tmp_path.iterdir())


# -- the caution: gen and verify only, one text ------------------------------------------------------


@pytest.mark.parametrize(("argv", "cautioned"), [
    (["models"], False),
    (["check", "vanderpol"], False),
    (["plan", "phase_amplitude"], False),
    (["sweep", "hopf", "--param", "mu", "--from", "-1", "--to", "1", "--samples", "5", "--no-cycles",
      "--workers", "1"], False),
    (["basin", "vanderpol", "--box", "x=-3:3", "--samples", "4"], False),
    (["gen", "vanderpol", "-o", "{tmp}"], True),
    (["verify", "vanderpol", "--skip-drift", "--states", "500", "--steps", "500"], True),
])
def test_the_caution_is_printed_only_where_code_is_written_or_verified(capsys, tmp_path, argv,
                                                                      cautioned) -> None:
    code, out, _ = run(capsys, *[a.replace("{tmp}", str(tmp_path)) for a in argv])
    assert code == 0
    assert (CAUTION in out) is cautioned
    assert ("hardware stop" in out) is cautioned


def test_the_generated_banner_carries_the_same_safety_text(capsys, tmp_path: Path) -> None:
    assert main(["gen", "vanderpol", "-o", str(tmp_path)]) == 0
    header = (tmp_path / "vanderpol.h").read_text()
    banner = header.split("\n", 1)[1].split("*/", 1)[0]  # after the SPDX line
    words = " ".join(line.strip().lstrip("/*").strip() for line in banner.splitlines())
    assert " ".join(SAFETY_NOTE.split()) in " ".join(words.split())


# -- numbers to the digits that are known ------------------------------------------------------------


def test_numbers_are_rounded_to_their_tolerance() -> None:
    assert to_tolerance(4.656612873e-11, 2e-10) == "0 ± 2e-10"
    assert to_tolerance(1.23456789, 1e-4) == "1.2346 ± 1e-04"
    assert to_tolerance(-0.5, 1e-3) == "-0.5 ± 1e-03"
    assert to_tolerance(12.0, 0.5) == "12 ± 5e-01"


def test_a_hopf_point_is_printed_to_the_bisection_tolerance(capsys) -> None:
    # The Hopf normal form's Hopf point is at mu = 0 exactly (the linearisation's eigenvalues are
    # mu +- i omega: common practice); bisection finds it to within its tolerance, not to 1e-11.
    code, out, _ = run(capsys, "sweep", "hopf", "--param", "mu", "--from", "-1", "--to", "1",
                       "--samples", "5", "--no-cycles", "--workers", "1")
    assert code == 0
    line = next(line for line in out.splitlines() if line.strip().startswith("1. mu ="))
    assert "mu = 0 ± 2e-10 " in line and "e-11" not in line


# -- one sign for period errors ----------------------------------------------------------------------


def test_a_stepped_orbit_that_runs_slow_has_a_positive_period_error() -> None:
    # A rotation by 2 pi / (N (1 + e)) per step has a period of N (1 + e) steps: it runs slow by the
    # fraction e, so its period error is +e (direct calculation).
    from orbitfix.gen.study.discrete_cycle import CycleTolerance, measure

    wanted, e = 200.0, 2e-3
    angle = 2 * math.pi / (wanted * (1 + e))
    c, s = math.cos(angle), math.sin(angle)

    def step(x: np.ndarray) -> np.ndarray:
        return np.vstack([c * x[0] - s * x[1], s * x[0] + c * x[1]])

    phases = np.linspace(0, 2 * math.pi, 8, endpoint=False)
    start = np.vstack([np.cos(phases), np.sin(phases)])
    cycle = measure(step, start, 2000, wanted, np.array([-1.0, -1.0]), np.array([1.0, 1.0]),
                    CycleTolerance(period_ppm=1e6, amplitude=1.0))
    assert cycle.period_error_ppm == pytest.approx(e * 1e6, rel=1e-3)


# -- progress: a bar on a terminal, nothing otherwise ------------------------------------------------


class FakeTerminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_the_bar_is_drawn_only_on_a_terminal_and_never_for_json() -> None:
    terminal, other = FakeTerminal(), io.StringIO()
    assert isinstance(terminal_bar(False, terminal, terminal), ProgressBar)
    assert terminal_bar(True, terminal, terminal) is None
    assert terminal_bar(False, other, terminal) is None
    assert terminal_bar(False, terminal, other) is None


def test_the_bar_says_what_how_far_and_how_long() -> None:
    line = bar_line("comparing states", 25, 100, 3.0)
    assert line.startswith("comparing states [") and "25 %" in line and "about 9 s left" in line
    assert "left" not in bar_line("comparing states", 0, 100, 0.0)
    terminal = FakeTerminal()
    bar = ProgressBar(terminal)
    bar("work", 1, 2)
    bar.close()
    assert terminal.getvalue().startswith("\rwork [") and terminal.getvalue().endswith("\r\x1b[K")


def test_computations_tell_a_listener_only_when_one_is_installed() -> None:
    from orbitfix.gen.fan_out import fan_out

    heard: list[tuple[str, int, int]] = []
    tell("nobody listens", 1, 2)  # no listener: nothing happens
    with reporting(lambda what, done, total: heard.append((what, done, total))):
        assert fan_out(pow, [(2, 3), (3, 2), (4, 1)], workers=1) == [8, 9, 4]
    assert [(done, total) for _, done, total in heard] == [(0, 3), (1, 3), (2, 3)]
    assert all("independent jobs" in what for what, _, _ in heard)


def test_no_progress_is_written_when_output_is_not_a_terminal(tmp_path: Path) -> None:
    done = subprocess.run([sys.executable, "-m", "orbitfix.verify.cli.main", "basin", "vanderpol",
                           "--box", "x=-3:3", "--samples", "4"], capture_output=True, text=True,
                          cwd=tmp_path, check=False)
    assert done.returncode == 0
    assert done.stderr == "" and "\r" not in done.stdout and "\x1b" not in done.stdout


# -- a quick start ----------------------------------------------------------------------------------


@pytest.mark.parametrize("argv", [["--help"], ["models"], ["models", "--json"], ["verify", "--help"]])
def test_the_command_line_starts_without_the_heavy_libraries(argv: list[str]) -> None:
    # Not a timing (tests/bench/bench_startup.py measures that): which modules were loaded.
    script = ("import sys\nfrom orbitfix.verify.cli.main import main\ncode = main(sys.argv[1:])\n"
              "heavy = sorted(m for m in ('numpy', 'scipy', 'sympy', 'jinja2', 'cffi') "
              "if m in sys.modules)\nprint('HEAVY', heavy, file=sys.stderr)\nsys.exit(code)\n")
    done = subprocess.run([sys.executable, "-c", script, *argv], capture_output=True, text=True,
                          check=False)
    assert done.returncode == 0
    assert "HEAVY []" in done.stderr


# -- housekeeping: benchmarks, make clean, the slow marker -------------------------------------------


def test_every_benchmark_has_a_quick_mode() -> None:
    scripts = sorted((ROOT / "tests" / "bench").glob("bench_*.py"))
    assert scripts
    for script in scripts:
        assert "from quick_mode import" in script.read_text(), script.name
    makefile = (ROOT / "Makefile").read_text()
    assert "bench-quick:" in makefile and "--quick" in makefile
    ci = (ROOT / ".ci" / "run").read_text()
    assert ci.index("make test") < ci.index("make bench-quick") < ci.index("orbitfix-*.whl")
    assert "apt-get update" in ci and "python3-venv" in ci


@pytest.mark.skipif(shutil.which("make") is None, reason="needs make")
def test_make_clean_names_and_clears_the_tools_own_cache(tmp_path: Path, monkeypatch) -> None:
    from orbitfix.verify.targets.host_build import cache_root

    monkeypatch.delenv("ORBITFIX_CACHE", raising=False)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    expected = cache_root()
    env = {**os.environ, "XDG_CACHE_HOME": str(tmp_path / "cache")}
    done = subprocess.run(["make", "-n", "clean"], cwd=ROOT, capture_output=True, text=True, env=env,
                          check=True)
    assert f'rm -rf "{expected}"' in done.stdout
    assert f"host-build cache: {expected}" in done.stdout


def test_pytest_m_slow_selects_the_marked_tests() -> None:
    done = subprocess.run([sys.executable, "-m", "pytest", "--collect-only", "-q", "-m", "slow",
                           "-p", "no:cacheprovider", "tests/test_command_line.py"], cwd=ROOT,
                          capture_output=True, text=True, check=False)
    selected = [line for line in done.stdout.splitlines() if "::" in line]
    assert "test_verify_json_contract_and_sources" in done.stdout
    assert selected and all("verify" in line or "plan" in line for line in selected)
    assert "test_check_json_contract" not in done.stdout


def test_verify_text_names_the_first_mismatch_and_its_operation(capsys, tmp_path: Path) -> None:
    # a seeded fault: one product's shift made one smaller in the C (see test_command_line.py)

    assert main(["gen", "vanderpol", "-o", str(tmp_path)]) == 0
    source = tmp_path / "vanderpol.c"
    text = source.read_text()
    source.write_text(slip_the_square(text))
    capsys.readouterr()
    code, out, _ = run(capsys, "verify", "vanderpol", "--sources", str(tmp_path), "--states", "500",
                       "--steps", "500", "--skip-drift")
    assert code == 1
    assert "first mismatch at random state number " in out
    assert "they part at operation" in out and "(mul:" in out
    assert "result: NOT bit-exact" in out and CAUTION in out


def test_verify_refuses_random_states_beyond_the_machine_before_building(capsys, monkeypatch) -> None:
    import orbitfix.verify.proofs.host_check as host_check

    def no_build(*args, **kwargs):
        raise AssertionError("the host build started before the size was checked")

    monkeypatch.setattr(host_check, "check_on_host", no_build)
    code, out, err = run(capsys, "verify", "vanderpol", "--states", "1_000_000_000_000", "--skip-drift")
    assert code == 2 and out == ""
    assert "GiB" in err and "--states" in err and "Traceback" not in err


def test_verify_refuses_more_drift_steps_than_its_counter_holds(capsys, monkeypatch) -> None:
    import orbitfix.gen.pipeline as pipeline

    def no_design(*args, **kwargs):
        raise AssertionError("the design started before --hours was checked")

    monkeypatch.setattr(pipeline, "design", no_design)
    code, _, err = run(capsys, "verify", "vanderpol", "--hours", "1e20")
    assert code == 2 and "--hours" in err and "2^63" in err
