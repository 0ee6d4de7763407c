"""The command line: its JSON contract, exit codes, and clear messages (never a traceback) for
user mistakes."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import slip_the_square

from orbitfix.verify.cli.main import main

KINDS = {"stable node", "unstable node", "stable focus", "unstable focus", "saddle", "center"}


def run(capsys: pytest.CaptureFixture, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_check_json_contract(capsys) -> None:
    code, out, _ = run(capsys, "check", "vanderpol", "--json")
    assert code == 0
    data = json.loads(out)
    assert data["model"] == "vanderpol"
    assert data["params"] == {"mu": 1.0}
    assert data["equilibria"] and all(e["kind"] in KINDS for e in data["equilibria"])
    for e in data["equilibria"]:
        assert len(e["state"]) == 2 and all(len(pair) == 2 for pair in e["eigenvalues"])
    cycle = data["cycle"]
    for key in ("found", "stable", "period", "state_min", "state_max", "floquet"):
        assert key in cycle
    assert cycle["found"] and cycle["stable"]
    assert cycle["period"] == pytest.approx(6.6633, rel=1e-4)  # published value, mu = 1


def test_check_text_report_has_no_caution(capsys) -> None:
    # check writes and verifies no code: the actuator caution belongs to gen and verify only
    code, out, _ = run(capsys, "check", "vanderpol")
    assert code == 0
    assert "unstable focus" in out
    assert "Caution" not in out


def test_negative_damping_has_no_cycle_and_exits_1(capsys) -> None:
    code, out, _ = run(capsys, "check", "vanderpol", "--set", "mu=-1", "--json")
    assert code == 1
    data = json.loads(out)
    assert data["equilibria"][0]["kind"] == "stable focus"
    assert not data["cycle"]["stable"]


def test_zero_damping_is_a_center_with_no_isolated_cycle(capsys) -> None:
    code, out, _ = run(capsys, "check", "vanderpol", "--set", "mu=0")
    assert code == 1
    assert "center" in out
    assert "not isolated" in out or "family" in out


@pytest.mark.parametrize("argv", [
    ["check", "vanderpol", "--set", "nu=1"],
    ["check", "vanderpol", "--set", "mu"],
    ["check", "vanderpol", "--set", "mu=fast"],
    ["check", "no_such_model"],
    ["check", "missing.toml"],
    ["gen", "vanderpol", "-o", "/proc/orbitfix-cannot-write-here"],
    ["verify", "vanderpol", "--sources", "/nonexistent-folder"],
    ["verify", "vanderpol", "--fraction-bits", "30"],
    ["verify", "vanderpol", "--hours", "-1", "--states", "10", "--steps", "10"],
])
def test_user_mistakes_exit_2_with_a_message(capsys, argv: list[str]) -> None:
    code, _, err = run(capsys, *argv)
    assert code == 2
    assert err.startswith("orbitfix ")
    assert "Traceback" not in err


def test_broken_model_file_names_file_and_line(capsys, tmp_path: Path) -> None:
    path = tmp_path / "bad.toml"
    path.write_text('name = "bad"\n[states]\nx = 1\n[equations]\nx = "import os"\n'
                    '[rhythm]\ncycle_hz = 1\nloop_hz = 100\n')
    code, _, err = run(capsys, "check", str(path))
    assert code == 2
    assert f"{path}:5" in err


def test_usage_errors_exit_2(capsys) -> None:
    assert main(["check"]) == 2
    assert "the following arguments are required: model" in capsys.readouterr().err


def test_gen_writes_header_source_and_program(capsys, tmp_path: Path) -> None:
    code, _, _ = run(capsys, "gen", "vanderpol", "-o", str(tmp_path / "fw"),
                       "--program-json", str(tmp_path / "program.json"))
    assert code == 0
    assert (tmp_path / "fw" / "vanderpol.h").is_file()
    assert (tmp_path / "fw" / "vanderpol.c").is_file()
    program = json.loads((tmp_path / "program.json").read_text())
    assert program["state_names"] == ["x", "y"] and program["ops"]


def test_gen_refuses_a_model_with_no_cycle_and_shows_the_analysis(capsys, tmp_path) -> None:
    code, out, err = run(capsys, "gen", "vanderpol", "--set", "mu=-1", "-o", str(tmp_path))
    assert code == 1
    assert "stable focus" in out
    assert "no stable limit cycle" in err
    assert not (tmp_path / "vanderpol.c").exists()


@pytest.mark.slow
def test_verify_json_contract_and_sources(capsys, tmp_path: Path) -> None:
    code, out, _ = run(capsys, "verify", "vanderpol", "--json", "--states", "5000",
                       "--steps", "5000", "--set", "mu=2", "--hours", "0.01")
    assert code == 0
    data = json.loads(out)
    drift = data["drift"]
    assert drift["verdict"] == "pass" and drift["steps"] == 36_000
    for one in drift["runs"]:
        for key in ("amplitude_error", "period_error_ppm", "phase_drift_cycles",
                    "integer_period_steps", "saturation_events", "verdict"):
            assert key in one
    assert data["bit_exact"] is True
    assert data["states_compared"] == 5000 and data["steps_compared"] == 5000
    assert data["first_mismatch"] is None
    assert data["integrator"] == "rk4" and data["step_size"] > 0
    states = data["formats"]["states"]
    assert set(states) == {"x", "y"} and states["x"] == data["formats"]["signals"][0]
    assert data["formats"]["constants"]
    run(capsys, "gen", "vanderpol", "--set", "mu=2", "-o", str(tmp_path))
    code, out, _ = run(capsys, "verify", "vanderpol", "--set", "mu=2", "--sources", str(tmp_path),
                       "--states", "5000", "--steps", "5000", "--hours", "0.01")
    assert code == 0
    assert "bit-exact" in out


def test_verify_of_edited_sources_exits_1_naming_the_step(capsys, tmp_path: Path) -> None:
    run(capsys, "gen", "vanderpol", "-o", str(tmp_path))
    source = tmp_path / "vanderpol.c"
    text = source.read_text()
    source.write_text(slip_the_square(text))
    code, out, _ = run(capsys, "verify", "vanderpol", "--sources", str(tmp_path),
                       "--states", "5000", "--steps", "5000", "--json", "--hours", "0.01")
    assert code == 1
    data = json.loads(out)
    assert data["bit_exact"] is False
    assert data["first_mismatch"]["operation"]["kind"] == "mul"
    assert "drift" not in data  # no drift run on C that is not bit-exact


@pytest.mark.slow
def test_verify_fails_when_the_drift_test_fails(capsys) -> None:
    # 16-bit words with 4 fraction bits: the orbit collapses (see tests/test_drift.py).
    code, out, _ = run(capsys, "verify", "vanderpol", "--word", "16", "--fraction-bits", "4",
                       "--states", "2000", "--steps", "2000", "--hours", "0.01", "--json")
    assert code == 1
    data = json.loads(out)
    assert data["bit_exact"] is True and data["drift"]["verdict"] == "fail"


def test_console_entry_point_runs_as_a_module() -> None:
    done = subprocess.run([sys.executable, "-m", "orbitfix.verify.cli.main", "check", "vanderpol",
                           "--set", "mu=-1"], capture_output=True, text=True, check=False)
    assert done.returncode == 1
    assert "Traceback" not in done.stderr


@pytest.mark.slow
def test_plan_json_has_signals_constants_and_integrators(capsys) -> None:
    code, out, _ = run(capsys, "plan", "vanderpol", "--json", "--max-period-error", "100")
    assert code == 0
    data = json.loads(out)
    signals = data["plan"]["signals"]
    # 35 values, 9 constants (each RK4 update sums and scales its four slopes in one scaled_sum:
    # 43 values with a chain of sums, 37 with a sum and then a product)
    assert len(signals) == len(data["plan"]["formats"]["constants"]) + 26
    for row in signals:
        assert row["sure_min"] <= row["min"] <= row["max"] <= row["sure_max"]
        assert row["headroom_bits"] >= 1  # margin 2 = one bit over the sure bound
    names = [s["integrator"] for s in data["integrators"]]
    assert names == ["euler", "symplectic-euler", "heun", "rk4"]
    euler = data["integrators"][0]
    assert euler["lowest_loop_hz"] is None and euler["needed_loop_hz"] > 1000


def test_plan_refuses_a_non_positive_tolerance(capsys) -> None:
    code, _, err = run(capsys, "plan", "vanderpol", "--max-amplitude-error", "0")
    assert code == 2 and "positive" in err


def test_models_with_angle_states_generate_and_verify_with_their_drift_test(capsys,
                                                                            tmp_path) -> None:
    code, _, _ = run(capsys, "gen", "phase_amplitude", "-o", str(tmp_path))
    assert code == 0 and (tmp_path / "phase_amplitude.c").exists()
    code, out, _ = run(capsys, "verify", "phase_amplitude", "--states", "100", "--steps", "100",
                       "--hours", "1")
    assert code == 0 and "bit-exact" in out
    assert "theta passing the phase 0 turn forwards" in out and "horizon unbounded" in out


@pytest.mark.slow
def test_verify_certify_json_contract_and_exit_codes(capsys) -> None:
    argv = ["verify", "vanderpol", "--word", "16", "--fraction-bits", "8", "--certify",
            "--skip-drift", "--states", "1000", "--steps", "1000", "--json"]
    code, out, _ = run(capsys, *argv, "--exclude-radius", "0.25")
    data = json.loads(out)
    assert data["certificate"]["proved"] is True and data["bit_exact"] is True
    # Q7.8 is coarse: from the initial state its orbit parts from the float step map by about 10 %
    # of a state's range (over the 5 % allowed), so verify fails it while the certificate holds.
    assert code == 1 and data["start_path"]["ok"] is False and data["start_path"]["parting"] > 0.05
    assert data["certificate"]["states_checked"] > 1_000_000 and "band" in data["certificate"]
    # Without the exclusion the origin, a fixed point of the integer map, breaks the proof.
    code, out, _ = run(capsys, *argv)
    assert code == 1 and json.loads(out)["certificate"]["proved"] is False


def test_certify_refuses_32_bit_words(capsys) -> None:
    code, _, err = run(capsys, "verify", "vanderpol", "--certify", "--skip-drift", "--states", "10",
                       "--steps", "10")
    assert code == 2 and "--word 16" in err
