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
ON_REQUEST = ["--sweep", "mu=0.5:1.5", "--sweep-samples", "5", "--basin", "x=-3:3", "--basin", "y=-3:3",
              "--basin-samples", "4"]
UNITS = {"state units", "turns", "LSB", "s", "cycles", "model time units", "parameter units",
         "per model time unit", "radians"}


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
    code = main(["report", "vanderpol", "-o", str(folder), *SMALL, "--junit", str(folder / "checks.xml"),
                 *ON_REQUEST])
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
    assert page.count("<svg") == 5 and "xmlns" not in page  # the three of the run, sweep and basin


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
    # no sweep and no basin sample unless asked for: neither ran, neither is drawn, the page says so
    assert "sweep" not in data and "basin" not in data
    assert 'id="plot-sweep"' not in page and 'id="plot-basin"' not in page and "only on request" in page
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


# --- plots drawn on request (sweep, basin) and a network's output waveforms ------------------------

@pytest.mark.slow
def test_the_sweep_and_basin_asked_for_are_drawn(vanderpol_report) -> None:
    from orbitfix.verify.report.plots import basin_plot, sweep_plot

    data, page, _, _ = vanderpol_report
    assert data["sweep"]["parameter"] == "mu" and len(data["sweep"]["samples"]) == 5
    assert data["basin"]["starts"] == 16 and len(data["basin"]["each_start"]) == 16
    assert 'id="plot-sweep"' in page and 'id="plot-basin"' in page and "only on request" not in page
    shown = dict(tagged_numbers(page))
    assert shown["basin.fraction_on_cycle"] == number_text(data["basin"]["fraction_on_cycle"])
    for figure in (sweep_plot(data["sweep"]), basin_plot(data["basin"], ("x", "y"), (), None)):
        assert unlabelled(figure) == []
        assert all(f">{one.get_ylabel()}<" in page and f">{one.get_xlabel()}<" in page
                   for one in figure.get_axes())


def number_text(value) -> str:
    from orbitfix.verify.report.html import number_text as shown

    return shown(value)


def styled_lines(axes) -> dict[tuple[str, str], list]:
    """The plotted lines of an axes by (line style, marker), each as an (n, 2) array of points."""
    found: dict[tuple[str, str], list] = {}
    for line in axes.get_lines():
        if line.get_marker() in ("None", None, ""):
            continue  # the zero line
        found.setdefault((line.get_linestyle(), line.get_marker()), []).append(line.get_xydata())
    return found


@pytest.fixture(scope="module")
def bautin_sweep() -> dict:
    """vibration_drive (the Bautin normal form r' = r (mu + 2 r^2 - r^4), theta' = omega) swept
    over mu from -1.5 to 0.5 on nine values."""
    from orbitfix.gen.analysis.sweep import sweep
    from orbitfix.gen.model.model_file import load_model

    return sweep(load_model("vibration_drive"), "mu", -1.5, 0.5, samples=9, workers=1).to_json()


def test_the_sweep_plot_draws_the_branches_of_the_closed_form(bautin_sweep) -> None:
    """Held to the Bautin normal form's closed form (Kuznetsov, "Elements of Applied Bifurcation
    Theory", 3rd ed. 2004, sec. 8.3): the rest state's eigenvalues are mu +- i omega, so the leading
    real part is mu, stable below 0; the cycles have r^2 = 1 +- sqrt(1 + mu), the larger stable, the
    smaller unstable; they meet at the fold mu = -1, r = 1; the Hopf point is mu = 0."""
    from orbitfix.verify.report.plots import STABLE, UNSTABLE, sweep_plot

    figure = sweep_plot(bautin_sweep)
    assert unlabelled(figure) == []
    top, bottom = figure.get_axes()[:2]
    stable, unstable = (STABLE["linestyle"], STABLE["marker"]), (UNSTABLE["linestyle"], UNSTABLE["marker"])
    assert stable[0] != unstable[0] and stable[1] != unstable[1]  # not colour alone
    for axes in (top, bottom):
        assert set(styled_lines(axes)) == {stable, unstable}
    for style, lines in styled_lines(top).items():
        for points in lines:
            assert np.allclose(points[:, 1], points[:, 0], atol=1e-9)  # leading real part = mu
            inner = points[1:-1] if len(points) > 2 else points[:0]
            assert np.all(inner[:, 0] < 0) if style == stable else np.all(inner[:, 0] > 0)
    for style, lines in styled_lines(bottom).items():
        sign = 1.0 if style == stable else -1.0
        for points in lines:  # a line ends on the first point of the next (one unbroken curve)
            mu, r = points[:-1, 0], points[:-1, 1]
            assert np.allclose(r ** 2, 1 + sign * np.sqrt(np.clip(1 + mu, 0, None)), atol=2e-3)
    labels = {text.get_text(): text.xy for axes in (top, bottom) for text in axes.texts}
    assert labels["H1"] == pytest.approx((0.0, 0.0), abs=1e-6)
    assert labels["F1"] == pytest.approx((-1.0, 1.0), abs=1e-5)
    # the labels are the JSON's own points
    assert labels["F1"] == (bautin_sweep["folds"][0]["param_value"], bautin_sweep["folds"][0]["amplitude"])


