"""Consistent Overhead Byte Stuffing: a frame's bytes re-coded without any zero, so a single zero
byte can mark where each frame ends and a receiver can find the next frame after any damage."""

from __future__ import annotations


class CobsError(ValueError):
    """The bytes are not a valid COBS encoding (a damaged frame)."""


def encode(data: bytes) -> bytes:
    """COBS-encode ``data``; the result holds no zero byte and is at most len/254 + 1 longer."""
    out = bytearray([0])
    code_at, code = 0, 1
    for position, byte in enumerate(data):
        if byte:
            out.append(byte)
            code += 1
        if byte == 0 or code == 0xFF:
            out[code_at] = code
            code = 1
            code_at = len(out)
            # a full block at the very end needs no further code byte
            if byte == 0 or position + 1 < len(data):
                out.append(0)
            else:
                return bytes(out)
    out[code_at] = code
    return bytes(out)


def decode(data: bytes) -> bytes:
    """Undo :func:`encode`; raises CobsError on a zero byte or a block running past the end."""
    out = bytearray()
    index, size = 0, len(data)
    while index < size:
        code = data[index]
        if code == 0:
            raise CobsError("zero byte inside a COBS frame")
        end = index + code
        if end > size:
            raise CobsError("COBS block runs past the end of the frame")
        block = data[index + 1:end]
        if 0 in block:
            raise CobsError("zero byte inside a COBS frame")
        out += block
        index = end
        if code != 0xFF and index < size:
            out.append(0)
    return bytes(out)
