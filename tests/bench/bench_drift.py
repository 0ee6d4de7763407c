"""Benchmark of the long-run drift proof: compiled-C drift-run steps per second, the time of the
24-hour-equivalent run from every start, and the time of integer-period detection (Brent's
algorithm with the plain step); then the whole default ``verify vanderpol`` beside ``verify
vanderpol --skip-drift`` (each in a fresh process with a cold build cache), with the drift proof
judged on the exact integer cycle (now) and run for the full hours with no cycle search (before);
and for every built-in the default ``verify`` beside ``verify --skip-drift``, the drift test's
share, and the drift proof before (the full hours, no cycle search) beside now; and the steps each
built-in takes from its initial state to reach its integer cycle. Prints figures; asserts nothing.

Run: python tests/bench/bench_drift.py [hours [MODEL ...]] [--quick]   (default 24 h and every
built-in; --quick: 32-bit words only, 0.01 h and 100,000 steps, small verify runs, Van der Pol only)
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time

from quick_mode import arguments, pick, quick

from orbitfix.gen.errors import OrbitfixError
from orbitfix.gen.model.model_file import builtin_names, load_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.study.section import turns_together
from orbitfix.verify.proofs.drift import (
    build_drift_module,
    choose_starts,
    cycle_start,
    harness_statistics,
    integer_period,
    run_drift,
)


def main() -> None:
    given = arguments()
    hours = float(given[0]) if given else pick(24.0, 0.01)
    models = tuple(given[1:]) or pick(builtin_names(), ("vanderpol",))
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
    verify_side_by_side(hours)
    verify_every_builtin(hours, models)
    steps_to_cycle(models)


def timed_verify(*argv: str) -> tuple[float, int]:
    """Seconds and exit code of one ``orbitfix verify`` in a fresh process and a cold cache (in
    quick mode, whose figures are not quoted, the run's shared cache: its builds are made once)."""
    cache = pick(tempfile.mkdtemp(prefix="orbitfix-bench-"), os.environ["ORBITFIX_CACHE"])
    env = {**os.environ, "ORBITFIX_CACHE": cache}
    code = f"from orbitfix.verify.cli.main import main; raise SystemExit(main({list(argv)!r}))"
    started = time.perf_counter()
    done = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, check=False)
    return time.perf_counter() - started, done.returncode


def verify_side_by_side(hours: float) -> None:
    size = list(pick((), ("--states", "10000", "--steps", "10000")))
    whole, code = timed_verify("verify", "vanderpol", "--hours", f"{hours:g}", *size)
    skip, skip_code = timed_verify("verify", "vanderpol", "--skip-drift", *size)
    built = design(load_model("vanderpol"))
    host = build_drift_module(built)
    started = time.perf_counter()
    before = run_drift(built, hours=hours, host=host, cycle_budget=1)
    old_drift = time.perf_counter() - started
    started = time.perf_counter()
    run_drift(built, hours=hours, host=host)
    new_drift = time.perf_counter() - started
    print(f"verify vanderpol ({hours:g} h), each in a fresh process with a cold build cache:")
    print(f"  --skip-drift                        {skip:7.2f} s  (exit {skip_code})")
    print(f"  whole default verify (now)          {whole:7.2f} s  (exit {code}), "
          f"{whole / skip:.2f}x the --skip-drift run")
    print(f"  drift proof alone, same host module: exact cycle {new_drift:.2f} s, full {hours:g} h "
          f"without cycle search (before) {old_drift:.2f} s; before, verify would take about "
          f"{(skip + old_drift) / skip:.1f}x --skip-drift (verdict then {before.verdict})")


def verify_every_builtin(hours: float, models: tuple[str, ...]) -> None:
    """Each built-in's default verify beside its --skip-drift run (fresh processes, cold caches),
    the drift test's share, and the drift proof alone now against the full hours without cycle
    search (before; full size only)."""
    size = list(pick((), ("--states", "10000", "--steps", "10000")))
    print(f"verify of every built-in ({hours:g} h; seconds; exit codes in brackets):")
    print(f"  {'model':<16} {'whole':>9} {'skip-drift':>12} {'drift share':>11}  drift proof now / before")
    for name in models:
        whole, code = timed_verify("verify", name, "--hours", f"{hours:g}", *size)
        skip, skip_code = timed_verify("verify", name, "--skip-drift", *size)
        line = (f"  {name:<16} {whole:6.1f} ({code}) {skip:8.1f} ({skip_code}) "
                f"{max(0.0, whole - skip) / whole:10.0%}")
        if not quick():
            line += "  " + _drift_now_and_before(name, hours)
        print(line)


def _drift_now_and_before(name: str, hours: float) -> str:
    try:
        built = design(load_model(name))
        host = build_drift_module(built)
        started = time.perf_counter()
        run_drift(built, hours=hours, host=host)
        now = time.perf_counter() - started
        started = time.perf_counter()
        run_drift(built, hours=hours, host=host, cycle_budget=1)
        before = time.perf_counter() - started
    except OrbitfixError as exc:
        return f"not run: {exc}"[:90]
    return f"{now:6.2f} s / {before:7.2f} s"


def steps_to_cycle(names: tuple[str, ...]) -> None:
    print("steps from the initial state to the integer cycle (32-bit words, plain step):")
    for name in names:
        model = load_model(name)
        built = design(model)
        # a model with phases whose step commutes with a common turn: its cycle modulo that turn
        modulo = " (modulo a common turn)" if turns_together(built.plan.program) else ""
        host = build_drift_module(built)
        start = tuple(built.plan.initial_state)
        started = time.perf_counter()
        period, seen_at = integer_period(host, start, budget=20_000_000)
        mu = cycle_start(host, start, period, seen_at) if period else None
        took = time.perf_counter() - started
        spc = built.timing.steps_per_cycle
        if period is None:
            print(f"  {name:<18} no cycle within 20,000,000 steps ({took:.2f} s)")
        else:
            print(f"  {name:<18} enters at step {mu:>10,}, cycle {period:>10,} steps "
                  f"({period / spc:.4g} continuous periods), found in {took * 1e3:.1f} ms{modulo}")


if __name__ == "__main__":
    main()
