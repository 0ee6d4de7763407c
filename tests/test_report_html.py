"""``orbitfix report MODEL -o DIR`` and ``--report DIR`` on verify and board: report.json and
report.html, one self-contained page.

The page is held to its JSON: every number it shows from the JSON carries the JSON path it came from
(``data-json``), and each one is read back with Python's own HTML parser and compared. The cycle's
period is held to scipy besides (outside the project). The plots' axes must each name a unit; the
page must hold no ``http`` at all; and headless Chromium (Debian's ``chromium``) must open it with
no console message and take a screenshot of it.
"""

from __future__ import annotations

import html
import json
import math
import os
import re
import shutil
import struct
import subprocess
from html.parser import HTMLParser

import numpy as np
import pytest
from conftest import refused, slip_one_product
from scipy.integrate import solve_ivp

from orbitfix.verify.cli.main import main
from orbitfix.verify.report.html import lookup, report_html

SMALL = ["--states", "2000", "--steps", "2000"]
UNITS = {"state units", "turns", "LSB", "s", "cycles", "model time units"}


class _Tagged(HTMLParser):
    """Python's HTML parser collecting (data-json path, text) of every tagged element."""

    def __init__(self) -> None:
        super().__init__()
        self.found: list[tuple[str, str]] = []
        self._stack: list[tuple[str | None, list[str]]] = []

    def handle_starttag(self, tag: str, attrs: list) -> None:
        if tag in VOID:
            return
        self._stack.append((dict(attrs).get("data-json"), []))

    def handle_endtag(self, tag: str) -> None:
        if tag in VOID or not self._stack:
            return
        path, text = self._stack.pop()
        if path is not None:
            self.found.append((path, "".join(text)))
        if self._stack:
            self._stack[-1][1].extend(text)

    def handle_data(self, data: str) -> None:
        if self._stack:
            self._stack[-1][1].append(data)


VOID = {"br", "meta", "img", "hr", "input", "link", "use", "path", "rect", "circle", "line"}


def tagged_numbers(page: str) -> list[tuple[str, str]]:
    """(JSON path, shown text) of every value the page shows from its JSON."""
    parser = _Tagged()
    parser.feed(page)
    parser.close()
    return parser.found


def mismatches(page: str, data: dict) -> list[str]:
    """Every shown value that is not the JSON's value at its path (numbers to the ten significant
    digits the page writes)."""
    wrong = []
    for path, shown in tagged_numbers(page):
        value = lookup(data, path)
        if isinstance(value, bool):
            ok = shown == ("yes" if value else "no")
        elif isinstance(value, int):
            ok = shown == str(value)
        elif isinstance(value, float):
            ok = math.isclose(float(shown), value, rel_tol=1e-9, abs_tol=1e-300)
        else:
            ok = shown == str(value)
        if not ok:
            wrong.append(f"{path}: page {shown!r}, JSON {value!r}")
    return wrong


@pytest.fixture(scope="module")
def vanderpol_report(tmp_path_factory) -> tuple:
    folder = tmp_path_factory.mktemp("report")
    code = main(["report", "vanderpol", "-o", str(folder), *SMALL, "--junit", str(folder / "checks.xml")])
    data = json.loads((folder / "report.json").read_text())
    return data, (folder / "report.html").read_text(encoding="utf-8"), code, folder


@pytest.mark.slow
def test_the_page_shows_the_json_numbers(vanderpol_report) -> None:
    data, page, code, _ = vanderpol_report
    assert code == 0 and data["ok"] and data["verb"] == "report"
    shown = dict(tagged_numbers(page))
    assert len(shown) > 150
    assert mismatches(page, data) == []
    # the numbers a reader looks for first are all there, each from its place in the JSON
    for path in ("analysis.cycle.period", "analysis.cycle.floquet.0.0", "analysis.cycle.floquet.1.0",
                 "analysis.equilibria.0.kind", "analysis.equilibria.0.eigenvalues.0.0",
                 "timing.steps_per_cycle", "formats.states.x", "formats.states.y", "formats.word_bits",
                 "plan.signals.0.format", "formats.constants.0.stored", "dead_zones.0.radius_lsb.x",
                 "states_compared", "drift.runs.0.period_error_ppm", "drift.tolerances.period_ppm",
                 "start_path.parting"):
        assert path in shown, path
    assert shown["formats.states.x"] == data["formats"]["states"]["x"] == "Q5.27"
    assert float(shown["analysis.cycle.period"]) == pytest.approx(data["analysis"]["cycle"]["period"],
                                                                 rel=1e-9)
    # the period at the wanted rhythm: one cycle at the model's cycle_hz
    assert data["cycle_seconds"] == pytest.approx(1 / data["timing"]["cycle_hz"], rel=1e-15)
    assert shown["cycle_seconds"] == f"{1 / data['timing']['cycle_hz']:.10g}"
    assert "bit-exact" in page and data["bit_exact"]
    assert "orbitfix claims no certification" in page and html.escape(data["caution"]) in page


