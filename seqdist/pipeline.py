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
from typing import TYPE_CHECKING, Callable, Iterable, Sequence, TypeVar

from seqdist import __version__
from seqdist.audit.suspects import REASON_PREFIX
from seqdist.core.console import info
from seqdist.core.errors import InputError
from seqdist.models.distances import inverse_variance_weights  # noqa: F401  (the weights of --weighted; public here too)
from seqdist.repair.registry import WEIGHTED_OBJECTIVES

if TYPE_CHECKING:  # the types of JobResult's fields, without importing them for `seqdist --help`
    from seqdist.audit.report import AuditReport
    from seqdist.audit.suspects import SuspectReport
    from seqdist.core.matrix import DistanceMatrix
    from seqdist.impact.compare import ImpactResult
    from seqdist.impact.result import ImpactReport
    from seqdist.models.distances import DistanceResult
    from seqdist.repair.engine import RepairResult
    from seqdist.repair.result import RepairReport

__all__ = ["JobResult", "split_times", "check_outdir", "unmeasured_reasons", "rres_unmeasured",
           "suspects_to_leave_out", "command_line", "find_truth", "OPTION_DEFAULTS", "resolve_weighted", "Step",
           "STEPS", "STEP_NAMES", "job_options", "step_arguments", "step_files", "run_step", "run_job",
           "find_alignments", "alignment_name", "left_out_section", "suspects_section", "job_section"]

#: a report (or part of one) that split_times gives back cleaned, as the same type
_Doc = TypeVar("_Doc")

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
    # with --bootstrap: the majority-rule consensus of the replicates' trees (support in percent)
    "consensus_before": "consensus_before.nwk",
    "consensus_after": "consensus_after.nwk",
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


def split_times(obj: _Doc, path: str = "") -> tuple[_Doc, dict[str, object]]:
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


def unmeasured_reasons(undefined: Iterable[tuple[str, str, str]], labels: Sequence[str]) -> dict:
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


def rres_unmeasured(dm: DistanceMatrix, keep_unmeasured: bool) -> list:
    """Taxa the repair leaves out as unmeasured (none when they are kept)."""
    from seqdist.repair import unmeasured_taxa

    return [] if keep_unmeasured else list(unmeasured_taxa(dm))


def suspects_to_leave_out(dm: DistanceMatrix, suspect_report: SuspectReport | None,
                          keep_unmeasured: bool = False) -> dict:
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
    if suspect_report is None:  # an audit.json without the suspects block: none were searched
        return {}
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


def find_truth(alignment_path: str) -> str | None:
    """The reference tree beside an alignment, as ``run`` finds it: ``NAME.true.nwk``, else ``NAME.nwk``.

    Examples
    --------
    >>> find_truth("example_sequences/dna_clean.fasta")  # doctest: +SKIP
    'example_sequences/dna_clean.true.nwk'
    """
    base = os.path.splitext(alignment_path)[0]
    for cand in (base + ".true.nwk", base + ".nwk"):
        if os.path.isfile(cand):
            return cand
    return None


# ----------------------------------------------------------------- finding alignments in a folder
_COMPRESSED = {b"\x1f\x8b": (".gz", "gzip"), b"BZh": (".bz2", "bz2")}


def _head(path: str, size: int = 1 << 16) -> str:
    """The first ``size`` bytes of a file as text, gzip and bz2 opened by their first bytes ("" when unreadable)."""
    import bz2
    import gzip

    try:
        with open(path, "rb") as fh:
            magic = fh.read(3)
        opener = gzip.open if magic[:2] == b"\x1f\x8b" else bz2.open if magic == b"BZh" else open
        with opener(path, "rb") as fh:
            data = fh.read(size)
    except (OSError, EOFError, ValueError):
        return ""
    if b"\x00" in data:
        return ""
    return data.decode("utf-8", errors="replace")


def _has_characters(path: str) -> bool:
    """A NEXUS file holds an alignment when it has a DATA or CHARACTERS block (a TREES block alone is not one)."""
    import re

    pattern = re.compile(r"\bbegin\s+(data|characters)\s*;", re.IGNORECASE)
    size = 1 << 16
    while True:
        text = _head(path, size)
        if pattern.search(text) or len(text) < size:
            return bool(pattern.search(text))
        size *= 8  # a long TAXA block first: look further


