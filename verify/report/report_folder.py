"""The report folder that ``orbitfix report MODEL -o DIR`` and ``--report DIR`` write: ``report.json``
(the verb's own JSON object with the stages that ran inside it: the model, its analysis, the plan's
tables, the side-by-side run the plots are drawn from) and ``report.html`` (the page made from that
object, with the plots inline).

Written after a failed or stopped run too, from whatever was computed before it stopped; the JSON
is written first, so a page that cannot be drawn loses no number.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

from orbitfix.gen.errors import InputError

JSON_NAME = "report.json"
HTML_NAME = "report.html"
LEFT_OUT = ("The parameter sweep and the basin sample are not drawn: their data comes from runs of "
            "their own ('orbitfix sweep', 'orbitfix basin'), which this report does not make.")


class ReportFolderError(InputError):
    """The report folder cannot be made or written to (exit 2)."""


def ready_folder(folder: Path) -> None:
    """Make the folder and prove it can be written to, before any work starts."""
    probe = folder / ".orbitfix-write-test"
    try:
        folder.mkdir(parents=True, exist_ok=True)
        probe.write_text("")
        probe.unlink()
    except OSError as exc:
        raise ReportFolderError(f"cannot write the report into '{folder}': {exc.strerror or exc}; "
                                "choose a folder you can write to") from None


def report_data(verb: str, partial: dict, computed: dict, error: str | None, code: int) -> dict:
    """The report's JSON object: the verb's fields, then each stage that ran inside it, all as
    plain data (``ok`` first)."""
    from orbitfix.gen.safety import CAUTION
    from orbitfix.verify.report.json_output import json_object

    data: dict[str, Any] = {"verb": verb, "exit_code": code, "error": error, **partial}
    built = computed.get("design")
    analysis = built.analysis if built is not None else computed.get("analysis")
    if analysis is not None:
        data["model_definition"] = analysis.model.describe()
        data["analysis"] = analysis.to_json()
    if built is not None:
        from orbitfix.verify.report.design import design_json, plan_json

        for key, value in design_json(built).items():
            data.setdefault(key, value)
        data["plan"] = plan_json(built)
        side = computed.get("side_by_side")
        if side is not None:
            data["side_by_side"] = side.to_json()
    timing = data.get("timing")
    if isinstance(timing, dict) and timing.get("cycle_hz"):
        data["cycle_seconds"] = 1.0 / timing["cycle_hz"]  # the period at the wanted rhythm
    data["caution"] = CAUTION
    return json_object(code == 0 and error is None, data)


def write_report(folder: Path, verb: str, partial: dict, computed: dict, error: str | None,
                 code: int) -> list[Path]:
    """Write report.json, then report.html; returns the paths written. A folder that cannot be
    written is an input error."""
    built = computed.get("design")
    if built is not None and "side_by_side" not in computed:
        from orbitfix.gen.study.side_by_side import run_side_by_side

        start = computed.get("start_path")
        computed["side_by_side"] = run_side_by_side(
            built, start.trajectory if start is not None else None)
    data = report_data(verb, partial, computed, error, code)
    paths = [folder / JSON_NAME, folder / HTML_NAME]
    _write(paths[0], json.dumps(data, indent=2, allow_nan=False) + "\n")
    _write(paths[1], page_text(data, computed))
    return paths


def page_text(data: dict, computed: dict) -> str:
    """The page, with the plots drawn from the side-by-side run when there is one."""
    from orbitfix.verify.report.html import report_html

    plots = []
    left_out = [LEFT_OUT]
    side = computed.get("side_by_side")
    if side is not None:
        from orbitfix.verify.report.plots import report_plots, svg_text

        built = computed["design"]
        for plot in report_plots(side, built.analysis.cycle.samples):
            plots.append((plot.name, plot.title, plot.caption, svg_text(plot.figure, plot.name)))
        if len(side.state_names) < 2:
            left_out.append("No phase portrait: the model has one state.")
        if built.model.network is not None:
            left_out.append("The network's output waveforms with their phase lags are not drawn; "
                            "the lags are in the JSON's analysis.network.")
    else:
        left_out.append("No plots: the run stopped before the design was made.")
    return report_html(data, plots, left_out)


def _write(path: Path, text: str) -> None:
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        temporary = path.with_name(path.name + ".part")
        temporary.write_text(text, encoding="utf-8")
        os.replace(temporary, path)
    except OSError as exc:
        raise ReportFolderError(f"cannot write '{path}': {exc.strerror or exc}; choose a folder you "
                                "can write to") from None