def test_the_sweep_on_the_page_lists_its_labelled_points(bautin_sweep) -> None:
    from orbitfix.verify.report.report_folder import page_text

    data = {"ok": True, "verb": "report", "model": "vibration_drive", "exit_code": 0, "error": None,
            "sweep": bautin_sweep}
    page = page_text(data, {})
    assert 'id="plot-sweep"' in page and 'id="plot-basin"' not in page and "no basin sample" in page
    shown = dict(tagged_numbers(page))
    assert shown["sweep.hopf.0.param_value"] == number_text(bautin_sweep["hopf"][0]["param_value"])
    assert shown["sweep.folds.0.amplitude"] == number_text(bautin_sweep["folds"][0]["amplitude"])
    assert mismatches(page, data) == [] and "http" not in page
    assert ">H1<" in page and ">F1<" in page  # on the plot, as text, as in the table
    # absent when no sweep ran
    del data["sweep"]
    assert 'id="plot-sweep"' not in page_text(data, {}) and "Parameter sweep" not in page_text(data, {})


def test_the_basin_plot_marks_each_start_by_the_closed_forms_outcome() -> None:
    """vibration_drive at mu = -0.5: the rest state is stable and the unstable cycle at
    r^2 = 1 - sqrt(1 + mu) (Kuznetsov 2004, sec. 8.3) bounds its basin: starts inside settle, starts
    outside reach the stable cycle at r^2 = 1 + sqrt(1 + mu)."""
    from orbitfix.gen.analysis.basin import box_starts, sample_basin
    from orbitfix.gen.model.model_file import load_model
    from orbitfix.verify.report.report_folder import page_text

    model = load_model("vibration_drive")
    box = {"x": (-1.0, 1.0), "y": (-1.0, 1.0)}
    found = sample_basin(model, box_starts(model, box, grid=5), box)
    data = {"ok": True, "verb": "report", "model": model.name, "exit_code": 0, "error": None,
            "basin": found.to_json(every_start=True)}
    page = page_text(data, {"basin": found})
    assert 'id="plot-basin"' in page and 'id="plot-sweep"' not in page and "no sweep" in page
    assert mismatches(page, data) == []
    from orbitfix.verify.report.plots import basin_plot

    figure = basin_plot(data["basin"], model.state_names, (), found.cycle.samples)
    assert unlabelled(figure) == []
    (axes,) = figure.get_axes()
    edge = math.sqrt(1 - math.sqrt(0.5))
    drawn = {c.get_label(): c.get_offsets() for c in axes.collections}
    assert set(drawn) == {"reaches the cycle", "settles at the stable focus (0, 0)"}
    assert np.all(np.hypot(*drawn["reaches the cycle"].T) > edge)
    assert np.all(np.hypot(*drawn["settles at the stable focus (0, 0)"].T) < edge)
    assert sum(len(v) for v in drawn.values()) == 25
    (cycle,) = [line for line in axes.get_lines() if line.get_label() == "continuous cycle"]
    assert np.allclose(np.hypot(*cycle.get_xydata().T), math.sqrt(1 + math.sqrt(0.5)), rtol=1e-6)


def lags_off(figure) -> list[str]:
    """Rows of the waveform plot whose dotted lag lines are not where the drawn signal rises through
    its mean (linear interpolation between samples, common practice), to 1e-3 cycles."""
    wrong = []
    for number, axes in enumerate(figure.get_axes()):
        (signal,) = [line for line in axes.get_lines() if line.get_linestyle() == "-"]
        t, y = signal.get_xdata(), signal.get_ydata()
        level = np.nanmean(y)
        rises = [t[k] + (level - y[k]) / (y[k + 1] - y[k]) * (t[k + 1] - t[k]) for k in range(len(t) - 1)
                 if y[k] < level <= y[k + 1]]
        marks = [line.get_xdata()[0] for line in axes.get_lines() if line.get_linestyle() == ":"]
        for mark in marks:
            if mark <= 2.0 and min(abs(mark - r) for r in [*rises, 0.0, 2.0]) > 1e-3:
                wrong.append(f"row {number}: lag line at {mark:.4f}, rises at {rises}")
    return wrong


