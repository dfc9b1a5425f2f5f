"""The remedy study of issue 15, as importable functions (the script is bench_remedies.py).

Which remedy for a distance matrix with bad sequences gives the tree closest
to the true one? Each *replicate* is a seeded simulation (32 taxa x 1,000
columns, K80 with kappa drawn from [2, 3], optional gamma rates) with one kind
of planted trouble (a *scenario*); its K80 distance matrix goes through every
*remedy* (no repair, each repair objective with and without inverse-variance
weights, leaving taxa out by several rules); a tree is built from each result
by neighbor joining and BIONJ and scored against the true tree by the
Robinson-Foulds distance, computed with dendropy (an outside library) on the
taxa the tree holds, the true tree pruned to them, divided by 2(n - 3).

Scenarios (planted with :mod:`seqdist.simulate`; the planted taxa are
recorded in each replicate):

* ``clean``: nothing planted;
* ``chimera``: two chimeras, the second half of each copied from the unused
  taxon farthest from it on the true tree (:func:`~seqdist.simulate.plant_chimera`;
  the planted taxa are the chimeras, not the donors);
* ``gappy``: two rows with 70% gaps (:func:`~seqdist.simulate.plant_gappy`);
* ``misread``: two rows with three misread stretches of 50 columns, random
  base calls (:func:`~seqdist.simulate.plant_misread`);
* ``contaminant``: one row replaced by the consensus evolved 0.5 expected
  substitutions per site (:func:`~seqdist.simulate.plant_contaminant`);
* ``saturated``: the two unused taxa farthest apart get terminal branches
  3.0 longer (:func:`~seqdist.simulate.plant_saturated_pair`), so that some
  of their pairs are undefined under K80 (the count per replicate is recorded).

Remedies are one registry, :data:`REMEDIES`: ``name -> function(dm, ctx) ->
(matrix to build the tree from, labels left out)``. A remedy that cannot run
here (a module or option another part of the project has not built yet)
raises :class:`Skipped` with a note.

How "no repair" treats missing entries (``none``): taxa that no path of
measured entries joins to the largest group are left out, as ``seqdist run``
and the repair engine do; every other missing entry is filled by the
shortest path over the *measured* entries, and no measured entry changes.
This keeps the same taxa as the repair objectives (which fill missing
entries the same way, over their repaired entries), so the rows compare like
with like; and it adds nothing the repair objectives would not also have.
Leaving every taxon with a missing entry out instead (what ``run``'s
"measured" tree does) is the separate row ``none_drop_incomplete``: under
saturation it removes the long-branch taxa themselves, so it is partly a
leave-out remedy, scored on fewer taxa.

Every random choice comes from ``numpy.random.SeedSequence([seed, scenario
number, replicate])``, so a replicate is the same whatever other scenarios
or replicates run and in whatever process; :func:`run_replicate` also pins
BLAS and OpenMP (threadpoolctl limits both) to one thread, so results do not depend on the thread count.
"""

from __future__ import annotations

import inspect
import os
import platform
import sys
import warnings
from dataclasses import dataclass, field

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
if ROOT not in sys.path:
    sys.path.insert(0, ROOT)

from seqdist.core.matrix import DistanceMatrix  # noqa: E402

#: Every scenario, in a fixed order: the order number goes into each replicate's seed.
SCENARIOS = ("clean", "chimera", "gappy", "misread", "contaminant", "saturated")

#: Scenarios in which the suspects target applies (issue 15: top 3 in >= 80% of replicates).
SUSPECT_TARGET_SCENARIOS = ("chimera", "gappy", "contaminant")

#: Tree methods scored.
METHODS = ("nj", "bionj")

#: The simulation and planting settings (every replicate; see the module docs).
SETTINGS = {
    "taxa": 32, "columns": 1000, "model": "k80", "kappa_range": [2.0, 3.0], "alpha": None,
    "rate_categories": 4, "scale": 0.05, "gap_rate": 0.005, "gap_length": 3.0,
    "distance_model": "k80", "gaps": "pairwise",
    "chimeras": 2, "gappy_rows": 2, "gappy_fraction": 0.7,
    "misread_rows": 2, "misread_stretches": 3, "misread_length": 50, "misread_how": "random",
    "contaminants": 1, "contaminant_distance": 0.5,
    "saturated_pairs": 1, "saturate_length": 3.0,
}


