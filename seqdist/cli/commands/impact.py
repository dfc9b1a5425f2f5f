"""``seqdist impact``: build a tree from each of two matrices and report how they differ."""

from __future__ import annotations

from seqdist.cli.commands._shared import (
    add_matrix_in,
    add_seed,
    add_subcommand,
    add_tol,
    nonneg_int,
    positive_float,
    positive_int,
)
from seqdist.io.nexus_trees import TREE_FORMATS
from seqdist.models.registry import MODEL_NAMES
from seqdist.trees.build import METHODS


def register(subs, common):
    p = add_subcommand(
        subs, common, "impact",
        "build trees from two matrices (e.g. before and after repair) and report how they differ",
        "Builds one tree from BEFORE and one from AFTER with the same method and compares them:\n"
        "Robinson-Foulds distance (unrooted, non-trivial splits in one tree and not the other,\n"
        "summed over both), branch score distance, the splits found in only one tree, negative\n"
        "branches, tree lengths, cophenetic correlations, entries changed and violated triangles.\n"
        "The two matrices must have the same labels (the order may differ), or one may lack\n"
        "some taxa of the other (a repair leaves out taxa with no measured distance to the\n"
        "rest); every comparison is made on the taxa both trees hold, and the report names\n"
        "the others (left_out_taxa) and says how many were compared (n_compared).\n\n"
        "With --alignment ALN --bootstrap B (plus --model, --objective, --seed), the alignment's\n"
        "columns are resampled B times; each replicate's distances are computed, repaired, and both\n"
        "trees rebuilt, giving every split its support before and after repair. The support is then\n"
        "written on --before-tree and --after-tree (in percent, after each internal node's closing\n"
        "parenthesis: (a,b)95:0.1), and --consensus-before / --consensus-after write the majority-rule\n"
        "consensus of the replicates' before and after trees (split frequencies in percent as support,\n"
        "mean branch lengths; on the compared taxa).\n\n"
        "Tree files are Newick, or NEXUS (a TAXA and a TREES block) when a name ends in .nex, .nexus\n"
        "or .nxs or with --tree-format nexus. --truth reads either (NEXUS: the first tree).\n\n"
        "A repaired matrix is altered data: report the objective and the changes with any result.\n\n"
        "examples:\n"
        "  seqdist impact dist.tsv fixed.tsv --json impact.json --html impact.html\n"
        "  seqdist impact dist.tsv fixed.tsv --truth example_sequences/dna_clean.true.nwk --method bionj\n"
        "  seqdist impact dist.tsv fixed.tsv --alignment example_sequences/dna_clean.fasta --bootstrap 100 \\\n"
        "      --model tn93 --gamma 0.5 --objective fewest --seed 1 --html impact.html \\\n"
        "      --after-tree after.nwk --consensus-after after.consensus.nwk\n"
        "(dist.tsv and fixed.tsv as made by the examples of 'seqdist distances' and 'seqdist repair')")
    p.add_argument("before", help="matrix before the change (e.g. as measured)")
    p.add_argument("after", help="matrix after the change (e.g. repaired)")
    add_matrix_in(p)
    p.add_argument("--method", choices=METHODS, default="nj", help="tree method (default: nj)")
    p.add_argument("--json", metavar="FILE", default=None, help="write the report as JSON ('-' for standard output)")
    p.add_argument("--html", metavar="FILE", default=None, help="write a self-contained html page")
    p.add_argument("--truth", metavar="TREE", default=None,
                   help="a reference tree (Newick, or NEXUS: its first tree) to score both trees against")
    add_tol(p)
    p.add_argument("--clamp-negative", action="store_true",
                   help="set negative branch lengths to zero in both trees (counted and reported)")
    p.add_argument("--drop-incomplete", action="store_true",
                   help="leave out taxa with missing entries (fewest first by count) instead of refusing; "
                        "both trees are built on the other taxa and the dropped ones are listed")
    p.add_argument("--outgroup", metavar="LABEL", default=None,
                   help="taxon to root unrooted trees on for drawing (default: the first label in sorted order)")
    p.add_argument("--before-tree", metavar="FILE", default=None,
                   help="also write the BEFORE tree (with --bootstrap: with its support)")
    p.add_argument("--after-tree", metavar="FILE", default=None,
                   help="also write the AFTER tree (with --bootstrap: with its support)")
    p.add_argument("--tree-format", choices=TREE_FORMATS, default=None,
                   help="format of the tree files written: newick or nexus "
                        "(default: nexus for .nex/.nexus/.nxs, else newick)")
    g = p.add_argument_group("split support (bootstrap)")
    g.add_argument("--alignment", metavar="ALN", default=None, help="the alignment the BEFORE matrix came from")
    g.add_argument("--bootstrap", metavar="B", type=nonneg_int, default=0,
                   help="number of column resamples (e.g. 100)")
    g.add_argument("--model", default=None, type=str.lower, choices=MODEL_NAMES,
                   help="distance model for the replicates (as for 'seqdist distances')")
    g.add_argument("--gamma", metavar="ALPHA", type=positive_float, default=None, help="gamma shape for the model")
    g.add_argument("--gaps", choices=("pairwise", "complete"), default="pairwise",
                   help="gap handling for the replicates (default: pairwise)")
    g.add_argument("--objective", default=None, help="repair objective for the replicates (as for 'seqdist repair')")
    add_seed(g, 0, "base seed of the resampling")
    g.add_argument("--workers", type=positive_int, default=None, metavar="P",
                   help="worker processes (default: the number of cores)")
    g.add_argument("--keep-unmeasured", action="store_true",
                   help="repair the replicates keeping taxa with no measured distance (as for 'seqdist repair')")
    g.add_argument("--consensus-before", metavar="FILE", default=None,
                   help="write the majority-rule consensus of the replicates' BEFORE trees")
    g.add_argument("--consensus-after", metavar="FILE", default=None,
                   help="write the majority-rule consensus of the replicates' AFTER trees")
    p.set_defaults(func=_run)


