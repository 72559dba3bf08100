"""A progress bar for long runs: one line on stderr, redrawn in place, only on a terminal.

``catcheck check`` shows it unless ``--quiet``.  It is driven by the library's ``progress``
callback (:func:`catcheck.api.check` calls it with the rows of each checked batch) and
learns the catalogue's size from :meth:`ProgressBar.start`, which the library calls first
on any progress object that has it (:class:`SizedProgress`).  The line shows the rows done
out of the total, the rate and the time left; it is redrawn at most ``1 / min_interval``
times a second and cleared by :meth:`ProgressBar.close`, so the summary that follows
starts on a clean line.  Plain ASCII, so any terminal encoding can show it.
"""

from __future__ import annotations

import shutil
import sys
import time
from collections.abc import Callable
from typing import Protocol, TextIO, runtime_checkable

#: redraw at most ten times a second
MIN_INTERVAL_S = 0.1


@runtime_checkable
class SizedProgress(Protocol):
    """A progress callback that wants the catalogue's size before the first batch."""

    def start(self, total_rows: int) -> None: ...

    def __call__(self, rows: int) -> None: ...


def is_terminal(stream: TextIO) -> bool:
    """True when ``stream`` is an interactive terminal."""
    isatty = getattr(stream, "isatty", None)
    try:
        return bool(isatty and isatty())
    except ValueError:  # a closed stream
        return False


class ProgressBar:
    """Rows checked out of the catalogue's rows, with rate and time left, on one line."""

    def __init__(self, stream: TextIO, *, min_interval: float = MIN_INTERVAL_S,
                 clock: Callable[[], float] = time.monotonic,
                 columns: Callable[[], int] | None = None) -> None:
        self.stream = stream
        self.min_interval = min_interval
        self.clock = clock
        self.columns = columns or (lambda: shutil.get_terminal_size((80, 24)).columns)
        self.total = 0
        self.done = 0
        self._first: tuple[float, int] | None = None  # (time, rows) at the first batch
        self._last_draw = float("-inf")
        self._drawn = 0  # characters on the line now

    @classmethod
    def for_terminal(cls, stream: TextIO | None = None, quiet: bool = False
                     ) -> ProgressBar | None:
        """A bar on ``stream`` (stderr by default), or None when quiet or not a terminal."""
        stream = sys.stderr if stream is None else stream
        if quiet or not is_terminal(stream):
            return None
        return cls(stream)

    def start(self, total_rows: int) -> None:
        """Set the number of rows to expect and draw the empty bar."""
        self.total = max(0, int(total_rows))
        self._draw(self.clock())

    def __call__(self, rows: int) -> None:
        """Count ``rows`` more rows checked; redraw when the last drawing is old enough."""
        self.done += rows
        now = self.clock()
        if self._first is None:
            self._first = (now, self.done)
        if now - self._last_draw >= self.min_interval:
            self._draw(now)

    def close(self) -> None:
        """Clear the line (nothing is left behind on the terminal)."""
        if self._drawn:
            self.stream.write("\r" + " " * self._drawn + "\r")
            self.stream.flush()
            self._drawn = 0

    def line(self, now: float) -> str:
        """The text of the bar at time ``now``, fitted to the terminal's width."""
        width = max(20, self.columns() - 1)
        total = max(self.total, self.done)
        share = self.done / total if total else 0.0
        rate = self._rate(now)
        left = (f"ETA {_duration((total - self.done) / rate)}" if rate and total
                else "ETA --:--")
        speed = f"{_count(rate)} rows/s" if rate else "- rows/s"
        tail = f" {100 * share:3.0f}%  {self.done:,}/{total:,} rows  {speed}  {left}"
        head = "checking "
        room = width - len(head) - len(tail) - 2
        if room < 10:  # a narrow terminal: numbers only
            return (head + tail.strip())[:width]
        filled = round(room * share)
        return f"{head}[{'#' * filled}{'-' * (room - filled)}]{tail}"

    def _rate(self, now: float) -> float:
        """Rows per second since the first batch (the group pass before it has no rows)."""
        if self._first is None:
            return 0.0
        since, rows = self._first
        elapsed = now - since
        return (self.done - rows) / elapsed if elapsed > 0 and self.done > rows else 0.0

    def _draw(self, now: float) -> None:
        text = self.line(now)
        padding = " " * max(0, self._drawn - len(text))
        self.stream.write("\r" + text + padding)
        self.stream.flush()
        self._drawn = len(text)
        self._last_draw = now


def _count(value: float) -> str:
    """A rate for people: 950, 12.3k, 4.56M."""
    for limit, suffix in ((1e9, "G"), (1e6, "M"), (1e3, "k")):
        if value >= limit:
            return f"{value / limit:.3g}{suffix}"
    return f"{value:.0f}"


def _duration(seconds: float) -> str:
    """m:ss, or h:mm:ss from an hour on."""
    seconds = round(seconds)
    hours, rest = divmod(seconds, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours}:{minutes:02d}:{secs:02d}" if hours else f"{minutes}:{secs:02d}"
