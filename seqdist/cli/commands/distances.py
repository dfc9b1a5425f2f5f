"""``seqdist distances``: pairwise distances from a multiple sequence alignment."""

from __future__ import annotations

from seqdist.cli.commands._shared import add_matrix_out, add_subcommand

_DESCRIPTION = """\
Reads an alignment ({formats}, ... by
extension or --in-format), tells DNA from protein (--alphabet to force) and
writes the matrix of pairwise distances under the chosen model. Labels are
the record ids.

models:
{models}

A pair is compared over the columns where both sequences hold an unambiguous
residue (--gaps pairwise), or over the columns unambiguous in every sequence
(--gaps complete). A pair with no shared column, or whose correction is
undefined (saturated), is a missing entry (NA), named in one warning. The limit
is decided exactly from the integer counts: a pair exactly at it (k80: columns
= 2 transitions + transversions) is missing, one count short of it is defined.
Formulas and sources: docs/distances.md.

examples:
  seqdist distances example_sequences/dna_clean.fasta -o dist.tsv --model tn93 --gamma 0.5
  seqdist distances example_sequences/protein_small.sto -o dist_square.txt --out-format square --model kimura
  seqdist distances example_sequences/dna_trouble.fasta -o d.tsv --sites sites.tsv --undefined u.txt"""


def _lower(text: str) -> str:
    # model names are matched without regard to case, as in the library
    return text.lower()


def register(subs, common):
    from seqdist.io.alignment import alignment_format_help, sniffed_format_names
    from seqdist.models import registry
    from seqdist.models.distances import AMBIGUITY, FREQS, GAPS, KERNELS

    p = add_subcommand(subs, common, "distances", "pairwise distances from a multiple sequence alignment",
                       _DESCRIPTION.format(models=registry.model_guide(), formats=sniffed_format_names()))
    p.add_argument("alignment", help="alignment file ('-' for standard input)")
    add_matrix_out(p)
    defaults = ", ".join(f"{m} for {'DNA' if a == 'dna' else a}" for a, m in registry.DEFAULT_MODELS.items())
    p.add_argument("--model", default=None, type=_lower, choices=registry.MODEL_NAMES,
                   help=f"distance model (default: {defaults})")
    p.add_argument("--gamma", type=float, default=None, metavar="ALPHA",
                   help="gamma shape for rate variation among sites (models with a gamma form)")
    p.add_argument("--gaps", choices=GAPS, default="pairwise",
                   help="columns compared: per pair (default) or complete columns only")
    p.add_argument("--alphabet", choices=("auto", "dna", "protein"), default="auto",
                   help="sequence type (default: auto, DNA when >= 90%% of letters are ACGTUN)")
    p.add_argument("--in-format", default=None, metavar="FMT", help=alignment_format_help())
    freq_models = ", ".join(n for n in registry.MODEL_NAMES if n in registry.FREQ_MODELS)
    p.add_argument("--freqs", choices=FREQS, default="alignment",
                   help=f"base frequencies for {freq_models}: whole alignment (default) or each pair")
    p.add_argument("--ambiguity", choices=AMBIGUITY, default="skip",
                   help="ambiguity codes: left out (default) or spread over the bases they stand for")
    p.add_argument("--sites", default=None, metavar="FILE",
                   help="also write the number of compared columns per pair (a matrix file, diagonal 0)")
    p.add_argument("--variance", default=None, metavar="FILE",
                   help="also write the large-sample variance of each distance (a matrix file)")
    p.add_argument("--undefined", default=None, metavar="FILE",
                   help="also write the undefined pairs as 'label<TAB>label' lines (a pair file)")
    p.add_argument("--json", default=None, metavar="FILE", help="also write a JSON summary")
    p.add_argument("--kernel", choices=KERNELS, default="auto",
                   help="count engine: matrix products, byte compare, or the faster for the job (default)")
    p.add_argument("--memory", type=int, default=512, metavar="MB",
                   help="memory budget for the count tiles in MB (default 512)")
    p.set_defaults(func=_run)


def _run(args) -> int:
    from seqdist.core.console import info, warn
    from seqdist.core.errors import InputError
    from seqdist.io.alignment import read_alignment
    from seqdist.io.matrices import OutputSet, check_distinct_outputs, format_matrix, matrix_format
    from seqdist.models.distances import pairwise_distances, undefined_message

    if args.memory < 16:
        raise InputError("--memory must be at least 16 (MB)")
    check_distinct_outputs({"--out": args.out, "--sites": args.sites, "--variance": args.variance,
                            "--undefined": args.undefined, "--json": args.json})
    fmt = matrix_format(args.out, args.out_format)
    aln = read_alignment(args.alignment, args.in_format, args.alphabet)
    res = pairwise_distances(aln, args.model, gamma=args.gamma, gaps=args.gaps, freqs=args.freqs,
                             ambiguity=args.ambiguity, variance=args.variance is not None, kernel=args.kernel,
                             memory=args.memory << 20, warn=False)
    if res.undefined:
        hint = "(--undefined FILE lists them all)" if args.undefined is None else f"(all in {args.undefined})"
        warn(undefined_message(res, hint=hint))
    with OutputSet() as out:
        out.add_text(args.out, format_matrix(res.matrix, fmt))
        if args.sites:
            out.add_text(args.sites, format_matrix(res.sites, matrix_format(args.sites, None)))
        if args.variance:
            out.add_text(args.variance, format_matrix(res.variance, matrix_format(args.variance, None)))
        if args.undefined:
            out.add_text(args.undefined, _pair_file(res))
        if args.json:
            out.add_json(args.json, res.summary())
    info(f"{aln.n} sequence{'s' if aln.n != 1 else ''} x {aln.length} columns ({res.alphabet}), model {res.model}"
         f"{f' gamma {res.gamma:g}' if res.gamma else ''}, {res.columns_used} columns used: "
         f"{len(res.undefined)} undefined pair{'s' if len(res.undefined) != 1 else ''}")
    return 0


def _pair_file(res) -> str:
    lines = [f"# pairs undefined under {res.model}, written as missing entries"]
    for reason in ("no shared column", "saturated", "undefined"):
        pairs = [(a, b) for a, b, r in res.undefined if r == reason]
        if pairs:
            lines.append(f"# {reason}: {len(pairs)}")
            lines.extend(f"{a}\t{b}" for a, b in pairs)
    return "\n".join(lines) + "\n"

