"""The whole job in one call: alignment -> distances -> audit -> repair -> trees -> report.

:func:`run_job` chains the public functions of the feature modules with
sensible defaults and writes every intermediate file in the contract's
formats plus a manifest (version, options, seeds, checksums) into one folder.
All files of a run are staged and published together (see
:class:`seqdist.io.matrices.OutputSet`): a failed run leaves the folder as it was.
"""

from __future__ import annotations

import hashlib
import os
import platform
import time
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

from seqdist import __version__
from seqdist.audit.suspects import REASON_PREFIX
from seqdist.core.console import info
from seqdist.core.errors import InputError, ParameterError
from seqdist.models.distances import inverse_variance_weights  # noqa: F401  (the weights of --weighted; public here too)
from seqdist.repair.registry import WEIGHTED_OBJECTIVES

if TYPE_CHECKING:  # the types of JobResult's fields, without importing them for `seqdist --help`
    from seqdist.audit.report import AuditReport
    from seqdist.impact.compare import ImpactResult
    from seqdist.impact.result import ImpactReport
    from seqdist.models.distances import DistanceResult
    from seqdist.repair.engine import RepairResult
    from seqdist.repair.result import RepairReport

__all__ = ["JobResult", "split_times", "check_outdir", "unmeasured_reasons", "rres_unmeasured",
           "suspects_to_leave_out", "command_line", "run_job", "left_out_section", "suspects_section", "job_section"]

#: The default remedy of ``seqdist run``, chosen by the simulation study in
#: docs/remedies.md: leave the suspect sequences out, then the shortest-path
#: closure (its mean error is at or below no repair's in every scenario with
#: NJ and BIONJ, far below with chimeras, a contaminant or saturation; the
#: weighted least-squares repair after the suspects is slightly worse on clean
#: data and misreads).
DEFAULT_OBJECTIVE = "shrink"


# File names inside the output folder, in the order the steps write them.
FILES = {
    "distances": "distances.tsv",
    "sites": "sites.tsv",
    "variance": "variance.tsv",
    "distances_json": "distances.json",
    "audit_json": "audit.json",
    "audit_text": "audit.txt",
    "repaired": "repaired.tsv",
    "repair_json": "repair.json",
    "changes": "changes.tsv",
    "weights": "weights.tsv",
    "tree_before": "tree_before.nwk",
    "tree_after": "tree_after.nwk",
    # the other choice about the suspects, for comparison (one of the two, when there are suspects)
    "tree_with_suspects": "tree_with_suspects.nwk",
    "tree_without_suspects": "tree_without_suspects.nwk",
    "impact_json": "impact.json",
    "report": "report.html",
    "manifest": "manifest.json",
}


@dataclass
class JobResult:
    """What :func:`run_job` did: the output folder, its files and the typed result of each step.

    The JSON files of the folder are these results' documents with the
    wall-clock times taken out (they go to ``manifest.json``).

    Attributes
    ----------
    outdir : str
        The output folder.
    files : dict of str to str
        Path of each file written, by its key in ``FILES``.
    distances : DistanceResult
        The distances step (:func:`seqdist.models.distances.pairwise_distances`);
        ``distances.summary()`` is ``distances.json``.
    audit : AuditReport
        The audit with the suspect sequences (:func:`seqdist.audit.report.audit`);
        ``audit.to_dict()`` is ``audit.json``.
    repair : RepairResult
        The repair (:func:`seqdist.repair.repair`); ``repair.report`` is its
        :class:`~seqdist.repair.result.RepairReport` (``repair.json``).
    impact : ImpactResult
        The trees and their comparison (:func:`seqdist.impact.compare.impact`);
        ``impact.report`` is its :class:`~seqdist.impact.result.ImpactReport`
        (``impact.json``), with the remedies and any bootstrap support.
    seconds : dict of str to float
        Wall-clock time of each step (seconds).
    """

    def __repr__(self) -> str:
        return f"JobResult(outdir={self.outdir!r}, files={len(self.files)})"

    outdir: str
    files: dict
    distances: DistanceResult
    audit: AuditReport
    repair: RepairResult
    impact: ImpactResult
    seconds: dict = field(default_factory=dict)


