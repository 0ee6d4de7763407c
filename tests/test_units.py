"""NAME_units.h: the macros between real values and stored integers, and the per-state fraction
bits in NAME.h. Checked by compiling a program that prints what the macros give, against exact
rounding with Python's ``fractions`` (nearest, ties away from zero, as the header says)."""

from __future__ import annotations

import subprocess
from fractions import Fraction
from pathlib import Path

import pytest
from conftest import HIP, compilers

from orbitfix.verify.cli.main import main

STRICT = ["-std=c99", "-pedantic", "-Werror", "-Wall", "-Wextra", "-Wconversion",
          "-Wsign-conversion", "-Wdouble-promotion", "-Wfloat-equal", "-O2"]
VALUES = ["0.5", "-1.25", "1e-9", "-1e-9", "3.0517578125e-05", "-7.450580596923828e-09", "15.5"]


def _exact(text: str, bits: int) -> int:
    """Nearest integer to value * 2**bits, ties away from zero (exact rational arithmetic)."""
    scaled = Fraction(text) * 2**bits
    whole = int(abs(scaled) + Fraction(1, 2))
    return whole if scaled >= 0 else -whole


@pytest.mark.parametrize("cc", compilers())
def test_vanderpol_macros_round_to_the_nearest_stored_integer(tmp_path: Path, cc: str, capsys) -> None:
    assert main(["gen", "vanderpol", "-o", str(tmp_path)]) == 0
    capsys.readouterr()
    header = (tmp_path / "vanderpol.h").read_text()
    assert "VANDERPOL_X_FRACTION_BITS = 27" in header and "VANDERPOL_Y_FRACTION_BITS = 27" in header
    lines = [f'    printf("%ld\\n", (long)VANDERPOL_X_FROM_REAL({v}));' for v in VALUES]
    (tmp_path / "main.c").write_text(
        '#include <stdio.h>\n#include "vanderpol_units.h"\nint main(void)\n{\n' + "\n".join(lines)
        + '\n    printf("%.17g\\n", VANDERPOL_Y_TO_REAL(INT32_C(-201326592)));\n'
        + '    printf("%d\\n", VANDERPOL_X_FRACTION_BITS);\n    return 0;\n}\n')
    subprocess.run([cc, *STRICT, "main.c", "-o", "units"], cwd=tmp_path, check=True,
                   capture_output=True, text=True)
    out = subprocess.run(["./units"], cwd=tmp_path, check=True, capture_output=True,
                         text=True).stdout.split()
    assert [int(v) for v in out[:len(VALUES)]] == [_exact(v, 27) for v in VALUES]
    assert float(out[-2]) == -1.5 and int(out[-1]) == 27
    # the initial-state literal of vanderpol_init is what the macro gives for the model's 0.5
    assert "state->x = INT32_C(67108864);" in (tmp_path / "vanderpol.c").read_text()


def test_a_runtime_parameter_has_its_own_format_and_macros(tmp_path: Path, capsys) -> None:
    model = tmp_path / "hip.toml"
    model.write_text(HIP)
    assert main(["gen", str(model), "-o", str(tmp_path / "fw")]) == 0
    capsys.readouterr()
    header = (tmp_path / "fw" / "hip.h").read_text()
    units = (tmp_path / "fw" / "hip_units.h").read_text()
    bits = int(header.split("HIP_OMEGA_FRACTION_BITS = ")[1].split(",")[0])
    assert "#define HIP_OMEGA_FROM_REAL(r)" in units and "#define HIP_OMEGA_TARGET_FROM_REAL(r)" in units
    (tmp_path / "fw" / "main.c").write_text(
        '#include <stdio.h>\n#include "hip_units.h"\nint main(void)\n{\n'
        '    printf("%ld\\n", (long)HIP_OMEGA_TARGET_FROM_REAL(7.5));\n    return 0;\n}\n')
    subprocess.run(["gcc", *STRICT, "main.c", "-o", "units"], cwd=tmp_path / "fw", check=True,
                   capture_output=True, text=True)
    out = subprocess.run(["./units"], cwd=tmp_path / "fw", check=True, capture_output=True, text=True)
    assert int(out.stdout) == _exact("7.5", bits)
