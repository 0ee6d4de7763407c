"""The report as one self-contained HTML page, made from the report's JSON object (the same data as
``--json``) and the plots' inline SVG: no script, no style sheet or font from elsewhere, no link out.

Every number shown from the JSON sits in an element whose ``data-json`` attribute names its place
in that object (``analysis.cycle.period``, ``drift.runs.0.period_error_ppm``), written to ten
significant digits, so a reader (or a test) can hold the page to the JSON. Sections appear only
for the stages that ran.
"""

from __future__ import annotations

import html
import json
import math
import re
from collections.abc import Sequence
from typing import Any

from orbitfix.gen import __version__
from orbitfix.gen.analysis.equilibria import KIND_MEANINGS

STYLE = """
body { font-family: system-ui, sans-serif; margin: 0 auto; max-width: 1100px; padding: 1em 2em;
       color: #1d1d1d; background: #fbfbf8; line-height: 1.4; }
h1 { font-size: 1.6em; margin-bottom: 0.2em; }
h2 { font-size: 1.25em; border-bottom: 2px solid #c9c5b8; padding-bottom: 0.15em; margin-top: 1.8em; }
h3 { font-size: 1.05em; margin-bottom: 0.3em; }
table { border-collapse: collapse; margin: 0.4em 0 1em; font-size: 0.92em; }
th, td { border: 1px solid #d8d4c8; padding: 0.2em 0.55em; text-align: left; vertical-align: top; }
th { background: #eeebe2; }
td.n { text-align: right; font-variant-numeric: tabular-nums; font-family: ui-monospace, monospace; }
code, .eq { font-family: ui-monospace, monospace; }
.verdict { font-weight: bold; padding: 0.35em 0.7em; display: inline-block; border-radius: 4px; }
.good { background: #dcefd9; color: #184d12; }
.bad { background: #f6d8d3; color: #7a1408; }
.caution { border: 2px solid #b5651d; background: #fdf1e2; padding: 0.6em 0.9em; margin: 1em 0; }
figure { margin: 1em 0 2em; }
figure svg { max-width: min(100%, 760px); height: auto; display: block; background: #ffffff; }
figcaption { font-size: 0.9em; color: #444; margin-top: 0.3em; }
.note { color: #555; font-size: 0.92em; }
"""


def number_text(value: Any) -> str:
    """How a number from the JSON is written on the page: ten significant digits."""
    if isinstance(value, bool) or value is None:
        return "-" if value is None else ("yes" if value else "no")
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return f"{value:.10g}" if math.isfinite(value) else str(value)
    return str(value)


def lookup(data: Any, path: str) -> Any:
    """The value at a dotted path of the JSON object (list items by index); KeyError if absent."""
    value = data
    for part in path.split("."):
        value = value[int(part)] if isinstance(value, list) else value[part]
    return value


class Page:
    """Builds the page's HTML from the report's JSON object."""

    def __init__(self, data: dict) -> None:
        self.data = data
        self.parts: list[str] = []

    def has(self, path: str) -> bool:
        try:
            return lookup(self.data, path) is not None
        except (KeyError, IndexError, TypeError, ValueError):
            return False

    def get(self, path: str, default: Any = None) -> Any:
        return lookup(self.data, path) if self.has(path) else default

    def val(self, path: str, suffix: str = "") -> str:
        """A value of the JSON, tagged with its path (a dash when absent)."""
        if not self.has(path):
            return "-"
        text = html.escape(number_text(lookup(self.data, path)))
        return f'<span data-json="{html.escape(path)}">{text}</span>{html.escape(suffix)}'

    def add(self, text: str) -> None:
        self.parts.append(text)

    def para(self, text: str, css: str = "") -> None:
        self.add(f'<p class="{css}">{text}</p>' if css else f"<p>{text}</p>")

    def table(self, head: Sequence[str], rows: list[list[str]], numeric: Sequence[int] = ()) -> None:
        """A table; ``rows`` hold HTML already escaped; columns in ``numeric`` align right."""
        cells = "".join(f"<th>{html.escape(h)}</th>" for h in head)
        body = []
        for row in rows:
            body.append("<tr>" + "".join(
                f'<td class="n">{c}</td>' if i in numeric else f"<td>{c}</td>"
                for i, c in enumerate(row)) + "</tr>")
        self.add(f"<table><thead><tr>{cells}</tr></thead><tbody>{''.join(body)}</tbody></table>")

    def pairs(self, rows: list[tuple[str, str]]) -> None:
        """A two-column table of what and value; a value that is a number aligns right."""
        right = ' class="n"'
        cells = "".join(f"<tr><td>{html.escape(k)}</td><td{right if _is_number(v) else ''}>{v}</td></tr>"
                        for k, v in rows)
        self.add(f"<table><thead><tr><th>what</th><th>value</th></tr></thead><tbody>{cells}</tbody></table>")


