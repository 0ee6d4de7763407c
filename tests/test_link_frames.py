"""The link's framing, checked against outside references: the CRC catalogue's check value and
COBS as Cheshire and Baker define it; then frames, messages and the fault-injecting link."""

from __future__ import annotations

import random

import pytest
import serial

from orbitfix.gen.errors import InputError
from orbitfix.verify.link import cobs
from orbitfix.verify.link import messages as msg
from orbitfix.verify.link.crc import crc16
from orbitfix.verify.link.faults import FaultSpec, FaultyLink, parse_faults
from orbitfix.verify.link.frames import MAX_BODY, FrameError, FrameReader, decode_frame, encode_frame


def test_crc_gives_the_catalogue_check_value() -> None:
    # Source: the CRC catalogue (Greg Cook, "Catalogue of parametrised CRC algorithms"),
    # entry CRC-16/IBM-3740 (alias CRC-16/CCITT-FALSE): check = 0x29b1 for ASCII "123456789".
    assert crc16(b"123456789") == 0x29B1
    # Same entry: init = 0xffff, xorout = 0, so no data leaves the initial value.
    assert crc16(b"") == 0xFFFF
    # Continuing a CRC over a second piece equals one CRC over the whole (common practice).
    assert crc16(b"6789", crc16(b"12345")) == 0x29B1


# Cheshire and Baker, "Consistent Overhead Byte Stuffing", IEEE/ACM Transactions on Networking
# 7(2), 1999, section III: each block starts with a code byte n; n = 0x01..0xFE stands for n-1
# data bytes followed by a zero, n = 0xFF for 254 data bytes not followed by a zero, and the zero
# the encoder appends to every packet is removed on decoding. The worked cases below follow that
# table (the byte values are the widely reproduced examples, written from memory).
COBS_EXAMPLES = [
    (bytes([0x00]), bytes([0x01, 0x01])),
    (bytes([0x00, 0x00]), bytes([0x01, 0x01, 0x01])),
    (bytes([0x11, 0x22, 0x00, 0x33]), bytes([0x03, 0x11, 0x22, 0x02, 0x33])),
    (bytes([0x11, 0x22, 0x33, 0x44]), bytes([0x05, 0x11, 0x22, 0x33, 0x44])),
    (bytes([0x11, 0x00, 0x00, 0x00]), bytes([0x02, 0x11, 0x01, 0x01, 0x01])),
    (bytes(range(1, 255)), bytes([0xFF, *range(1, 255)])),
    (bytes(range(0, 255)), bytes([0x01, 0xFF, *range(1, 255)])),
    (bytes(range(1, 256)), bytes([0xFF, *range(1, 255), 0x02, 0xFF])),
    (bytes([*range(2, 256), 0x00]), bytes([0xFF, *range(2, 256), 0x01, 0x01])),
    (bytes([*range(3, 256), 0x00, 0x01]), bytes([0xFE, *range(3, 256), 0x02, 0x01])),
]


@pytest.mark.parametrize(("data", "encoded"), COBS_EXAMPLES)
def test_cobs_matches_the_worked_examples(data: bytes, encoded: bytes) -> None:
    assert cobs.encode(data) == encoded
    assert cobs.decode(encoded) == data


def test_cobs_round_trips_and_never_emits_a_zero() -> None:
    rng = random.Random(5)
    for size in (0, 1, 253, 254, 255, 256, 508, 509, 1000):
        for zeros in (0.0, 0.05, 0.5, 1.0):
            data = bytes(0 if rng.random() < zeros else rng.randint(1, 255) for _ in range(size))
            encoded = cobs.encode(data)
            assert 0 not in encoded
            # the paper's bound: at most one byte in 254, rounded up, plus one
            assert len(encoded) <= size + size // 254 + 1
            assert cobs.decode(encoded) == data


def test_cobs_refuses_broken_encodings() -> None:
    with pytest.raises(cobs.CobsError):
        cobs.decode(bytes([0x05, 0x11, 0x22]))  # block runs past the end
    with pytest.raises(cobs.CobsError):
        cobs.decode(bytes([0x03, 0x11, 0x00]))


def test_frames_round_trip() -> None:
    rng = random.Random(7)
    for _ in range(300):
        body = bytes(rng.randrange(256) for _ in range(rng.randrange(MAX_BODY + 1)))
        kind, seq = rng.randrange(256), rng.randrange(256)
        wire = encode_frame(kind, seq, body)
        assert wire[-1] == 0 and 0 not in wire[:-1]
        frame = decode_frame(wire[:-1])
        assert (frame.kind, frame.seq, frame.body) == (kind, seq, body)


def test_every_single_bit_flip_in_a_frame_is_caught() -> None:
    wire = encode_frame(msg.STATES, 9, bytes(range(40)))[:-1]
    for position in range(len(wire)):
        for bit in range(8):
            damaged = bytearray(wire)
            damaged[position] ^= 1 << bit
            if 0 in damaged:
                continue  # a new delimiter: the reader splits there, and both halves fail
            with pytest.raises(FrameError):
                decode_frame(bytes(damaged))