@pytest.mark.parametrize("name", ["quadruped_walk", "phase_chain"])  # first states; phase states
def test_a_network_page_draws_its_waveforms_with_the_jsons_lags(name) -> None:
    from orbitfix.gen.analysis.summary import analyse
    from orbitfix.gen.model.model_file import load_model
    from orbitfix.verify.report.plots import network_waveforms
    from orbitfix.verify.report.report_folder import page_text, report_data

    analysis = analyse(load_model(name))
    data = report_data("check", {"model": name}, {"analysis": analysis}, None, 0)
    page = page_text(data, {"analysis": analysis})
    network = data["analysis"]["network"]
    assert 'id="plot-network-waveforms"' in page and "http" not in page
    for label, lag in zip(network["labels"], network["lags"], strict=True):
        assert f">{label}: lag {lag:.4f} cycles" in page  # the JSON's lag, written on its row
    model = analysis.model
    angles = tuple(i for i, s in enumerate(model.states) if s.angle)
    figure = network_waveforms(analysis.cycle.samples, model.network, model.state_names, angles, network)
    assert unlabelled(figure) == [] and len(figure.get_axes()) == len(network["labels"])
    assert lags_off(figure) == []
    # a wrong lag in the JSON is drawn away from where that oscillator rises, and is caught
    wrong = {**network, "lags": [network["lags"][0], network["lags"][1] + 0.05, *network["lags"][2:]]}
    assert lags_off(network_waveforms(analysis.cycle.samples, model.network, model.state_names, angles,
                                      wrong)) != []


def test_a_single_oscillator_page_has_no_waveforms() -> None:
    from orbitfix.gen.analysis.summary import analyse
    from orbitfix.gen.model.model_file import load_model
    from orbitfix.verify.report.report_folder import page_text, report_data

    analysis = analyse(load_model("vanderpol"))
    data = report_data("check", {"model": "vanderpol"}, {"analysis": analysis}, None, 0)
    assert "plot-network-waveforms" not in page_text(data, {"analysis": analysis})


@pytest.mark.parametrize("argv, message", [
    (["--sweep", "mu"], "--sweep 'mu': write NAME=LOW:HIGH"),
    (["--sweep", "mu=2:1"], "LOW below HIGH"),
    (["--sweep", "no_such=0:1"], "no_such"),
    (["--basin", "z=0:1"], "'z'"),
    (["--basin", "x=0:1", "--basin", "x=1:2"], "--basin gives 'x' twice"),
])
def test_a_bad_sweep_or_basin_is_refused_before_any_work(tmp_path, capsys, argv, message) -> None:
    err = refused(["report", "vanderpol", "-o", str(tmp_path / "out"), *argv], capsys)
    assert message in err
    data = json.loads((tmp_path / "out" / "report.json").read_text())
    assert "analysis" not in data and "sweep" not in data and message in data["error"]


def test_a_model_without_a_stable_cycle_still_gets_its_sweep_and_says_why_it_has_no_basin(
        tmp_path, capsys) -> None:
    folder = tmp_path / "report"
    code = main(["report", "vanderpol", "--set", "mu=-1", "-o", str(folder), "--sweep", "mu=-1:1",
                 "--sweep-samples", "5", "--basin", "x=-1:1", "--basin-samples", "3"])
    capsys.readouterr()
    assert code == 1  # no stable cycle: the checks stop after the analysis
    data = json.loads((folder / "report.json").read_text())
    page = (folder / "report.html").read_text()
    assert data["basin"] == {"error": f"no basin to sample: {data['analysis']['cycle']['verdict']}"}
    assert len(data["sweep"]["hopf"]) == 1 and data["sweep"]["hopf"][0]["param_value"] == pytest.approx(
        0.0, abs=1e-8)  # Van der Pol's rest state: eigenvalues (mu +- sqrt(mu^2 - 4)) / 2 (common practice)
    assert 'id="plot-sweep"' in page and 'id="plot-basin"' not in page and "No basin plot" in page
    assert "STOPPED" in page and mismatches(page, data) == [] and "http" not in page


@pytest.mark.slow
def test_the_page_shows_each_output_with_its_limits_and_its_runs(tmp_path) -> None:
    # fin_drive's fin angle (gen/model/library/fin_drive.toml): declared, planned, and seen by
    # every drift run inside its end stops; each number from its place in the JSON.
    folder = tmp_path / "fin"
    assert main(["report", "fin_drive", "-o", str(folder), *SMALL, "--hours", "0.01"]) == 0
    data = json.loads((folder / "report.json").read_text())
    page = (folder / "report.html").read_text(encoding="utf-8")
    assert "Outputs to actuators" in page and mismatches(page, data) == []
    shown = dict(tagged_numbers(page))
    for path in ("model_definition.outputs.fin_angle.min", "model_definition.outputs.fin_angle.slew",
                 "outputs.0.format", "outputs.0.slew_step", "output_steps_compared",
                 "drift.runs.0.outputs.0.low_real", "drift.runs.0.outputs.0.at_max_steps"):
        assert path in shown, path
    assert shown["outputs.0.format"] == data["outputs"][0]["format"]
    for run in data["drift"]["runs"]:
        (fin,) = run["outputs"]
        assert 55.0 <= fin["low_real"] <= fin["high_real"] <= 125.0


def test_a_model_without_outputs_has_no_outputs_section() -> None:
    data = {"ok": True, "verb": "verify", "model": "demo", "exit_code": 0, "error": None,
            "model_definition": {"name": "demo", "states": [], "equations": {}, "parameters": [],
                                 "rhythm": {"cycle_hz": 1.0, "loop_hz": 100.0}}}
    assert "Outputs to actuators" not in report_html(data)