def _is_number(cell: str) -> bool:
    try:
        float(re.sub(r"<[^>]*>", "", cell))
    except ValueError:
        return False
    return True


def esc(value: Any) -> str:
    return html.escape(str(value))


def report_html(data: dict, plots: Sequence[tuple[str, str, str, str]] = (),
                left_out: Sequence[str] = ()) -> str:
    """The page. ``plots``: (name, title, caption, inline SVG) each; ``left_out``: sentences on
    plots not drawn and why."""
    page = Page(data)
    verb = data.get("verb", "report")
    name = data.get("model") if isinstance(data.get("model"), str) else page.get("model_definition.name", "?")
    page.add(f"<h1>orbitfix {esc(verb)}: {esc(name)}</h1>")
    page.para(f"Written by orbitfix {esc(__version__)} from <code>report.json</code> beside this page "
              "(every number here is read from it).", "note")
    _verdict(page)
    if data.get("caution"):
        page.add(f'<div class="caution"><strong>{esc(data["caution"])}</strong></div>')
    _model(page)
    _equilibria(page)
    _cycle(page)
    _network(page)
    _timing(page)
    _plan(page)
    _outputs(page)
    _trim(page)
    _start_path(page)
    _dead_zones(page)
    _layers(page)
    _drift(page)
    _certificate(page)
    _board(page)
    if plots or left_out:
        page.add("<h2>Plots</h2>")
        if page.has("side_by_side"):
            page.pairs([("side-by-side run from the initial state (steps)", page.val("side_by_side.steps")),
                        ("cycles", page.val("side_by_side.cycles")),
                        ("worst amplitude error, integer against float (LSB)",
                         page.val("side_by_side.worst_amplitude_error_lsb")),
                        ("worst phase error, integer against float (s)",
                         page.val("side_by_side.worst_phase_error_seconds"))])
        for plot_name, title, caption, svg in plots:
            page.add(f'<figure id="plot-{esc(plot_name)}"><h3>{esc(title)}</h3>{svg}'
                     f"<figcaption>{esc(caption)}</figcaption></figure>")
            if plot_name == "sweep":
                _sweep_marks(page)
            elif plot_name == "basin":
                _basin_outcomes(page)
        for sentence in left_out:
            page.para(esc(sentence), "note")
    page.add("<h2>Cautions</h2>")
    page.para(esc(data.get("caution") or ""))
    page.para("The checks above compare the layers this tool computes (the continuous model, the "
              "float step map, the integer program, the C on the host, the C on a board); they do "
              "not test the machine the code will drive.", "note")
    body = "\n".join(page.parts)
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f"<title>orbitfix {esc(verb)}: {esc(name)}</title>\n<style>{STYLE}</style>\n</head>\n"
            f"<body>\n{body}\n</body>\n</html>\n")


def _verdict(page: Page) -> None:
    data = page.data
    if data.get("error"):
        page.add(f'<p class="verdict bad">STOPPED: {esc(data["error"])}</p>')
    elif data.get("ok"):
        page.add('<p class="verdict good">passed: every check that ran holds</p>')
    else:
        page.add('<p class="verdict bad">FAILED: a check does not hold (see below)</p>')
    page.para(f"exit code {page.val('exit_code')}", "note")


