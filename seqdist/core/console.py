"""Warnings and progress bars on standard error.

Warnings are raised through Python's :mod:`warnings` module
(:class:`~seqdist.core.errors.DataWarning` by default), so library users can
filter them or turn them into errors; :func:`install_warning_printer` (the
command line calls it) prints each one as one line ``seqdist: warning:
...``. Progress bars and warnings are silenced by :func:`set_quiet` (the
``--quiet`` flag). Progress bars are shown only when standard error is a
terminal unless :func:`set_progress` says otherwise (``seqdist.set_progress``
from Python). Nothing here ever writes to standard output, which may carry a
data stream.
"""

from __future__ import annotations

import sys
import time
import warnings
from typing import TextIO

__all__ = ["set_quiet", "is_quiet", "set_progress", "progress_mode", "progress_shown", "warn", "one_line",
           "install_warning_printer", "info", "Progress"]

_QUIET = False
_PROGRESS: bool | None = None  # None: only when standard error is a terminal


def set_quiet(flag: bool) -> None:
    """Silence (or re-enable) warnings and progress bars.

    Examples
    --------
    >>> set_quiet(True); is_quiet()
    True
    >>> set_quiet(False); is_quiet()
    False
    """
    global _QUIET
    _QUIET = bool(flag)


def is_quiet() -> bool:
    """Whether :func:`set_quiet` silenced warnings and progress bars.

    Examples
    --------
    >>> set_quiet(False); is_quiet()
    False
    """
    return _QUIET


def set_progress(mode: bool | None) -> None:
    """Choose when progress bars of long work are drawn on standard error.

    Parameters
    ----------
    mode : bool or None
        ``None`` (the default): only when standard error is a terminal, so a
        notebook, a test run, a pipe or a workflow manager's log stays clean;
        ``True``: always (away from a terminal one line at most every ten
        seconds and one at the end, so that logs stay short); ``False``: never.
        :func:`set_quiet` silences them whatever the mode.

    Raises
    ------
    TypeError
        ``mode`` is not True, False or None (a string such as ``"off"``
        would otherwise read as true).

    Examples
    --------
    >>> import seqdist
    >>> seqdist.set_progress(False)  # never, e.g. in a notebook
    >>> progress_mode()
    False
    >>> seqdist.set_progress(None)  # back to the default: only on a terminal
    """
    global _PROGRESS
    if mode is not None and not isinstance(mode, bool):
        raise TypeError(f"set_progress takes True, False or None, got {mode!r}")
    _PROGRESS = mode


def progress_mode() -> bool | None:
    """The mode :func:`set_progress` set: True, False or None (only on a terminal).

    Examples
    --------
    >>> set_progress(None); progress_mode() is None
    True
    """
    return _PROGRESS


def progress_shown(tty: bool | None = None) -> bool:
    """Whether a progress bar would be drawn now (see :func:`set_progress` and :func:`set_quiet`).

    Parameters
    ----------
    tty : bool, optional
        Whether standard error is a terminal (default: ask it).

    Examples
    --------
    >>> set_quiet(False); set_progress(None)
    >>> progress_shown(tty=False), progress_shown(tty=True)
    (False, True)
    """
    if _QUIET:
        return False
    if _PROGRESS is not None:
        return _PROGRESS
    return _stderr_is_tty() if tty is None else bool(tty)


def _stderr_is_tty() -> bool:
    try:
        return bool(sys.stderr.isatty())
    except (AttributeError, ValueError, OSError):  # replaced, closed or detached streams
        return False


def warn(message: str, category: type | None = None, stacklevel: int = 2) -> None:
    """Give a warning through :func:`warnings.warn` (default class :class:`~seqdist.core.errors.DataWarning`).

    Examples
    --------
    >>> import warnings
    >>> with warnings.catch_warnings(record=True) as seen:
    ...     warnings.simplefilter("always")
    ...     warn("3 pairs undefined")
    >>> seen[0].category.__name__, str(seen[0].message)
    ('DataWarning', '3 pairs undefined')
    """
    from seqdist.core.errors import DataWarning

    warnings.warn(one_line(message), category or DataWarning, stacklevel=stacklevel + 1)


def one_line(message: str) -> str:
    """``message`` on one line: line breaks and other control characters shown escaped.

    Examples
    --------
    >>> one_line("label 'a\\nb' is odd")
    "label 'a\\\\nb' is odd"
    """
    text = str(message)
    if text.isprintable():
        return text
    return "".join(ch if ch.isprintable() else ch.encode("unicode_escape").decode("ascii") for ch in text)


