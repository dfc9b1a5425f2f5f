"""``seqdist simulate``: a seeded alignment with its true tree (demo and test data)."""

from __future__ import annotations

from seqdist.cli.commands._shared import add_seed, add_subcommand
from seqdist.core.errors import InputError
from seqdist.simulate import (
    DNA_MODELS,
    MAX_CELLS,
    MAX_INDEL_WORK,
    MAX_LENGTH,
    MAX_RATE_CATEGORIES,
    MAX_SATURATE,
    MAX_SCALE,
    MAX_TAXA,
    MISREAD_HOWS,
    PARAMETERS,
    PROTEIN_MODELS,
)

_DESCRIPTION = """\
Draws a random tree and evolves sequences down it (DNA: K80 or HKY85; protein:
equal rates, with equal or given frequencies), with gamma rate variation across
sites and insertion/deletion runs. Writes the alignment as FASTA and the true
tree as Newick (branch lengths in expected substitutions per site). Optionally
plants trouble: a very gappy row, a chimera, a pair past saturation, a row with
misread stretches, a contaminant (a far-mutated consensus in one taxon's place).

limits (refused with exit status 2 before any work, so that a typo cannot ask
for more memory than the machine has): --taxa 3 to {taxa}, --length 1 to
{length}, taxa x length at most {cells} cells (about 0.5 GB of memory);
--scale at most {scale:g}; --saturate-length and --contaminant-distance at most
{sat:g}; --rate-categories
at most {cats}; indel work (expected events x columns, events = gap rate x
tree length x length) at most {work:.3g}, about a minute. See docs/simulator.md.

example:
  seqdist simulate -o aln.fasta --tree-out true.nwk --taxa 30 --length 1200 \\
      --alphabet dna --seed 7 --kappa 3 --alpha 0.5 --gap-rate 0.01
""".format(taxa=MAX_TAXA, length=MAX_LENGTH, cells=MAX_CELLS, scale=MAX_SCALE, sat=MAX_SATURATE,
           cats=MAX_RATE_CATEGORIES, work=MAX_INDEL_WORK)


def _arg(name: str):
    """The option type of a numeric parameter, from the library's declaration."""
    return PARAMETERS[name].argtype(name)


