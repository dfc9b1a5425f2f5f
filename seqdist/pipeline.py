"""The whole job in one call: alignment -> distances -> audit -> repair -> trees -> report.

:func:`run_job` chains the public functions of the feature modules with
sensible defaults and writes every intermediate file in the contract's
formats plus a manifest (version, options, seeds, checksums) into one folder.
All files of a run are staged and published together (see
:class:`seqdist.io.OutputSet`): a failed run leaves the folder as it was.
"""

from __future__ import annotations

import hashlib
import os
import platform
import time
from dataclasses import dataclass, field

import numpy as np

from . import __version__
from .console import info
from .errors import InputError

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
    "impact_json": "impact.json",
    "report": "report.html",
    "manifest": "manifest.json",
}


@dataclass
class JobResult:
    """What :func:`run_job` did: the output folder, file paths and the step reports."""

    outdir: str
    files: dict
    distances: dict
    audit: dict
    repair: dict
    impact: dict
    seconds: dict = field(default_factory=dict)


def inverse_variance_weights(variance, matrix):
    """Repair weights 1/variance, scaled to mean 1 over the observed entries.

    Poorly supported entries (large variance: few compared columns, near
    saturation) get small weights, so the repair moves them first. Entries
    whose variance is undefined or zero get the largest finite weight.

    Examples
    --------
    >>> from seqdist import DistanceMatrix
    >>> v = DistanceMatrix.from_array([[0, .01, .04], [.01, 0, .01], [.04, .01, 0]], list("abc"))
    >>> w = inverse_variance_weights(v, v)
    >>> round(float(w.values[0, 1] / w.values[0, 2]), 6)
    4.0
    """
    from .matrix import DistanceMatrix

    var = np.array(variance.values, dtype=float)
    obs = ~np.isnan(matrix.values)
    np.fill_diagonal(obs, False)
    with np.errstate(divide="ignore", invalid="ignore"):
        w = 1.0 / var
    good = obs & np.isfinite(w) & (var > 0)
    top = float(w[good].max()) if good.any() else 1.0
    w = np.where(obs & ~good, top, w)
    w = np.where(obs, w, 0.0)
    mean = float(w[obs].mean()) if obs.any() else 1.0
    w = w / (mean if mean > 0 else 1.0)
    np.fill_diagonal(w, 0.0)
    return DistanceMatrix._trusted(0.5 * (w + w.T), matrix.labels)


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