def _run(args) -> int:
    from seqdist.core.errors import InputError
    from seqdist.impact.compare import impact
    from seqdist.io.matrices import check_distinct_outputs, read_matrix
    from seqdist.io.newick import read_newick_file

    check_distinct_outputs({"--json": args.json, "--html": args.html, "--before-tree": args.before_tree,
                            "--after-tree": args.after_tree, "--consensus-before": args.consensus_before,
                            "--consensus-after": args.consensus_after})
    for flag, value in (("--consensus-before", args.consensus_before), ("--consensus-after", args.consensus_after)):
        if value and not args.bootstrap:
            raise InputError(f"{flag} needs --bootstrap B (the consensus is of the bootstrap replicates' trees)")
    if args.bootstrap and not args.alignment:
        raise InputError("--bootstrap needs --alignment ALN (the alignment the BEFORE matrix came from)")
    if args.alignment and not args.bootstrap:
        raise InputError("--alignment is only used with --bootstrap B")
    if args.bootstrap and (not args.model or not args.objective):
        raise InputError("--bootstrap needs --model (distance model) and --objective (repair objective)")
    before = read_matrix(args.before, args.in_format)
    after = read_matrix(args.after, args.in_format)
    truth = read_newick_file(args.truth) if args.truth else None
    if truth is not None:
        truth.check_labels(args.truth)
        truth = _checked_truth(truth, before, args)
    if args.outgroup is not None and args.outgroup not in before.labels:
        raise InputError(f"--outgroup '{args.outgroup}' is not a label of {args.before}")
    res = impact(before, after, args.method, truth=truth, tol=args.tol, clamp_negative=args.clamp_negative,
                 drop_incomplete=args.drop_incomplete, names=(args.before, args.after))
    if args.outgroup is not None and args.outgroup not in res.taxa:
        why = res.report.left_out_reasons.get(args.outgroup, "not compared")
        raise InputError(f"--outgroup '{args.outgroup}' was left out ({why}); choose another")
    return _finish(args, res)


