"""Frames: a message type, a sequence number and a body, closed by a CRC-16, COBS-encoded and
ended by one zero byte. A reader splits any byte stream back into frames and says which were
damaged, so the session can resynchronise at the next zero."""

from __future__ import annotations

from dataclasses import dataclass

from orbitfix.verify.link import cobs
from orbitfix.verify.link.crc import crc16

DELIMITER = 0
MAX_BODY = 250  # the board's buffers are sized for this; see PROTOCOL.md


@dataclass(frozen=True)
class Frame:
    """One decoded, CRC-checked frame."""

    kind: int
    seq: int
    body: bytes
    damaged_before: int = 0  # damaged frames the reader threw away just before this one


class FrameError(ValueError):
    """A frame that failed COBS decoding, its CRC or its length."""


def encode_frame(kind: int, seq: int, body: bytes = b"") -> bytes:
    """The bytes on the wire for one frame, delimiter included."""
    if not (0 <= kind < 256 and 0 <= seq < 256):
        raise ValueError("kind and seq are single bytes")
    if len(body) > MAX_BODY:
        raise ValueError(f"a frame body holds at most {MAX_BODY} bytes, not {len(body)}")
    raw = bytes([kind, seq]) + body
    check = crc16(raw)
    return cobs.encode(raw + bytes([check >> 8, check & 0xFF])) + bytes([DELIMITER])


def decode_frame(encoded: bytes) -> Frame:
    """The frame in ``encoded`` (the bytes between two delimiters)."""
    try:
        raw = cobs.decode(encoded)
    except cobs.CobsError as exc:
        raise FrameError(str(exc)) from None
    if len(raw) < 4:
        raise FrameError(f"a frame of {len(raw)} bytes is too short")
    if len(raw) > MAX_BODY + 4:
        raise FrameError(f"a frame of {len(raw)} bytes is too long")
    if crc16(raw[:-2]) != (raw[-2] << 8 | raw[-1]):
        raise FrameError("CRC mismatch")
    return Frame(kind=raw[0], seq=raw[1], body=bytes(raw[2:-2]))


class FrameReader:
    """Feeds on bytes; yields frames and counts the damaged ones.

    A damaged frame is dropped whole: the reader waits for the next delimiter and starts afresh,
    which is all it takes to resynchronise with COBS.
    """

    def __init__(self) -> None:
        self._pending = bytearray()
        self.corrupt = 0
        self.bytes_seen = 0
        self.last_error = ""
        self._damaged = 0

    def feed(self, data: bytes) -> list[Frame]:
        self.bytes_seen += len(data)
        frames = []
        self._pending += data
        while True:
            end = self._pending.find(DELIMITER)
            if end < 0:
                break
            chunk = bytes(self._pending[:end])
            del self._pending[:end + 1]
            if not chunk:
                continue  # an empty frame is only a delimiter used as a wake-up: harmless
            try:
                frame = decode_frame(chunk)
            except FrameError as exc:
                self.corrupt += 1
                self._damaged += 1
                self.last_error = str(exc)
                continue
            frames.append(Frame(frame.kind, frame.seq, frame.body, self._damaged))
            self._damaged = 0
        if len(self._pending) > 4 * (MAX_BODY + 8):  # no delimiter for far too long
            self._pending.clear()
            self.corrupt += 1
            self._damaged += 1
            self.last_error = "no frame delimiter for longer than any frame"
        return frames

    def discard(self) -> None:
        """Forget a partial frame (after a timeout the rest of it will not come)."""
        self._pending.clear()