def _model(page: Page) -> None:
    if not page.has("model_definition"):
        return
    page.add("<h2>Model</h2>")
    if page.get("model_definition.description"):
        page.para(esc(page.get("model_definition.description")))
    rows = []
    for i, state in enumerate(page.get("model_definition.states")):
        rows.append([esc(state["name"]), page.val(f"model_definition.states.{i}.initial"),
                     esc(state.get("meaning", "")) + (" (an angle, radians)" if state.get("angle") else "")])
    page.add("<h3>States</h3>")
    page.table(["state", "initial value", "meaning"], rows, numeric=(1,))
    page.add("<h3>Equations</h3>")
    page.add("<table><tbody>" + "".join(
        f'<tr><td class="eq">d{esc(s)}/dt</td><td class="eq">= {esc(eq)}</td></tr>'
        for s, eq in page.get("model_definition.equations").items()) + "</tbody></table>")
    params = page.get("model_definition.parameters") or []
    if params:
        page.add("<h3>Parameters</h3>")
        rows = []
        for i, p in enumerate(params):
            runtime = p.get("runtime")
            span = (f"set at run time from {page.val(f'model_definition.parameters.{i}.runtime.min')} "
                    f"to {page.val(f'model_definition.parameters.{i}.runtime.max')}" if runtime else "fixed")
            rows.append([esc(p["name"]), page.val(f"model_definition.parameters.{i}.value"),
                         esc(p.get("meaning", "")), span])
        page.table(["parameter", "value", "meaning", "in the firmware"], rows, numeric=(1,))
    page.para(f"Wanted rhythm: {page.val('model_definition.rhythm.cycle_hz')} Hz cycle, control loop "
              f"at {page.val('model_definition.rhythm.loop_hz')} Hz.")


def _complex_cell(page: Page, path: str) -> str:
    real, imag = page.get(f"{path}.0"), page.get(f"{path}.1")
    if imag in (None, 0.0):
        return page.val(f"{path}.0")
    sign = "+" if imag > 0 else "−"
    modulus = math.hypot(real or 0.0, imag)
    return (f"{page.val(f'{path}.0')} {sign} {html.escape(number_text(abs(imag)))}i"
            f' <span class="note">(modulus {modulus:.6g})</span>')


def _equilibria(page: Page) -> None:
    if not page.has("analysis"):
        return
    page.add("<h2>Equilibria</h2>")
    found = page.get("analysis.equilibria") or []
    if not found:
        page.para("None found near the initial state.")
        return
    states = page.get("analysis.states")
    rows = []
    for i, eq in enumerate(found):
        where = ", ".join(f"{esc(s)} = {page.val(f'analysis.equilibria.{i}.state.{j}')}"
                          for j, s in enumerate(states))
        values = "<br>".join(_complex_cell(page, f"analysis.equilibria.{i}.eigenvalues.{k}")
                             for k in range(len(eq["eigenvalues"])))
        kind = eq["kind"]
        rows.append([where, values, f"{page.val(f'analysis.equilibria.{i}.kind')}: "
                                    f"{esc(KIND_MEANINGS.get(kind, ''))}"])
    page.table(["where", "eigenvalues of the Jacobian", "kind"], rows)


def _cycle(page: Page) -> None:
    if not page.has("analysis.cycle"):
        return
    page.add("<h2>Limit cycle</h2>")
    c = "analysis.cycle"
    page.para(f"found {page.val(c + '.found')}, stable {page.val(c + '.stable')}, isolated "
              f"{page.val(c + '.isolated')}: {esc(page.get(c + '.verdict', ''))}")
    if not page.get(c + ".found"):
        return
    rows = [("period (model time units)", page.val(c + ".period"))]
    if page.has("timing.cycle_hz"):
        rows += [("period at the wanted rhythm (s)", page.val("cycle_seconds")),
                 ("wanted rhythm (Hz)", page.val("timing.cycle_hz")),
                 ("model time units per second", page.val("timing.time_scale")),
                 ("steps of the loop per cycle", page.val("timing.steps_per_cycle"))]
    rows.append(("largest nontrivial multiplier modulus", page.val(c + ".stability_margin")))
    page.pairs(rows)
    page.add("<h3>Range over one period</h3>")
    states = page.get("analysis.states")
    page.table(["state", "lowest", "highest"],
               [[esc(s), page.val(f"{c}.state_min.{i}"), page.val(f"{c}.state_max.{i}")]
                for i, s in enumerate(states)], numeric=(1, 2))
    page.add("<h3>Floquet multipliers</h3>")
    page.para("The factor a disturbance keeps after one period; the trivial one (a shift along the "
              "cycle) is 1.", "note")
    trivial = page.get(c + ".trivial_index")
    page.table(["multiplier", "what"],
               [[_complex_cell(page, f"{c}.floquet.{i}"), "trivial" if i == trivial else "nontrivial"]
                for i in range(len(page.get(c + ".floquet") or []))], numeric=(0,))


