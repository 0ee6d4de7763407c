"""The house rules, checked from the source: one import name, and data that flows one way."""

from __future__ import annotations

import ast
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _imports(path: Path) -> list[str]:
    names = []
    for node in ast.walk(ast.parse(path.read_text("utf-8"))):
        if isinstance(node, ast.Import):
            names += [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.append(node.module)
    return names


def _sources(*folders: str) -> list[Path]:
    return [p for folder in folders for p in (ROOT / folder).rglob("*.py")]


def test_gen_never_imports_verify() -> None:
    offenders = [
        f"{path.relative_to(ROOT)} imports {name}"
        for path in _sources("gen")
        for name in _imports(path)
        if name == "orbitfix.verify" or name.startswith("orbitfix.verify.")
    ]
    assert not offenders, offenders


def test_nothing_imports_the_folders_by_their_bare_names() -> None:
    offenders = [
        f"{path.relative_to(ROOT)} imports {name}"
        for path in _sources("gen", "verify", "tests")
        for name in _imports(path)
        if name.split(".")[0] in {"gen", "verify", "templates", "boards", "tests"}
    ]
    assert not offenders, offenders


def test_every_folder_is_installed() -> None:
    # A folder missing from pyproject's list would be left out of the wheel, code or data alike.
    project = tomllib.loads((ROOT / "pyproject.toml").read_text("utf-8"))
    listed = set(project["tool"]["setuptools"]["packages"])
    for top in ("gen", "verify", "templates", "boards"):
        for folder in [ROOT / top, *(ROOT / top).rglob("*")]:
            if not folder.is_dir() or folder.name == "__pycache__" or not any(folder.iterdir()):
                continue
            package = ".".join(("orbitfix", *folder.relative_to(ROOT).parts))
            assert package in listed, f"{package} is not in pyproject.toml's packages"
