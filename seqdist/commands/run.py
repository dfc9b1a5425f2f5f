"""``seqdist run``: the whole job on one alignment, into one folder."""

from __future__ import annotations

from ._shared import add_seed, add_subcommand, nonneg_int, positive_float, positive_int


def register(subs, common):
    p = add_subcommand(
        subs, common, "run", "the whole job in one step: distances, audit, repair, trees, impact report",
        "Computes distances (with compared columns and variances), audits them, repairs the\n"
        "matrix, builds trees before and after, and writes an html report plus every\n"
        "intermediate file and a manifest (version, options, seeds, checksums) into OUTDIR:\n\n"
        "  distances.tsv sites.tsv variance.tsv distances.json   distances step\n"
        "  audit.json audit.txt                                   audit\n"
        "  repaired.tsv repair.json changes.tsv [weights.tsv]     repair (altered data!)\n"
        "  tree_before.nwk tree_after.nwk impact.json report.html trees and report\n"
        "  manifest.json                                          provenance\n\n"
        "A true tree NAME.true.nwk or NAME.nwk beside the alignment is used as the reference\n"
        "(--truth to name another, --no-truth to ignore it).\n\n"
        "Taxa that no measured distance joins to the others (saturated against, or sharing no\n"
        "column with, every other sequence) are left out of the repaired matrix and the trees\n"
        "and named; --keep-unmeasured keeps them with a made-up value instead, marked\n"
        "'filled_without_evidence' in changes.tsv and in the report.\n\n"
        "A repaired matrix is altered data: report the objective and changes.tsv with any result.\n\n"
        "examples:\n"
        "  seqdist run example_sequences/dna_trouble.fasta --outdir results/dna_trouble\n"
        "  seqdist run example_sequences/protein_small.sto --outdir results/protein_small \\\n"
        "      --objective l2 --weighted --method bionj\n"
        "  seqdist run example_sequences/dna_trouble.fasta --outdir results/dna_trouble_kept --keep-unmeasured")
    p.add_argument("alignment", help="alignment file (FASTA, Clustal, Stockholm, NEXUS, PHYLIP...)")
    p.add_argument("--outdir", required=True, metavar="DIR", help="output folder (created if needed)")
    p.add_argument("--in-format", default=None, help="alignment format (default: from the extension or content)")
    p.add_argument("--alphabet", choices=("auto", "dna", "protein"), default="auto", help="default: auto")
    p.add_argument("--model", default=None, help="distance model (default: k80 for DNA, poisson for protein)")
    p.add_argument("--gamma", metavar="ALPHA", type=positive_float, default=None,
                   help="gamma shape for rate variation")
    p.add_argument("--gaps", choices=("pairwise", "complete"), default="pairwise", help="default: pairwise")
    p.add_argument("--objective", default="fewest", help="repair objective: shrink, grow, fewest, l1, l2 "
                   "(default: fewest)")
    p.add_argument("--weighted", action="store_true",
                   help="weight the repair by the inverse variance of each distance")
    p.add_argument("--method", choices=("nj", "bionj", "upgma"), default="nj", help="tree method (default: nj)")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--truth", metavar="TREE.nwk", default="auto", help="reference tree to score both trees against")
    g.add_argument("--no-truth", action="store_true", help="do not look for a reference tree")
    p.add_argument("--keep-unmeasured", action="store_true",
                   help="keep taxa with no measured distance to the others, with a made-up fill "
                        "(default: leave them out and name them)")
    p.add_argument("--time-limit", metavar="SECONDS", type=positive_float, default=None,
                   help="work budget of the repair, in about seconds (reruns give the same bytes)")
    add_seed(p, 1)
    p.add_argument("--bootstrap", metavar="B", type=nonneg_int, default=0,
                   help="column resamples for split support before and after repair (default: 0)")
    p.add_argument("--workers", type=positive_int, default=None, metavar="P",
                   help="worker processes for the bootstrap (default: the number of cores)")
    p.set_defaults(func=_run)


def _run(args) -> int:
    from ..console import is_quiet
    from ..pipeline import run_job

    run_job(args.alignment, args.outdir, in_format=args.in_format, alphabet=args.alphabet, model=args.model,
            gamma=args.gamma, gaps=args.gaps, objective=args.objective, weighted=args.weighted,
            method=args.method, truth=None if args.no_truth else args.truth, time_limit=args.time_limit,
            seed=args.seed, bootstrap=args.bootstrap, workers=args.workers, progress=not is_quiet(),
            keep_unmeasured=args.keep_unmeasured)
    return 0