def _network(page: Page) -> None:
    if not page.has("analysis.network"):
        return
    n = "analysis.network"
    page.add("<h2>Network phase locking</h2>")
    page.para(f"{esc(page.get(n + '.verdict', ''))}")
    rows = [[esc(label), page.val(f"{n}.lags.{i}"), page.val(f"{n}.wanted_lags.{i}"),
             page.val(f"{n}.lag_errors.{i}")] for i, label in enumerate(page.get(n + ".labels") or [])]
    page.table(["oscillator", "lag after oscillator 1 (cycles)", "wanted (cycles)", "error (cycles)"],
               rows, numeric=(1, 2, 3))
    page.pairs([("tolerance (cycles)", page.val(n + ".lag_tolerance")),
                ("common period (model time units)", page.val(n + ".common_period")),
                ("cycles to lock from the initial state", page.val(n + ".cycles_to_lock"))])


def _timing(page: Page) -> None:
    if not page.has("timing"):
        return
    page.add("<h2>Timing</h2>")
    page.pairs([("integrator", page.val("integrator")),
                ("cycle of the model (model time units)", page.val("timing.model_period")),
                ("wanted cycle (Hz)", page.val("timing.cycle_hz")),
                ("control loop (Hz)", page.val("timing.loop_hz")),
                ("time scale (model time units per second)", page.val("timing.time_scale")),
                ("step (model time units)", page.val("timing.step")),
                ("steps per cycle", page.val("timing.steps_per_cycle"))])


def _plan(page: Page) -> None:
    if not page.has("formats"):
        return
    page.add("<h2>Fixed-point plan</h2>")
    states = page.get("formats.states") or {}
    page.pairs([*((f"format of {s}", page.val(f"formats.states.{s}")) for s in states),
                ("word (bits)", page.val("formats.word_bits")),
                ("products (bits)", page.val("formats.product_bits")),
                ("rounding", page.val("formats.rounding")),
                ("overflow", page.val("formats.overflow")),
                ("margin over the planning box", page.val("formats.margin")),
                ("largest state on the cycle", page.val("formats.largest_state_on_cycle")),
                ("headroom (bits)", page.val("formats.headroom_bits")),
                ("integer program fingerprint", page.val("program_fingerprint"))])
    for warning in page.get("warnings") or []:
        page.para(f"warning: {esc(warning)}")
    if page.has("plan.signals"):
        page.add("<h3>Every value of the step</h3>")
        rows = []
        for i, row in enumerate(page.get("plan.signals")):
            p = f"plan.signals.{i}"
            rows.append([f"v{page.val(p + '.value')}", esc(row["kind"]), page.val(p + ".min"),
                         page.val(p + ".max"), page.val(p + ".sure_min"), page.val(p + ".sure_max"),
                         page.val(p + ".format"), page.val(p + ".headroom_bits"), esc(row.get("note", ""))])
        page.table(["value", "kind", "lowest on the cycle", "highest on the cycle", "sure lowest",
                    "sure highest", "format", "headroom (bits)", "what it is"], rows,
                   numeric=(2, 3, 4, 5, 7))
    if page.has("formats.constants"):
        page.add("<h3>Constants</h3>")
        rows = []
        for i, const in enumerate(page.get("formats.constants")):
            p = f"formats.constants.{i}"
            rows.append([f"v{page.val(p + '.value_index')}", page.val(p + ".format"), page.val(p + ".stored"),
                         page.val(p + ".real"), page.val(p + ".error"), esc(const.get("note", ""))])
        page.table(["value", "format", "stored integer", "stands for", "rounding error", "first use"],
                   rows, numeric=(2, 3, 4))


def _trim(page: Page) -> None:
    if not page.has("trim"):
        return
    page.add("<h2>Period trim</h2>")
    page.pairs([("granularity (ppm per LSB of the lead constant)", page.val("trim.granularity_ppm")),
                ("constants moved", html.escape(str(len(page.get("trim.changed") or []))))])


def _start_path(page: Page) -> None:
    if not page.has("start_path"):
        return
    page.add("<h2>Start-up path</h2>")
    page.para("The integer program against the float step map from the model's initial state.", "note")
    page.pairs([("holds", page.val("start_path.ok")), ("steps", page.val("start_path.steps")),
                ("largest parting (share of a state's range)", page.val("start_path.parting")),
                ("tolerance", page.val("start_path.tolerance")),
                ("at step", page.val("start_path.parting_step")),
                ("in state", page.val("start_path.parting_state")),
                ("saturated steps", page.val("start_path.saturated_steps"))])