class Skipped(Exception):
    """A remedy that cannot run in this checkout; the message says why."""


# ------------------------------------------------------------------ replicates
@dataclass
class Replicate:
    """One simulated data set and its distances.

    ``planted`` are the taxa whose data were spoiled (empty for ``clean``);
    ``dres`` is the :class:`seqdist.models.distances.DistanceResult` (K80, with variances).
    """

    scenario: str
    index: int
    seed: int
    kappa: float
    sim: object
    alignment: object
    dres: object
    planted: list
    notes: list = field(default_factory=list)

    @property
    def matrix(self) -> DistanceMatrix:
        return self.dres.matrix


def replicate_rng(seed: int, scenario: str, index: int) -> np.random.Generator:
    """The generator of one replicate: independent of which others run, and where.

    Examples
    --------
    >>> a = replicate_rng(1, "gappy", 3).random()
    >>> a == replicate_rng(1, "gappy", 3).random() != replicate_rng(1, "gappy", 4).random()
    True
    """
    return np.random.default_rng(np.random.SeedSequence([int(seed), SCENARIOS.index(scenario), int(index)]))


def make_replicate(scenario: str, index: int, seed: int = 1, alpha: float | None = None,
                   settings: dict | None = None) -> Replicate:
    """Simulate one replicate of ``scenario`` and compute its K80 distances.

    Parameters
    ----------
    scenario : str
        One of :data:`SCENARIOS`.
    index : int
        Replicate number (0, 1, ...).
    seed : int
        Study seed.
    alpha : float, optional
        Gamma shape of rate variation across sites, used both to simulate and
        in the K80 distance (the model is then right); default equal rates.
    settings : dict, optional
        Overrides of :data:`SETTINGS`.

    Examples
    --------
    >>> r = make_replicate("contaminant", 0, seed=1)
    >>> r.matrix.n, len(r.planted)
    (32, 1)
    """
    from seqdist import simulate as S
    from seqdist.io.alignment import Alignment
    from seqdist.models.distances import pairwise_distances

    if scenario not in SCENARIOS:
        raise ValueError(f"unknown scenario '{scenario}' (choose from {', '.join(SCENARIOS)})")
    st = dict(SETTINGS, **(settings or {}))
    if alpha is not None:
        st["alpha"] = float(alpha)
    rng = replicate_rng(seed, scenario, index)
    kappa = float(rng.uniform(*st["kappa_range"]))
    sim = S.simulate(st["taxa"], st["columns"], "dna", rng, model=st["model"], kappa=kappa, gamma=st["alpha"],
                     gamma_categories=st["rate_categories"], branch_mean=st["scale"],
                     indel_rate=st["gap_rate"], indel_length=st["gap_length"])
    planted: list = []
    if scenario == "chimera":
        for _ in range(st["chimeras"]):
            sim = S.plant_chimera(sim, rng=rng)
            planted.append(sim.planted[-1]["label"])       # the donor's own row is untouched
    elif scenario == "gappy":
        for _ in range(st["gappy_rows"]):
            sim = S.plant_gappy(sim, None, st["gappy_fraction"], rng=rng)
            planted += sim.planted[-1]["labels"]
    elif scenario == "misread":
        for _ in range(st["misread_rows"]):
            sim = S.plant_misread(sim, None, st["misread_stretches"], st["misread_length"], st["misread_how"],
                                  rng=rng)
            planted += sim.planted[-1]["labels"]
    elif scenario == "contaminant":
        for _ in range(st["contaminants"]):
            sim = S.plant_contaminant(sim, None, st["contaminant_distance"], rng=rng)
            planted += sim.planted[-1]["labels"]
    elif scenario == "saturated":
        for _ in range(st["saturated_pairs"]):
            sim = S.plant_saturated_pair(sim, None, st["saturate_length"], rng=rng)
            planted += sim.planted[-1]["labels"]
    aln = Alignment.from_sequences(sim.labels, [s for _, s in sim.records], "dna")
    dres = pairwise_distances(aln, st["distance_model"], gamma=st["alpha"], gaps=st["gaps"], variance=True,
                              progress=False, warn=False)
    return Replicate(scenario, int(index), int(seed), kappa, sim, aln, dres, sorted(planted))


