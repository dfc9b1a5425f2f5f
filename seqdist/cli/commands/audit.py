"""``seqdist audit``: find broken triangles, localise them, bound the repair,
measure tree-likeness (a thin wrapper over :func:`seqdist.audit.report.audit`)."""

from __future__ import annotations

import os

from seqdist.audit.report import TOP
from seqdist.cli.commands._shared import add_matrix_in, add_seed, add_subcommand, add_tol, int_range, nonneg_int
from seqdist.core.errors import InputError, StrictFailure
from seqdist.io.matrices import MATRIX_FORMATS

#: Upper limits of the size options: the worst-triangle lists are kept per row
#: (n x K arrays, a linear scan per insertion), and the quartet sample is held
#: in memory (32 bytes a quartet).
TOP_MAX = TOP.hi
QUARTETS_MAX = 10_000_000


def register(subs, common):
    p = add_subcommand(
        subs, common, "audit", "find triangle-inequality violations and how tree-like the matrix is",
        "Checks every triangle of a distance matrix (exactly), ranks the entries and taxa that\n"
        "take part in violated triangles, gives a proven lower bound on how many entries any\n"
        "repair must change, and measures tree-likeness: the four-point condition, delta\n"
        "scores (Holland et al. 2002) and the three-point (ultrametric) condition.\n"
        "A summary goes to standard output; --json writes everything.\n\n"
        "exit status: 0 done, 2 bad input, 4 with --strict when a triangle is violated.\n\n"
        "examples:\n"
        "  seqdist audit dist.tsv\n"
        "  seqdist audit dist.tsv --json audit.json --top 20\n"
        "  seqdist audit dist.tsv --strict --quiet > /dev/null   # a gate in a workflow: exit 4 on any violation")
    p.add_argument("matrix", help="input matrix file ('-' for standard input)")
    add_matrix_in(p)
    p.add_argument("--json", metavar="FILE", default=None,
                   help="write the full report as JSON ('-' for standard output, replacing the summary)")
    p.add_argument("--top", type=TOP.argtype("top"), default=10, metavar="K",
                   help=f"worst triangles, entries and taxa to list (0 to {TOP_MAX}; default 10)")
    add_tol(p)
    p.add_argument("--strict", action="store_true",
                   help="exit with status 4 when any triangle is violated (after writing the report)")
    add_seed(p, 0, "seed of the quartet sample for large matrices")
    p.add_argument("--quartets", type=int_range(1, QUARTETS_MAX), default=200_000, metavar="Q",
                   help=f"quartets sampled when there are more than --exact-quartets (1 to {QUARTETS_MAX}; "
                        "default 200000)")
    p.add_argument("--exact-quartets", type=nonneg_int, default=2_000_000, metavar="Q",
                   help="examine every quartet up to this many (default 2000000, about n = 100)")
    p.add_argument("--lp-max", type=nonneg_int, default=20_000, metavar="M",
                   help="violated triangles given at most to the linear-programming bound (0: off; default 20000)")
    p.add_argument("--list-max", type=nonneg_int, default=200, metavar="M",
                   help="entries listed in the JSON report (default 200)")
    p.add_argument("--entry-counts", metavar="FILE", default=None,
                   help="also write, as a matrix file, how many violated triangles each entry is a side of "
                        "('-' for standard output, replacing the summary)")
    p.add_argument("--out-format", choices=MATRIX_FORMATS, default=None,
                   help="format of the --entry-counts file (default: from the extension, else tsv)")
    p.set_defaults(func=_run)


def _run(args) -> int:
    from seqdist.audit.report import audit
    from seqdist.core.console import info
    from seqdist.core.matrix import DistanceMatrix
    from seqdist.io.matrices import OutputSet, check_distinct_outputs, read_matrix

    # The readable summary takes standard output unless a data output does.
    summary_to_stdout = "-" not in (args.json, args.entry_counts)
    check_distinct_outputs({"--json": args.json, "--entry-counts": args.entry_counts})
    for path in (args.json, args.entry_counts):
        if path and path != "-" and os.path.isdir(path):
            raise InputError(f"{path}: is a directory")
    dm = read_matrix(args.matrix, args.in_format)
    rep = audit(dm, tol=args.tol, top=args.top, seed=args.seed, exact_quartets_max=args.exact_quartets,
                quartet_samples=args.quartets, lp_max=args.lp_max)
    with OutputSet() as out:
        if args.json:
            out.add_json(args.json, rep.to_dict(list_max=args.list_max))
        if args.entry_counts:
            out.add_matrix(args.entry_counts, DistanceMatrix._trusted(rep.entry_counts.astype(float), dm.labels),
                           args.out_format)
        if summary_to_stdout:
            out.add_text("-", rep.summary(top=args.top, source=args.matrix))
    if args.strict and rep.violated:
        raise StrictFailure(f"{args.matrix}: {rep.violated} violated triangle{'s' if rep.violated != 1 else ''} "
                            f"(largest excess {rep.max_violation:.6g})")
    info(f"audit done in {rep.seconds.get('total', 0):.2f} s") if getattr(args, "debug", False) else None
    return 0
