"""``seqdist audit``: find broken triangles, localise them, bound the repair,
measure tree-likeness (a thin wrapper over :func:`seqdist.audit.audit`)."""

from __future__ import annotations

import os

from ..errors import InputError, StrictFailure
from ._shared import add_matrix_in, add_subcommand, add_tol


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
        "  seqdist audit dist.tsv --strict --quiet > /dev/null   # a gate in a workflow")
    p.add_argument("matrix", help="input matrix file ('-' for standard input)")
    add_matrix_in(p)
    p.add_argument("--json", metavar="FILE", default=None,
                   help="write the full report as JSON ('-' for standard output, replacing the summary)")
    p.add_argument("--top", type=int, default=10, metavar="K",
                   help="worst triangles, entries and taxa to list (default 10)")
    add_tol(p)
    p.add_argument("--strict", action="store_true",
                   help="exit with status 4 when any triangle is violated (after writing the report)")
    p.add_argument("--seed", type=int, default=0, metavar="S",
                   help="seed of the quartet sample for large matrices (default 0)")
    p.add_argument("--quartets", type=int, default=200_000, metavar="Q",
                   help="quartets sampled when there are more than --exact-quartets (default 200000)")
    p.add_argument("--exact-quartets", type=int, default=2_000_000, metavar="Q",
                   help="examine every quartet up to this many (default 2000000, about n = 100)")
    p.add_argument("--lp-max", type=int, default=20_000, metavar="M",
                   help="violated triangles given at most to the linear-programming bound (0: off; default 20000)")
    p.add_argument("--list-max", type=int, default=200, metavar="M",
                   help="entries listed in the JSON report (default 200)")
    p.add_argument("--entry-counts", metavar="FILE", default=None,
                   help="also write, as a matrix file, how many violated triangles each entry is a side of")
    p.set_defaults(func=_run)


def _run(args) -> int:
    from ..audit import audit
    from ..console import info
    from ..io import OutputSet, read_matrix
    from ..matrix import DistanceMatrix

    for opt, v in (("--top", args.top), ("--quartets", args.quartets), ("--exact-quartets", args.exact_quartets),
                   ("--lp-max", args.lp_max), ("--list-max", args.list_max)):
        if v < 0:
            raise InputError(f"{opt} must be non-negative (got {v})")
    if args.tol is not None and not (args.tol >= 0 and args.tol != float("inf")):
        raise InputError(f"--tol must be a finite non-negative number (got {args.tol})")
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
            out.add_matrix(args.entry_counts, DistanceMatrix._trusted(rep.entry_counts.astype(float), dm.labels))
        if args.json != "-":
            out.add_text("-", rep.summary(top=args.top, source=args.matrix))
    if args.strict and rep.violated:
        raise StrictFailure(f"{args.matrix}: {rep.violated} violated triangle{'s' if rep.violated != 1 else ''} "
                            f"(largest excess {rep.max_violation:.6g})")
    info(f"audit done in {rep.seconds.get('total', 0):.2f} s") if getattr(args, "debug", False) else None
    return 0
