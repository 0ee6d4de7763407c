"""A running board for the duration of a ``with`` block, as a URL for pyserial's serial_for_url."""

from __future__ import annotations

import contextlib
from collections.abc import Iterator

from orbitfix.gen.errors import InputError
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
    if profile.link_kind == "socket":
        if image is None:
            raise InputError(f"board {profile.name!r}: no image to run")
        with emulators.started(profile, image.path) as emulator:
            yield emulator.url
        return
    raise InputError(f"board {profile.name}: link kind {profile.link_kind!r} is not started here")