def _alignment_format(path: str) -> str | None:
    """The alignment format of a file, from its extension or, failing that, its first line; None: not one."""
    from seqdist.io.alignment import REGISTRY, guess_path_format

    stripped = path
    for suffix, _ in _COMPRESSED.values():
        if path.lower().endswith(suffix):
            stripped = path[: -len(suffix)]
    fmt = guess_path_format(stripped)
    if fmt is None:
        lines = [line.strip() for line in _head(path, 4096).splitlines() if line.strip()]
        first = lines[0] if lines else ""
        fmt = next((f.name for f in REGISTRY.values() if f.first_line is not None and f.first_line(first)), None)
    if fmt == "nexus" and not _has_characters(path):
        return None
    return fmt


def alignment_name(path: str) -> str:
    """The job name of an alignment file: its file name without the extension (and without ``.gz``/``.bz2``).

    Examples
    --------
    >>> alignment_name("data/a.fasta.gz"), alignment_name("b.sto")
    ('a', 'b')
    """
    base = os.path.basename(path)
    for suffix, _ in _COMPRESSED.values():
        if base.lower().endswith(suffix):
            base = base[: -len(suffix)]
    return os.path.splitext(base)[0] or base


def find_alignments(folder: str) -> dict:
    """Every alignment in ``folder``, found by extension or by content: ``{name: path}``, sorted by name.

    A file counts when its extension names an alignment format or, whatever its extension, its
    first line is one the readers recognise (``#NEXUS``, ``>``, ``CLUSTAL``, ``# STOCKHOLM``...),
    compressed or not; a NEXUS file counts only with a DATA or CHARACTERS block (one holding only
    TREES is not an alignment). Hidden files are skipped.

    Raises
    ------
    InputError
        ``folder`` is not a folder, or two alignments would have the same name (``a.fasta`` and
        ``a.aln`` both give ``a``): both files are named.

    Examples
    --------
    >>> find_alignments("example_sequences")  # doctest: +SKIP
    {'dna_clean': 'example_sequences/dna_clean.fasta', ...}
    """
    if not os.path.isdir(folder):
        raise InputError(f"{folder}: not a folder")
    found: dict = {}
    for entry in sorted(os.listdir(folder)):
        path = os.path.join(folder, entry)
        if entry.startswith(".") or not os.path.isfile(path) or _alignment_format(path) is None:
            continue
        name = alignment_name(path)
        if name in found:
            raise InputError(f"{found[name]} and {path}: both would be the job '{name}'; rename one "
                             "(each alignment's results go into a folder named after it)")
        found[name] = path
    return dict(sorted(found.items()))


# ----------------------------------------------------------------- the steps
#: The options of :func:`run_job` that change its files, with their defaults ("auto" truth: the
#: tree beside the alignment, see :func:`find_truth`; None weighted: see :func:`resolve_weighted`).
OPTION_DEFAULTS = {"in_format": None, "alphabet": "auto", "model": None, "gamma": None, "gaps": "pairwise",
                   "objective": DEFAULT_OBJECTIVE, "weighted": None, "method": "nj", "truth": "auto",
                   "time_limit": None, "seed": 1, "bootstrap": 0, "keep_unmeasured": False,
                   "keep_suspects": False}

_FLAGS = {"in_format": "--in-format", "alphabet": "--alphabet", "model": "--model", "gamma": "--gamma",
          "gaps": "--gaps", "objective": "--objective", "method": "--method", "truth": "--truth",
          "time_limit": "--time-limit", "seed": "--seed", "bootstrap": "--bootstrap"}


def resolve_weighted(objective: str, weighted: bool | None) -> bool:
    """Whether the repair is weighted: ``weighted``, or when None, whether weights change the objective's result.

    (``run`` always computes variances, so every model can be weighted.)

    Examples
    --------
    >>> resolve_weighted("shrink", None), resolve_weighted("l2", None), resolve_weighted("l2", False)
    (False, True, False)
    """
    return objective in WEIGHTED_OBJECTIVES if weighted is None else bool(weighted)


