"""Mutation test of the host proof: faults seeded into the generated C of 16-bit Van der Pol (each
constant and each shift one step off, each rounding constant, a dropped saturation, the check
that sends a state outside its range to the hold never firing or missing the edges, an add
swapped for a subtract and back, the init literals) must each be caught by ``check_on_host`` with the C
given as ``--sources``, unless the mutant is shown equivalent to the original by comparing both
steps on every lattice state of the planning box (an exhaustive comparison in C).

Mutation testing is common practice (a proof is only as good as the faults it is shown to catch).
The full run prints the kill rate by kind of fault; it is marked slow, a sample of each kind runs
by default.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from orbitfix.gen.c.emit import render_model
from orbitfix.gen.c.naming import CNames
from orbitfix.gen.pipeline import design
from orbitfix.verify.proofs import host_check
from orbitfix.verify.proofs.host_check import check_on_host
from orbitfix.verify.report.host import host_fields, host_lines
from orbitfix.verify.targets.host_build import CompileError, compiler, sanitizing_compilers

# Small enough that a mutant costs well under a second once built; every mutant that changes
# behaviour is still caught at this size (the slow test shows it), so the default million is more.
STATES = 1 << 15


@dataclass(frozen=True)
class Mutant:
    kind: str
    where: str
    source: str


@pytest.fixture(scope="module")
def subject(vanderpol_design):
    model = vanderpol_design.model.with_fixed_point(word_bits=16)
    built = design(model, analysis=vanderpol_design.analysis)
    files = render_model(built.model, built.timing, built.integrator, built.plan)
    return built, files


def _replace_span(text: str, start: int, end: int, new: str) -> str:
    return text[:start] + new + text[end:]


def mutants(source: str, names: CNames) -> list[Mutant]:
    """Every seeded fault of the brief's kinds in one firmware source file."""
    found: list[Mutant] = []
    for m in re.finditer(r"static const int16_t (k\d+) = INT16_C\((-?\d+)\);", source):
        for delta in (-1, 1):
            found.append(Mutant("constant +/-1 LSB", f"{m.group(1)} {delta:+d}", _replace_span(
                source, m.start(2), m.end(2), str(int(m.group(2)) + delta))))
    step = source.index(f"void {names.step}(")
    body_end = source.index("\n}\n", step)
    for line in re.finditer(r"const int16_t (v\d+) = (.*);", source[step:body_end]):
        value, expression = line.group(1), line.group(2)
        base = step + line.start(2)
        rounded = re.search(r"ROUND_SHIFT\((.*), (\d+)\)\)$", expression)
        if rounded:  # the shift after the exact result
            for delta in (-1, 1):
                found.append(Mutant("shift +/-1", f"{value} shift {delta:+d}", _replace_span(
                    source, base + rounded.start(2), base + rounded.end(2),
                    str(int(rounded.group(2)) + delta))))
        for number, align in enumerate(re.finditer(r"\* (\d+)\b", expression)):  # alignments
            for new in (int(align.group(1)) // 2, int(align.group(1)) * 2):
                found.append(Mutant("shift +/-1", f"{value} alignment {number} -> {new}",
                                    _replace_span(source, base + align.start(1),
                                                  base + align.end(1), str(new))))
        sign = re.search(r" ([+-]) ", expression)  # the sum's or difference's own sign
        if sign:
            other = "-" if sign.group(1) == "+" else "+"
            found.append(Mutant("add/subtract swapped", f"{value} {sign.group(1)} -> {other}",
                                _replace_span(source, base + sign.start(1), base + sign.end(1),
                                              other)))
    half = "((t)1 << ((s) - 1))"
    assert half in source, "the 16-bit subject rounds half up: its rounding constant is a half"
    for where, new in (("no half LSB", "0"), ("a whole LSB", "((t)1 << (s))"),
                       ("a quarter LSB", "((t)1 << ((s) - 2))"),
                       ("half an LSB less one (ties down)", f"({half} - 1)")):
        found.append(Mutant("rounding constant", where, source.replace(half, new, 1)))
    # The clamps of the step: each state held in its proven range at the start.
    upper = "    if (value > high) {\n        *saturated = 1u;\n        return high;\n    }\n"
    lower = "    if (value < low) {\n        *saturated = 1u;\n        return low;\n    }\n"
    assert upper in source and lower in source
    # each parameter a dropped clamp no longer reads stays read, so the mutant compiles under
    # -Werror and the proof itself must catch it (not the compiler)
    found += [Mutant("saturation dropped", "upper", source.replace(upper, "    (void)high;\n", 1)),
              Mutant("saturation dropped", "lower", source.replace(lower, "    (void)low;\n", 1)),
              Mutant("saturation dropped", "both", source.replace(
                  upper + lower, "    (void)low;\n    (void)high;\n    (void)saturated;\n", 1))]
    # The step's check that sends a state outside its range to the hold (the clamps above): its
    # bound on each state's magnitude, never reached, or one past the range's inner half width
    # (the state just below the range then passes unheld).
    check = re.search(rf"static inline int {names.prefix}_beyond\(.*?\n{{\n    return (.*?);\n}}",
                      source, re.DOTALL)
    assert check is not None and check.group(1).endswith(" > bound")
    for m in re.finditer(rf"{names.prefix}_beyond\(state->(\w+), UINT16_C\((\d+)\)\)", source):
        held = re.search(rf"state->{m.group(1)} = {names.prefix}_held\(state->{m.group(1)}, "
                         r"INT16_C\((-?\d+)\), INT16_C\((-?\d+)\)", source)
        assert held is not None
        low, high = int(held.group(1)), int(held.group(2))
        for where, new in (("never fires", "UINT16_MAX"),
                           ("misses the edges", str(min(high, -low - 1) + 1))):
            found.append(Mutant("range check", f"{m.group(1)} {where}", _replace_span(
                source, m.start(2), m.end(2), new)))
    init = source.index(f"void {names.init}(")
    init_end = source.index("\n}\n", init)
    for m in re.finditer(r"state->(\w+) = INT16_C\((-?\d+)\);", source[init:init_end]):
        for delta in (-1, 1):
            found.append(Mutant("init literal", f"{m.group(1)} {delta:+d}", _replace_span(
                source, init + m.start(2), init + m.end(2), str(int(m.group(2)) + delta))))
    return found


def caught(built, files: dict[str, str], source: str, folder: Path) -> str | None:
    """How the proof catches a mutant (None: it passes as bit-exact)."""
    names = CNames(built.model.name)
    folder.mkdir(parents=True, exist_ok=True)
    (folder / names.header).write_text(files[names.header])
    (folder / names.source).write_text(source)
    try:
        outcome = check_on_host(built, folder, states=STATES, steps=STATES)
    except CompileError:
        return "does not compile under the strict flags"
    report = outcome.report
    if report.first_mismatch is not None:
        return f"mismatch ({report.first_mismatch.part})"
    if any(run.undefined for run in report.sanitized):
        return "undefined behaviour"
    return None


EQUIVALENCE_MAIN = """\
#include <stdio.h>
#include <stdlib.h>
#include "{header}"

void mutant_step({state} *state);
void mutant_init({state} *state);

/* Both steps from every lattice state in [xl, xh] x [yl, yh]; both inits. Prints the first state
 * where they differ and exits 1; exits 0 when they agree everywhere. */
int main(int argc, char **argv)
{{
    long xl, xh, yl, yh, x, y;
    {state} a;
    {state} b;
    if (argc != 5) {{
        return 2;
    }}
    xl = strtol(argv[1], NULL, 10);
    xh = strtol(argv[2], NULL, 10);
    yl = strtol(argv[3], NULL, 10);
    yh = strtol(argv[4], NULL, 10);
    {init}(&a);
    mutant_init(&b);
    if (a.{x} != b.{x} || a.{y} != b.{y}) {{
        printf("init\\n");
        return 1;
    }}
    for (x = xl; x <= xh; ++x) {{
        for (y = yl; y <= yh; ++y) {{
            a.{x} = (int16_t)x;
            a.{y} = (int16_t)y;
            b = a;
            {step}(&a);
            mutant_step(&b);
            if (a.{x} != b.{x} || a.{y} != b.{y}) {{
                printf("%ld %ld\\n", x, y);
                return 1;
            }}
        }}
    }}
    return 0;
}}
"""


def equivalence_box(built) -> tuple[int, int, int, int]:
    """The planning box (the cycle's neighbourhood the plan covers, about 2e8 lattice states for
    the 16-bit subject), in integer units, held in the word."""
    program = built.plan.program
    edges = []
    for (low, high), bits in zip(built.plan.box, program.state_fraction_bits, strict=False):
        edges += [max(int(low * 2**bits) - 1, program.word_min),
                  min(int(high * 2**bits) + 1, program.word_max)]
    return tuple(edges[:4])


def differs_on_box(built, files: dict[str, str], source: str, folder: Path,
                   box: tuple[int, int, int, int]) -> str | None:
    """Compare the mutant's step and init with the original's on every state of ``box``: None if
    they agree everywhere, else the first state where they differ."""
    names = CNames(built.model.name)
    x, y = (names.field(n) for n in built.plan.program.state_names)
    folder.mkdir(parents=True, exist_ok=True)
    (folder / names.header).write_text(files[names.header])
    (folder / "original.c").write_text(files[names.source])
    (folder / "mutant.c").write_text(source)
    (folder / "main.c").write_text(EQUIVALENCE_MAIN.format(
        header=names.header, state=names.state_type, init=names.init, step=names.step, x=x, y=y))
    cc = compiler()
    rename = [f"-D{names.step}=mutant_step", f"-D{names.init}=mutant_init"]
    rename += [f"-D{names.setter(p.name)}=mutant_{p.name}" for p in built.model.runtime_parameters]
    objects = []
    for name, extra in (("original.c", []), ("mutant.c", rename), ("main.c", [])):
        target = folder / f"{name}.o"
        subprocess.run([cc, "-std=c99", "-O3", "-flto", "-I", str(folder), *extra, "-c",
                        str(folder / name), "-o", str(target)], check=True, capture_output=True)
        objects.append(str(target))
    program = folder / "compare"
    subprocess.run([cc, "-O3", "-flto", *objects, "-o", str(program)], check=True,
                   capture_output=True)
    done = subprocess.run([str(program), *(str(v) for v in box)], capture_output=True, text=True,
                          check=False)
    assert done.returncode in (0, 1), done.stderr
    return done.stdout.strip() if done.returncode == 1 else None


def run_mutants(built, files, chosen: list[Mutant], tmp_path: Path) -> dict[str, Counter]:
    """Each mutant through the proof; survivors through the exhaustive comparison. Returns the
    tally per kind (killed, equivalent); fails on a survivor that is not equivalent."""
    tally: dict[str, Counter] = {}
    box = equivalence_box(built)
    for number, mutant in enumerate(chosen):
        count = tally.setdefault(mutant.kind, Counter())
        how = caught(built, files, mutant.source, tmp_path / f"m{number}")
        if how is not None:
            count["killed"] += 1
            count[how] += 1
            continue
        difference = differs_on_box(built, files, mutant.source, tmp_path / f"e{number}", box)
        assert difference is None, (f"mutant {mutant.kind}: {mutant.where} passes the proof but "
                                    f"differs from the original at {difference}")
        count["equivalent"] += 1
    return tally


KILL_RATE_TITLE = "mutation kill rate, 16-bit Van der Pol, check_on_host with the C as --sources"


def kill_rate_lines(tally: dict[str, Counter]) -> list[str]:
    lines = [f"{'kind':<24} {'mutants':>7} {'killed':>6} {'equivalent':>10}  how killed"]
    for kind, count in tally.items():
        total = count["killed"] + count["equivalent"]
        how = ", ".join(f"{k}: {v}" for k, v in sorted(count.items())
                        if k not in ("killed", "equivalent"))
        lines.append(f"{kind:<24} {total:>7} {count['killed']:>6} {count['equivalent']:>10}  {how}")
    return lines


def test_every_kind_of_fault_is_seeded(subject) -> None:
    built, files = subject
    names = CNames(built.model.name)
    found = mutants(files[names.source], names)
    kinds = Counter(m.kind for m in found)
    assert set(kinds) == {"constant +/-1 LSB", "shift +/-1", "add/subtract swapped",
                          "rounding constant", "saturation dropped", "range check",
                          "init literal"}
    assert kinds["init literal"] == 2 * len(built.plan.program.state_names)
    assert all(m.source != files[names.source] for m in found)
    assert len({m.source for m in found}) == len(found)


def test_a_sample_of_each_kind_is_caught_or_equivalent(subject, tmp_path) -> None:
    built, files = subject
    names = CNames(built.model.name)
    found = mutants(files[names.source], names)
    sample = []
    for kind in dict.fromkeys(m.kind for m in found):
        of_kind = [m for m in found if m.kind == kind]
        sample += [of_kind[len(of_kind) // 2], of_kind[-1]]
    tally = run_mutants(built, files, sample, tmp_path)
    print(KILL_RATE_TITLE + " (a sample of each kind)")  # shown with -s (tests/bench/bench_mutations.py)
    print("\n".join(kill_rate_lines(tally)))
    assert sum(c["killed"] for c in tally.values()) >= len(sample) - 2


def test_a_dropped_saturation_is_caught_by_the_proof_not_the_compiler(subject, tmp_path) -> None:
    # The hold's clamps removed, every parameter still read: the strict flags compile the mutant,
    # so only the proof's states outside the held range can show the missing clamp.
    built, files = subject
    names = CNames(built.model.name)
    dropped = [m for m in mutants(files[names.source], names) if m.kind == "saturation dropped"]
    assert len(dropped) == 3
    for number, mutant in enumerate(dropped):
        how = caught(built, files, mutant.source, tmp_path / f"d{number}")
        assert how is not None and how.startswith("mismatch"), (mutant.where, how)


@pytest.mark.slow
def test_every_mutant_is_caught_or_shown_equivalent(subject, tmp_path, capsys) -> None:
    built, files = subject
    names = CNames(built.model.name)
    found = mutants(files[names.source], names)
    tally = run_mutants(built, files, found, tmp_path)
    with capsys.disabled():
        print("\n" + KILL_RATE_TITLE)
        print("\n".join(kill_rate_lines(tally)))
    assert sum(c["killed"] + c["equivalent"] for c in tally.values()) == len(found)


def test_the_exhaustive_comparison_can_tell_a_difference(subject, tmp_path) -> None:
    built, files = subject
    names = CNames(built.model.name)
    source = files[names.source]
    small = (-1024, 1024, -1024, 1024)
    assert differs_on_box(built, files, source, tmp_path / "same", small) is None
    swapped = next(m for m in mutants(source, names) if m.kind == "add/subtract swapped")
    assert differs_on_box(built, files, swapped.source, tmp_path / "swap", small) is not None
    init = next(m for m in mutants(source, names) if m.kind == "init literal")
    assert differs_on_box(built, files, init.source, tmp_path / "init", small) == "init"


UNDEFINED_SHIFT = ("(v0 * 2 + ", "((v0 << 1) + ")  # the first stage point of x


def test_undefined_shift_that_passes_at_full_optimisation_is_caught(subject, tmp_path) -> None:
    # Shifting a negative value left is undefined in C99 (ISO/IEC 9899:1999, 6.5.7 paragraph 4);
    # gcc at -O2 emits the same machine shift as for the product, so the bits agree.
    built, files = subject
    names = CNames(built.model.name)
    old, new = UNDEFINED_SHIFT
    assert old in files[names.source]
    (tmp_path / names.header).write_text(files[names.header])
    (tmp_path / names.source).write_text(files[names.source].replace(old, new))
    plain = check_on_host(built, tmp_path, states=STATES, steps=STATES, sanitized_states=0)
    assert plain.report.bit_exact  # the fault hides behind the compiler's folding ...
    outcome = check_on_host(built, tmp_path, states=STATES, steps=STATES)
    assert not outcome.report.bit_exact  # ... and the sanitized build finds it
    undefined = [run.undefined for run in outcome.report.sanitized if run.undefined]
    assert undefined and "shift" in undefined[0]
    assert outcome.report.sanitized[0].level == "-O0"
    text = "\n".join(host_lines(outcome))
    assert "undefined behaviour" in text and "result: NOT bit-exact" in text
    assert host_fields(outcome)["sanitized"][0]["undefined_behaviour"] == undefined[0]


@pytest.mark.skipif(shutil.which("clang") is None, reason="clang is not installed")
def test_the_undefined_shift_is_caught_by_clang_alone(subject, tmp_path, monkeypatch) -> None:
    # The same fault under clang's sanitizer only: a compiler's folding is not the proof's blind spot.
    built, files = subject
    names = CNames(built.model.name)
    old, new = UNDEFINED_SHIFT
    (tmp_path / names.header).write_text(files[names.header])
    (tmp_path / names.source).write_text(files[names.source].replace(old, new))
    monkeypatch.setattr(host_check, "sanitizing_compilers", lambda: ("clang",))
    outcome = check_on_host(built, tmp_path, states=STATES, steps=STATES)
    assert not outcome.report.bit_exact
    assert outcome.report.sanitized[0].compiler == "clang"
    assert "shift" in (outcome.report.sanitized[0].undefined or "")


def test_the_default_proof_is_clean_under_the_sanitizer(subject) -> None:
    built, _ = subject
    outcome = check_on_host(built, states=STATES, steps=STATES)
    assert outcome.report.bit_exact
    assert [(run.compiler, run.level) for run in outcome.report.sanitized] == [
        (cc, level) for cc in sanitizing_compilers() for level in ("-O0", "-O2")]
    assert all(run.undefined is None and run.states == STATES for run in outcome.report.sanitized)
    assert np.isfinite(sum(run.seconds for run in outcome.report.sanitized))
