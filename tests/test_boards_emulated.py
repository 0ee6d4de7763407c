"""Every emulated board, end to end over its UART socket with the echo firmware: bytes go there
and back unchanged (also a burst larger than the receive queue while the firmware is busy), the cost
counter counts a loop of known length exactly, and the run ends with the firmware's exit code.

Skips only when the board's tools are missing on a developer's machine; with CI set it must run.
"""

from __future__ import annotations

import dataclasses
import os
import random
import shutil
import time
from pathlib import Path

import pytest
import serial

from orbitfix.gen.errors import InputError
from orbitfix.verify.targets import emulators
from orbitfix.verify.targets.board_build import FirmwareImage, build_firmware
from orbitfix.verify.targets.board_profiles import all_profiles, load_profile
from orbitfix.verify.targets.board_run import running

FIRMWARE = Path(__file__).parent / "firmware"
EMULATED = [p.name for p in all_profiles() if p.kind == "emulated"]


def tools_or_skip(name: str, extra: tuple[str, ...] = ()):
    profile = load_profile(name)
    missing = profile.missing_tools() + [tool for tool in extra if shutil.which(tool) is None]
    if missing and not os.environ.get("CI"):
        pytest.skip(f"{', '.join(missing)} not installed ({profile.install_hint()})")
    if any("{simavr_link}" in word for word in profile.start) and not os.environ.get("CI"):
        try:
            emulators.simavr_link()
        except emulators.EmulatorError as error:
            pytest.skip(str(error).splitlines()[0])
    return profile


def _handshake(link: serial.Serial, name: str) -> None:
    """Ask for the announcement: pyserial's socket:// open() empties its input buffer, so what a
    fast board sends on connection (simavr, at once) can be gone before the host reads; the host
    drops what came unasked and asks."""
    time.sleep(0.5)
    link.reset_input_buffer()
    link.write(b"H")
    assert link.readline() == f"orbitfix echo {name}\n".encode()


@pytest.mark.parametrize("name", EMULATED)
def test_bytes_go_there_and_back(name: str, tmp_path: Path) -> None:
    profile = tools_or_skip(name)
    image = build_firmware(profile, [FIRMWARE / "echo.c"], [], tmp_path)
    chunks = [bytes([0, 255, 10, 13]), bytes(range(200)), random.Random(7).randbytes(250)]
    with running(profile, image) as url:
        link = serial.serial_for_url(url, timeout=10)
        try:
            _handshake(link, name)
            for chunk in chunks:
                link.write(b"E" + bytes([len(chunk)]) + chunk)
                assert link.read(len(chunk)) == chunk
            # Everything at once while the firmware is busy: more than its receive queue holds
            # arrives before it reads again, so the UART must hold bytes back, not lose them.
            burst = random.Random(8).randbytes(250)
            link.write(b"P" + b"E" + bytes([len(burst)]) + burst + b"E" + bytes([len(burst)]) + burst)
            assert link.read(2 * len(burst)) == burst + burst
        finally:
            link.close()


# A loop of two instructions per turn (see tests/firmware/echo.c): 1000 more turns cost exactly
#  - on Arm under QEMU -icount: 2000 more instructions (SUBS and BNE are one instruction each;
#    common practice);
#  - on the AVR under simavr: 4000 more cycles (AVR instruction set manual, from memory: SBIW takes
#    2 cycles, BRNE 2 when it branches).
LOOP_COST = {"instructions": 2000, "cycles": 4000}


@pytest.mark.parametrize("name", EMULATED)
def test_cost_of_a_known_loop_and_the_exit_code(name: str, tmp_path: Path) -> None:
    profile = tools_or_skip(name)
    image = build_firmware(profile, [FIRMWARE / "echo.c"], [], tmp_path)
    with emulators.started(profile, image.path) as emulator:
        link = serial.serial_for_url(emulator.url, timeout=10)
        _handshake(link, name)
        link.write(b"C")
        reply = link.read(8)
        short, long = int.from_bytes(reply[:4], "little"), int.from_bytes(reply[4:], "little")
        link.write(b"Q\x05")
        link.close()
        code = emulator.stop()
    per_thousand = LOOP_COST[profile.cost_unit]
    assert long - short == per_thousand
    assert per_thousand <= short <= per_thousand + 20  # the loop plus a call, a move and a return
    assert code == 5


def test_the_stm32f4_board_glue_on_an_emulated_stm32f405(tmp_path: Path) -> None:
    # The NUCLEO-F401RE's USART2 driver cannot be run here on the part, but QEMU's netduinoplus2
    # (STM32F405) has the same USART2 registers and IRQ 38, and the same core: echo, a burst larger
    # than the receive queue, the cost counter (SysTick at 168 MHz under -icount shift=10: 172.032
    # ticks per instruction) and the exit code, with the real profile's glue and flags.
    real = tools_or_skip("nucleo-f401re", ("qemu-system-arm",))
    kept = [p for p in real.glue if p.name != "finish_halt.c"]
    glue = (*kept, real.glue[0].parent / "finish_semihosting.c")
    kept_flags = [f for f in real.flags if "COST_PER_TICK" not in f]
    flags = (*kept_flags, "-DCOST_PER_TICK_NUM=125u", "-DCOST_PER_TICK_DEN=21504u")
    start = ("qemu-system-arm", "-M", "netduinoplus2", "-nographic", "-monitor", "none",
             "-icount", "shift=10", "-semihosting-config", "enable=on,target=native", "-serial", "null",
             "-serial", "tcp:127.0.0.1:{port},server=on,wait=on,nodelay=on", "-kernel", "{image}")
    profile = dataclasses.replace(real, name="stm32f405-qemu", kind="emulated", link_kind="socket",
                                  glue=glue, flags=flags, start=start, needs=("qemu-system-arm",))
    image = build_firmware(profile, [FIRMWARE / "echo.c"], [], tmp_path)
    burst = random.Random(9).randbytes(250)
    with emulators.started(profile, image.path) as emulator:
        link = serial.serial_for_url(emulator.url, timeout=10)
        _handshake(link, profile.name)
        link.write(b"PE" + bytes([len(burst)]) + burst)
        assert link.read(len(burst)) == burst
        link.write(b"C")
        reply = link.read(8)
        short, long = int.from_bytes(reply[:4], "little"), int.from_bytes(reply[4:], "little")
        link.write(b"Q\x06")
        link.close()
        code = emulator.stop()
    # QEMU's 168 MHz clock is kept as a rounded period, so the count is near, not exactly, 2000
    assert abs((long - short) - 2000) <= 20
    assert code == 6


def test_an_emulator_that_will_not_start_says_what_it_printed(tmp_path: Path) -> None:
    profile = load_profile("mps2-an385")
    broken = dataclasses.replace(profile, start=("sh", "-c", "echo no such machine; exit 3"), needs=())
    expected = r"(?s)ended \(exit code 3\) before listening.*no such machine"
    with pytest.raises(emulators.EmulatorError, match=expected):
        emulators.start(broken, tmp_path / "missing.elf", ready_seconds=5)


def test_a_real_board_needs_a_port() -> None:
    real = next(p for p in all_profiles() if p.kind == "real")
    image = FirmwareImage(path=Path("fw.elf"), size={}, stack_bytes=None)
    with pytest.raises(InputError, match=r"flash fw\.elf with your own tool, then give its serial port"):
        with running(real, image):
            pass
    with running(real, image, port="loop://") as url:
        assert url == "loop://"
