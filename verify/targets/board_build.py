"""Building firmware for a board profile: the harness, the generated step and the board's glue,
compiled with the strict warning flags into one image, with its size and stack use.

The host profile is built natively here; emulated and real boards by their cross compilers
(:mod:`.cross_build`), with the same result type.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

from orbitfix.verify.targets.board_profiles import BoardProfile
from orbitfix.verify.targets.cross_build import cross_build
from orbitfix.verify.targets.host_build import STRICT_FLAGS, CompileError, compiler


@dataclass(frozen=True)
class FirmwareImage:
    """A built image: where it is, its sections in bytes, and the stack it may use (an upper bound
    from the compiler's per-function stack report, None where unknown)."""

    path: Path
    size: dict[str, int]
    stack_bytes: int | None


def build_firmware(profile: BoardProfile, sources: list[Path], include_dirs: list[Path], folder: Path,
                   optimisation: str = "-O2") -> FirmwareImage:
    """Compile ``sources`` with the profile's glue into ``folder`` and return the image."""
    if profile.kind != "host":
        built = cross_build(profile, sources, include_dirs, folder, optimisation)
        return FirmwareImage(path=built.path, size=built.size, stack_bytes=built.stack_bytes)
    cc = profile.cc if shutil.which(profile.cc) else compiler()
    folder.mkdir(parents=True, exist_ok=True)
    flags = [*STRICT_FLAGS, optimisation, *profile.flags, f'-DBOARD_NAME="{profile.name}"',
             "-fstack-usage"]
    includes = [f"-I{d}" for d in [*include_dirs, *profile.include]]
    objects = []
    for source in [*sources, *profile.glue]:
        target = folder / (source.stem + ".o")
        _run([cc, *flags, *includes, "-c", str(source), "-o", str(target)], source.name)
        objects.append(str(target))
    image = folder / "firmware"
    _run([cc, optimisation, *objects, *profile.link_flags, "-o", str(image)], "the link step")
    return FirmwareImage(path=image, size=_sizes(profile, image), stack_bytes=_stack(folder))


def _run(command: list[str], what: str) -> None:
    done = subprocess.run(command, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise CompileError(f"{what} does not build warning-free:\n{' '.join(command)}\n"
                           f"{done.stderr.strip()}")


def _sizes(profile: BoardProfile, image: Path) -> dict[str, int]:
    """text, data and bss from the size tool (Berkeley format); empty if there is none."""
    tool = profile.size_tool or "size"
    if shutil.which(tool) is None:
        return {}
    done = subprocess.run([tool, str(image)], capture_output=True, text=True, check=False)
    lines = done.stdout.splitlines()
    if done.returncode != 0 or len(lines) < 2:
        return {}
    text, data, bss = (int(v) for v in lines[1].split()[:3])
    return {"text": text, "data": data, "bss": bss}


def _stack(folder: Path) -> int | None:
    """The deepest frame of each compiled file, summed: main calls into the harness, the harness
    into the step, so no call chain needs more (no recursion, and the reports are static). The
    traced step is left out: only verification tools call it, never the firmware."""
    total, found = 0, False
    for report in folder.glob("*.su"):
        frames = [int(m.group(2)) for m in re.finditer(r":(\w+)\t(\d+)\t\w+", report.read_text())
                  if not m.group(1).endswith("_step_traced")]
        if frames:
            total += max(frames)
            found = True
    return total if found else None