@pytest.mark.slow
def test_report_with_junit_writes_verifys_cases(vanderpol_report) -> None:
    import xml.etree.ElementTree as ElementTree

    data, _, _, folder = vanderpol_report
    suite = ElementTree.parse(folder / "checks.xml").getroot().find("testsuite")
    names = [case.get("name") for case in suite.findall("testcase")]
    assert suite.get("name") == "orbitfix report vanderpol" and suite.get("failures") == "0"
    assert "bit-exact on the host" in names
    assert [n for n in names if n.startswith("drift from ")] == [
        f"drift from {run['start']}" for run in data["drift"]["runs"]]


@pytest.mark.slow
def test_a_changed_number_on_the_page_is_caught(vanderpol_report) -> None:
    data, page, _, _ = vanderpol_report
    period = data["analysis"]["cycle"]["period"]
    tag = f'<span data-json="analysis.cycle.period">{period:.10g}</span>'
    assert tag in page
    seeded = page.replace(tag, f'<span data-json="analysis.cycle.period">{period * 1.001:.10g}</span>')
    assert mismatches(seeded, data) == [f"analysis.cycle.period: page '{period * 1.001:.10g}', "
                                        f"JSON {period!r}"]


@pytest.mark.slow
def test_the_reported_period_is_scipys(vanderpol_report) -> None:
    """The period of the report's JSON against the period measured with scipy's DOP853 on the Van
    der Pol equations (mu = 1): the time between upward crossings of x = 0 after the transient."""
    data, _, _, _ = vanderpol_report
    mu = data["analysis"]["params"]["mu"]

    def field(_t: float, s: np.ndarray) -> list[float]:
        return [s[1], mu * (1 - s[0] ** 2) * s[1] - s[0]]

    def up(_t: float, s: np.ndarray) -> float:
        return s[0]
    up.direction = 1
    found = solve_ivp(field, (0, 120), [0.5, 0.0], method="DOP853", rtol=1e-11, atol=1e-12, events=up)
    crossings = found.t_events[0]
    assert data["analysis"]["cycle"]["period"] == pytest.approx(crossings[-1] - crossings[-2], rel=1e-7)


@pytest.mark.slow
def test_the_page_holds_no_http_and_needs_nothing_from_elsewhere(vanderpol_report) -> None:
    _, page, _, _ = vanderpol_report
    assert "http" not in page.lower()
    assert "<script" not in page and "<link" not in page and "@import" not in page
    assert "src=" not in page
    assert page.count("<svg") == 3 and "xmlns" not in page
    assert "sweep" in page and "basin" in page  # says which plots are left out, and why


@pytest.mark.slow
def test_every_plot_axis_names_its_unit(vanderpol_report) -> None:
    from orbitfix.gen.model.model_file import load_model
    from orbitfix.gen.pipeline import design
    from orbitfix.gen.study.side_by_side import run_side_by_side
    from orbitfix.verify.report.plots import report_plots, svg_text

    _, page, _, _ = vanderpol_report
    built = design(load_model("vanderpol"))
    side = run_side_by_side(built, cycles=2.5)
    plots = report_plots(side, built.analysis.cycle.samples)
    assert [p.name for p in plots] == ["phase-portrait", "errors", "returns"]
    for plot in plots:
        axes = plot.figure.get_axes()
        assert axes
        assert unlabelled(plot.figure) == []
        svg = svg_text(plot.figure, plot.name)
        for one in axes:  # the labels are text in the SVG (no font fetched, no glyph paths)
            assert f">{one.get_xlabel()}<" in svg and f">{one.get_ylabel()}<" in svg
        assert "http" not in svg
        # the page carries the same plots under the same labels
        assert f'id="plot-{plot.name}"' in page
        assert all(f">{one.get_ylabel()}<" in page for one in axes)


