"""Compiling C on the host through cffi (layer L3), with strict flags on the generated sources.

cffi's own wrapper does not build under ``-pedantic -Werror`` (it converts object pointers to
function pointers), so the firmware and harness sources are compiled to objects with the strict
flags, the wrapper (cffi's C, which depends only on the header and the declarations) with default
flags, and the three are linked into an extension module. Builds land in a
cache folder keyed by a hash of the sources, flags and compiler, so repeated runs reuse them.
"""

from __future__ import annotations

import contextlib
import functools
import hashlib
import importlib.machinery
import importlib.util
import io
import os
import shutil
import subprocess
import sys
import sysconfig
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
# overflow), at no optimisation and at full optimisation and with each of the two common compilers
# found on the host, so no one compiler's folding can hide it.
SANITIZE_FLAGS = ("-fsanitize=undefined", "-fno-sanitize-recover=undefined")
SANITIZED_LEVELS = ("-O0", "-O2")
SANITIZING_COMPILERS = ("gcc", "clang")
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


@functools.lru_cache(maxsize=8)
def sanitizing_compilers() -> tuple[str, ...]:
    """The compilers the sanitized builds use: each of SANITIZING_COMPILERS found on the host,
    else the one host compiler."""
    found = tuple(cc for cc in SANITIZING_COMPILERS if shutil.which(cc))
    return found or (compiler(),)


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
    folder = cache_root() / key
    built = sorted(folder.glob("_orbitfix_host_*.so")) + sorted(folder.glob("_orbitfix_host_*.pyd"))
    reused = bool(built)
    if not built:
        built = [_build(folder, sources, harness, header, declarations, cc, flags)]
    module_name = built[0].name.split(".")[0]
    spec = importlib.util.spec_from_file_location(module_name, built[0])
    if spec is None or spec.loader is None:
        raise ToolchainError(f"cannot load the host build {built[0]}; delete {folder} and retry")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return HostModule(ffi=module.ffi, lib=module.lib, folder=folder, reused=reused)


def build_sanitized_program(sources: dict[str, str], harness: str, level: str,
                            cc: str | None = None) -> Path:
    """The firmware and harness as a stand-alone program under the undefined-behaviour sanitizer
    at optimisation ``level`` (one of SANITIZED_LEVELS), with the strict flags. It reads states
    on its standard input and writes results on its standard output (see the harness's main);
    any undefined operation stops it with a non-zero exit and the sanitizer's report. ``cc`` is
    the compiler (default the host compiler)."""
    cc = cc or compiler()
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
                             "(Debian: apt-get install libubsan1 for gcc; clang carries its own)")
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
    """Every C file of ``work`` (the sources and the harness) compiled to an object. Objects are
    kept in the cache by a hash of the compiler, the flags, the file and every header beside it,
    so a build that changes one file compiles only that one."""
    headers = "".join(f"{name}\0{text}\0" for name, text in sorted(sources.items())
                      if name.endswith(".h"))
    store = cache_root() / "objects"
    store.mkdir(parents=True, exist_ok=True)
    objects = []
    for name in [*sorted(n for n in sources if n.endswith(".c")), "orbitfix_harness.c"]:
        text = (work / name).read_text()
        digest = hashlib.sha256()
        for part in (_compiler_identity(cc), " ".join(flags), name, text, headers):
            digest.update(part.encode())
        kept = store / f"{digest.hexdigest()[:24]}.o"
        target = work / (Path(name).stem + ".o")
        if kept.is_file():
            shutil.copyfile(kept, target)
            objects.append(str(target))
            continue
        command = [cc, *flags, "-I", str(work), "-c", str(work / name), "-o", str(target)]
        done = subprocess.run(command, capture_output=True, text=True, check=False)
        if done.returncode != 0:
            shutil.rmtree(work, ignore_errors=True)
            raise CompileError(f"{name} does not compile warning-free with {cc} "
                               f"{' '.join(flags)}:\n{done.stderr.strip()}")
        partial = kept.with_name(f"{kept.name}.{os.getpid()}")
        shutil.copyfile(target, partial)
        partial.replace(kept)
        objects.append(str(target))
    return objects


def _wrapper_object(cc: str, header: str, header_text: str, declarations: str) -> tuple[str, Path]:
    """cffi's wrapper around the declarations, compiled once per header and declarations (it does
    not depend on the sources' bodies) and kept in the cache: (module name, object file). Built
    by hand from cffi's C rather than through setuptools, which would recompile it every time."""
    digest = hashlib.sha256()
    for part in ("wrapper", _compiler_identity(cc), cffi.__version__, sys.version, declarations,
                 header, header_text):
        digest.update(part.encode())
    key = digest.hexdigest()[:20]
    module_name = f"_orbitfix_host_{key}"
    store = cache_root() / "wrappers"
    kept = store / f"{module_name}.o"
    if kept.is_file():
        return module_name, kept
    work = store / f"{module_name}.building-{os.getpid()}"
    work.mkdir(parents=True, exist_ok=True)
    (work / header).write_text(header_text)
    ffi = cffi.FFI()
    ffi.cdef(declarations)
    ffi.set_source(module_name, f'#include <stddef.h>\n#include <stdint.h>\n#include "{header}"\n'
                   + declarations)
    source = work / f"{module_name}.c"
    with contextlib.redirect_stdout(io.StringIO()):  # cffi says "generating ..." otherwise
        ffi.emit_c_code(str(source))
    include = sysconfig.get_paths()["include"]
    command = [cc, "-O2", "-fPIC", "-I", include, "-I", str(work), "-c", str(source), "-o",
               str(work / kept.name)]
    done = subprocess.run(command, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        shutil.rmtree(work, ignore_errors=True)
        raise ToolchainError(f"building the cffi wrapper failed:\n{done.stderr.strip()[-2000:]}\n"
                             "check that the Python headers are installed (Debian: apt-get "
                             "install python3-dev)")
    (work / kept.name).replace(kept)
    shutil.rmtree(work, ignore_errors=True)
    return module_name, kept


def _build(folder: Path, sources: dict[str, str], harness: str, header: str, declarations: str,
           cc: str, flags: tuple[str, ...]) -> Path:
    if header not in sources:
        raise ToolchainError(f"the sources hold no {header} for the cffi wrapper to include")
    work = _work_folder(folder, sources, harness)
    objects = _compile_objects(work, sources, cc, flags)
    module_name, wrapper = _wrapper_object(cc, header, sources[header], declarations)
    built = work / f"{module_name}{importlib.machinery.EXTENSION_SUFFIXES[0]}"
    link = ["-undefined", "dynamic_lookup"] if sys.platform == "darwin" else []
    command = [cc, "-shared", *link, *objects, str(wrapper), "-o", str(built)]
    done = subprocess.run(command, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        shutil.rmtree(work, ignore_errors=True)
        raise ToolchainError(f"linking the host module failed with {cc}:\n{done.stderr.strip()}")
    if folder.exists():
        shutil.rmtree(folder, ignore_errors=True)
    work.rename(folder)
    return folder / built.name
