"""Work whose size follows from the input is sized before it starts and refused, with the size it
would need, when it is beyond the machine; a plan whose step constants round to zero is refused."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from conftest import refused

from orbitfix.gen import work_size
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.model.model_file import MODELS_FOLDER
from orbitfix.gen.pipeline import plan_step
from orbitfix.gen.timing.integrators import INTEGRATORS


def with_rhythm(tmp_path: Path, model: str, **rhythm: str) -> Path:
    """A copy of a built-in model file with some [rhythm] values replaced."""
    lines = []
    for line in (MODELS_FOLDER / f"{model}.toml").read_text().splitlines():
        key = line.split("=")[0].strip()
        lines.append(f"{key} = {rhythm[key]}" if key in rhythm else line)
    path = tmp_path / f"{model}.toml"
    path.write_text("\n".join(lines) + "\n")
    return path




def test_phase_chain_with_an_absurd_frequency_is_refused_before_the_analysis(capsys) -> None:
    # the issue: 4.79 TiB allocated by the analysis; now the value is outside the accepted range
    err = refused(["check", "phase_chain", "--set", "nu=1e9"], capsys)
    assert "'nu'" in err and "accepted" in err


def test_loop_rate_of_a_gigahertz_is_refused(tmp_path: Path, capsys) -> None:
    # the issue: verify tried to allocate 745 GiB
    path = with_rhythm(tmp_path, "vanderpol", loop_hz="1e9")
    err = refused(["verify", str(path)], capsys)
    assert "loop_hz" in err and "accepted" in err


def test_cycle_of_1e_minus_300_hz_writes_nothing(tmp_path: Path, capsys) -> None:
    # the issue: C whose every step constant rounded to zero, exit 0, a 300-digit steps per cycle
    path = with_rhythm(tmp_path, "vanderpol", cycle_hz="1e-300")
    err = refused(["gen", str(path), "-o", str(tmp_path / "out")], capsys)
    assert "cycle_hz" in err and "accepted" in err
    assert not (tmp_path / "out").exists()


def test_verify_at_a_megahertz_loop_is_refused_with_the_size_it_would_need(tmp_path: Path,
                                                                          capsys) -> None:
    # the issue: over ten minutes of work before any answer; 24 h at 1 MHz is 8.6e10 steps a run
    path = with_rhythm(tmp_path, "vanderpol", loop_hz="1e6")
    err = refused(["verify", str(path), "--states", "1000", "--steps", "1000"], capsys)
    # the first work that grows with the loop rate is the design's start-up path (minutes at
    # 666,667 steps per cycle), refused before it runs, before any proof
    assert "start-up path" in err and "would need about" in err and "loop_hz" in err


def test_plan_at_a_megahertz_loop_is_refused_before_any_study_runs(tmp_path: Path, capsys) -> None:
    path = with_rhythm(tmp_path, "vanderpol", loop_hz="1e6")
    err = refused(["plan", str(path)], capsys)
    assert "start-up path" in err and "would need about" in err and "loop_hz" in err


def test_a_long_drift_is_refused_with_the_size_it_would_need(capsys) -> None:
    # 10,000 hours of loop time at 500 Hz is 1.8e10 steps a run: beyond the machine
    err = refused(["verify", "vanderpol", "--hours", "10000", "--states", "1000", "--steps", "1000"],
                  capsys)
    assert "drift proof" in err and "would need about" in err and "--hours" in err


def test_verify_with_a_billion_random_states_is_refused(capsys) -> None:
    err = refused(["verify", "vanderpol", "--states", "2000000000", "--skip-drift"], capsys)
    assert "bit-exact" in err and "GiB" in err and "--states" in err


def test_estimates_scale_with_the_work_and_refuse_past_the_budget() -> None:
    small = work_size.float_run("a run", operations=50, steps=1e4, columns=24,
                                recorded_rows=1e4, states=1)
    assert small.fits
    big = work_size.float_run("a run", operations=50, steps=1e8, columns=24)
    assert big.seconds == pytest.approx(1e4 * small.seconds)
    assert not big.fits
    with pytest.raises(InputError, match=r"a run would need about .* beyond the 20 min per core"):
        work_size.refuse_beyond_machine(big, "do less")
    memory = work_size.Work("a table", 1.0, bytes=5 * 2**30)
    with pytest.raises(InputError, match=r"5 GiB of memory"):
        work_size.refuse_beyond_machine(memory, "do less")
    work_size.refuse_beyond_machine(work_size.Work("spread", 3000.0, cores=4), "")  # 4 cores
    with pytest.raises(InputError, match="--hours"):
        work_size.drift_work(50, 2, 500.0, 1000.0, -1.0, 4, 40, 15, 5)


HARMONIC = define_model("harmonic", {"x": 1.0, "y": 0.0}, {"x": "y", "y": "-x"},
                        cycle_hz=1, loop_hz=100)
CIRCLE = np.vstack([np.cos(np.linspace(0, 2 * np.pi, 64)), np.sin(np.linspace(0, 2 * np.pi, 64))])


def test_a_plan_whose_step_constants_round_to_zero_is_refused() -> None:
    # 16-bit words: a multiplier gets at most 2 * 16 - 2 = 30 fraction bits, so a step of 1e-12
    # (h and h/2 of the Euler step) is stored as round(1e-12 * 2**30) = 0.
    euler = INTEGRATORS["euler"]
    narrow = HARMONIC.with_fixed_point(word_bits=16, integrator="euler")
    with pytest.raises(InputError, match=r"round to zero.*wider word"):
        plan_step(narrow, euler, 1e-12, CIRCLE)
    # the same step in 32 bits keeps its constants (62 fraction bits), and 16 bits at a usual step
    wide = HARMONIC.with_fixed_point(word_bits=32, integrator="euler")
    assert all(c.stored != 0 for c in plan_step(wide, euler, 1e-12, CIRCLE).constants if c.real)
    assert all(c.stored != 0 for c in plan_step(narrow, euler, 0.01, CIRCLE).constants if c.real)
