"""Every built-in model at 16- and 32-bit words through the host proof and the board streams
(issue 10: "the board and host proofs pass for every built-in at both word sizes"), as one table:
the design's seconds (the analysis once per model, shared by both word sizes), the host proof's
verdict, and on the Cortex-M3 (mps2-an385) and the ATmega328P each stream's verdict, the image's
text, data, bss and deepest stack in bytes, and the step's cost in the board's unit; a model that
does not fit the ATmega328P's 32 KB of flash is named with the bytes it is over.

Prints figures; asserts nothing (tests/test_every_builtin.py checks the same at its own size).
Full size: 20,000 random states and trajectory steps on the host, 2,000 streamed steps a board;
--quick: Van der Pol alone, 500 and 100 (about 10 s).

Measured 2026-12-03 at full size on the shared, loaded two-core machine (wall seconds): designs
43.6, host proofs 62.5, firmware sources 57.4 (golden over each self-test's start-up path, written
once for both boards), mps2-an385 47.9, ATmega328P 155.7: about 6 minutes. Every built-in was
bit-exact at both word sizes on the host and on the mps2-an385, and on the ATmega328P but for
three that do not fit its flash: phase_chain at 16 bits (2,514 B over) and at 32 bits (58,740 B
over), walking_platform at 32 bits (17,794 B over).

Run: python tests/bench/bench_every_builtin.py [--quick]
"""

from __future__ import annotations

import re
import tempfile
import time
from pathlib import Path

from quick_mode import pick

from orbitfix.gen.analysis.summary import analyse
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.model_file import builtin_names, load_model
from orbitfix.gen.pipeline import Design, design
from orbitfix.verify.link.firmware import write_firmware_sources
from orbitfix.verify.proofs.board_stream import stream_on_board
from orbitfix.verify.proofs.host_check import check_on_host
from orbitfix.verify.targets.board_build import build_firmware
from orbitfix.verify.targets.board_profiles import BoardProfile, load_profile

BOARDS = ("mps2-an385", "atmega328p")
HOST_STATES = pick(20_000, 500)
BOARD_STEPS = pick(2_000, 100)
COST_STEPS = pick(1000, 10)


def on_board(built: Design, profile: BoardProfile, sources: list[Path], folder: Path,
             ) -> tuple[str, str, float]:
    """(verdict, sizes, seconds) of one stream of the firmware ``sources`` (written once for both
    boards: writing them runs golden over the start-up path for the self-test, seconds for the
    big networks); the verdict names a part the image does not fit."""
    if profile.missing_tools():
        return "skipped: " + ", ".join(profile.missing_tools()), "", 0.0
    started = time.perf_counter()
    try:
        image = build_firmware(profile, sources, [sources[0].parent], folder / profile.name)
    except InputError as error:
        over = re.search(r"does not fit the board's (\w+): ([\d,]+) bytes too many", str(error))
        if over is None:
            raise
        return f"does not fit ({over.group(1)} over by {over.group(2)} B)", "", \
            time.perf_counter() - started
    report = stream_on_board(built, profile, steps=BOARD_STEPS, image=image, cost_steps=COST_STEPS)
    size = report.size
    verdict = "bit-exact" if report.ok else ("mismatch" if report.first_mismatch else
                                             f"failed ({report.failure or 'self-test'})")
    ram = size["data"] + size["bss"] + (size["stack"] or 0)
    sizes = (f"{size['text']:6,} {size['data']:4} {size['bss']:5} {size['stack']:5} "
             f"ram {ram:5,}  {report.cost['per_step']:9,.0f}")
    return verdict, sizes, time.perf_counter() - started


def main() -> None:
    names = pick(builtin_names(), ["vanderpol"])
    profiles = [load_profile(b) for b in BOARDS]
    print(f"host proof: {HOST_STATES:,} random states and trajectory steps (no sanitizer); "
          f"boards: {BOARD_STEPS:,} steps streamed, every state compared with golden")
    print("sizes in bytes: text data bss stack, ram = data + bss + stack; cost a step: "
          + ", ".join(f"{p.name} in {p.cost_unit}" for p in profiles))
    totals = {"design": 0.0, "host": 0.0, "sources": 0.0, **{b: 0.0 for b in BOARDS}}
    with tempfile.TemporaryDirectory() as work:
        for name in names:
            table(name, profiles, Path(work), totals)
    print("seconds in all: " + ", ".join(f"{k} {v:.1f}" for k, v in totals.items()))


def table(name: str, profiles: list[BoardProfile], work: Path, totals: dict[str, float]) -> None:
    """Print one model's rows, at both word sizes, adding its seconds to ``totals``."""
    started = time.perf_counter()
    analysis = analyse(load_model(name))
    shared = time.perf_counter() - started
    totals["design"] += shared
    for bits in (16, 32):
        started = time.perf_counter()
        built = design(load_model(name).with_fixed_point(word_bits=bits), analysis)
        seconds = time.perf_counter() - started
        totals["design"] += seconds
        started = time.perf_counter()
        host = check_on_host(built, states=HOST_STATES, steps=HOST_STATES, sanitized_states=0)
        host_seconds = time.perf_counter() - started
        totals["host"] += host_seconds
        print(f"{name} {bits}-bit: design {seconds:.1f} s (+ analysis {shared:.1f} s shared), "
              f"{len(built.plan.program.ops)} operations; host "
              f"{'bit-exact' if host.report.bit_exact else 'MISMATCH'} ({host_seconds:.1f} s)")
        started = time.perf_counter()
        folder = work / f"{name}-{bits}"
        sources = write_firmware_sources(built, folder / "src")
        totals["sources"] += time.perf_counter() - started
        for profile in profiles:
            verdict, sizes, board_seconds = on_board(built, profile, sources, folder)
            totals[profile.name] += board_seconds
            print(f"    {profile.name:11} {verdict:36} {sizes}  ({board_seconds:.1f} s)")


if __name__ == "__main__":
    main()
