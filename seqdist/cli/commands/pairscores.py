"""``seqdist pairscores``: distances between unaligned sequences from pairwise alignment scores."""

from __future__ import annotations

from seqdist.cli.commands._shared import add_out_format, add_subcommand, positive_int
from seqdist.io.matrices import OutputSet

_HELP = """Aligns every pair of sequences with Biopython's PairwiseAligner (score only where
the formula allows) under a substitution matrix and affine gap costs, and turns
the scores into distances.

formulas (--formula):
{formulas}
Identical sequences get 0; undefined values are written as missing entries and
named in a warning.

gap costs: {convention}, with open = --gap-open
and extend = --gap-extend (Biopython's convention: the first residue of a gap
costs open, each further one extend); e.g. with the defaults 11 and 1 a gap of
3 residues costs 11 + 2 x 1 = 13. End gaps cost the same, unless
--free-end-gaps. --json writes the costs and this rule under "gap_cost".

Gaps ('-', '.') in the input are removed: the sequences are treated as unaligned.

matrix: DNA or protein is detected as for alignments (DNA when >= 90% of the
letters are ACGTUN; --alphabet to force). Without --matrix, DNA is aligned under
NUC.4.4 (+5/-4, IUPAC codes) and protein under BLOSUM62. A matrix that lacks a
letter of the sequences is an error; a protein matrix for DNA (or the reverse)
gives a warning.

examples:
  seqdist pairscores example_sequences/protein.fasta -o protein-dist.tsv --matrix BLOSUM62 --mode global \\
      --gap-open 11 --gap-extend 1 --processes 2
  seqdist pairscores example_sequences/dna_clean.fasta -o dna_dist.tsv --formula cosine"""


def register(subs, common):
    from seqdist.scores.pairwise import DEFAULT_FORMULA, FORMULAS, GAP_COST_CONVENTION, formula_guide

    p = add_subcommand(subs, common, "pairscores",
                       "distances between unaligned sequences from pairwise alignment scores",
                       _HELP.format(formulas=formula_guide(), convention=GAP_COST_CONVENTION))
    p.add_argument("sequences", metavar="SEQUENCES", help="FASTA file of unaligned sequences ('-' for standard input)")
    p.add_argument("-o", "--out", required=True, metavar="PATH",
                   help="output distance matrix ('-' for standard output)")
    add_out_format(p)
    p.add_argument("--matrix", default=None, metavar="MATRIX",
                   help="substitution matrix: a standard name or a score matrix file "
                        "(default: NUC.4.4 for DNA, BLOSUM62 for protein)")
    p.add_argument("--alphabet", choices=("auto", "dna", "protein"), default="auto",
                   help="sequence type (default: auto, DNA when >= 90%% of letters are ACGTUN)")
    p.add_argument("--mode", choices=("global", "local"), default="global", help="alignment mode (default global)")
    p.add_argument("--gap-open", type=float, default=11.0, metavar="G",
                   help="open: cost of the first residue of a gap (default 11)")
    p.add_argument("--gap-extend", type=float, default=1.0, metavar="E",
                   help="extend: cost of each further residue of a gap; a gap of k residues costs "
                        "open + (k - 1) x extend (default 1)")
    p.add_argument("--free-end-gaps", action="store_true",
                   help="gaps at either end of a global alignment cost nothing (sequence fragments)")
    p.add_argument("--formula", choices=FORMULAS, default=DEFAULT_FORMULA,
                   help=f"score-to-distance formula (default {DEFAULT_FORMULA})")
    p.add_argument("--processes", type=positive_int, default=None, metavar="P",
                   help="worker processes, at least 1 (default: all available CPUs)")
    p.add_argument("--json", metavar="FILE", default=None, help="write a short run summary as JSON")
    p.set_defaults(func=_run)


def _run(args) -> int:
    from seqdist.core.console import warn
    from seqdist.scores.pairwise import gap_cost_summary, read_fasta, score_distances

    ids, seqs, lines = read_fasta(args.sequences)
    src = "<stdin>" if args.sequences == "-" else args.sequences
    res = score_distances(ids, seqs, args.matrix, mode=args.mode, gap_open=args.gap_open,
                          gap_extend=args.gap_extend, formula=args.formula,
                          free_end_gaps=args.free_end_gaps, alphabet=args.alphabet, processes=args.processes,
                          source=src, record_lines=lines)
    if res.missing:
        shown = "; ".join(f"{a}-{b} ({why})" for a, b, why in res.missing[:5])
        more = f"; and {len(res.missing) - 5} more" if len(res.missing) > 5 else ""
        warn(f"{len(res.missing)} pair(s) have no defined distance and are written as missing: {shown}{more}")
    if res.clipped:
        shown = "; ".join(f"{a}-{b} ({v:.4g})" for a, b, v in res.clipped[:5])
        warn(f"{len(res.clipped)} pair(s) came out negative (S_ab above S_max) and were set to 0: {shown}")
    with OutputSet() as out:
        out.add_matrix(args.out, res.dm, args.out_format)
        if args.json:
            n = len(ids)
            out.add_json(args.json, {
                "n": n, "pairs": n * (n - 1) // 2, "matrix": res.matrix, "alphabet": res.alphabet, "mode": args.mode,
                "gap_open": args.gap_open, "gap_extend": args.gap_extend, "free_end_gaps": args.free_end_gaps,
                "gap_cost": gap_cost_summary(args.gap_open, args.gap_extend, args.free_end_gaps),
                "formula": args.formula,
                "missing_pairs": [[a, b, why] for a, b, why in res.missing],
                "clipped_pairs": [[a, b, v] for a, b, v in res.clipped],
            })  # no run time here: the same input and options give byte-identical files
    from seqdist.core.console import info

    n = len(ids)
    # on standard error, like every command's summary: standard output may carry --json -
    info(f"{n} sequences, {n * (n - 1) // 2} pairs, {args.mode} alignment under {res.matrix}, "
         f"formula {args.formula}: {len(res.missing)} missing")
    return 0
