"""A runnable image for any board profile: the one function the link and proof code call."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from orbitfix.gen.errors import ToolchainError
from orbitfix.verify.targets.board_profiles import BoardProfile
from orbitfix.verify.targets.cross_build import cross_build


@dataclass(frozen=True)
class FirmwareImage:
    """The built image, its text/data/bss in bytes, and its worst stack when it is known."""

    path: Path
    size: dict[str, int]
    stack_bytes: int | None


def build_firmware(profile: BoardProfile, sources: list[Path], include_dirs: list[Path], folder: Path,
                   optimisation: str = "-O2") -> FirmwareImage:
    """Build ``sources`` with the board's glue: cross compilers for emulated and real boards."""
    if profile.kind != "host":
        built = cross_build(profile, sources, include_dirs, folder, optimisation)
        return FirmwareImage(path=built.path, size=built.size, stack_bytes=built.stack_bytes)
    raise ToolchainError(f"board {profile.name!r}: host boards are not built by this function")
