"""Progress of the long stages on a terminal: counts, elapsed time and an estimate of the time
left, one line per stage rewritten in place; nothing at all when the stream is not a terminal.

The stages call ``progress(stage, done, total)`` (harmonise per slice, fit per cross-validation
fold, transfer per batch of slices, summarise per analysis step, report per figure). This module
turns those calls into lines such as::

    transfer    5/14  [#######-------------]  36%  0:21 elapsed  0:37 left

Only the standard library is imported, so the command line starts fast.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from typing import TextIO

__all__ = ["Progress", "TerminalProgress", "format_duration", "no_progress", "progress_for"]

#: ``progress(stage, done, total)``: the callback every stage takes.
Progress = Callable[[str, int, int], None]

#: Width of the bar, characters.
BAR_WIDTH = 20


def no_progress(stage: str, done: int, total: int) -> None:
    """The quiet callback: does nothing.

    Parameters
    ----------
    stage : str
        Name of the stage.
    done : int
        Steps finished.
    total : int
        Steps in the stage.

    Returns
    -------
    None
    """
    return None


def format_duration(seconds: float) -> str:
    """A duration as ``m:ss`` (or ``h:mm:ss`` from one hour on).

    Parameters
    ----------
    seconds : float
        Duration, s (negative values count as 0).

    Returns
    -------
    str
        E.g. ``0:07``, ``12:30``, ``1:02:03``.
    """
    s = int(round(max(float(seconds), 0.0)))
    h, rest = divmod(s, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"


class TerminalProgress:
    """A progress callback that draws one line per stage on a terminal stream.

    The line of the running stage is rewritten in place (carriage return); it is finished
    with a newline when the stage reaches its total or another stage starts. The time left
    is the mean time per step so far (since the stage's first call) times the steps left;
    it is shown once one step has finished.

    Parameters
    ----------
    stream : file-like
        Where to draw (a terminal: ``sys.stderr`` on the command line).
    clock : callable, optional
        Seconds on a monotonic clock (default :func:`time.monotonic`; tests pass a fake).
    min_interval : float
        Least time between two redraws of the same line, s (the first and the last call of a
        stage are always drawn).
    """

    def __init__(self, stream: TextIO, *, clock: Callable[[], float] = time.monotonic,
                 min_interval: float = 0.1):
        self.stream = stream
        self.clock = clock
        self.min_interval = float(min_interval)
        self.stage: str | None = None
        self._start = 0.0
        self._first_done = 0
        self._last_draw = -float("inf")
        self._width = 0

    def __call__(self, stage: str, done: int, total: int) -> None:
        """Record that `stage` has finished `done` of `total` steps, and redraw.

        Parameters
        ----------
        stage : str
            Name of the stage (a new name starts a new line).
        done : int
            Steps finished.
        total : int
            Steps in the stage (0 draws nothing).

        Returns
        -------
        None
        """
        now = self.clock()
        if stage != self.stage:
            self.finish()
            self.stage, self._start, self._first_done = stage, now, int(done)
            self._last_draw = -float("inf")
        if total <= 0:
            return
        complete = done >= total
        if not complete and now - self._last_draw < self.min_interval:
            return
        self._draw(self.line(stage, done, total, now - self._start, done - self._first_done))
        self._last_draw = now
        if complete:
            self.finish()

    def line(self, stage: str, done: int, total: int, elapsed: float, advanced: int) -> str:
        """The text of one progress line.

        Parameters
        ----------
        stage : str
            Name of the stage.
        done, total : int
            Steps finished and steps in the stage.
        elapsed : float
            Seconds since the stage's first call.
        advanced : int
            Steps finished since the stage's first call (the basis of the estimate).

        Returns
        -------
        str
            E.g. ``fit  3/5  [############--------]  60%  0:09 elapsed  0:06 left``.
        """
        done = min(max(int(done), 0), int(total))
        frac = done / total
        filled = int(round(BAR_WIDTH * frac))
        bar = "#" * filled + "-" * (BAR_WIDTH - filled)
        width = len(str(total))
        text = (f"{stage:<10} {done:>{width}}/{total}  [{bar}] {100 * frac:3.0f}%  "
                f"{format_duration(elapsed)} elapsed")
        if done >= total:
            return text
        if advanced > 0:
            left = elapsed / advanced * (total - done)
            return f"{text}  {format_duration(left)} left"
        return f"{text}  -:-- left"

    def _draw(self, text: str) -> None:
        pad = " " * max(self._width - len(text), 0)  # clear what a longer line left behind
        self.stream.write("\r" + text + pad)
        self.stream.flush()
        self._width = len(text)

    def finish(self) -> None:
        """End the current line (before other output, or at the end of a stage).

        Returns
        -------
        None
        """
        if self._width:
            self.stream.write("\n")
            self.stream.flush()
        self._width = 0
        self.stage = None


def progress_for(stream: TextIO | None = None) -> Progress:
    """The progress callback for `stream`: drawn on a terminal, silent otherwise.

    Parameters
    ----------
    stream : file-like, optional
        Default ``sys.stderr``. Progress is drawn only if ``stream.isatty()`` is true, so
        output piped to a file or another program holds only the results.

    Returns
    -------
    callable
        A :class:`TerminalProgress` or :func:`no_progress`.
    """
    stream = sys.stderr if stream is None else stream
    try:
        tty = bool(stream.isatty())
    except (AttributeError, ValueError):  # no isatty, or a closed stream
        tty = False
    return TerminalProgress(stream) if tty else no_progress
