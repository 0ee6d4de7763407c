"""Board profiles: one small TOML file per board under ``boards/``, read into one shape.

A profile says what the board is (CPU, word size of C's ``int``, memory), how firmware for it is
built (compiler, flags, glue sources relative to ``boards/``), how it is reached (a pty for the host
board, a local socket for an emulator, a real port), how it is started, and what its cost counter
counts. Keys:

    name, description, cpu, kind ("host" | "emulated" | "real"), int_bits, flash_bytes, ram_bytes
    [build]  cc, flags, link_flags, glue, include, linker_script, size_tool
    [link]   kind ("pty" | "socket" | "port"), baud
    [start]  command (list; placeholders {image}, {port} and, for the AVR bridge, {simavr_link});
             absent for real boards
    [cost]   unit ("instructions" | "cycles" | "nanoseconds"), method (one line: how it is counted)
    [tools]  needs (programs on PATH), debian (packages that provide them)
"""

from __future__ import annotations

import importlib
import shutil
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from orbitfix.gen.errors import InputError

KINDS = ("host", "emulated", "real")
LINK_KINDS = ("pty", "socket", "port")
COST_UNITS = ("instructions", "cycles", "nanoseconds")


def boards_folder() -> Path:
    """The installed board folder (package data of ``orbitfix.boards``, the top-level ``boards/``)."""
    package = importlib.import_module("orbitfix.boards")
    return Path(next(iter(package.__path__)))


@dataclass(frozen=True)
class BoardProfile:
    """One board, as its profile file describes it."""

    name: str
    description: str
    cpu: str
    kind: str
    int_bits: int
    flash_bytes: int | None
    ram_bytes: int | None
    cc: str
    flags: tuple[str, ...]
    link_flags: tuple[str, ...]
    glue: tuple[Path, ...]
    include: tuple[Path, ...]
    linker_script: Path | None
    size_tool: str | None
    link_kind: str
    baud: int
    start: tuple[str, ...] = ()
    cost_unit: str = "instructions"
    cost_method: str = ""
    needs: tuple[str, ...] = ()
    debian: tuple[str, ...] = ()
    source: Path = field(default_factory=Path)

    def missing_tools(self) -> list[str]:
        """The programs this board needs that are not on PATH."""
        return [tool for tool in self.needs if shutil.which(tool) is None]

    def tools_installed(self) -> bool:
        return not self.missing_tools()

    def install_hint(self) -> str:
        """What to install when tools are missing (Debian package names)."""
        if not self.debian:
            return f"install {', '.join(self.missing_tools())}"
        return "sudo apt-get install " + " ".join(self.debian)


def profile_names() -> list[str]:
    """Every built-in board profile's name, sorted."""
    return sorted(p.stem for p in boards_folder().glob("*.toml"))


def all_profiles() -> list[BoardProfile]:
    return [load_profile(name) for name in profile_names()]


def load_profile(name_or_path: str) -> BoardProfile:
    """Read a built-in profile by name, or a profile file by path; refuses unknown keys and values."""
    path = Path(name_or_path)
    if not (path.suffix == ".toml" and path.is_file()):
        path = boards_folder() / f"{name_or_path}.toml"
        if not path.is_file():
            known = ", ".join(profile_names()) or "none"
            raise InputError(f"unknown board {name_or_path!r}; known boards: {known}")
    try:
        data = tomllib.loads(path.read_text("utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise InputError(f"{path}: cannot read the board profile: {exc}") from None
    return _profile(data, path)


_TOP = {"name", "description", "cpu", "kind", "int_bits", "flash_bytes", "ram_bytes",
        "build", "link", "start", "cost", "tools"}
_TABLES = {
    "build": {"cc", "flags", "link_flags", "glue", "include", "linker_script", "size_tool"},
    "link": {"kind", "baud"},
    "start": {"command"},
    "cost": {"unit", "method"},
    "tools": {"needs", "debian"},
}


def _profile(data: dict, path: Path) -> BoardProfile:
    def fail(what: str) -> InputError:
        return InputError(f"{path}: {what}")

    unknown = set(data) - _TOP
    if unknown:
        raise fail(f"unknown keys {sorted(unknown)}; accepted: {sorted(_TOP)}")
    for table, keys in _TABLES.items():
        extra = set(data.get(table, {})) - keys
        if extra:
            raise fail(f"unknown keys {sorted(extra)} in [{table}]; accepted: {sorted(keys)}")

    def text(table: dict, key: str, where: str, default: str | None = None) -> str:
        value = table.get(key, default)
        if not isinstance(value, str) or not value:
            raise fail(f"{where}{key} must be a non-empty string")
        return value

    def words(table: dict, key: str, where: str) -> tuple[str, ...]:
        value = table.get(key, [])
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise fail(f"{where}{key} must be a list of strings")
        return tuple(value)

    def choice(value: str, allowed: tuple[str, ...], key: str) -> str:
        if value not in allowed:
            raise fail(f"{key} = {value!r}; accepted: {', '.join(allowed)}")
        return value

    def size(key: str) -> int | None:
        value = data.get(key)
        if value is not None and (not isinstance(value, int) or value <= 0):
            raise fail(f"{key} must be a positive whole number of bytes")
        return value

    folder = path.parent
    build, link, cost, tools = (data.get(t, {}) for t in ("build", "link", "cost", "tools"))
    int_bits = data.get("int_bits")
    if int_bits not in (16, 32):
        raise fail("int_bits (the width of C's int on this target) must be 16 or 32")
    kind = choice(text(data, "kind", ""), KINDS, "kind")
    command = words(data.get("start", {}), "command", "[start] ")
    if kind != "real" and not command:
        raise fail("[start] command is needed for host and emulated boards")
    baud = link.get("baud", 115200)
    if not isinstance(baud, int) or baud <= 0:
        raise fail("[link] baud must be a positive whole number")
    script = build.get("linker_script")
    return BoardProfile(
        name=text(data, "name", ""),
        description=text(data, "description", ""),
        cpu=text(data, "cpu", ""),
        kind=kind,
        int_bits=int_bits,
        flash_bytes=size("flash_bytes"),
        ram_bytes=size("ram_bytes"),
        cc=text(build, "cc", "[build] "),
        flags=words(build, "flags", "[build] "),
        link_flags=words(build, "link_flags", "[build] "),
        glue=tuple(folder / p for p in words(build, "glue", "[build] ")),
        include=(folder / "common", *(folder / p for p in words(build, "include", "[build] "))),
        linker_script=folder / script if isinstance(script, str) else None,
        size_tool=build.get("size_tool"),
        link_kind=choice(text(link, "kind", "[link] "), LINK_KINDS, "[link] kind"),
        baud=baud,
        start=command,
        cost_unit=choice(text(cost, "unit", "[cost] ", "instructions"), COST_UNITS, "[cost] unit"),
        cost_method=cost.get("method", ""),
        needs=words(tools, "needs", "[tools] "),
        debian=words(tools, "debian", "[tools] "),
        source=path,
    )
