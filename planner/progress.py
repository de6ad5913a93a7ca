"""Progress reporting shared by the CLI and the web app: a callback (fraction, message)."""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from typing import TextIO

Progress = Callable[[float, str], None]
BAR_WIDTH = 30
MIN_INTERVAL = 0.1  # seconds between redraws


def silent(fraction: float, message: str) -> None:
    """A progress callback that shows nothing."""


class TerminalProgress:
    """Draws a one-line bar on a terminal (stderr by default); prints nothing when not a TTY."""

    def __init__(self, stream: TextIO | None = None, *, force: bool = False):
        self.stream = stream or sys.stderr
        self.enabled = force or self.stream.isatty()
        self._last = 0.0

    def __call__(self, fraction: float, message: str) -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if fraction < 1.0 and now - self._last < MIN_INTERVAL:
            return
        self._last = now
        filled = int(round(BAR_WIDTH * min(max(fraction, 0.0), 1.0)))
        bar = "#" * filled + "-" * (BAR_WIDTH - filled)
        self.stream.write(f"\r[{bar}] {fraction:4.0%} {message[:60]:<60}")
        if fraction >= 1.0:
            self.stream.write("\n")
        self.stream.flush()


def scaled(progress: Progress, start: float, stop: float) -> Progress:
    """Map a sub-task's 0..1 onto start..stop of the parent's bar."""
    return lambda fraction, message: progress(start + (stop - start) * fraction, message)
