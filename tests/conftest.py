"""Shared fixtures: a private build cache per test session, and the C compilers at hand."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pytest


@pytest.fixture(autouse=True, scope="session")
def private_build_cache(tmp_path_factory: pytest.TempPathFactory) -> None:
    """Host builds go to a fresh cache folder, so no test reuses a build from outside the run."""
    folder = tmp_path_factory.mktemp("orbitfix-cache")
    patch = pytest.MonkeyPatch()
    patch.setenv("ORBITFIX_CACHE", str(folder))
    yield
    patch.undo()


def compilers() -> list[str]:
    """The C compilers of the warning matrix that this machine has (gcc is required)."""
    return [cc for cc in ("gcc", "clang") if shutil.which(cc)]


@pytest.fixture(scope="session")
def vanderpol_design():
    """The built-in model through the whole generation pipeline (analysed once per session)."""
    from orbitfix.gen.model.model_file import load_model
    from orbitfix.gen.pipeline import design

    return design(load_model("vanderpol"))


# A model of our own with a runtime parameter, shared by the runtime-parameter and board tests.
HIP = """\
name = "hip"
description = "Hopf oscillator pacing a hip joint, its frequency set by the gait controller"

[states]
x = 1.0
y = 0.0

[parameters]
mu = 1.0
omega = { value = 6.283185307179586, runtime = true, min = 3.0, max = 9.0, rate = 2.0, \
meaning = "angular frequency" }

[equations]
x = "mu*x - omega*y - (x^2 + y^2)*x"
y = "omega*x + mu*y - (x^2 + y^2)*y"

[rhythm]
cycle_hz = 1.0
loop_hz = 500
"""


def slip_one_product(step_c: Path) -> None:
    """Seed a scaling slip into generated C: the first word product is shifted one place too few,
    the fingerprint left as it was. The proofs must catch it."""
    text = step_c.read_text()
    changed = re.sub(r"(ROUND_SHIFT\(\(int\d+_t\)v\d+ \* k\d+, )(\d+)\)",
                     lambda m: f"{m.group(1)}{int(m.group(2)) - 1})", text, count=1)
    assert changed != text, "no word product to seed a fault into"
    step_c.write_text(changed)


def slip_the_square(text: str) -> str:
    """Generated C with a seeded scaling slip: the square of the first state (the first product
    of the step) shifted one place too few."""
    product = re.search(r"(ROUND_SHIFT\(\(int\d+_t\)v0 \* v0, )(\d+)\)", text)
    assert product, "no square of the first state to seed a fault into"
    return text.replace(product.group(0), f"{product.group(1)}{int(product.group(2)) - 1})", 1)


def brute_force_cycle(rows) -> tuple[int, int]:
    """(entry step, period) of a trajectory's rows by remembering every state (common practice:
    the naive cycle search, independent of Brent's algorithm)."""
    seen: dict[tuple[int, ...], int] = {}
    for k, row in enumerate(rows):
        key = tuple(int(v) for v in row)
        if key in seen:
            return seen[key], k - seen[key]
        seen[key] = k
    raise AssertionError("no repeat within the brute-force budget")


def refused(argv: list[str], capsys: pytest.CaptureFixture) -> str:
    """Run the command line; it must refuse with exit 2 and a message, never a traceback."""
    from orbitfix.verify.cli.main import main

    code = main(argv)
    err = capsys.readouterr().err
    assert code == 2, err
    assert "Traceback" not in err and "internal error" not in err
    return err
