"""The host's side of a link to one board: requests with timeouts and retries, a streamed run
whose lost batches are asked for again, and counters for everything that went wrong.

Works on any pyserial port (``serial_for_url``) or anything with the same ``read``/``write``
(the fault-injecting link of ``faults.py``).
"""

from __future__ import annotations

import time
from collections import deque
from dataclasses import dataclass, field
from typing import Any

import serial

from orbitfix.gen.errors import OrbitfixError
from orbitfix.verify.link import messages as msg
from orbitfix.verify.link.frames import Frame, FrameReader, encode_frame

POLL_SECONDS = 0.02


class LinkError(OrbitfixError):
    """The board cannot be reached or stopped answering (a failed check: exit code 1)."""

    exit_code = 1


@dataclass
class FrameCounts:
    """What the host saw on the link, frame by frame."""

    received: int = 0       # good frames from the board
    corrupt: int = 0        # frames that failed COBS, CRC or length checks
    dropped: int = 0        # frames missing from the board's sequence with no damaged frame to show
    duplicated: int = 0     # frames whose sequence number had been seen already
    out_of_order: int = 0   # frames arriving after a later one
    resent: int = 0         # batches received again after the host asked for them
    timeouts: int = 0       # waits that ended in silence
    retries: int = 0        # requests sent again (no answer, or the board saw them damaged)
    board_errors: int = 0   # ERROR frames from the board
    malformed: int = 0      # good frames whose body did not fit their type

    def to_json(self) -> dict[str, int]:
        return dict(self.__dict__)


@dataclass
class StreamResult:
    """A streamed run: the sampled states by step number, and how the link behaved."""

    steps: int
    every: int
    start: tuple[int, ...] | None
    samples: dict[int, tuple[int, ...]] = field(default_factory=dict)
    conflicts: list[int] = field(default_factory=list)  # steps whose re-sent state differed
    failure: str | None = None
    seconds: float = 0.0
    bytes_received: int = 0

    @property
    def expected_steps(self) -> list[int]:
        return list(range(self.every, self.steps + 1, self.every))

    def missing_steps(self) -> list[int]:
        return [s for s in self.expected_steps if s not in self.samples]