@dataclass(frozen=True)
class Step:
    """One step of the job: what it reads, what it writes, which options it uses, and its function.

    ``run_job`` runs :data:`STEPS` in order in one process; the Snakemake workflow
    (workflows/) makes one rule per step from the same list, each running
    ``seqdist run ALIGNMENT --outdir DIR --step NAME`` (:func:`run_step`).

    Attributes
    ----------
    name : str
        The step's name (``--step NAME``, the workflow's rule name).
    description : str
        What it does, in a few words.
    options : tuple of str
        The options (keys of :data:`OPTION_DEFAULTS`) it uses; the step sees no other, and the
        workflow passes only these (so changing another option does not rerun it).
    reads : callable
        ``reads(options) -> tuple`` of what it reads with these (resolved) options: ``"alignment"``,
        ``"truth"`` (the reference tree, when there is one) or keys of :data:`FILES`.
    writes : callable
        ``writes(options) -> tuple`` of the keys of :data:`FILES` it always writes with these options.
    may_write : tuple of str
        Keys it writes or not depending on the data (the other choice about suspect sequences; the
        bootstrap consensus trees, made when a replicate gave that tree).
    """

    name: str
    description: str
    options: tuple
    reads: Callable = field(repr=False)
    writes: Callable = field(repr=False)
    may_write: tuple = ()
    function: Callable = field(repr=False, default=None)


def _js(obj) -> str:
    import json

    from seqdist.io.matrices import to_jsonable

    return json.dumps(to_jsonable(obj), indent=2, allow_nan=False) + "\n"


class _Job:
    """One run's alignment, folder and options, and the files made so far.

    In one process (``run_job``) the files stay in memory until every step is done and the
    matrices are handed on as objects; a single step (``run_step``) reads its inputs from the
    folder. Matrices are written with ``repr`` values, so both give the same numbers.
    """

    def __init__(self, alignment: str, outdir: str, options: dict, progress: bool, workers, from_dir: bool):
        self.alignment_path = alignment
        self.outdir = outdir
        self.all_options = options
        self.o: dict = {}
        self.progress = progress
        self.workers = workers
        self.from_dir = from_dir
        self.texts: dict = {}
        self.objects: dict = {}
        self.seconds: dict = {}
        self.step_times: dict = {}
        self.t_all = time.perf_counter()
        self.say = info if progress else (lambda *_: None)

    # ------------------------------------------------------------ inputs
    def path(self, key: str) -> str:
        return os.path.join(self.outdir, FILES[key])

    def text(self, key: str) -> str:
        if key in self.texts:
            return self.texts[key]
        from seqdist.io.matrices import read_text

        return read_text(self.path(key), "file")

    def doc(self, key: str) -> dict:
        import json

        try:
            return json.loads(self.text(key))
        except ValueError as exc:
            raise InputError(f"{self.path(key)}: not a JSON document ({exc}); run its step again") from None

    def matrix(self, key: str):
        if key not in self.objects:
            from seqdist.io.matrices import read_matrix

            self.objects[key] = read_matrix(self.path(key), "tsv")
        return self.objects[key]

    def alignment(self):
        if "alignment" not in self.objects:
            from seqdist.io.alignment import read_alignment

            self.objects["alignment"] = read_alignment(self.alignment_path, self.o["in_format"], self.o["alphabet"])
        return self.objects["alignment"]

    # ------------------------------------------------------------ outputs
    def keep(self, key: str, text: str, obj=None) -> None:
        self.texts[key] = text
        if obj is not None:
            self.objects[key] = obj

    def run(self, step: Step) -> None:
        # the step sees only the options it declares: the workflow passes no other
        self.o = {k: self.all_options[k] for k in step.options}
        step.function(self)


def _suspect_report(audit_doc: dict):
    """The suspects of ``audit.json`` as a :class:`~seqdist.audit.suspects.SuspectReport` (None: none searched)."""
    from seqdist.audit.suspects import Suspect, SuspectReport

    block = audit_doc.get("suspects")
    if block is None:
        return None

    def one(d):
        return Suspect(d["label"], d["score"], d["evidence"], tuple(d["reasons"]))

    return SuspectReport(suspects=[one(d) for d in audit_doc["suspect_taxa"]],
                         ranking=[one(d) for d in block["ranking"]], threshold=block["threshold"],
                         statistics=list(block["statistics"]))


class _AuditView:
    """What the report page takes from the audit, read from ``audit.json``."""

    def __init__(self, doc: dict):
        self.violated = doc["violated_triangles"]
        self.triangles = doc["triangles"]
        self.checked_triangles = doc["checked_triangles"]
        self.min_changes_lower_bound = doc["min_changes_lower_bound"]
        self.max_violation = doc["max_violation"]
        self.suspects = _suspect_report(doc)
        self._taxa = doc["taxa"]  # every taxon, most violated triangles first

    def taxa_most_involved(self, limit: int = 5) -> list:
        return [t["taxon"] for t in self._taxa[:limit] if t["violated_triangles"]]


class _DistancesView:
    """What the report page takes from the distances step, read from ``distances.json``."""

    def __init__(self, doc: dict, matrix):
        self.matrix = matrix
        self.model = doc["model"]
        self.alphabet = doc["alphabet"]
        self.undefined = tuple((u["a"], u["b"], u["reason"]) for u in doc["undefined"])


