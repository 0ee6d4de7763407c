"""The README's worked examples run as written."""

from __future__ import annotations

import re
from pathlib import Path

from orbitfix.gen.model.model_file import load_model, read_model_file

README = (Path(__file__).resolve().parents[1] / "README.md").read_text()


def test_python_example_runs(capsys) -> None:
    block = re.search(r"```python\n(.*?)```", README, flags=re.S)
    assert block
    exec(compile(block.group(1), "README.md", "exec"), {})  # the README's own example
    assert capsys.readouterr().out.startswith("Q5.27 ")


def test_model_file_shown_is_the_builtin_one(tmp_path: Path) -> None:
    block = re.search(r"```toml\n(.*?)```", README, flags=re.S)
    assert block
    path = tmp_path / "vanderpol.toml"
    path.write_text(block.group(1))
    shown = read_model_file(path)
    assert shown.describe() == load_model("vanderpol").describe()
