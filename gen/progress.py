"""How long computations tell the world how far they are, without knowing who listens.

A computation calls ``tell(what, done, total)`` at natural points (a job finished, a block of
states compared). Whoever runs it, the command line for instance, installs a listener with
``reporting(listener)`` around the call; with no listener installed ``tell`` does nothing, so
library users and tests pay nothing. The listener is kept in a context variable, so the
computation's signature does not change and ``gen`` never learns who draws the bar.
"""

from __future__ import annotations

import contextvars
from collections.abc import Callable, Iterator
from contextlib import contextmanager

Progress = Callable[[str, int, int], None]
"""A listener: ``listener(what, done, total)``; ``what`` says in words what is being done,
``done`` of ``total`` units are finished (``total`` >= 1)."""

_LISTENER: contextvars.ContextVar[Progress | None] = contextvars.ContextVar("orbitfix_progress",
                                                                            default=None)


@contextmanager
def reporting(listener: Progress | None) -> Iterator[None]:
    """Send every ``tell`` inside the ``with`` block to ``listener`` (None: to nobody)."""
    token = _LISTENER.set(listener)
    try:
        yield
    finally:
        _LISTENER.reset(token)


def tell(what: str, done: int, total: int) -> None:
    """Report that ``done`` of ``total`` units of ``what`` are finished (no-op without a listener)."""
    listener = _LISTENER.get()
    if listener is not None:
        listener(what, int(done), max(1, int(total)))
