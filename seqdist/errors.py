"""Exceptions that map onto the command line's exit codes.

Every error a user can cause is an :class:`InputError` (exit 2) whose message
names the file and, where it applies, the line, label or pair. Anything else
that escapes is a bug (exit 1).
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
