"""``seqdist simulate``: a seeded alignment with its true tree (demo and test data)."""

from __future__ import annotations

from seqdist.cli.commands._shared import add_seed, add_subcommand
from seqdist.core.errors import InputError, ParameterError, flag
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
for more memory than the machine has): --taxa 3 to {taxa}, --columns 1 to
{length}, taxa x columns at most {cells} cells (about 0.5 GB of memory);
--branch-mean at most {scale:g}; --saturate-length and --contaminant-distance at
most {sat:g}; --gamma categories at most {cats}; indel work (expected events x
columns, events = indel rate x tree length x columns) at most {work:.3g}, about
a minute. See docs/simulator.md.

Options renamed in this release (their old names still work, with a warning
naming the new one): see docs/simulator.md, "Renamed options".

examples:
  seqdist simulate -o aln.fasta --tree-out true.nwk --taxa 30 --columns 1200 \\
      --seed 7 --model hky85 --kappa 4 --gamma 0.5 --indels 0.01
  seqdist simulate -o prot.fasta --tree-out prot.nwk --taxa 12 --columns 300 --alphabet protein \\
      --gamma 1/8 --branch-mean 0.1 --ultrametric --label-prefix p --chimera auto
"""

#: Old flag -> (new flag, what the old value becomes). Kept hidden for one
#: release; using one gives a RenamedWarning naming the new flag.
_RENAMED_FLAGS = {
    "--length": "--columns", "--freqs": "--frequencies", "--alpha": "--gamma SHAPE",
    "--rate-categories": "--gamma SHAPE/CATEGORIES", "--scale": "--branch-mean", "--clock": "--ultrametric",
    "--prefix": "--label-prefix", "--gap-rate": "--indels RATE", "--gap-length": "--indels RATE/MEAN_LENGTH",
}

#: How a library parameter is named in a command-line message (where it is not --name).
_PARAM_FLAGS = {"gamma_categories": "--gamma CATEGORIES", "indel_rate": "--indels RATE",
                "indel_length": "--indels MEAN_LENGTH", "gamma": "--gamma SHAPE"}


_DESCRIPTION = _DESCRIPTION.format(taxa=MAX_TAXA, length=MAX_LENGTH, cells=MAX_CELLS, scale=MAX_SCALE,
                                   sat=MAX_SATURATE, cats=MAX_RATE_CATEGORIES, work=MAX_INDEL_WORK)


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


def _pair(first: str, second: str, word_for_zero: str | None = None):
    """An option type ``A[/B]``: each part parsed and checked by its library declaration.

    Returns ``(a, b)`` with ``b`` None when it was left out. ``word_for_zero``
    is a word accepted for ``B = 0`` (``continuous`` for the gamma categories).
    """
    import argparse

    from seqdist.core.errors import ParameterError

    def convert(text: str):
        a_text, slash, b_text = text.partition("/")
        if slash and not b_text.strip():
            raise argparse.ArgumentTypeError(f"nothing after '/' in '{text}'")
        try:
            a = PARAMETERS[first].parse(first, a_text.strip())
        except ParameterError:
            raise argparse.ArgumentTypeError(
                f"{_name(first)} must be {PARAMETERS[first].allowed()}, got {a_text.strip()}") from None
        b = None
        if slash:
            b_text = b_text.strip()
            if word_for_zero and b_text.lower() == word_for_zero:
                b_text = "0"
            try:
                b = PARAMETERS[second].parse(second, b_text)
            except ParameterError:
                raise argparse.ArgumentTypeError(
                    f"{_name(second)} must be {PARAMETERS[second].allowed()}"
                    + (f" (or '{word_for_zero}')" if word_for_zero else "") + f", got {b_text}") from None
        return a, b

    convert.__name__ = "value"
    return convert


def _name(param: str) -> str:
    """A library parameter's name in command-line words: its part of a compound option."""
    flag = _PARAM_FLAGS.get(param, "--" + param.replace("_", "-"))
    return flag.split(" ", 1)[1].lower().replace("_", " ") if " " in flag else flag


