"""Layer L4: stream a run from a board and compare every state received against the golden
interpreter, bit for bit.

Each received state is checked by running the golden model from the board's previous received
state (or the start) over the steps between them, vectorised over all states at once; so a
trajectory whose every sample agrees equals the golden trajectory from the start. Batches lost on
the link are asked for again; whatever never arrives is bridged by the golden run, and a run that
cannot finish still reports everything it compared.
"""

from __future__ import annotations

import hashlib
import time
from contextlib import ExitStack
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import serial

from orbitfix.gen.errors import InputError
from orbitfix.gen.pipeline import Design
from orbitfix.gen.program import golden
from orbitfix.gen.program.integer_program import IntegerProgram
from orbitfix.verify.link.faults import FaultSpec, FaultyLink
from orbitfix.verify.link.firmware import write_firmware_sources
from orbitfix.verify.link.messages import Hello
from orbitfix.verify.link.session import BoardSession, LinkError, StreamResult
from orbitfix.verify.targets.board_build import FirmwareImage, build_firmware
from orbitfix.verify.targets.board_profiles import BoardProfile
from orbitfix.verify.targets.board_run import running
from orbitfix.verify.targets.host_build import cache_root

COST_STEPS = 1000


class WrongFirmwareError(InputError):
    """The board runs another model's step (or another word size): nothing is compared (exit 2)."""


@dataclass
class BoardStreamReport:
    """What a board run found: bit-exactness, the link's counters, the cost and size of a step."""

    board: str
    steps: int
    every: int
    kind: str = "host"  # the profile's kind: host, emulated or real
    hello: dict | None = None
    steps_compared: int = 0
    states_compared: int = 0
    first_mismatch: dict | None = None
    frames: dict = field(default_factory=dict)
    missing_states: int = 0
    conflicts: int = 0
    failure: str | None = None
    cost: dict | None = None
    selftest: int | None = None  # the generated self-test's result on the board (0: passed)
    size: dict = field(default_factory=dict)
    throughput: dict = field(default_factory=dict)
    faults: dict | None = None
    seconds: dict[str, float] = field(default_factory=dict)
    samples: dict[int, tuple[int, ...]] | None = None  # the received states, by step

    @property
    def bit_exact(self) -> bool:
        return self.first_mismatch is None and self.conflicts == 0 and self.states_compared > 0

    @property
    def ok(self) -> bool:
        return (self.bit_exact and self.failure is None and self.steps_compared == self.last_sample
                and self.selftest == 0)

    @property
    def last_sample(self) -> int:
        return self.steps - self.steps % self.every

    def to_json(self) -> dict:
        return {
            "ok": self.ok, "board": self.board, "kind": self.kind, "bit_exact": self.bit_exact,
            "steps": self.steps, "every": self.every, "steps_compared": self.steps_compared,
            "states_compared": self.states_compared, "first_mismatch": self.first_mismatch,
            "frames": self.frames, "missing_states": self.missing_states,
            "conflicting_states": self.conflicts, "link_failure": self.failure,
            "cost": self.cost, "selftest": self.selftest, "size": self.size,
            "throughput": self.throughput,
            "firmware": self.hello, "faults": self.faults, "seconds": self.seconds,
        }


def check_firmware(hello: Hello, program: IntegerProgram) -> None:
    """Refuse a board whose firmware computes another integer program."""
    wanted = program.fingerprint()
    if hello.fingerprint != wanted:
        raise WrongFirmwareError(
            f"the board runs integer program {hello.fingerprint}, but this model gives {wanted}: "
            "it holds firmware for another model, parameters or formats; rebuild and flash it")
    if hello.word_bits != program.word_bits or hello.state_count != len(program.state_names) \
            or tuple(hello.fraction_bits) != tuple(program.state_fraction_bits):
        raise WrongFirmwareError("the board's word size, state count or formats differ from the "
                                 "model's although the fingerprint agrees; rebuild the firmware")


def compare_samples(program: IntegerProgram, start: np.ndarray, samples: dict[int, tuple[int, ...]],
                    ) -> tuple[int, int, dict | None]:
    """Check every sample against golden from the sample before it. Returns (steps compared,
    states compared, first mismatch or None); steps compared ends at the last good sample
    before the first mismatch."""
    if not samples:
        return 0, 0, None
    steps = np.array(sorted(samples), dtype=np.int64)
    got = np.array([samples[s] for s in steps], dtype=np.int64)          # (m, n)
    before_steps = np.concatenate([[0], steps[:-1]])
    before = np.vstack([np.asarray(start, dtype=np.int64).reshape(1, -1), got[:-1]])
    gaps = steps - before_steps
    wrong = np.zeros(len(steps), dtype=bool)
    expected = np.empty_like(got)
    for gap in np.unique(gaps):
        rows = np.flatnonzero(gaps == gap)
        state = before[rows].T
        for _ in range(int(gap)):
            state = golden.step(program, state)
        expected[rows] = state.T
        wrong[rows] = np.any(state.T != got[rows], axis=1)
    bad = np.flatnonzero(wrong)
    if not bad.size:
        return int(steps[-1]), len(steps), None
    k = int(bad[0])
    mismatch = {
        "step": int(steps[k]),
        "from_step": int(before_steps[k]),
        "state_before": [int(v) for v in before[k]],
        "expected": [int(v) for v in expected[k]],
        "got": [int(v) for v in got[k]],
        "states": list(program.state_names),
    }
    return int(before_steps[k]), k, mismatch