def _floats(text: str) -> list[float]:
    import argparse
    import math

    try:
        values = [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected comma-separated numbers, got '{text}'") from None
    if not values or not all(v > 0 and math.isfinite(v) for v in values):
        raise argparse.ArgumentTypeError(f"expected comma-separated positive numbers, got '{text}'")
    return values


def register(subs, common):
    p = add_subcommand(subs, common, "simulate", "simulate an alignment and its true tree (seeded)", _DESCRIPTION)
    p.add_argument("-o", "--out", required=True, metavar="FASTA",
                   help="alignment output, FASTA ('-' for standard output)")
    p.add_argument("--tree-out", required=True, metavar="NEWICK", help="true tree output, Newick")
    p.add_argument("--taxa", type=_arg("n_taxa"), required=True, metavar="N",
                   help=f"number of sequences (3 to {MAX_TAXA}; taxa x length at most {MAX_CELLS})")
    p.add_argument("--length", type=_arg("length"), required=True, metavar="L",
                   help=f"alignment columns (1 to {MAX_LENGTH}; taxa x length at most {MAX_CELLS})")
    p.add_argument("--alphabet", choices=("dna", "protein"), default="dna", help="default: dna")
    add_seed(p, 1, "random seed")
    g = p.add_argument_group("model")
    g.add_argument("--model", choices=DNA_MODELS + PROTEIN_MODELS, default=None,
                   help="substitution model (default: k80 for dna, poisson for protein; "
                        "hky85 / poisson-f when --freqs is given)")
    g.add_argument("--kappa", type=_arg("kappa"), default=2.0, metavar="K",
                   help="transition/transversion rate ratio for dna (default: 2)")
    g.add_argument("--freqs", type=_floats, default=None, metavar="F,F,...",
                   help="stationary frequencies: 4 for dna (A,C,G,T) or 20 for protein (ACDEFGHIKLMNPQRSTVWY)")
    g.add_argument("--alpha", type=_arg("alpha"), default=None, metavar="A",
                   help="gamma shape of rate variation across sites (default: equal rates)")
    g.add_argument("--rate-categories", type=_arg("rate_categories"), default=4, metavar="K",
                   help=f"discrete gamma categories (1 to {MAX_RATE_CATEGORIES}), or 0 for a continuous gamma "
                        "rate per site (default: 4)")
    g = p.add_argument_group("tree")
    g.add_argument("--scale", type=_arg("scale"), default=0.05, metavar="X",
                   help=f"mean branch length, expected substitutions per site (at most {MAX_SCALE:g}; "
                        "default: 0.05)")
    g.add_argument("--clock", action="store_true", help="ultrametric (coalescent) branch lengths")
    g.add_argument("--prefix", default="t", metavar="P", help="label prefix: P01, P02, ... (default: t)")
    g = p.add_argument_group("gaps")
    g.add_argument("--gap-rate", type=_arg("gap_rate"), default=0.0, metavar="R",
                   help="indel events per residue per unit branch length (default: 0, no gaps)")
    g.add_argument("--gap-length", type=_arg("gap_length"), default=3.0, metavar="M",
                   help="mean length of an indel run, at least 1 (default: 3)")
    g = p.add_argument_group("planted trouble (applied in this order; 'auto' picks unused taxa)")
    g.add_argument("--gappy", metavar="LABEL|auto", default=None, help="make one row very gappy")
    g.add_argument("--gappy-fraction", type=_arg("gappy_fraction"), default=0.7, metavar="F",
                   help="gap fraction of the gappy row (default: 0.7)")
    g.add_argument("--chimera", metavar="LABEL[:DONOR]|auto", default=None,
                   help="replace the second half of LABEL by that of DONOR (default donor: the farthest)")
    g.add_argument("--saturate", metavar="LABEL,LABEL|auto", default=None,
                   help="give two taxa very long terminal branches (default pair: the farthest apart)")
    g.add_argument("--saturate-length", type=_arg("saturate_length"), default=50.0,
                   metavar="X", help=f"branch length added to each of them (at most {MAX_SATURATE:g}; default: 50)")
    g.add_argument("--misread", metavar="LABEL|auto", default=None,
                   help="replace a few stretches of one row by misread residues")
    g.add_argument("--misread-stretches", type=_arg("misread_stretches"), default=3, metavar="N",
                   help="number of misread stretches (default: 3)")
    g.add_argument("--misread-length", type=_arg("misread_length"), default=50, metavar="L",
                   help="columns per misread stretch; together at most half the row (default: 50)")
    g.add_argument("--misread-how", choices=MISREAD_HOWS, default="random",
                   help="random: residues drawn from the stationary frequencies (base-calling error); "
                        "shift: the stretch's content slid by one column (alignment error) (default: random)")
    g.add_argument("--contaminant", metavar="LABEL|auto", default=None,
                   help="replace one row by the alignment's consensus mutated along a long branch")
    g.add_argument("--contaminant-distance", type=_arg("contaminant_distance"), default=0.5,
                   metavar="X", help="branch length from the consensus, expected substitutions per site "
                                     f"(at most {MAX_SATURATE:g}; default: 0.5)")
    g = p.add_argument_group("extra outputs")
    g.add_argument("--stockholm-out", metavar="STO", default=None,
                   help="also write the first taxa as Stockholm, insert columns in lower case / '.'")
    g.add_argument("--stockholm-taxa", type=_arg("stockholm_taxa"), default=10, metavar="N",
                   help="rows in the Stockholm copy, at least 2 (default: 10)")
    g.add_argument("--summary-out", metavar="JSON", default=None,
                   help="options, tree length, gap fraction and planted trouble as JSON")
    p.set_defaults(func=_run)


def _auto(value: str | None) -> bool:
    return value is not None and value.strip().lower() == "auto"


def _run(args) -> int:
    import numpy as np

    from seqdist import simulate as sim_mod
    from seqdist.core.console import info
    from seqdist.io.matrices import OutputSet, check_distinct_outputs

    check_distinct_outputs({"--out": args.out, "--tree-out": args.tree_out, "--stockholm-out": args.stockholm_out,
                            "--summary-out": args.summary_out})
    sim_mod.check_size(args.taxa, args.length)
    wanted = ((args.gappy is not None) + 2 * (args.chimera is not None) + 2 * (args.saturate is not None)
              + (args.misread is not None) + (args.contaminant is not None))
    if wanted > args.taxa:
        raise InputError(f"planting that much trouble needs at least {wanted} taxa (got {args.taxa})")
    rng = np.random.default_rng(args.seed)
    sim = sim_mod.simulate(args.taxa, args.length, args.alphabet, rng, model=args.model, kappa=args.kappa,
                           freqs=args.freqs, alpha=args.alpha, rate_categories=args.rate_categories,
                           scale=args.scale, clock=args.clock, gap_rate=args.gap_rate,
                           gap_length=args.gap_length, prefix=args.prefix)
    used: set = set()

    def _label(lab: str) -> str:
        lab = lab.strip()
        sim.index(lab)  # raises with the label range when it does not exist
        if lab in used:
            raise InputError(f"taxon '{lab}' is already used by another planted trouble")
        used.add(lab)
        return lab

    if args.gappy is not None:
        sim = sim_mod.plant_gappy(sim, None if _auto(args.gappy) else _label(args.gappy),
                                  args.gappy_fraction, rng=rng)
        used.update(sim.planted[-1]["labels"])
    if args.chimera is not None:
        label = donor = None
        if not _auto(args.chimera):
            label, _, donor = args.chimera.partition(":")
            label, donor = _label(label), (_label(donor) if donor.strip() else None)
        sim = sim_mod.plant_chimera(sim, label, donor, rng=rng)
        used.update(sim.planted[-1]["labels"])
    if args.saturate is not None:
        pair = None
        if not _auto(args.saturate):
            pair = [x for x in args.saturate.split(",")]
            if len(pair) != 2:
                raise InputError(f"--saturate: expected two labels separated by a comma, got '{args.saturate}'")
            pair = [_label(x) for x in pair]
        sim = sim_mod.plant_saturated_pair(sim, pair, args.saturate_length, rng=rng)
        used.update(sim.planted[-1]["labels"])
    # Planted after the older kinds, so that files made without these options stay byte-identical.
    if args.misread is not None:
        sim = sim_mod.plant_misread(sim, None if _auto(args.misread) else _label(args.misread),
                                    args.misread_stretches, args.misread_length, args.misread_how, rng=rng)
        used.update(sim.planted[-1]["labels"])
    if args.contaminant is not None:
        sim = sim_mod.plant_contaminant(sim, None if _auto(args.contaminant) else _label(args.contaminant),
                                        args.contaminant_distance, rng=rng)
        used.update(sim.planted[-1]["labels"])

    with OutputSet() as out:
        out.add_text(args.out, sim_mod.format_fasta(sim.records))
        out.add_text(args.tree_out, sim.tree.newick())
        if args.stockholm_out:
            out.add_text(args.stockholm_out, sim_mod.format_stockholm(sim.records[:args.stockholm_taxa]))
        if args.summary_out:
            out.add_json(args.summary_out, sim_mod.summary(sim, args.seed))
    s = sim_mod.summary(sim, args.seed)
    notes = "; ".join(_describe(n) for n in sim.planted)
    info(f"simulated {args.taxa} x {args.length} {sim.model.alphabet} ({sim.model.name}), tree length "
         f"{s['tree_length']:.4g}, {100 * s['gap_fraction']:.1f}% gaps" + (f"; planted: {notes}" if notes else ""))
    return 0


def _describe(note: dict) -> str:
    kind = note["kind"]
    if kind == "gappy":
        return f"gappy {note['labels'][0]} ({100 * note['gap_fraction']:.0f}% gaps)"
    if kind == "chimera":
        return f"chimera {note['label']} (from column {note['first_donor_column']}: {note['donor']})"
    if kind == "misread":
        return (f"misread {note['labels'][0]} ({len(note['stretches'])} stretches, {note['misread_columns']} "
                f"columns, {note['how']})")
    if kind == "contaminant":
        return f"contaminant {note['labels'][0]} (p = {note['p_to_consensus']:.4f} to the consensus)"
    return f"saturated pair {note['labels'][0]},{note['labels'][1]} (p = {note['p_distance']:.4f})"
