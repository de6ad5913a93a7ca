"""Progress reporting shared by the CLI and the web app: a callback (fraction, message).

Long computations take a :data:`Progress` callback and call it with the share of the work done
(0 to 1) and a short message; 1.0 means done. :class:`ProgressReport` shows that wherever the
user watches: a tqdm bar on a terminal, tqdm's widget in a Jupyter notebook, and elsewhere (a log
file, CI output) plain lines through the ``planner.progress`` logger, throttled so that a long
fit leaves a dozen lines rather than thousands.

tqdm is imported only when a bar is first drawn: commands that never report progress (``planner
check``) do not pay for it.
"""

from __future__ import annotations

import logging
import math
import sys
import time
from collections.abc import Callable
from types import TracebackType
from typing import Any, TextIO

Progress = Callable[[float, str], None]

LOG_STEP = 0.1
"""A log line when the work has advanced by this share since the last line..."""
LOG_SECONDS = 30.0
"""...or when this many seconds have passed since it (a slow stretch still shows signs of life),"""
LOG_MIN_SECONDS = 2.0
"""...but never sooner than this after it: a run of a second leaves its first and last lines."""
BAR_INTERVAL = 0.1  # seconds: the least time between two redraws of a bar
MESSAGE_WIDTH = 40  # characters of the message a bar shows (keeps the bar on one line)
BAR_FORMAT = "{desc}{percentage:3.0f}%|{bar}| {elapsed}<{remaining}{postfix}"  # ", message"

LOG = logging.getLogger(__name__)


def silent(fraction: float, message: str) -> None:
    """A progress callback that shows nothing."""


def scaled(progress: Progress, start: float, stop: float) -> Progress:
    """Map a sub-task's 0..1 onto start..stop of the parent's bar."""
    return lambda fraction, message: progress(start + (stop - start) * fraction, message)


def is_terminal(stream: Any) -> bool:
    """Whether ``stream`` is an interactive terminal (False for files, pipes, captures and
    streams that cannot tell)."""
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError, OSError):  # no isatty, or closed
        return False


def in_notebook() -> bool:
    """Whether this process is a Jupyter kernel in which tqdm can draw its widget."""
    if "ipykernel" not in sys.modules:  # cheap answer for every other process, without tqdm
        return False
    import tqdm.auto  # noqa: F401  (imported first: it silences autonotebook's notice)
    from tqdm import autonotebook, std

    return autonotebook.tqdm is not std.tqdm


def elapsed_text(seconds: float) -> str:
    """``42 s`` or ``3 min 07 s`` or ``2 h 05 min``: elapsed time in a log line."""
    seconds = int(seconds)
    if seconds < 60:
        return f"{seconds} s"
    if seconds < 3600:
        return f"{seconds // 60} min {seconds % 60:02d} s"
    return f"{seconds // 3600} h {seconds // 60 % 60:02d} min"


class ProgressReport:
    """A :data:`Progress` callback that shows a task's progress where the user is watching.

    - ``stream`` (default: standard error as it is when the report is made) is a terminal: a
      tqdm bar on it, redrawn at most every BAR_INTERVAL seconds;
    - the process is a Jupyter kernel and no ``stream`` was given: tqdm's notebook widget;
    - otherwise (a log file, a pipe, CI output): lines such as ``fit:  40% bootstrap refits
      [1 min 12 s] bootstrap refits`` at INFO level through ``logger`` (default:
      ``planner.progress``): one when the task starts, then one per LOG_STEP of the work or per
      LOG_SECONDS, at least LOG_MIN_SECONDS apart, and always the last at 100%. The application
      decides where they go (the ``planner`` command sends them to standard error); a script
      sees them once it configures logging.

    ``label`` starts each bar or line (the command's name, say). ``quiet`` shows nothing at all.
    Reaching 1.0 ends the bar (or writes the last line); a later call below 1.0 starts a new
    one (a repeated 1.0 shows nothing).
    :meth:`close` (or leaving a ``with`` block) ends a bar that an error interrupted.
    ``clock`` is the time source of the throttling (tests pass a fake one).
    """

    def __init__(
        self,
        label: str = "",
        *,
        stream: TextIO | None = None,
        quiet: bool = False,
        logger: logging.Logger | None = None,
        clock: Callable[[], float] = time.monotonic,
    ):
        self.label = label
        self.stream = sys.stderr if stream is None else stream
        self.logger = LOG if logger is None else logger
        self.clock = clock
        if quiet:
            self.mode = "quiet"
        elif is_terminal(self.stream) or (stream is None and in_notebook()):
            self.mode = "bar"
        else:
            self.mode = "log"
        self._bar: Any = None  # the open tqdm bar, if any
        self._started: float | None = None  # clock at the task's first call (log lines)
        self._finished = False  # the task reached 1.0 and no new one has started
        self._logged_at = 0.0  # clock at the last log line
        self._logged_fraction = 0.0  # fraction of the last log line

    def __call__(self, fraction: float, message: str) -> None:
        if self.mode == "quiet":
            return
        fraction = min(max(float(fraction), 0.0), 1.0) if math.isfinite(fraction) else 0.0
        if self._finished and fraction >= 1.0:
            return  # said already
        self._finished = fraction >= 1.0
        if self.mode == "bar":
            self._draw(fraction, message)
        else:
            self._log(fraction, message)

    def _draw(self, fraction: float, message: str) -> None:
        if self._bar is None:
            from tqdm.auto import tqdm

            self._bar = tqdm(
                total=1.0,
                desc=f"{self.label}: " if self.label else None,
                file=self.stream,
                bar_format=BAR_FORMAT,
                mininterval=BAR_INTERVAL,
                miniters=0,  # redraw on time alone: a new message may come without new work
                dynamic_ncols=True,
            )
        self._bar.set_postfix_str(message[:MESSAGE_WIDTH].ljust(MESSAGE_WIDTH), refresh=False)
        self._bar.update(fraction - self._bar.n)
        if fraction >= 1.0:
            self.close()

    def _log(self, fraction: float, message: str) -> None:
        now = self.clock()
        first = self._started is None
        if first:
            self._started = now
        done = fraction >= 1.0
        waited = now - self._logged_at
        advanced = fraction - self._logged_fraction >= LOG_STEP - 1e-9  # 0.3 - 0.2 < 0.1
        due = waited >= LOG_MIN_SECONDS and (advanced or waited >= LOG_SECONDS)
        if not (first or done or due):
            return
        self._logged_at, self._logged_fraction = now, fraction
        percent = math.floor(100 * fraction)  # 99.7% done is not yet 100%
        self.logger.info(
            "%s%3d%% [%s] %s",
            f"{self.label}: " if self.label else "",
            percent,
            elapsed_text(now - self._started),
            message,
        )
        if done:
            self._started = None  # a later call starts a new task
            self._logged_fraction = 0.0

    def close(self) -> None:
        """End the bar where it stands (nothing to do for log lines)."""
        if self._bar is not None:
            bar, self._bar = self._bar, None
            bar.close()

    def __enter__(self) -> ProgressReport:
        return self

    def __exit__(
        self,
        kind: type[BaseException] | None,
        error: BaseException | None,
        traceback: TracebackType | None,
    ) -> None:
        self.close()
