"""The report's plots: matplotlib figures (object-oriented, no pyplot, no display) drawn from the
same data as the text and JSON, and their SVG text ready to sit inline in an HTML page.

Every axis carries a label ending in its unit in parentheses. The SVG keeps text as text
(``svg.fonttype`` 'none': the reader's own fonts, nothing fetched), and loses what matplotlib adds
that a page does not need: the XML prologue, the metadata block, comments and the namespace
declarations (an inline ``<svg>`` in HTML5 needs none); ``xlink:href`` becomes SVG 2's ``href``;
element ids get a prefix of their own per plot, so several plots on one page never share one.
"""

from __future__ import annotations

import io
import math
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING

import matplotlib
import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from orbitfix.gen.model.angles import radians_to_turns, wrap_turns
from orbitfix.gen.study.side_by_side import SideBySide

if TYPE_CHECKING:
    from matplotlib.axes import Axes

    from orbitfix.gen.model.networks import NetworkLayout

STATE_UNITS = "state units"  # the model files give states a meaning but no unit
INTEGER = {"color": "#b8336a", "marker": "o", "s": 9, "label": "integer program (golden)"}
FLOAT = {"color": "#2f6f9f", "marker": "x", "s": 16, "label": "float step map", "linewidths": 0.8}
CONTINUOUS = {"color": "#444444", "linewidth": 1.2, "label": "continuous cycle"}


@dataclass(frozen=True)
class Plot:
    """One figure of the report, with its title and a sentence on how to read it."""

    name: str
    title: str
    caption: str
    figure: Figure


def unit_of(side_or_angles: tuple[int, ...], index: int) -> str:
    """The unit a state is plotted in: turns for an angle state, else the model's state units."""
    return "turns" if index in side_or_angles else STATE_UNITS


def cycle_loop(cycle_samples: np.ndarray, pair: tuple[int, int], angles: tuple[int, ...]) -> np.ndarray:
    """Two states of the continuous cycle as a closed line (shape (2, k)): an angle state in
    turns, wrapped, its line broken (NaN) where it wraps."""
    loop = np.asarray(cycle_samples, dtype=float)[list(pair)].copy()
    for row, i in enumerate(pair):
        if i in angles:
            loop[row] = wrap_turns(radians_to_turns(loop[row]))
    loop = np.column_stack([loop, loop[:, :1]])
    jumps = [k + 1 for k in range(loop.shape[1] - 1)
             if any(i in angles and abs(loop[row, k + 1] - loop[row, k]) > 0.5
                    for row, i in enumerate(pair))]
    return np.insert(loop, jumps, np.nan, axis=1)


