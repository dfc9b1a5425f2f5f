"""Exceptions that map onto the command line's exit codes.

Every error a user can cause is an :class:`InputError` (exit 2) whose message
names the file and, where it applies, the line, label or pair. Anything else
that escapes is a bug (exit 1).

Warnings go through Python's :mod:`warnings` module with the classes below,
so library users can filter them (``warnings.simplefilter("error",
SeqdistWarning)``); the command line prints them as ``seqdist: warning: ...``.
"""


class SeqdistError(Exception):
    """Base class of the errors seqdist reports to users."""

    exit_code = 1


class InputError(SeqdistError, ValueError):
    """Bad usage or bad input (exit code 2)."""

    exit_code = 2


class InfeasibleError(SeqdistError):
    """The request cannot be met, e.g. conflicting locked entries (exit code 3)."""

    exit_code = 3


class StrictFailure(SeqdistError):
    """``audit --strict`` found violations (exit code 4)."""

    exit_code = 4


class SeqdistWarning(UserWarning):
    """Base class of the warnings seqdist gives (printed as ``seqdist: warning: ...``)."""


class DataWarning(SeqdistWarning):
    """Something about the data the user should know: undefined distances,
    taxa with no measured distance, values set or clipped."""


__all__ = ["SeqdistError", "InputError", "InfeasibleError", "StrictFailure", "SeqdistWarning", "DataWarning"]
