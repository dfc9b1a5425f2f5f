"""``seqdist scores``: a substitution score matrix turned into a dissimilarity, with a check report."""

from __future__ import annotations

import sys

from seqdist.cli.commands._shared import add_out_format, add_subcommand
from seqdist.io.matrices import OutputSet

_TRANSFORM_HELP = """transforms (--transform):
{transforms}
Negative values are set to 0 (with a warning); see docs/scores.md for sources.

background frequencies (--background), used for the expected score, lambda,
relative entropy and the logodds transform:
  auto          implied by the matrix if it has such frequencies, else
                Robinson & Robinson 1991 for the 20 amino acids, else uniform
  implied       the frequencies the matrix itself implies (error if none)
  uniform       equal frequencies
  robinson1991  Robinson & Robinson 1991 amino-acid frequencies
  FILE          lines 'letter frequency'

MATRIX is a file (whitespace grid with letters along the top and down the side,
'#' comments; or a labelled .tsv/.csv) or the name of any matrix Biopython
ships (BLOSUM45/50/62/80/90, PAM30/70/250, ...; an unknown name lists them).

example:
  seqdist scores BLOSUM62 -o blosum62-dist.tsv --transform diag-mean --json report.json"""


def register(subs, common):
    from seqdist.scores.matrices import DEFAULT_TRANSFORM, TRANSFORMS, transform_guide

    p = add_subcommand(subs, common, "scores",
                       "turn a substitution score matrix into a dissimilarity over its letters, with a check report",
                       "Derives a dissimilarity over the letters of a score matrix and reports on the matrix:\n"
                       "symmetry, whether each row's maximum is on the diagonal, expected score, the\n"
                       "Karlin-Altschul lambda, relative entropy, and whether the dissimilarity is a metric.\n"
                       "The report is printed on standard output (on standard error when -o or --json\n"
                       "is '-', so that standard output holds the data alone).\n\n"
                       + _TRANSFORM_HELP.format(transforms=transform_guide()))
    p.add_argument("matrix", metavar="MATRIX", help="score matrix file ('-' for standard input) or standard name")
    p.add_argument("-o", "--out", required=True, metavar="PATH",
                   help="output dissimilarity matrix ('-' for standard output)")
    add_out_format(p)
    p.add_argument("--in-format", choices=("auto", "grid", "tsv", "csv"), default="auto",
                   help="score matrix file format (default: .tsv/.csv by extension, else grid)")
    names = ", ".join(t + (" (default)" if t == DEFAULT_TRANSFORM else "") for t in TRANSFORMS)
    p.add_argument("--transform", default=DEFAULT_TRANSFORM, metavar="NAME", choices=tuple(TRANSFORMS),
                   help=f"one of {names} (see below)")
    p.add_argument("--background", default="auto", metavar="SPEC",
                   help="auto (default), implied, uniform, robinson1991, or a file of 'letter frequency' lines")
    p.add_argument("--keep-ambiguous", action="store_true",
                   help="keep ambiguity and non-standard letters (B Z X J U O *; for DNA all but ACGTU)")
    p.add_argument("--json", metavar="FILE", default=None,
                   help="write the check report as JSON ('-' for standard output)")
    p.set_defaults(func=_run)


def _run(args) -> int:
    from seqdist.core.console import is_quiet
    from seqdist.io.matrices import check_distinct_outputs
    from seqdist.scores.matrices import check_score_matrix, format_report, load_score_matrix

    check_distinct_outputs({"--out": args.out, "--json": args.json})
    sm = load_score_matrix(args.matrix, args.in_format)
    report = check_score_matrix(sm, args.transform, args.background, args.keep_ambiguous)
    with OutputSet() as out:
        out.add_matrix(args.out, report.dissimilarity, args.out_format)
        if args.json:
            out.add_json(args.json, report.data)
    table = format_report(report.data)
    if "-" in (args.out, args.json):  # standard output carries data: the readable report goes aside
        if not is_quiet():
            sys.stderr.write(table)
    else:
        sys.stdout.write(table)
    return 0
