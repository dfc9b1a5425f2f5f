"""``seqdist repair``: a metric close to the input under a chosen objective."""

from __future__ import annotations

from seqdist.cli.commands._shared import (
    add_matrix_in,
    add_matrix_out,
    add_seed,
    add_subcommand,
    add_tol,
    positive_float,
)
from seqdist.repair.registry import OBJECTIVES, objective_guide

_OBJECTIVES = ", ".join(OBJECTIVES)


def register(subs, common):
    p = add_subcommand(
        subs, common, "repair", "return a metric close to the input under a chosen objective",
        "Returns a metric close to the input matrix (every triangle inequality holds within\n"
        "--tol) under the chosen objective, and says exactly what it changed. What each\n"
        "objective is good for and when it hurts the tree comes from a simulation study with\n"
        "planted trouble and known true trees (docs/remedies.md):\n\n"
        + objective_guide() + "\n\n"
        "Missing entries are filled by shortest paths over the repaired measured entries.\n"
        "Taxa that no path of measured entries joins to the others (e.g. saturated against\n"
        "every other sequence) have no evidence for any distance to the rest: they are left\n"
        "out of the output and named, unless --keep-unmeasured keeps them with one made-up\n"
        "value, marked 'filled_without_evidence' in --changes. The output is verified to be\n"
        "a metric before anything is written. A repaired matrix is altered data: report the\n"
        "objective and the changes (--changes) with any result you publish.\n\n"
        "Leaving taxa out is a remedy of its own (one of --leave-out, --leave-out-file,\n"
        "--leave-out-suspects, --leave-out-fewest): the taxa are taken out first, then the\n"
        "objective repairs the rest. --leave-out-fewest leaves out the fewest taxa whose\n"
        "removal leaves no violated triangle among measured distances (proven fewest where\n"
        "the report says leave_out_optimal: true; otherwise it gives a lower bound). The\n"
        "report lists every taxon left out and why (left_out_taxa, left_out_reasons).\n\n"
        "exit codes: 0 done, 2 bad input or options, 3 infeasible (e.g. conflicting --lock)\n\n"
        "examples:\n"
        "  seqdist repair dist.tsv -o fixed.tsv --objective fewest --changes changes.tsv --json report.json\n"
        "  seqdist repair dist.tsv -o fixed_fewer.tsv --objective shrink --leave-out-fewest --json fewer.json\n"
        "  seqdist repair dist.tsv -o fixed_without.tsv --objective l2 --leave-out t07,t19")
    p.add_argument("matrix", help="input matrix file ('-' for standard input)")
    add_matrix_in(p)
    add_matrix_out(p)
    p.add_argument("--objective", required=True, metavar="OBJ", help=f"one of {_OBJECTIVES}")
    p.add_argument("--weights", metavar="MATRIX",
                   help="per-entry non-negative weights on the change (same labels; 0 = free; "
                        "the diagonal must be 0)")
    p.add_argument("--lock", metavar="FILE", help="pairs that must not change: 'label<TAB>label' lines")
    add_tol(p)
    p.add_argument("--changes", metavar="FILE", help="write every changed (and filled) entry: "
                                                     "label_a, label_b, before, after, change, how (tsv)")
    p.add_argument("--keep-unmeasured", action="store_true",
                   help="keep taxa with no measured distance to the others, with a made-up fill "
                        "(default: leave them out and name them)")
    p.add_argument("--json", metavar="FILE", help="write the report as JSON")
    out = p.add_mutually_exclusive_group()
    out.add_argument("--leave-out", action="append", default=None, metavar="LABEL[,LABEL...]",
                     help="leave these taxa out before repairing (repeatable)")
    out.add_argument("--leave-out-file", metavar="FILE",
                     help="leave out the taxa named in FILE, one label per line ('#' starts a comment)")
    out.add_argument("--leave-out-suspects", action="store_true",
                     help="leave out the suspect taxa the audit names from the matrix")
    out.add_argument("--leave-out-fewest", action="store_true",
                     help="leave out the fewest taxa whose removal leaves no violated triangle "
                          "(only triangles with three measured sides count)")
    p.add_argument("--time-limit", type=positive_float, default=None, metavar="SECONDS",
                   help="work budget of about this many seconds on the reference machine, counted in "
                        "work, not read from the clock (results do not depend on the machine or its "
                        "load); the best verified answer found within it (optimal: false when not proven)")
    add_seed(p, 0, "seed of randomised steps")
    p.add_argument("--method", choices=("auto", "exact", "heuristic"), default=None,
                   help="fewest and grow: exact integer program or the scalable heuristic; "
                        "l1: exact linear program or the projection method; auto "
                        "chooses by size (default)")
    p.add_argument("--option", action="append", default=[], metavar="KEY=VALUE",
                   help="an objective-specific option (repeatable; see docs/repair.md)")
    p.set_defaults(func=_run)


def _parse_options(items) -> dict:
    from seqdist.core.errors import InputError

    out = {}
    for item in items:
        key, sep, val = item.partition("=")
        key = key.strip().replace("-", "_")
        if not sep or not key:
            raise InputError(f"--option expects KEY=VALUE, got '{item}'")
        v = val.strip()
        low = v.lower()
        if low in ("true", "yes", "on"):
            out[key] = True
        elif low in ("false", "no", "off"):
            out[key] = False
        else:
            try:
                out[key] = int(v)
            except ValueError:
                try:
                    out[key] = float(v)
                except ValueError:
                    out[key] = v
    return out


def _leave_out_labels(items, dm, source: str) -> list:
    """The labels of ``--leave-out`` options (comma-separated, repeatable), checked against the matrix."""
    from seqdist.core.errors import InputError

    idx = dm._index_map()
    out = []
    for item in items:
        for lab in item.split(","):
            lab = lab.strip()
            if not lab:
                raise InputError(f"--leave-out: an empty label in '{item}'")
            if lab not in idx:
                raise InputError(f"--leave-out: unknown label '{lab}' (not in {source})")
            if lab not in out:
                out.append(lab)
    return out


