"""Start an emulated board from its profile: a free local port, the profile's command with
``{image}`` and ``{port}`` filled in, a wait until the emulator listens, and a clean stop.

The emulator serves the board's UART on ``socket://127.0.0.1:PORT`` (pyserial's
``serial_for_url``). A command may also name ``{simavr_link}``: the small host program in
``boards/avr/simavr_link.c`` that puts simavr's AVR on such a socket, built here on first use.

Both keep the guest stopped until the host connects (QEMU's ``wait=on``), so readiness is seen
from the listening socket (``/proc/net/tcp``) or the emulator's own message, never by a trial
connection, which would start the guest. Note that pyserial's ``socket://`` open() empties its
input buffer, so a host should ask the board to speak rather than rely on what it sends at once.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import socket
import subprocess
import threading
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

from orbitfix.gen.errors import ToolchainError
from orbitfix.verify.targets.board_profiles import BoardProfile, boards_folder
from orbitfix.verify.targets.host_build import cache_root, compiler

READY_SECONDS = 20.0
STOP_SECONDS = 5.0
_LISTEN = "0A"  # TCP state LISTEN in /proc/net/tcp


class EmulatorError(ToolchainError):
    """The emulator would not start or listen; the message carries what it printed."""


@dataclass
class Emulator:
    """A running emulator: its process, the URL of its UART, and what it printed."""

    process: subprocess.Popen
    port: int
    command: list[str]
    _errors: list[str] = field(default_factory=list)
    _reader: threading.Thread | None = None

    @property
    def url(self) -> str:
        return f"socket://127.0.0.1:{self.port}"

    def printed(self) -> str:
        return "".join(self._errors)

    def stop(self, seconds: float = STOP_SECONDS) -> int | None:
        """Wait up to ``seconds`` for the emulator to end by itself, then end it; its exit code
        (None when it had to be ended)."""
        try:
            return self.process.wait(timeout=seconds)
        except subprocess.TimeoutExpired:
            pass
        self.process.terminate()
        try:
            self.process.wait(timeout=STOP_SECONDS)
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.wait()
        return None


def free_port() -> int:
    """A local TCP port nobody listens on now (the OS picks it)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def _listening(port: int) -> bool:
    for table in ("/proc/net/tcp", "/proc/net/tcp6"):
        try:
            lines = Path(table).read_text().splitlines()[1:]
        except OSError:
            continue
        for line in lines:
            words = line.split()
            if len(words) > 3 and words[3] == _LISTEN and int(words[1].rsplit(":", 1)[1], 16) == port:
                return True
    return False


def simavr_link() -> Path:
    """The simavr socket bridge, built with the host compiler against libsimavr (cached by source)."""
    source = boards_folder() / "avr" / "simavr_link.c"
    text = source.read_bytes()
    cc = compiler()
    key = hashlib.sha256(text + cc.encode()).hexdigest()[:16]
    program = cache_root() / "tools" / f"simavr_link-{key}"
    if program.is_file():
        return program
    program.parent.mkdir(parents=True, exist_ok=True)
    building = program.with_name(f"{program.name}.{os.getpid()}")
    done = subprocess.run([cc, "-O2", "-std=c99", "-Wall", "-Wextra", "-Werror", str(source),
                           "-lsimavr", "-o", str(building)], capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise EmulatorError("cannot build the simavr link (it needs simavr's library and headers; "
                            f"Debian: sudo apt-get install libsimavr-dev):\n{done.stderr.strip()}")
    building.replace(program)
    return program


def _fill(word: str, image: Path, port: int) -> str:
    if "{simavr_link}" in word:
        word = word.replace("{simavr_link}", str(simavr_link()))
    return word.replace("{image}", str(image)).replace("{port}", str(port))


def start(profile: BoardProfile, image: Path, ready_seconds: float = READY_SECONDS) -> Emulator:
    """Start ``profile``'s emulator on ``image`` and return once its UART socket listens."""
    if not profile.start:
        raise EmulatorError(f"board {profile.name} has no [start] command: it is a {profile.kind} board")
    missing = profile.missing_tools()
    if missing:
        raise EmulatorError(f"board {profile.name}: {', '.join(missing)} not found; {profile.install_hint()}")
    for attempt in range(3):
        port = free_port()
        command = [_fill(word, image, port) for word in profile.start]
        process = subprocess.Popen(command, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                                   stderr=subprocess.STDOUT, text=True, errors="replace")
        emulator = Emulator(process=process, port=port, command=command)
        emulator._reader = threading.Thread(target=_collect, args=(process, emulator._errors), daemon=True)
        emulator._reader.start()
        deadline = time.monotonic() + ready_seconds
        while time.monotonic() < deadline:
            if _listening(port) or "waiting for connection" in emulator.printed():
                return emulator
            if process.poll() is not None:
                break
            time.sleep(0.02)
        ended = process.poll()
        emulator.stop(0)
        if emulator._reader is not None:
            emulator._reader.join(1.0)
        if "Address already in use" in emulator.printed() and attempt < 2:
            continue  # another program took the port between our probe and the start: try another
        what = (f"ended (exit code {ended}) before listening on port {port}" if ended is not None
                else f"did not listen on port {port} within {ready_seconds:g} s")
        raise EmulatorError(f"board {profile.name}: the emulator {what}.\ncommand: {' '.join(command)}\n"
                            f"it printed: {emulator.printed().strip() or '(nothing)'}")
    raise AssertionError("unreachable")


def _collect(process: subprocess.Popen, into: list[str]) -> None:
    if process.stdout is None:
        return
    for line in process.stdout:
        into.append(line)


@contextlib.contextmanager
def started(profile: BoardProfile, image: Path) -> Iterator[Emulator]:
    """The emulator for the duration of a ``with`` block; stopped (and waited for) at its end."""
    emulator = start(profile, image)
    try:
        yield emulator
    finally:
        emulator.stop(STOP_SECONDS)