def _dead_zones(page: Page) -> None:
    if "dead_zones" not in page.data:
        return
    page.add("<h2>Dead zones</h2>")
    zones = page.get("dead_zones") or []
    if not zones:
        page.para("None: the integer map keeps no equilibrium as a rest state.")
        return
    page.para("Integer states the step maps onto themselves near an equilibrium: started there, the "
              "firmware would never move. Never reset the state to the rest state.", "note")
    rows = []
    for i, zone in enumerate(zones):
        p = f"dead_zones.{i}"
        where = ", ".join(f"{esc(s)} = {page.val(f'{p}.equilibrium.{s}')}" for s in zone["equilibrium"])
        radius = ", ".join(f"{esc(s)} {page.val(f'{p}.radius_lsb.{s}')}" for s in zone.get("radius_lsb", {}))
        rows.append([where, radius, page.val(p + ".states"), page.val(p + ".method")])
    page.table(["equilibrium", "radius (LSB)", "rest states", "how found"], rows, numeric=(2,))
    page.para("The run from the initial state lands in a dead zone: "
              f"{page.val('initial_state_in_dead_zone')}")


def _mismatch(page: Page, path: str) -> None:
    if not page.has(path):
        return
    mismatch = page.get(path)
    page.add("<h3>First mismatch</h3>")
    rows = []
    for key, value in mismatch.items():
        what = key.replace("_", " ")
        if key == "operation" and isinstance(value, dict):
            o = f"{path}.operation"
            rows.append(("they part at operation",
                         f"v{page.val(o + '.index')} ({page.val(o + '.kind')}: {page.val(o + '.note')}): "
                         f"expected {page.val(o + '.expected')}, got {page.val(o + '.got')}"))
        elif isinstance(value, list):
            rows.append((what, "[" + ", ".join(page.val(f"{path}.{key}.{i}") for i in range(len(value)))
                         + "]"))
        elif isinstance(value, dict):
            rows.append((what, f"<code>{esc(json.dumps(value))}</code>"))
        elif value is not None:
            rows.append((what, page.val(f"{path}.{key}")))
    page.pairs(rows)


def _layers(page: Page) -> None:
    host = page.has("bit_exact") and page.get("verb") != "board"
    if not (host or page.has("start_path")):
        return
    page.add("<h2>Bit-exact results per layer</h2>")
    rows = []
    if page.has("start_path"):
        rows.append(["float step map (L1) against golden (L2)",
                     f"{page.val('start_path.steps')} steps from the initial state",
                     "follows within tolerance" if page.get("start_path.ok") else "FAILS"])
    if host:
        rows.append(["golden (L2) against host C (L3)",
                     f"{page.val('states_compared')} random states, {page.val('steps_compared')} trajectory "
                     f"steps; init checked {page.val('init_checked')}",
                     "bit-exact" if page.get("bit_exact") else "NOT bit-exact"])
        for i, run in enumerate(page.get("sanitized") or []):
            p = f"sanitized.{i}"
            flags = " ".join(run.get("flags") or [])
            verdict = "undefined behaviour: " + esc(run["undefined_behaviour"]) if run.get(
                "undefined_behaviour") else "bit-exact"
            rows.append([f"host C, sanitized build ({esc(run['compiler'])} {esc(flags)})",
                         f"{page.val(p + '.states_compared')} states, "
                         f"{page.val(p + '.steps_compared')} steps",
                         verdict])
    page.table(["layers compared", "what", "result"], rows)
    if host:
        _mismatch(page, "first_mismatch")


