"""Benchmark of the step's cost against a hand-written one: the generated Van der Pol RK4 step at 32
and 16 bits beside the hand-written 32-bit integer reference (tests/bench/vdp_reference.c), on
the emulated Cortex-M3 (mps2-an385) and Cortex-M0 (microbit), at -O2 and -Os, in instructions per
step (QEMU -icount), with the step's flash, each with half-up rounding everywhere and with mixed
rounding (truncate where the plan finds the error carried into the next state far below a state's
LSB); then the integer map's accuracy (period and amplitude error of its cycle against the
continuous one), which a leaner step must not make worse.

Goals (issue 10): 32-bit within 1.10x of the reference at -O2 on both cores and within 1.5x at
-Os; 16-bit at least 3x cheaper than 32-bit on the M0. Prints figures; asserts only that each
board's state after the measured steps equals the golden model's.

Run: python tests/bench/bench_lean_step.py [--quick]
"""

from __future__ import annotations

import re
import tempfile
from pathlib import Path

import numpy as np
from bench_boards import HERE, function_sizes, run_emulated
from quick_mode import pick

from orbitfix.gen.c.emit import render_model
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design, program_states
from orbitfix.gen.program import golden
from orbitfix.gen.study.discrete_cycle import integer_cycle
from orbitfix.verify.targets.board_profiles import all_profiles
from orbitfix.verify.targets.cross_build import cross_build, reachable_functions

BOARDS = ("mps2-an385", "microbit")
LEVELS = ("-O2", "-Os")
ROUNDINGS = ("half-up", "mixed")


def main() -> None:
    steps = pick(200, 20)
    work = Path(tempfile.mkdtemp(prefix="orbitfix-bench-lean-"))
    base = design(load_model("vanderpol"))
    designs = {(rounding, word): (base if (rounding, word) == ("half-up", 32) else design(
        base.model.with_fixed_point(word_bits=word, rounding=rounding), analysis=base.analysis))
        for rounding in ROUNDINGS for word in (32, 16)}
    folders = {}
    for key, built in designs.items():
        folders[key] = work / f"generated-{key[0]}-{key[1]}"
        folders[key].mkdir()
        for name, text in render_model(built.model, built.timing, built.integrator,
                                       built.plan).items():
            (folders[key] / name).write_text(text)
    print(f"one step of Van der Pol (mu = 1, RK4, 1 kHz), {steps} steps per kind; instructions per "
          "step under QEMU -icount;\nflash = the step and every function it calls (library helpers "
          "included); rounding: half-up everywhere, or mixed (truncate where the plan found the\n"
          "error carried into the next state far below a state's LSB)")
    header = (f"{'board':11} {'cpu':10} {'level':5} {'rounding':8} {'gen 32':>7} {'gen 16':>7} "
              f"{'ref 32':>7} {'32/ref':>6} {'16/ref':>6} {'32/16':>6} {'flash 32/16/ref':>16}  golden")
    print(header)
    print("-" * len(header))
    profiles = {p.name: p for p in all_profiles()}
    for board in BOARDS:
        profile = profiles[board]
        if profile.missing_tools():
            print(f"{board:11} skipped: {', '.join(profile.missing_tools())} not installed "
                  f"({profile.install_hint()})")
            continue
        for level in LEVELS:
            for rounding in ROUNDINGS:
                cost, flash, same = {}, {}, True
                for word in (32, 16):
                    built = designs[(rounding, word)]
                    folder = work / f"{board}{level}{rounding}{word}"
                    sources = [folders[(rounding, word)] / "vanderpol.c", HERE / "vdp_reference.c",
                               HERE / "vdp_reference_float.c", HERE / "bench_main.c"]
                    image = cross_build(profile, sources, [folders[(rounding, word)], HERE],
                                        folder, level, {"BENCH_STEPS": str(steps)})
                    text = run_emulated(profile, image.path)
                    for kind in ("generated", "reference"):
                        found = re.search(rf"^{kind} (\d+) (\d+)$", text, re.MULTILINE)
                        value = int(found.group(1)) / int(found.group(2)) if found else float("nan")
                        cost[(kind, word)] = value
                    sizes = function_sizes(profile, image.path)
                    for kind, function in (("generated", "vanderpol_step"),
                                           ("reference", "vdp_reference_step")):
                        flash[(kind, word)] = sum(sizes.get(f, 0)
                                                  for f in reachable_functions(folder, function))
                    expected = golden.run(built.plan.program, np.array(built.plan.initial_state,
                                                                       dtype=np.int64), steps)[-1]
                    state = re.search(r"^state (\d+) (\d+)$", text, re.MULTILINE)
                    mask = (1 << 32) - 1
                    same &= bool(state) and [int(state.group(1)), int(state.group(2))] == [
                        int(v) & mask for v in expected]
                g32, g16 = cost[("generated", 32)], cost[("generated", 16)]
                ref = cost[("reference", 32)]
                sizes_text = (f"{flash[('generated', 32)]}/{flash[('generated', 16)]}/"
                              f"{flash[('reference', 32)]}")
                print(f"{board:11} {profile.cpu:10} {level:5} {rounding:8} {g32:7.1f} {g16:7.1f} "
                      f"{ref:7.1f} {g32 / ref:6.2f} {g16 / ref:6.2f} {g32 / g16:6.2f} "
                      f"{sizes_text:>16}  {'same bits' if same else 'DIFFERENT'}")
    print()
    print("accuracy of the integer map's cycle against the continuous one (from the initial state):")
    for (rounding, word), built in designs.items():
        print(f"  {word}-bit, {rounding}: {integer_map_accuracy(built)}")


def integer_map_accuracy(built) -> str:
    """The integer map's period and amplitude errors against the continuous cycle, from the
    initial state (also printed by bench_network_loops)."""
    cycle = built.analysis.cycle
    stepped = integer_cycle(built.plan.program, program_states(built.model, cycle.samples),
                            built.timing.steps_per_cycle, cycle.state_min, cycle.state_max,
                            turns=cycle.turns)
    return (f"period error {stepped.period_error_ppm:+.3f} ppm, amplitude error "
            f"{100 * stepped.amplitude_error:.4f} %")


if __name__ == "__main__":
    main()
