"""``seqdist convert``: read, validate and rewrite a matrix in another format."""

from __future__ import annotations

from seqdist.cli.commands._shared import add_matrix_in, add_matrix_out, add_subcommand, matrix_formats_help
from seqdist.io.matrices import REGISTRY, read_matrix, write_matrix


def register(subs, common):
    *most, last = REGISTRY
    names = f"{', '.join(most)} or {last}"
    p = add_subcommand(subs, common, "convert", "validate a distance matrix and write it in another format",
                       f"Reads a matrix file ({names}), checks it (square, unique labels,\n"
                       "symmetric, zero diagonal, non-negative) and writes it in the chosen format.\n\n"
                       f"formats (--in-format, --out-format):\n{matrix_formats_help()}\n\n"
                       "Compressed input (gzip, bz2) is recognised by its first bytes; an output\n"
                       "path ending in .gz or .bz2 is written compressed.\n\n"
                       "examples:\n  seqdist convert dist.tsv -o dist.txt --out-format square\n"
                       "  seqdist convert dist.tsv -o dist.npz\n  seqdist convert dist.npz -o dist.nex.gz")
    p.add_argument("matrix", help="input matrix file ('-' for standard input)")
    add_matrix_in(p)
    add_matrix_out(p)
    p.set_defaults(func=_run)


def _run(args) -> int:
    dm = read_matrix(args.matrix, args.in_format)
    write_matrix(args.out, dm, args.out_format)
    return 0
