"""Numeric parameters declared once: their kind and range, for the library and the command line.

A :class:`Number` says what values a parameter takes. The library checks a
value with :meth:`Number.check`, which raises one
:class:`~seqdist.core.errors.ParameterError` form ("parameter 'tol' must be
a finite number >= 0, got -1.0"); the command line builds its argparse type
from the same object with :meth:`Number.argtype`, so a flag is refused while
the options are read, before any work, in the same words ("--tol must be a
finite number >= 0, got -1"). A range is written in one place only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

from seqdist.core.errors import ParameterError

__all__ = ["Number", "SEED", "SEED_MAX", "POSITIVE_INT", "NONNEG_INT", "POSITIVE", "NONNEG"]


def _g(x: float) -> str:
    return str(x) if isinstance(x, int) else f"{x:g}"


@dataclass(frozen=True)
class Number:
    """The kind (``int`` or ``float``) and range of a numeric parameter.

    ``lo`` and ``hi`` are inclusive unless ``lo_open`` / ``hi_open``; None
    means no bound. Floats must be finite.

    Examples
    --------
    >>> taxa = Number(int, 3, 20_000)
    >>> taxa.allowed()
    'an integer from 3 to 20000'
    >>> taxa.check("n_taxa", 2)
    Traceback (most recent call last):
    ...
    seqdist.core.errors.ParameterError: parameter 'n_taxa' must be an integer from 3 to 20000, got 2
    >>> Number(float, 0, lo_open=True).allowed()
    'a finite number above 0'
    """

    kind: type = float
    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False
    hi_open: bool = False

    def allowed(self) -> str:
        """What the parameter takes, in words (the middle of the error message)."""
        what = "an integer" if self.kind is int else "a finite number"
        lo, hi = self.lo, self.hi
        if lo is not None and hi is not None and not self.lo_open and not self.hi_open:
            return f"{what} from {_g(lo)} to {_g(hi)}"
        parts = []
        if lo is not None:
            parts.append(f"above {_g(lo)}" if self.lo_open else f">= {_g(lo)}")
        if hi is not None:
            parts.append(f"below {_g(hi)}" if self.hi_open else f"at most {_g(hi)}")
        return " ".join([what, " and ".join(parts)]) if parts else what

    def ok(self, value: object) -> bool:
        """Whether ``value`` is of the kind and in the range."""
        if isinstance(value, (bool, str)):
            return False
        if self.kind is int:
            if not isinstance(value, int):
                try:
                    if not float(value).is_integer():
                        return False
                except (TypeError, ValueError, OverflowError):
                    return False
        else:
            try:
                value = float(value)
            except (TypeError, ValueError):
                return False
            if not math.isfinite(value):
                return False
        if self.lo is not None and (value <= self.lo if self.lo_open else value < self.lo):
            return False
        return not (self.hi is not None and (value >= self.hi if self.hi_open else value > self.hi))

    def check(self, name: str, value: object) -> int | float:
        """``value`` (as ``kind``) if it is allowed, else a :class:`ParameterError` naming ``name``."""
        if not self.ok(value):
            raise ParameterError(name, self.allowed(), value)
        return self.kind(value)

    def parse(self, name: str, text: str) -> int | float:
        """The value of an option's text, checked (a :class:`ParameterError` naming ``name``).

        Examples
        --------
        >>> POSITIVE_INT.parse("processes", "4")
        4
        >>> POSITIVE_INT.parse("processes", "four")
        Traceback (most recent call last):
        ...
        seqdist.core.errors.ParameterError: parameter 'processes' must be an integer >= 1, got 'four'
        """
        try:
            value = int(text) if self.kind is int else float(text)
        except (TypeError, ValueError):
            raise ParameterError(name, self.allowed(), text) from None
        if not self.ok(value):
            raise ParameterError(name, self.allowed(), text if self.kind is float else value)
        return value

    def argtype(self, name: str) -> Callable[[str], int | float]:
        """An argparse ``type=``: parses and checks the option's text; a bad value is one usage error.

        The command line's parser turns the message into ``--flag must be ...``.
        """
        import argparse

        def convert(text: str) -> int | float:
            try:
                return self.parse(name, text)
            except ParameterError:
                raise argparse.ArgumentTypeError(f"must be {self.allowed()}, got {text}") from None

        convert.__name__ = "integer" if self.kind is int else "number"
        return convert


#: Seeds: the range numpy's generators take.
SEED_MAX = 2**32 - 1
SEED = Number(int, 0, SEED_MAX)
POSITIVE_INT = Number(int, 1)
NONNEG_INT = Number(int, 0)
POSITIVE = Number(float, 0, lo_open=True)
NONNEG = Number(float, 0)
