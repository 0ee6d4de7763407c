"""A progress bar on the terminal for long runs: what is being done, how far, and an estimate of
the time left. Drawn on standard error, and only when both standard output and standard error are
terminals (never into a file, a pipe or a JSON answer)."""

from __future__ import annotations

import sys
import time
from typing import TextIO

WIDTH = 24
EVERY = 0.1  # seconds between redraws


class ProgressBar:
    """An :data:`orbitfix.gen.progress.Progress` listener that redraws one line in place."""

    def __init__(self, stream: TextIO) -> None:
        self.stream = stream
        self.what = ""
        self.started = time.monotonic()
        self.drawn_at = 0.0
        self.shown = False

    def __call__(self, what: str, done: int, total: int) -> None:
        now = time.monotonic()
        if what != self.what:
            self.what, self.started = what, now
        elif done < total and now - self.drawn_at < EVERY:
            return
        self.drawn_at = now
        self.stream.write("\r" + bar_line(what, done, total, now - self.started) + "\x1b[K")
        self.stream.flush()
        self.shown = True

    def close(self) -> None:
        """Clear the bar's line, so the report that follows starts on a clean line."""
        if self.shown:
            self.stream.write("\r\x1b[K")
            self.stream.flush()
            self.shown = False


class ClearingStream:
    """Standard output that clears the bar before anything is written to it, so a report never
    lands in the middle of the bar's line."""

    def __init__(self, stream: TextIO, bar: ProgressBar) -> None:
        self.stream, self.bar = stream, bar

    def write(self, text: str) -> int:
        self.bar.close()
        return self.stream.write(text)

    def __getattr__(self, name: str) -> object:
        return getattr(self.stream, name)


def bar_line(what: str, done: int, total: int, elapsed: float) -> str:
    """``what [#####.....]  42 %  about 12 s left`` (no estimate before the first unit is done)."""
    share = min(1.0, max(0.0, done / total))
    filled = round(WIDTH * share)
    left = ""
    if 0 < done < total:
        left = f"  about {_duration(elapsed * (total - done) / done)} left"
    return f"{what} [{'#' * filled}{'.' * (WIDTH - filled)}] {100 * share:3.0f} %{left}"


def _duration(seconds: float) -> str:
    if seconds < 60:
        return f"{seconds:.0f} s"
    if seconds < 3600:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


def terminal_bar(json_output: bool, stdout: TextIO | None = None,
                 stderr: TextIO | None = None) -> ProgressBar | None:
    """A bar when output goes to a terminal and is not JSON, else None (no progress shown)."""
    stdout = stdout or sys.stdout
    stderr = stderr or sys.stderr
    if json_output or not (_is_terminal(stdout) and _is_terminal(stderr)):
        return None
    return ProgressBar(stderr)


def _is_terminal(stream: TextIO) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False
