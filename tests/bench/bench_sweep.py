"""Time full parameter sweeps and a basin sample: the Hopf normal form (one supercritical Hopf
point, the cycle followed through every sample beyond it) and FitzHugh-Nagumo in its input current
(two Hopf points), each with one and with two worker processes; the built-in Van der Pol
(mu -1..2), FitzHugh-Nagumo (I 0..1.5) and vibration drive (mu -1.5..0.5) as ``orbitfix sweep``
runs them by default, with the branch points, folds and whether every branch was followed to its
end; and a 20 x 20 basin sample of the built-in Van der Pol model.

Run as ``python tests/bench/bench_sweep.py [--quick]``; prints the median of a few runs for each case
(--quick: one run at 5 samples, one worker, of the normal form and the vibration drive only, and a
4 x 4 basin).
"""

from __future__ import annotations

import statistics
import time

from quick_mode import pick

from orbitfix.gen.analysis.basin import box_starts, sample_basin
from orbitfix.gen.analysis.sweep import sweep
from orbitfix.gen.model.definition import define_model
from orbitfix.gen.model.model_file import load_model

RUNS = pick(3, 1)
SAMPLES = pick(41, 5)
GRID = pick(20, 4)


def normal_form():
    return define_model("normal_form", {"x": 0.5, "y": 0.0},
                        {"x": "mu*x - 2*y - (x^2 + y^2)*x", "y": "2*x + mu*y - (x^2 + y^2)*y"},
                        {"mu": 0.2}, cycle_hz=1.0, loop_hz=200.0)


def fitzhugh_nagumo():
    return define_model("fitzhugh_nagumo", {"v": -1.0, "w": -0.5},
                        {"v": "v - v^3/3 - w + I", "w": "eps*(v + a - b*w)"},
                        {"I": 0.5, "a": 0.7, "b": 0.8, "eps": 0.08}, cycle_hz=1.0, loop_hz=100.0)


def timed(model, parameter: str, start: float, stop: float, workers: int) -> tuple[float, str]:
    times, summary = [], ""
    for _ in range(RUNS):
        began = time.perf_counter()
        result = sweep(model, parameter, start, stop, samples=SAMPLES, workers=workers)
        times.append(time.perf_counter() - began)
        summary = (f"{len(result.hopf)} Hopf point(s), {len(result.branch)} branch points, "
                   f"{len(result.folds)} fold(s), complete: {result.complete}")
    return statistics.median(times), summary


def main() -> None:
    print(f"sweep, {SAMPLES} samples, median of {RUNS} runs")
    cases = [("normal form, mu -1..1", normal_form(), "mu", -1.0, 1.0),
             ("FitzHugh-Nagumo, I 0..1.6", fitzhugh_nagumo(), "I", 0.0, 1.6)][:pick(2, 1)]
    for label, model, parameter, start, stop in cases:
        for workers in pick((1, 2), (1,)):
            seconds, summary = timed(model, parameter, start, stop, workers)
            print(f"  {label:<28} workers {workers}  {seconds:6.2f} s   {summary}")
    print(f"built-in models at the command line's defaults ({pick(41, 5)} samples, 60 s budget)")
    builtins = (("vibration_drive", "mu", -1.5, 0.5), ("vanderpol", "mu", -1.0, 2.0),
                ("fitzhugh_nagumo", "I", 0.0, 1.5))
    for name, parameter, start, stop in builtins[:pick(3, 1)]:
        seconds, summary = timed(load_model(name), parameter, start, stop, None)
        print(f"  {name + ', ' + parameter + f' {start:g}..{stop:g}':<34} {seconds:6.2f} s   {summary}")
    model = load_model("vanderpol")
    box = {"x": (-3.0, 3.0), "y": (-3.0, 3.0)}
    times, share = [], 0.0
    for _ in range(RUNS):
        began = time.perf_counter()
        share = sample_basin(model, box_starts(model, box, grid=GRID), box).fraction_on_cycle
        times.append(time.perf_counter() - began)
    print(f"basin, vanderpol, {GRID} x {GRID} grid in x, y from -3 to 3: {statistics.median(times):6.2f} s "
          f"(median of {RUNS}), {100 * share:.1f} % reach the cycle")


if __name__ == "__main__":
    main()