# ------------------------------------------------------------------ remedies
@dataclass
class Context:
    """What a remedy may use besides the matrix.

    ``alignment`` and ``variance`` (K80 large-sample variances), the planted
    labels (for the oracle only), the study seed, the distance options, and
    a cache for work shared by several remedies (the audit, the suspects).
    """

    alignment: object
    variance: DistanceMatrix | None
    planted: list
    seed: int
    model: str = "k80"
    gamma: float | None = None
    gaps: str = "pairwise"
    suspect_replicates: int = 0
    cache: dict = field(default_factory=dict)

    @classmethod
    def of(cls, rep: Replicate, suspect_replicates: int = 0) -> "Context":
        return cls(rep.alignment, rep.dres.variance, list(rep.planted), rep.seed, rep.dres.model, rep.dres.gamma,
                   rep.dres.gaps, suspect_replicates)


def measured_as_is(dm: DistanceMatrix) -> tuple[DistanceMatrix, list]:
    """The measured matrix made usable for a tree without changing a measured entry.

    Taxa that no path of measured entries joins to the largest group are left
    out (as ``seqdist run`` does); other missing entries get the shortest path
    over the measured entries (the engine's fill rule).

    Examples
    --------
    >>> D = np.array([[0, 1, 2, np.nan], [1, 0, np.nan, np.nan], [2, np.nan, 0, np.nan], [np.nan] * 3 + [0]])
    >>> m, out = measured_as_is(DistanceMatrix.from_array(D, list("abcd")))
    >>> out, float(m.values[1, 2])
    (['d'], 3.0)
    """
    from seqdist.repair.engine import fill_missing, unmeasured_taxa

    left = list(unmeasured_taxa(dm))
    if left:
        dm = dm.subset([lab for lab in dm.labels if lab not in set(left)])
    observed = ~np.isnan(dm.values)
    X, _ = fill_missing(dm.values, observed)
    return DistanceMatrix._trusted(X, dm.labels), left


def _leave_out(dm: DistanceMatrix, labels) -> tuple[DistanceMatrix, list]:
    drop = [lab for lab in dm.labels if lab in set(labels)]
    keep = [lab for lab in dm.labels if lab not in set(drop)]
    m, more = measured_as_is(dm.subset(keep))
    return m, drop + more


def _repair(objective: str, weighted: bool):
    def remedy(dm: DistanceMatrix, ctx: Context):
        from seqdist.repair import repair

        weights = None
        if weighted:
            from seqdist.pipeline import inverse_variance_weights

            weights = inverse_variance_weights(ctx.variance, dm)
        r = repair(dm, objective, weights=weights, seed=ctx.seed, progress=False)
        return r.matrix, list(r.report.left_out_taxa)

    remedy.__doc__ = f"repair(dm, '{objective}'){' with inverse-variance weights' if weighted else ''}"
    return remedy


def audit_of(dm: DistanceMatrix, ctx: Context):
    """The audit of ``dm`` (cached in the context), without its lower bounds."""
    if "audit" not in ctx.cache:
        from seqdist.audit.report import audit

        ctx.cache["audit"] = audit(dm, seed=ctx.seed, bounds=False)
    return ctx.cache["audit"]


def suspects_of(dm: DistanceMatrix, ctx: Context, alignment: bool = True):
    """``(suspect labels above the threshold, every label ranked)`` from seqdist.audit.suspects, cached.

    With ``alignment`` (what ``seqdist run`` has) the column statistics count
    too; without, only what the matrix shows (what ``seqdist repair`` and
    ``audit`` have). Raises :class:`Skipped` when the module (or
    ``find_suspects``) does not exist.
    """
    key = "suspects" if alignment else "suspects_matrix"
    if key not in ctx.cache:
        try:
            from seqdist.audit.suspects import find_suspects
        except ImportError as exc:
            raise Skipped(f"seqdist.audit.suspects.find_suspects is not available ({exc})") from None
        kw = dict(alignment=ctx.alignment if alignment else None, model=ctx.model, gamma=ctx.gamma, gaps=ctx.gaps,
                  seed=ctx.seed)
        params = inspect.signature(find_suspects).parameters
        if "replicates" in params:
            kw["replicates"] = ctx.suspect_replicates if alignment else 0
        kw = {k: v for k, v in kw.items() if k in params or any(p.kind == p.VAR_KEYWORD for p in params.values())}
        rep = find_suspects(dm, **kw)
        ctx.cache[key + "_report"] = rep
        d = rep.to_dict() if hasattr(rep, "to_dict") else dict(rep)
        above = [s["label"] for s in d.get("suspect_taxa", [])]
        ranking = [s["label"] for s in d.get("ranking", d.get("suspect_taxa", []))]
        ctx.cache[key] = (above, ranking)
    return ctx.cache[key]


