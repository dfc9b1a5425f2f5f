"""``seqdist tree``: build a distance tree and write it as Newick or NEXUS."""

from __future__ import annotations

from seqdist.cli.commands._shared import add_matrix_in, add_subcommand
from seqdist.io.nexus_trees import TREE_FORMATS
from seqdist.trees.build import METHODS


def register(subs, common):
    p = add_subcommand(
        subs, common, "tree", "build a distance tree (neighbor joining, BIONJ or UPGMA) and write it as Newick",
        "Builds a tree from a complete distance matrix and writes it as Newick text, or as a\n"
        "NEXUS file (a TAXA and a TREES block) when the output ends in .nex, .nexus or .nxs or\n"
        "with --tree-format nexus.\n\n"
        "  nj     neighbor joining (Saitou & Nei 1987, Studier & Keppler 1988 form); unrooted\n"
        "  bionj  BIONJ (Gascuel 1997); unrooted\n"
        "  upgma  average linkage (Sokal & Michener 1958); rooted, ultrametric\n\n"
        "Unrooted trees are written with a three-way split at the top (common practice).\n"
        "Negative branch lengths are kept as computed and counted; --clamp-negative sets\n"
        "them to zero (and says how many). Ties are broken by label order (docs/trees.md).\n"
        "A matrix with missing entries is refused: fill them first with 'seqdist repair'.\n\n"
        "examples:\n  seqdist tree dist.tsv -o tree.nwk --method bionj\n  seqdist tree dist.tsv -o tree.nex")
    p.add_argument("matrix", help="input matrix file ('-' for standard input)")
    add_matrix_in(p)
    p.add_argument("-o", "--out", required=True, metavar="TREE.nwk",
                   help="output tree file ('-' for standard output)")
    p.add_argument("--tree-format", choices=TREE_FORMATS, default=None,
                   help="newick or nexus (default: nexus for .nex/.nexus/.nxs, else newick)")
    p.add_argument("--method", choices=METHODS, default="nj", help="tree method (default: nj)")
    p.add_argument("--clamp-negative", action="store_true",
                   help="set negative branch lengths to zero (off by default; the count is reported)")
    p.add_argument("--json", metavar="FILE", default=None,
                   help="also write a small JSON summary (taxa, tree length, negative branches, ...)")
    p.set_defaults(func=_run)


def _run(args) -> int:
    from seqdist.core.console import info
    from seqdist.io.matrices import OutputSet, check_distinct_outputs, read_matrix
    from seqdist.io.nexus_trees import format_tree, tree_format_for
    from seqdist.trees import build_tree, check_matrix
    from seqdist.trees.compare import cophenetic_correlation

    check_distinct_outputs({"--out": args.out, "--json": args.json})
    fmt = tree_format_for(args.out, args.tree_format)
    dm = read_matrix(args.matrix, args.in_format)
    check_matrix(dm, source="<stdin>" if args.matrix == "-" else args.matrix)
    tree = build_tree(dm, args.method)
    negative = tree.negative_branches()
    clamped = tree.clamp_negative() if args.clamp_negative else 0
    summary = {
        "method": args.method,
        "n": dm.n,
        "rooted": tree.rooted,
        "tree_length": tree.total_length(),
        "negative_branches": negative,
        "clamped_branches": clamped,
        "cophenetic_correlation": cophenetic_correlation(tree, dm),
    }
    with OutputSet() as out:
        out.add_text(args.out, format_tree(tree, fmt, name=args.method))
        if args.json:
            out.add_json(args.json, summary)
    msg = f"{args.method} tree on {dm.n} taxa, total length {summary['tree_length']:.6g}"
    if fmt != "newick":
        msg += f"; written as {fmt.upper()}"
    if negative:
        msg += (f"; {negative} negative branch length{'s' if negative != 1 else ''} "
                + ("set to zero (--clamp-negative)" if clamped else "kept as computed"))
    info(msg)
    return 0
