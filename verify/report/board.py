"""The ``board`` and ``boards`` verbs' text: one board run, and the list of profiles."""

from __future__ import annotations

from orbitfix.verify.proofs.board_stream import BoardStreamReport


def board_lines(report: BoardStreamReport) -> list[str]:
    """The report as a few lines for a person."""
    lines = [f"board {report.board}"]
    if report.hello:
        h = report.hello
        lines.append(f"  firmware: {h['build']}; integer program {h['fingerprint']}, {h['word_bits']}-bit "
                     f"words, C int {h['int_bits']} bits, {h['batch']} states per frame")
    if report.size:
        lines.append("  image: " + ", ".join(f"{k} {v} bytes" for k, v in report.size.items()
                                             if v is not None))
    if report.selftest is not None:
        lines.append("  self-test: " + (
            "passed" if report.selftest == 0 else
            f"FAILED at check {report.selftest}: this build does not compute the golden model's bits"))
    if report.cost:
        c = report.cost
        lines.append(f"  cost of one step: {c['per_step']:.1f} {c['unit']} (least {c['least']}, most "
                     f"{c['most']}, over {c['steps_measured']} steps; {c['method']})")
        if report.kind == "emulated":
            lines.append(f"  an emulator counts {c['unit']}, not time: its clock is simulated, so the "
                         "figure is a guide to the part's cost; time a step on the real board")
    f = report.frames
    if f:
        lines.append(f"  frames: {f['received']} received, {f['corrupt']} corrupt, {f['dropped']} "
                     f"dropped, {f['duplicated']} duplicated, {f['out_of_order']} out of order, "
                     f"{f['resent']} resent; {f['timeouts']} timeouts, {f['retries']} retries")
    if report.faults and report.faults.get("injected") is not None:
        injected = ", ".join(f"{v} {k}" for k, v in sorted(report.faults["injected"].items()))
        lines.append(f"  faults injected: {injected or 'none happened'}")
    t = report.throughput
    if t:
        lines.append(f"  throughput: {t['samples_per_second']:,.0f} states/s, "
                     f"{t['bytes_per_second']:,.0f} bytes/s"
                     + (f" ({100 * t['fraction_of_link']:.0f} % of the line rate)"
                        if t.get("fraction_of_link") is not None else ""))
        if t.get("fraction_of_link_reason"):
            lines.append(f"  no fraction of the line rate: {t['fraction_of_link_reason']}")
    lines.append(f"  compared: {report.states_compared:,} states covering {report.steps_compared:,} of "
                 f"{report.last_sample:,} steps" + (f"; {report.missing_states} states never arrived"
                                                    if report.missing_states else ""))
    if report.failure:
        lines.append(f"  link failed: {report.failure}; the comparison above covers what arrived")
    m = report.first_mismatch
    if m:
        lines.append(f"  first mismatch at step {m['step']} (from the board's state at step "
                     f"{m['from_step']}: {m['state_before']}): expected {m['expected']}, got {m['got']}")
    if report.conflicts:
        lines.append(f"  {report.conflicts} states differed when sent again: the board is not "
                     "deterministic")
    if report.ok:
        lines.append("result: bit-exact on the board: every received state is the golden model's")
    elif report.bit_exact and report.selftest not in (0, None):
        lines.append("result: NOT bit-exact on the board: its self-test failed")
    elif report.bit_exact:
        lines.append("result: NOT complete: every state received is bit-exact, but the run did not "
                     "finish")
    else:
        lines.append("result: NOT bit-exact on the board")
    return lines


def board_list_lines(entries: list[dict]) -> list[str]:
    """The board profiles, one line each, with what to install where tools are missing."""
    width = max((len(e["name"]) for e in entries), default=4)
    count = f"{len(entries)} board profile" + ("" if len(entries) == 1 else "s")
    lines = [f"{count} (use the name with 'orbitfix board MODEL --board NAME'):"]
    for e in entries:
        tools = "tools installed" if e["tools_installed"] else f"missing {', '.join(e['missing_tools'])}"
        lines.append(f"  {e['name']:<{width}}  {e['cpu']:<11} {e['kind']:<8} int {e['int_bits']} bits, "
                     f"cost in {e['cost_unit']}; {tools}")
        if e["install"]:
            lines.append(f"  {'':<{width}}  to install: {e['install']}")
    return lines