@pytest.mark.slow
def test_the_side_by_side_series_are_golden_and_the_float_step_map() -> None:
    """The plotted series against their sources run afresh: golden from the plan's initial state
    (so continuing the start-up path's trajectory stitches nothing wrong), the float step map step
    by step, and each upward crossing of the section found by linear interpolation between the two
    steps around it (common practice)."""
    from orbitfix.gen.model.model_file import load_model
    from orbitfix.gen.pipeline import design
    from orbitfix.gen.program import golden
    from orbitfix.gen.program.lowering import evaluate_real
    from orbitfix.gen.study.side_by_side import run_side_by_side

    built = design(load_model("vanderpol"))
    program = built.plan.program
    fresh = golden.run(program, np.asarray(built.plan.initial_state), 1500)
    side = run_side_by_side(built, start_trajectory=fresh[:700], cycles=2.2)
    assert side.steps == math.ceil(2.2 * built.timing.steps_per_cycle)
    scale = 2.0 ** np.asarray(program.state_fraction_bits, dtype=float)
    assert np.array_equal(side.integer, fresh[: side.steps + 1] / scale)
    state = np.asarray(built.model.initial_state, dtype=float).reshape(-1, 1)
    for k in range(1, side.steps + 1):
        values = evaluate_real(program, state)
        state = np.stack([values[i] for i in program.next_state])
        assert np.allclose(side.floats[k], state[:, 0], rtol=0, atol=1e-15)
    level = side.section.level

    def upward(x: np.ndarray) -> list[float]:
        return [k - 1 + (level - x[k - 1]) / (x[k] - x[k - 1]) for k in range(1, len(x))
                if x[k - 1] < level <= x[k]]
    ints, floats = upward(side.integer[:, 0]), upward(side.floats[:, 0])
    assert np.allclose(side.integer_crossings, ints) and np.allclose(side.float_crossings, floats)
    assert np.allclose(side.phase_error_steps, np.subtract(ints, floats)[: len(side.phase_error_steps)])
    # a seeded slip of one step in golden's series shows as a phase error of about one step
    slipped = run_side_by_side(built, start_trajectory=np.vstack([fresh[:1], fresh[:1500]]), cycles=2.2)
    assert np.allclose(slipped.phase_error_steps, side.phase_error_steps + 1, atol=0.05)


def unlabelled(figure) -> list[str]:
    """Axes whose x or y label does not end in a known unit in parentheses."""
    wrong = []
    for number, axes in enumerate(figure.get_axes()):
        for which, label in (("x", axes.get_xlabel()), ("y", axes.get_ylabel())):
            unit = re.search(r"\(([^()]+)\)$", label)
            if unit is None or unit.group(1) not in UNITS:
                wrong.append(f"axes {number} {which}: {label!r}")
    return wrong


def test_an_axis_without_a_unit_is_caught() -> None:
    from matplotlib.figure import Figure

    figure = Figure()
    axes = figure.add_subplot()
    axes.set_xlabel("time (s)")
    axes.set_ylabel("amplitude")
    assert unlabelled(figure) == ["axes 0 y: 'amplitude'"]


def test_the_page_from_a_small_object_tags_each_number() -> None:
    data = {"ok": True, "verb": "verify", "model": "demo", "exit_code": 0, "error": None,
            "timing": {"model_period": 6.25, "cycle_hz": 2.0, "loop_hz": 500.0, "time_scale": 12.5,
                       "step": 0.025, "steps_per_cycle": 250.0}, "integrator": "rk4",
            "caution": "Caution: test. orbitfix claims no certification."}
    page = report_html(data)
    assert dict(tagged_numbers(page))["timing.steps_per_cycle"] == "250"
    assert mismatches(page, data) == []
    assert "Limit cycle" not in page  # no analysis ran: no section for it


