"""A basin-of-attraction sample (``basin``) as text: how many starts reach the cycle, and what the
others do."""

from __future__ import annotations

import math

from orbitfix.gen.analysis.basin import BasinSample


def format_basin(result: BasinSample) -> str:
    """A plain-text report of a basin sample, for people."""
    total = len(result.outcomes)
    box = ", ".join(f"{name} from {low:.6g} to {high:.6g}" for name, low, high in result.box)
    lines = [f"Basin of attraction of '{result.model.name}'s limit cycle (period "
             f"{result.cycle.period:.6g})",
             f"  {total} starts with {box}",
             f"  fixed-step RK4 at step {result.step:.4g}, followed for up to "
             f"{result.model_time:.4g} model time units", ""]
    width = max(len(label) for label in result.labels)
    for label, count in result.counts().items():
        lines.append(f"  {label:<{width}}  {count:>8}  {100.0 * count / max(1, total):6.2f} %")
    lines.append("")
    share = result.fraction_on_cycle
    lines.append(f"result: {100.0 * share:.2f} % of the starts reach the cycle" if math.isfinite(share)
                 else "result: no starts")
    if result.notes:
        lines.append("")
        lines += [f"  note: {note}" for note in result.notes]
    return "\n".join(lines)
