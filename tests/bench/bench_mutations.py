"""Benchmark of the mutation test: the kill rate by kind of fault seeded into the generated C of
16-bit Van der Pol (killed by ``verify --sources``'s host proof, or shown equivalent by an
exhaustive comparison), and the time it takes. It runs the project's own test
(``tests/test_mutations.py``) and prints the table that test prints; it fails only when that
test does not run clean.

Run: python tests/bench/bench_mutations.py [--quick]   (--quick: the default sample of each kind)
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

from quick_mode import pick

TESTS = Path(__file__).resolve().parent.parent


def main() -> None:
    chosen = pick(("-m", "slow", "-k", "every_mutant_is_caught"),
                  ("-k", "a_sample_of_each_kind"))
    command = [sys.executable, "-m", "pytest", str(TESTS / "test_mutations.py"), "-q", "-s",
               "-p", "no:cacheprovider", *chosen]
    started = time.perf_counter()
    done = subprocess.run(command, capture_output=True, text=True, check=False)
    took = time.perf_counter() - started
    lines = done.stdout.splitlines()
    first = next((i for i, line in enumerate(lines) if "mutation kill rate" in line), None)
    if first is None:
        print(done.stdout[-2000:] + done.stderr[-1000:])
    else:
        title = lines[first][lines[first].index("mutation kill rate"):]
        table = [title] + [line for line in lines[first + 1:] if "  " in line and "passed" not in line]
        print("\n".join(table))
    last = lines[-1] if lines else ""
    print(f"{last} in {took:.1f} s (exit {done.returncode})")
    raise SystemExit(done.returncode)  # a test that no longer runs fails the benchmark too


if __name__ == "__main__":
    main()
