"""The JSON shape of every ``--json`` answer: one object whose first key is ``ok`` (the verdict a
script reads first), then the rest, under the one number policy (non-finite numbers as null)."""

from __future__ import annotations

import json
from typing import Any

from orbitfix.gen.plain_data import plain_data


def json_object(ok: bool, fields: dict[str, Any]) -> dict[str, Any]:
    """``{"ok": ok, **fields}`` as plain data; an ``ok`` inside ``fields`` is replaced."""
    rest = {key: value for key, value in fields.items() if key != "ok"}
    return plain_data({"ok": bool(ok), **rest})


def json_text(ok: bool, fields: dict[str, Any]) -> str:
    """The JSON text of :func:`json_object`, indented for people who read it too."""
    return json.dumps(json_object(ok, fields), indent=2, allow_nan=False)