def phase_portrait(side: SideBySide, cycle_samples: np.ndarray | None, shown: int = 160) -> Figure:
    """The first two states: the continuous cycle as a line, the float step map's and golden's
    states over the last cycle of the run as points (about ``shown`` of each)."""
    names, angles = side.state_names, side.angle_states
    a, b = 0, 1
    figure = Figure(figsize=(6.4, 5.0), layout="constrained")
    axes = figure.add_subplot()
    if cycle_samples is not None:
        loop = cycle_loop(cycle_samples, (a, b), angles)
        axes.plot(loop[0], loop[1], **CONTINUOUS)
    last = max(0, side.steps - round(side.steps_per_cycle))
    every = max(1, (side.steps - last) // shown)
    picked = slice(last, side.steps + 1, every)
    axes.scatter(side.floats[picked, a], side.floats[picked, b], **FLOAT)
    axes.scatter(side.integer[picked, a], side.integer[picked, b], facecolors="none",
                 edgecolors=INTEGER["color"], marker="o", s=INTEGER["s"], label=INTEGER["label"],
                 linewidths=0.8)
    axes.set_xlabel(f"{names[a]} ({unit_of(angles, a)})")
    axes.set_ylabel(f"{names[b]} ({unit_of(angles, b)})")
    axes.legend(loc="best", fontsize="small")
    axes.grid(alpha=0.3)
    return figure


def errors_over_run(side: SideBySide) -> Figure:
    """Per cycle of the run: each swinging state's amplitude error (LSB), and the phase error at
    each crossing of the section (seconds at the loop rate), golden against the float step map."""
    figure = Figure(figsize=(6.4, 5.4), layout="constrained")
    top, bottom = figure.subplots(2, 1)
    cycles = np.arange(1, side.amplitude_error_lsb.shape[0] + 1)
    for j, i in enumerate(side.swinging):
        top.plot(cycles, side.amplitude_error_lsb[:, j], marker="o", label=side.state_names[i])
    top.axhline(0.0, color="#888888", linewidth=0.6)
    top.set_xlabel("cycle of the run (cycles)")
    top.xaxis.set_major_locator(MaxNLocator(integer=True))
    top.set_ylabel("amplitude error (LSB)")
    if side.swinging:
        top.legend(loc="best", fontsize="small")
    top.grid(alpha=0.3)
    crossings = np.arange(1, len(side.phase_error_steps) + 1)
    bottom.plot(crossings, side.phase_error_steps / side.loop_hz, marker="o", color=INTEGER["color"])
    bottom.axhline(0.0, color="#888888", linewidth=0.6)
    bottom.set_xlabel(f"crossing of the section by {side.state_names[side.section.state]} (cycles)")
    bottom.set_ylabel("phase error (s)")
    bottom.xaxis.set_major_locator(MaxNLocator(integer=True))
    bottom.grid(alpha=0.3)
    return figure


def return_points(side: SideBySide) -> Figure:
    """Where each run comes back to the section: the other states at each crossing (with two or
    more other states, the first two against each other; with one, against the return's number)."""
    names, angles = side.state_names, side.angle_states
    others = [i for i in range(len(names)) if i != side.section.state]
    figure = Figure(figsize=(6.4, 4.4), layout="constrained")
    axes = figure.add_subplot()
    if len(others) >= 2:
        a, b = others[:2]
        axes.scatter(side.float_returns[:, a], side.float_returns[:, b], **FLOAT)
        axes.scatter(side.integer_returns[:, a], side.integer_returns[:, b], facecolors="none",
                     edgecolors=INTEGER["color"], marker="o", s=30, label=INTEGER["label"])
        axes.set_xlabel(f"{names[a]} at the section ({unit_of(angles, a)})")
        axes.set_ylabel(f"{names[b]} at the section ({unit_of(angles, b)})")
    else:
        a = others[0] if others else side.section.state
        axes.plot(np.arange(1, len(side.float_returns) + 1), side.float_returns[:, a],
                  marker="x", color=FLOAT["color"], label=FLOAT["label"], linewidth=0.8)
        axes.plot(np.arange(1, len(side.integer_returns) + 1), side.integer_returns[:, a],
                  marker="o", markerfacecolor="none", color=INTEGER["color"], label=INTEGER["label"],
                  linewidth=0.8)
        axes.set_xlabel("return to the section (cycles)")
        axes.xaxis.set_major_locator(MaxNLocator(integer=True))
        axes.set_ylabel(f"{names[a]} at the section ({unit_of(angles, a)})")
    axes.legend(loc="best", fontsize="small")
    axes.grid(alpha=0.3)
    return figure


PARAMETER_UNITS = "parameter units"  # the model files give parameters a meaning but no unit
RATE_UNITS = "per model time unit"
# stable and unstable parts differ in line style and marker, not only in colour
STABLE = {"linestyle": "-", "marker": "o", "color": "#1f6f3f", "markersize": 4, "linewidth": 1.4}
UNSTABLE = {"linestyle": "--", "marker": "s", "markerfacecolor": "none", "color": "#b8336a",
            "markersize": 4, "linewidth": 1.1}
MARK_STYLE = {"hopf": {"marker": "*", "s": 90}, "folds": {"marker": "D", "s": 36},
              "branch_points": {"marker": "^", "s": 36}}
JOIN = 0.25  # equilibria at neighbouring samples closer than this (share of the states' size) are one


def _runs(points: list[tuple[float, float, bool]]) -> list[tuple[bool, list[float], list[float]]]:
    """Consecutive points of one kind of stability; a run ends on the first point of the next, so
    the line stays unbroken where the stability changes."""
    runs: list[tuple[bool, list[float], list[float]]] = []
    for x, y, stable in points:
        if runs and runs[-1][0] == stable:
            runs[-1][1].append(x)
            runs[-1][2].append(y)
            continue
        if runs:
            runs[-1][1].append(x)
            runs[-1][2].append(y)
        runs.append((stable, [x], [y]))
    return runs


def _draw_runs(axes: Axes, points: list[tuple[float, float, bool]], shown: set, what: str) -> None:
    for stable, xs, ys in _runs(points):
        style = STABLE if stable else UNSTABLE
        name = f"stable {what}" if stable else f"unstable {what}"
        axes.plot(xs, ys, **style, label=None if name in shown else name)
        shown.add(name)


def equilibrium_tracks(samples: list[dict]) -> list[list[tuple[float, float, bool]]]:
    """Each equilibrium of a sweep's JSON followed from sample to sample (the nearest one at the
    next sample, when it is near): (parameter value, largest real part of its eigenvalues, stable)
    per sample it is found at."""
    states = [np.asarray(e["state"], dtype=float) for s in samples for e in s["equilibria"]]
    size = 1.0 + max((float(np.max(np.abs(x))) for x in states), default=0.0)
    tracks: list[list[tuple[float, float, bool]]] = []
    ends: list[tuple[int, np.ndarray]] = []  # (track, its last state), the tracks reaching the last sample
    for sample in samples:
        reached: list[tuple[int, np.ndarray]] = []
        for equilibrium in sample["equilibria"]:
            reals = [v[0] for v in equilibrium["eigenvalues"] if v[0] is not None]
            if not reals:
                continue
            state, lead = np.asarray(equilibrium["state"], dtype=float), max(reals)
            free = [(float(np.max(np.abs(last - state))), k) for k, last in ends
                    if k not in {r for r, _ in reached}]
            distance, k = min(free, default=(math.inf, -1))
            if distance > JOIN * size:
                k = len(tracks)
                tracks.append([])
            tracks[k].append((float(sample["param_value"]), float(lead), lead < 0.0))
            reached.append((k, state))
        ends = reached
    return tracks


def sweep_marks(sweep: dict) -> list[tuple[str, str, float, float]]:
    """The labelled points of a sweep's JSON: (key, label, parameter value, amplitude), H1, H2, ...
    for the Hopf points (amplitude 0), F1, ... for the folds of cycles, B1, ... for the branch
    points, in the JSON's order (the page's table uses the same labels)."""
    marks = []
    for key, letter in (("hopf", "H"), ("folds", "F"), ("branch_points", "B")):
        for k, point in enumerate(sweep.get(key) or []):
            marks.append((key, f"{letter}{k + 1}", float(point["param_value"]),
                          0.0 if key == "hopf" else float(point["amplitude"])))
    return marks


def sweep_plot(sweep: dict, angles: tuple[int, ...] = ()) -> Figure:
    """From a sweep's JSON: above, the largest real part of each equilibrium's eigenvalues; below,
    the amplitude of each followed cycle; both against the swept parameter, stable parts solid
    with filled circles, unstable parts dashed with open squares; Hopf points and folds labelled."""
    name, first = sweep["parameter"], sweep["states"][0]  # the amplitude is of the first state
    figure = Figure(figsize=(6.4, 6.4), layout="constrained")
    top, bottom = figure.subplots(2, 1, sharex=True)
    shown: set = set()
    for track in equilibrium_tracks(sweep["samples"]):
        _draw_runs(top, track, shown, "equilibrium")
    top.axhline(0.0, color="#888888", linewidth=0.6)
    top.set_ylabel(f"leading real part ({RATE_UNITS})")
    for branch in sweep.get("branches") or []:
        points = [(float(p["param_value"]), float(p["amplitude"]), bool(p["stable"]))
                  for p in branch["points"] if p.get("amplitude") is not None]
        _draw_runs(bottom, points, shown, "cycle")
    if not sweep.get("branches"):
        bottom.text(0.5, 0.5, "no cycle followed", transform=bottom.transAxes, ha="center", va="center")
    bottom.set_ylabel(f"cycle amplitude of {first} ({'radians' if 0 in angles else STATE_UNITS})")
    for axes in (top, bottom):
        axes.set_xlabel(f"{name} ({PARAMETER_UNITS})")
    what = {"hopf": "Hopf point", "folds": "fold of cycles", "branch_points": "branch point"}
    for key, label, x, y in sweep_marks(sweep):
        for axes in ((top, bottom) if key == "hopf" else (bottom,)):
            axes.scatter([x], [y], color="#1d1d1d", zorder=5, **MARK_STYLE[key],
                         label=None if what[key] in shown else what[key])
            shown.add(what[key])
            axes.annotate(label, (x, y), xytext=(5, 5), textcoords="offset points", fontsize="small",
                          fontweight="bold")
    for axes in (top, bottom):
        axes.grid(alpha=0.3)
    handles = [h for axes in (top, bottom) for h in axes.get_legend_handles_labels()[0]]
    labels = [t for axes in (top, bottom) for t in axes.get_legend_handles_labels()[1]]
    if handles:
        figure.legend(handles, labels, loc="outside lower center", ncols=3, fontsize="small")
    return figure


BASIN_MARKERS = ("x", "s", "^", "v", "D", "P")


def basin_plane(basin: dict, names: tuple[str, ...]) -> tuple[int, int]:
    """The two states a basin sample is drawn in: the first two boxed, else the model's first."""
    chosen = [names.index(n) for n in basin["box"] if n in names][:2]
    chosen += [i for i in range(len(names)) if i not in chosen][: 2 - len(chosen)]
    return chosen[0], chosen[1]


def basin_plot(basin: dict, names: tuple[str, ...], angles: tuple[int, ...],
               cycle_samples: np.ndarray | None) -> Figure:
    """From a basin sample's JSON (with every start): the starts in the plane of two states, marked
    by their outcome (reaching the cycle: filled circles; each other outcome its own open marker),
    with the continuous cycle drawn over them."""
    a, b = basin_plane(basin, names)
    figure = Figure(figsize=(6.4, 5.2), layout="constrained")
    axes = figure.add_subplot()
    outcomes = [o["outcome"] for o in basin["outcomes"]]
    others = iter(BASIN_MARKERS)
    for outcome in outcomes:
        starts = np.array([s["state"] for s in basin["each_start"] if s["outcome"] == outcome], dtype=float)
        if starts.size == 0:
            continue
        x, y = (wrap_turns(radians_to_turns(starts[:, i])) if i in angles else starts[:, i] for i in (a, b))
        if outcome == "reaches the cycle":
            axes.scatter(x, y, marker="o", s=14, color="#1f6f3f", label=outcome)
        else:
            marker = next(others, "x")
            axes.scatter(x, y, marker=marker, s=18, color="#b8336a", linewidths=0.9, label=outcome,
                         **({} if marker in ("x", "+") else {"facecolors": "none", "edgecolors": "#b8336a"}))
    if cycle_samples is not None:
        loop = cycle_loop(cycle_samples, (a, b), angles)
        axes.plot(loop[0], loop[1], **{**CONTINUOUS, "linewidth": 2.0}, zorder=5)
    axes.set_xlabel(f"{names[a]} at the start ({unit_of(angles, a)})")
    axes.set_ylabel(f"{names[b]} at the start ({unit_of(angles, b)})")
    figure.legend(*axes.get_legend_handles_labels(), loc="outside lower center", fontsize="small", ncols=2)
    axes.grid(alpha=0.3)
    return figure


def phase_signal(layout: NetworkLayout, index: int) -> int:
    """The state an oscillator's phase is read from: its phase state when it has one, else its
    first state (whose upward crossings of its mean mark its phase)."""
    return layout.phases[index] if layout.phases is not None else layout.members[index][0]


def _first_rise(row: np.ndarray, angle: bool) -> float:
    """Where a cycle's evenly spaced samples first rise through their mean (an angle: wrap past a
    whole turn), as a share of the period, by linear interpolation between the samples around it."""
    if angle:
        turns = radians_to_turns(row)
        found = np.nonzero(np.diff(turns) < -0.5)[0]  # the wrap from just under a turn to zero
        if found.size == 0:
            return 0.0
        k = int(found[0])
        before, after = turns[k] - 1.0, turns[k + 1]
    else:
        level = row.mean()
        below = row - level
        following = np.roll(below, -1)
        found = np.nonzero((below < 0.0) & (following >= 0.0))[0]
        if found.size == 0:
            return 0.0
        k = int(found[0])
        before, after = below[k], following[k]
    return (k + before / (before - after)) / row.size


def network_waveforms(cycle_samples: np.ndarray, layout: NetworkLayout, names: tuple[str, ...],
                      angles: tuple[int, ...], network: dict) -> Figure:
    """Each oscillator's phase-marking state over two cycles of the network's continuous cycle,
    stacked, time 0 at oscillator 1's rise; each oscillator's measured lag (from the network's JSON)
    marked where it should rise and written beside its wanted lag."""
    samples = np.asarray(cycle_samples, dtype=float)
    count = samples.shape[1]
    first = phase_signal(layout, 0)
    start = _first_rise(samples[first], first in angles)
    time = np.arange(3 * count + 1) / count - start
    keep = (time >= 0.0) & (time <= 2.0)
    oscillators = len(layout.labels)
    figure = Figure(figsize=(6.4, 1.2 + 1.25 * oscillators), layout="constrained")
    rows = figure.subplots(oscillators, 1, sharex=True, squeeze=False)[:, 0]
    for i, axes in enumerate(rows):
        state = phase_signal(layout, i)
        row = np.concatenate([samples[state]] * 3 + [samples[state][:1]])
        if state in angles:
            row = wrap_turns(radians_to_turns(row))
            row[1:][np.abs(np.diff(row)) > 0.5] = np.nan  # break the line where the angle wraps
        axes.plot(time[keep], row[keep], color=CONTINUOUS["color"], linewidth=1.2)
        lag, wanted = float(network["lags"][i]), float(network["wanted_lags"][i])
        for at in (lag, lag + 1.0):
            axes.axvline(at, color=INTEGER["color"], linestyle=":", linewidth=1.2)
        axes.text(0.995, 0.95, f"{layout.labels[i]}: lag {lag:.4f} cycles (wanted {wanted:.4f})",
                  transform=axes.transAxes, ha="right", va="top", fontsize="small",
                  bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.8, "pad": 1.5})
        axes.set_ylabel(f"{names[state]} ({unit_of(angles, state)})")
        axes.set_xlabel(f"time after {layout.labels[0]} rises (cycles)", fontsize="small")
        axes.grid(alpha=0.3)
    rows[-1].set_xlim(0.0, 2.0)
    return figure


