"""JUnit XML for CI systems: one test case per check that ``verify`` or ``board`` ran, made from
the same JSON the verb prints (so the XML can never tell another story than the JSON).

The format is the common JUnit XML read by CI systems (common practice: ``testsuites`` holding a
``testsuite`` of ``testcase`` elements, a ``failure`` or ``error`` child when one did not pass).
A robustness finding of the drift test is not a failure: it passes with the finding written to the
case's output.
"""

from __future__ import annotations

import xml.etree.ElementTree as ElementTree
from dataclasses import dataclass
from pathlib import Path

from orbitfix.gen.errors import InputError


@dataclass(frozen=True)
class Case:
    """One check: its name, what became of it (pass, fail, error) and why."""

    name: str
    result: str
    message: str = ""
    seconds: float = 0.0
    output: str = ""


def verify_cases(data: dict) -> list[Case]:
    """The checks of one ``verify`` run, from its JSON (partial when it stopped early)."""
    cases = []
    path = data.get("start_path")
    if path is not None:
        problems = []
        if path.get("saturation"):
            s = path["saturation"]
            problems.append(f"value v{s['value_index']} ({s['note']}) saturates at step {s['step']} "
                            f"in {s['format']}")
        if path.get("parting", 0.0) > path.get("tolerance", float("inf")):
            problems.append(f"the integer map parts from the float step map by {path['parting']:.3g} "
                            f"of '{path['parting_state']}''s range at step {path['parting_step']}")
        cases.append(Case("start-up path against the float step map",
                          "fail" if problems else "pass", "; ".join(problems)))
    if "initial_state_in_dead_zone" in data:
        inside = bool(data["initial_state_in_dead_zone"])
        cases.append(Case("initial state stays out of the dead zones", "fail" if inside else "pass",
                          "the path from the initial state lands in a dead zone" if inside else ""))
    if "bit_exact" in data:
        mismatch = data.get("first_mismatch")
        seconds = sum(v for k, v in data.get("seconds", {}).items()
                      if isinstance(v, (int, float)) and not k.startswith("sanitized"))
        host_failed = mismatch is not None and not str(mismatch.get("part", "")).startswith("sanitized")
        cases.append(Case("bit-exact on the host", "fail" if host_failed else "pass",
                          _mismatch_text(mismatch) if host_failed else "", seconds))
        for run in data.get("sanitized", []):
            undefined = run.get("undefined_behaviour")
            name = f"bit-exact under the sanitizer ({run.get('compiler', 'cc')} {run['flags'][0]})"
            cases.append(Case(name, "fail" if undefined else "pass", undefined or "",
                              run.get("seconds") or 0.0))
    drift = data.get("drift")
    if drift is not None:
        for run in drift.get("runs", []):
            reasons = "; ".join(run.get("reasons") or [])
            outcome = run.get("verdict")
            name = f"drift from {run['start']}"
            if outcome == "fail":
                cases.append(Case(name, "fail", reasons, run.get("seconds") or 0.0))
            else:
                found = ("" if outcome == "pass" else
                         f"robustness finding: {reasons}. {run.get('explanation') or ''}".strip())
                cases.append(Case(name, "pass", "", run.get("seconds") or 0.0, found))
    certificate = data.get("certificate")
    if certificate is not None:
        proved = bool(certificate.get("proved"))
        cases.append(Case("lattice certificate", "pass" if proved else "fail",
                          "" if proved else "; ".join(certificate.get("reasons") or ["not proved"])))
    return cases


def board_cases(data: dict) -> list[Case]:
    """The checks of one ``board`` run, from its JSON."""
    if "bit_exact" not in data:
        return []
    board = data.get("board", "board")
    failed = not data.get("ok", False)
    why = data.get("link_failure") or _mismatch_text(data.get("first_mismatch"))
    if failed and not why:
        why = (f"{data.get('missing_states', 0)} states missing, "
               f"{data.get('conflicting_states', 0)} in conflict")
    seconds = sum(v for v in (data.get("seconds") or {}).values() if isinstance(v, (int, float)))
    stream_failed = failed and not (data.get("bit_exact") and data.get("selftest") not in (0, None)
                                    and data.get("link_failure") is None)
    cases = [Case(f"bit-exact stream on {board}", "fail" if stream_failed else "pass", why or "",
                  seconds, f"{data.get('steps_compared', 0)} steps compared")]
    if data.get("selftest") is not None:
        code = data["selftest"]
        cases.append(Case(f"self-test on {board}", "pass" if code == 0 else "fail",
                          "" if code == 0 else f"the self-test failed at check {code}"))
    return cases


def _mismatch_text(mismatch: dict | None) -> str:
    if not mismatch:
        return ""
    return (f"{mismatch.get('part', 'comparison')} at step {mismatch.get('step')}: expected "
            f"{mismatch.get('expected')}, got {mismatch.get('got')}")


def junit_text(verb: str, data: dict, error: str | None = None) -> str:
    """The JUnit XML of one ``verify`` or ``board`` run; ``error`` is the message of an error that
    stopped it (a test case of its own, so CI shows why the run ended)."""
    if verb == "board":
        cases = board_cases(data)
    else:  # report runs verify's checks, and streams on each board of --board
        cases = verify_cases(data)
        for run in data.get("boards") or []:
            cases += board_cases(run)
    if error is not None:
        cases.append(Case(f"orbitfix {verb} ran to the end", "error", error))
    model = data.get("model", "?")
    suite_name = f"orbitfix {verb} {model}" + (f" on {data['board']}" if verb == "board" else "")
    root = ElementTree.Element("testsuites")
    suite = ElementTree.SubElement(root, "testsuite", {
        "name": suite_name, "tests": str(len(cases)),
        "failures": str(sum(c.result == "fail" for c in cases)),
        "errors": str(sum(c.result == "error" for c in cases)),
        "time": f"{sum(c.seconds for c in cases):.3f}"})
    for case in cases:
        element = ElementTree.SubElement(suite, "testcase", {
            "classname": f"orbitfix.{verb}.{model}", "name": case.name, "time": f"{case.seconds:.3f}"})
        if case.result in ("fail", "error"):
            tag = "failure" if case.result == "fail" else "error"
            ElementTree.SubElement(element, tag, {"message": case.message}).text = case.message
        if case.output:
            ElementTree.SubElement(element, "system-out").text = case.output
    ElementTree.indent(root)
    return ElementTree.tostring(root, encoding="unicode", xml_declaration=True) + "\n"


def write_junit(path: Path, verb: str, data: dict, error: str | None = None) -> None:
    """Write :func:`junit_text` to ``path``; a path that cannot be written is an input error."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(junit_text(verb, data, error), encoding="utf-8")
    except OSError as exc:
        raise InputError(f"--junit: cannot write '{path}': {exc}") from None
