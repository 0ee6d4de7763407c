"""What ``gen`` wrote, as text and as data: the files, the formats, the fingerprints."""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Any


def file_fingerprint(text: str) -> str:
    """SHA-256 of a written file's text (UTF-8), so a reader can tell it is the file gen wrote."""
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def written_fields(files: dict[Path, str]) -> list[dict[str, Any]]:
    """One entry per written file: its path and its fingerprint."""
    return [{"path": str(path), "sha256": file_fingerprint(text)} for path, text in files.items()]


def written_lines(files: dict[Path, str]) -> list[str]:
    """One 'wrote PATH' line per file."""
    return [f"wrote {path}" for path in files]