def install_warning_printer() -> None:
    """Print every warning as one ``seqdist: warning: ...`` line on standard error.

    seqdist's own warnings are always shown (unless quiet); other libraries'
    warnings that reach the user are shown once each, without the source
    path of the code that raised them. Under :func:`set_quiet` none is shown.
    """
    from seqdist.core.errors import SeqdistWarning

    def show(message: Warning | str, category: type[Warning], filename: str, lineno: int,
             file: TextIO | None = None, line: str | None = None) -> None:
        if _QUIET:
            return
        text = one_line(str(message))
        if not issubclass(category, SeqdistWarning):
            text = f"{text} ({category.__name__})"
        try:
            sys.stderr.write(f"seqdist: warning: {text}\n")
            sys.stderr.flush()
        except (OSError, ValueError):
            pass

    warnings.showwarning = show
    warnings.simplefilter("always", SeqdistWarning)


def info(message: str) -> None:
    """Print one informative line on standard error (unless quiet).

    Examples
    --------
    >>> info("wrote out.tsv (tsv)")  # doctest: +SKIP
    """
    if not _QUIET:
        print(f"seqdist: {message}", file=sys.stderr, flush=True)


class Progress:
    """A small progress bar on standard error.

    On a terminal it redraws one line; elsewhere (logs of a workflow manager)
    it prints a line at most every ``log_every`` seconds and at the end, so
    that logs stay short. It draws nothing when quiet, and away from a
    terminal only when :func:`set_progress` asked for it (by default a
    notebook, a pipe or a log stays clean).

    The time left is estimated only when it can be honest: ``estimate`` is
    true (the units of ``total`` take about equal work), at least a tenth of
    the work and two units after the first are done, and the rate is measured
    from the first unit on (start-up, e.g. worker processes, is not extrapolated). Otherwise
    the bar shows the elapsed time only.

    Examples
    --------
    >>> with Progress("pairs", total=10) as bar:
    ...     for _ in range(10):
    ...         bar.update(1)
    """

    def __init__(self, what: str, total: float | None = None, log_every: float = 10.0,
                 min_seconds: float = 1.0, estimate: bool = True) -> None:
        self.what = what
        self.total = total
        self.done = 0.0
        self.start = time.perf_counter()
        self.last = 0.0
        self.log_every = log_every
        self.min_seconds = min_seconds
        self.estimate = estimate
        self.tty = _stderr_is_tty()
        self.drawn = False
        self._first = None  # (time, done) when the first unit finished

    def __enter__(self) -> "Progress":
        return self

    def __exit__(self, *exc: object) -> bool:
        self.close()
        return False

    def eta(self, now: float | None = None) -> float | None:
        """Seconds left, or None where no estimate is honest (see the class notes)."""
        if not (self.estimate and self.total) or self._first is None:
            return None
        now = time.perf_counter() if now is None else now
        t1, d1 = self._first
        span = self.done - d1
        if self.done < 0.1 * self.total or span < 2:
            return None
        return max(0.0, (now - t1) / span * (self.total - self.done))

    def _line(self) -> str:
        el = time.perf_counter() - self.start
        if self.total:
            frac = min(1.0, self.done / self.total)
            width = 28
            fill = int(round(frac * width))
            eta = self.eta()
            left = f", ~{eta:.0f}s left" if eta is not None and frac < 1 else ""
            return (f"seqdist: {self.what} [{'#' * fill}{'.' * (width - fill)}] "
                    f"{100 * frac:5.1f}% {el:6.1f}s elapsed{left}")
        return f"seqdist: {self.what} {self.done:g} done, {el:.1f}s elapsed"

    def update(self, step: float = 1.0, note: str | None = None) -> None:
        """Count ``step`` more units done and redraw when it is time (see the class notes)."""
        self.done += step
        if self._first is None and self.done > 0:
            self._first = (time.perf_counter(), self.done)
        if not progress_shown(self.tty):
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
        """Finish the bar's line (only if one was drawn)."""
        if _QUIET or not self.drawn:
            return
        if self.tty:
            sys.stderr.write("\r" + self._line()[:120].ljust(100) + "\n")
        else:
            sys.stderr.write(self._line() + "\n")
        sys.stderr.flush()
        self.drawn = False
