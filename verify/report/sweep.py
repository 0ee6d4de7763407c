"""A parameter sweep (``sweep``) as text: equilibria along the sweep, the Hopf points (each to the
digits its bisection knows), and the cycle followed from each."""

from __future__ import annotations

import math

from orbitfix.gen.analysis.equilibria import format_state
from orbitfix.gen.analysis.sweep import BISECTION_TOLERANCE, Sweep
from orbitfix.verify.report.numbers import to_tolerance

KIND_MEANINGS = {
    "supercritical": "the first Lyapunov coefficient is negative: the cycle born here is stable "
                     "when the branch below confirms it, and the rhythm starts and stops gently",
    "subcritical": "a small unstable cycle exists on the side where the equilibrium is stable: "
                   "past this point the rhythm jumps in at a large amplitude, and it stops at "
                   "another value (hysteresis)",
    "degenerate": "the first Lyapunov coefficient is zero or negligible, so the cubic terms do not "
                  "decide what is born here (higher-order terms do); no kind is claimed",
}


def hopf_tolerance(result: Sweep) -> float:
    """How closely the bisection located each Hopf point, in the parameter's own units."""
    return BISECTION_TOLERANCE * abs(result.stop - result.start)


def format_sweep(result: Sweep) -> str:
    """A plain-text report of a sweep, for people."""
    name, model = result.parameter, result.model
    states = ", ".join(model.state_names)
    lines = [f"Sweep of '{model.name}': {name} from {result.start:.6g} to {result.stop:.6g} "
             f"({len(result.samples)} values)", ""]
    lines.append("Equilibria along the sweep (kind at state; largest real part of the eigenvalues)")
    width = max(len(name), 12)
    for sample in result.samples:
        found = "; ".join(f"{e.kind} at {format_state(e.state)} [{e.eigenvalues[0].real:.4g}]"
                          for e in sample.equilibria) or "none found"
        lines.append(f"  {name} = {sample.param_value:<{width}.6g} {found}")
    lines.append("")
    lines.append(f"Hopf points: {len(result.hopf)}" if result.hopf else "Hopf points: none")
    tolerance = hopf_tolerance(result)
    for number, point in enumerate(result.hopf, start=1):
        lines.append(f"  {number}. {name} = {to_tolerance(point.param_value, tolerance)} at the "
                     f"equilibrium ({states}) = {format_state(point.equilibrium)}")
        lines.append(f"     frequency at onset {point.frequency:.6g} radians per time unit "
                     f"(period {2 * math.pi / point.frequency:.6g})")
        value = point.lyapunov.value
        shown = f"{value:.6g}" if math.isfinite(value) else "not computed"
        lines.append(f"     first Lyapunov coefficient {shown}: {point.kind}")
        lines.append(f"     {KIND_MEANINGS[point.kind]}")
        lines.append(f"     the equilibrium is unstable {point.unstable_side} this point; the small "
                     f"cycle is looked for {point.cycle_side} it")
    for branch in result.branches:
        lines.append("")
        if branch.hopf_index is None:
            origin = "from a stable cycle the flow runs onto"
        else:
            origin = f"from Hopf point {branch.hopf_index + 1}"
        lines.append(f"Cycle branch {branch.index + 1} ({origin})")
        if branch.points and branch.hopf_index is not None \
                and result.hopf[branch.hopf_index].kind != "degenerate":
            first = branch.points[0]
            lines.append("  born " + ("stable: a small stable cycle grows from the Hopf point"
                                      if first.stable else "unstable: the small cycle near the Hopf "
                                      f"point has a multiplier of modulus {first.max_multiplier:.4g}, "
                                      "above 1, so the rhythm cannot start gently there"))
        lines.append(f"  {name:>{width}}  {'period':>12}  {'amplitude':>12}  {'largest multiplier':>18}"
                     "  stable")
        for row in branch.points:
            lines.append(f"  {row.param_value:>{width}.8g}  {row.period:>12.6g}  {row.amplitude:>12.6g}  "
                         f"{_plain(row.max_multiplier):>18}  {'yes' if row.stable else 'no'}")
        for fold in branch.folds:
            if fold.kind == "fold":
                lines.append(f"  fold of cycles at {name} = {fold.param_value:.8g}: period "
                             f"{fold.period:.6g}, amplitude {fold.amplitude:.6g} (two cycles meet and "
                             "vanish; the branch turns back)")
            else:
                lines.append(f"  a multiplier passes 1 at {name} = {fold.param_value:.8g} while the branch "
                             f"goes on (amplitude {fold.amplitude:.6g}): another family of cycles "
                             "meets this one there")
        if branch.reason:
            state = "ends" if branch.complete else "LOST"
            lines.append(f"  {state}: {branch.reason}")
        lines.append(f"  (amplitude: half the peak-to-peak range of {model.state_names[0]}; largest "
                     "multiplier: the largest nontrivial Floquet multiplier modulus, below 1 stable)")
    if result.notes:
        lines.append("")
        lines.append("Notes")
        lines += [f"  - {note}" for note in result.notes]
    if not result.complete:
        lines.append("")
        lines.append(f"result: INCOMPLETE: {result.reason or 'the time budget ran out'}")
    return "\n".join(lines)


def _plain(value: float | None) -> str:
    return "-" if value is None else f"{value:.4g}"