def register(subs, common):
    import argparse

    p = add_subcommand(subs, common, "simulate", "simulate an alignment and its true tree (seeded)", _DESCRIPTION)
    p.usage = "seqdist simulate -o FASTA --tree-out NEWICK --taxa N --columns L [options]"
    hidden = argparse.SUPPRESS
    p.add_argument("-o", "--out", required=True, metavar="FASTA",
                   help="alignment output, FASTA ('-' for standard output)")
    p.add_argument("--tree-out", required=True, metavar="NEWICK", help="true tree output, Newick")
    p.add_argument("--taxa", type=_arg("taxa"), required=True, metavar="N",
                   help=f"number of sequences (3 to {MAX_TAXA}; taxa x columns at most {MAX_CELLS})")
    # Required, checked in _run: the hidden old name --length may stand in for it.
    p.add_argument("--columns", type=_arg("columns"), default=None, metavar="L",
                   help=f"alignment columns, required (1 to {MAX_LENGTH}; taxa x columns at most {MAX_CELLS})")
    p.add_argument("--alphabet", choices=("dna", "protein"), default="dna", help="default: dna")
    add_seed(p, 1, "random seed")
    g = p.add_argument_group("substitution model")
    g.add_argument("--model", choices=DNA_MODELS + PROTEIN_MODELS, default=None,
                   help="k80 or hky85 for dna, poisson or poisson-f for protein (default: k80 for dna, "
                        "poisson for protein; hky85 / poisson-f when --frequencies is given)")
    g.add_argument("--kappa", type=_arg("kappa"), default=None, metavar="K",
                   help="transition/transversion rate ratio, dna only (default: 2)")
    g.add_argument("--frequencies", type=_floats, default=None, metavar="F,F,...",
                   help="stationary frequencies: 4 for dna (A,C,G,T) or 20 for protein (ACDEFGHIKLMNPQRSTVWY)")
    g.add_argument("--gamma", type=_pair("gamma", "gamma_categories", "continuous"), default=None,
                   metavar="SHAPE[/CATEGORIES]",
                   help="rates across sites from a gamma distribution of this shape (mean 1): CATEGORIES "
                        f"equal-probability classes (1 to {MAX_RATE_CATEGORIES}; default 4), or 'continuous' "
                        "(or 0) for a rate drawn per site; e.g. 0.5, 0.5/8, 0.5/continuous (default: equal rates)")
    g = p.add_argument_group("tree")
    g.add_argument("--branch-mean", type=_arg("branch_mean"), default=None, metavar="X",
                   help=f"mean branch length, expected substitutions per site (above 0, at most {MAX_SCALE:g}; "
                        "default: 0.05)")
    g.add_argument("--ultrametric", action="store_true", default=None,
                   help="clock-like tree: coalescent branch lengths, every leaf at the same depth")
    g.add_argument("--label-prefix", default=None, metavar="P",
                   help="labels P01, P02, ... (letters, digits, underscores; default: t)")
    g = p.add_argument_group("insertions and deletions")
    g.add_argument("--indels", type=_pair("indel_rate", "indel_length"), default=None,
                   metavar="RATE[/MEAN_LENGTH]",
                   help="indel events per residue per unit branch length, and the mean length of a run "
                        "(at least 1; default 3); e.g. 0.01 or 0.01/5 (default: no indels)")
    g = p.add_argument_group("planted trouble (applied in this order; 'auto' picks unused taxa)")
    g.add_argument("--gappy", metavar="LABEL|auto", default=None, help="make one row very gappy")
    g.add_argument("--gappy-fraction", type=_arg("gappy_fraction"), default=0.7, metavar="F",
                   help="gap fraction of the gappy row, between 0 and 1 (default: 0.7)")
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
    # The old names, hidden: one release of grace for scripts (a warning names the new option).
    p.add_argument("--length", dest="old_length", type=_arg("columns"), default=None, help=hidden)
    p.add_argument("--freqs", dest="old_freqs", type=_floats, default=None, help=hidden)
    p.add_argument("--alpha", dest="old_alpha", type=_arg("gamma"), default=None, help=hidden)
    p.add_argument("--rate-categories", dest="old_rate_categories", type=_arg("gamma_categories"), default=None,
                   help=hidden)
    p.add_argument("--scale", dest="old_scale", type=_arg("branch_mean"), default=None, help=hidden)
    p.add_argument("--clock", dest="old_clock", action="store_true", default=None, help=hidden)
    p.add_argument("--prefix", dest="old_prefix", default=None, help=hidden)
    p.add_argument("--gap-rate", dest="old_gap_rate", type=_arg("indel_rate"), default=None, help=hidden)
    p.add_argument("--gap-length", dest="old_gap_length", type=_arg("indel_length"), default=None, help=hidden)
    p.set_defaults(func=_run)


