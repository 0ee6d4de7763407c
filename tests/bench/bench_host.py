"""Benchmark of the host side: compiled C steps per second, golden-verified steps per second,
and the whole bit-exact proof, measured side by side in one run. Prints figures; asserts nothing.

Run: python tests/bench/bench_host.py [--quick]   (--quick: 10,000 steps and states, one run)
"""

from __future__ import annotations

import os
import statistics
import tempfile
import time

import numpy as np
from quick_mode import pick

from orbitfix.gen.c.emit import render_host_harness, render_model, render_trace
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.verify.proofs.bit_exact import _c_run, prove_bit_exact
from orbitfix.verify.targets.host_build import build_host_module

SIZE = pick(1_000_000, 10_000)
RUNS = pick(3, 1)


def best(seconds: list[float]) -> float:
    return statistics.median(seconds)


def main() -> None:
    os.environ.setdefault("ORBITFIX_CACHE", tempfile.mkdtemp(prefix="orbitfix-bench-"))
    started = time.perf_counter()
    built = design(load_model("vanderpol"))
    design_seconds = time.perf_counter() - started
    files = render_model(built.model, built.timing, built.integrator, built.plan)
    files.update(render_trace(built.model, built.timing, built.integrator, built.plan))
    started = time.perf_counter()
    harness = render_host_harness(built.model, built.plan.program)
    host = build_host_module(files, harness, "vanderpol.h")
    build_seconds = time.perf_counter() - started
    program = built.plan.program
    initial = np.array(built.plan.initial_state, dtype=np.int64)

    steps = 2 * SIZE
    c_times = []
    for _ in range(RUNS):
        t = time.perf_counter()
        _c_run(host, initial, steps)
        c_times.append(time.perf_counter() - t)
    batch = np.repeat(initial.reshape(-1, 1), SIZE, axis=1)
    golden_times = []
    for _ in range(RUNS):
        t = time.perf_counter()
        golden.step(program, batch)
        golden_times.append(time.perf_counter() - t)
    proof_times = []
    typical = np.array([1 << 27, 1 << 27])
    for _ in range(RUNS):
        t = time.perf_counter()
        report = prove_bit_exact(program, host, initial, typical, states=SIZE, steps=SIZE)
        proof_times.append(time.perf_counter() - t)
        assert report.bit_exact
    print("host side, Van der Pol mu=1, rk4, 32-bit words "
          f"({len(program.ops)} operations per step)")
    print(f"  design (analysis, timing, plan):       {design_seconds:8.3f} s")
    print(f"  host build (strict flags + cffi):      {build_seconds:8.3f} s")
    print(f"  compiled C, incl. recording states:   {steps / best(c_times) / 1e6:8.2f} M steps/s")
    print(f"  golden interpreter, batch of {SIZE:.0e}:   {SIZE / best(golden_times) / 1e6:8.2f} M steps/s")
    print(f"  bit-exact proof ({SIZE:.0e} states + {SIZE:.0e} trajectory steps): {best(proof_times):.3f} s")
    print(f"    of which random states {report.seconds['random_states']:.3f} s, "
          f"trajectory {report.seconds['trajectory']:.3f} s")


if __name__ == "__main__":
    main()
