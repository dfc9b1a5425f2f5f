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
    p.add_argument("--tol", type=float, default=None, metavar="T",
                   help="tolerance (default: 1e-9 times the largest entry)")
