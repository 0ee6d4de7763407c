"""The host proof (``verify``) as text and as data: the build, the bit-exact comparison, and the
drift run and certificate when they were made (those two render their own details)."""

from __future__ import annotations

from typing import Any

from orbitfix.verify.proofs.bit_exact import Mismatch
from orbitfix.verify.proofs.host_check import HostCheck
from orbitfix.verify.targets.host_build import STRICT_FLAGS


def host_fields(outcome: HostCheck) -> dict[str, Any]:
    """The bit-exact comparison as plain data."""
    report = outcome.report
    mismatch = report.first_mismatch
    return {
        "bit_exact": report.bit_exact,
        "states_compared": report.states_compared,
        "steps_compared": report.steps_compared,
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
    lines.append(f"random states: {report.states_compared:,} compared one step each"
                 + _seconds(report.seconds.get("random_states")))
    if "trajectory" in report.seconds or report.steps_compared:
        lines.append(f"trajectory from the initial state: {report.steps_compared:,} steps compared"
                     + _seconds(report.seconds.get("trajectory")))
    if report.first_mismatch:
        lines += mismatch_lines(report.first_mismatch)
        lines.append("result: NOT bit-exact: the C does not give the golden model's bits")
    else:
        lines.append("result: bit-exact: the C gives the golden model's bits at every compared step")
    return lines


def mismatch_lines(mismatch: Mismatch) -> list[str]:
    """Where C and golden first disagree: the state before, both results, the operation they part at."""
    where = {"trajectory": f"step {mismatch.step} of the trajectory",
             "traced step": f"random state number {mismatch.step}, in the traced step "
                            "(the verification-only file)"}.get(
        mismatch.part, f"random state number {mismatch.step}")
    lines = [f"first mismatch at {where}",
             f"  state before: {mismatch.state_before}",
             f"  expected:     {mismatch.expected}",
             f"  got:          {mismatch.got}"]
    if mismatch.operation is None and mismatch.part == "traced step":
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