def remedy_none(dm, ctx):
    """The measured matrix (see :func:`measured_as_is`)."""
    return measured_as_is(dm)


def remedy_none_drop_incomplete(dm, ctx):
    """Leave out every taxon with a missing entry, worst first (``run``'s "measured" tree)."""
    from seqdist.impact.compare import incomplete_taxa

    return _leave_out(dm, incomplete_taxa(dm))


def remedy_audit_top_k(dm, ctx):
    """Leave out the audit's k worst taxa by violated triangles (then excess), k = taxa planted."""
    k = len(ctx.planted)
    if k == 0:
        return measured_as_is(dm)
    worst = [t["taxon"] for t in audit_of(dm, ctx).ranked_taxa(k)]
    return _leave_out(dm, worst)


def remedy_planted(dm, ctx):
    """Leave out the taxa truly planted (an oracle no real data set has)."""
    return _leave_out(dm, ctx.planted)


def remedy_suspects(dm, ctx):
    """Leave out every taxon in ``suspect_taxa`` (above the threshold of seqdist.audit.suspects)."""
    above, _ = suspects_of(dm, ctx)
    return _leave_out(dm, above)


def remedy_suspects_matrix(dm, ctx):
    """Leave out the suspects found from the matrix alone (no alignment statistics)."""
    above, _ = suspects_of(dm, ctx, alignment=False)
    return _leave_out(dm, above)


def _suspects_then(objective: str | None, weighted: bool | None):
    """Leave the suspects out as ``seqdist run`` picks them, then repair under ``objective``.

    The suspects are those :func:`seqdist.pipeline.suspects_to_leave_out`
    takes from the alignment's suspect report, the very rule ``run``
    applies. ``objective=None`` and ``weighted=None`` are ``run``'s defaults
    (weighted when the objective's result depends on weights).
    """
    def remedy(dm, ctx):
        from seqdist.pipeline import (
            DEFAULT_OBJECTIVE,
            WEIGHTED_OBJECTIVES,
            inverse_variance_weights,
            suspects_to_leave_out,
        )
        from seqdist.repair import repair

        suspects_of(dm, ctx)
        leave = suspects_to_leave_out(dm, ctx.cache["suspects_report"])
        obj = objective or DEFAULT_OBJECTIVE
        w = obj in WEIGHTED_OBJECTIVES if weighted is None else weighted
        weights = inverse_variance_weights(ctx.variance, dm) if w else None
        r = repair(dm, obj, weights=weights, seed=ctx.seed, progress=False,
                   leave_out=leave or None)
        return r.matrix, list(r.report.left_out_taxa)

    remedy.__doc__ = (f"leave out the suspects, then repair(dm, '{objective or 'DEFAULT_OBJECTIVE'}')"
                      f"{' with inverse-variance weights' if weighted else ''}")
    return remedy


remedy_run_default = _suspects_then(None, None)


def remedy_fewest_taxa(dm, ctx):
    """``repair(dm, 'shrink', leave_out='fewest')``: the fewest taxa whose removal leaves a metric.

    Shrink only fills the missing entries of what is left (a metric needs no
    other change), so the rest of the matrix is the measured one.
    """
    from seqdist.core.errors import InputError
    from seqdist.repair import repair

    try:
        r = repair(dm, "shrink", leave_out="fewest", seed=ctx.seed, progress=False)
    except (TypeError, InputError) as exc:
        # An engine without the option refuses the unknown keyword (TypeError or its option check).
        if "leave_out" in str(exc) or "leave-out" in str(exc):
            raise Skipped(f"seqdist.repair.repair does not take leave_out='fewest' here ({exc})") from None
        raise
    return r.matrix, list(r.report.left_out_taxa)