def _settings(args) -> dict:
    """The simulate() keywords from the options, old names folded in (with a warning each)."""
    from seqdist.core.console import warn
    from seqdist.simulate import RenamedWarning

    def old(flag: str, dest: str, new_given: bool):
        value = getattr(args, dest)
        if value is None:
            return None
        new = _RENAMED_FLAGS[flag]
        if new_given:
            raise InputError(f"{flag} is the old name of {new.split()[0]}; give only {new.split()[0]}")
        warn(f"{flag} is renamed {new}; the old name will be removed in the next release", RenamedWarning)
        return value

    columns = old("--length", "old_length", args.columns is not None)
    columns = args.columns if columns is None else columns
    if columns is None:
        raise InputError("the following arguments are required: --columns (see 'seqdist simulate --help')")
    freqs = old("--freqs", "old_freqs", args.frequencies is not None)
    alpha = old("--alpha", "old_alpha", args.gamma is not None)
    cats = old("--rate-categories", "old_rate_categories", args.gamma is not None)
    scale = old("--scale", "old_scale", args.branch_mean is not None)
    clock = old("--clock", "old_clock", args.ultrametric is not None)
    prefix = old("--prefix", "old_prefix", args.label_prefix is not None)
    rate = old("--gap-rate", "old_gap_rate", args.indels is not None)
    run = old("--gap-length", "old_gap_length", args.indels is not None)
    shape, categories = args.gamma if args.gamma is not None else (alpha, cats)
    indel_rate, indel_length = args.indels if args.indels is not None else (rate, run)
    kw = {"columns": columns, "kappa": args.kappa, "frequencies": args.frequencies or freqs, "gamma": shape,
          "gamma_categories": categories,
          "branch_mean": args.branch_mean if args.branch_mean is not None else scale,
          "ultrametric": args.ultrametric if args.ultrametric is not None else clock,
          "label_prefix": args.label_prefix if args.label_prefix is not None else prefix,
          "indel_rate": indel_rate, "indel_length": indel_length}
    # Unset options take the library's defaults (declared once, in seqdist.simulate).
    return {k: v for k, v in kw.items() if v is not None}


def _auto(value: str | None) -> bool:
    return value is not None and value.strip().lower() == "auto"


def _run(args) -> int:
    import numpy as np

    from seqdist import simulate as sim_mod
    from seqdist.core.console import info
    from seqdist.io.matrices import OutputSet, check_distinct_outputs

    check_distinct_outputs({"--out": args.out, "--tree-out": args.tree_out, "--stockholm-out": args.stockholm_out,
                            "--summary-out": args.summary_out})
    kw = _settings(args)
    wanted = ((args.gappy is not None) + 2 * (args.chimera is not None) + 2 * (args.saturate is not None)
              + (args.misread is not None) + (args.contaminant is not None))
    rng = np.random.default_rng(args.seed)   # one generator: the simulation, then the planted trouble
    try:
        sim_mod.check_size(args.taxa, kw["columns"])
        if wanted > args.taxa:
            raise InputError(f"planting that much trouble needs at least {wanted} taxa (got {args.taxa})")
        sim = sim_mod.simulate(args.taxa, kw.pop("columns"), args.alphabet, rng, model=args.model, **kw)
    except ParameterError as exc:
        # The library names its parameters; here each is named by its option (or its part of one).
        raise InputError(exc.render(lambda p: _PARAM_FLAGS.get(p) or flag(p))) from None
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
    info(f"simulated {args.taxa} x {len(sim.records[0][1])} {sim.model.alphabet} ({sim.model.name}), tree length "
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
