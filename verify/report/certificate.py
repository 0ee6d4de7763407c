"""The lattice certificate as text and as JSON, both made from the one :class:`Certificate`."""

from __future__ import annotations

from collections.abc import Sequence

from orbitfix.verify.proofs.certificate import Certificate, UncertifiedGroup
from orbitfix.verify.proofs.certificate.lattice_map import LONGEST_EXCURSION
from orbitfix.verify.proofs.certificate.uncertified import LONGEST_WALK


def certificate_lines(cert: Certificate) -> list[str]:
    """The certificate as plain text lines."""
    names = cert.state_names
    verdict = "PROVED" if cert.proved else "NOT PROVED"
    lines = [f"Lattice certificate for '{cert.model}': {verdict}",
             "  formats: " + ", ".join(f"{n} {f}" for n, f in zip(names, cert.state_formats,
                                                                   strict=True)),
             "  bands, in units of the cycle's half range ("
             + ", ".join(f"{n}: {h:.6g}" for n, h in zip(names, cert.half_range, strict=True))
             + f"): inner {cert.band:g} ({cert.inner_band_states} states), tolerance "
               f"{cert.tolerance:g} ({cert.tolerance_band_states} states); band edges are "
               f"exact to {cert.distance_error:.2g} about the cycle's curve, itself known to "
               f"about {cert.curve_error:.1g}",
             "  box: " + ", ".join(f"{n} in [{lo:.6g}, {hi:.6g}]" for n, (lo, hi)
                                   in zip(names, cert.box, strict=True))
             + f" ({cert.box_states} lattice states)",
             f"  states stepped once each: {cert.states_checked}"]
    if cert.invariant:
        lines.append(f"  invariance holds: the {cert.reachable_states} states reachable from "
                     f"the inner band all lie in the tolerance band")
    else:
        first = cert.escape_path[-1] if cert.escape_path else None
        lines.append(f"  invariance FAILS: starting in the inner band at {cert.escape_path[0]}, "
                     f"the integer map leaves the tolerance band at {first} after "
                     f"{len(cert.escape_path) - 1} step(s)")
    if cert.excluded_states:
        lines.append(f"  excluded: {cert.excluded_states} states within {cert.exclude_radius:g} "
                     f"of " + ", ".join(cert.equilibria_excluded))
    considered = cert.box_states - cert.excluded_states
    lines.append(f"  attraction: {cert.certified_states} of {considered} states "
                 f"({100 * cert.certified_fraction:.4f} %) enter the inner band"
                 + (f" within {cert.steps_bound} steps" if cert.steps_bound is not None else ""))
    if cert.exception_count:
        lines.append(f"  {cert.exception_count} state(s) never enter it "
                     f"({cert.exception_groups} group(s) by fate):")
        lines.extend(f"    - {group_text(g)}" for g in cert.exceptions)
        if cert.exception_groups > len(cert.exceptions):
            lines.append(f"    - and {cert.exception_groups - len(cert.exceptions)} smaller "
                         "group(s)")
        ends = {"leaves the domain": "leave the domain", "fixed point": "integer fixed point(s)",
                "cycle": "integer cycle(s)"}
        lines.append("    in all: " + "; ".join(
            f"{n} state(s) leave the domain" if fate == "leaves the domain"
            else f"{n} state(s) end on {e} {ends[fate]}"
            for fate, (n, e) in cert.fates.items() if n))
        if cert.cover_radius is not None:
            lines.append(f"    all of them lie within {cert.cover_radius:.4g} (normalised) of an "
                         "equilibrium; an exclusion radius above that leaves them out")
    for reason in cert.reasons:
        lines.append(f"  why not proved: {reason}")
    if cert.proved:
        lines.append(f"  so: from every state of the box outside the excluded neighbourhoods, "
                     f"the integer program is inside the tolerance band after at most "
                     f"{cert.steps_bound} steps and never leaves it, however long it runs")
    lines.append(f"  time: {cert.seconds:.1f} s")
    lines.append("  This proves a property of the integer program's arithmetic, not the safety of a "
                 "machine: bench-test with the load disconnected and keep an independent "
                 "hardware stop.")
    return lines


