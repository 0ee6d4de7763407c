"""The host board end to end: the harness built natively with the strict flags, run behind a
pty (its 100,000-step streams are in test_boards_streaming.py, beside the emulated boards'); a
seeded fault in the C must be caught; the command line's ``boards`` and ``board`` verbs."""

from __future__ import annotations

import json
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from conftest import HIP, slip_one_product

from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.verify.cli.main import main
from orbitfix.verify.link.firmware import write_firmware_sources
from orbitfix.verify.proofs.board_stream import compare_samples, stream_on_board
from orbitfix.verify.targets.board_build import build_firmware
from orbitfix.verify.targets.board_profiles import boards_folder, load_profile
from orbitfix.verify.targets.host_build import STRICT_FLAGS


@pytest.fixture(scope="module")
def host():
    return load_profile("host")


def test_the_generated_header_names_its_integer_program(tmp_path: Path) -> None:
    # The harness reports this define in HELLO; it must be the program's own fingerprint.
    built = design(load_model("vanderpol"))
    write_firmware_sources(built, tmp_path)
    header = (tmp_path / "vanderpol.h").read_text()
    assert f'#define VANDERPOL_PROGRAM_FINGERPRINT "{built.plan.program.fingerprint()}"' in header


def test_a_design_built_twice_renders_its_firmware_once(tmp_path: Path, monkeypatch) -> None:
    # Two boards, one design: the self-test's start-up path runs once; another design object,
    # even an equal one, renders afresh; and a caller that edits its copy changes no one else's.
    from orbitfix.verify.link import firmware

    runs = []
    real = firmware.check_start_path
    monkeypatch.setattr(firmware, "check_start_path", lambda built: runs.append(built) or real(built))
    built = design(load_model("vanderpol"))
    first = write_firmware_sources(built, tmp_path / "a")
    second = write_firmware_sources(built, tmp_path / "b")
    assert len(runs) == 1
    assert [p.read_text() for p in first] == [p.read_text() for p in second]
    firmware.firmware_files(built)["vanderpol.c"] = "edited"
    assert firmware.firmware_files(built)["vanderpol.c"] == (tmp_path / "a" / "vanderpol.c").read_text()
    again = design(load_model("vanderpol"))
    write_firmware_sources(again, tmp_path / "c")
    assert len(runs) == 2


def test_every_kth_state_is_compared_across_the_gaps(host) -> None:
    built = design(load_model("vanderpol"))
    report = stream_on_board(built, host, steps=10_007, every=10)
    assert report.ok and report.states_compared == 1000 and report.steps_compared == 10_000


def test_compare_names_the_first_wrong_state() -> None:
    built = design(load_model("vanderpol").with_fixed_point(word_bits=16))
    program = built.plan.program
    start = np.array(built.plan.initial_state, dtype=np.int64)
    trajectory = golden.run(program, start, 60)
    samples = {k: tuple(int(v) for v in trajectory[k]) for k in range(3, 61, 3)}
    assert compare_samples(program, start, samples) == (60, 20, None)
    del samples[30]  # a lost state is bridged by running golden over the longer gap
    assert compare_samples(program, start, samples)[:2] == (60, 19)
    samples[42] = (samples[42][0] + 1, samples[42][1])
    compared, states, mismatch = compare_samples(program, start, samples)
    assert (compared, states) == (39, 12)
    assert mismatch["step"] == 42 and mismatch["from_step"] == 39
    assert mismatch["got"][0] == mismatch["expected"][0] + 1


def test_a_seeded_fault_in_the_c_is_caught(host, tmp_path: Path) -> None:
    # The proof must be able to fail: one product of the step is shifted one place too few (a
    # scaling slip). A constant off by one LSB is not always enough: the 16-bit RK4 step's later
    # shifts can absorb it, which the comparison rightly calls bit-exact.
    built = design(load_model("vanderpol").with_fixed_point(word_bits=16))
    sources = write_firmware_sources(built, tmp_path / "src")
    slip_one_product(tmp_path / "src" / "vanderpol.c")
    image = build_firmware(host, sources, [tmp_path / "src"], tmp_path / "build")
    report = stream_on_board(built, host, steps=5000, image=image)
    assert not report.bit_exact and not report.ok
    assert report.first_mismatch is not None and report.failure is None
    assert report.steps_compared == report.first_mismatch["from_step"]
    assert report.selftest not in (0, None)  # the firmware's own self-test sees the slip too