def _undefined(doc: dict) -> list:
    return [(u["a"], u["b"], u["reason"]) for u in doc["undefined"]]


def _step_distances(job: _Job) -> None:
    from seqdist.io.matrices import format_matrix
    from seqdist.models.distances import pairwise_distances, undefined_message

    t = time.perf_counter()
    o = job.o
    aln = job.alignment()
    job.say(f"[1/5] distances: {job.alignment_path}")
    dres = pairwise_distances(aln, o["model"], gamma=o["gamma"], gaps=o["gaps"], variance=True,
                              progress=job.progress, warn=False)
    if dres.undefined:
        from seqdist.core.console import warn

        warn(undefined_message(dres, hint="(they stay missing in distances.tsv; all in distances.json)"))
    dm = dres.matrix
    job.seconds["distances"] = time.perf_counter() - t
    job.say(f"      {dm.n} sequences x {aln.length} columns, model {dres.model}, "
            f"{len(dres.undefined)} undefined pairs ({job.seconds['distances']:.2f} s)")
    if dm.n < 3:
        raise InputError(f"{job.alignment_path}: {dm.n} sequences; the job needs at least 3")
    job.objects["dres"] = dres
    job.keep("distances", format_matrix(dm, "tsv"), dm)
    job.keep("sites", format_matrix(dres.sites, "tsv"))
    job.keep("variance", format_matrix(dres.variance, "tsv"), dres.variance)
    job.keep("distances_json", _js(dres.summary()))


def _step_audit(job: _Job) -> None:
    from seqdist.audit.report import audit
    from seqdist.audit.suspects import find_suspects

    t = time.perf_counter()
    o = job.o
    dm = job.matrix("distances")
    model = job.doc("distances_json")["model"]
    job.say("[2/5] audit: triangles, lower bound, tree-likeness, suspect sequences")
    arep = audit(dm, seed=o["seed"], suspects=False)
    # the suspects with what only the columns can show (block incongruence, gaps)
    # with --bootstrap, the placement instability (leaf stability) joins the evidence (shown, not scored)
    arep.suspects = find_suspects(dm, audit_report=arep, alignment=job.alignment(), model=model, gamma=o["gamma"],
                                  gaps=o["gaps"], seed=o["seed"], replicates=o["bootstrap"])
    job.seconds["audit"] = time.perf_counter() - t
    sus = arep.suspects.suspects
    job.say(f"      {arep.violated} of {arep.checked_triangles} checked triangles violated; "
            f"{len(sus)} suspect sequence{'s' if len(sus) != 1 else ''}"
            f"{': ' + ', '.join(x.label for x in sus[:8]) + (' ...' if len(sus) > 8 else '') if sus else ''} "
            f"({job.seconds['audit']:.2f} s)")
    audit_dict, job.step_times["audit"] = split_times(arep.to_dict())
    job.objects["arep"] = arep
    job.keep("audit_json", _js(audit_dict))
    job.keep("audit_text", arep.summary(source=FILES["distances"]))


def _repair_common(job: _Job, dm, weighted: bool) -> dict:
    """The repair's settings shared by the chosen repair and the other choice about suspects."""
    o = job.o
    return dict(weights=job.matrix("weights") if weighted else None, time_limit=o["time_limit"], seed=o["seed"],
                progress=job.progress, keep_unmeasured=o["keep_unmeasured"],
                unmeasured_reasons=unmeasured_reasons(_undefined(job.doc("distances_json")), dm.labels),
                source=FILES["distances"])


