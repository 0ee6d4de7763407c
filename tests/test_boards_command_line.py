"""``orbitfix board`` on an emulated board, through the command line as a user runs it: the JSON's
fields, every fault kind of ``--faults`` detected and counted, firmware for another model refused,
a wrong step caught, and the exit codes (0 bit-exact, 1 not bit-exact or the link failed, 2 bad
input, never a traceback).

Skips only when the board's tools are missing on a developer's machine; with CI set it must run.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from conftest import slip_one_product
from test_boards_emulated import tools_or_skip

from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.verify.cli.main import main
from orbitfix.verify.link.firmware import write_firmware_sources
from orbitfix.verify.proofs.board_stream import build_for_board, link_throughput
from orbitfix.verify.targets.board_build import build_firmware
from orbitfix.verify.targets.board_profiles import load_profile
from orbitfix.verify.targets.board_run import running

BOARD = "mps2-an385"
VDP16 = ["vanderpol", "--word", "16"]


def _run(capsys, argv: list[str]) -> tuple[int, str, str]:
    code = main(argv)
    out, err = capsys.readouterr()
    assert "Traceback" not in err
    return code, out, err


@pytest.mark.slow
def test_board_json_has_every_field_on_an_emulated_board(capsys) -> None:
    tools_or_skip(BOARD)
    code, out, _ = _run(capsys, ["board", *VDP16, "--board", BOARD, "--steps", "3000", "--json"])
    result = json.loads(out)
    assert code == 0 and next(iter(result)) == "ok" and result["ok"] is True
    assert result["board"] == BOARD and result["kind"] == "emulated"
    assert result["bit_exact"] is True and result["steps_compared"] == 3000
    assert result["first_mismatch"] is None
    frames = result["frames"]
    assert {"received", "corrupt", "dropped", "duplicated", "resent"} <= set(frames)
    assert frames["received"] > 0 and frames["corrupt"] == frames["dropped"] == frames["resent"] == 0
    cost = result["cost"]
    assert cost["unit"] == "instructions" and cost["per_step"] > 0 and "icount" in cost["method"]
    size = result["size"]
    assert set(size) == {"text", "data", "bss", "stack"}
    assert all(isinstance(size[k], int) for k in size) and size["text"] > 0 and size["stack"] > 0
    throughput = result["throughput"]
    assert throughput["samples_per_second"] > 0
    # an emulated UART is not paced by the profile's baud: no fraction of it, and why
    assert throughput["fraction_of_link"] is None and "emulat" in throughput["fraction_of_link_reason"]


@pytest.mark.slow
def test_board_text_says_an_emulator_counts_instructions_not_time(capsys) -> None:
    tools_or_skip(BOARD)
    code, out, _ = _run(capsys, ["board", *VDP16, "--board", BOARD, "--steps", "2000"])
    assert code == 0
    assert "an emulator counts instructions, not time" in out
    assert "no fraction of the line rate" in out and "% of the line rate" not in out
    assert "result: bit-exact on the board" in out and "Caution" in out


def test_fraction_of_the_line_rate_only_for_a_real_uart() -> None:
    # a real UART sends 10 bits a byte (start, 8 data, stop; common practice): 115,200 baud is
    # 11,520 bytes a second, so 5,760 bytes a second is half of it
    real = load_profile("nucleo-f401re")
    assert real.baud == 115200
    assert link_throughput(real, 100, 5760, 1.0)["fraction_of_link"] == pytest.approx(0.5)
    for name in ("mps2-an385", "host"):
        figures = link_throughput(load_profile(name), 100, 5760, 1.0)
        assert figures["fraction_of_link"] is None and figures["fraction_of_link_reason"]
        assert figures["samples_per_second"] == 100 and figures["bytes_per_second"] == 5760


# Each kind of fault, given as --faults, with the counter that must show it and how that counter
# relates to the count injected ("some": at least one; "all": exactly as many). A delay's chance
# is per read, and on an emulator's socket the session reads about a byte at a time (pyserial's
# socket in_waiting says only 0 or 1), so its rate is per byte here: 0.02 would pause the line
# every fifty bytes and no run could finish.
FAULT_KINDS = [
    ("flip=3e-4,seed=2", "flip", "corrupt", "some"),
    ("drop=3e-4,seed=3", "drop", "corrupt", "some"),
    ("dup=3e-4,seed=4", "dup", "corrupt", "some"),
    ("repeat=0.03,seed=5", "repeat", "duplicated", "all"),
    ("swap=0.03,seed=6", "swap", "out_of_order", "all"),
    ("delay=5e-5,pause=0.8,seed=7", "delay", "timeouts", "some"),
]
FAULT_STEPS = "20000"


@pytest.mark.slow
@pytest.mark.parametrize(("spec", "kind", "counter", "how"), FAULT_KINDS,
                         ids=[kind for _, kind, _, _ in FAULT_KINDS])
def test_each_fault_kind_from_the_command_line_is_detected_and_counted(capsys, spec, kind, counter,
                                                                        how) -> None:
    tools_or_skip(BOARD)
    code, out, _ = _run(capsys, ["board", *VDP16, "--board", BOARD, "--steps", FAULT_STEPS,
                                 "--faults", spec, "--timeout", "0.5", "--json"])
    result = json.loads(out)
    injected = result["faults"]["injected"][kind]
    assert injected > 0
    seen = result["frames"][counter]
    assert seen == injected if how == "all" else seen > 0, (result["frames"], result["faults"])
    # what was lost was asked for again: in the end every state arrived and was compared
    assert code == 0 and result["ok"] and result["bit_exact"], result
    assert result["steps_compared"] == int(FAULT_STEPS) and result["missing_states"] == 0
    if counter == "corrupt":
        assert result["frames"]["resent"] > 0
    if counter == "timeouts":
        assert result["frames"]["resent"] + result["frames"]["retries"] > 0


@pytest.mark.slow
def test_a_cut_link_from_the_command_line_fails_with_exit_1_and_keeps_what_arrived(capsys) -> None:
    tools_or_skip(BOARD)
    code, out, _ = _run(capsys, ["board", *VDP16, "--board", BOARD, "--steps", FAULT_STEPS,
                                 "--faults", "cut=30000", "--timeout", "0.5", "--json"])
    result = json.loads(out)
    assert code == 1 and result["ok"] is False
    assert result["faults"]["injected"]["cut"] == 1 and "cut" in result["link_failure"]
    assert result["bit_exact"] is True  # what did arrive is the golden model's
    assert 0 < result["steps_compared"] < int(FAULT_STEPS)
    saved = json.loads(Path(result["saved"]).read_text())
    assert len(saved["received_states"]) == saved["states_compared"] == result["states_compared"]


@pytest.mark.slow
def test_firmware_for_another_model_is_refused_with_exit_2(capsys) -> None:
    profile = tools_or_skip(BOARD)
    image = build_for_board(design(load_model("vanderpol").with_fixed_point(word_bits=16)), profile)
    with running(profile, image) as url:
        # the board runs the 16-bit program; the command asks for the 32-bit one
        code, out, err = _run(capsys, ["board", "vanderpol", "--board", BOARD, "--port", url,
                                       "--json"])
    result = json.loads(out)
    assert code == 2 and result["ok"] is False
    assert "another model" in result["error"] and "another model" in err
    assert "bit_exact" not in result  # nothing was compared


@pytest.mark.slow
def test_a_wrong_step_on_the_board_fails_with_exit_1(capsys, tmp_path: Path) -> None:
    # The proof must be able to fail on an emulated board too: one product of the step is shifted
    # one place too few (a scaling slip), the fingerprint left as it was.
    profile = tools_or_skip(BOARD)
    built = design(load_model("vanderpol").with_fixed_point(word_bits=16))
    sources = write_firmware_sources(built, tmp_path / "src")
    slip_one_product(tmp_path / "src" / "vanderpol.c")
    image = build_firmware(profile, sources, [tmp_path / "src"], tmp_path / "build")
    with running(profile, image) as url:
        code, out, _ = _run(capsys, ["board", *VDP16, "--board", BOARD, "--port", url,
                                     "--steps", "5000", "--json"])
    result = json.loads(out)
    assert code == 1 and result["ok"] is False and result["bit_exact"] is False
    assert result["link_failure"] is None
    mismatch = result["first_mismatch"]
    assert mismatch["got"] != mismatch["expected"]
    assert result["steps_compared"] == mismatch["from_step"] < mismatch["step"]


MISSING_TOOLS = """
name = "bench-m3"
description = "an emulated board whose emulator is not installed"
cpu = "cortex-m3"
kind = "emulated"
int_bits = 32
[build]
cc = "arm-none-eabi-gcc"
glue = ["cortex_m/startup.c"]
[link]
kind = "socket"
[start]
command = ["orbitfix-test-emulator-not-installed", "{image}"]
[tools]
needs = ["orbitfix-test-emulator-not-installed"]
debian = ["orbitfix-test-package"]
"""


def _refused(capsys, argv: list[str]) -> str:
    code, out, err = _run(capsys, argv)
    assert code == 2 and err.strip(), (code, out, err)
    return err


def test_an_unknown_board_is_refused_with_the_known_ones(capsys) -> None:
    err = _refused(capsys, ["board", "vanderpol", "--board", "no-such-board"])
    assert "unknown board 'no-such-board'" in err and "mps2-an385" in err


def test_a_real_board_without_a_port_is_refused_with_its_image_built(capsys) -> None:
    profile = load_profile("nucleo-g071rb")
    err = _refused(capsys, ["board", "vanderpol", "--board", profile.name])
    if not profile.tools_installed():
        assert "sudo apt-get install" in err  # the cross compiler is named instead
        return
    assert "real board" in err and "--port" in err and "flash one of these with your own tool" in err
    code, out, _ = _run(capsys, ["board", "vanderpol", "--board", profile.name, "--json"])
    result = json.loads(out)
    assert code == 2 and result["ok"] is False
    images = [Path(f) for f in result["image"]]
    assert [f.suffix for f in images] == [".elf", ".bin", ".hex"] and all(f.is_file() for f in images)
    assert str(images[0]) in err and result["size"]["text"] > 0


def test_missing_tools_are_named_with_what_to_install(capsys, tmp_path: Path) -> None:
    profile = tmp_path / "bench-m3.toml"
    profile.write_text(MISSING_TOOLS)
    err = _refused(capsys, ["board", "vanderpol", "--board", str(profile)])
    assert "needs orbitfix-test-emulator-not-installed" in err
    assert "sudo apt-get install orbitfix-test-package" in err
    code, out, _ = _run(capsys, ["board", "vanderpol", "--board", str(profile), "--json"])
    assert code == 2 and json.loads(out)["ok"] is False


def test_firmware_too_big_for_the_flash_says_so(capsys) -> None:
    # The eight-joint phase chain at 32 bits does not fit the ATmega328P's 32 KiB of flash (the
    # linker's "region overflowed" report): exit 2 with what does not fit, not the raw linker
    # output. (The trot fits since its oscillators run as loops.)
    tools_or_skip("atmega328p")
    assert main(["board", "phase_chain", "--board", "atmega328p", "--word", "32", "--steps", "10"]) == 2
    err = capsys.readouterr().err
    assert "does not fit the board's flash" in err and "bytes too many" in err
    assert "Traceback" not in err and "collect2" not in err
