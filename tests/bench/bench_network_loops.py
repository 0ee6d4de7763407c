"""Benchmark of networks as loops (issue 10, item 2): the four-limb gaits' firmware on the ATmega328P
and the Cortex-M0 (microbit), each with the board's streaming harness, as `orbitfix board` builds
it: the image's text, data and bss, the deepest stack, and the step's own flash (the step and the
functions it calls, library helpers included); then the accuracy of each design's integer map.

Goal: `quadruped_trot` at 16 bits under 8 KB of flash and 512 B of stack on both parts. Before the
loop form (main at the start of the change): AVR text 20,450 B, stack 357 B; M0 text 8,964 B, stack
448 B. Prints figures; asserts nothing (the sizes are checked in tests/test_network_loops.py, the
bits on the boards in tests/test_boards_streaming.py).

Run: python tests/bench/bench_network_loops.py [--quick]
"""

from __future__ import annotations

from bench_boards import function_sizes
from bench_lean_step import integer_map_accuracy
from quick_mode import pick

from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.verify.proofs.board_stream import build_for_board
from orbitfix.verify.targets.board_profiles import load_profile
from orbitfix.verify.targets.cross_build import reachable_functions

BOARDS = ("atmega328p", "microbit")


def main() -> None:
    cases = pick([("quadruped_trot", 16), ("quadruped_walk", 16), ("quadruped_trot", 32)],
                 [("quadruped_trot", 16)])
    print("firmware with the streaming harness, -O2 (as `orbitfix board` builds it); step = the "
          "step function and everything it calls")
    header = (f"{'model':16} {'word':>4} {'board':11} {'text':>7} {'data':>5} {'bss':>5} "
              f"{'stack':>5} {'step':>6} {'loops':>9}  goal (text < 8192, stack < 512)")
    print(header)
    print("-" * len(header))
    designs = {}
    for name, word in cases:
        built = design(load_model(name).with_fixed_point(word_bits=word))
        designs[(name, word)] = built
        program = built.plan.program
        for board in BOARDS:
            profile = load_profile(board)
            if profile.missing_tools():
                print(f"{name:16} {word:4} {board:11} skipped: {', '.join(profile.missing_tools())}")
                continue
            image = build_for_board(built, profile)
            folder = image.path.parent
            sizes = function_sizes(profile, image.path)
            step = sum(sizes.get(f, 0) for f in reachable_functions(folder, f"{name}_step"))
            size = image.size
            stack = image.stack_bytes
            met = size["text"] < 8192 and stack is not None and stack < 512
            print(f"{name:16} {word:4} {board:11} {size['text']:7} {size['data']:5} "
                  f"{size['bss']:5} {stack if stack is not None else '-':>5} {step:6} "
                  f"{len(program.repeats):>3} repeats  {'met' if met else 'not met'}")
    print()
    print("accuracy of the integer map's cycle against the continuous one (from the initial state):")
    for (name, word), built in designs.items():
        print(f"  {name} {word}-bit: {integer_map_accuracy(built)}")


if __name__ == "__main__":
    main()
