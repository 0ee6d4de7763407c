"""Cross builds for board profiles: compile C sources with the board's glue into one image under
strict warnings, then measure it (flash and RAM from the size tool, stack from the compiler).

Stack: every object is compiled with ``-fstack-usage`` (each function's own frame). The calls
between functions come from the compiler's call graph (``-fcallgraph-info=su``, gcc 10 and later)
or, for older compilers (avr-gcc 5), from the linked image's disassembly (every call and jump to
another function's start). The image's worst stack is the deepest path from the entry plus the
deepest interrupt path plus what the core pushes on an interrupt; on the AVR each call also
pushes a two-byte return address. Library functions not compiled here (soft-float, 64-bit
multiply helpers) count as zero. Recursion gives no figure.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

from orbitfix.gen.errors import InputError, ToolchainError
from orbitfix.verify.targets.board_profiles import BoardProfile
from orbitfix.verify.targets.host_build import STRICT_FLAGS, CompileError

# Bytes the core pushes on an exception entry: eight words, or 26 with the FPU's lazy frame.
EXCEPTION_FRAME = {"cortex-m4f": 104, "avr": 2}
DEFAULT_EXCEPTION_FRAME = 32
# Bytes a call pushes beyond the callee's own frame (Arm keeps LR in the frame; the ATmega328P's
# 16-bit program counter is pushed as two bytes).
RETURN_ADDRESS = {"avr": 2}
ENTRY_POINTS = ("reset_handler", "main")
INTERRUPT_PREFIXES = ("uart_interrupt", "systick_interrupt", "__vector_")


@dataclass(frozen=True)
class CrossImage:
    """A built image: the ELF, its sections' sizes, and what the compiler says about stack; for a
    real board also raw binary and Intel HEX copies for the user's flashing tool."""

    path: Path
    size: dict[str, int]
    stack_bytes: int | None
    frames: dict[str, int] = field(default_factory=dict)
    flashable: tuple[Path, ...] = ()


def cross_build(profile: BoardProfile, sources: list[Path], include_dirs: list[Path], folder: Path,
                optimisation: str = "-O2", defines: dict[str, str] | None = None) -> CrossImage:
    """Compile ``sources`` and the profile's glue with the profile's compiler into ``folder``.

    Every file is compiled with the strict warning set and ``-Werror``; a warning is a failed
    build (``CompileError``, exit 1). A missing compiler is a ``ToolchainError`` naming the
    packages to install.
    """
    missing = [tool for tool in (profile.cc, profile.size_tool) if tool and shutil.which(tool) is None]
    if missing:
        raise ToolchainError(f"board {profile.name}: {', '.join(missing)} not found; "
                             f"{profile.install_hint()}")
    folder.mkdir(parents=True, exist_ok=True)
    for stale in [*folder.glob("*.o"), *folder.glob("*.su"), *folder.glob("*.ci")]:
        stale.unlink()
    call_graph = _writes_call_graph(profile.cc)
    includes = [f"-I{path}" for path in (*profile.include, *include_dirs)]
    macro_flags = [f'-DBOARD_NAME="{profile.name}"', f"-DBOARD_BAUD={profile.baud}u"]
    defines = defines or {}
    macro_flags += [f"-D{name}={value}" for name, value in defines.items()]
    # a define given here replaces the profile's own setting of the same macro
    profile_flags = [flag for flag in profile.flags
                     if not (flag.startswith("-D") and flag[2:].split("=", 1)[0] in defines)]
    # -ffp-contract=off: float code (the benchmark's twin, any float a user compares) keeps one
    # rounding per operation instead of fused multiply-adds, so its bits match the host's.
    compile_flags = [*STRICT_FLAGS, optimisation, "-ffp-contract=off", *profile_flags, *macro_flags,
                     *includes, "-fstack-usage"]
    if call_graph:
        compile_flags.append("-fcallgraph-info=su")
    objects = []
    all_sources = [*profile.glue, *sources]
    seen: dict[str, Path] = {}
    for source in all_sources:
        stem = source.stem
        if stem in seen:
            stem = f"{stem}_{len(seen)}"
        seen[stem] = source
        target = folder / f"{stem}.o"
        _run([profile.cc, *compile_flags, "-c", str(source), "-o", str(target)], source.name, profile)
        objects.append(target)
    image = folder / f"{profile.name}.elf"
    link = [profile.cc, *STRICT_FLAGS, optimisation, *profile_flags, *profile.link_flags]
    if profile.linker_script is not None:
        link += [f"-L{profile.linker_script.parent}", f"-T{profile.linker_script}"]
    link += [*map(str, objects), "-o", str(image), f"-Wl,-Map={folder / (profile.name + '.map')}"]
    _run(link, "the link", profile)
    frames = _frames(folder)
    if not call_graph:
        _write_call_graph_from_image(profile, image, folder)
    stack = _worst_stack(folder, frames, profile.cpu)
    flashable = _flashable(profile, image) if profile.kind == "real" else ()
    return CrossImage(path=image, size=_size(profile, image), stack_bytes=stack, frames=frames,
                      flashable=flashable)