def report_plots(side: SideBySide, cycle_samples: np.ndarray | None) -> list[Plot]:
    """The report's plots from one side-by-side run (and the continuous cycle's samples)."""
    section = side.state_names[side.section.state]
    cycles = side.steps / side.steps_per_cycle
    plots = []
    if len(side.state_names) >= 2:
        plots.append(Plot("phase-portrait", "Phase portrait",
                          f"The continuous cycle (line), and the float step map's and the integer "
                          f"program's states over the last cycle of a {cycles:.3g}-cycle run from "
                          "the initial state (points).", phase_portrait(side, cycle_samples)))
    plots.append(Plot("errors", "Amplitude and phase error over the run",
                      f"The integer program against the float step map from the same initial state "
                      f"over {side.steps:,} steps: each state's half range per cycle (difference in "
                      f"LSB of its format) and the time of each upward crossing of the section by "
                      f"{section} (integer minus float, seconds at the {side.loop_hz:g} Hz loop).",
                      errors_over_run(side)))
    plots.append(Plot("returns", "Return points on the section",
                      f"The states where each run crosses the section ({section}), integer program "
                      "and float step map.", return_points(side)))
    return plots


def svg_text(figure: Figure, prefix: str) -> str:
    """The figure as SVG to sit inline in an HTML page (see the module's docstring)."""
    buffer = io.StringIO()
    with matplotlib.rc_context({"svg.fonttype": "none", "svg.hashsalt": prefix}):
        figure.savefig(buffer, format="svg", metadata={"Date": None})
    text = buffer.getvalue()
    text = text[text.index("<svg"):]
    text = re.sub(r"<metadata>.*?</metadata>", "", text, flags=re.S)
    text = re.sub(r"<!--.*?-->", "", text, flags=re.S)
    text = re.sub(r'\s+xmlns(:\w+)?="[^"]*"', "", text)
    text = text.replace("xlink:href=", "href=")
    text = re.sub(r'\bid="', f'id="{prefix}-', text)
    text = text.replace('href="#', f'href="#{prefix}-').replace("url(#", f"url(#{prefix}-")
    text = re.sub(r'<svg([^>]*?)\swidth="[^"]*"\sheight="[^"]*"', r'<svg\1', text, count=1)
    return text.strip()
