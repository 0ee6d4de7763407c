"""The results of the last few calls of a costly function, kept by the identity of its argument.

A design is checked on the host and built for several boards in one run; each asks for the same
costly result (the self-test's probes, the firmware's files). Kept by the argument object itself,
not an equal one (a design holds arrays and has no useful equality), so nothing stale is ever
returned, and only for the last few arguments, so memory stays bounded.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Generic, TypeVar

Key = TypeVar("Key")
Value = TypeVar("Value")


class Recent(Generic[Key, Value]):
    """``compute(key)`` for the last ``kept`` keys, by identity."""

    def __init__(self, compute: Callable[[Key], Value], kept: int = 4) -> None:
        self.compute = compute
        self.kept = kept
        self._results: list[tuple[Key, Value]] = []  # newest last

    def __call__(self, key: Key) -> Value:
        for known, value in self._results:
            if known is key:
                return value
        value = self.compute(key)
        self._results.append((key, value))
        del self._results[:-self.kept]
        return value
