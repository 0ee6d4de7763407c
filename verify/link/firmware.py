"""The board firmware's sources for one design: the generated step (NAME.h, NAME.c), its self-test
(NAME_selftest.h, NAME_selftest.c) and the harness that speaks the link
(``templates/firmware/harness.c.j2``)."""

from __future__ import annotations

from pathlib import Path

from orbitfix.gen import __version__
from orbitfix.gen.c.emit import environment, render_model
from orbitfix.gen.c.naming import CNames
from orbitfix.gen.c.selftest import render_selftest
from orbitfix.gen.errors import UnsupportedError
from orbitfix.gen.pipeline import Design
from orbitfix.gen.recent import Recent
from orbitfix.gen.study.start_path import check_start_path
from orbitfix.verify.link.frames import MAX_BODY

HARNESS_FILE = "orbitfix_board.c"
MOST_BATCH = 32


def batch_size(state_count: int, word_bits: int) -> int:
    """States per STATES frame: as many as fit in one frame body, at most MOST_BATCH."""
    state_bytes = state_count * word_bits // 8
    room = (MAX_BODY - 5) // state_bytes
    if room < 1:
        raise UnsupportedError(f"a state of {state_bytes} bytes does not fit in one frame "
                               f"(at most {MAX_BODY - 5}); the link carries smaller models only")
    return min(room, MOST_BATCH)


def render_harness(built: Design) -> str:
    """The harness C for this design's program and runtime parameters."""
    names = CNames(built.model.name)
    program = built.plan.program
    return environment().get_template("firmware/harness.c.j2").render(
        names=names, version=__version__, fields=[names.field(n) for n in program.state_names],
        count=len(program.state_names), word_bits=program.word_bits,
        word_type=f"int{program.word_bits}_t",
        batch=batch_size(len(program.state_names), program.word_bits),
        fraction_bits=list(program.state_fraction_bits),
        setters=[names.setter(p.name) for p in built.model.runtime_parameters],
        fingerprint_macro=names.macro("program_fingerprint"))


def write_firmware_sources(built: Design, folder: Path) -> list[Path]:
    """Write the step and the harness into ``folder``; returns the C files to compile."""
    folder.mkdir(parents=True, exist_ok=True)
    files = firmware_files(built)
    for name, text in files.items():
        (folder / name).write_text(text)
    return [folder / name for name in files if name.endswith(".c")]


def firmware_files(built: Design) -> dict[str, str]:
    """The firmware's files by name for one design (a copy the caller may change). The self-test
    costs a golden run of the start-up path and the probes' choice (seconds for a network), so a
    design built for several boards renders once (``gen/recent.py``)."""
    return dict(_rendered(built))


def _render(built: Design) -> dict[str, str]:
    files = render_model(built.model, built.timing, built.integrator, built.plan)
    path = check_start_path(built)
    files.update(render_selftest(built.model, built.timing, built.integrator, built.plan,
                                 path.trajectory, path.counts))
    files[HARNESS_FILE] = render_harness(built)
    return files


_rendered: Recent[Design, dict[str, str]] = Recent(_render)