def command_line(alignment: str, options: dict) -> str:
    """The ``seqdist run`` command that gives the same files (for the report and the manifest).

    Examples
    --------
    >>> command_line("a.fasta", {"model": "k80", "objective": "fewest", "seed": 1, "weighted": False})
    'seqdist run a.fasta --outdir DIR --model k80 --objective fewest --seed 1'
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
    for key, flag in (("weighted", "--weighted"), ("keep_unmeasured", "--keep-unmeasured")):
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
            objective: str = "fewest", weighted: bool = False, method: str = "nj",
            truth: str | None = "auto", time_limit: float | None = None, seed: int = 1,
            bootstrap: int = 0, workers: int | None = None, progress: bool = True,
            keep_unmeasured: bool = False) -> JobResult:
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
        As for :func:`seqdist.distances.pairwise_distances`.
    objective : str
        Repair objective (default ``fewest``).
    weighted : bool
        Weight the repair by the inverse variance of each distance, so that
        poorly supported entries move first (the weights are written too).
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
    >>> r.repair["changed_entries"]  # doctest: +SKIP
    0
    """
    from .alignment import read_alignment
    from .audit import audit
    from .distances import pairwise_distances, undefined_message
    from .io import OutputSet, format_matrix
    from .repair import repair
    from .trees.html import render_html
    from .trees.impact import impact
    from .trees.newick import read_newick_file

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

    from .repair.engine import load_objective
    from .trees.build import METHODS

    load_objective(objective)  # a bad objective fails before any work
    if method not in METHODS:
        raise InputError(f"unknown tree method '{method}' (choose from {', '.join(METHODS)})")
    t = time.perf_counter()
    aln = read_alignment(alignment, in_format, alphabet)
    say(f"[1/5] distances: {alignment}")
    dres = pairwise_distances(aln, model, gamma=gamma, gaps=gaps, variance=True, progress=progress, warn=False)
    if dres.undefined:
        from .console import warn

        warn(undefined_message(dres, hint="(they stay missing in distances.tsv; all in distances.json)"))
    dm = dres.matrix
    seconds["distances"] = time.perf_counter() - t
    say(f"      {dm.n} sequences x {aln.length} columns, model {dres.model}, "
        f"{len(dres.undefined)} undefined pairs ({seconds['distances']:.2f} s)")
    if dm.n < 3:
        raise InputError(f"{alignment}: {dm.n} sequences; the job needs at least 3")

    t = time.perf_counter()
    say("[2/5] audit: triangles, lower bound, tree-likeness, suspect sequences")
    from .suspects import find_suspects

    arep = audit(dm, seed=seed, suspects=False)
    # the suspects with what only the columns can show (block incongruence, gaps)
    arep.suspects = find_suspects(dm, audit_report=arep, alignment=aln, model=dres.model, gamma=gamma,
                                  gaps=gaps, seed=seed)
    audit_dict, audit_times = split_times(arep.to_dict())
    seconds["audit"] = time.perf_counter() - t
    sus = arep.suspects.suspects
    say(f"      {arep.violated} of {arep.checked_triangles} checked triangles violated; "
        f"{len(sus)} suspect sequence{'s' if len(sus) != 1 else ''}"
        f"{': ' + ', '.join(x.label for x in sus[:8]) + (' ...' if len(sus) > 8 else '') if sus else ''} "
        f"({seconds['audit']:.2f} s)")

    t = time.perf_counter()
    weights = None
    if weighted:
        if dres.variance is None:
            raise InputError(f"model {dres.model} has no variance formula; run without --weighted")
        weights = inverse_variance_weights(dres.variance, dm)
    say(f"[3/5] repair: objective {objective}{' (inverse-variance weights)' if weighted else ''}")
    rres = repair(dm, objective, weights=weights, time_limit=time_limit, seed=seed, progress=progress,
                  keep_unmeasured=keep_unmeasured, unmeasured_reasons=unmeasured_reasons(dres.undefined, dm.labels),
                  source=FILES["distances"])
    rep, repair_times = split_times(dict(rres.report))
    seconds["repair"] = time.perf_counter() - t
    left = f", {len(rep['left_out_taxa'])} taxa left out" if rep["left_out_taxa"] else ""
    made_up = (f" ({rep['filled_without_evidence']} without evidence)" if rep["filled_without_evidence"] else "")
    say(f"      {rep['changed_entries']} of {rep['observed_entries']} measured entries changed, "
        f"{rep['filled_entries']} missing filled{made_up}{left}, "
        f"{'optimal' if rep['optimal'] else 'not proven optimal'} ({seconds['repair']:.2f} s)")

    t = time.perf_counter()
    say(f"[4/5] trees ({method}) before and after repair, compared")
    truth_tree = None
    if truth:
        truth_tree = read_newick_file(truth)
        truth_tree.check_labels(truth)
        if set(truth_tree.labels()) != set(dm.labels):
            raise InputError(f"{truth}: the reference tree's leaves differ from the alignment's ids")
    reasons = {lab: (f"kept by the repair with a made-up value, {why}" if keep_unmeasured
                     else f"left out by the repair, {why}") for lab, why in rep["unmeasured_taxa"].items()}
    ires = impact(dm, rres.matrix, method, truth=truth_tree, drop_incomplete=True,
                  names=("measured", "repaired"), reasons=reasons)
    if bootstrap:
        from .trees.support import add_support

        add_support(ires, aln, replicates=bootstrap, model=dres.model, objective=objective, seed=seed,
                    gamma=gamma, gaps=gaps, workers=workers, keep_unmeasured=keep_unmeasured)
    seconds["trees"] = time.perf_counter() - t

    t = time.perf_counter()
    say("[5/5] report")
    options = {"alignment": alignment, "in_format": in_format, "alphabet": dres.alphabet, "model": dres.model,
               "gamma": gamma, "gaps": gaps, "objective": objective, "weighted": weighted, "method": method,
               "truth": truth, "time_limit": time_limit, "seed": seed, "bootstrap": bootstrap,
               "keep_unmeasured": keep_unmeasured}
    command = command_line(alignment, options)
    irep, impact_times = split_times(dict(ires.report))
    texts = {}
    texts["distances"] = format_matrix(dm, "tsv")
    texts["sites"] = format_matrix(dres.sites, "tsv")
    if dres.variance is not None:
        texts["variance"] = format_matrix(dres.variance, "tsv")
    from .io import to_jsonable
    import json

    def js(obj):
        return json.dumps(to_jsonable(obj), indent=2, allow_nan=False) + "\n"

    texts["distances_json"] = js(dres.summary())
    texts["audit_json"] = js(audit_dict)
    texts["audit_text"] = arep.summary(source=FILES["distances"])
    texts["repaired"] = format_matrix(rres.matrix, "tsv")
    rep_out = dict(rep)
    rep_out["input"] = FILES["distances"]
    texts["repair_json"] = js(rep_out)
    texts["changes"] = rres.changes_text()
    if weights is not None:
        texts["weights"] = format_matrix(weights, "tsv")
    texts["tree_before"] = ires.tree_before.to_newick()
    texts["tree_after"] = ires.tree_after.to_newick()
    texts["impact_json"] = js(irep)
    job = {"alignment": os.path.basename(alignment), "n": dm.n, "columns": aln.length, "alphabet": dres.alphabet,
           "model": dres.model, "undefined": list(dres.undefined), "audit": audit_dict, "repair": rep,
           "objective": objective, "weighted": weighted}
    made_up_pairs = [(c[0], c[1]) for c in rres.changes if c[5] == "filled_without_evidence"]
    texts["report"] = render_html(ires, names=("measured", "repaired"),
                                  title=f"seqdist report: {os.path.basename(alignment)}",
                                  preamble=job_section(job), reference=truth, command=command,
                                  made_up_pairs=made_up_pairs, lead=left_out_section(rep))
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
    return JobResult(outdir=outdir, files=paths, distances=dres.summary(), audit=audit_dict, repair=rep,
                     impact=irep, seconds=seconds)


