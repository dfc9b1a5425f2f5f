"""``seqdist run``: the whole job on one alignment, into one folder."""

from __future__ import annotations

from seqdist.cli.commands._shared import add_seed, add_subcommand, nonneg_int, positive_float, positive_int
from seqdist.io.alignment import alignment_format_help
from seqdist.models.registry import MODEL_NAMES
from seqdist.pipeline import DEFAULT_OBJECTIVE, STEP_NAMES
from seqdist.repair.registry import OBJECTIVES
from seqdist.trees.build import METHODS


def register(subs, common):
    p = add_subcommand(
        subs, common, "run", "the whole job in one step: distances, audit, repair, trees, impact report",
        "Computes distances (with compared columns and variances), audits them and finds the\n"
        "suspect sequences (chimeras, contaminants, very gappy rows...: evidence from the matrix\n"
        "and the columns), repairs the matrix, builds trees before and after, and writes an html\n"
        "report plus every intermediate file and a manifest into OUTDIR:\n\n"
        "  distances.tsv sites.tsv variance.tsv distances.json   distances step\n"
        "  audit.json audit.txt                                   audit and suspects\n"
        "  repaired.tsv repair.json changes.tsv [weights.tsv]     repair (altered data!)\n"
        "  tree_before.nwk tree_after.nwk impact.json report.html trees and report\n"
        "  [tree_with_suspects.nwk | tree_without_suspects.nwk]   the other choice, compared\n"
        "  manifest.json                                          provenance\n\n"
        "The default remedy comes from a simulation study with planted trouble and known true\n"
        "trees (docs/remedies.md): leave the suspect sequences out (--keep-suspects keeps them),\n"
        "then the shortest-path closure (objective shrink). No repair objective fixes a tree\n"
        "spoiled by a chimera or a contaminant; leaving it out does. The other objectives (see\n"
        "'seqdist repair --help' for what each is good for and when it hurts) are weighted by the\n"
        "inverse variance of each distance unless --unweighted: unweighted fewest, grow and l1\n"
        "made trees worse on clean, gappy and contaminated data.\n\n"
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
        "      --objective l2 --method bionj\n"
        "  seqdist run example_sequences/dna_trouble.fasta --outdir results/dna_trouble_all --keep-suspects\n"
        "  seqdist run example_sequences/dna_trouble.fasta --outdir results/dna_trouble_kept --keep-unmeasured\n\n"
        "One step at a time (what each rule of the workflow in workflows/ runs; docs/workflow.md):\n"
        "  seqdist run ALIGNMENT --outdir DIR --step distances   (then audit, repair, impact)")
    p.add_argument("alignment", help="alignment file (FASTA, Clustal, Stockholm, NEXUS, PHYLIP...)")
    p.add_argument("--outdir", required=True, metavar="DIR", help="output folder (created if needed)")
    p.add_argument("--in-format", default=None, help=alignment_format_help())
    p.add_argument("--alphabet", choices=("auto", "dna", "protein"), default="auto", help="default: auto")
    p.add_argument("--model", default=None, type=str.lower, choices=MODEL_NAMES,
                   help="distance model (default: k80 for DNA, poisson for protein)")
    p.add_argument("--gamma", metavar="ALPHA", type=positive_float, default=None,
                   help="gamma shape for rate variation")
    p.add_argument("--gaps", choices=("pairwise", "complete"), default="pairwise", help="default: pairwise")
    p.add_argument("--objective", default=DEFAULT_OBJECTIVE, choices=OBJECTIVES, metavar="OBJ",
                   help=f"repair objective: {', '.join(OBJECTIVES)} (default: {DEFAULT_OBJECTIVE}; see "
                        "'seqdist repair --help' for what each is good for)")
    w = p.add_mutually_exclusive_group()
    w.add_argument("--weighted", dest="weighted", action="store_const", const=True, default=None,
                   help="weight the repair by the inverse variance of each distance (the default for "
                        "every objective but shrink, whose result weights do not change, when the model "
                        "has a variance formula)")
    w.add_argument("--unweighted", dest="weighted", action="store_const", const=False,
                   help="an unweighted repair")
    p.add_argument("--keep-suspects", action="store_true",
                   help="keep the suspect sequences in the repaired matrix and its tree (default: leave "
                        "them out; the other choice is built too and compared in the report)")
    p.add_argument("--method", choices=METHODS, default="nj", help="tree method (default: nj)")
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
                   help="column resamples for split support before and after repair, and for the "
                        "suspects' placement instability (leaf stability; shown, not scored) (default: 0)")
    p.add_argument("--workers", type=positive_int, default=None, metavar="P",
                   help="worker processes for the bootstrap (default: the number of cores)")
    p.add_argument("--step", choices=STEP_NAMES, default=None, metavar="NAME",
                   help=f"run one step only ({', '.join(STEP_NAMES)}), reading what it needs from DIR (the "
                        "files of the steps before it, written with the same options); the steps run in "
                        "order give the same files as the whole job. The workflow in workflows/ runs each "
                        "step as a rule this way")
    p.set_defaults(func=_run)


def _run(args) -> int:
    from seqdist.core.console import is_quiet
    from seqdist.pipeline import run_job, run_step

    options = dict(in_format=args.in_format, alphabet=args.alphabet, model=args.model, gamma=args.gamma,
                   gaps=args.gaps, objective=args.objective, weighted=args.weighted, method=args.method,
                   truth=None if args.no_truth else args.truth, time_limit=args.time_limit, seed=args.seed,
                   bootstrap=args.bootstrap, keep_unmeasured=args.keep_unmeasured,
                   keep_suspects=args.keep_suspects)
    if args.step is not None:
        run_step(args.alignment, args.outdir, args.step, workers=args.workers, progress=not is_quiet(), **options)
    else:
        run_job(args.alignment, args.outdir, workers=args.workers, progress=not is_quiet(), **options)
    return 0