def link_throughput(profile: BoardProfile, samples: int, bytes_received: int, seconds: float) -> dict:
    """States and bytes per second over the link, and the fraction of the line's byte rate they
    fill. That fraction means something only on a real UART (10 bits a byte: start, 8 data, stop;
    common practice): an emulator's UART and the host board's pty pass bytes as fast as the
    machine runs, whatever the profile's baud, so there it is null, with the reason."""
    rate = samples / seconds if seconds > 0 else 0.0
    byte_rate = bytes_received / seconds if seconds > 0 else 0.0
    throughput: dict = {"samples_per_second": rate, "bytes_per_second": byte_rate,
                        "fraction_of_link": None}
    if profile.kind == "real":
        throughput["fraction_of_link"] = byte_rate / (profile.baud / 10)
    elif profile.kind == "emulated":
        throughput["fraction_of_link_reason"] = (
            "an emulated UART is not paced by the profile's baud rate; the rate is the emulator's "
            "on this machine, not the board's")
    else:
        throughput["fraction_of_link_reason"] = "the host board's pseudo-terminal has no line rate"
    return throughput


def firmware_folder(built: Design, profile: BoardProfile) -> Path:
    """Where this design's firmware for this board is built (a cache keyed by what goes in)."""
    key = hashlib.sha256(f"{built.plan.program.fingerprint()}|{built.model.fingerprint()}|"
                         f"{profile.name}|{profile.source}".encode()).hexdigest()[:16]
    return cache_root() / "boards" / f"{profile.name}-{key}"


def build_for_board(built: Design, profile: BoardProfile) -> FirmwareImage:
    folder = firmware_folder(built, profile)
    sources = write_firmware_sources(built, folder / "src")
    return build_firmware(profile, sources, [folder / "src"], folder / "build")


def stream_on_board(built: Design, profile: BoardProfile, steps: int = 100_000, every: int = 1,
                    port: str | None = None, faults: FaultSpec | None = None,
                    image: FirmwareImage | None = None, silence_timeout: float = 5.0,
                    reply_timeout: float = 2.0, cost_steps: int = COST_STEPS) -> BoardStreamReport:
    """Build (unless given an image or a port), start or connect, check the firmware's identity,
    measure the cost of a step over ``cost_steps`` steps, stream ``steps`` steps and compare
    them. A short check may measure the cost over fewer steps: on an 8-bit part 1000 steps of a
    big network are over a hundred million simulated cycles."""
    program = built.plan.program
    report = BoardStreamReport(board=profile.name, steps=steps, every=every, kind=profile.kind,
                               faults=faults.to_json() if faults else None)
    started = time.perf_counter()
    if image is None and port is None:
        image = build_for_board(built, profile)
        report.seconds["build"] = time.perf_counter() - started
    if image is not None:
        report.size = {**image.size, "stack": image.stack_bytes}
    with ExitStack() as stack:
        url = stack.enter_context(running(profile, image, port))
        try:
            link = serial.serial_for_url(url, baudrate=profile.baud, timeout=0.02)
        except (serial.SerialException, ValueError, OSError) as exc:
            if port is not None:
                raise InputError(f"--port: cannot open {url!r}: {exc}") from None
            raise LinkError(f"cannot open the link to the board just started: {exc}") from None
        stack.callback(link.close)
        wire = FaultyLink(link, faults) if faults else link
        session = BoardSession(wire, reply_timeout=reply_timeout, silence_timeout=silence_timeout)
        stream: StreamResult | None = None
        try:
            hello = session.say_hello()
            report.hello = hello.to_json()
            check_firmware(hello, program)
            report.selftest = session.selftest()
            cost = session.cost(cost_steps)
            per_step = max(cost.total / max(cost.steps, 1) - cost.overhead, 0.0)
            report.cost = {"per_step": per_step, "least": max(cost.least - cost.overhead, 0),
                           "most": max(cost.most - cost.overhead, 0), "unit": profile.cost_unit,
                           "method": profile.cost_method, "steps_measured": cost.steps}
            stream = session.stream(steps, every)
            session.bye()
        except LinkError as exc:
            report.failure = str(exc)
        report.frames = session.counts.to_json()
        if isinstance(wire, FaultyLink):
            report.faults = {**(report.faults or {}), "injected": dict(wire.injected)}
    if stream is not None:
        report.failure = report.failure or stream.failure
        report.samples = stream.samples
        report.missing_states = len(stream.missing_steps())
        report.conflicts = len(stream.conflicts)
        compare_started = time.perf_counter()
        report.steps_compared, report.states_compared, report.first_mismatch = compare_samples(
            program, np.array(built.plan.initial_state, dtype=np.int64), stream.samples)
        report.seconds["stream"] = stream.seconds
        report.seconds["compare"] = time.perf_counter() - compare_started
        report.throughput = link_throughput(profile, len(stream.samples), stream.bytes_received,
                                            stream.seconds)
    report.seconds["total"] = time.perf_counter() - started
    return report
