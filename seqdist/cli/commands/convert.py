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
                       "Large matrices: --dtype float32 stores the values of an npz file in single\n"
                       "precision (half the size; about seven significant digits, so the values are\n"
                       "rounded). A float32 npz is read as float32 and memory-mapped when large, and\n"
                       "the kernels that can (triangle counts, the shrink closure, the joins) work\n"
                       "on it in place; its default tolerance is 2**-22 times the largest entry.\n\n"
                       "examples:\n  seqdist convert dist.tsv -o dist.txt --out-format square\n"
                       "  seqdist convert dist.tsv -o dist.npz\n  seqdist convert dist.npz -o dist.nex.gz\n"
                       "  seqdist convert dist.tsv -o dist32.npz --dtype float32")
    p.add_argument("matrix", help="input matrix file ('-' for standard input)")
    add_matrix_in(p)
    add_matrix_out(p)
    p.add_argument("--dtype", choices=("float64", "float32"), default=None,
                   help="store the values in this precision (npz output only; default: as read, float64 "
                        "for text input)")
    p.set_defaults(func=_run)


def _run(args) -> int:
    import numpy as np

    from seqdist.core.console import warn
    from seqdist.core.errors import InputError
    from seqdist.io.matrices import matrix_format

    if args.dtype is not None and matrix_format(args.out, args.out_format) != "npz":
        raise InputError(f"{args.out}: --dtype needs the npz format (text formats write each value as read)")
    dm = read_matrix(args.matrix, args.in_format)
    if args.dtype is not None and dm.values.dtype != np.dtype(args.dtype):
        wide = dm.values
        dm = type(dm).from_array(wide, dm.labels, dtype=np.dtype(args.dtype))
        if dm.values.dtype == np.float32:
            worst = 0.0  # the largest rounding, in row blocks (no whole-matrix temporary)
            for r0 in range(0, dm.n, 1024):
                diff = np.abs(dm.values[r0:r0 + 1024].astype(np.float64) - wide[r0:r0 + 1024])
                worst = max(worst, float(np.fmax.reduce(diff, axis=None)))
            top = float(np.fmax.reduce(np.abs(wide), axis=None))
            worst = worst / top if top > 0 else 0.0
            warn(f"{args.out}: values stored in float32, rounded by up to {worst:.1e} of the largest entry; "
                 "the file is not the input to the last digit")
    write_matrix(args.out, dm, args.out_format)
    return 0
