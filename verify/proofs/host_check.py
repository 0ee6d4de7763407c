"""The host verification run: take the generated C (or C already in a firmware tree), build it with
the harness through cffi, and prove it bit-exact against the golden interpreter."""

from __future__ import annotations

import re
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from orbitfix.gen.c.emit import firmware_context, render_host_harness, render_model, render_trace
from orbitfix.gen.c.naming import CNames
from orbitfix.gen.c.selftest import choose_probes
from orbitfix.gen.errors import InputError, OrbitfixError
from orbitfix.gen.pipeline import Design
from orbitfix.gen.program.integer_program import IntegerProgram
from orbitfix.gen.program.quantisation import quantise
from orbitfix.gen.recent import Recent
from orbitfix.gen.work_size import bit_exact_work, refuse_beyond_machine
from orbitfix.verify.proofs.bit_exact import (
    BitExactReport,
    Ramp,
    compare_sanitized,
    prove_bit_exact,
)
from orbitfix.verify.targets.host_build import (
    SANITIZED_LEVELS,
    HostModule,
    build_host_module,
    build_sanitized_program,
    sanitizing_compilers,
)

# Random states (and trajectory steps) the sanitized builds compare: each costs about as much as
# the main comparison's million at full optimisation, so a sixteenth of it keeps verify fast.
SANITIZED_STATES = 1 << 16

PROGRAM_MARK = re.compile(r"integer program ([0-9a-f]{16})")


@dataclass
class HostCheck:
    """What the host verification found, plus where the sources came from."""

    sources: str
    report: BitExactReport
    build_seconds: float
    build_reused: bool
    notes: list[str] = field(default_factory=list)


def read_sources(design: Design, folder: Path) -> tuple[dict[str, str], list[str]]:
    """The firmware files NAME.h and NAME.c from a firmware tree, with notes on their origin."""
    names = CNames(design.model.name)
    if not folder.is_dir():
        raise InputError(f"--sources: '{folder}' is not a folder (give the folder that holds "
                         f"{names.header} and {names.source})")
    sources = {}
    for file_name in (names.header, names.source):
        path = folder / file_name
        if not path.is_file():
            raise InputError(f"--sources: '{folder}' has no {file_name}; generate it with "
                             f"'orbitfix gen {design.model.name} -o {folder}'")
        try:
            sources[file_name] = path.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise InputError(f"--sources: cannot read {path} ({exc})") from None
    notes = []
    mark = PROGRAM_MARK.search(sources[names.source])
    expected = design.plan.program.fingerprint()
    if mark is None:
        notes.append(f"{names.source} carries no integer program fingerprint: it was not made by "
                     "orbitfix or its banner was edited")
    elif mark.group(1) != expected:
        notes.append(f"{names.source} was generated from integer program {mark.group(1)}, but this "
                     f"model now gives {expected}: the model, its parameters or the tool changed")
    return sources, notes


def check_on_host(design: Design, sources_folder: Path | None = None, states: int = 1_000_000,
                  steps: int = 1_000_000, sanitized_states: int = SANITIZED_STATES) -> HostCheck:
    """Build the C on the host and run every part of the bit-exact proof; when it holds, repeat
    the comparison on ``sanitized_states`` states and as many steps (at most ``states`` and
    ``steps``) under the undefined-behaviour sanitizer at each level of SANITIZED_LEVELS (0: not
    at all)."""
    program = design.plan.program
    refuse_beyond_machine(bit_exact_work(len(program.ops), len(program.state_names), states, steps),
                          "give fewer --states or --steps")
    names = CNames(design.model.name)
    if sources_folder is None:
        sources = render_model(design.model, design.timing, design.integrator, design.plan)
        origin, notes = "generated afresh", []
    else:
        sources, notes = read_sources(design, sources_folder)
        origin = str(sources_folder)
    started = time.perf_counter()
    # The traced step is verification-only: it is always rendered afresh from the design, and
    # the proof checks it against golden and the firmware's own step against it.
    traced = render_trace(design.model, design.timing, design.integrator, design.plan)
    harness = render_host_harness(design.model, design.plan.program)
    host = build_host_module({**sources, **traced}, harness, names.header)
    build_seconds = time.perf_counter() - started
    plan = design.plan
    # The states come first in the program, so value i is state i: its sure bound over the
    # planning box, in its own integer units, is the size of a typical state.
    typical = [quantise(max(abs(low), abs(high)), bits) for (low, high), bits in
               zip(plan.sure_bounds, plan.program.state_fraction_bits, strict=False)]
    loop_hz = design.timing.loop_hz
    ramps = tuple(Ramp(p.name, p.low, p.high, None if p.rate is None else p.rate / loop_hz)
                  for p in design.model.runtime_parameters)
    initial = np.array(plan.initial_state, dtype=np.int64)
    report = prove_bit_exact(plan.program, host, initial, np.array(typical), states=states,
                             steps=steps,
                             shipped_trace=lambda: _shipped_trace(design, sources, traced, harness),
                             ramps=ramps, first_states=probe_states(design))
    if report.bit_exact and sanitized_states > 0:
        _check_sanitized(report, plan.program, {**sources, **traced}, harness, initial,
                         np.array(typical), min(sanitized_states, states), min(sanitized_states, steps))
    return HostCheck(sources=origin, report=report, build_seconds=build_seconds,
                     build_reused=host.reused, notes=notes)


