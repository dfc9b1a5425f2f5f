"""Options and helpers that several sub-commands share."""

from __future__ import annotations

import argparse

from seqdist.io.matrices import DEFAULT_FORMAT, REGISTRY


def add_subcommand(subs, common, name: str, help: str, description: str | None = None) -> argparse.ArgumentParser:
    """Add a sub-command parser that accepts the common flags after the name."""
    return subs.add_parser(name, parents=[common], help=help, description=description or help,
                           formatter_class=argparse.RawDescriptionHelpFormatter)


def _by_extension() -> str:
    return ", ".join(f"{ext} {f.name}" for f in REGISTRY.values() for ext in f.extensions)


def matrix_formats_help(indent: str = "  ") -> str:
    """The matrix formats and their layouts, one block each, for ``--help`` texts (from the registry).

    Examples
    --------
    >>> print(matrix_formats_help().splitlines()[0][:40])
      tsv     a header row (its first cell e
    """
    import textwrap

    width = max(len(n) for n in REGISTRY) + 2
    lines = []
    for f in REGISTRY.values():
        lines += textwrap.wrap(f.description, 88, initial_indent=f"{indent}{f.name:<{width}}",
                               subsequent_indent=indent + " " * width)
    return "\n".join(lines)


def add_matrix_in(p: argparse.ArgumentParser) -> None:
    shapes = " or ".join(f.name for f in REGISTRY.values() if f.recognise is not None)
    p.add_argument("--in-format", choices=tuple(REGISTRY), default=None,
                   help=f"input matrix format (default: by extension, {_by_extension()}; else {shapes} when "
                        f"the file has that shape; else {DEFAULT_FORMAT})")


def add_out_format(p: argparse.ArgumentParser, what: str = "output matrix format") -> None:
    p.add_argument("--out-format", choices=tuple(REGISTRY), default=None,
                   help=f"{what} (default: by extension, {_by_extension()}; else {DEFAULT_FORMAT})")


def add_matrix_out(p: argparse.ArgumentParser, required: bool = True) -> None:
    p.add_argument("-o", "--out", required=required, metavar="PATH",
                   help="output matrix file ('-' for standard output)")
    add_out_format(p)


def add_tol(p: argparse.ArgumentParser) -> None:
    p.add_argument("--tol", type=nonneg_float, default=None, metavar="T",
                   help="tolerance (default: 1e-9 times the largest entry)")


# ------------------------------------------------------------ option types
# argparse calls these on the text of an option; an ArgumentTypeError becomes
# one line "seqdist: error: argument --seed: ..." and exit 2.
SEED_MAX = 2**32 - 1


def _number(text: str, kind):
    try:
        value = kind(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected {'an integer' if kind is int else 'a number'}, "
                                         f"got '{text}'") from None
    return value


def seed_type(text: str) -> int:
    """A seed: an integer from 0 to 2**32 - 1."""
    value = _number(text, int)
    if not 0 <= value <= SEED_MAX:
        raise argparse.ArgumentTypeError(f"a seed is an integer from 0 to {SEED_MAX}, got {text}")
    return value


def positive_int(text: str) -> int:
    """An integer >= 1."""
    value = _number(text, int)
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be a positive integer, got {text}")
    return value


def nonneg_int(text: str) -> int:
    """An integer >= 0."""
    value = _number(text, int)
    if value < 0:
        raise argparse.ArgumentTypeError(f"must be 0 or a positive integer, got {text}")
    return value


def positive_float(text: str) -> float:
    """A finite number > 0."""
    value = _number(text, float)
    if not (value > 0 and value != float("inf")):
        raise argparse.ArgumentTypeError(f"must be a finite positive number, got {text}")
    return value


def nonneg_float(text: str) -> float:
    """A finite number >= 0."""
    value = _number(text, float)
    if not (value >= 0 and value != float("inf")):
        raise argparse.ArgumentTypeError(f"must be a finite number >= 0, got {text}")
    return value


def add_seed(p: argparse.ArgumentParser, default: int, help: str = "seed of every randomised step") -> None:
    p.add_argument("--seed", type=seed_type, default=default, metavar="S",
                   help=f"{help} (0 to {SEED_MAX}; default: {default})")


def int_range(lo: int, hi: int | None = None):
    """An argparse type: an integer from ``lo`` to ``hi`` (no upper limit when None).

    Examples
    --------
    >>> int_range(1, 10)("3")
    3
    >>> int_range(1, 10)("11")
    Traceback (most recent call last):
    ...
    argparse.ArgumentTypeError: must be an integer from 1 to 10, got 11
    """
    def check(text: str) -> int:
        value = _number(text, int)
        if value < lo or (hi is not None and value > hi):
            span = f"from {lo} to {hi}" if hi is not None else f">= {lo}"
            raise argparse.ArgumentTypeError(f"must be an integer {span}, got {text}")
        return value

    check.__name__ = "integer"
    return check


def float_range(lo: float, hi: float, lo_open: bool = False, hi_open: bool = False):
    """An argparse type: a finite number between ``lo`` and ``hi`` (each end closed unless said open).

    Examples
    --------
    >>> float_range(0, 1, lo_open=True, hi_open=True)("0.5")
    0.5
    >>> float_range(0, 1, lo_open=True, hi_open=True)("1")
    Traceback (most recent call last):
    ...
    argparse.ArgumentTypeError: must be a number above 0 and below 1, got 1
    """
    def check(text: str) -> float:
        value = _number(text, float)
        ok = (value > lo if lo_open else value >= lo) and (value < hi if hi_open else value <= hi)
        if not ok:  # also refuses nan, which fails every comparison
            left = f"above {lo:g}" if lo_open else f"at least {lo:g}"
            right = f"below {hi:g}" if hi_open else f"at most {hi:g}"
            raise argparse.ArgumentTypeError(f"must be a number {left} and {right}, got {text}")
        return value

    check.__name__ = "number"
    return check
