"""A link that damages what passes through it, on purpose, so every recovery path of the session
can be shown to work: flipped bits, dropped and duplicated bytes, whole frames repeated or
swapped, delays, and a disconnect part way through a run.

Written on the command line as ``--faults`` with comma-separated NAME=VALUE items, e.g.
``flip=1e-4,drop=1e-5,dup=1e-5,repeat=0.01,swap=0.01,delay=0.001,pause=0.3,cut=200000,seed=7``:

    flip, drop, dup   chance per byte (both directions) of a flipped bit, a lost byte, a doubled byte
    repeat, swap      chance per frame from the board of being sent twice, or after the next one
    delay             chance per read of the line falling silent for ``pause`` seconds (default 0.05)
    cut               the link breaks after this many bytes from the board
    seed              the random generator's seed (default 1), so a failure can be replayed
"""

from __future__ import annotations

import time
from collections import Counter
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
import serial

from orbitfix.gen.errors import InputError

RATES = ("flip", "drop", "dup", "repeat", "swap", "delay")


@dataclass(frozen=True)
class FaultSpec:
    flip: float = 0.0
    drop: float = 0.0
    dup: float = 0.0
    repeat: float = 0.0
    swap: float = 0.0
    delay: float = 0.0
    pause: float = 0.05
    cut: int | None = None
    seed: int = 1

    def to_json(self) -> dict[str, Any]:
        return asdict(self)


def parse_faults(text: str) -> FaultSpec:
    """Read a ``--faults`` value; a malformed item is an input error naming what is accepted."""
    accepted = (*RATES, "pause", "cut", "seed")
    values: dict[str, Any] = {}
    for item in filter(None, (part.strip() for part in text.split(","))):
        name, sep, value = item.partition("=")
        name = name.strip()
        if not sep or name not in accepted:
            raise InputError(f"--faults '{item}': write NAME=VALUE with NAME one of "
                             f"{', '.join(accepted)}, e.g. --faults flip=1e-4,cut=100000")
        try:
            number = float(value)
        except ValueError:
            raise InputError(f"--faults '{item}': '{value}' is not a number") from None
        if name in RATES and not 0.0 <= number <= 1.0:
            raise InputError(f"--faults '{item}': a chance lies between 0 and 1")
        if name in ("cut", "seed"):
            if number != int(number) or number < 0:
                raise InputError(f"--faults '{item}': give a whole number of at least 0")
            number = int(number)
        if name == "pause" and not 0.0 <= number <= 60.0:
            raise InputError(f"--faults '{item}': a pause lies between 0 and 60 seconds")
        values[name] = number
    return FaultSpec(**values)


class FaultyLink:
    """Wraps a pyserial port; ``injected`` counts every fault it made, by kind."""

    def __init__(self, port: Any, spec: FaultSpec) -> None:
        self.port = port
        self.spec = spec
        self.injected: Counter[str] = Counter()
        self._rng = np.random.default_rng(spec.seed)
        self._received = 0
        self._ready = bytearray()      # damaged bytes waiting to be read
        self._partial = bytearray()    # bytes of a frame not yet complete (frame-level faults)
        self._held: bytes | None = None  # a frame kept back to arrive after the next one
        self._broken = False
        self._quiet_until = 0.0

    # pyserial's attributes that the session uses
    @property
    def timeout(self) -> float | None:
        return self.port.timeout

    @timeout.setter
    def timeout(self, value: float | None) -> None:
        self.port.timeout = value

    @property
    def in_waiting(self) -> int:
        if self._broken or time.monotonic() < self._quiet_until:
            return 0
        return len(self._ready) + self.port.in_waiting

    def reset_input_buffer(self) -> None:
        self._ready.clear()
        self._partial.clear()
        self.port.reset_input_buffer()

    def close(self) -> None:
        self.port.close()

    def write(self, data: bytes) -> int:
        if self._broken:
            raise serial.SerialException("the link is cut (injected fault)")
        self.port.write(self._bytes(bytes(data)))
        return len(data)

    def read(self, size: int = 1) -> bytes:
        if self._broken:
            raise serial.SerialException("the link is cut (injected fault)")
        if not self._ready:
            data = self.port.read(max(size, 1))
            if self.spec.cut is not None and self._received + len(data) >= self.spec.cut:
                data = data[:max(self.spec.cut - self._received, 0)]
                self._broken = True
                self.injected["cut"] += 1
            self._received += len(data)
            if data and self.spec.delay and self._rng.random() < self.spec.delay:
                self.injected["delay"] += 1
                self._quiet_until = time.monotonic() + self.spec.pause
            self._ready += self._frames(self._bytes(data), flush=not data)
            if self._broken and not self._ready:
                raise serial.SerialException("the link is cut (injected fault)")
        if time.monotonic() < self._quiet_until:  # the line is silent: reads time out empty
            time.sleep(self.port.timeout or 0.0)
            return b""
        out = bytes(self._ready[:size])
        del self._ready[:size]
        return out

    def _bytes(self, data: bytes) -> bytes:
        """Byte-level faults: each byte may have one bit flipped, be dropped, or be doubled."""
        spec = self.spec
        if not data or not (spec.flip or spec.drop or spec.dup):
            return data
        raw = np.frombuffer(data, dtype=np.uint8).copy()
        if spec.flip:
            hit = np.flatnonzero(self._rng.random(raw.size) < spec.flip)
            raw[hit] ^= (1 << self._rng.integers(0, 8, hit.size)).astype(np.uint8)
            self.injected["flip"] += int(hit.size)
        copies = np.ones(raw.size, dtype=np.int64)
        if spec.drop:
            gone = self._rng.random(raw.size) < spec.drop
            copies[gone] = 0
            self.injected["drop"] += int(gone.sum())
        if spec.dup:
            twice = (self._rng.random(raw.size) < spec.dup) & (copies == 1)
            copies[twice] = 2
            self.injected["dup"] += int(twice.sum())
        return np.repeat(raw, copies).tobytes()

    def _frames(self, data: bytes, flush: bool) -> bytes:
        """Frame-level faults on whole frames from the board: repeat one, or swap two."""
        spec = self.spec
        if not (spec.repeat or spec.swap):
            return data
        self._partial += data
        out = bytearray()
        while True:
            end = self._partial.find(0)
            if end < 0:
                break
            frame = bytes(self._partial[:end + 1])
            del self._partial[:end + 1]
            if self._held is None and spec.swap and self._rng.random() < spec.swap:
                self._held = frame
                self.injected["swap"] += 1
                continue
            out += frame
            if spec.repeat and self._rng.random() < spec.repeat:
                out += frame
                self.injected["repeat"] += 1
            if self._held is not None:
                out += self._held
                self._held = None
        if flush and self._held is not None:  # nothing more is coming: let the held frame go
            out += self._held
            self._held = None
            self.injected["swap"] -= 1  # it went out in order after all: no fault was made
        return bytes(out)