def test_the_self_test_runs_on_the_board_and_passes(host) -> None:
    built = design(load_model("vanderpol"))
    report = stream_on_board(built, host, steps=1000)
    assert report.selftest == 0 and report.ok
    assert report.to_json()["selftest"] == 0



@pytest.mark.parametrize("cc", ["gcc", "clang", "avr-gcc"])
@pytest.mark.parametrize("word_bits", [16, 32])
def test_the_harness_compiles_warning_free(tmp_path: Path, cc: str, word_bits: int) -> None:
    # avr-gcc: C's int is 16 bits there, the case the harness's byte handling is written for.
    if shutil.which(cc) is None:
        pytest.skip(f"{cc} is not installed (Debian: {'gcc-avr avr-libc' if cc == 'avr-gcc' else cc})")
    path = tmp_path / "hip.toml"
    path.write_text(HIP)
    built = design(load_model(str(path)).with_fixed_point(word_bits=word_bits))
    sources = write_firmware_sources(built, tmp_path / "src")
    target = ["-mmcu=atmega328p"] if cc == "avr-gcc" else []
    for source in sources:
        done = subprocess.run([cc, *STRICT_FLAGS, "-Wundef", "-Wshadow", "-O2", *target,
                               f"-I{boards_folder() / 'common'}", f"-I{tmp_path / 'src'}", "-c",
                               str(source), "-o", str(tmp_path / (source.stem + ".o"))],
                              capture_output=True, text=True, check=False)
        assert done.returncode == 0 and not done.stderr, done.stderr


def test_boards_lists_the_host_board(capsys) -> None:
    assert main(["boards", "--json"]) == 0
    answer = json.loads(capsys.readouterr().out)
    assert next(iter(answer)) == "ok" and answer["ok"] is True
    entries = {e["name"]: e for e in answer["boards"]}
    assert entries["host"]["kind"] == "host" and entries["host"]["tools_installed"] is True
    assert {"name", "cpu", "kind", "tools_installed"} <= set(entries["host"])
    assert main(["boards"]) == 0
    assert "host" in capsys.readouterr().out


def test_board_verb_reports_in_json(capsys, tmp_path: Path) -> None:
    saved = tmp_path / "run.json"
    code = main(["board", "vanderpol", "--board", "host", "--steps", "3000", "--word", "16",
                 "--json", "--save", str(saved)])
    result = json.loads(capsys.readouterr().out)
    assert code == 0 and result["ok"] and result["bit_exact"] and result["board"] == "host"
    assert result["steps_compared"] == 3000 and result["first_mismatch"] is None
    assert {"received", "corrupt", "dropped", "duplicated", "resent"} <= set(result["frames"])
    assert {"per_step", "unit", "method"} <= set(result["cost"])
    assert {"text", "data", "bss", "stack"} <= set(result["size"])
    assert result["throughput"]["samples_per_second"] > 0
    record = json.loads(saved.read_text())
    assert len(record["received_states"]) == 3000 and record["received_states"][0][0] == 1


def test_board_verb_fails_with_exit_1_on_a_cut_link(capsys) -> None:
    code = main(["board", "vanderpol", "--board", "host", "--steps", "20000", "--faults",
                 "cut=20000", "--timeout", "0.5"])
    out = capsys.readouterr().out
    assert code == 1
    assert "link failed" in out and "NOT complete" in out
    saved = Path(out.split("saved in ")[1].split()[0])
    record = json.loads(saved.read_text())
    assert record["ok"] is False and record["link_failure"]
    assert len(record["received_states"]) == record["states_compared"] > 0


@pytest.mark.parametrize("argv", [
    ["board", "vanderpol", "--board", "no-such-board"],
    ["board", "vanderpol", "--board", "host", "--faults", "flip=7"],
    ["board", "vanderpol", "--board", "host", "--steps", "0"],
    ["board", "no-such-model", "--board", "host"],
    ["board", "vanderpol", "--board", "host", "--timeout", "0"],
    ["board", "vanderpol", "--board", "host", "--port", "/dev/no-such-port"],
])
def test_board_verb_refuses_bad_input_with_exit_2(capsys, argv) -> None:
    try:
        code = main(argv)
    except SystemExit as exit_:  # argparse's own refusals
        code = exit_.code
    err = capsys.readouterr().err
    assert code == 2 and "Traceback" not in err and err.strip()