#: name -> function(dm, ctx) -> (DistanceMatrix for the tree, labels left out). Order = table order.
REMEDIES = {
    "none": remedy_none,
    "none_drop_incomplete": remedy_none_drop_incomplete,
    "shrink": _repair("shrink", False),
    "grow": _repair("grow", False),
    "fewest": _repair("fewest", False),
    "fewest_weighted": _repair("fewest", True),
    "l2": _repair("l2", False),
    "l2_weighted": _repair("l2", True),
    "l1": _repair("l1", False),
    "leave_out_audit_top_k": remedy_audit_top_k,
    "leave_out_suspects": remedy_suspects,
    "leave_out_suspects_matrix": remedy_suspects_matrix,
    "leave_out_fewest_taxa": remedy_fewest_taxa,
    "suspects_then_l2_weighted": _suspects_then("l2", True),
    "run_default": remedy_run_default,
    "leave_out_planted": remedy_planted,
}

#: One line per remedy for the tables' legend.
DESCRIPTIONS = {
    "none": "the measured matrix; missing entries filled by shortest paths over measured entries",
    "none_drop_incomplete": "the measured matrix without every taxon that has a missing entry",
    "shrink": "repair, objective shrink",
    "grow": "repair, objective grow",
    "fewest": "repair, objective fewest (unweighted)",
    "fewest_weighted": "repair, objective fewest, inverse-variance weights",
    "l2": "repair, objective l2 (unweighted)",
    "l2_weighted": "repair, objective l2, inverse-variance weights",
    "l1": "repair, objective l1 (unweighted)",
    "leave_out_audit_top_k": "leave out the audit's k worst taxa by violated triangles (k = taxa planted)",
    "leave_out_suspects": ("leave out the taxa in suspect_taxa (seqdist.audit.suspects with the alignment, "
                           "as run has it)"),
    "leave_out_suspects_matrix": "leave out the suspects found from the matrix alone (as repair and audit have it)",
    "leave_out_fewest_taxa": "leave out the fewest taxa whose removal leaves a metric (repair leave_out='fewest')",
    "suspects_then_l2_weighted": "leave out the suspects (as run picks them), then l2 with inverse-variance weights",
    "run_default": "run's default: leave out the suspects (as run picks them), then DEFAULT_OBJECTIVE (shrink)",
    "leave_out_planted": "leave out the truly planted taxa (oracle)",
}

#: Remedies that drop taxa on purpose (scored on the taxa left).
LEAVE_OUT = ("none_drop_incomplete", "leave_out_audit_top_k", "leave_out_suspects", "leave_out_suspects_matrix",
             "leave_out_fewest_taxa", "suspects_then_l2_weighted", "run_default", "leave_out_planted")


# ------------------------------------------------------------------ scoring
def rf_to_truth(tree_newick: str, truth_newick: str, taxa=None) -> tuple[int, int]:
    """Robinson-Foulds distance (dendropy's symmetric difference, unrooted) to the true tree pruned to the tree's taxa.

    Returns ``(rf, n)`` with ``n`` the taxa compared; normalise by 2(n - 3).
    With ``taxa``, both trees are first pruned to those of them the tree holds.

    Examples
    --------
    >>> rf_to_truth("((a,b),(c,d),e);", "((a,c),(b,d),e);")
    (4, 5)
    >>> rf_to_truth("((a,b),c,d);", "((a,b),(c,(d,x)),e);")
    (0, 4)
    >>> rf_to_truth("((a,b),(c,d),e,f);", "((a,c),(b,d),e,f);", taxa="abcef")
    (2, 5)
    """
    import dendropy
    from dendropy.calculate import treecompare

    tns = dendropy.TaxonNamespace()
    t = dendropy.Tree.get(data=tree_newick, schema="newick", taxon_namespace=tns, preserve_underscores=True,
                          rooting="force-unrooted")
    truth = dendropy.Tree.get(data=truth_newick, schema="newick", taxon_namespace=tns,
                              preserve_underscores=True, rooting="force-unrooted")
    keep = {leaf.taxon.label for leaf in t.leaf_node_iter()}
    if taxa is not None:
        keep &= set(taxa)
        t.retain_taxa_with_labels(keep)
    truth.retain_taxa_with_labels(keep)
    truth.is_rooted = False
    t.is_rooted = False
    pruned = dendropy.TaxonNamespace([tx for tx in tns if tx.label in keep])
    t.migrate_taxon_namespace(pruned)
    truth.migrate_taxon_namespace(pruned)
    return int(treecompare.symmetric_difference(t, truth)), len(keep)


