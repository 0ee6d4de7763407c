"""Compiling C on the host through cffi (layer L3), with strict flags on the generated sources.

cffi's own wrapper does not build under ``-pedantic -Werror`` (it converts object pointers to
function pointers), so the firmware and harness sources are compiled to objects with the strict
flags first, and the wrapper is built around those objects with default flags. Builds land in a
cache folder keyed by a hash of the sources, flags and compiler, so repeated runs reuse them.
"""

from __future__ import annotations

import hashlib
import importlib.util
import os
import shutil
import subprocess
import sys
import types
from dataclasses import dataclass
from pathlib import Path

import cffi

from orbitfix.gen.c.emit import HARNESS_DECLARATIONS
from orbitfix.gen.errors import OrbitfixError, ToolchainError

STRICT_FLAGS = ("-std=c99", "-Wall", "-Wextra", "-Wconversion", "-Wsign-conversion",
                "-pedantic", "-Werror")
OPTIMISE_FLAGS = ("-O2", "-fPIC")
# A second opinion on every value: the same C under the undefined-behaviour sanitizer, which stops
# the run at the first undefined operation (a shift of a negative value or by too much, a signed
# overflow), at no optimisation and at full optimisation, so no compiler's folding can hide it.
SANITIZE_FLAGS = ("-fsanitize=undefined", "-fno-sanitize-recover=undefined")
SANITIZED_LEVELS = ("-O0", "-O2")
HARNESS_MAIN = "ORBITFIX_HARNESS_MAIN"  # defined for the stand-alone sanitized program


class CompileError(OrbitfixError):
    """The C did not compile warning-free under the strict flags (a failed check: exit code 1)."""

    exit_code = 1


@dataclass(frozen=True)
class HostModule:
    """A compiled harness: ``lib`` holds the C functions, ``ffi`` makes buffers for them."""

    ffi: cffi.FFI
    lib: types.ModuleType
    folder: Path
    reused: bool


def cache_root() -> Path:
    """Where host builds are kept: $ORBITFIX_CACHE, else the user's cache folder."""
    configured = os.environ.get("ORBITFIX_CACHE")
    if configured:
        return Path(configured)
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "orbitfix" / "host"


def compiler() -> str:
    """The host C compiler: $CC, else cc, gcc or clang, whichever is found first."""
    for candidate in (os.environ.get("CC"), "cc", "gcc", "clang"):
        if candidate and shutil.which(candidate):
            return candidate
    raise ToolchainError("no C compiler found on the host; install gcc (Debian: apt-get install "
                         "gcc) or point $CC at one")


def _compiler_identity(cc: str) -> str:
    done = subprocess.run([cc, "--version"], capture_output=True, text=True, check=False)
    return done.stdout.splitlines()[0] if done.stdout else cc


def build_host_module(sources: dict[str, str], harness: str, header: str,
                      declarations: str = HARNESS_DECLARATIONS) -> HostModule:
    """Compile ``sources`` (file name -> C text: the firmware files, and any further harness
    files) and ``harness`` into a module.

    ``header`` is the firmware header the cffi wrapper includes; ``declarations`` are the C
    prototypes of every harness function Python may call (they become the cffi definitions).
    """
    cc = compiler()
    flags = STRICT_FLAGS + OPTIMISE_FLAGS
    digest = hashlib.sha256()
    for part in (_compiler_identity(cc), " ".join(flags), cffi.__version__, sys.version, harness,
                 declarations, header):
        digest.update(part.encode())
    for name in sorted(sources):
        digest.update(name.encode())
        digest.update(sources[name].encode())
    key = digest.hexdigest()[:20]
    module_name = f"_orbitfix_host_{key}"
    folder = cache_root() / key
    built = sorted(folder.glob(f"{module_name}*.so")) + sorted(folder.glob(f"{module_name}*.pyd"))
    reused = bool(built)
    if not built:
        built = [_build(folder, module_name, sources, harness, header, declarations, cc, flags)]
    spec = importlib.util.spec_from_file_location(module_name, built[0])
    if spec is None or spec.loader is None:
        raise ToolchainError(f"cannot load the host build {built[0]}; delete {folder} and retry")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return HostModule(ffi=module.ffi, lib=module.lib, folder=folder, reused=reused)