def test_reader_resynchronises_after_garbage_and_damage() -> None:
    reader = FrameReader()
    good = [encode_frame(msg.OK, k, bytes([1, k])) for k in range(3)]
    damaged = bytearray(good[1])
    damaged[3] ^= 0x10
    stream = b"\x17\x99garbage\x00" + good[0] + bytes(damaged) + b"\x00" + good[2]
    frames = []
    for k in range(0, len(stream), 5):  # any split into reads gives the same frames
        frames += reader.feed(stream[k:k + 5])
    assert [f.seq for f in frames] == [0, 2]
    assert reader.corrupt == 2
    assert frames[1].damaged_before == 1


def test_messages_read_what_the_board_writes() -> None:
    body = bytes([1, 16, 16, 2, 0, 30]) + b"dbea642a6a642413" + bytes([11, 11]) + b"avr, orbitfix"
    hello = msg.parse_hello(body)
    assert (hello.word_bits, hello.int_bits, hello.state_count, hello.batch) == (16, 16, 2, 30)
    assert hello.fingerprint == "dbea642a6a642413" and hello.fraction_bits == (11, 11)
    assert hello.build == "avr, orbitfix"
    states = [(1024, -20), (-32768, 32767)]
    body = (7).to_bytes(4, "little") + bytes([2]) + b"".join(msg.pack_state(s, 16) for s in states)
    batch = msg.parse_states(body, 2, 16)
    assert batch.first_step == 7 and batch.states == tuple(states)
    with pytest.raises(msg.MessageError):
        msg.parse_states(body[:-1], 2, 16)


@pytest.mark.parametrize(("text", "words"), [
    ("flip", "NAME=VALUE"), ("wobble=0.1", "NAME one of"), ("flip=2", "between 0 and 1"),
    ("cut=1.5", "whole number"), ("drop=x", "not a number"), ("pause=100", "0 and 60"),
])
def test_bad_fault_specs_are_refused(text: str, words: str) -> None:
    with pytest.raises(InputError, match=words):
        parse_faults(text)


def test_fault_spec_reads_every_kind() -> None:
    spec = parse_faults("flip=1e-4, drop=1e-5,dup=0,repeat=0.01,swap=0.02,delay=0.1,pause=0.2,cut=500,seed=3")
    assert spec == FaultSpec(flip=1e-4, drop=1e-5, dup=0.0, repeat=0.01, swap=0.02, delay=0.1,
                             pause=0.2, cut=500, seed=3)


@pytest.mark.parametrize("kind", ["flip", "drop", "dup"])
def test_damaged_bytes_never_pass_as_good_frames(kind: str) -> None:
    sent = [encode_frame(msg.STATES, k % 256, bytes([k % 251 + 1]) * 60) for k in range(2000)]
    spec = FaultSpec(**{kind: 2e-3, "seed": 11})
    loop = serial.serial_for_url("loop://", timeout=0.01)
    link = FaultyLink(loop, spec)
    reader = FrameReader()
    got = []
    for frame in sent:
        link.write(frame)  # damaged on the way in, read back plainly
        got += reader.feed(loop.read(loop.in_waiting))
    assert link.injected[kind] > 10
    assert reader.corrupt > 0
    # no damaged frame passes as good: each one received is, byte for byte, a frame that was sent
    sent_set = set(sent)
    assert all(encode_frame(f.kind, f.seq, f.body) in sent_set for f in got)
    assert len(got) < len(sent)


def test_repeated_and_swapped_frames_arrive_whole() -> None:
    sent = [encode_frame(msg.STATES, k, bytes([k + 1]) * 10) for k in range(200)]
    loop = serial.serial_for_url("loop://", timeout=0.01)
    link = FaultyLink(loop, FaultSpec(repeat=0.05, swap=0.05, seed=2))
    reader = FrameReader()
    seqs = []
    for frame in sent:
        loop.write(frame)
        seqs += [f.seq for f in reader.feed(link.read(link.in_waiting))]
    while chunk := link.read(4096):  # nothing more arrives: a held frame comes out
        seqs += [f.seq for f in reader.feed(chunk)]
    assert reader.corrupt == 0 and sorted(set(seqs)) == list(range(200))
    assert len(seqs) == 200 + link.injected["repeat"]
    assert seqs != sorted(seqs) and link.injected["swap"] > 0


def test_a_cut_link_raises_instead_of_hanging() -> None:
    loop = serial.serial_for_url("loop://", timeout=0.01)
    link = FaultyLink(loop, FaultSpec(cut=30))
    loop.write(bytes(100))
    assert len(link.read(100)) == 30
    with pytest.raises(serial.SerialException):
        link.read(1)
    with pytest.raises(serial.SerialException):
        link.write(b"\x00")