def _esc(x) -> str:
    import html

    return html.escape(str(x), quote=True)


def _names(labels, limit: int = 8) -> str:
    shown = ", ".join(_esc(x) for x in labels[:limit])
    return shown + (f" and {len(labels) - limit} more" if len(labels) > limit else "")


def left_out_section(rep: dict) -> str:
    """The html box, first on the page, naming taxa left out or kept with made-up values."""
    why = rep.get("unmeasured_taxa") or {}
    if not why:
        return ""
    labels = list(why)
    detail = "; ".join(f"{_esc(lab)}: {_esc(why[lab])}" for lab in labels[:8])
    if rep.get("left_out_taxa"):
        rest = rep["n"]
        return (f'<div class="caution"><b>Left out: {_names(labels)}.</b> No measured distance joins '
                f"{'it' if len(labels) == 1 else 'them'} to the other {rest:,} taxa ({detail}), so nothing "
                "can be said of where they belong. They are not in <code>repaired.tsv</code> nor in the trees, "
                f"and every figure below is on the other {rest:,} taxa. (<code>--keep-unmeasured</code> keeps them "
                "with a made-up value instead.)</div>")
    return (f'<div class="caution"><b>Made-up values: {_names(labels)}.</b> No measured distance joins '
            f"{'it' if len(labels) == 1 else 'them'} to the other taxa ({detail}). Kept on request "
            f"(<code>--keep-unmeasured</code>), their {rep.get('filled_without_evidence', 0):,} distances to the rest "
            f"are one made-up value ({rep.get('between_groups_value') or 0:.6g}), not evidence, marked "
            "<code>filled_without_evidence</code> in <code>changes.tsv</code> and drawn black in the heatmap. "
            "Where they sit in the repaired tree says nothing about the data.</div>")


