"""The link session against the host board: every injected fault kind is detected and counted,
nothing hangs, intact states are still compared, and the wrong firmware is refused."""

from __future__ import annotations

import contextlib
import dataclasses
import time
from pathlib import Path

import numpy as np
import pytest
import serial
from conftest import HIP

from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.verify.link import messages as msg
from orbitfix.verify.link.faults import parse_faults
from orbitfix.verify.link.frames import encode_frame
from orbitfix.verify.link.session import BoardSession, LinkError
from orbitfix.verify.proofs.board_stream import (
    WrongFirmwareError,
    build_for_board,
    compare_samples,
    stream_on_board,
)
from orbitfix.verify.targets.board_profiles import load_profile
from orbitfix.verify.targets.board_run import running

STEPS = 30_000
QUICK = {"silence_timeout": 0.5, "reply_timeout": 0.3}


@pytest.fixture(scope="module")
def host():
    return load_profile("host")


@pytest.fixture(scope="module")
def vdp16():
    return design(load_model("vanderpol").with_fixed_point(word_bits=16))


@pytest.fixture(scope="module")
def image16(host, vdp16):
    return build_for_board(vdp16, host)


@contextlib.contextmanager
def session_on(host, image, **options):
    with running(host, image) as url:
        port = serial.serial_for_url(url, timeout=0.02)
        try:
            yield BoardSession(port, **options)
        finally:
            port.close()


# Each kind of fault, the counter that must show it, and how the counter relates to the count
# of faults injected ("some": at least one; "all": exactly as many).
FAULT_KINDS = [
    ("flip=3e-4,seed=2", "flip", "corrupt", "some"),
    ("drop=3e-4,seed=3", "drop", "corrupt", "some"),
    ("dup=3e-4,seed=4", "dup", "corrupt", "some"),
    ("repeat=0.03,seed=5", "repeat", "duplicated", "all"),
    ("swap=0.03,seed=6", "swap", "out_of_order", "all"),
    ("delay=0.02,pause=0.8,seed=7", "delay", "timeouts", "some"),
]


@pytest.mark.parametrize(("spec", "kind", "counter", "how"), FAULT_KINDS)
def test_each_fault_is_detected_counted_and_recovered(host, vdp16, image16, spec, kind, counter,
                                                      how) -> None:
    started = time.monotonic()
    report = stream_on_board(vdp16, host, steps=STEPS, image=image16, faults=parse_faults(spec),
                             **QUICK)
    injected = report.faults["injected"][kind]
    assert injected > 0
    seen = report.frames[counter]
    assert seen == injected if how == "all" else seen > 0, (report.frames, report.faults)
    # lost batches were asked for again, and in the end every state was compared, bit-exact
    assert report.ok and report.bit_exact, report.to_json()
    assert report.steps_compared == STEPS and report.missing_states == 0
    if counter == "corrupt":
        assert report.frames["resent"] > 0
    if counter == "timeouts":  # a silence in a stream is made good by resending, in a request by a retry
        assert report.frames["resent"] + report.frames["retries"] > 0
    assert time.monotonic() - started < 60


def test_every_fault_at_once(host, vdp16, image16) -> None:
    spec = parse_faults("flip=1e-4,drop=1e-4,dup=1e-4,repeat=0.01,swap=0.01,delay=0.002,pause=0.6")
    report = stream_on_board(vdp16, host, steps=STEPS, image=image16, faults=spec, **QUICK)
    assert report.ok, report.to_json()
    assert report.steps_compared == STEPS


def test_a_cut_link_keeps_and_compares_what_arrived(host, vdp16, image16) -> None:
    report = stream_on_board(vdp16, host, steps=STEPS, image=image16,
                             faults=parse_faults("cut=40000"), **QUICK)
    assert report.faults["injected"]["cut"] == 1
    assert not report.ok and "cut" in report.failure
    assert report.bit_exact  # what did arrive is the golden model's
    assert 0 < report.steps_compared < STEPS
    assert report.to_json()["ok"] is False


def test_a_silent_link_fails_in_bounded_time() -> None:
    # loop:// hands our own frames back: no answer ever comes from a board
    port = serial.serial_for_url("loop://", timeout=0.02)
    session = BoardSession(port, reply_timeout=0.2, retries=2)
    started = time.monotonic()
    with pytest.raises(LinkError, match=r"did not answer .* after 3 tries \(1.4 s in all\)"):
        session.say_hello()  # 0.2 + 0.4 + 0.8 s: each retry waits twice as long
    assert time.monotonic() - started < 3.0
    assert session.counts.timeouts == 3 and session.counts.retries == 2


