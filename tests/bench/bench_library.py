"""Time the check (the whole continuous-model analysis) of every built-in model, networks included.

Run as ``python tests/bench/bench_library.py [--quick]`` (--quick: one run of two small models);
prints the median of a few runs per model, with the number of states, the verdict and the number
of angle states (phases, modulo 2 pi).
"""

from __future__ import annotations

import statistics
import time

from quick_mode import pick

from orbitfix.gen.analysis.summary import analyse
from orbitfix.gen.model.model_file import builtin_names, load_model

RUNS = pick(3, 1)


def median_seconds(name: str) -> tuple[float, int, str]:
    model = load_model(name)
    angles = int(model.angle_mask.sum())
    times, outcome = [], ""
    for _ in range(RUNS):
        start = time.perf_counter()
        analysis = analyse(model)
        times.append(time.perf_counter() - start)
        outcome = "ok" if analysis.ok else "NOT ok"
        if analysis.network is not None:
            outcome += f", locks in {analysis.network.cycles_to_lock} cycles"
    if angles:
        outcome += f", {angles} angle state{'' if angles == 1 else 's'}"
    return statistics.median(times), model.dimension, outcome


def main() -> None:
    print(f"analyse(model) for each built-in model, median of {RUNS} runs")
    names = pick(builtin_names(), ["hopf", "vanderpol"])
    width = max(len(n) for n in names)
    for name in names:
        seconds, states, outcome = median_seconds(name)
        print(f"  {name:<{width}}  {states:>2} states  {seconds * 1000:8.1f} ms   {outcome}")


if __name__ == "__main__":
    main()
