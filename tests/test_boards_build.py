"""Cross builds for every board profile: strict warnings, a vector table where the core looks for
it, and size and stack figures that follow the code.

Skips only when a cross compiler is missing on a developer's machine; with CI set it must run.
"""

from __future__ import annotations

import os
import struct
import subprocess
from pathlib import Path

import pytest

from orbitfix.verify.targets.board_build import build_firmware
from orbitfix.verify.targets.board_profiles import all_profiles, load_profile
from orbitfix.verify.targets.cross_build import cross_build
from orbitfix.verify.targets.host_build import CompileError

FIRMWARE = Path(__file__).parent / "firmware"
CROSS = [p.name for p in all_profiles() if p.kind != "host"]
CORTEX_M = [p.name for p in all_profiles() if p.cpu.startswith("cortex-m")]


def _compiler_or_skip(name: str):
    profile = load_profile(name)
    missing = [tool for tool in (profile.cc, profile.size_tool)
               if tool and tool in profile.missing_tools()]
    if missing and not os.environ.get("CI"):
        pytest.skip(f"{', '.join(missing)} not installed ({profile.install_hint()})")
    return profile


@pytest.mark.parametrize("name", CROSS)
def test_echo_firmware_builds_under_strict_warnings_and_fits(name: str, tmp_path: Path) -> None:
    profile = _compiler_or_skip(name)
    image = build_firmware(profile, [FIRMWARE / "echo.c"], [], tmp_path)
    assert image.path.is_file()
    assert image.size["text"] > 500
    assert image.size["text"] + image.size["data"] <= profile.flash_bytes
    assert image.size["data"] + image.size["bss"] <= profile.ram_bytes
    assert image.stack_bytes is not None and 0 < image.stack_bytes < 1024


@pytest.mark.parametrize("name", [p.name for p in all_profiles() if p.kind == "real"])
def test_a_real_board_gets_images_for_the_users_flashing_tool(name: str, tmp_path: Path) -> None:
    profile = _compiler_or_skip(name)
    built = cross_build(profile, [FIRMWARE / "echo.c"], [], tmp_path)
    binary, hex_file = built.flashable
    # the raw image holds the flash contents from the vector table on: text plus initialised data
    assert binary.stat().st_size == built.size["text"] + built.size["data"]
    # Intel HEX: every record starts with ':' and the file ends with the end-of-file record
    lines = hex_file.read_text().split()
    assert all(line.startswith(":") for line in lines) and lines[-1] == ":00000001FF"


@pytest.mark.parametrize("name", CORTEX_M)
def test_vector_table_opens_the_image(name: str, tmp_path: Path) -> None:
    # Armv7-M / Armv6-M architecture reference manuals: at reset the core loads SP from the first
    # word of the vector table and the PC from the second, whose bit 0 must be 1 (Thumb state).
    profile = _compiler_or_skip(name)
    image = build_firmware(profile, [FIRMWARE / "echo.c"], [], tmp_path)
    raw = tmp_path / "image.bin"
    subprocess.run(["arm-none-eabi-objcopy", "-O", "binary", str(image.path), str(raw)], check=True)
    stack_top, reset = struct.unpack("<II", raw.read_bytes()[:8])
    assert stack_top == 0x20000000 + profile.ram_bytes
    assert reset & 1 == 1
    listing = subprocess.run(["arm-none-eabi-nm", str(image.path)], capture_output=True, text=True,
                             check=True).stdout
    symbols = {line.split()[-1]: int(line.split()[0], 16) for line in listing.splitlines()
               if len(line.split()) == 3}
    assert reset & ~1 == symbols["reset_handler"]


def test_a_warning_fails_the_build_and_names_the_file(tmp_path: Path) -> None:
    profile = _compiler_or_skip("mps2-an385")
    bad = tmp_path / "narrowing.c"
    bad.write_text("#include <stdint.h>\nuint8_t narrow(uint32_t x);\n"
                   "uint8_t narrow(uint32_t x) { return x; }\n")  # -Wconversion
    with pytest.raises(CompileError, match=r"narrowing\.c failed under the strict flags"):
        cross_build(profile, [FIRMWARE / "echo.c", bad], [], tmp_path / "out")


@pytest.mark.parametrize(("name", "interrupt_entry"), [("mps2-an385", 32), ("atmega328p", 2)])
def test_stack_figure_follows_a_deeper_frame(name: str, interrupt_entry: int, tmp_path: Path) -> None:
    # The same firmware with one more function on main's path that keeps a 512-byte array: its
    # frame holds the array, and the whole-image figure holds that frame plus what the core pushes
    # on an interrupt (Armv7-M: eight words, architecture reference manual; AVR: the two-byte
    # return address, ATmega328P datasheet, from memory). The Arm figure comes from gcc's call
    # graph, the AVR one from the image's disassembly.
    profile = _compiler_or_skip(name)
    deep = tmp_path / "deep.c"
    deep.write_text(
        "#include <stdint.h>\n#include \"board.h\"\n"
        "__attribute__((noinline)) static uint32_t deep(void) {\n"
        "    volatile uint8_t block[512];\n"
        "    for (uint32_t i = 0; i < 512u; ++i) { block[i] = (uint8_t)i; }\n"
        "    return block[7];\n}\n"
        "int main(void) { board_init(); board_finish((int)deep()); return 0; }\n")
    shallow = tmp_path / "shallow.c"
    shallow.write_text("#include \"board.h\"\nint main(void) { board_init(); board_finish(0); return 0; }\n")
    small = cross_build(profile, [shallow], [], tmp_path / "small").stack_bytes
    built = cross_build(profile, [deep], [], tmp_path / "large")
    assert small is not None and built.stack_bytes is not None
    assert built.frames["deep"] >= 512
    assert built.stack_bytes >= built.frames["deep"] + interrupt_entry
    assert built.stack_bytes - small > 400


def test_the_shipped_boards() -> None:
    # What the issue asks to ship: three emulated Cortex-M (M0, M3, M4F), an 8-bit AVR whose int
    # is 16 bits, and real boards with a Cortex-M0+ and a Cortex-M4F that the user flashes.
    boards = {p.name: p for p in all_profiles() if p.kind != "host"}
    emulated = {p.cpu for p in boards.values() if p.kind == "emulated"}
    assert {"cortex-m0", "cortex-m3", "cortex-m4f", "avr"} <= emulated
    assert {p.cpu for p in boards.values() if p.kind == "real"} >= {"cortex-m0plus", "cortex-m4f"}
    assert boards["atmega328p"].int_bits == 16
    for profile in boards.values():
        assert all(path.is_file() for path in profile.glue), profile.name
        assert (profile.kind == "real") == (profile.link_kind == "port") == (not profile.start)
        assert profile.cost_unit == ("cycles" if profile.kind == "real" or profile.cpu == "avr"
                                     else "instructions")
