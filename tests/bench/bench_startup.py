"""Start-up time of the command line: ``orbitfix models`` and ``orbitfix --help`` against
``python -c "import numpy"`` (and a bare ``python -c pass``), measured side by side, in turns, so
that a busy machine slows all of them alike. Prints medians and the ratios to the numpy import; the
goal is within 3x of it. Asserts nothing.

Run: python tests/bench/bench_startup.py [--quick]   (--quick: 3 rounds instead of 21)
"""

from __future__ import annotations

import shutil
import statistics
import subprocess
import sys
import time
from pathlib import Path

from quick_mode import pick

ROUNDS = pick(21, 3)
GOAL = 3.0


def orbitfix_command() -> list[str]:
    """The installed console script beside this Python, else the module run by this Python."""
    script = Path(sys.executable).with_name("orbitfix")
    if script.is_file():
        return [str(script)]
    found = shutil.which("orbitfix")
    return [found] if found else [sys.executable, "-m", "orbitfix.verify.cli.main"]


def cases() -> dict[str, list[str]]:
    command = orbitfix_command()
    return {
        "python -c pass": [sys.executable, "-c", "pass"],
        'python -c "import numpy"': [sys.executable, "-c", "import numpy"],
        "orbitfix --help": [*command, "--help"],
        "orbitfix models": [*command, "models"],
    }


def seconds_of(argv: list[str]) -> float:
    started = time.perf_counter()
    subprocess.run(argv, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True)
    return time.perf_counter() - started


def main() -> None:
    runs = cases()
    times: dict[str, list[float]] = {label: [] for label in runs}
    for argv in runs.values():  # one untimed round: file-system caches warm for every case alike
        seconds_of(argv)
    for _ in range(ROUNDS):
        for label, argv in runs.items():
            times[label].append(seconds_of(argv))
    medians = {label: statistics.median(values) for label, values in times.items()}
    numpy = medians['python -c "import numpy"']
    print(f"start-up, median of {ROUNDS} rounds taken in turns (goal: orbitfix within {GOAL:g}x of "
          "the numpy import)")
    print(f"  {'command':<26} {'median':>9}  {'min':>9}  {'x numpy import':>14}")
    for label, median in medians.items():
        print(f"  {label:<26} {1000 * median:7.1f} ms  {1000 * min(times[label]):7.1f} ms  "
              f"{median / numpy:13.2f}x")
    worst = max(medians["orbitfix --help"], medians["orbitfix models"]) / numpy
    print(f"  worst orbitfix ratio {worst:.2f}x: {'within' if worst <= GOAL else 'OVER'} the goal")


if __name__ == "__main__":
    main()