def _outputs(page: Page) -> None:
    """Each output to an actuator: its declaration, its plan, and what every drift run saw."""
    declared = page.get("model_definition.outputs") or {}
    if not declared:
        return
    page.add("<h2>Outputs to actuators</h2>")
    page.para("Each output is offset + scale * value of the state after the step, clamped to its "
              "limits and moved by at most its slew step per step; the clamps are always in the "
              "firmware, and reaching a limit is not a saturated step.")
    planned = {o["name"]: i for i, o in enumerate(page.get("outputs") or [])}
    rows = []
    for name in declared:
        d, i = f"model_definition.outputs.{name}", planned.get(name)
        p = f"outputs.{i}" if i is not None else "outputs.missing"
        rows.append([esc(name), f"<code>{esc(declared[name]['value'])}</code>", page.val(d + ".scale"),
                     page.val(d + ".offset"), esc(declared[name].get("unit", "")),
                     page.val(d + ".min"), page.val(d + ".max"), page.val(d + ".slew"),
                     page.val(p + ".format"), page.val(p + ".slew_step")])
    page.table(["output", "value", "scale", "offset", "unit", "min", "max", "slew (unit/s)",
                "format", "slew step (unit)"], rows, numeric=(2, 3, 5, 6, 7, 9))
    if page.has("output_steps_compared"):
        page.pairs([("random states whose outputs the host C matched",
                     page.val("output_states_compared")),
                    ("steps whose outputs the host C matched", page.val("output_steps_compared"))])
    rows = []
    for i, run in enumerate(page.get("drift.runs") or []):
        for j, output in enumerate(run.get("outputs") or []):
            p = f"drift.runs.{i}.outputs.{j}"
            unit = f" ({esc(output['unit'])})" if output.get("unit") else ""
            rows.append([esc(run["start"]), esc(output["name"]) + unit, page.val(p + ".low_real"),
                         page.val(p + ".high_real"), page.val(p + ".steps"),
                         page.val(p + ".at_min_steps"), page.val(p + ".at_max_steps"),
                         page.val(p + ".at_slew_steps")])
    if rows:
        page.add("<h3>Over the drift runs</h3>")
        page.table(["run", "output", "lowest", "highest", "steps", "at min (steps)",
                    "at max (steps)", "moved by the slew step (steps)"], rows,
                   numeric=(2, 3, 4, 5, 6, 7))


def _drift(page: Page) -> None:
    if not page.has("drift"):
        return
    page.add("<h2>Long-run drift</h2>")
    page.para(f"Verdict: <strong>{page.val('drift.verdict')}</strong>. Run for up to "
              f"{page.val('drift.hours')} h at {page.val('drift.loop_hz')} Hz "
              f"({page.val('drift.steps')} steps), or judged on the exact integer cycle when one is "
              "found (then for all time).")
    page.add("<h3>Tolerances</h3>")
    page.pairs([("amplitude (share of each state's half range)", page.val("drift.tolerances.amplitude")),
                ("period (ppm)", page.val("drift.tolerances.period_ppm")),
                ("phase drift over the run (cycles)", page.val("drift.tolerances.phase_drift_cycles")),
                ("return spread (share of the range)", page.val("drift.tolerances.return_spread"))])
    page.add("<h3>Runs</h3>")
    rows = []
    for i, run in enumerate(page.get("drift.runs") or []):
        p = f"drift.runs.{i}"
        role = "decides the verdict" if run.get("decides_verdict") else "robustness"
        rows.append([f"{esc(run['start'])}<br><span class='note'>{esc(run.get('why', ''))}; {role}</span>",
                     page.val(p + ".horizon"), page.val(p + ".amplitude_error"),
                     page.val(p + ".period_error_ppm"), page.val(p + ".phase_drift_cycles"),
                     page.val(p + ".steps_to_cycle"), page.val(p + ".cycle_length"),
                     page.val(p + ".verdict") + "".join(f"<br>{esc(r)}" for r in run.get("reasons") or [])])
    page.table(["start", "horizon", "amplitude error (share)", "period error (ppm)",
                "phase drift (cycles)", "on the integer cycle from step", "cycle (steps)", "verdict"],
               rows, numeric=(2, 3, 4, 5, 6))
    for note in page.get("drift.notes") or []:
        page.para(f"note: {esc(note)}", "note")


def _certificate(page: Page) -> None:
    if not page.has("certificate"):
        return
    page.add("<h2>Lattice certificate</h2>")
    page.pairs([("proved", page.val("certificate.proved"))]
               + [("why not", esc(r)) for r in page.get("certificate.reasons") or []])


def _board(page: Page) -> None:
    """The board verb's run (its fields at the top of the JSON), or each run of report --board
    (``boards.N``)."""
    if page.get("verb") == "board" and page.has("board"):
        _board_run(page, "")
    for i in range(len(page.get("boards") or [])):
        _board_run(page, f"boards.{i}.")


