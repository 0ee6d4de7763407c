"""CRC-16/CCITT-FALSE: polynomial 0x1021, initial value 0xFFFF, no reflection, no final XOR.

The same parameters as the board's C (``templates/firmware/link.c.j2``); the check value 0x29B1
for the ASCII bytes "123456789" is the catalogue's.
"""

from __future__ import annotations

POLYNOMIAL = 0x1021
INITIAL = 0xFFFF


def _table() -> tuple[int, ...]:
    rows = []
    for byte in range(256):
        crc = byte << 8
        for _ in range(8):
            crc = ((crc << 1) ^ POLYNOMIAL) if crc & 0x8000 else (crc << 1)
        rows.append(crc & 0xFFFF)
    return tuple(rows)


_TABLE = _table()


def crc16(data: bytes, crc: int = INITIAL) -> int:
    """The CRC of ``data`` (continue an earlier one by passing it as ``crc``)."""
    for byte in data:
        crc = ((crc << 8) & 0xFFFF) ^ _TABLE[(crc >> 8) ^ byte]
    return crc
