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
import re
from dataclasses import dataclass

import matplotlib
import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from orbitfix.gen.model.angles import radians_to_turns, wrap_turns
from orbitfix.gen.study.side_by_side import SideBySide

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


def phase_portrait(side: SideBySide, cycle_samples: np.ndarray | None, shown: int = 160) -> Figure:
    """The first two states: the continuous cycle as a line, the float step map's and golden's
    states over the last cycle of the run as points (about ``shown`` of each)."""
    names, angles = side.state_names, side.angle_states
    a, b = 0, 1
    figure = Figure(figsize=(6.4, 5.0), layout="constrained")
    axes = figure.add_subplot()
    if cycle_samples is not None:
        loop = np.asarray(cycle_samples, dtype=float)[[a, b]].copy()
        for row, i in enumerate((a, b)):
            if i in angles:
                loop[row] = wrap_turns(radians_to_turns(loop[row]))
        loop = np.column_stack([loop, loop[:, :1]])
        jumps = [k + 1 for k in range(loop.shape[1] - 1)
                 if any(i in angles and abs(loop[row, k + 1] - loop[row, k]) > 0.5
                        for row, i in enumerate((a, b)))]
        loop = np.insert(loop, jumps, np.nan, axis=1)  # a wrapped angle's line breaks at the wrap
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