def normalised(rf: int, n: int) -> float:
    """RF / 2(n - 3), the largest RF between two binary unrooted trees on n taxa (0 for n <= 3)."""
    return rf / (2 * (n - 3)) if n > 3 else 0.0


# ------------------------------------------------------------------ one replicate
def _one_thread():
    """Pin BLAS and the kernels' OpenMP threads to one, so results do not depend on how many processes run."""
    try:
        from threadpoolctl import threadpool_limits

        return threadpool_limits(1)
    except ImportError:  # pragma: no cover
        import contextlib

        return contextlib.nullcontext()


def run_replicate(scenario: str, index: int, seed: int = 1, alpha: float | None = None,
                  remedies=None, methods=METHODS, suspect_replicates: int = 0, settings: dict | None = None) -> dict:
    """Simulate one replicate, apply every remedy, build and score the trees; a JSON-ready record.

    The record holds the scenario, replicate number, kappa, planted taxa,
    undefined pairs, and per remedy either ``{"left_out": [...], "nj": {"rf",
    "n", "rf_norm"}, ...}`` or ``{"skipped": note}``; plus the planted taxa's
    ranks by the audit and (when seqdist.audit.suspects exists) by the suspects.
    No clock time is recorded: the record depends only on the inputs.

    Examples
    --------
    >>> rec = run_replicate("clean", 0, remedies=["none"], methods=["nj"])  # doctest: +SKIP
    >>> 0 <= rec["remedies"]["none"]["nj"]["rf_norm"] <= 1  # doctest: +SKIP
    True
    """
    from seqdist.core.errors import SeqdistWarning
    from seqdist.trees.build import build_tree

    names = list(REMEDIES) if remedies is None else list(remedies)
    with warnings.catch_warnings(), _one_thread():
        # The study knows its data are bad: the engine's "left out" and "undefined" notes are expected.
        warnings.simplefilter("ignore", SeqdistWarning)
        rep = make_replicate(scenario, index, seed, alpha, settings)
        ctx = Context.of(rep, suspect_replicates)
        dm = rep.matrix
        truth = rep.sim.tree.newick()
        rec = {"scenario": scenario, "replicate": int(index), "seed": int(seed), "kappa": round(rep.kappa, 6),
               "planted": rep.planted, "undefined_pairs": len(rep.dres.undefined), "remedies": {}}
        for name in names:
            try:
                matrix, left = REMEDIES[name](dm, ctx)
            except Skipped as exc:
                rec["remedies"][name] = {"skipped": str(exc)}
                continue
            out = {"left_out": sorted(left)}
            core = [lab for lab in dm.labels if lab not in set(rep.planted)]
            for method in methods:
                text = build_tree(matrix, method).to_newick()
                rf, n = rf_to_truth(text, truth)
                out[method] = {"rf": rf, "n": n, "rf_norm": round(normalised(rf, n), 6)}
                if rep.planted:
                    # The same tree on the taxa nobody spoiled: does the remedy protect the rest of the tree?
                    rf, n = rf_to_truth(text, truth, core)
                    out[method]["core"] = {"rf": rf, "n": n, "rf_norm": round(normalised(rf, n), 6)}
            rec["remedies"][name] = out
        ranked = [t["taxon"] for t in audit_of(dm, ctx).ranked_taxa()]
        rec["audit_rank"] = {lab: ranked.index(lab) + 1 for lab in rep.planted}
        for key, with_aln in (("suspects", True), ("suspects_matrix", False)):
            try:
                above, ranking = suspects_of(dm, ctx, with_aln)
            except Skipped as exc:
                rec[key] = {"skipped": str(exc)}
            else:
                rec[key] = {"suspect_taxa": above, "rank": {lab: ranking.index(lab) + 1 for lab in rep.planted
                                                            if lab in ranking},
                            "planted_in_top3": all(lab in above[:3] for lab in rep.planted)}
    return rec