def build_sanitized_program(sources: dict[str, str], harness: str, level: str) -> Path:
    """The firmware and harness as a stand-alone program under the undefined-behaviour sanitizer
    at optimisation ``level`` (one of SANITIZED_LEVELS), with the strict flags. It reads states
    on its standard input and writes results on its standard output (see the harness's main);
    any undefined operation stops it with a non-zero exit and the sanitizer's report."""
    cc = compiler()
    flags = (*STRICT_FLAGS, level, *SANITIZE_FLAGS, f"-D{HARNESS_MAIN}")
    digest = hashlib.sha256()
    for part in ("sanitized program", _compiler_identity(cc), " ".join(flags), harness):
        digest.update(part.encode())
    for name in sorted(sources):
        digest.update(name.encode())
        digest.update(sources[name].encode())
    folder = cache_root() / digest.hexdigest()[:20]
    program = folder / "orbitfix_sanitized"
    if program.is_file():
        return program
    work = _work_folder(folder, sources, harness)
    objects = _compile_objects(work, sources, cc, flags)
    command = [cc, *SANITIZE_FLAGS, *objects, "-o", str(work / program.name)]
    done = subprocess.run(command, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        shutil.rmtree(work, ignore_errors=True)
        raise ToolchainError(f"linking the sanitized host program failed with {cc}:\n"
                             f"{done.stderr.strip()}\ninstall the compiler's sanitizer runtime "
                             "(Debian: apt-get install libubsan1 for gcc)")
    if folder.exists():
        shutil.rmtree(folder, ignore_errors=True)
    work.rename(folder)
    return program


def _work_folder(folder: Path, sources: dict[str, str], harness: str) -> Path:
    work = folder.with_name(folder.name + f".building-{os.getpid()}")
    if work.exists():
        shutil.rmtree(work)
    work.mkdir(parents=True)
    for name, text in sources.items():
        (work / name).write_text(text)
    (work / "orbitfix_harness.c").write_text(harness)
    return work


def _compile_objects(work: Path, sources: dict[str, str], cc: str,
                     flags: tuple[str, ...]) -> list[str]:
    """Every C file of ``work`` (the sources and the harness) compiled to an object."""
    objects = []
    for name in [*sorted(n for n in sources if n.endswith(".c")), "orbitfix_harness.c"]:
        target = work / (Path(name).stem + ".o")
        command = [cc, *flags, "-I", str(work), "-c", str(work / name), "-o", str(target)]
        done = subprocess.run(command, capture_output=True, text=True, check=False)
        if done.returncode != 0:
            shutil.rmtree(work, ignore_errors=True)
            raise CompileError(f"{name} does not compile warning-free with {cc} "
                               f"{' '.join(flags)}:\n{done.stderr.strip()}")
        objects.append(str(target))
    return objects


def _build(folder: Path, module_name: str, sources: dict[str, str], harness: str, header: str,
           declarations: str, cc: str, flags: tuple[str, ...]) -> Path:
    work = _work_folder(folder, sources, harness)
    objects = _compile_objects(work, sources, cc, flags)
    ffi = cffi.FFI()
    ffi.cdef(declarations)
    ffi.set_source(module_name, f'#include <stddef.h>\n#include <stdint.h>\n#include "{header}"\n'
                   + declarations, include_dirs=[str(work)], extra_objects=objects)
    try:
        built = Path(ffi.compile(tmpdir=str(work), verbose=False))
    except Exception as exc:  # cffi raises distutils/setuptools errors of several kinds
        shutil.rmtree(work, ignore_errors=True)
        raise ToolchainError(f"building the cffi wrapper failed ({exc}); check that the Python "
                             "headers are installed (Debian: apt-get install python3-dev)") from None
    if folder.exists():
        shutil.rmtree(folder, ignore_errors=True)
    work.rename(folder)
    return folder / built.name
