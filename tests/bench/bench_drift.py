"""Benchmark of the long-run drift proof: compiled-C drift-run steps per second, the time of the
24-hour-equivalent run from every start, and the time of integer-period detection (Brent's
algorithm with the plain step). Prints figures; asserts nothing.

Run: python tests/bench/bench_drift.py [hours] [--quick]   (default 24; --quick: 32-bit words only,
0.01 h and 100,000 steps)
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from quick_mode import arguments, pick

from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.verify.proofs.drift import (
    build_drift_module,
    choose_starts,
    harness_statistics,
    integer_period,
    run_drift,
)


def main() -> None:
    given = arguments()
    hours = float(given[0]) if given else pick(24.0, 0.01)
    os.environ.setdefault("ORBITFIX_CACHE", tempfile.mkdtemp(prefix="orbitfix-bench-"))
    for word in pick((32, 16), (32,)):
        model = load_model("vanderpol").with_fixed_point(word_bits=word)
        built = design(model)
        started = time.perf_counter()
        host = build_drift_module(built)
        build = time.perf_counter() - started
        starts, _ = choose_starts(built)
        nominal = starts[0].state
        steps = pick(10_000_000, 100_000)
        stats = harness_statistics(host, nominal, steps, steps // 4, 2000, 0)
        rate = steps / stats.seconds
        started = time.perf_counter()
        period, seen_at = integer_period(host, nominal, budget=1 << 40)
        brent = time.perf_counter() - started
        print(f"vanderpol, {word}-bit words (build {build:.2f} s)")
        print(f"  drift run in C (traced step + statistics): {rate / 1e6:.1f} M steps/s")
        print(f"  Brent's algorithm alone (plain step): period {period} steps seen at step "
              f"{seen_at:,} in {1e3 * brent:.2f} ms")
        started = time.perf_counter()
        report = run_drift(built, hours=hours, host=host)
        whole = time.perf_counter() - started
        print(f"  {hours:g} h equivalent ({report.steps:,} steps) from {len(report.runs)} starts: "
              f"{whole:.1f} s in all, of which C runs {report.seconds['runs']:.1f} s, float step "
              f"map reference {report.seconds['step_map_reference']:.1f} s; verdict "
              f"{report.verdict}")
        for run in report.runs:
            print(f"    {run.start.name:<22} {run.seconds:6.2f} s  integer period "
                  f"{run.integer_period_steps} steps, entered at step {run.cycle_entered_at_step}")


if __name__ == "__main__":
    main()
