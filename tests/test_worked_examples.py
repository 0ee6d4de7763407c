"""The README's worked examples, ``fin_drive`` and ``peristaltic_pump`` (built-in model files,
scenarios of our own with illustrative numbers): each model file loads and has the stable cycle its
scenario needs, each command the README shows runs as written with exit 0, the pump's setter is in
the generated header, its speed ramps as the model file declares, and the README's firmware
snippet drives the generated C to the golden model's bits.
"""

from __future__ import annotations

import json
import math
import os
import re
import shlex
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from test_boards_emulated import tools_or_skip

from orbitfix.gen.analysis.limit_cycle import find_limit_cycle
from orbitfix.gen.model.model_file import builtin_names, load_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.verify.cli.main import main

README = (Path(__file__).resolve().parents[1] / "README.md").read_text()
SECTION = README.split("\n## Worked examples\n")[1].split("\n## ")[0]
STRICT = ["-std=c99", "-pedantic", "-Werror", "-Wall", "-Wextra", "-Wconversion", "-Wsign-conversion"]
PUMP = "peristaltic_pump"


def readme_commands() -> list[list[str]]:
    """The orbitfix commands of the section's shell blocks, without the program's path."""
    found = []
    for block in re.findall(r"```sh\n(.*?)```", SECTION, flags=re.S):
        for line in block.splitlines():
            words = shlex.split(line.split("#")[0])
            if words and words[0].endswith("orbitfix"):
                found.append(words[1:])
    return found


def readme_command(verb: str, model: str, output: Path | None = None) -> list[str]:
    """The README's command for a verb and model, its -o folder moved to ``output``."""
    (words,) = [c for c in readme_commands() if c[:2] == [verb, model]]
    if output is not None:
        words = list(words)
        words[words.index("-o") + 1] = str(output)
    return words


def test_the_section_shows_one_command_per_step_of_each_example() -> None:
    assert readme_commands() == [
        ["report", "fin_drive", "-o", "build/fin_drive", "--board", "microbit"],
        ["gen", PUMP, "-o", "build/pump"],
        ["verify", PUMP],
        ["report", "walking_platform", "-o", "build/walking_platform", "--hours", "1"],
    ]
    # shipped in the package, so the wheel has them
    assert {"fin_drive", PUMP, "walking_platform"} <= set(builtin_names())


# -- the model files --------------------------------------------------------------------------------

# (model, radius of the cycle, convergence gain, angular frequency at the nominal parameters)
CYCLES = [("fin_drive", 0.8, 2.0, 2 * math.pi), (PUMP, 1.0, 4.0, 2 * math.pi)]


@pytest.mark.parametrize(("name", "radius", "gain", "omega"), CYCLES)
def test_each_example_has_the_stable_cycle_of_its_scenario(name, radius, gain, omega) -> None:
    # The Stuart-Landau oscillator in polar form, r' = g (a^2 - r^2) r, theta' = omega (common
    # practice): the cycle is the circle r = a, its period 2 pi / omega, and the radial equation
    # linearised at r = a decays at -2 g a^2, so the nontrivial Floquet multiplier is
    # exp(-2 g a^2 * 2 pi / omega).
    model = load_model(name)
    cycle = find_limit_cycle(model)
    assert cycle.found and cycle.stable and cycle.isolated, cycle.verdict
    period = 2 * math.pi / omega
    assert cycle.period == pytest.approx(period, rel=1e-6)
    assert cycle.state_max == pytest.approx([radius, radius], abs=1e-4)
    assert cycle.state_min == pytest.approx([-radius, -radius], abs=1e-4)
    others = np.delete(np.abs(cycle.multipliers), cycle.trivial_index)
    assert others == pytest.approx([math.exp(-2 * gain * radius**2 * period)], rel=1e-3)


def test_the_examples_keep_their_scenarios_rhythm() -> None:
    fin, pump = load_model("fin_drive"), load_model(PUMP)
    assert (fin.rhythm.cycle_hz, fin.rhythm.loop_hz) == (2.0, 500)
    (speed,) = [p for p in pump.parameters if p.runtime]
    assert (speed.name, speed.low, speed.high, speed.rate) == ("speed", 0.25, 2.0, 0.5)
    # the README quotes the fin's multiplier: e^(-2 gain stroke^2) with gain 2 and stroke 0.8
    assert f"{math.exp(-2 * 2.0 * 0.8**2):.4f}" in SECTION


