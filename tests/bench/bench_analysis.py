"""Time the continuous-model analysis of the built-in Van der Pol model at mu = 1 and mu = 10.

Run as ``python tests/bench/bench_analysis.py [--quick]``; prints the median of a few runs for each
case (--quick: one run at mu = 1).
"""

from __future__ import annotations

import statistics
import time

from quick_mode import pick

from orbitfix.gen.analysis.summary import analyse
from orbitfix.gen.model.model_file import load_model

RUNS = pick(5, 1)


def median_seconds(mu: float) -> tuple[float, str]:
    model = load_model("vanderpol").with_parameters({"mu": mu})
    times, verdict = [], ""
    for _ in range(RUNS):
        start = time.perf_counter()
        analysis = analyse(model)
        times.append(time.perf_counter() - start)
        verdict = analysis.cycle.verdict
    return statistics.median(times), verdict


def main() -> None:
    print(f"analyse(vanderpol), median of {RUNS} runs")
    for mu in pick((1.0, 10.0), (1.0,)):
        seconds, verdict = median_seconds(mu)
        print(f"  mu = {mu:<4g}  {seconds * 1000:8.1f} ms   {verdict[:72]}")


if __name__ == "__main__":
    main()