def _checked_truth(truth, before, args):
    from seqdist.core.errors import InputError

    missing = sorted(set(before.labels) - set(truth.labels()))
    extra = sorted(set(truth.labels()) - set(before.labels))
    if missing or extra:
        parts = ([f"missing from the tree: {', '.join(missing[:5])}"] if missing else []) + \
                ([f"not in the matrices: {', '.join(extra[:5])}"] if extra else [])
        raise InputError(f"{args.truth}: the reference tree's leaves differ from the matrix labels ("
                         + "; ".join(parts) + ")")
    return truth


def _finish(args, res) -> int:
    import sys

    from seqdist.core.errors import InputError
    from seqdist.impact.compare import summary_lines
    from seqdist.io.matrices import OutputSet
    from seqdist.io.nexus_trees import format_tree, tree_format_for

    consensus = {}
    if args.bootstrap:
        from seqdist.impact.support import add_support

        tallies = add_support(res, args.alignment, replicates=args.bootstrap, model=args.model,
                              objective=args.objective, seed=args.seed, gamma=args.gamma, gaps=args.gaps,
                              workers=args.workers, clamp_negative=args.clamp_negative,
                              keep_unmeasured=args.keep_unmeasured)
        for which, path in (("before", args.consensus_before), ("after", args.consensus_after)):
            if path:
                tree = tallies.consensus(which)
                if tree is None:
                    raise InputError(f"--consensus-{which}: no bootstrap replicate had a {which} tree "
                                     "(see the support counts in the report)")
                consensus[path] = tree
    report = res.report
    with OutputSet() as out:
        if args.json:
            out.add_json(args.json, {**report.to_dict(), "before": args.before, "after": args.after})
        if args.html:
            from seqdist.report.html import render_html

            out.add_text(args.html, render_html(res, names=("before", "after"), outgroup=args.outgroup,
                                                reference=args.truth, command=_command(args)))
        for path, tree, name in ((args.before_tree, res.tree_before, "before"),
                                 (args.after_tree, res.tree_after, "after"),
                                 (args.consensus_before, consensus.get(args.consensus_before), "consensus_before"),
                                 (args.consensus_after, consensus.get(args.consensus_after), "consensus_after")):
            if path:
                out.add_text(path, format_tree(tree, tree_format_for(path, args.tree_format), name=name))
    to_stdout = "-" in (args.json, args.html, args.before_tree, args.after_tree, args.consensus_before,
                        args.consensus_after)
    stream = sys.stderr if to_stdout else sys.stdout
    from seqdist.core.console import is_quiet

    if not (to_stdout and is_quiet()):
        for line in summary_lines(report):
            print(line, file=stream)
        if report.clamped_branches_before or report.clamped_branches_after:
            print(f"Negative branch lengths set to zero (--clamp-negative): {report.clamped_branches_before} "
                  f"before, {report.clamped_branches_after} after.", file=stream)
        print("Caution: " + report.caution, file=stream)
    return 0


def _command(args) -> str:
    """The command that made the page, without its output paths (they do not change the page)."""
    import shlex

    parts = ["seqdist", "impact", args.before, args.after, "--method", args.method]
    for flag, value in (("--in-format", args.in_format), ("--truth", args.truth), ("--tol", args.tol),
                        ("--outgroup", args.outgroup)):
        if value is not None:
            parts += [flag, str(value)]
    for flag, on in (("--clamp-negative", args.clamp_negative), ("--drop-incomplete", args.drop_incomplete)):
        if on:
            parts.append(flag)
    if args.bootstrap:
        parts += ["--alignment", args.alignment, "--bootstrap", str(args.bootstrap), "--model", args.model,
                  "--objective", args.objective, "--seed", str(args.seed), "--gaps", args.gaps]
        if args.gamma is not None:
            parts += ["--gamma", str(args.gamma)]
        if args.keep_unmeasured:
            parts.append("--keep-unmeasured")
    return shlex.join(parts)