def test_a_network_page_shows_its_phase_lags() -> None:
    from orbitfix.gen.analysis.summary import analyse
    from orbitfix.gen.model.model_file import load_model
    from orbitfix.verify.report.report_folder import page_text, report_data

    data = report_data("check", {"model": "vanderpol_pair"},
                       {"analysis": analyse(load_model("vanderpol_pair"))}, None, 0)
    page = page_text(data, {})
    shown = dict(tagged_numbers(page))
    assert "Network phase locking" in page and "analysis.network.lags.1" in shown
    assert shown["analysis.network.wanted_lags.1"] == "0"
    assert mismatches(page, data) == [] and "http" not in page


def test_an_unknown_model_is_refused_and_its_error_written(tmp_path, capsys) -> None:
    err = refused(["report", "no_such_model", "-o", str(tmp_path / "out")], capsys)
    assert "no_such_model" in err
    data = json.loads((tmp_path / "out" / "report.json").read_text())
    assert data["ok"] is False and data["exit_code"] == 2 and "no_such_model" in data["error"]
    page = (tmp_path / "out" / "report.html").read_text()
    assert "STOPPED" in page and "no_such_model" in page and "http" not in page


@pytest.mark.parametrize("verb", [["report", "vanderpol", "-o"], ["verify", "vanderpol", "--report"],
                                  ["board", "vanderpol", "--board", "host", "--report"]])
def test_a_folder_that_cannot_be_written_is_refused_before_any_work(tmp_path, capsys, verb) -> None:
    blocker = tmp_path / "file"
    blocker.write_text("")
    err = refused([*verb, str(blocker / "out")], capsys)
    assert "cannot write the report" in err and str(blocker) in err
    assert not (tmp_path / "file" / "out").exists()


@pytest.mark.slow
def test_verify_with_a_seeded_slip_reports_the_first_mismatch(tmp_path, capsys) -> None:
    firmware = tmp_path / "fw"
    assert main(["gen", "vanderpol", "-o", str(firmware)]) == 0
    slip_one_product(firmware / "vanderpol.c")
    folder = tmp_path / "report"
    code = main(["verify", "vanderpol", "--sources", str(firmware), "--skip-drift", *SMALL,
                 "--report", str(folder)])
    capsys.readouterr()
    assert code == 1
    data = json.loads((folder / "report.json").read_text())
    page = (folder / "report.html").read_text()
    assert data["bit_exact"] is False and data["first_mismatch"] is not None
    assert "NOT bit-exact" in page and "First mismatch" in page and "FAILED" in page
    shown = dict(tagged_numbers(page))
    assert shown["first_mismatch.step"] == str(data["first_mismatch"]["step"])
    assert mismatches(page, data) == []


@pytest.mark.slow
def test_verify_stopped_by_no_stable_cycle_still_writes_the_analysis(tmp_path, capsys) -> None:
    folder = tmp_path / "report"
    code = main(["verify", "vanderpol", "--set", "mu=-1", *SMALL, "--report", str(folder)])
    capsys.readouterr()
    assert code == 1
    data = json.loads((folder / "report.json").read_text())
    page = (folder / "report.html").read_text()
    assert data["analysis"]["cycle"]["stable"] is False and "no stable limit cycle" in data["error"]
    assert "STOPPED" in page and "Equilibria" in page and mismatches(page, data) == []


@pytest.mark.slow
def test_board_on_the_host_reports_its_run_and_costs(tmp_path, capsys) -> None:
    folder = tmp_path / "report"
    code = main(["board", "vanderpol", "--board", "host", "--steps", "2000", "--report", str(folder)])
    capsys.readouterr()
    assert code == 0
    data = json.loads((folder / "report.json").read_text())
    page = (folder / "report.html").read_text()
    assert data["verb"] == "board" and data["bit_exact"] and data["board"] == "host"
    shown = dict(tagged_numbers(page))
    assert shown["steps_compared"] == "2000" and "cost.per_step" in shown and "size.text" in shown
    assert "Board host" in page and mismatches(page, data) == [] and "http" not in page


