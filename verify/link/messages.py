"""The messages carried in frames: their type bytes and bodies (little-endian integers).

Host to board: HELLO, RESET, SET, RUN, COST, BYE, SELFTEST. Board to host: OK, HELLO_REPLY, STATES,
DONE, COST_REPLY, SELFTEST_REPLY, ERROR. PROTOCOL.md gives every body byte by byte; this module is
its one reader and writer on the host.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass

PROTOCOL_VERSION = 1

HELLO, RESET, SET, RUN, COST, BYE, SELFTEST = 0x01, 0x02, 0x03, 0x04, 0x05, 0x06, 0x07
OK, HELLO_REPLY, STATES, DONE, COST_REPLY, SELFTEST_REPLY, ERROR = (0x80, 0x81, 0x82, 0x83, 0x84,
                                                                   0x85, 0xEE)

ERROR_CODES = {
    1: "damaged frame (COBS or CRC)",
    2: "unknown message type",
    3: "wrong body length",
    4: "no runtime parameter with that index",
    5: "frame longer than the board's buffer",
}


class MessageError(ValueError):
    """A frame whose body does not have the shape its type requires."""


@dataclass(frozen=True)
class Hello:
    """What the board says about itself."""

    version: int
    word_bits: int
    int_bits: int
    state_count: int
    parameter_count: int
    batch: int
    fingerprint: str
    fraction_bits: tuple[int, ...]
    build: str

    def to_json(self) -> dict:
        return {"protocol": self.version, "word_bits": self.word_bits, "int_bits": self.int_bits,
                "states": self.state_count, "runtime_parameters": self.parameter_count,
                "batch": self.batch, "fingerprint": self.fingerprint,
                "fraction_bits": list(self.fraction_bits), "build": self.build}


@dataclass(frozen=True)
class States:
    """A batch of sampled states: ``first_step`` is the step number after which the first was
    taken; the rest follow every ``every`` steps (every is known from the RUN request)."""

    first_step: int
    states: tuple[tuple[int, ...], ...]


@dataclass(frozen=True)
class Done:
    request_seq: int
    steps: int
    last_step: int
    frames: int


@dataclass(frozen=True)
class CostReply:
    steps: int
    overhead: int
    least: int
    most: int
    total: int


@dataclass(frozen=True)
class BoardError:
    code: int
    request_seq: int
    text: str

    def describe(self) -> str:
        meaning = ERROR_CODES.get(self.code, f"error code {self.code}")
        return f"{meaning}{': ' + self.text if self.text else ''}"


def pack_state(values: list[int] | tuple[int, ...], word_bits: int) -> bytes:
    fmt = "<" + ("h" if word_bits == 16 else "i") * len(values)
    return struct.pack(fmt, *(int(v) for v in values))


def reset_body(state: list[int] | tuple[int, ...] | None, word_bits: int) -> bytes:
    """RESET to ``state``, or to the model's initial state (the board's NAME_init) when None."""
    return b"" if state is None else pack_state(state, word_bits)


def set_body(index: int, value: int, word_bits: int) -> bytes:
    return bytes([index]) + pack_state([value], word_bits)


def run_body(steps: int, every: int, first_step: int) -> bytes:
    return struct.pack("<IHI", steps, every, first_step)


def cost_body(steps: int) -> bytes:
    return struct.pack("<H", steps)


def parse_hello(body: bytes) -> Hello:
    if len(body) < 22:
        raise MessageError("HELLO reply too short")
    version, word_bits, int_bits, count, params, batch = body[:6]
    fingerprint = body[6:22].decode("ascii", "replace")
    if len(body) < 22 + count:
        raise MessageError("HELLO reply too short for its fraction bits")
    fraction = tuple(body[22:22 + count])
    build = body[22 + count:].decode("ascii", "replace")
    return Hello(version, word_bits, int_bits, count, params, batch, fingerprint, fraction, build)


def parse_states(body: bytes, state_count: int, word_bits: int) -> States:
    if len(body) < 5:
        raise MessageError("STATES frame too short")
    first_step, count = struct.unpack_from("<IB", body)
    size = state_count * word_bits // 8
    if len(body) != 5 + count * size or count == 0:
        raise MessageError(f"STATES frame of {len(body)} bytes does not hold {count} states")
    code = "h" if word_bits == 16 else "i"
    values = struct.unpack_from("<" + code * (count * state_count), body, 5)
    rows = tuple(tuple(values[k * state_count:(k + 1) * state_count]) for k in range(count))
    return States(first_step=first_step, states=rows)


def parse_done(body: bytes) -> Done:
    if len(body) != 13:
        raise MessageError("DONE frame of the wrong length")
    seq, steps, last, frames = struct.unpack("<BIII", body)
    return Done(seq, steps, last, frames)


def parse_cost(body: bytes) -> CostReply:
    if len(body) != 22:
        raise MessageError("COST reply of the wrong length")
    steps, overhead, least, most, low, high = struct.unpack("<HIIIII", body)
    return CostReply(steps, overhead, least, most, high << 32 | low)


def parse_selftest(body: bytes) -> int:
    """The self-test's result: 0 passed, else the number of the first check that failed."""
    if len(body) != 2:
        raise MessageError("SELFTEST reply of the wrong length")
    return int.from_bytes(body, "little")


def parse_ok(body: bytes) -> tuple[int, int]:
    if len(body) != 2:
        raise MessageError("OK frame of the wrong length")
    return body[0], body[1]


def parse_error(body: bytes) -> BoardError:
    if len(body) < 2:
        raise MessageError("ERROR frame too short")
    return BoardError(body[0], body[1], body[2:].decode("ascii", "replace"))