def _task(args):
    return run_replicate(*args[:2], **args[2])


def run_study(scenarios=SCENARIOS, replicates: int = 12, seed: int = 1, processes: int = 1,
              alpha: float | None = None, remedies=None, methods=METHODS, suspect_replicates: int = 0,
              settings: dict | None = None, progress=None) -> list:
    """Every replicate of every scenario; records in (scenario order of :data:`SCENARIOS`, replicate) order.

    ``processes`` > 1 runs replicates in that many processes; the records are
    the same whatever the count (each replicate has its own seed and runs on
    one thread). ``progress`` is called with (done, total) after each one.
    """
    kw = dict(seed=seed, alpha=alpha, remedies=remedies, methods=tuple(methods),
              suspect_replicates=suspect_replicates, settings=settings)
    order = [s for s in SCENARIOS if s in set(scenarios)]
    tasks = [(s, i, kw) for s in order for i in range(int(replicates))]
    out = []
    if processes <= 1:
        for k, t in enumerate(tasks):
            out.append(_task(t))
            if progress:
                progress(k + 1, len(tasks))
    else:
        import multiprocessing as mp
        from concurrent.futures import ProcessPoolExecutor

        # spawn: a fresh interpreter per worker, no thread pools inherited through fork.
        with ProcessPoolExecutor(max_workers=int(processes), mp_context=mp.get_context("spawn")) as ex:
            for k, rec in enumerate(ex.map(_task, tasks)):
                out.append(rec)
                if progress:
                    progress(k + 1, len(tasks))
    return out


# ------------------------------------------------------------------ summaries
def sign_test(a, b) -> tuple[int, int, float]:
    """Two-sided sign test of paired values: (times a < b, times a > b, p); ties dropped.

    Examples
    --------
    >>> sign_test([1, 1, 1, 1, 1, 1], [2, 2, 2, 2, 2, 2])
    (6, 0, 0.03125)
    """
    from scipy.stats import binomtest

    a, b = np.asarray(a, float), np.asarray(b, float)
    lo, hi = int((a < b).sum()), int((a > b).sum())
    p = float(binomtest(lo, lo + hi, 0.5).pvalue) if lo + hi else 1.0
    return lo, hi, p


def _score(rec: dict, name: str, method: str, core: bool):
    cell = rec["remedies"].get(name, {}).get(method)
    if cell is None:
        return None
    if core:
        cell = cell.get("core", cell)     # clean replicates: nothing planted, every taxon is core
    return cell["rf_norm"]


def table(records: list, method: str, detail: bool = False, core: bool = False) -> dict:
    """``{remedy: {scenario: cell}}`` where a cell is ``{"mean", "n", "better", "worse", "p"}`` or None.

    ``better``/``worse``: replicates in which the remedy's RF is below / above
    that of ``none`` (the sign test's counts; ``p`` two-sided). With ``core``
    the scores are on the taxa not planted.
    """
    scen = [s for s in SCENARIOS if any(r["scenario"] == s for r in records)]
    names = [n for n in REMEDIES if any(n in r["remedies"] for r in records)]
    out = {}
    for name in names:
        row = {}
        for s in scen:
            recs = [r for r in records if r["scenario"] == s]
            vals = [_score(r, name, method, core) for r in recs]
            if any(v is None for v in vals) or not vals:
                row[s] = None
                continue
            base = ([_score(r, "none", method, core) for r in recs] if "none" in recs[0]["remedies"] else None)
            cell = {"mean": float(np.mean(vals)), "n": len(vals)}
            if base is not None and name != "none":
                cell["better"], cell["worse"], cell["p"] = sign_test(vals, base)
            row[s] = cell
        means = [c["mean"] for c in row.values() if c is not None]
        row["mean"] = ({"mean": float(np.mean(means)), "n": None} if len(means) == len(scen) and scen else None)
        out[name] = row
    return out


def _fmt_cell(cell, detail: bool) -> str:
    if cell is None:
        return "-"
    text = f"{cell['mean']:.3f}"
    if detail and "p" in cell:
        text += f" ({cell['better']}/{cell['worse']}, p {cell['p']:.2g})"
    return text


