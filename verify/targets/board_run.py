"""Starting a built image and handing back a URL that pyserial's ``serial_for_url`` opens.

The host board runs as a process whose standard input and output are the master side of a
pseudo-terminal; the URL is the slave side's path. An emulator listens on a local socket
(:mod:`.emulators`); a real board is flashed by the user and reached with ``--port``.
"""

from __future__ import annotations

import contextlib
import os
import subprocess
import tty
from collections.abc import Iterator

from orbitfix.gen.errors import InputError, ToolchainError
from orbitfix.verify.targets import emulators
from orbitfix.verify.targets.board_build import FirmwareImage
from orbitfix.verify.targets.board_profiles import BoardProfile


@contextlib.contextmanager
def running(profile: BoardProfile, image: FirmwareImage | None, port: str | None = None) -> Iterator[str]:
    """Yield a URL for the running board; stop it on leaving. ``port`` names a board that is
    already running (a real board the user flashed), which is then only connected to."""
    if port is not None:
        yield port
        return
    if profile.link_kind == "port":
        where = f" {image.path}" if image is not None else ""
        raise InputError(f"board {profile.name} is a real board: flash{where} with your own tool, then "
                         "give its serial port with --port (for example --port /dev/ttyACM0)")
    if image is None:
        raise InputError(f"board {profile.name!r}: no image to run")
    if profile.link_kind == "socket":
        with emulators.started(profile, image.path) as emulator:
            yield emulator.url
        return
    master, slave = os.openpty()
    tty.setraw(slave)  # no echo, no line editing: bytes pass unchanged both ways
    command = [part.replace("{image}", str(image.path)) for part in profile.start]
    try:
        process = subprocess.Popen(command, stdin=master, stdout=master, stderr=subprocess.DEVNULL,
                                   close_fds=True)
    except OSError as exc:
        os.close(master)
        os.close(slave)
        raise ToolchainError(f"cannot start {command[0]}: {exc}") from None
    try:
        yield os.ttyname(slave)  # the master stays open here too, so the pty outlives a crash
    finally:
        os.close(slave)
        os.close(master)
        process.terminate()
        try:
            process.wait(timeout=2)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()
