"""Board profiles are read into one shape, and a broken profile is refused with the key at fault."""

from __future__ import annotations

from pathlib import Path

import pytest

from orbitfix.gen.errors import InputError
from orbitfix.verify.targets.board_profiles import load_profile

GOOD = """
name = "bench-m3"
description = "a profile written for this test"
cpu = "cortex-m3"
kind = "emulated"
int_bits = 32
[build]
cc = "arm-none-eabi-gcc"
flags = ["-mcpu=cortex-m3"]
glue = ["cortex_m/startup.c"]
[link]
kind = "socket"
[start]
command = ["qemu-system-arm", "-kernel", "{image}"]
[cost]
unit = "instructions"
[tools]
needs = ["a-program-that-is-not-installed-anywhere"]
debian = ["some-package"]
"""


def _write(tmp_path: Path, text: str) -> str:
    path = tmp_path / "bench-m3.toml"
    path.write_text(text)
    return str(path)


def test_a_profile_reads_into_paths_beside_it(tmp_path: Path) -> None:
    profile = load_profile(_write(tmp_path, GOOD))
    assert profile.cpu == "cortex-m3" and profile.int_bits == 32 and profile.baud == 115200
    assert profile.glue == (tmp_path / "cortex_m" / "startup.c",)
    assert profile.include[0] == tmp_path / "common"
    assert profile.missing_tools() == ["a-program-that-is-not-installed-anywhere"]
    assert profile.install_hint() == "sudo apt-get install some-package"


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (("int_bits = 32", "int_bits = 8"), "int_bits"),
        (('kind = "emulated"', 'kind = "virtual"'), "accepted: host, emulated, real"),
        (('[link]\nkind = "socket"', '[link]\nkind = "radio"'), r"\[link\] kind"),
        (("[cost]\n", "[cost]\nspeed = 3\n"), r"unknown keys \['speed'\] in \[cost\]"),
        (('[start]\ncommand = ["qemu-system-arm", "-kernel", "{image}"]', ""), "command is needed"),
        (("name =", "nmae ="), "unknown keys"),
    ],
)
def test_a_broken_profile_names_the_key(tmp_path: Path, change: tuple[str, str], message: str) -> None:
    with pytest.raises(InputError, match=message):
        load_profile(_write(tmp_path, GOOD.replace(*change)))


def test_an_unknown_board_lists_the_known_ones() -> None:
    with pytest.raises(InputError, match="unknown board 'no-such-board'; known boards"):
        load_profile("no-such-board")
