"""Options and helpers that several sub-commands share."""

from __future__ import annotations

import argparse

from seqdist.core import params
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
    shapes = ", ".join(f.name for f in REGISTRY.values() if f.recognise is not None)
    p.add_argument("--in-format", choices=tuple(REGISTRY), default=None,
                   help=f"input matrix format (default: by extension, {_by_extension()}, also after .gz or "
                        f".bz2; else {shapes} when the content is recognised; else {DEFAULT_FORMAT}); "
                        "gzip and bz2 files are decompressed, recognised by their first bytes")


def add_out_format(p: argparse.ArgumentParser, what: str = "output matrix format") -> None:
    p.add_argument("--out-format", choices=tuple(REGISTRY), default=None,
                   help=f"{what} (default: by extension, {_by_extension()}; else {DEFAULT_FORMAT}); a "
                        "path ending in .gz or .bz2 is written compressed")


def add_matrix_out(p: argparse.ArgumentParser, required: bool = True) -> None:
    p.add_argument("-o", "--out", required=required, metavar="PATH",
                   help="output matrix file ('-' for standard output)")
    add_out_format(p)


def add_tol(p: argparse.ArgumentParser) -> None:
    p.add_argument("--tol", type=nonneg_float, default=None, metavar="T",
                   help="tolerance (default: 1e-9 times the largest entry; 2**-22 times it for a "
                        "float32 matrix)")


# ------------------------------------------------------------ option types
# Made from the library's declarations (seqdist.core.params.Number), so a range
# is written once and refused in the same words by the library and here. An
# ArgumentTypeError becomes one line "seqdist: error: --seed must be ..." and exit 2.
SEED_MAX = params.SEED_MAX
seed_type = params.SEED.argtype("seed")
positive_int = params.POSITIVE_INT.argtype("value")
nonneg_int = params.NONNEG_INT.argtype("value")
positive_float = params.POSITIVE.argtype("value")
nonneg_float = params.NONNEG.argtype("value")


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
    return params.Number(int, lo, hi).argtype("value")


def float_range(lo: float, hi: float, lo_open: bool = False, hi_open: bool = False):
    """An argparse type: a finite number between ``lo`` and ``hi`` (each end closed unless said open).

    Examples
    --------
    >>> float_range(0, 1, lo_open=True, hi_open=True)("0.5")
    0.5
    >>> float_range(0, 1, lo_open=True, hi_open=True)("1")
    Traceback (most recent call last):
    ...
    argparse.ArgumentTypeError: must be a finite number above 0 and below 1, got 1
    """
    return params.Number(float, lo, None if hi == float("inf") else hi, lo_open, hi_open).argtype("value")