def read_label_file(path: str, dm, source: str) -> list:
    """Labels from a file, one a line (blank lines and '#' comments skipped); each failure names the line."""
    from seqdist.core.errors import InputError
    from seqdist.io.matrices import read_text

    text = read_text(path, "leave-out file")
    name = "<stdin>" if path == "-" else path
    idx = dm._index_map()
    out = []
    for ln, line in enumerate(text.split("\n"), start=1):
        lab = line.rstrip("\r").strip()
        if not lab or lab.startswith("#"):
            continue
        if lab not in idx:
            raise InputError(f"{name}: line {ln}: unknown label '{lab}' (not in {source})")
        if lab not in out:
            out.append(lab)
    return out


def left_out_summary(rep) -> str:
    """What was left out and why, for the summary line (empty when nothing was and nothing was asked).

    ``rep`` is the :class:`~seqdist.repair.result.RepairReport`.

    Examples
    --------
    >>> import dataclasses
    >>> import numpy as np
    >>> from seqdist.repair import repair
    >>> D = np.array([[0, 9, 1, 1], [9, 0, 1, 1], [1, 1, 0, 1], [1, 1, 1, 0.]])
    >>> rep = repair(D, "shrink", leave_out="fewest", progress=False).report
    >>> left_out_summary(rep)
    '; left out 1 taxa: t0 (the fewest whose removal leaves no violated triangle, proven)'
    >>> s = left_out_summary(dataclasses.replace(rep, left_out_taxa=["t0", "x"], unmeasured_taxa={"x": "..."}))
    >>> for part in s.split(", x "):
    ...     print(part)
    ; left out 2 taxa: t0 (the fewest whose removal leaves no violated triangle, proven)
    (no measured distance to the others)
    """
    labels = list(rep.left_out_taxa)
    request = rep.leave_out
    unmeasured = rep.unmeasured_taxa
    remedy = [lab for lab in labels if lab not in unmeasured]
    cut = [lab for lab in labels if lab in unmeasured]

    def names(labs):
        return ", ".join(labs[:5]) + (f" and {len(labs) - 5} more" if len(labs) > 5 else "")

    parts = []
    if remedy:
        if request == "fewest":
            why = ("the fewest whose removal leaves no violated triangle, proven" if rep.leave_out_optimal
                   else "the fewest found whose removal leaves no violated triangle; at least "
                        f"{rep.leave_out_lower_bound} needed")
        else:
            why = "suspects" if request == "suspects" else "named"
        parts.append(f"{names(remedy)} ({why})")
    if cut:
        parts.append(f"{names(cut)} (no measured distance to the others)")
    if not parts:
        if request == "fewest":
            return "; no taxa left out (no violated triangle to remove)"
        if request == "suspects":
            return "; no taxa left out (no suspects)"
        return ""
    return f"; left out {len(labels)} taxa: {', '.join(parts)}"


def _violated(rep) -> str:
    if rep.left_out_taxa and rep.violated_before_leaving_out is not None:
        return (f"{rep.violated_before_leaving_out} violated triangles in the input, "
                f"{rep.violated_before} among the taxa kept")
    return f"{rep.violated_before} violated triangles before"


def _run(args) -> int:
    from seqdist.core.console import info
    from seqdist.io.matrices import OutputSet, check_distinct_outputs, read_matrix, read_pairs
    from seqdist.repair import repair
    from seqdist.repair.engine import check_options

    options = _parse_options(args.option)
    if args.method:
        options["method"] = args.method
    # an unknown objective or option fails before any reading
    check_options(args.objective, options)
    check_distinct_outputs({"--out": args.out, "--changes": args.changes, "--json": args.json})
    dm = read_matrix(args.matrix, args.in_format)
    weights = read_matrix(args.weights) if args.weights else None
    lock = read_pairs(args.lock, dm, "lock file") if args.lock else None
    source = "<stdin>" if args.matrix == "-" else args.matrix
    leave_out = None
    if args.leave_out:
        leave_out = _leave_out_labels(args.leave_out, dm, source)
    elif args.leave_out_file:
        leave_out = read_label_file(args.leave_out_file, dm, source)
    elif args.leave_out_suspects:
        leave_out = "suspects"
    elif args.leave_out_fewest:
        leave_out = "fewest"
    res = repair(dm, args.objective, weights=weights, lock=lock, tol=args.tol, time_limit=args.time_limit,
                 seed=args.seed, keep_unmeasured=args.keep_unmeasured, source=source,
                 weights_source=args.weights, leave_out=leave_out, **options)
    rep = res.report
    with OutputSet() as out:
        out.add_matrix(args.out, res.matrix, args.out_format)
        if args.changes:
            out.add_text(args.changes, res.changes_text())
        if args.json:
            out.add_json(args.json, {**rep.to_dict(), "input": source})
    bound = "optimal" if rep.optimal else f"lower bound {rep.lower_bound:.6g}"
    filled = f", {rep.filled_entries} missing filled" if rep.filled_entries else ""
    if rep.filled_without_evidence:
        filled += f" ({rep.filled_without_evidence} without evidence: one made-up value)"
    filled += left_out_summary(rep)
    info(f"repair ({args.objective}): {rep.changed_entries} of {rep.observed_entries} entries changed"
         f"{filled}; {_violated(rep)}, {rep.violated_after} after; "
         f"objective {rep.objective_value:.6g} ({bound}); {rep.seconds:.2f} s")
    info("the repaired matrix is altered data: report the objective and the changes with any published result")
    return 0
