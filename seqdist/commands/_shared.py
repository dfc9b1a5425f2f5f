"""Options and helpers that several sub-commands share."""

from __future__ import annotations

import argparse

from ..io import MATRIX_FORMATS


def add_subcommand(subs, common, name: str, help: str, description: str | None = None) -> argparse.ArgumentParser:
    """Add a sub-command parser that accepts the common flags after the name."""
    return subs.add_parser(name, parents=[common], help=help, description=description or help,
                           formatter_class=argparse.RawDescriptionHelpFormatter)


def add_matrix_in(p: argparse.ArgumentParser) -> None:
    p.add_argument("--in-format", choices=MATRIX_FORMATS, default=None,
                   help="input matrix format (default: from the extension, else tsv)")


def add_matrix_out(p: argparse.ArgumentParser, required: bool = True) -> None:
    p.add_argument("-o", "--out", required=required, metavar="PATH",
                   help="output matrix file ('-' for standard output)")
    p.add_argument("--out-format", choices=MATRIX_FORMATS, default=None,
                   help="output matrix format (default: from the extension, else tsv)")


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