def job_section(job: dict) -> str:
    """The html section on the steps before the trees: data, audit and repair.

    Counts and denominators are the ones the JSON files hold: ``audit.json``
    for the measured matrix (checked triangles: all three sides measured),
    ``repair.json`` for the repair (on the taxa it kept).
    """
    a = job["audit"]
    r = job["repair"]
    undefined = job["undefined"]
    n = job["n"]
    pairs = n * (n - 1) // 2
    alphabet = {"dna": "DNA", "protein": "protein"}.get(job["alphabet"], job["alphabet"])
    rows = []
    rows.append(f"<p><b>Data.</b> {_esc(job['alignment'])}: {n:,} {_esc(alphabet)} sequences x "
                f"{job['columns']:,} columns; model <code>{_esc(job['model'])}</code>; "
                f"{len(undefined):,} of {pairs:,} distances undefined")
    if undefined:
        shown = ", ".join(f"{_esc(p)}-{_esc(q)} ({_esc(why)})" for p, q, why in undefined[:6])
        rows.append(f" ({shown}{', ...' if len(undefined) > 6 else ''}; left missing in <code>distances.tsv</code>, "
                    "listed in <code>distances.json</code>)")
    rows.append(".</p>")
    viol = a.get("violated_triangles", 0)
    tri = a.get("triangles", 0)
    checked = a.get("checked_triangles", tri)
    lb = a.get("min_changes_lower_bound", 0)
    unchecked = f" ({tri - checked:,} of {tri:,} not checked: a side is missing)" if checked < tri else ""
    if viol:
        rows.append(f"<p><b>Audit.</b> {viol:,} of {checked:,} checked triangles break the triangle inequality"
                    f"{unchecked}; largest excess {a.get('max_violation', 0):.4g}; any repair must change at "
                    f"least {lb:,} entr{'y' if lb == 1 else 'ies'}.")
        worst = a.get("taxa") or []
        names = [w.get("taxon") for w in worst[:5] if isinstance(w, dict) and w.get("violated_triangles")]
        if names:
            rows.append(f" Taxa most involved: {', '.join(_esc(x) for x in names)}.")
        rows.append("</p>")
    else:
        rows.append(f"<p><b>Audit.</b> None of the {checked:,} checked triangles breaks the triangle inequality"
                    f"{unchecked}: the measured entries need no repair.</p>")
    bound = "proven optimal" if r.get("optimal") else f"lower bound {r.get('lower_bound', 0):.6g}, not proven optimal"
    filled = r.get("filled_entries", 0)
    how = []
    if r.get("filled_by_path"):
        how.append(f"{r['filled_by_path']:,} by shortest paths through measured entries")
    if r.get("filled_without_evidence"):
        how.append(f"{r['filled_without_evidence']:,} without evidence (one made-up value)")
    filled_text = f"{filled:,} missing entries filled" + (f" ({'; '.join(how)})" if how else "")
    left = r.get("left_out_taxa") or []
    left_text = (f" {_names(left)} left out (no measured distance to the others); the repair is on the "
                 f"other {r.get('n', 0):,} taxa." if left else "")
    r_tri = r.get("triangles", 0)
    r_checked = r.get("checked_triangles_before", r_tri)
    before_of = f" of {r_checked:,} checked" if r_checked < r_tri else ""
    rows.append(f"<p><b>Repair.</b> Objective <code>{_esc(job['objective'])}</code>"
                f"{' weighted by inverse variance' if job['weighted'] else ''}:{left_text} "
                f"{r.get('changed_entries', 0):,} of {r.get('observed_entries', pairs):,} measured entries changed, "
                f"{filled_text}; objective value {r.get('objective_value', 0):.6g} ({bound}); violated triangles "
                f"{r.get('violated_before', 0):,}{before_of} before, {r.get('violated_after', 0):,} after "
                f"(of {r_tri:,}). "
                "Each changed or filled entry is listed in <code>changes.tsv</code>, with how it was made.</p>")
    return '<h2>From alignment to metric</h2><div class="summary">' + "".join(rows) + "</div>"
