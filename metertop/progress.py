"""A one-line progress bar with rate and time left, for long runs on a terminal.

Conventions
-----------
The bar draws on a text stream (stderr in the command line) only when that
stream is a terminal, and at most ten times a second; otherwise it stays
silent, so that logs and pipes get no control characters. Rate and time left
count only the items done since the bar started.
"""

from __future__ import annotations

import shutil
import time
from typing import TextIO

__all__ = ["ProgressBar", "format_duration"]


def format_duration(seconds: float) -> str:
    """``h:mm:ss`` or ``m:ss``.

    >>> format_duration(75), format_duration(3 * 3600 + 5)
    ('1:15', '3:00:05')
    """
    s = int(round(max(seconds, 0.0)))
    h, rest = divmod(s, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"


class ProgressBar:
    """Progress of ``total`` items of work.

    Parameters
    ----------
    total : int
        Items to do in this run.
    stream : text stream
        Where to draw.
    label : str
        What an item is called, plural (``"files"``).
    enabled : bool, optional
        Draw at all; by default only when ``stream`` is a terminal.

    Examples
    --------
    >>> import io
    >>> bar = ProgressBar(10, io.StringIO(), enabled=True, clock=iter([0.0, 2.0, 2.0]).__next__)
    >>> bar.update(4, failed=1)
    >>> bar.stream.getvalue().split("]")[1].split()
    ['4/10', '40%', '2.0', 'files/s', 'ETA', '0:03', '1', 'failed']
    """

    def __init__(self, total: int, stream: TextIO, label: str = "files", enabled: bool | None = None, clock=time.monotonic):
        self.total = max(int(total), 0)
        self.stream = stream
        self.label = label
        if enabled is None:
            isatty = getattr(stream, "isatty", None)
            enabled = bool(isatty and isatty())
        self.enabled = enabled
        self._clock = clock
        self._start = clock()
        self._last_draw = -1.0
        self._drawn = False

    def update(self, done: int, failed: int = 0, force: bool = False) -> None:
        """Show that ``done`` items are finished, ``failed`` of them with an error."""
        if not self.enabled:
            return
        now = self._clock()
        if not force and done < self.total and now - self._last_draw < 0.1:
            return
        self._last_draw = now
        elapsed = max(now - self._start, 1e-9)
        rate = done / elapsed
        width = shutil.get_terminal_size((80, 20)).columns
        tail = f" {done}/{self.total} {100.0 * done / max(self.total, 1):3.0f}%  {rate:.1f} {self.label}/s"
        if done < self.total:
            tail += f"  ETA {format_duration((self.total - done) / rate)}" if rate > 0 else "  ETA -"
        if failed:
            tail += f"  {failed} failed"
        cells = max(min(width - len(tail) - 3, 40), 5)
        filled = int(cells * done / max(self.total, 1))
        line = f"[{'#' * filled}{'.' * (cells - filled)}]{tail}"
        self.stream.write("\r" + line[: width - 1].ljust(min(width - 1, len(line))))
        self.stream.flush()
        self._drawn = True

    def close(self) -> None:
        """End the bar's line, so that what is printed next starts on a fresh line."""
        if self.enabled and self._drawn:
            self.stream.write("\n")
            self.stream.flush()
            self._drawn = False