def certificate_json(cert: Certificate) -> dict:
    """The ``certificate`` object of ``verify --json``: plain Python types only."""
    return {
        "proved": cert.proved,
        "reasons": list(cert.reasons),
        "band": {"units": "normalised: each state divided by the cycle's half range",
                 "half_range": dict(zip(cert.state_names, cert.half_range, strict=True)),
                 "inner": cert.band, "tolerance": cert.tolerance,
                 "distance_error": cert.distance_error, "curve_error": cert.curve_error,
                 "inner_states": cert.inner_band_states,
                 "tolerance_states": cert.tolerance_band_states},
        "states_checked": cert.states_checked,
        "formats": dict(zip(cert.state_names, cert.state_formats, strict=True)),
        "box": {name: {"low": lo, "high": hi, "low_integer": ilo, "high_integer": ihi}
                for name, (lo, hi), (ilo, ihi) in zip(cert.state_names, cert.box,
                                                      cert.box_integer, strict=True)},
        "box_states": cert.box_states,
        "domain": {name: {"low_integer": lo, "high_integer": hi}
                   for name, (lo, hi) in zip(cert.state_names, cert.domain_integer, strict=True)},
        "invariance": {"holds": cert.invariant, "reachable_states": cert.reachable_states,
                       "escape_path": [list(s) for s in cert.escape_path]},
        "steps_bound": cert.steps_bound,
        "certified_states": cert.certified_states,
        "certified_fraction": cert.certified_fraction,
        "exceptions": {"count": cert.exception_count, "groups": cert.exception_groups,
                       "by_fate": {fate: {"states": n, "ends": e}
                                   for fate, (n, e) in cert.fates.items()},
                       "within_radius_of_an_equilibrium": cert.cover_radius,
                       "shown": [group_json(g) for g in cert.exceptions]},
        "excluded": {"radius": cert.exclude_radius, "states": cert.excluded_states,
                     "equilibria": list(cert.equilibria_excluded)},
        "seconds": cert.seconds,
        "phase_seconds": cert.phase_seconds,
    }


def group_text(group: UncertifiedGroup) -> str:
    """One group of uncertified states as a sentence."""
    if group.fate == "leaves the domain":
        what = (f"leave the lattice domain and do not come back within {LONGEST_EXCURSION} "
                "steps")
    elif group.fate == "fixed point":
        what = f"rest on the integer fixed point {_pair(group.end_state, group.end_state_real)}"
    elif group.cycle_length is None:
        what = (f"fall into an integer cycle longer than {LONGEST_WALK} steps through "
                f"{_pair(group.end_state, group.end_state_real)}")
    else:
        what = (f"fall into an integer cycle of length {group.cycle_length} through "
                f"{_pair(group.end_state, group.end_state_real)}")
    if group.near_equilibrium:
        what += f", which is the model's {group.near_equilibrium}"
    starts = "; ".join(_pair(a, b) for a, b in zip(group.examples, group.examples_real, strict=True))
    return f"{group.count} state(s) {what}; for example {starts}"


def group_json(group: UncertifiedGroup) -> dict:
    """One group of uncertified states as plain data."""
    return {"fate": group.fate, "count": group.count, "cycle_length": group.cycle_length,
            "end_state": list(group.end_state) if group.end_state else None,
            "end_state_real": list(group.end_state_real) if group.end_state_real else None,
            "near_equilibrium": group.near_equilibrium,
            "examples": [list(e) for e in group.examples],
            "examples_real": [list(e) for e in group.examples_real]}


def _pair(integers: Sequence[int] | None, reals: Sequence[float] | None) -> str:
    if integers is None or reals is None:
        return "-"
    return (f"({', '.join(str(v) for v in integers)}) = ("
            f"{', '.join(f'{v:.6g}' for v in reals)})")
