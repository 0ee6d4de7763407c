"""The host proof (``verify``) as text and as data: the build, the bit-exact comparison, and the
drift run and certificate when they were made (those two render their own details)."""

from __future__ import annotations

from typing import Any

from orbitfix.verify.proofs.bit_exact import Mismatch
from orbitfix.verify.proofs.host_check import HostCheck
from orbitfix.verify.targets.host_build import SANITIZE_FLAGS, STRICT_FLAGS


def host_fields(outcome: HostCheck) -> dict[str, Any]:
    """The bit-exact comparison as plain data."""
    report = outcome.report
    mismatch = report.first_mismatch
    return {
        "bit_exact": report.bit_exact,
        "states_compared": report.states_compared,
        "steps_compared": report.steps_compared,
        "init_checked": report.init_checked,
        "setters_checked": report.setters_checked,
        "ramp_steps_compared": report.ramp_steps,
        # the C's count of saturated steps (compared with golden's at every step) at the end of
        # the trajectory from the initial state
        "trajectory_saturated_steps": report.trajectory_saturated_steps,
        "output_states_compared": report.output_states_compared,
        "output_steps_compared": report.output_steps_compared,
        "sanitized": [{"compiler": run.compiler, "flags": [run.level, *SANITIZE_FLAGS],
                       "states_compared": run.states, "steps_compared": run.steps, "seconds": run.seconds,
                       "undefined_behaviour": run.undefined} for run in report.sanitized],
        "first_mismatch": mismatch.to_json() if mismatch else None,
        "sources": outcome.sources,
        "notes": outcome.notes,
        "compiler_flags": list(STRICT_FLAGS),
        "seconds": {"host_build": outcome.build_seconds, **report.seconds},
    }


def host_lines(outcome: HostCheck) -> list[str]:
    """The build and the comparison for people, ending in the bit-exact verdict."""
    report = outcome.report
    lines = [f"C sources: {outcome.sources}"]
    lines += [f"  note: {note}" for note in outcome.notes]
    reused = " (reused from the cache)" if outcome.build_reused else ""
    lines.append(f"host build: {' '.join(STRICT_FLAGS)}, {outcome.build_seconds:.2f} s{reused}")
    if report.init_checked:
        ramps = (f"; {report.setters_checked} setter(s) and their ramps, "
                 f"{report.ramp_steps:,} steps compared" if report.setters_checked else "")
        lines.append(f"init function: sets the plan's initial state bit for bit and no saturated "
                     f"step{ramps}"
                     + _seconds(report.seconds.get("init_and_setters")))
    lines.append(f"random states: {report.states_compared:,} compared one step each, with the "
                 "count of saturated steps"
                 + _seconds(report.seconds.get("random_states")))
    if "trajectory" in report.seconds or report.steps_compared:
        counted = ("" if report.trajectory_saturated_steps is None else
                   f", saturated steps counted: {report.trajectory_saturated_steps:,}")
        lines.append(f"trajectory from the initial state: {report.steps_compared:,} steps compared"
                     f"{counted}" + _seconds(report.seconds.get("trajectory")))
    if "outputs" in report.seconds:
        lines.append(f"outputs: {report.output_states_compared:,} random states (with random "
                     f"memories) and {report.output_steps_compared:,} trajectory steps compared, "
                     "every output value" + _seconds(report.seconds.get("outputs")))
    for run in report.sanitized:
        verdict = (f"undefined behaviour: {run.undefined}" if run.undefined else
                   f"{run.states:,} states and {run.steps:,} steps compared")
        lines.append(f"sanitized build ({run.compiler} {run.level} {' '.join(SANITIZE_FLAGS)}): {verdict}"
                     + _seconds(run.seconds))
    undefined = any(run.undefined for run in report.sanitized)
    if report.first_mismatch:
        lines += mismatch_lines(report.first_mismatch)
    if report.first_mismatch or undefined:
        lines.append("result: NOT bit-exact: the C does not give the golden model's bits"
                     + (" on every build" if undefined and not report.first_mismatch else ""))
    else:
        lines.append("result: bit-exact: the C gives the golden model's bits at every compared step")
    return lines


def mismatch_lines(mismatch: Mismatch) -> list[str]:
    """Where C and golden first disagree: the state before, both results, the operation they part at."""
    where = {"trajectory": f"step {mismatch.step} of the trajectory",
             "traced step": f"random state number {mismatch.step}, in the traced step "
                            "(the verification-only file)"}.get(
        mismatch.part, f"random state number {mismatch.step}")
    where = {"init": "the init function", "setter": "a setter",
             "ramp": f"step {mismatch.step} after a setter call"}.get(mismatch.part, where)
    if mismatch.part.startswith("sanitized build"):
        where = f"{mismatch.part}, {where}"
    lines = [f"first mismatch at {where}"]
    if mismatch.state_before:
        lines.append(f"  state before: {mismatch.state_before}")
    if mismatch.expected:
        lines.append(f"  expected:     {mismatch.expected}")
    lines.append(f"  got:          {mismatch.got}")
    if mismatch.reason:
        lines.append(f"  {mismatch.reason}")
    elif mismatch.operation is None and mismatch.part == "traced step":
        lines.append("  every intermediate value agrees with golden; the traced step stores a "
                     "different next state from the firmware step")
    elif mismatch.operation is None:
        lines.append("  every intermediate value agrees; the difference is in how the C stores "
                     "the next state")
    else:
        op = mismatch.operation
        lines.append(f"  they part at operation {op['index']} ({op['kind']}: {op['note']}): "
                     f"expected {op['expected']}, got {op['got']}")
    return lines


def _seconds(value: float | None) -> str:
    return f" ({value:.2f} s)" if value is not None else ""