def _step_repair(job: _Job) -> None:
    from seqdist.io.matrices import format_matrix
    from seqdist.repair import repair

    t = time.perf_counter()
    o = job.o
    objective = o["objective"]
    dm = job.matrix("distances")
    weighted = resolve_weighted(objective, o["weighted"])
    if weighted:
        weights = inverse_variance_weights(job.matrix("variance"), dm)
        job.keep("weights", format_matrix(weights, "tsv"), weights)
    common = _repair_common(job, dm, weighted)
    suspects = suspects_to_leave_out(dm, _suspect_report(job.doc("audit_json")), o["keep_unmeasured"])
    drop = bool(suspects) and not o["keep_suspects"]
    job.say(f"[3/5] repair: objective {objective}{' (inverse-variance weights)' if weighted else ''}"
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
    rep = rres.report
    job.seconds["repair"] = time.perf_counter() - t
    left = f", {len(rep.left_out_taxa)} taxa left out" if rep.left_out_taxa else ""
    made_up = (f" ({rep.filled_without_evidence} without evidence)" if rep.filled_without_evidence else "")
    job.say(f"      {rep.changed_entries} of {rep.observed_entries} measured entries changed, "
            f"{rep.filled_entries} missing filled{made_up}{left}, "
            f"{'optimal' if rep.optimal else 'not proven optimal'} ({job.seconds['repair']:.2f} s)")
    rep_dict, job.step_times["repair"] = split_times(rep.to_dict())
    job.objects["rres"] = rres
    job.objects["made_up_pairs"] = [(c[0], c[1]) for c in rres.changes if c[5] == "filled_without_evidence"]
    job.keep("repaired", format_matrix(rres.matrix, "tsv"), rres.matrix)
    job.keep("repair_json", _js({**rep_dict, "input": FILES["distances"]}))
    job.keep("changes", rres.changes_text())


def _repair_report(doc: dict):
    """The :class:`~seqdist.repair.result.RepairReport` of ``repair.json`` (its times were taken out)."""
    from seqdist.repair.result import RepairReport

    doc = {k: v for k, v in doc.items() if k != "input"}
    return RepairReport.from_dict({**doc, "seconds": 0.0})


def _made_up_pairs(job: _Job) -> list:
    """The pairs filled without evidence, from the repair (one process) or ``changes.tsv``."""
    if "made_up_pairs" in job.objects:
        return job.objects["made_up_pairs"]
    import csv
    import io

    rows = csv.reader(io.StringIO(job.text("changes")), delimiter="\t", quotechar='"')
    next(rows, None)
    return [(r[0], r[1]) for r in rows if len(r) >= 6 and r[5] == "filled_without_evidence"]


def _step_impact(job: _Job) -> None:
    from seqdist.impact.compare import impact, remedy_table
    from seqdist.io.newick import read_newick_file
    from seqdist.repair import repair
    from seqdist.report.html import render_html
    from seqdist.trees.build import build_tree

    t = time.perf_counter()
    o = job.o
    alignment, objective, method, truth = job.alignment_path, o["objective"], o["method"], o["truth"]
    weighted = resolve_weighted(objective, o["weighted"])
    dm = job.matrix("distances")
    dj = job.doc("distances_json")
    audit_doc = job.doc("audit_json")
    rep = _repair_report(job.doc("repair_json"))
    suspects = suspects_to_leave_out(dm, _suspect_report(audit_doc), o["keep_unmeasured"])
    drop = bool(suspects) and not o["keep_suspects"]
    job.say(f"[4/5] trees ({method}) before and after repair, compared")
    truth_tree = None
    if truth:
        truth_tree = read_newick_file(truth)
        truth_tree.check_labels(truth)
        if set(truth_tree.labels()) != set(dm.labels):
            raise InputError(f"{truth}: the reference tree's leaves differ from the alignment's ids")
    reasons = {lab: (f"kept by the repair with a made-up value, {why}" if o["keep_unmeasured"]
                     else f"left out by the repair, {why}") for lab, why in rep.unmeasured_taxa.items()}
    reasons.update({lab: f"left out as a {why}" for lab, why in suspects.items() if drop})
    ires = impact(dm, job.matrix("repaired"), method, truth=truth_tree, drop_incomplete=True,
                  names=("measured", "repaired"), reasons=reasons)
    other_tree = None
    if suspects:
        # the other choice, so that the report shows what leaving the suspects out did
        import warnings

        from seqdist.core.errors import DataWarning

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DataWarning)  # the chosen repair has said it already
            other = repair(dm, objective, leave_out=None if drop else suspects,
                           **{**_repair_common(job, dm, weighted), "progress": False})
        other_tree = build_tree(other.matrix, method)
        chosen = "repaired, suspects left out" if drop else "repaired, suspects kept"
        alt = "repaired, suspects kept" if drop else "repaired, suspects left out"
        table = remedy_table({"measured": ires.tree_before, chosen: ires.tree_after, alt: other_tree},
                             truth_tree)
        table.chosen = chosen
        table.suspects = list(suspects)
        # the two choices about the suspects, on the taxa both trees hold
        table.rf_with_without_suspects = table.rf_between[1][2]
        ires.report.remedies = table
    tallies = None
    if o["bootstrap"]:
        from seqdist.impact.support import add_support

        tallies = add_support(ires, job.alignment(), replicates=o["bootstrap"], model=dj["model"], objective=objective,
                    seed=o["seed"], gamma=o["gamma"], gaps=o["gaps"], workers=job.workers,
                    keep_unmeasured=o["keep_unmeasured"], weighted=weighted)
    job.seconds["trees"] = time.perf_counter() - t

    t = time.perf_counter()
    job.say("[5/5] report")
    options = {"alignment": alignment, "in_format": o["in_format"], "alphabet": dj["alphabet"], "model": dj["model"],
               "gamma": o["gamma"], "gaps": o["gaps"], "objective": objective, "weighted": weighted,
               "method": method, "truth": truth, "time_limit": o["time_limit"], "seed": o["seed"],
               "bootstrap": o["bootstrap"], "keep_unmeasured": o["keep_unmeasured"],
               "keep_suspects": o["keep_suspects"]}
    command = command_line(alignment, options)
    irep, job.step_times["impact"] = split_times(ires.report.to_dict())
    job.objects["ires"] = ires
    job.keep("tree_before", ires.tree_before.to_newick())
    job.keep("tree_after", ires.tree_after.to_newick())
    if other_tree is not None:
        job.keep("tree_with_suspects" if drop else "tree_without_suspects", other_tree.to_newick())
    if tallies is not None:  # None of a side only when no replicate gave that tree
        for which in ("before", "after"):
            con = tallies.consensus(which)
            if con is not None:
                job.keep(f"consensus_{which}", con.to_newick())
    job.keep("impact_json", _js(irep))
    name = os.path.basename(alignment)
    job.keep("report", render_html(
        ires, names=("measured", "repaired"), title=f"seqdist report: {name}",
        preamble=job_section(name, _DistancesView(dj, dm), dj["columns"], _AuditView(audit_doc), rep, objective,
                             weighted),
        reference=truth, command=command, made_up_pairs=_made_up_pairs(job),
        lead=left_out_section(rep) + suspects_section(_AuditView(audit_doc), ires.report, o["keep_suspects"]),
        extra_trees=[("repaired, suspects kept" if drop else "repaired, suspects left out", other_tree)]
        if other_tree is not None else None))
    job.seconds["report"] = time.perf_counter() - t
    job.seconds["total"] = time.perf_counter() - job.t_all

    # the checksum of every file of the job: this step's from memory, the others' from memory
    # (one process) or from the folder (they are this step's inputs)
    outputs = {}
    for key in _written_keys(options):
        outputs[FILES[key]] = (_sha256(job.texts[key]) if key in job.texts
                               else _file_sha256(job.path(key)))
    for key in FILES:  # this step's (the manifest is written last, not listed)
        if key in job.texts and FILES[key] not in outputs:
            outputs[FILES[key]] = _sha256(job.texts[key])
    manifest = {
        "seqdist_version": __version__,
        "command": "run",
        "command_line": command,
        "options": options,
        "seeds": {"audit_quartets": o["seed"], "repair": o["seed"], "bootstrap": o["seed"] if o["bootstrap"] else None},
        "inputs": {alignment: _file_sha256(alignment), **({truth: _file_sha256(truth)} if truth else {})},
        "outputs": dict(sorted(outputs.items())),
        "python": platform.python_version(),
        # one process: every step; a single step (the workflow): that step's (the others: benchmark files)
        "seconds": {k: round(v, 3) for k, v in job.seconds.items()},
        "step_times": job.step_times,
        "note": "repaired.tsv is altered data: report the objective and changes.tsv with any published result",
    }
    job.keep("manifest", _js(manifest))