@pytest.mark.slow
def test_report_streams_on_each_board_and_reports_it(tmp_path, capsys) -> None:
    import xml.etree.ElementTree as ElementTree

    folder = tmp_path / "report"
    code = main(["report", "vanderpol", "-o", str(folder), "--skip-drift", *SMALL, "--board", "host",
                 "--board-steps", "2000", "--junit", str(folder / "checks.xml")])
    capsys.readouterr()
    assert code == 0
    data = json.loads((folder / "report.json").read_text())
    page = (folder / "report.html").read_text()
    (run,) = data["boards"]
    assert run["board"] == "host" and run["ok"] and run["steps_compared"] == 2000
    shown = dict(tagged_numbers(page))
    assert shown["boards.0.steps_compared"] == "2000" and "boards.0.cost.per_step" in shown
    assert "Board host" in page and mismatches(page, data) == []
    cases = [c.get("name") for c in ElementTree.parse(folder / "checks.xml").getroot().iter("testcase")]
    assert "bit-exact on the host" in cases and "bit-exact stream on host" in cases


@pytest.mark.parametrize("board, why", [("nucleo-f401re", "real board"), ("no_such_board", "no_such_board")])
def test_report_refuses_a_board_it_cannot_start_before_any_work(tmp_path, capsys, board, why) -> None:
    err = refused(["report", "vanderpol", "-o", str(tmp_path / "out"), "--board", board], capsys)
    assert why in err
    data = json.loads((tmp_path / "out" / "report.json").read_text())
    assert "analysis" not in data and why in data["error"]  # refused before the analysis ran


# --- headless Chromium --------------------------------------------------------------------------

def _chromium() -> str | None:
    found = shutil.which("chromium") or shutil.which("chromium-browser")
    if found is None and os.environ.get("CI") in ("1", "true"):
        pytest.fail("CI must have Debian's chromium (.ci/run installs it)")
    return found


def open_in_chromium(browser: str, page_path, shot) -> tuple[int, list[str]]:
    """Open the page headless, screenshot it; returns (exit code, the log lines that come from the
    page: console messages and uncaught errors; the browser's own complaints about a missing
    system bus or GPU in a container are not the page's)."""
    done = subprocess.run(
        [browser, "--headless", "--no-sandbox", "--disable-gpu", f"--screenshot={shot}",
         "--window-size=1200,3000", "--enable-logging=stderr", "--v=0", page_path.as_uri()],
        capture_output=True, text=True, timeout=60, check=False)
    lines = (done.stderr + done.stdout).splitlines()
    from_page = [line for line in lines if ":CONSOLE" in line or "Uncaught" in line
                 or ("ERROR" in line and page_path.name in line)]
    return done.returncode, from_page


def png_size(path) -> tuple[int, int]:
    """Width and height from a PNG's header (the IHDR chunk; PNG specification, section 11.2.2)."""
    head = path.read_bytes()[:24]
    assert head[:8] == b"\x89PNG\r\n\x1a\n" and head[12:16] == b"IHDR"
    return struct.unpack(">II", head[16:24])


@pytest.mark.slow
def test_chromium_opens_the_page_without_console_errors(vanderpol_report, tmp_path) -> None:
    browser = _chromium()
    if browser is None:
        pytest.skip("Debian's chromium is not installed (CI installs it)")
    _, page, _, _ = vanderpol_report
    page_path = tmp_path / "report.html"
    page_path.write_text(page, encoding="utf-8")
    shot = tmp_path / "shot.png"
    code, from_page = open_in_chromium(browser, page_path, shot)
    assert code == 0 and from_page == []
    assert png_size(shot) == (1200, 3000)
    assert shot.stat().st_size > 50_000  # a blank 1200 x 3000 page compresses to a few kB


@pytest.mark.slow
def test_chromium_console_errors_are_caught(tmp_path) -> None:
    """The check above can fail: a page with a script error shows in the lines it reads."""
    browser = _chromium()
    if browser is None:
        pytest.skip("Debian's chromium is not installed (CI installs it)")
    page_path = tmp_path / "bad.html"
    page_path.write_text("<!DOCTYPE html><html><body><p>x</p><script>no_such_function();</script>"
                         "</body></html>")
    code, from_page = open_in_chromium(browser, page_path, tmp_path / "bad.png")
    assert code == 0 and any("Uncaught" in line for line in from_page)