class BoardSession:
    """One conversation with a board over ``port``."""

    def __init__(self, port: Any, reply_timeout: float = 2.0, silence_timeout: float = 5.0,
                 retries: int = 4) -> None:
        self.port = port
        self.reply_timeout = reply_timeout
        self.silence_timeout = silence_timeout
        self.retries = retries
        self.counts = FrameCounts()
        self.reader = FrameReader()
        self.hello: msg.Hello | None = None
        self._seq = 0
        self._last_seq: int | None = None
        self._recent: deque[int] = deque(maxlen=64)
        self._missing: set[int] = set()
        self._corrupt_seen = 0
        self._active: StreamResult | None = None
        try:
            self.port.timeout = POLL_SECONDS
        except (AttributeError, ValueError):
            pass

    # -- bytes and frames -------------------------------------------------------------------

    def _send(self, kind: int, body: bytes = b"") -> int:
        seq = self._seq
        self._seq = (self._seq + 1) % 256
        try:
            self.port.write(encode_frame(kind, seq, body))
        except (serial.SerialException, OSError) as exc:
            raise LinkError(f"cannot write to the board: {exc}") from None
        return seq

    def _poll(self) -> list[Frame]:
        """The good, in-sequence-or-explained frames that arrived within one short poll."""
        try:
            waiting = getattr(self.port, "in_waiting", 0) or 0
            data = self.port.read(max(1, min(waiting, 65536)))
        except (serial.SerialException, OSError) as exc:
            raise LinkError(f"the link to the board was lost: {exc}") from None
        if not data:
            return []
        frames = self.reader.feed(data)
        self.counts.corrupt = self.reader.corrupt
        return [f for f in frames if self._in_sequence(f)]

    def _in_sequence(self, frame: Frame) -> bool:
        """Account for the frame's sequence number; False for a frame to ignore (a duplicate)."""
        seq = frame.seq
        self._corrupt_seen += frame.damaged_before
        if seq in self._recent:
            self.counts.duplicated += 1
            return False
        self.counts.received += 1
        self._recent.append(seq)
        if self._last_seq is None:
            self._last_seq = seq
            return True
        ahead = (seq - self._last_seq) % 256
        if ahead >= 128:  # behind the newest frame: late, or filling a gap counted as dropped
            self.counts.out_of_order += 1
            if seq in self._missing:
                self._missing.discard(seq)
                self.counts.dropped -= 1
            return True
        lost = ahead - 1
        explained = min(lost, self._corrupt_seen)
        self.counts.dropped += lost - explained
        for k in range(1, ahead):
            gone = (self._last_seq + k) % 256
            if k > explained:
                self._missing.add(gone)
        self._corrupt_seen = 0
        self._last_seq = seq
        for k in range(1, 129):  # sequence numbers far behind can no longer be late arrivals
            self._missing.discard((seq + k) % 256)
        return True

    # -- requests ---------------------------------------------------------------------------

    def request(self, kind: int, body: bytes, reply: int, timeout: float | None = None) -> Frame:
        """Send a request and wait for its reply frame of type ``reply`` (up to ``timeout``,
        default the reply timeout); retries on silence or on an ERROR saying the board saw a
        damaged frame."""
        wait = self.reply_timeout if timeout is None else timeout
        waited = 0.0
        for attempt in range(self.retries + 1):
            if attempt:
                self.counts.retries += 1
            seq = self._send(kind, body)
            patience = wait * 2**attempt  # back off: a slow or stalled line gets longer each time
            waited += patience
            deadline = time.monotonic() + patience
            answered = False
            while not answered and time.monotonic() < deadline:
                for frame in self._poll():
                    if frame.kind == msg.ERROR:
                        error = self._board_error(frame)
                        if error is not None and (error.code == 1 or error.request_seq == seq):
                            if error.code not in (1, 5):
                                raise LinkError(f"the board refused the request: {error.describe()}")
                            answered = True  # damaged on the way: send it again
                            break
                    elif frame.kind == reply and (reply != msg.OK or frame.body[1:2] == bytes([seq])):
                        return frame
                    elif frame.kind == msg.STATES and self._active is not None:
                        self._take_states(frame, self._active, resend=False)  # late, still good
            if not answered:
                self.counts.timeouts += 1
            self.reader.discard()
        raise LinkError(f"the board did not answer request type 0x{kind:02x} after "
                          f"{self.retries + 1} tries ({waited:g} s in all)")

    def say_hello(self) -> msg.Hello:
        try:
            self.port.reset_input_buffer()
        except (AttributeError, serial.SerialException, OSError):
            pass
        frame = self.request(msg.HELLO, b"", msg.HELLO_REPLY)
        try:
            self.hello = msg.parse_hello(frame.body)
        except msg.MessageError as exc:
            raise LinkError(f"the board's HELLO reply is malformed: {exc}") from None
        return self.hello

    def reset(self, state: tuple[int, ...] | None) -> None:
        self.request(msg.RESET, msg.reset_body(state, self._word_bits()), msg.OK)

    def set_parameter(self, index: int, value: int) -> None:
        self.request(msg.SET, msg.set_body(index, value, self._word_bits()), msg.OK)

    def cost(self, steps: int = 1000) -> msg.CostReply:
        # the board is busy stepping before it answers: allow it the silence timeout
        frame = self.request(msg.COST, msg.cost_body(steps), msg.COST_REPLY,
                             timeout=max(self.reply_timeout, self.silence_timeout))
        try:
            return msg.parse_cost(frame.body)
        except msg.MessageError as exc:
            raise LinkError(f"the board's COST reply is malformed: {exc}") from None

    def selftest(self) -> int:
        """Run the firmware's generated self-test on the board: 0 passed, else the number of the
        first check that failed (see NAME_selftest.h)."""
        # the board steps the start-up path before it answers: allow it the silence timeout
        frame = self.request(msg.SELFTEST, b"", msg.SELFTEST_REPLY,
                             timeout=max(self.reply_timeout, self.silence_timeout))
        try:
            return msg.parse_selftest(frame.body)
        except msg.MessageError as exc:
            raise LinkError(f"the board's SELFTEST reply is malformed: {exc}") from None

    def bye(self) -> None:
        try:
            self._send(msg.BYE)
        except LinkError:
            pass

    def _word_bits(self) -> int:
        if self.hello is None:
            raise LinkError("say hello before anything else: the word size is not known yet")
        return self.hello.word_bits

    # -- streaming --------------------------------------------------------------------------

    def stream(self, steps: int, every: int = 1, start: tuple[int, ...] | None = None,
               rounds: int = 4, reset: bool = True) -> StreamResult:
        """Run ``steps`` steps from ``start`` (None: the model's initial state) and collect the
        state after every ``every``-th step. Lost batches are asked for again, up to ``rounds``
        times, by resetting the board to the last state received before them. A link that fails
        ends the run; the result keeps what arrived and says why.

        ``reset=False`` runs from the board's present state, which the caller then asserts is
        ``start`` (say, after SET); it is still used to ask again for lost batches."""
        if not 1 <= every <= 0xFFFF or steps < 1 or steps > 0xFFFFFFFF:
            raise ValueError("steps must be 1..2^32-1 and every 1..65535")
        result = StreamResult(steps=steps, every=every, start=start)
        started = time.monotonic()
        bytes_before = self.reader.bytes_seen
        self._active = result
        try:
            self._segment(result, start, 0, steps, resend=False, reset=reset)
            for _ in range(rounds):
                if not result.missing_steps():
                    break
                # a barrier: the board answers HELLO only after everything it sent before, so
                # every late batch is in before the missing ones are listed
                self.request(msg.HELLO, b"", msg.HELLO_REPLY)
                ranges = _ranges(result.missing_steps(), every, self._batch())
                if not ranges:
                    break
                for first, last in ranges:
                    before = first - every
                    state = result.samples.get(before) if before > 0 else start
                    if before > 0 and state is None:
                        continue
                    self._segment(result, state, max(before, 0), last - max(before, 0), resend=True)
        except LinkError as exc:
            result.failure = str(exc)
        finally:
            self._active = None
        result.seconds = time.monotonic() - started
        result.bytes_received = self.reader.bytes_seen - bytes_before
        return result

    def _batch(self) -> int:
        return self.hello.batch if self.hello else 1

    def _segment(self, result: StreamResult, state: tuple[int, ...] | None, first_step: int,
                 steps: int, resend: bool, reset: bool = True) -> None:
        """RESET to ``state`` (the board's state after ``first_step`` steps), RUN, collect."""
        if reset:
            self.reset(state)
        seq = self._send(msg.RUN, msg.run_body(steps, result.every, first_step))
        silent_since = time.monotonic()
        while True:
            frames = self._poll()
            if frames:
                silent_since = time.monotonic()
            for frame in frames:
                if frame.kind == msg.STATES:
                    self._take_states(frame, result, resend)
                elif frame.kind == msg.DONE:
                    try:
                        done = msg.parse_done(frame.body)
                    except msg.MessageError:
                        self.counts.malformed += 1
                        continue
                    if done.request_seq == seq:
                        return
                elif frame.kind == msg.ERROR:
                    error = self._board_error(frame)
                    if error is not None and (error.code == 1 or error.request_seq == seq):
                        return  # the RUN itself arrived damaged; the lost range is asked again
            if time.monotonic() - silent_since > self.silence_timeout:
                self.counts.timeouts += 1
                self.reader.discard()
                return

    def _board_error(self, frame: Frame) -> msg.BoardError | None:
        self.counts.board_errors += 1
        try:
            return msg.parse_error(frame.body)
        except msg.MessageError:
            self.counts.malformed += 1
            return None

    def _take_states(self, frame: Frame, result: StreamResult, resend: bool) -> None:
        count = self.hello.state_count if self.hello else 0
        try:
            batch = msg.parse_states(frame.body, count, self._word_bits())
        except msg.MessageError:
            self.counts.malformed += 1
            return
        if resend:
            self.counts.resent += 1
        for k, values in enumerate(batch.states):
            step = batch.first_step + k * result.every
            known = result.samples.get(step)
            if known is None:
                result.samples[step] = values
            elif known != values:
                result.conflicts.append(step)


def _ranges(missing: list[int], every: int, batch: int) -> list[tuple[int, int]]:
    """Missing sample steps grouped into (first, last) ranges; ranges closer than a few batches
    are merged, since one re-run covers both for the cost of a few extra states."""
    ranges: list[tuple[int, int]] = []
    join = 4 * batch * every
    for step in missing:
        if ranges and step - ranges[-1][1] <= join:
            ranges[-1] = (ranges[-1][0], step)
        else:
            ranges.append((step, step))
    return ranges