# -- the fin drive's one command ---------------------------------------------------------------------


@pytest.mark.slow
def test_fin_drive_report_runs_as_written_on_the_emulated_cortex_m0(tmp_path, capsys) -> None:
    tools_or_skip("microbit")
    folder = tmp_path / "fin_drive"
    assert main(readme_command("report", "fin_drive", folder)) == 0
    assert "Traceback" not in capsys.readouterr().err
    data = json.loads((folder / "report.json").read_text())
    assert data["ok"] and data["bit_exact"] and data["drift"]["verdict"] == "pass"
    assert data["timing"]["steps_per_cycle"] == pytest.approx(250)  # 500 Hz / 2 Hz, as the README says
    (run,) = data["boards"]
    assert run["board"] == "microbit" and run["ok"] and run["bit_exact"]
    assert (folder / "report.html").stat().st_size > 0


# -- the pump: gen, the setter, verify ---------------------------------------------------------------


@pytest.fixture(scope="module")
def pump_sources(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("pump")
    assert main(readme_command("gen", PUMP, folder)) == 0
    return folder


@pytest.fixture(scope="module")
def pump_design():
    return design(load_model(PUMP))


def test_pump_header_declares_the_speed_setter(pump_sources) -> None:
    header = (pump_sources / f"{PUMP}.h").read_text()
    assert "void peristaltic_pump_set_speed(peristaltic_pump_state_t *state, int32_t target);" in header
    assert "PERISTALTIC_PUMP_SPEED_FRACTION_BITS" in header
    assert "int32_t speed_target;" in header
    assert "PERISTALTIC_PUMP_SPEED_FROM_REAL" in (pump_sources / f"{PUMP}_units.h").read_text()


@pytest.mark.slow
def test_pump_verify_runs_as_written_and_drives_the_setter_through_the_c(capsys) -> None:
    # The README's command with fewer random states and trajectory steps, to keep the test short.
    words = [*readme_command("verify", PUMP), "--states", "20000", "--steps", "20000", "--json"]
    assert main(words) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["ok"] and data["bit_exact"] and data["setters_checked"] == 1
    # four ramps across the whole range at 0.5 per second and 1 kHz, each (2 - 0.25) / 0.5 * 1000
    # = 3500 steps and two more (common practice: a rate limiter's travel time); speed moves in
    # whole LSBs of 2^-28, 0.5 / 1000 is 134,217.728 of them, so a step may move 134,217: 3501
    assert data["ramp_steps_compared"] == 4 * (3501 + 2)
    assert data["drift"]["verdict"] == "pass"
    # judged at both ends of the speed's range too: Hopf normal form, period 2 pi / omega exactly,
    # so 1000 / speed steps (common practice)
    corners = {run["start"]: run for run in data["drift"]["runs"] if run["start"].startswith("speed")}
    assert set(corners) == {"speed = 0.25", "speed = 2"}
    for name, steps in (("speed = 0.25", 4000), ("speed = 2", 500)):
        assert corners[name]["decides_verdict"] and corners[name]["verdict"] == "pass"
        assert corners[name]["period_steps"] == pytest.approx(steps, rel=1e-6)


def _run(program, states: np.ndarray, steps: int) -> np.ndarray:
    """Every state of ``steps`` golden steps after ``states`` (one column a start), stacked."""
    rows = []
    for _ in range(steps):
        states = golden.step(program, states)
        rows.append(states)
    return np.array(rows)


def _period(x: np.ndarray) -> float:
    """Mean steps between upward zero crossings over the second half of a run."""
    x = x.astype(float)
    up = np.flatnonzero((x[:-1] < 0) & (x[1:] >= 0))
    times = up + (-x[up]) / (x[up + 1] - x[up])
    tail = times[len(times) // 2:]
    return float((tail[-1] - tail[0]) / (len(tail) - 1))


def test_pump_speed_ramps_toward_each_setting_at_the_declared_rate(pump_design) -> None:
    # A rate limiter (common practice): after a new target the parameter moves toward it by at most
    # rate / loop_hz a step (the model file's own rate), stops at it, and never leaves its range.
    model, program = pump_design.model, pump_design.plan.program
    (speed,) = [p for p in model.parameters if p.runtime]
    index = program.state_names.index("speed")
    target = program.state_names.index("speed_target")
    bits = program.state_fraction_bits[index]
    per_step = speed.rate / model.rhythm.loop_hz * 2**bits
    initial = np.array(pump_design.plan.initial_state, dtype=np.int64)
    assert initial[index] == round(1.0 * 2**bits)
    # two runs side by side: from the initial state asked for 2; from speed 2 asked for 0.1, below
    # the range, so the ramp stops at its low end
    starts = np.stack([initial, initial], axis=1)
    starts[target, 0] = round(2.0 * 2**bits)
    starts[index, 1] = round(2.0 * 2**bits)
    starts[target, 1] = round(0.1 * 2**bits)
    runs = _run(program, starts, 3600)
    speeds = np.concatenate([starts[index][None, :], runs[:, index, :]]).astype(float)
    moves = np.diff(speeds, axis=0)
    assert np.all(np.abs(moves) <= per_step + 1)
    up, down = moves[:, 0], moves[:, 1]
    assert np.all(up >= 0) and np.all(down <= 0)
    assert speeds[-1, 0] == round(2.0 * 2**bits) == speeds[:, 0].max()
    assert speeds[-1, 1] == round(0.25 * 2**bits) == speeds[:, 1].min()
    loop = model.rhythm.loop_hz
    assert np.count_nonzero(up) == pytest.approx((2.0 - 1.0) / speed.rate * loop, abs=2)
    assert np.count_nonzero(down) == pytest.approx((2.0 - 0.25) / speed.rate * loop, abs=2)
    # Hopf normal form: the period is 2 pi / omega exactly, so at speed 2 it is 1000 / 2 steps
    assert _period(runs[2000:, 0, 0]) == pytest.approx(500, rel=2e-4)


def _snippet() -> str:
    """The pump's firmware snippet (the one C block of the pump's subsection)."""
    pump = SECTION.split("\n### A peristaltic pump")[1].split("\n### ")[0]
    (block,) = re.findall(r"```c\n(.*?)```", pump, flags=re.S)
    return block


HARNESS = r"""
#include <stdio.h>

static int32_t last_a, last_b;
static int disabled;

void stepper_write_currents(int32_t phase_a, int32_t phase_b) { last_a = phase_a; last_b = phase_b; }
void stepper_disable(void) { disabled = 1; }

int main(void)
{
    int i;
    pump_start();
    for (i = 0; i < 300; i++) pump_tick();
    pump_set_speed(1700);
    for (i = 0; i < 2500; i++) pump_tick();
    pump_set_speed(-5);
    for (i = 0; i < 400; i++) pump_tick();
    printf("%ld %ld %ld %ld %lu %ld %ld %d\n", (long)pump.x, (long)pump.y, (long)pump.speed,
           (long)pump.speed_target, (unsigned long)pump.saturated_steps, (long)last_a, (long)last_b,
           disabled);
    return 0;
}
"""


def _firmware_run(snippet: str, sources: Path, folder: Path) -> list[int]:
    """The README's C and the harness above, compiled with strict flags beside the generated step
    and run: start at 1.5 cycles per second, after 300 ticks ask for 1.7, after 2,500 more for a
    negative speed (the step holds it at the range's low end)."""
    (folder / "firmware.c").write_text(snippet + HARNESS)
    subprocess.run(["gcc", *STRICT, "-O2", "-I", str(sources), "firmware.c", str(sources / f"{PUMP}.c"),
                    "-o", "firmware"], cwd=folder, check=True)
    out = subprocess.run([str(folder / "firmware")], check=True, capture_output=True, text=True).stdout
    return [int(v) for v in out.split()]


def _golden_run(built) -> np.ndarray:
    """The same run on the golden model, the targets written as the snippet computes them: the
    units macro rounds half away from zero (1.5 * 2^f is exact), then thousandths times 2^f over
    1000 in C's integer division (toward zero); a negative speed is clamped to 0 first."""
    plan = built.plan.program
    target = plan.state_names.index("speed_target")
    bits = plan.state_fraction_bits[target]
    state = np.array(built.plan.initial_state, dtype=np.int64)
    for setting, ticks in ((round(1.5 * 2**bits), 300), (1700 * 2**bits // 1000, 2500), (0, 400)):
        state[target] = setting
        state = _run(plan, state.reshape(-1, 1), ticks)[-1, :, 0]
    return state


@pytest.fixture(scope="module")
def golden_firmware_run(pump_design) -> np.ndarray:
    return _golden_run(pump_design)


def test_readme_firmware_snippet_calls_the_setter_as_the_golden_model_steps(
        pump_sources, pump_design, golden_firmware_run, tmp_path) -> None:
    shown = _firmware_run(_snippet(), pump_sources, tmp_path)
    state = golden_firmware_run
    assert shown[:4] == [int(v) for v in state]
    assert shown[4] == 0 and shown[7] == 0  # no saturated step, the pump never disabled
    assert shown[5:7] == shown[:2]  # the driver got the last step's currents
    # 300 ticks toward 1.5 reach 1.15, 2,500 toward 1.7 reach it after 1,100; the last 400 move
    # back down by 400 * 0.5 / 1000 toward the range's low end, each step's change within one LSB
    # of the rate (a rate limiter, common practice; the HIP model's test allows the same)
    plan = pump_design.plan.program
    bits = plan.state_fraction_bits[plan.state_names.index("speed")]
    assert abs(int(state[plan.state_names.index("speed")]) - 1.5 * 2**bits) <= 400


def test_a_slip_in_the_snippets_speed_conversion_is_caught(pump_sources, golden_firmware_run,
                                                           tmp_path) -> None:
    # Seeded fault: thousandths scaled by 1024 instead of 1000 (a shift where a division belongs).
    snippet = _snippet()
    assert snippet.count(" / 1000;") == 1
    shown = _firmware_run(snippet.replace(" / 1000;", " / 1024;"), pump_sources, tmp_path)
    assert shown[:4] != [int(v) for v in golden_firmware_run]


def test_readme_firmware_snippet_leaves_no_floating_point_on_the_cortex_m0(pump_sources, tmp_path) -> None:
    # The README says the units macro on a constant is folded by the compiler: at -O0 for a
    # Cortex-M0 the object calls no soft-float routine (the Arm EABI's __aeabi_d*/__aeabi_f*
    # helpers, from memory) and holds no floating-point symbol.
    if shutil.which("arm-none-eabi-gcc") is None and not os.environ.get("CI"):
        pytest.skip("arm-none-eabi-gcc not installed (Debian: gcc-arm-none-eabi)")
    (tmp_path / "firmware.c").write_text(_snippet())
    subprocess.run(["arm-none-eabi-gcc", "-mcpu=cortex-m0", "-mthumb", "-O0", *STRICT, "-I",
                    str(pump_sources), "-c", "firmware.c", "-o", "firmware.o"], cwd=tmp_path, check=True)
    symbols = subprocess.run(["arm-none-eabi-nm", "firmware.o"], cwd=tmp_path, check=True,
                             capture_output=True, text=True).stdout
    assert "peristaltic_pump_set_speed" in symbols
    assert not re.search(r"__aeabi_[df]|__(add|mul|div|sub)[sd]f3|__fix", symbols), symbols


# -- the walking platform: one report command ---------------------------------------------------------


@pytest.mark.slow
def test_walking_platform_report_runs_as_written(tmp_path, capsys) -> None:
    # The README's command, with fewer random states and trajectory steps to keep the test short;
    # the switching itself is tested in tests/test_pattern_switch.py and tests/test_outputs.py.
    folder = tmp_path / "walking_platform"
    words = [*readme_command("report", "walking_platform", folder), "--states", "2000",
             "--steps", "2000"]
    assert main(words) == 0
    assert "Traceback" not in capsys.readouterr().err
    data = json.loads((folder / "report.json").read_text())
    assert data["ok"] and data["bit_exact"] and data["setters_checked"] == 1
    assert data["drift"]["verdict"] == "pass"
    # judged at both gaits: the corners of pattern_mix, each on an exact cycle of 250 steps
    # (1 Hz at 250 Hz; the Hopf normal form's period 2 pi / omega, common practice)
    corners = {run["start"]: run for run in data["drift"]["runs"] if run["start"].startswith("pattern_mix")}
    assert set(corners) == {"pattern_mix = 0", "pattern_mix = 1"}
    for run in corners.values():
        assert run["decides_verdict"] and run["verdict"] == "pass"
        assert run["period_steps"] == pytest.approx(250, rel=1e-6)
        assert {o["name"] for o in run["outputs"]} == {"hip_left_fore", "hip_right_fore",
                                                     "hip_left_hind", "hip_right_hind"}
    page = (folder / "report.html").read_text(encoding="utf-8")
    assert "Outputs to actuators" in page and 'id="plot-network-waveforms"' in page
