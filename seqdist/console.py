"""Warnings and progress bars on standard error.

Both are silenced by :func:`set_quiet` (the ``--quiet`` flag). Nothing here
ever writes to standard output, which may carry a data stream.
"""

from __future__ import annotations

import sys
import time

_QUIET = False


def set_quiet(flag: bool) -> None:
    """Silence (or re-enable) warnings and progress bars."""
    global _QUIET
    _QUIET = bool(flag)


def is_quiet() -> bool:
    return _QUIET


def warn(message: str) -> None:
    """Print one ``seqdist: warning: ...`` line on standard error."""
    if not _QUIET:
        print(f"seqdist: warning: {message}", file=sys.stderr, flush=True)


def info(message: str) -> None:
    """Print one informative line on standard error."""
    if not _QUIET:
        print(f"seqdist: {message}", file=sys.stderr, flush=True)


class Progress:
    """A small progress bar on standard error.

    On a terminal it redraws one line; elsewhere (logs of a workflow manager)
    it prints a line at most every ``log_every`` seconds and at the end, so
    that logs stay short. It does nothing when quiet.

    Examples
    --------
    >>> with Progress("pairs", total=10) as bar:
    ...     for _ in range(10):
    ...         bar.update(1)
    """

    def __init__(self, what: str, total: float | None = None, log_every: float = 10.0,
                 min_seconds: float = 1.0):
        self.what = what
        self.total = total
        self.done = 0.0
        self.start = time.perf_counter()
        self.last = 0.0
        self.log_every = log_every
        self.min_seconds = min_seconds
        self.tty = hasattr(sys.stderr, "isatty") and sys.stderr.isatty()
        self.drawn = False

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    def _line(self) -> str:
        el = time.perf_counter() - self.start
        if self.total:
            frac = min(1.0, self.done / self.total)
            width = 28
            fill = int(round(frac * width))
            eta = (el / frac - el) if frac > 0 else float("nan")
            return (f"seqdist: {self.what} [{'#' * fill}{'.' * (width - fill)}] "
                    f"{100 * frac:5.1f}% {el:6.1f}s elapsed, ~{eta:.0f}s left")
        return f"seqdist: {self.what} {self.done:g} done, {el:.1f}s elapsed"

    def update(self, step: float = 1.0, note: str | None = None) -> None:
        self.done += step
        if _QUIET:
            return
        now = time.perf_counter()
        if now - self.start < self.min_seconds:
            return
        interval = 0.2 if self.tty else self.log_every
        if now - self.last < interval:
            return
        self.last = now
        line = self._line() + (f" {note}" if note else "")
        if self.tty:
            sys.stderr.write("\r" + line[:120].ljust(100))
        else:
            sys.stderr.write(line + "\n")
        sys.stderr.flush()
        self.drawn = True

    def close(self) -> None:
        if _QUIET or not self.drawn:
            return
        if self.tty:
            sys.stderr.write("\r" + self._line()[:120].ljust(100) + "\n")
        else:
            sys.stderr.write(self._line() + "\n")
        sys.stderr.flush()
        self.drawn = False