def _all(*keys):
    return lambda options: keys


def _repair_reads(options) -> tuple:
    weighted = resolve_weighted(options["objective"], options["weighted"])
    return ("distances", "distances_json", "audit_json") + (("variance",) if weighted else ())


def _repair_writes(options) -> tuple:
    weighted = resolve_weighted(options["objective"], options["weighted"])
    return ("repaired", "repair_json", "changes") + (("weights",) if weighted else ())


_READ_ALIGNMENT = ("in_format", "alphabet")

#: The job, step by step (``run_job`` runs them in order; the workflow makes one rule of each).
STEPS = (
    Step("distances", "distances, compared columns and variances from the alignment",
         _READ_ALIGNMENT + ("model", "gamma", "gaps"), _all("alignment"),
         _all("distances", "sites", "variance", "distances_json"), function=_step_distances),
    Step("audit", "triangle audit, lower bound, tree-likeness and the suspect sequences",
         _READ_ALIGNMENT + ("gamma", "gaps", "seed", "bootstrap"), _all("alignment", "distances", "distances_json"),
         _all("audit_json", "audit_text"), function=_step_audit),
    Step("repair", "the repaired matrix, with or without the suspect sequences",
         ("objective", "weighted", "seed", "time_limit", "keep_unmeasured", "keep_suspects"), _repair_reads,
         _repair_writes, function=_step_repair),
    Step("impact", "trees before and after repair compared, the report page and the manifest",
         tuple(OPTION_DEFAULTS), lambda options: _impact_reads(options),
         _all("tree_before", "tree_after", "impact_json", "report", "manifest"),
         ("tree_with_suspects", "tree_without_suspects", "consensus_before", "consensus_after"), _step_impact),
)
_STEPS_BY_NAME = {s.name: s for s in STEPS}
#: The names of the steps, in order.
STEP_NAMES = tuple(_STEPS_BY_NAME)