def probe_states(design: Design) -> np.ndarray:
    """The self-test's probe states (``gen/c/selftest.choose_probes``), shape (n_states, k): for
    every one-LSB change of a stored number of NAME.c that shows on a sampled step, a state whose
    next state shows it. The proof compares them first, so even a short proof catches such a
    change. Chosen once for each of the last few designs (``gen/recent.py``), since every check
    of one design asks again."""
    return _probed(design)


def _probe(design: Design) -> np.ndarray:
    shipped = firmware_context(design.model, design.timing, design.integrator,
                               design.plan)["shipped_constants"]
    states = np.ascontiguousarray(choose_probes(design.plan, shipped).states.T, dtype=np.int64)
    states.setflags(write=False)  # shared by every check of the design
    return states


_probed: Recent[Design, np.ndarray] = Recent(_probe)


def _check_sanitized(report: BitExactReport, program: IntegerProgram, sources: dict[str, str],
                     harness: str, initial: np.ndarray, typical: np.ndarray, states: int,
                     steps: int) -> None:
    """The comparison repeated under the undefined-behaviour sanitizer, with every sanitizing
    compiler at every level; the first undefined operation or mismatch ends it."""
    for cc in sanitizing_compilers():
        for level in SANITIZED_LEVELS:
            started = time.perf_counter()
            executable = build_sanitized_program(sources, harness, level, cc)
            report.seconds[f"sanitized_build_{cc}{level}"] = time.perf_counter() - started
            run, mismatch = compare_sanitized(program, str(executable), level, initial, typical,
                                              states, steps, compiler=cc)
            report.sanitized.append(run)
            if mismatch is not None or run.undefined:
                report.first_mismatch = mismatch
                return


STEP_VALUE = re.compile(r"^\s*const\s+int(?:16|32)_t\s+v(\d+)\s*=", re.M)


def traced_copy(source: str, names: CNames, word_bits: int, length: int) -> str | None:
    """The firmware source with a traced copy of its own step appended: the same body, then every
    value written into the trace. It locates a mismatch in the firmware's own code (the rendered
    trace file follows the program, not the firmware). None if the step is not in the form the
    generator writes (it was edited beyond recognition)."""
    opening = f"void {names.step}({names.state_type} *state)\n{{\n"
    start = source.find(opening)
    end = source.find("\n}\n", start)
    if start < 0 or end < 0:
        return None
    body = source[start + len(opening):end + 1]
    if sorted(int(v) for v in STEP_VALUE.findall(body)) != list(range(length)):
        return None
    stores = "".join(f"    trace[{i}] = v{i};\n" for i in range(length))
    return (f"{source}\n#include \"{names.trace_header}\"\n\n"
            f"void {names.step_traced}({names.state_type} *state, int{word_bits}_t "
            f"trace[{names.macro('trace_length')}])\n{{\n{body}{stores}}}\n")


def _shipped_trace(design: Design, sources: dict[str, str], traced: dict[str, str],
                   harness: str) -> HostModule | None:
    """A module whose traced step is the firmware's own step with a trace (see ``traced_copy``);
    None if the firmware's step cannot be copied or the copy does not build."""
    names = CNames(design.model.name)
    program = design.plan.program
    copy = traced_copy(sources[names.source], names, program.word_bits, len(program.ops))
    if copy is None:
        return None
    try:
        return build_host_module({**sources, names.source: copy,
                                  names.trace_header: traced[names.trace_header]},
                                 harness, names.header)
    except OrbitfixError:
        return None
