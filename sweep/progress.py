"""A progress line for long runs: rows done, rate, time left and the dashboard link, on stderr.

On a terminal the line is redrawn in place (at most a few times a second); in a log file a line is
written every :data:`LOG_EVERY_S` seconds and at the end.
"""

from __future__ import annotations

import sys
import time

#: Seconds between lines when stderr is not a terminal.
LOG_EVERY_S = 10.0
#: Seconds between redraws on a terminal.
REDRAW_EVERY_S = 0.2


def format_duration(seconds: float) -> str:
    """``h:mm:ss`` for a duration [s]; ``?`` when unknown."""
    if seconds is None or seconds != seconds or seconds == float("inf"):
        return "?"
    seconds = int(round(seconds))
    return f"{seconds // 3600}:{seconds % 3600 // 60:02d}:{seconds % 60:02d}"


class Progress:
    """Rows done out of the total, with the rate of this run and the time left.

    Parameters
    ----------
    total_rows : int
        Rows of the cube.
    done_rows : int
        Rows already done before this run (a resumed run).
    enabled : bool
        Write anything at all.
    dashboard : str or None
        The dask dashboard's address, shown once at the start.
    stream : file
        Where to write (stderr by default).
    """

    def __init__(self, total_rows, done_rows=0, enabled=True, dashboard=None, stream=None):
        self.total = int(total_rows)
        self.done = int(done_rows)
        self.computed = 0
        self.enabled = enabled
        self.stream = stream if stream is not None else sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.started = time.monotonic()
        self._last = 0.0
        if enabled and dashboard:
            self.stream.write(f"dask dashboard: {dashboard}\n")
            self.stream.flush()

    def line(self) -> str:
        """The current progress line."""
        elapsed = time.monotonic() - self.started
        rate = self.computed / elapsed if elapsed > 0 else 0.0
        left = (self.total - self.done) / rate if rate > 0 else float("nan")
        share = self.done / self.total if self.total else 1.0
        width = 24
        filled = int(round(width * share))
        return (
            f"[{'#' * filled}{'.' * (width - filled)}] {self.done}/{self.total} rows "
            f"({100 * share:.0f}%), {rate:.1f} rows/s, ETA {format_duration(left)}"
        )

    def update(self, rows: int) -> None:
        """Count ``rows`` more rows as done."""
        self.done += int(rows)
        self.computed += int(rows)
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self._last >= (REDRAW_EVERY_S if self.tty else LOG_EVERY_S):
            self._last = now
            self._write()

    def _write(self) -> None:
        self.stream.write(("\r" + self.line()) if self.tty else self.line() + "\n")
        self.stream.flush()

    def close(self) -> None:
        """Write the final line."""
        if self.enabled:
            self._write()
            if self.tty:
                self.stream.write("\n")
            self.stream.flush()
            self.enabled = False