def test_firmware_for_another_model_is_refused(host, image16) -> None:
    other = design(load_model("vanderpol"))  # 32-bit words: another integer program
    with pytest.raises(WrongFirmwareError, match="another model"):
        stream_on_board(other, host, steps=100, image=image16, **QUICK)



def test_set_moves_a_runtime_parameter_on_the_board(tmp_path: Path, host) -> None:
    path = tmp_path / "hip.toml"
    path.write_text(HIP)
    hip = design(load_model(str(path)))
    program = hip.plan.program
    image = build_for_board(hip, host)
    bits = program.state_fraction_bits[3]
    target = round(8.0 * 2**bits)
    start = list(hip.plan.initial_state)
    start[3] = target
    with session_on(host, image, **QUICK) as session:
        session.say_hello()
        session.reset(None)
        session.set_parameter(0, target)
        result = session.stream(2000, every=1, start=tuple(start), reset=False)
        with pytest.raises(LinkError, match="refused"):
            session.set_parameter(1, 0)  # the model has one runtime parameter
        session.bye()
    assert result.failure is None
    compared, states, mismatch = compare_samples(program, np.array(start), result.samples)
    assert mismatch is None and compared == 2000 and states == 2000
    omega = [result.samples[s][2] for s in (1, 2000)]
    assert omega[0] > hip.plan.initial_state[2] and omega[1] == target  # ramped up to the target


def test_cost_is_measured_per_step(host, image16) -> None:
    with session_on(host, image16, **QUICK) as session:
        session.say_hello()
        session.reset(None)
        cost = session.cost(500)
        session.bye()
    assert cost.steps == 500 and 0 < cost.least <= cost.most and cost.total >= 500 * cost.least


def test_the_board_answers_a_malformed_request_with_an_error(host, image16) -> None:
    with session_on(host, image16, **QUICK) as session:
        session.say_hello()
        with pytest.raises(LinkError, match="wrong body length"):
            session.request(msg.RUN, b"\x01\x02", msg.DONE)
        with pytest.raises(LinkError, match="unknown message type"):
            session.request(0x42, b"", msg.OK)
        damaged = bytearray(encode_frame(msg.HELLO, 9))
        damaged[1] ^= 0x04
        session.port.write(bytes(damaged))
        deadline = time.monotonic() + 2
        frames = []
        while not frames and time.monotonic() < deadline:
            frames = session.reader.feed(session.port.read(64))
        assert frames[0].kind == msg.ERROR and msg.parse_error(frames[0].body).code == 1


def test_a_board_that_dies_at_start_is_a_link_failure_not_a_hang(host, vdp16, image16) -> None:
    dead = dataclasses.replace(host, start=("true",))  # the process ends at once
    started = time.monotonic()
    # Every try waits out its reply time, doubled each time (0.3 s gave 9.3 s in all, close to
    # the bound under load): a dead board never answers, so a shorter reply time checks the same.
    report = stream_on_board(vdp16, dead, steps=1000, image=image16,
                             **{**QUICK, "reply_timeout": 0.05})
    assert not report.ok and "did not answer" in report.failure
    assert report.states_compared == 0
    assert time.monotonic() - started < 10


class DamageFirstWrites:
    """A port whose first ``count`` writes arrive at the board with one bit flipped."""

    def __init__(self, port, count: int) -> None:
        self.port, self.count = port, count

    def write(self, data: bytes) -> int:
        if self.count > 0:
            self.count -= 1
            data = bytes([data[0] ^ 0x20, *data[1:]])
        return self.port.write(data)

    def __getattr__(self, name):
        return getattr(self.port, name)


def test_a_request_damaged_on_the_way_to_the_board_is_sent_again(host, image16) -> None:
    with running(host, image16) as url:
        port = serial.serial_for_url(url, timeout=0.02)
        session = BoardSession(DamageFirstWrites(port, 2), **QUICK)
        hello = session.say_hello()
        session.bye()
        port.close()
    assert hello.word_bits == 16
    # the board saw two damaged frames and said so; the host sent the request twice more
    assert session.counts.board_errors == 2 and session.counts.retries == 2