def _flashable(profile: BoardProfile, image: Path) -> tuple[Path, ...]:
    """``NAME.bin`` and ``NAME.hex`` beside the ELF (objcopy of the same toolchain)."""
    objcopy = (profile.size_tool or "size").replace("size", "objcopy")
    made = []
    for kind, suffix in (("binary", ".bin"), ("ihex", ".hex")):
        target = image.with_suffix(suffix)
        _run([objcopy, "-O", kind, str(image), str(target)], f"objcopy to {suffix}", profile)
        made.append(target)
    return tuple(made)


def _run(command: list[str], what: str, profile: BoardProfile) -> None:
    done = subprocess.run(command, capture_output=True, text=True, check=False)
    overflow = re.search(r"region [`'](\w+)' overflowed by (\d+) bytes", done.stderr)
    if done.returncode != 0 and overflow:
        memory = {"text": "flash", "FLASH": "flash", "data": "RAM", "RAM": "RAM"}.get(
            overflow.group(1), overflow.group(1))
        raise InputError(f"board {profile.name}: the firmware does not fit the board's {memory}: "
                           f"{int(overflow.group(2)):,} bytes too many. Try 16-bit words (--word 16) if "
                           "it uses 32, a smaller model, or a board with more memory")
    if done.returncode != 0:
        raise CompileError(f"board {profile.name}: {what} failed under the strict flags:\n"
                           f"{' '.join(command)}\n{done.stderr.strip()}")


_CALL_GRAPH_SUPPORT: dict[str, bool] = {}


def _writes_call_graph(cc: str) -> bool:
    """Whether this compiler understands -fcallgraph-info=su (gcc 10 and later)."""
    if cc not in _CALL_GRAPH_SUPPORT:
        # in a folder of its own: the probe writes its call graph (a--.ci) where it runs
        with tempfile.TemporaryDirectory() as folder:
            done = subprocess.run([cc, "-fcallgraph-info=su", "-x", "c", "-fsyntax-only", "-"],
                                  input="int x;\n", capture_output=True, text=True, check=False,
                                  cwd=folder)
        _CALL_GRAPH_SUPPORT[cc] = done.returncode == 0
    return _CALL_GRAPH_SUPPORT[cc]


def _size(profile: BoardProfile, image: Path) -> dict[str, int]:
    """text (code and constants in flash), data (initialised RAM, also stored in flash), bss."""
    tool = profile.size_tool or "size"
    done = subprocess.run([tool, str(image)], capture_output=True, text=True, check=False)
    lines = done.stdout.strip().splitlines()
    if done.returncode != 0 or len(lines) < 2:
        raise ToolchainError(f"board {profile.name}: {tool} could not read {image}: {done.stderr.strip()}")
    text, data, bss = (int(word) for word in lines[1].split()[:3])
    return {"text": text, "data": data, "bss": bss}


def _frames(folder: Path) -> dict[str, int]:
    """Each function's own stack frame in bytes, from the .su files (file:line:col:name  bytes  kind)."""
    frames: dict[str, int] = {}
    for su in sorted(folder.glob("*.su")):
        for line in su.read_text().splitlines():
            parts = line.split("\t")
            if len(parts) >= 2 and parts[1].strip().isdigit():
                name = parts[0].rsplit(":", 1)[-1]
                frames[name] = max(frames.get(name, 0), int(parts[1]))
    return frames


