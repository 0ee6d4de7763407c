"""The report folder that ``orbitfix report MODEL -o DIR`` and ``--report DIR`` write: ``report.json``
(the verb's own JSON object with the stages that ran inside it: the model, its analysis, the plan's
tables, the side-by-side run the plots are drawn from, and the sweep and basin sample when the
report ran them) and ``report.html`` (the page made from that object, with the plots inline).

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
ON_REQUEST = ("The parameter sweep and the basin sample are drawn only on request ('orbitfix report "
              "MODEL -o DIR --sweep NAME=FROM:TO --basin NAME=LOW:HIGH'): this report ran {}.")


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
    """The page, with the plots drawn from what ran: the side-by-side run's, the network's output
    waveforms (from the continuous cycle, the lags from the JSON), and the sweep and basin sample
    (each from its JSON) when they were asked for."""
    from orbitfix.verify.report.html import report_html

    plots: list[tuple[str, str, str, str]] = []
    left_out: list[str] = []
    built = computed.get("design")
    analysis = built.analysis if built is not None else computed.get("analysis")
    ran = analysis or computed.get("basin") or computed.get("sweep")
    model = ran.model if ran is not None else None
    side = computed.get("side_by_side")
    if side is not None:
        from orbitfix.verify.report.plots import report_plots

        plots += [(p.name, p.title, p.caption, p.figure) for p in report_plots(side, analysis.cycle.samples)]
        if len(side.state_names) < 2:
            left_out.append("No phase portrait: the model has one state.")
    else:
        left_out.append("No plots of the stepped run: the run stopped before the design was made.")
    if analysis is not None and model.network is not None:
        plots += _network_plot(data, analysis, left_out)
    plots += _drawn_on_request(data, computed, model, left_out)
    from orbitfix.verify.report.plots import svg_text

    return report_html(data, [(name, title, caption, svg_text(figure, name))
                              for name, title, caption, figure in plots], left_out)


def _network_plot(data: dict, analysis: Any, left_out: list[str]) -> list[tuple]:
    """The network's output waveforms, when its cycle and lags were found."""
    network = (data.get("analysis") or {}).get("network") or {}
    model = analysis.model
    if analysis.cycle.samples is None or network.get("lags") is None:
        left_out.append("No output waveforms of the network: it has no cycle whose lags were measured.")
        return []
    from orbitfix.verify.report.plots import network_waveforms

    layout = model.network
    read = "phase state" if layout.phases is not None else "first state"
    caption = (f"Each oscillator's {read} over two periods of the network's continuous cycle "
               f"(period {network['common_period']:.6g} model time units), time 0 where "
               f"{layout.labels[0]} rises; dotted lines mark each oscillator's measured lag after "
               f"{layout.labels[0]}, written on its row to four decimals beside the wanted lag (the "
               "table under Network phase locking gives them in full).")
    angles = model.angle_states
    return [("network-waveforms", "Output waveforms of the network", caption,
             network_waveforms(analysis.cycle.samples, layout, model.state_names, angles, network))]


def _drawn_on_request(data: dict, computed: dict, model: Any, left_out: list[str]) -> list[tuple]:
    """The sweep's and the basin sample's plots, each drawn from its JSON when it ran."""
    from orbitfix.verify.report.plots import basin_plane, basin_plot, sweep_plot

    plots: list[tuple] = []
    sweep, basin = data.get("sweep"), data.get("basin")
    names = tuple(model.state_names) if model is not None else ()
    angles = model.angle_states if model is not None else ()
    if sweep is not None:
        name = sweep["parameter"]
        caption = (f"The swept parameter {name} from {sweep['from']:.6g} to {sweep['to']:.6g} "
                   f"({len(sweep['samples'])} values). Above: the largest real part of each "
                   "equilibrium's eigenvalues (below 0: stable). Below: each followed cycle's "
                   f"amplitude (half the range of {sweep['states'][0]}). Stable parts are solid "
                   "lines with filled circles, unstable parts dashed with open squares; H marks a "
                   "Hopf point, F a fold of cycles, B a branch point (their values in the table).")
        plots.append(("sweep", "Parameter sweep", caption, sweep_plot(sweep, angles)))
    if basin is not None and "each_start" in basin and names:
        found = computed.get("basin")
        samples = found.cycle.samples if found is not None else None
        a, b = basin_plane(basin, names)
        caption = (f"{basin['starts']:,} starts, drawn in the plane of {names[a]} and {names[b]} "
                   "(other states start at their initial values), marked by where they go, with "
                   "the continuous cycle (line) over them.")
        plots.append(("basin", "Basin sample", caption, basin_plot(basin, names, angles, samples)))
    elif basin is not None and basin.get("error"):
        left_out.append(f"No basin plot: {basin['error']}.")
    if sweep is None and basin is None:
        left_out.append(ON_REQUEST.format("neither"))
    elif sweep is None or basin is None:
        left_out.append(ON_REQUEST.format("no sweep" if sweep is None else "no basin sample"))
    return plots


def _write(path: Path, text: str) -> None:
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        temporary = path.with_name(path.name + ".part")
        temporary.write_text(text, encoding="utf-8")
        os.replace(temporary, path)
    except OSError as exc:
        raise ReportFolderError(f"cannot write '{path}': {exc.strerror or exc}; choose a folder you "
                                "can write to") from None
