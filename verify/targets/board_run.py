"""A running board for the duration of a ``with`` block, as a URL for pyserial's serial_for_url."""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from pathlib import Path

from orbitfix.gen.errors import InputError
from orbitfix.verify.targets import emulators
from orbitfix.verify.targets.board_profiles import BoardProfile


@contextlib.contextmanager
def running(profile: BoardProfile, image: Path, port: str | None = None) -> Iterator[str]:
    """Start (emulator) or reach (real board, by ``port``) the board; yield the URL to open."""
    if profile.link_kind == "socket":
        with emulators.started(profile, image) as emulator:
            yield emulator.url
    elif profile.link_kind == "port":
        if not port:
            raise InputError(f"board {profile.name} is a real board: flash {image} with your own tool, "
                             "then give its serial port with --port (for example --port /dev/ttyACM0)")
        yield port
    else:
        raise InputError(f"board {profile.name}: link kind {profile.link_kind!r} is not started here")