def _written_keys(options: dict) -> list:
    """The keys of the files the steps before ``impact`` always write with these options."""
    keys = []
    for s in STEPS:
        if s.name != "impact":
            keys += [k for k in s.writes(options) if k not in keys]
    return keys


def _impact_reads(options) -> tuple:
    # the manifest holds the checksum of every file, so the last step reads them all
    return ("alignment",) + (("truth",) if options["truth"] else ()) + tuple(_written_keys(options))


def job_options(alignment: str, **options: object) -> dict:
    """The options of a job, checked, with the defaults filled in and the reference tree found.

    Keys are those of :data:`OPTION_DEFAULTS`; ``truth="auto"`` becomes the tree found by
    :func:`find_truth` (or None). Raises :class:`InputError` for a bad value.

    Examples
    --------
    >>> job_options("a.fasta", objective="l2", truth=None)["objective"]
    'l2'
    """
    from seqdist.repair.engine import load_objective
    from seqdist.trees.build import METHODS

    unknown = sorted(set(options) - set(OPTION_DEFAULTS))
    if unknown:
        raise TypeError(f"unknown job option {unknown[0]!r}")
    o = {**OPTION_DEFAULTS, **options}
    seed = o["seed"]
    if seed is None or isinstance(seed, bool) or not 0 <= int(seed) <= 2**32 - 1:
        raise InputError(f"seed must be an integer from 0 to {2**32 - 1}, got {seed!r}")
    if o["bootstrap"] < 0:
        raise InputError(f"bootstrap must be 0 or more, got {o['bootstrap']!r}")
    load_objective(o["objective"])  # a bad objective fails before any work
    if o["method"] not in METHODS:
        raise InputError(f"unknown tree method '{o['method']}' (choose from {', '.join(METHODS)})")
    if o["truth"] == "auto":
        o["truth"] = find_truth(alignment)
    return o


def step_arguments(step: str | Step, options: dict) -> list:
    """The ``seqdist run`` arguments that give step ``step`` its options (those it uses, when not the default).

    The workflow puts them after ``seqdist run ALIGNMENT --outdir DIR --step NAME``; each is one
    argument (the workflow quotes each for the shell).

    Examples
    --------
    >>> step_arguments("repair", {"objective": "l2", "seed": 7, "model": "jc69"})
    ['--objective', 'l2', '--seed', '7']
    """
    step = _STEPS_BY_NAME[step] if isinstance(step, str) else step
    o = {**OPTION_DEFAULTS, **options}
    out = []
    for key in step.options:
        v = o[key]
        if v == OPTION_DEFAULTS[key] or v is None:
            continue
        if key == "weighted":
            out.append("--weighted" if v else "--unweighted")
        elif key in ("keep_unmeasured", "keep_suspects"):
            out.append("--" + key.replace("_", "-"))
        elif key == "truth" and v is False:
            out.append("--no-truth")
        else:
            out += [_FLAGS[key], str(v)]
    return out


def step_files(step: str | Step, alignment: str, outdir: str, options: dict) -> tuple[list, list]:
    """The files step ``step`` reads and the files it always writes, as paths.

    ``options`` as :func:`job_options` returns them (``truth`` found or None). What a step writes
    only for some data (:attr:`Step.may_write`) is not listed.

    Examples
    --------
    >>> o = job_options("a.fasta", truth=None)
    >>> step_files("audit", "a.fasta", "out", o)
    (['a.fasta', 'out/distances.tsv', 'out/distances.json'], ['out/audit.json', 'out/audit.txt'])
    """
    step = _STEPS_BY_NAME[step] if isinstance(step, str) else step
    where = {"alignment": alignment, "truth": options.get("truth")}
    reads = [where[k] if k in where else os.path.join(outdir, FILES[k]) for k in step.reads(options)]
    writes = [os.path.join(outdir, FILES[k]) for k in step.writes(options)]
    return reads, writes


