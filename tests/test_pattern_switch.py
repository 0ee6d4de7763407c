"""Pattern switching at run time: the built-in walking_platform (four Hopf oscillators, walk to
trot through the runtime parameter pattern_mix) in the golden model and in its C.

References: the gait tables (walk LF, RF, LH, RH at 0, 1/2, 3/4, 1/4 of a cycle; trot 0, 1/2,
1/2, 0: common practice, ``gen/model/networks.py``); a rate limiter's travel time, range / rate
(common practice); the Hopf normal form's period 2 pi / omega, here 250 steps at 1 Hz and 250 Hz
(closed form)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import orbitfix.gen.model as model_package
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.model.networks import GAITS, MIX
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.verify.cli.main import main
from orbitfix.verify.proofs.host_check import check_on_host

MODEL = "walking_platform"
PERIOD = 250  # steps a cycle


@pytest.fixture(scope="module")
def platform():
    return design(load_model(MODEL))


def _run(program, states: np.ndarray, steps: int) -> np.ndarray:
    """Every state of ``steps`` golden steps from ``states`` (one column a start), stacked: shape
    (steps, n_states, starts)."""
    rows = []
    for _ in range(steps):
        states = golden.step(program, states)
        rows.append(states)
    return np.array(rows)


def _lags(rows: np.ndarray, program) -> np.ndarray:
    """Each leg's lag after the left fore leg, in cycles in [0, 1), from the last upward zero
    crossing of each x_i over the rows (shape (steps, n_states))."""
    times = []
    for leg in range(4):
        x = rows[:, program.state_names.index(f"x{leg + 1}")].astype(float)
        up = np.flatnonzero((x[:-1] < 0) & (x[1:] >= 0))
        times.append(up[-1] + (-x[up[-1]]) / (x[up[-1] + 1] - x[up[-1]]))
    return np.array([((t - times[0]) / PERIOD) % 1.0 for t in times])


def _close(lags: np.ndarray, wanted: tuple[float, ...], tolerance: float) -> bool:
    error = (lags - np.array(wanted) + 0.5) % 1.0 - 0.5
    return bool(np.all(np.abs(error) < tolerance))


def test_the_platform_switches_gait_both_ways_without_a_jump(platform) -> None:
    # Two runs side by side: one walks and is then told to trot; one starts at the trot end of
    # the mix and is then told to walk.
    model, program = platform.model, platform.plan.program
    (mix,) = [p for p in model.parameters if p.runtime]
    assert mix.name == MIX and (mix.low, mix.high, mix.value) == (0.0, 1.0, 0.0)
    at, target = program.state_names.index(MIX), program.state_names.index(f"{MIX}_target")
    one = 1 << program.state_fraction_bits[at]
    starts = np.repeat(np.asarray(platform.plan.initial_state, dtype=np.int64)[:, None], 2, axis=1)
    starts[[at, target], 1] = one
    settled = _run(program, starts, 4 * PERIOD)
    assert _close(_lags(settled[-2 * PERIOD:, :, 0], program), GAITS["walk"], 0.01)
    assert _close(_lags(settled[-2 * PERIOD:, :, 1], program), GAITS["trot"], 0.01)
    legs = [program.state_names.index(f"{n}{leg}") for leg in range(1, 5) for n in "xy"]
    biggest_move = np.abs(np.diff(settled[-2 * PERIOD:, legs, :], axis=0)).max()

    told = settled[-1].copy()
    told[target] = (one, 0)  # what the setter writes
    switched = _run(program, told, 6 * PERIOD)
    mixes = np.concatenate([told[None, at], switched[:, at]]).astype(float)
    moves = np.diff(mixes, axis=0)
    per_step = mix.rate / model.rhythm.loop_hz * one
    assert np.all(np.abs(moves) <= per_step + 1)
    assert np.all(moves[:, 0] >= 0) and np.all(moves[:, 1] <= 0)
    assert tuple(mixes[-1]) == (one, 0)
    travel = (mix.high - mix.low) / mix.rate * model.rhythm.loop_hz  # 500 steps
    assert np.count_nonzero(moves, axis=0) == pytest.approx([travel, travel], abs=2)
    # no leg's set-point jumps: no state moves further in one step than on the settled gaits
    steps = np.abs(np.diff(np.concatenate([settled[-1:], switched])[:, legs, :], axis=0))
    assert steps.max() <= 1.05 * biggest_move
    assert _close(_lags(switched[-2 * PERIOD:, :, 0], program), GAITS["trot"], 0.01)
    assert _close(_lags(switched[-2 * PERIOD:, :, 1], program), GAITS["walk"], 0.01)


def test_the_switching_c_is_bit_exact_through_the_setter(platform) -> None:
    outcome = check_on_host(platform, states=5_000, steps=5_000)
    report = outcome.report
    assert report.bit_exact, report.first_mismatch
    assert report.setters_checked == 1 and report.ramp_steps > 0


def test_a_gait_networks_switch_is_checked(tmp_path, capsys) -> None:
    base = (Path(model_package.__file__).parent / "library" / f"{MODEL}.toml").read_text()
    for old, new, said in (
        ('switch_to = "trot"', 'switch_to = "gallop"', "switch_to must name another gait"),
        ('switch_to = "trot"', 'switch_to = "walk"', "switch_to must name another gait"),
        ("switch_rate = 0.5\n", "", "needs switch_rate"),
        ('switch_to = "trot"', "switch_waves = -1.0", "switch_waves is for a chain"),
        # pace to trot: each pair of legs together in one, half a cycle apart in the other, or
        # the same in both (gait tables, common practice): refused, see tests/test_phase_switch.py
        ('pattern = "walk"', 'pattern = "pace"', "moves by 0 or half a turn"),
        ('pattern = "walk"', "lags = [0, 0.5, 0.75, 0.25]", "only a network with a gait or a chain"),
    ):
        path = tmp_path / "platform.toml"
        path.write_text(base.replace(old, new))
        assert main(["check", str(path)]) == 2
        assert said in capsys.readouterr().err