def markdown_table(records: list, method: str, detail: bool = False, core: bool = False) -> str:
    """The table of one tree method: rows remedies, columns scenarios and their mean, cells mean normalised RF.

    With ``detail`` each cell adds ``(b/w, p P)``: replicates better / worse than ``none`` and the two-sided
    sign-test p.
    """
    tab = table(records, method, detail, core)
    scen = [s for s in SCENARIOS if any(r["scenario"] == s for r in records)]
    lines = ["| remedy | " + " | ".join(scen) + " | mean |", "| --- |" + " --- |" * (len(scen) + 1)]
    for name, row in tab.items():
        lines.append(f"| {name} | " + " | ".join(_fmt_cell(row[s], detail) for s in scen)
                     + f" | {_fmt_cell(row['mean'], False)} |")
    return "\n".join(lines)


def skipped_notes(records: list) -> dict:
    """``{remedy: note}`` for remedies skipped in any replicate."""
    out = {}
    for r in records:
        for name, v in r["remedies"].items():
            if "skipped" in v:
                out.setdefault(name, v["skipped"])
    for key in ("suspects", "suspects_matrix"):
        if any("skipped" in r.get(key, {}) for r in records):
            out.setdefault(key, next(r[key]["skipped"] for r in records if "skipped" in r[key]))
    return out


def suspect_table(records: list, key: str = "suspects") -> str:
    """Per scenario: planted taxa's mean rank by the audit and by the suspects, top-3 and empty-list rates.

    ``key``: ``suspects`` (with the alignment) or ``suspects_matrix`` (the matrix alone).
    """
    scen = [s for s in SCENARIOS if any(r["scenario"] == s for r in records)]
    have = any("rank" in r.get(key, {}) for r in records)
    lines = ["| scenario | replicates | mean audit rank of planted | mean suspect rank of planted | "
             "all planted in top 3 of suspect_taxa | suspect_taxa empty | mean suspects listed |",
             "| --- | --- | --- | --- | --- | --- | --- |"]
    for s in scen:
        recs = [r for r in records if r["scenario"] == s]
        ar = [v for r in recs for v in r["audit_rank"].values()]
        audit_rank = f"{np.mean(ar):.1f}" if ar else "-"
        if have:
            sr = [v for r in recs for v in r[key]["rank"].values()]
            susp_rank = f"{np.mean(sr):.1f}" if sr else "-"
            top3 = (f"{np.mean([r[key]['planted_in_top3'] for r in recs]):.2f}" if sr else "-")
            empty = f"{np.mean([not r[key]['suspect_taxa'] for r in recs]):.2f}"
            listed = f"{np.mean([len(r[key]['suspect_taxa']) for r in recs]):.2f}"
        else:
            susp_rank = top3 = empty = listed = "-"
        lines.append(f"| {s} | {len(recs)} | {audit_rank} | {susp_rank} | {top3} | {empty} | {listed} |")
    return "\n".join(lines)


def undefined_range(records: list, scenario: str = "saturated") -> tuple[int, int] | None:
    """Smallest and largest number of undefined pairs over the replicates of ``scenario``."""
    u = [r["undefined_pairs"] for r in records if r["scenario"] == scenario]
    return (min(u), max(u)) if u else None


def versions() -> dict:
    """Versions of what the figures depend on (printed beside the tables)."""
    import dendropy
    import numpy
    import scipy

    import seqdist

    out = {"seqdist": seqdist.__version__, "python": platform.python_version(), "numpy": numpy.__version__,
           "scipy": scipy.__version__, "dendropy": dendropy.__version__}
    try:
        import subprocess

        out["git"] = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=ROOT, capture_output=True,
                                    text=True, timeout=10).stdout.strip() or None
    except Exception:  # pragma: no cover - outside a git checkout
        out["git"] = None
    return out


__all__ = ["SCENARIOS", "METHODS", "SETTINGS", "REMEDIES", "DESCRIPTIONS", "Skipped", "Replicate", "Context",
           "make_replicate", "replicate_rng", "measured_as_is", "rf_to_truth", "normalised", "run_replicate",
           "run_study", "sign_test", "table", "markdown_table", "suspect_table", "skipped_notes",
           "undefined_range", "versions"]