def _board_run(page: Page, at: str) -> None:
    board = page.get(at + "board")
    page.add(f"<h2>Board {esc(board)}</h2>")
    if page.has(at + "bit_exact"):
        page.add("<h3>Bit-exact results per layer</h3>")
        verdict = "bit-exact" if page.get(at + "bit_exact") else "NOT bit-exact"
        if page.get(at + "bit_exact") and not page.get(at + "ok"):
            verdict += " on what arrived, but the run did not pass"
        page.table(["layers compared", "what", "result"],
                   [[f"golden (L2) against the C on {esc(board)} (L4)",
                     f"{page.val(at + 'states_compared')} states covering "
                     f"{page.val(at + 'steps_compared')} of {page.val(at + 'steps')} steps", verdict]])
        if page.has(at + "link_failure"):
            page.para(f"link failed: {page.val(at + 'link_failure')}")
        if page.has(at + "selftest"):
            passed = page.get(at + "selftest") == 0
            page.para("self-test on the board: " + ("passed" if passed else "FAILED at check ")
                      + ("" if passed else page.val(at + "selftest")))
        _mismatch(page, at + "first_mismatch")
    rows = []
    for key in page.get(at + "size") or {}:
        if page.has(f"{at}size.{key}"):
            rows.append((f"image {key} (bytes)", page.val(f"{at}size.{key}")))
    if page.has(at + "cost.per_step"):
        unit = page.get(at + "cost.unit", "")
        rows += [(f"cost of one step ({unit})", page.val(at + "cost.per_step")),
                 (f"least ({unit})", page.val(at + "cost.least")),
                 (f"most ({unit})", page.val(at + "cost.most")),
                 ("how measured", page.val(at + "cost.method"))]
    if page.has(at + "throughput.samples_per_second"):
        rows.append(("states per second over the link", page.val(at + "throughput.samples_per_second")))
    if rows:
        page.add("<h3>Costs and sizes</h3>")
        page.pairs(rows)


SWEEP_MARKS = (("hopf", "H", "Hopf point"), ("folds", "F", "fold of cycles"),
               ("branch_points", "B", "branch point: a multiplier passes 1, the branch goes on"))


def _sweep_marks(page: Page) -> None:
    """The sweep's labelled points (H1, F1, B1 as on its plot), under the plot."""
    name = esc(page.get("sweep.parameter"))
    page.para(f"Swept {name} from {page.val('sweep.from')} to {page.val('sweep.to')}; followed to the end: "
              f"{page.val('sweep.complete')}" + (f" ({esc(page.get('sweep.reason'))})"
                                                  if page.get("sweep.reason") else ""))
    rows = []
    for key, letter, what in SWEEP_MARKS:
        for k in range(len(page.get(f"sweep.{key}") or [])):
            at = f"sweep.{key}.{k}"
            amplitude = "0" if key == "hopf" else page.val(at + ".amplitude")
            extra = (f"{esc(page.get(at + '.kind'))}, frequency {page.val(at + '.frequency')} radians "
                     "per model time unit" if key == "hopf" else f"period {page.val(at + '.period')}")
            rows.append([f"{letter}{k + 1}", esc(what), page.val(at + ".param_value"), amplitude, extra])
    if rows:
        page.table(["label", "what", f"{name}", "amplitude", "more"], rows, numeric=(2, 3))
    else:
        page.para("No Hopf point and no fold of cycles in the range.", "note")
    for note in page.get("sweep.notes") or []:
        page.para(f"note: {esc(note)}", "note")


def _basin_outcomes(page: Page) -> None:
    """The basin sample's outcomes, under its plot."""
    box = ", ".join(f"{esc(n)} from {page.val(f'basin.box.{n}.0')} to {page.val(f'basin.box.{n}.1')}"
                    for n in page.get("basin.box") or {})
    page.para(f"{page.val('basin.starts')} starts with {box}; share reaching the cycle "
              f"{page.val('basin.fraction_on_cycle')}.")
    page.table(["where the start goes", "starts", "share"],
               [[esc(o["outcome"]), page.val(f"basin.outcomes.{i}.count"),
                 page.val(f"basin.outcomes.{i}.fraction")]
                for i, o in enumerate(page.get("basin.outcomes") or [])], numeric=(1, 2))
    for note in page.get("basin.notes") or []:
        page.para(f"note: {esc(note)}", "note")
