"""Exceptions that map onto the command line's exit codes.

Every error a user can cause is an :class:`InputError` (exit 2) whose message
names the file and, where it applies, the line, label or pair. Anything else
that escapes is a bug (exit 1).

Warnings go through Python's :mod:`warnings` module with the classes below,
so library users can filter them (``warnings.simplefilter("error",
SeqdistWarning)``); the command line prints them as ``seqdist: warning: ...``.
"""

from typing import Callable


class SeqdistError(Exception):
    """Base class of the errors seqdist reports to users."""

    exit_code = 1


class InputError(SeqdistError, ValueError):
    """Bad usage or bad input (exit code 2)."""

    exit_code = 2


class ParameterError(InputError):
    """A bad value for a named parameter, in one message form for every parameter.

    The message names the Python parameter (``'gap_rate'``); the command line
    renders the same error with its flag (``--gap-rate``), see
    :meth:`render`. ``template`` holds ``{name}`` fields for the parameters
    it mentions, so a message about two parameters names both.

    Examples
    --------
    >>> e = ParameterError("tol", "a finite non-negative number", -1.0)
    >>> str(e)
    "parameter 'tol' must be a finite non-negative number, got -1.0"
    >>> e.render(flag)
    '--tol must be a finite non-negative number, got -1.0'
    >>> e = ParameterError.text("{taxa} x {length} is too many cells", "taxa", "length")
    >>> str(e), e.render(flag)
    ("parameter 'taxa' x parameter 'length' is too many cells", '--taxa x --length is too many cells')
    """

    def __init__(self, parameter: str, allowed: str | None = None, got: object = None, *,
                 template: str | None = None, parameters: tuple[str, ...] = ()) -> None:
        self.parameter = parameter
        self.parameters = tuple(parameters) or (parameter,)
        self.template = template if template is not None else (
            "{" + parameter + "} must be " + str(allowed).replace("{", "{{").replace("}", "}}")
            + ", got " + repr(got).replace("{", "{{").replace("}", "}}"))
        super().__init__(self.render(python_name))

    @classmethod
    def text(cls, template: str, *parameters: str) -> "ParameterError":
        """An error with a free-form ``template`` naming ``parameters`` as ``{name}`` fields."""
        return cls(parameters[0], template=template, parameters=parameters)

    def render(self, name_of: Callable[[str], str]) -> str:
        """The message with each parameter named by ``name_of(parameter)``."""
        return self.template.format(**{p: name_of(p) for p in self.parameters})


def python_name(parameter: str) -> str:
    """How the library names a parameter in messages: ``parameter 'gap_rate'``."""
    return f"parameter '{parameter}'"


def flag(parameter: str) -> str:
    """How the command line names a parameter: ``--gap-rate``."""
    return "--" + parameter.replace("_", "-")


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


__all__ = ["SeqdistError", "InputError", "ParameterError", "python_name", "flag", "InfeasibleError", "StrictFailure",
           "SeqdistWarning", "DataWarning"]