def split_times(obj, path: str = ""):
    """Split wall-clock times (keys ``seconds`` or ``*_seconds``) out of a report.

    Returns the report without them and a flat dict of the times, so that
    the data files of a run are byte-identical from run to run and the times
    go to the manifest only.

    Examples
    --------
    >>> split_times({"a": 1, "seconds": 2.5, "lp": {"lp_seconds": 1.0}})
    ({'a': 1, 'lp': {}}, {'seconds': 2.5, 'lp.lp_seconds': 1.0})
    """
    times = {}
    if isinstance(obj, dict):
        clean = {}
        for k, v in obj.items():
            key = f"{path}.{k}" if path else str(k)
            if (k == "seconds" or str(k).endswith("_seconds")) and not isinstance(v, (list, tuple)):
                times[key] = v
                continue
            clean[k], sub = split_times(v, key)
            times.update(sub)
        return clean, times
    if isinstance(obj, list):
        out = []
        for i, v in enumerate(obj):
            c, sub = split_times(v, f"{path}[{i}]")
            out.append(c)
            times.update(sub)
        return out, times
    return obj, times


def _sha256(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _file_sha256(path: str) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def check_outdir(outdir: str) -> None:
    """Refuse an output folder that cannot be made or written, before any work.

    The folder itself, or the nearest folder above it that exists, must be a
    folder we may write in.

    Examples
    --------
    >>> check_outdir("/")  # doctest: +SKIP
    """
    path = os.path.abspath(outdir)
    probe = path
    while not os.path.exists(probe):
        parent = os.path.dirname(probe)
        if parent == probe:
            break
        probe = parent
    if not os.path.isdir(probe):
        what = "exists and is not a folder" if probe == path else f"cannot be made: {probe} is not a folder"
        raise InputError(f"{outdir}: {what}")
    if not os.access(probe, os.W_OK | os.X_OK):
        what = "is not writable" if probe == path else f"cannot be made: {probe} is not writable"
        raise InputError(f"{outdir}: {what}")


def unmeasured_reasons(undefined, labels) -> dict:
    """Why each taxon lacks distances: ``{label: "saturated against all 29 others"}``.

    ``undefined`` is the distances step's list of ``(label, label, reason)``.

    Examples
    --------
    >>> unmeasured_reasons([("a", "b", "saturated"), ("a", "c", "saturated")], ["a", "b", "c"])["a"]
    'saturated against all 2 others'
    """
    n = len(labels)
    per: dict = {}
    for a, b, why in undefined:
        for t in (a, b):
            per.setdefault(t, {}).setdefault(why, 0)
            per[t][why] += 1
    out = {}
    for t, counts in per.items():
        parts = []
        for why, k in sorted(counts.items(), key=lambda kv: -kv[1]):
            every = "all " if k == n - 1 else ""
            if why == "saturated":
                parts.append(f"saturated against {every}{k} other{'s' if k != 1 else ''}")
            elif why == "no shared column":
                parts.append(f"no shared column with {every}{k} other{'s' if k != 1 else ''}")
            else:
                parts.append(f"{why} with {every}{k} other{'s' if k != 1 else ''}")
        out[t] = ", ".join(parts)
    return out


def rres_unmeasured(dm, keep_unmeasured: bool) -> list:
    """Taxa the repair leaves out as unmeasured (none when they are kept)."""
    from seqdist.repair import unmeasured_taxa

    return [] if keep_unmeasured else list(unmeasured_taxa(dm))


def suspects_to_leave_out(dm, suspect_report, keep_unmeasured: bool = False) -> dict:
    """The suspects ``run`` leaves out by default: ``{label: reason}``.

    Suspects the repair leaves out anyway (no measured distance to the others)
    are not repeated; none are left out when fewer than 4 taxa would remain
    for a tree. The simulation study (docs/remedies.md) calls this too, so
    the default it measures is the one ``run`` applies.

    Examples
    --------
    >>> from seqdist import DistanceMatrix
    >>> from seqdist.audit.suspects import find_suspects
    >>> D = np.full((5, 5), 0.2) - 0.2 * np.eye(5)
    >>> suspects_to_leave_out(DistanceMatrix.from_array(D, list("abcde")), find_suspects(
    ...     DistanceMatrix.from_array(D, list("abcde"))))
    {}
    """
    already = set(rres_unmeasured(dm, keep_unmeasured))
    out = {lab: why for lab, why in suspect_report.reasons().items() if lab not in already}
    if dm.n - len(already) - len(out) < 4:
        return {}  # too few would be left to build a tree on
    return out


def command_line(alignment: str, options: dict) -> str:
    """The ``seqdist run`` command that gives the same files (for the report and the manifest).

    Examples
    --------
    >>> command_line("a.fasta", {"model": "k80", "objective": "fewest", "seed": 1, "weighted": False})
    'seqdist run a.fasta --outdir DIR --model k80 --objective fewest --seed 1 --unweighted'
    """
    import shlex

    parts = ["seqdist", "run", alignment, "--outdir", "DIR"]
    flags = {"in_format": "--in-format", "alphabet": "--alphabet", "model": "--model", "gamma": "--gamma",
             "gaps": "--gaps", "objective": "--objective", "method": "--method", "truth": "--truth",
             "time_limit": "--time-limit", "seed": "--seed", "bootstrap": "--bootstrap"}
    for key, flag in flags.items():
        v = options.get(key)
        if v is None or (key == "alphabet" and v == "auto") or (key == "bootstrap" and not v):
            continue
        parts += [flag, str(v)]
    if options.get("weighted") is False and options.get("objective", DEFAULT_OBJECTIVE) in WEIGHTED_OBJECTIVES:
        parts.append("--unweighted")
    for key, flag in (("keep_suspects", "--keep-suspects"), ("keep_unmeasured", "--keep-unmeasured")):
        if options.get(key):
            parts.append(flag)
    if options.get("truth") is None and "truth" in options:
        parts.append("--no-truth")
    return " ".join(shlex.quote(x) if x != "DIR" else x for x in parts)


def _find_truth(alignment_path: str) -> str | None:
    base = os.path.splitext(alignment_path)[0]
    for cand in (base + ".true.nwk", base + ".nwk"):
        if os.path.isfile(cand):
            return cand
    return None


def run_job(alignment: str, outdir: str, *, in_format: str | None = None, alphabet: str = "auto",
            model: str | None = None, gamma: float | None = None, gaps: str = "pairwise",
            objective: str = DEFAULT_OBJECTIVE, weighted: bool | None = None, method: str = "nj",
            truth: str | None = "auto", time_limit: float | None = None, seed: int = 1,
            bootstrap: int = 0, workers: int | None = None, progress: bool = True,
            keep_unmeasured: bool = False, keep_suspects: bool = False) -> JobResult:
    """Run the whole job on one alignment and write every file into ``outdir``.

    Parameters
    ----------
    alignment : str
        Any alignment the distances step reads (FASTA, Clustal, Stockholm,
        NEXUS, PHYLIP...).
    outdir : str
        Output folder (created if needed).
    model : str, optional
        Distance model; default k80 for DNA, poisson for protein.
    gamma, gaps, alphabet, in_format
        As for :func:`seqdist.models.distances.pairwise_distances`.
    objective : str
        Repair objective (default ``shrink``, after the suspects are left
        out; see docs/remedies.md for why).
    weighted : bool or None
        Weight the repair by the inverse variance of each distance, so that
        poorly supported entries move first (the weights are written too).
        None (the default): weighted when the objective's result depends on
        weights (all but ``shrink``) and the model has a variance formula.
    method : {"nj", "bionj", "upgma"}
        Tree method.
    truth : str or None
        A reference Newick tree; ``"auto"`` uses ``NAME.true.nwk`` or
        ``NAME.nwk`` beside the alignment when present.
    time_limit : float, optional
        Seconds for the repair step.
    seed : int
        Seed of every randomised step (quartet sample, repair, bootstrap).
    bootstrap : int
        Column resamples for split support (0: none).
    keep_suspects : bool
        Keep the suspect sequences (:func:`seqdist.audit.suspects.find_suspects`
        with the alignment's evidence) in the repaired matrix and its tree.
        By default they are left out (the remedy that helps the tree most in
        the simulation study, docs/remedies.md); either way the other choice
        is built too and compared in the report (``remedies`` in impact.json).
    keep_unmeasured : bool
        Keep taxa that no measured distance joins to the others (e.g.
        saturated against every other sequence) in the repaired matrix and
        the trees, with a made-up fill marked ``filled_without_evidence`` in
        ``changes.tsv``. By default they are left out and named
        (``left_out_taxa`` in repair.json and impact.json).

    Returns
    -------
    JobResult

    Examples
    --------
    >>> import tempfile
    >>> r = run_job("example_sequences/dna_clean.fasta", tempfile.mkdtemp(), progress=False)  # doctest: +SKIP
    >>> r.repair.report.changed_entries  # doctest: +SKIP
    0
    """
    from seqdist.audit.report import audit
    from seqdist.impact.compare import impact, remedy_table
    from seqdist.io.alignment import read_alignment
    from seqdist.io.matrices import OutputSet, format_matrix
    from seqdist.io.newick import read_newick_file
    from seqdist.models.distances import pairwise_distances, undefined_message
    from seqdist.repair import repair
    from seqdist.report.html import render_html
    from seqdist.trees.build import build_tree

    t_all = time.perf_counter()
    seconds = {}
    check_outdir(outdir)
    if seed is None or not 0 <= int(seed) <= 2**32 - 1:
        raise InputError(f"seed must be an integer from 0 to {2**32 - 1}, got {seed!r}")
    if workers is not None and int(workers) < 1:
        raise InputError(f"workers must be a positive integer, got {workers!r}")
    if bootstrap < 0:
        raise InputError(f"bootstrap must be 0 or more, got {bootstrap!r}")
    if truth == "auto":
        truth = _find_truth(alignment)
    say = info if progress else (lambda *_: None)

    from seqdist.repair.engine import load_objective
    from seqdist.trees.build import METHODS

    load_objective(objective)  # a bad objective fails before any work
    if method not in METHODS:
        raise InputError(f"unknown tree method '{method}' (choose from {', '.join(METHODS)})")
    t = time.perf_counter()
    aln = read_alignment(alignment, in_format, alphabet)
    say(f"[1/5] distances: {alignment}")
    dres = pairwise_distances(aln, model, gamma=gamma, gaps=gaps, variance=True, progress=progress, warn=False)
    if dres.undefined:
        from seqdist.core.console import warn

        warn(undefined_message(dres, hint="(they stay missing in distances.tsv; all in distances.json)"))
    dm = dres.matrix
    seconds["distances"] = time.perf_counter() - t
    say(f"      {dm.n} sequences x {aln.length} columns, model {dres.model}, "
        f"{len(dres.undefined)} undefined pairs ({seconds['distances']:.2f} s)")
    if dm.n < 3:
        raise InputError(f"{alignment}: {dm.n} sequences; the job needs at least 3")

    t = time.perf_counter()
    say("[2/5] audit: triangles, lower bound, tree-likeness, suspect sequences")
    from seqdist.audit.suspects import find_suspects

    arep = audit(dm, seed=seed, suspects=False)
    # the suspects with what only the columns can show (block incongruence, gaps)
    # with --bootstrap, the placement instability (leaf stability) joins the evidence (shown, not scored)
    arep.suspects = find_suspects(dm, audit_report=arep, alignment=aln, model=dres.model, gamma=gamma,
                                  gaps=gaps, seed=seed, replicates=bootstrap)
    seconds["audit"] = time.perf_counter() - t
    sus = arep.suspects.suspects
    say(f"      {arep.violated} of {arep.checked_triangles} checked triangles violated; "
        f"{len(sus)} suspect sequence{'s' if len(sus) != 1 else ''}"
        f"{': ' + ', '.join(x.label for x in sus[:8]) + (' ...' if len(sus) > 8 else '') if sus else ''} "
        f"({seconds['audit']:.2f} s)")

    t = time.perf_counter()
    weights = None
    if weighted is None:
        # weights only where they change the result and the model gives variances
        weighted = objective in WEIGHTED_OBJECTIVES and dres.variance is not None
        if objective in WEIGHTED_OBJECTIVES and not weighted:
            say(f"      model {dres.model} has no variance formula: the repair is unweighted")
    if weighted:
        if dres.variance is None:
            raise ParameterError.text(f"{{weighted}} needs variances, and model {dres.model} has no variance "
                                      "formula", "weighted")
        weights = inverse_variance_weights(dres.variance, dm)
    unmeasured = unmeasured_reasons(dres.undefined, dm.labels)
    common = dict(weights=weights, time_limit=time_limit, seed=seed, progress=progress,
                  keep_unmeasured=keep_unmeasured, unmeasured_reasons=unmeasured, source=FILES["distances"])
    suspects = suspects_to_leave_out(dm, arep.suspects, keep_unmeasured)
    drop = bool(suspects) and not keep_suspects
    say(f"[3/5] repair: objective {objective}{' (inverse-variance weights)' if weighted else ''}"
        + (f", {len(suspects)} suspect sequence{'s' if len(suspects) != 1 else ''} "
           f"{'left out' if drop else 'kept'}" if suspects else ""))
    rres = repair(dm, objective, leave_out=suspects if drop else None, **common)
    if drop:
        from seqdist.core.console import warn

        shown = "; ".join(f"{lab} ({why.removeprefix(REASON_PREFIX)})"
                          for lab, why in list(suspects.items())[:5])
        more = f"; and {len(suspects) - 5} more" if len(suspects) > 5 else ""
        warn(f"{len(suspects)} suspect sequence{'s' if len(suspects) != 1 else ''} left out of the repaired "
             f"matrix and its tree (--keep-suspects keeps them): {shown}{more}")
    other = None
    if suspects:
        # the other choice, so that the report shows what leaving the suspects out did
        import warnings

        from seqdist.core.errors import DataWarning

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DataWarning)  # the main repair has said it already
            other = repair(dm, objective, leave_out=None if drop else suspects, **{**common, "progress": False})
    rep = rres.report
    seconds["repair"] = time.perf_counter() - t
    left = f", {len(rep.left_out_taxa)} taxa left out" if rep.left_out_taxa else ""
    made_up = (f" ({rep.filled_without_evidence} without evidence)" if rep.filled_without_evidence else "")
    say(f"      {rep.changed_entries} of {rep.observed_entries} measured entries changed, "
        f"{rep.filled_entries} missing filled{made_up}{left}, "
        f"{'optimal' if rep.optimal else 'not proven optimal'} ({seconds['repair']:.2f} s)")

    t = time.perf_counter()
    say(f"[4/5] trees ({method}) before and after repair, compared")
    truth_tree = None
    if truth:
        truth_tree = read_newick_file(truth)
        truth_tree.check_labels(truth)
        if set(truth_tree.labels()) != set(dm.labels):
            raise InputError(f"{truth}: the reference tree's leaves differ from the alignment's ids")
    reasons = {lab: (f"kept by the repair with a made-up value, {why}" if keep_unmeasured
                     else f"left out by the repair, {why}") for lab, why in rep.unmeasured_taxa.items()}
    reasons.update({lab: f"left out as a {why}" for lab, why in suspects.items() if drop})
    ires = impact(dm, rres.matrix, method, truth=truth_tree, drop_incomplete=True,
                  names=("measured", "repaired"), reasons=reasons)
    other_tree = build_tree(other.matrix, method) if other is not None else None
    if other_tree is not None:
        chosen = "repaired, suspects left out" if drop else "repaired, suspects kept"
        alt = "repaired, suspects kept" if drop else "repaired, suspects left out"
        table = remedy_table({"measured": ires.tree_before, chosen: ires.tree_after, alt: other_tree},
                             truth_tree)
        table.chosen = chosen
        table.suspects = list(suspects)
        # the two choices about the suspects, on the taxa both trees hold
        table.rf_with_without_suspects = table.rf_between[1][2]
        ires.report.remedies = table
    if bootstrap:
        from seqdist.impact.support import add_support

        add_support(ires, aln, replicates=bootstrap, model=dres.model, objective=objective, seed=seed,
                    gamma=gamma, gaps=gaps, workers=workers, keep_unmeasured=keep_unmeasured,
                    weighted=bool(weighted))
    seconds["trees"] = time.perf_counter() - t

    t = time.perf_counter()
    say("[5/5] report")
    options = {"alignment": alignment, "in_format": in_format, "alphabet": dres.alphabet, "model": dres.model,
               "gamma": gamma, "gaps": gaps, "objective": objective, "weighted": weighted, "method": method,
               "truth": truth, "time_limit": time_limit, "seed": seed, "bootstrap": bootstrap,
               "keep_unmeasured": keep_unmeasured, "keep_suspects": keep_suspects}
    command = command_line(alignment, options)
    audit_dict, audit_times = split_times(arep.to_dict())
    rep_dict, repair_times = split_times(rep.to_dict())
    irep, impact_times = split_times(ires.report.to_dict())
    texts = {}
    texts["distances"] = format_matrix(dm, "tsv")
    texts["sites"] = format_matrix(dres.sites, "tsv")
    if dres.variance is not None:
        texts["variance"] = format_matrix(dres.variance, "tsv")
    import json

    from seqdist.io.matrices import to_jsonable

    def js(obj):
        return json.dumps(to_jsonable(obj), indent=2, allow_nan=False) + "\n"

    texts["distances_json"] = js(dres.summary())
    texts["audit_json"] = js(audit_dict)
    texts["audit_text"] = arep.summary(source=FILES["distances"])
    texts["repaired"] = format_matrix(rres.matrix, "tsv")
    texts["repair_json"] = js({**rep_dict, "input": FILES["distances"]})
    texts["changes"] = rres.changes_text()
    if weights is not None:
        texts["weights"] = format_matrix(weights, "tsv")
    texts["tree_before"] = ires.tree_before.to_newick()
    texts["tree_after"] = ires.tree_after.to_newick()
    if other_tree is not None:
        texts["tree_with_suspects" if drop else "tree_without_suspects"] = other_tree.to_newick()
    texts["impact_json"] = js(irep)
    made_up_pairs = [(c[0], c[1]) for c in rres.changes if c[5] == "filled_without_evidence"]
    texts["report"] = render_html(ires, names=("measured", "repaired"),
                                  title=f"seqdist report: {os.path.basename(alignment)}",
                                  preamble=job_section(os.path.basename(alignment), dres, aln.length, arep, rep,
                                                       objective, weighted),
                                  reference=truth, command=command,
                                  made_up_pairs=made_up_pairs,
                                  lead=left_out_section(rep) + suspects_section(arep, ires.report, keep_suspects),
                                  extra_trees=[("repaired, suspects kept" if drop else "repaired, suspects left out",
                                                other_tree)] if other_tree is not None else None)
    seconds["report"] = time.perf_counter() - t
    seconds["total"] = time.perf_counter() - t_all

    manifest = {
        "seqdist_version": __version__,
        "command": "run",
        "command_line": command,
        "options": options,
        "seeds": {"audit_quartets": seed, "repair": seed, "bootstrap": seed if bootstrap else None},
        "inputs": {alignment: _file_sha256(alignment), **({truth: _file_sha256(truth)} if truth else {})},
        "outputs": {FILES[k]: _sha256(v) for k, v in sorted(texts.items(), key=lambda kv: FILES[kv[0]])},
        "python": platform.python_version(),
        "seconds": {k: round(v, 3) for k, v in seconds.items()},
        "step_times": {"audit": audit_times, "repair": repair_times, "impact": impact_times},
        "note": "repaired.tsv is altered data: report the objective and changes.tsv with any published result",
    }
    texts["manifest"] = js(manifest)
    try:
        os.makedirs(outdir, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{outdir}: cannot make the output folder ({exc.strerror})") from None
    paths = {}
    with OutputSet() as out:
        for key, text in texts.items():
            paths[key] = os.path.join(outdir, FILES[key])
            out.add_text(paths[key], text)
    say(f"done in {seconds['total']:.1f} s: report {paths['report']}")
    return JobResult(outdir=outdir, files=paths, distances=dres, audit=arep, repair=rres, impact=ires,
                     seconds=seconds)


def _esc(x) -> str:
    import html

    return html.escape(str(x), quote=True)


def _names(labels, limit: int = 8) -> str:
    shown = ", ".join(_esc(x) for x in labels[:limit])
    return shown + (f" and {len(labels) - limit} more" if len(labels) > limit else "")


def left_out_section(rep: RepairReport) -> str:
    """The html box, first on the page, naming taxa left out or kept with made-up values."""
    why = rep.unmeasured_taxa
    if not why:
        return ""
    labels = list(why)
    detail = "; ".join(f"{_esc(lab)}: {_esc(why[lab])}" for lab in labels[:8])
    rest = rep.n_input - len(labels)
    if set(labels) <= set(rep.left_out_taxa):
        return (f'<div class="caution"><b>Left out: {_names(labels)}.</b> No measured distance joins '
                f"{'it' if len(labels) == 1 else 'them'} to the other {rest:,} taxa ({detail}), so nothing "
                "can be said of where they belong. They are not in <code>repaired.tsv</code> nor in the trees. "
                "(<code>--keep-unmeasured</code> keeps them with a made-up value instead.)</div>")
    return (f'<div class="caution"><b>Made-up values: {_names(labels)}.</b> No measured distance joins '
            f"{'it' if len(labels) == 1 else 'them'} to the other taxa ({detail}). Kept on request "
            f"(<code>--keep-unmeasured</code>), their {rep.filled_without_evidence:,} distances to the rest "
            f"are one made-up value ({rep.between_groups_value or 0:.6g}), not evidence, marked "
            "<code>filled_without_evidence</code> in <code>changes.tsv</code> and drawn black in the heatmap. "
            "Where they sit in the repaired tree says nothing about the data.</div>")


def suspects_section(audit: AuditReport, impact_report: ImpactReport, keep_suspects: bool) -> str:
    """The html that leads the report: the suspect sequences and their evidence, then
    what each remedy did to the tree, on the same taxa."""
    found = audit.suspects
    sus = found.suspects if found is not None else []
    thr = found.threshold if found is not None else None
    out = ['<h2>Suspect sequences</h2>']
    if not sus:
        out.append(f'<p>No sequence looks bad: no taxon\'s combined score reaches the threshold {thr:g} '
                   "(statistics and threshold: docs/suspects.md).</p>" if thr is not None else "<p>None.</p>")
    else:
        rows = []
        unmeasured = set(impact_report.left_out_reasons)
        table = impact_report.remedies
        remedied = set(table.suspects or []) if table is not None else set()
        for x in sus:
            reasons = "<br>".join(_esc(r) for r in x.reasons) or "&nbsp;"
            note = (" (no measured distance to the others)" if x.label in unmeasured - remedied else "")
            rows.append(f'<tr><td class="l"><b>{_esc(x.label)}</b>{_esc(note)}</td><td>{x.score:.3g}</td>'
                        f'<td class="l">{reasons}</td></tr>')
        out.append(f"<p>{len(sus)} sequence{'s' if len(sus) != 1 else ''} look{'s' if len(sus) == 1 else ''} bad: "
                   f"a combined score of per-taxon statistics at or above {thr:g} (docs/suspects.md). Look at "
                   "them before trusting any tree: a chimera, a contaminant, a misaligned or very gappy "
                   "sequence spoils its whole row, and no repair moves it to its place.</p>")
        out.append('<table><tr><th class="l">sequence</th><th>score</th><th class="l">evidence</th></tr>'
                   + "".join(rows) + "</table>")
    table = impact_report.remedies
    if table is not None:
        n = table.n_compared
        has_truth = any(r.rf_to_truth is not None for r in table.rows)
        head = (f'<tr><th class="l">tree</th><th>taxa</th><th>Robinson-Foulds to the measured tree '
                f'(on the {n} common taxa)</th>'
                + (f"<th>Robinson-Foulds to the reference (on the {n} common taxa)</th>"
                   "<th>to the reference, on its own taxa (normalised)</th>" if has_truth else "") + "</tr>")
        rows = []
        for r in table.rows:
            mark = " (chosen)" if r.name == table.chosen else ""
            cells = f'<td class="l">{_esc(r.name)}{mark}</td><td>{r.n_taxa}</td><td>{r.rf_to_first}</td>'
            if has_truth:
                own = r.rf_to_truth_own_taxa_normalized
                cells += (f"<td>{r.rf_to_truth} ({r.rf_to_truth_normalized:.3f})</td>"
                          f"<td>{'' if own is None else f'{own:.3f}'}</td>")
            rows.append(f"<tr>{cells}</tr>")
        left = ("left out of the repaired matrix and its tree (the default; <code>--keep-suspects</code> keeps "
                "them)" if not keep_suspects else "kept, as asked (<code>--keep-suspects</code>); the tree "
                "without them is built for comparison")
        out.append(f"<h3>What each remedy did to the tree</h3><p>The suspects ({_esc(', '.join(table.suspects))}) "
                   f"are {left}. Every tree is compared on the {n} taxa all of them hold"
                   + ("; the last column scores each tree on all of its own taxa, which shows what keeping "
                      "the suspects costs" if has_truth else "") + ".</p>")
        out.append(f"<table>{head}{''.join(rows)}</table>")
        between = table.rf_with_without_suspects
        if between is not None:
            same = "the same topology" if between == 0 else f"{between} splits apart (Robinson-Foulds)"
            sup = impact_report.support
            out.append(f"<p>With and without the suspects the repaired trees have {same} on the {n} common taxa."
                       + (f" Bootstrap support ({sup.replicates} column resamples) is given for the measured "
                          "tree and the chosen one, each replicate treated the same way (Triangles and splits, "
                          "below)." if sup else "") + "</p>")
    return "".join(out)


def job_section(alignment: str, distances: DistanceResult, columns: int, audit: AuditReport, repair: RepairReport,
                objective: str, weighted: bool) -> str:
    """The html section on the steps before the trees: data, audit and repair.

    ``alignment`` is the alignment's file name and ``columns`` its length;
    the other arguments are the steps' typed results and the repair's
    settings. Counts and denominators are the ones the JSON files hold:
    ``audit.json`` for the measured matrix (checked triangles: all three
    sides measured), ``repair.json`` for the repair (on the taxa it kept).
    """
    a = audit
    r = repair
    undefined = list(distances.undefined)
    n = distances.matrix.n
    pairs = n * (n - 1) // 2
    alphabet = {"dna": "DNA", "protein": "protein"}.get(distances.alphabet, distances.alphabet)
    rows = []
    rows.append(f"<p><b>Data.</b> {_esc(alignment)}: {n:,} {_esc(alphabet)} sequences x "
                f"{columns:,} columns; model <code>{_esc(distances.model)}</code>; "
                f"{len(undefined):,} of {pairs:,} distances undefined")
    if undefined:
        shown = ", ".join(f"{_esc(p)}-{_esc(q)} ({_esc(why)})" for p, q, why in undefined[:6])
        rows.append(f" ({shown}{', ...' if len(undefined) > 6 else ''}; left missing in <code>distances.tsv</code>, "
                    "listed in <code>distances.json</code>)")
    rows.append(".</p>")
    viol = a.violated
    tri = a.triangles
    checked = a.checked_triangles
    lb = a.min_changes_lower_bound
    unchecked = f" ({tri - checked:,} of {tri:,} not checked: a side is missing)" if checked < tri else ""
    if viol:
        rows.append(f"<p><b>Audit.</b> {viol:,} of {checked:,} checked triangles break the triangle inequality"
                    f"{unchecked}; largest excess {a.max_violation:.4g}; any repair must change at "
                    f"least {lb:,} entr{'y' if lb == 1 else 'ies'}.")
        names = a.taxa_most_involved(5)
        if names:
            rows.append(f" Taxa most involved: {', '.join(_esc(x) for x in names)}.")
        rows.append("</p>")
    else:
        rows.append(f"<p><b>Audit.</b> None of the {checked:,} checked triangles breaks the triangle inequality"
                    f"{unchecked}: the measured entries need no repair.</p>")
    bound = "proven optimal" if r.optimal else f"lower bound {r.lower_bound:.6g}, not proven optimal"
    how = []
    if r.filled_by_path:
        how.append(f"{r.filled_by_path:,} by shortest paths through measured entries")
    if r.filled_without_evidence:
        how.append(f"{r.filled_without_evidence:,} without evidence (one made-up value)")
    filled_text = f"{r.filled_entries:,} missing entries filled" + (f" ({'; '.join(how)})" if how else "")
    left = r.left_out_taxa
    reasons = r.left_out_reasons
    suspects = [lab for lab in left if str(reasons.get(lab, "")).startswith(REASON_PREFIX)]
    unmeasured = [lab for lab in left if lab not in suspects]
    parts = ([f"{_names(unmeasured)} left out (no measured distance to the others)"] if unmeasured else []) + (
        [f"{_names(suspects)} left out as suspect sequences"] if suspects else [])
    left_text = (f" {'; '.join(parts)}; the repair is on the other {r.n:,} taxa." if left else "")
    r_tri = r.triangles
    r_checked = r.checked_triangles_before
    before_of = f" of {r_checked:,} checked" if r_checked < r_tri else ""
    vb = r.violated_before_leaving_out
    leaving = (f"; {vb:,} were violated before the taxa were left out"
               if vb is not None and vb != r.violated_before else "")
    rows.append(f"<p><b>Repair.</b> Objective <code>{_esc(objective)}</code>"
                f"{' weighted by inverse variance' if weighted else ''}:{left_text} "
                f"{r.changed_entries:,} of {r.observed_entries:,} measured entries changed, "
                f"{filled_text}; objective value {r.objective_value:.6g} ({bound}); violated triangles "
                f"{r.violated_before:,}{before_of} before, {r.violated_after:,} after "
                f"(of {r_tri:,}){leaving}. "
                "Each changed or filled entry is listed in <code>changes.tsv</code>, with how it was made.</p>")
    return '<h2>From alignment to metric</h2><div class="summary">' + "".join(rows) + "</div>"
