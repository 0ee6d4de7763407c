"""Benchmark of the board link on the host board: streaming throughput (states and bytes per
second, the comparison's own cost beside it) and request round-trip latency, for a 32-bit and a
16-bit Van der Pol and the trot network, side by side in one run. Prints figures; asserts nothing.

Run: python tests/bench/bench_link.py [--quick]
"""

from __future__ import annotations

import os
import statistics
import tempfile
import time

import serial
from quick_mode import pick

from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.verify.link import messages as msg
from orbitfix.verify.link.faults import parse_faults
from orbitfix.verify.link.session import BoardSession
from orbitfix.verify.proofs.board_stream import build_for_board, stream_on_board
from orbitfix.verify.targets.board_profiles import load_profile
from orbitfix.verify.targets.board_run import running


def round_trips(profile, image, count: int) -> list[float]:
    """Seconds for one HELLO request and its reply, ``count`` times."""
    with running(profile, image) as url:
        port = serial.serial_for_url(url, timeout=0.02)
        session = BoardSession(port)
        session.say_hello()
        times = []
        for _ in range(count):
            started = time.perf_counter()
            session.request(msg.HELLO, b"", msg.HELLO_REPLY)
            times.append(time.perf_counter() - started)
        session.bye()
        port.close()
    return times


def main() -> None:
    os.environ.setdefault("ORBITFIX_CACHE", tempfile.mkdtemp(prefix="orbitfix-bench-"))
    steps = pick(200_000, 20_000)
    trips = pick(500, 50)
    host = load_profile("host")
    cases = [("vanderpol", 32), ("vanderpol", 16), ("quadruped_trot", 32)]
    print(f"host board, {steps:,} steps streamed per case (every state), {trips} round trips")
    print(f"{'model':<16}{'word':>5}{'build s':>9}{'stream s':>10}{'states/s':>12}{'bytes/s':>13}"
          f"{'compare s':>11}{'ns/step':>9}{'rtt median':>12}{'rtt p95':>10}")
    for name, word in cases:
        built = design(load_model(name).with_fixed_point(word_bits=word))
        started = time.perf_counter()
        image = build_for_board(built, host)
        build = time.perf_counter() - started
        report = stream_on_board(built, host, steps=steps, image=image)
        assert report.ok, report.to_json()  # a benchmark of a broken link would mean nothing
        rtt = sorted(round_trips(host, image, trips))
        p95 = rtt[int(0.95 * (len(rtt) - 1))]
        print(f"{name:<16}{word:>5}{build:>9.2f}{report.seconds['stream']:>10.2f}"
              f"{report.throughput['samples_per_second']:>12,.0f}"
              f"{report.throughput['bytes_per_second']:>13,.0f}{report.seconds['compare']:>11.2f}"
              f"{report.cost['per_step']:>9.1f}{1e3 * statistics.median(rtt):>10.3f}ms"
              f"{1e3 * p95:>8.3f}ms")
    built = design(load_model("vanderpol").with_fixed_point(word_bits=16))
    faults = parse_faults("flip=1e-4,drop=1e-4,dup=1e-4,repeat=0.01,swap=0.01")
    clean = stream_on_board(built, host, steps=steps)
    damaged = stream_on_board(built, host, steps=steps, faults=faults)
    print(f"\nsame 16-bit run with faults {faults.to_json()}:")
    print(f"  clean {clean.seconds['stream']:.2f} s, damaged {damaged.seconds['stream']:.2f} s "
          f"({damaged.seconds['stream'] / clean.seconds['stream']:.1f}x); ok={damaged.ok}; "
          f"frames {damaged.frames}")
    print("\nnanoseconds are wall time on a shared machine: a rough guide, not a CPU's cost")


if __name__ == "__main__":
    main()