_NODE = re.compile(r'node:\s*\{\s*title:\s*"([^"]+)"\s*label:\s*"([^"]*)"')
_EDGE = re.compile(r'edge:\s*\{\s*sourcename:\s*"([^"]+)"\s*targetname:\s*"([^"]+)"')
_BYTES = re.compile(r"(\d+) bytes")


def _call_graph(folder: Path, frames: dict[str, int]) -> tuple[dict[str, int], dict[str, set[str]]]:
    """Each function's own frame and its callees, from the compiler's .ci files."""
    own: dict[str, int] = {}
    calls: dict[str, set[str]] = {}
    for graph in sorted(folder.glob("*.ci")):
        text = graph.read_text()
        for title, label in _NODE.findall(text):
            name = title.rsplit(":", 1)[-1]
            found = _BYTES.search(label)
            if found:
                own[name] = max(own.get(name, 0), int(found.group(1)))
        for source, target in _EDGE.findall(text):
            calls.setdefault(source.rsplit(":", 1)[-1], set()).add(target.rsplit(":", 1)[-1])
    for name, size in frames.items():
        own.setdefault(name, size)
    return own, calls


def _deepest(name: str, own: dict[str, int], calls: dict[str, set[str]], path: tuple[str, ...] = (),
             call_bytes: int = 0) -> int:
    if name in path:
        raise _RecursionError(name)
    below = (_deepest(c, own, calls, (*path, name), call_bytes) for c in calls.get(name, ()))
    return own.get(name, 0) + max((call_bytes + depth for depth in below), default=0)


_FUNCTION = re.compile(r"^[0-9a-f]+ <([^>]+)>:$")
_BRANCH = re.compile(r"\t(?:r?call|r?jmp)\t.*<([^>+]+)>$")


def _write_call_graph_from_image(profile: BoardProfile, image: Path, folder: Path) -> None:
    """Write ``image.ci`` (the same VCG edges gcc writes) from the disassembly: an edge for each
    call or jump from one function to another function's start."""
    objdump = (profile.size_tool or "size").replace("size", "objdump")
    done = subprocess.run([objdump, "-d", str(image)], capture_output=True, text=True, check=False)
    if done.returncode != 0:
        return
    edges = set()
    current = ""
    for line in done.stdout.splitlines():
        header = _FUNCTION.match(line)
        if header:
            current = header.group(1)
            continue
        branch = _BRANCH.search(line)
        if branch and current and not current.startswith((".", "__vectors")):
            target = branch.group(1)
            if target != current and not target.startswith("."):
                edges.add((current, target))
    (folder / "image.ci").write_text("".join(
        f'edge: {{ sourcename: "{source}" targetname: "{target}" }}\n' for source, target in sorted(edges)))


def stack_from(folder: Path, function: str, cpu: str = "") -> int | None:
    """The deepest stack below (and including) ``function`` in a build folder, from the call graph;
    None with recursion. Library callees count as zero."""
    own, calls = _call_graph(folder, _frames(folder))
    try:
        return _deepest(function, own, calls, (), RETURN_ADDRESS.get(cpu, 0))
    except _RecursionError:
        return None


def reachable_functions(folder: Path, function: str) -> set[str]:
    """``function`` and every function it calls, directly or not, per the call graph (just the
    function itself without one)."""
    _, calls = _call_graph(folder, {})
    seen = {function}
    todo = [function]
    while todo:
        for callee in calls.get(todo.pop(), ()):
            if callee not in seen:
                seen.add(callee)
                todo.append(callee)
    return seen


def _worst_stack(folder: Path, frames: dict[str, int], cpu: str) -> int | None:
    """Deepest path from the reset entry, plus the deepest interrupt path and its exception frame."""
    own, calls = _call_graph(folder, frames)
    call_bytes = RETURN_ADDRESS.get(cpu, 0)
    try:
        roots = [name for name in ENTRY_POINTS if name in own]
        if not roots:
            return None
        thread = max(_deepest(name, own, calls, (), call_bytes) for name in roots)
        handlers = [name for name in own if name.startswith(INTERRUPT_PREFIXES)]
        interrupt = max((_deepest(name, own, calls, (), call_bytes) for name in handlers), default=0)
    except _RecursionError:
        return None
    frame = EXCEPTION_FRAME.get(cpu, DEFAULT_EXCEPTION_FRAME) if interrupt else 0
    return thread + interrupt + frame


class _RecursionError(Exception):
    """A call graph with recursion has no static stack bound."""