def _producer(key: str) -> str:
    for s in STEPS:
        if key in s.writes({**OPTION_DEFAULTS, "weighted": True}) or key in s.may_write:
            return s.name
    return "?"


def _publish(job: _Job, steps) -> dict:
    """Write the job's files into its folder, all or nothing; remove what these steps wrote before but
    not now (the other choice about suspects), so the folder never mixes two runs."""
    from seqdist.io.matrices import OutputSet

    try:
        os.makedirs(job.outdir, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{job.outdir}: cannot make the output folder ({exc.strerror})") from None
    paths = {}
    with OutputSet() as out:
        for key, text in job.texts.items():
            paths[key] = job.path(key)
            out.add_text(paths[key], text)
    for s in steps:
        for key in s.may_write:
            if key not in job.texts and os.path.isfile(job.path(key)):
                os.remove(job.path(key))
    return paths


def run_step(alignment: str, outdir: str, step: str, *, workers: int | None = None, progress: bool = True,
             **options: object) -> dict:
    """Run one step of the job, reading its inputs from ``outdir`` and writing its files there.

    This is what each rule of the Snakemake workflow runs (``seqdist run ALIGNMENT --outdir DIR
    --step NAME``): the steps of :data:`STEPS` run one after another give the same files as
    :func:`run_job` (apart from the times in ``manifest.json``).

    Returns
    -------
    dict of str to str
        Path of each file written, by its key in ``FILES``.

    Examples
    --------
    >>> for s in STEP_NAMES:  # doctest: +SKIP
    ...     run_step("example_sequences/dna_clean.fasta", "out", s, progress=False)
    """
    if step not in _STEPS_BY_NAME:
        raise InputError(f"unknown step '{step}' (choose from {', '.join(STEP_NAMES)})")
    check_outdir(outdir)
    if workers is not None and int(workers) < 1:
        raise InputError(f"workers must be a positive integer, got {workers!r}")
    opts = job_options(alignment, **options)
    s = _STEPS_BY_NAME[step]
    for key in s.reads(opts):
        if key in ("alignment", "truth"):
            continue  # their readers name them when missing
        path = os.path.join(outdir, FILES[key])
        if not os.path.isfile(path):
            raise InputError(f"{path}: missing; step '{step}' reads it (run step '{_producer(key)}' first, "
                             "with the same options)")
    job = _Job(alignment, outdir, opts, progress, workers, from_dir=True)
    job.run(s)
    return _publish(job, [s])


def run_job(alignment: str, outdir: str, *, in_format: str | None = None, alphabet: str = "auto",
            model: str | None = None, gamma: float | None = None, gaps: str = "pairwise",
            objective: str = DEFAULT_OBJECTIVE, weighted: bool | None = None, method: str = "nj",
            truth: str | None = "auto", time_limit: float | None = None, seed: int = 1,
            bootstrap: int = 0, workers: int | None = None, progress: bool = True,
            keep_unmeasured: bool = False, keep_suspects: bool = False) -> JobResult:
    """Run the whole job on one alignment and write every file into ``outdir``.

    The job is the steps of :data:`STEPS`, run in order in this process (the Snakemake
    workflow runs the same steps as separate rules, see :func:`run_step`).

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
        weights (all but ``shrink``).
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
    check_outdir(outdir)
    if workers is not None and int(workers) < 1:
        raise InputError(f"workers must be a positive integer, got {workers!r}")
    opts = job_options(alignment, in_format=in_format, alphabet=alphabet, model=model, gamma=gamma, gaps=gaps,
                       objective=objective, weighted=weighted, method=method, truth=truth,
                       time_limit=time_limit, seed=seed, bootstrap=bootstrap, keep_unmeasured=keep_unmeasured,
                       keep_suspects=keep_suspects)
    job = _Job(alignment, outdir, opts, progress, workers, from_dir=False)
    for step in STEPS:
        job.run(step)
    paths = _publish(job, STEPS)
    job.say(f"done in {job.seconds['total']:.1f} s: report {paths['report']}")
    o = job.objects
    return JobResult(outdir=outdir, files=paths, distances=o["dres"], audit=o["arep"], repair=o["rres"],
                     impact=o["ires"], seconds=job.seconds)


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
