"""Split support before and after repair, by resampling alignment columns.

For each of ``B`` replicates (Felsenstein 1985, "Confidence limits on
phylogenies: an approach using the bootstrap", Evolution 39:783-791): draw
the alignment's columns with replacement, compute the distances with the
given model, build the "before" tree from them, repair them with the given
objective and build the "after" tree. A split's support is the fraction of
replicates whose tree contains it; every split of the two main trees gets
its support among the before-replicates and among the after-replicates, so
one can see whether a split that the repair removed (or created) was ever
well supported.

A replicate whose distances have missing entries among the taxa of the
before tree (a pair saturated or with no shared column in that resample) has
no "before" tree; it still has an "after" tree when the repair fills them
from evidence (a path of measured entries). A replicate in which the repair
leaves out a taxon of the after tree (no measured distance joins it to the
others in that resample) has no "after" tree. Support is the fraction of the
replicates that have the tree (both counts are reported).

The replicate trees' splits (with their lengths) are tallied in a
:class:`SplitTallies`, which :func:`add_support` returns: the support is
also written on the two main trees (``Node.support``, in percent), and
:meth:`SplitTallies.consensus` gives the majority-rule consensus of the
before- or after-replicates (Margush & McMorris 1981; see
:mod:`seqdist.trees.consensus`), on the compared taxa.

Replicates run in separate processes (``concurrent.futures``, "spawn"
start, so no compiled-kernel thread pools are forked). Replicate ``k`` uses
the ``k``-th child of ``numpy.random.SeedSequence(seed)`` both for the
column draw and as the repair seed, so results do not depend on the number
of worker processes.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from seqdist.core.errors import InputError
from seqdist.core.params import POSITIVE_INT
from seqdist.impact.result import BootstrapSupport, SplitSupport
from seqdist.trees.compare import split_labels, splits

__all__ = ["split_support", "split_tallies", "add_support", "SplitTallies"]

if TYPE_CHECKING:  # annotations only
    from seqdist.core.tree import Tree
    from seqdist.impact.compare import ImpactResult
    from seqdist.io.alignment import Alignment


@dataclass
class SplitTallies:
    """What the bootstrap replicates' trees held, split by split.

    Bitsets are over ``taxa`` (sorted compared labels; the side without
    ``taxa[0]``). ``counts_*`` hold the non-trivial splits, ``lengths_*``
    the summed branch lengths of every split (leaf branches too) over the
    replicates that had that tree.

    Examples
    --------
    >>> t = SplitTallies(taxa=list("abcd"), n_before=4, counts_before={0b1100: 3},
    ...                  lengths_before={0b1100: 0.9, 0b0010: 4.0, 0b0100: 4.0, 0b1000: 4.0, 0b1110: 4.0})
    >>> t.consensus("before").to_newick()
    '(a:1.0,b:1.0,(c:1.0,d:1.0)75:0.3);\\n'
    """

    taxa: list
    n_before: int = 0
    n_after: int = 0
    counts_before: dict = field(default_factory=dict)
    counts_after: dict = field(default_factory=dict)
    lengths_before: dict = field(default_factory=dict)
    lengths_after: dict = field(default_factory=dict)

    def consensus(self, which: str = "after", threshold: float = 0.5, *, extended: bool = False) -> Tree | None:
        """The majority-rule consensus of the ``before`` or ``after`` replicate trees.

        Support in percent of the replicates that had that tree; lengths the
        mean over them (a split absent from a replicate adds nothing).
        ``None`` when no replicate had that tree.
        """
        from seqdist.trees.consensus import consensus_from_counts

        if which not in ("before", "after"):
            raise ValueError(f"which must be 'before' or 'after', got {which!r}")
        n = self.n_before if which == "before" else self.n_after
        if not n:
            return None
        counts = self.counts_before if which == "before" else self.counts_after
        sums = self.lengths_before if which == "before" else self.lengths_after
        k = len(self.taxa)

        def held(m):  # a leaf branch is in every replicate, an internal one where its split is
            return counts.get(m, 0) if 2 <= m.bit_count() <= k - 2 else n

        lengths = {m: v / held(m) for m, v in sums.items() if held(m)}
        return consensus_from_counts(counts, n, self.taxa, threshold, extended=extended, lengths=lengths)

_STATE: dict = {}


def _init(aln, options):
    _STATE["aln"] = aln
    _STATE["options"] = options


def _replicate(key) -> tuple[list, list, bool, bool]:
    """One replicate: (splits of the before tree, of the after tree, had a before tree, had an after tree).

    Each list holds ``(bitset, length)`` for every split, leaf branches included, sorted.

    ``key`` is ``(entropy, *spawn_key)`` of the replicate's SeedSequence.
    """
    from seqdist.models.distances import pairwise_distances
    from seqdist.repair import repair
    from seqdist.trees.build import build_tree

    ss = np.random.SeedSequence(key[0], spawn_key=tuple(key[1:]))
    aln = _STATE["aln"]
    o = _STATE["options"]
    rng = np.random.default_rng(ss)
    cols = np.sort(rng.integers(0, aln.length, aln.length))  # column order does not matter to distances
    dres = pairwise_distances(aln.take_columns(cols), o["model"], gamma=o["gamma"], gaps=o["gaps"],
                              variance=o["weighted"], progress=False, warn=False)
    dm = dres.matrix
    taxa = o["taxa"]
    before: list = []
    sub = dm.subset(o["keep_before"])
    ok = not sub.has_missing
    if ok:
        before = sorted(splits(_on(build_tree(sub, o["method"]), taxa), taxa).items())
    import warnings

    from seqdist.core.errors import DataWarning

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataWarning)  # one per replicate would drown the log
        part = dm.subset(o["keep_after"])
        weights = None
        if o["weighted"]:
            # the same weighting as the repair whose tree the support is for
            from seqdist.models.distances import inverse_variance_weights

            weights = inverse_variance_weights(dres.variance.subset(o["keep_after"]), part)
        fixed = repair(part, o["objective"], weights=weights, seed=int(ss.generate_state(1)[0]),
                       progress=False, keep_unmeasured=o["keep_unmeasured"]).matrix
    if fixed.n < len(o["keep_after"]):
        return before, [], ok, False
    tree = build_tree(fixed.subset(o["keep_after"]), o["method"])
    after = sorted(splits(_on(tree, taxa), taxa).items())
    return before, after, ok, True


def _on(tree, taxa):
    """The tree pruned to the compared taxa (itself when it has no others)."""
    from seqdist.impact.compare import prune

    return tree if tree.n_leaves == len(taxa) else prune(tree, set(taxa))


def split_support(alignment: Alignment, labels: Sequence[str], **options: Any) -> tuple[dict, dict, int, int]:
    """Count, over bootstrap replicates, how often each split appears.

    Takes the arguments of :func:`split_tallies` and returns
    ``(before_counts, after_counts, n_before, n_after)``: split bitset (bit
    order: ``sorted(labels)``, or the compared taxa) -> number of replicates
    containing it, for the before and after trees, and the numbers of
    replicates that had a before and an after tree.
    """
    t = split_tallies(alignment, labels, **options)
    return t.counts_before, t.counts_after, t.n_before, t.n_after


def split_tallies(alignment: Alignment, labels: Sequence[str], *, replicates: int, model: str, objective: str,
                  method: str = "nj", seed: int = 0, gamma: float | None = None, gaps: str = "pairwise",
                  workers: int | None = None, keep_before: Sequence[str] | None = None,
                  keep_after: Sequence[str] | None = None, compared: Sequence[str] | None = None,
                  keep_unmeasured: bool = False, weighted: bool = False) -> SplitTallies:
    """Tally, over bootstrap replicates, the splits (and their lengths) of the replicate trees.

    Parameters
    ----------
    alignment : seqdist.io.alignment.Alignment
    labels : sequence of str
        The taxa (the alignment's record ids, any order).
    keep_before, keep_after, compared : sequence of str, optional
        Taxa of the before and after trees and of the comparison (default:
        all labels), as when some taxa were left out for missing entries.
    replicates : int
    model, objective, method : str
        Distance model, repair objective and tree method of the replicates.
    seed : int
        Base seed.
    workers : int, optional
        Worker processes (default: the number of cores; 1 runs in this process).
    keep_unmeasured : bool
        As for :func:`seqdist.repair.repair`, for the repair of each replicate.
    weighted : bool
        Repair each replicate with inverse-variance weights from its own
        variances (as ``run`` does by default); the model needs a variance
        formula.

    Returns
    -------
    SplitTallies
        Counts of the non-trivial splits and summed lengths of every split
        (bit order: ``sorted(compared)``), and how many replicates had a
        before and an after tree.
    """
    from seqdist.core.console import Progress

    taxa = sorted(compared if compared is not None else labels)
    aln = alignment.subset(list(labels))
    options = {"model": model, "objective": objective, "method": method, "gamma": gamma, "gaps": gaps,
               "taxa": taxa, "keep_before": list(keep_before if keep_before is not None else labels),
               "keep_after": list(keep_after if keep_after is not None else labels),
               "keep_unmeasured": bool(keep_unmeasured), "weighted": bool(weighted)}
    children = np.random.SeedSequence(seed).spawn(replicates)
    keys = [(int(c.entropy), *c.spawn_key) for c in children]
    out = SplitTallies(taxa=taxa)
    n = len(taxa)
    workers = workers or os.cpu_count() or 1
    workers = max(1, min(workers, replicates))

    def tally(result):
        # in replicate order whatever the pool size, so the float sums are too
        before, after, ok, ok_after = result
        out.n_before += ok
        out.n_after += ok_after
        for got, counts, sums in ((before, out.counts_before, out.lengths_before),
                                  (after, out.counts_after, out.lengths_after)):
            for m, length in got:
                sums[m] = sums.get(m, 0.0) + length
                if 2 <= m.bit_count() <= n - 2:
                    counts[m] = counts.get(m, 0) + 1

    with Progress("bootstrap replicates", total=replicates) as bar:
        if workers == 1:
            _init(aln, options)
            try:
                for key in keys:
                    tally(_replicate(key))
                    bar.update(1)
            finally:
                _STATE.clear()
        else:
            import multiprocessing
            from concurrent.futures import ProcessPoolExecutor

            ctx = multiprocessing.get_context("spawn")
            with ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_init,
                                     initargs=(aln, options)) as pool:
                for result in pool.map(_replicate, keys, chunksize=max(1, replicates // (8 * workers))):
                    tally(result)
                    bar.update(1)
    return out


def add_support(res: ImpactResult, alignment: Alignment | str, *, replicates: int, model: str, objective: str,
                seed: int = 0, gamma: float | None = None, gaps: str = "pairwise", workers: int | None = None,
                clamp_negative: bool = False, keep_unmeasured: bool = False,
                weighted: bool = False) -> SplitTallies:
    """Add split support to an :class:`~seqdist.impact.compare.ImpactResult` (in place).

    Sets ``res.report.support`` (a :class:`~seqdist.impact.result.BootstrapSupport`:
    the settings and, for every split of the two main trees, its support
    before and after repair), a one-line ``res.report.support_summary`` and
    ``res.support`` (bitset -> (before, after) fractions) for the html page,
    and writes the support in percent on the internal nodes of
    ``res.tree_before`` (among the before-replicates) and ``res.tree_after``
    (among the after-replicates), so that their Newick text carries it.
    ``alignment`` is an :class:`~seqdist.io.alignment.Alignment` (as read
    for the distances, with the same format and alphabet) or a file path
    read with the defaults.

    Returns
    -------
    SplitTallies
        The replicates' splits, for their majority-rule consensus
        (``tallies.consensus("before")``, ``tallies.consensus("after")``).
    """
    from seqdist.core.console import warn
    from seqdist.io.alignment import read_alignment
    from seqdist.models.distances import pairwise_distances
    from seqdist.repair import OBJECTIVES

    del clamp_negative  # lengths do not enter split support
    if objective not in OBJECTIVES:
        raise InputError(f"unknown repair objective '{objective}' (choose from {', '.join(OBJECTIVES)})")
    replicates = POSITIVE_INT.check("replicates", replicates)
    if isinstance(alignment, str):
        alignment_path, aln = alignment, read_alignment(alignment)
    else:
        aln = alignment
        alignment_path = getattr(aln, "source", None) or "the alignment"
    # the taxa of either tree (each tree is built from all of its own matrix;
    # res.before holds only the taxa both matrices share)
    in_trees = set(res.tree_before.labels()) | set(res.tree_after.labels()) | set(res.before.labels)
    la, lm = set(aln.labels), in_trees
    if not lm <= la:
        only_m = sorted(lm - la)
        raise InputError(f"{alignment_path}: the record ids differ from the matrix labels "
                         f"(only in the matrices: {', '.join(only_m[:5])})")
    # The support refers to ALN + model: say so when BEFORE is not that matrix.
    full = pairwise_distances(aln.subset(list(res.before.labels)), model, gamma=gamma, gaps=gaps, variance=False,
                              progress=False, warn=False).matrix
    a, b = np.asarray(full.values), np.asarray(res.before.values)
    if not np.allclose(np.nan_to_num(a, nan=-1.0), np.nan_to_num(b, nan=-1.0), rtol=1e-6, atol=1e-9):
        warn(f"the BEFORE matrix is not the {model} distances of {alignment_path}; the support values "
             "describe the alignment under that model")
    labels = [lab for lab in aln.labels if lab in in_trees]
    tallies = split_tallies(aln, labels, replicates=replicates, model=model,
                            objective=objective, method=res.report.method, seed=seed,
                            gamma=gamma, gaps=gaps, workers=workers,
                            keep_before=res.tree_before.labels(),
                            keep_after=res.tree_after.labels(), compared=res.taxa,
                            keep_unmeasured=keep_unmeasured, weighted=weighted)
    cb, ca, n_before, n_after = tallies.counts_before, tallies.counts_after, tallies.n_before, tallies.n_after
    taxa = res.taxa
    sb, sa = res.splits_before, res.splits_after
    support = {}
    rows = []
    for m in sorted(sb | sa, key=lambda m: (m.bit_count(), split_labels(m, taxa))):
        fb = cb.get(m, 0) / n_before if n_before else 0.0
        fa = ca.get(m, 0) / n_after if n_after else 0.0
        support[m] = (fb, fa)
        rows.append(SplitSupport(taxa=split_labels(m, taxa), in_before_tree=m in sb, in_after_tree=m in sa,
                                 support_before=fb, support_after=fa))
    res.support = support
    res.report.support = BootstrapSupport(
        replicates=replicates,
        replicates_with_before_tree=n_before,
        replicates_with_after_tree=n_after,
        model=model,
        gamma=gamma,
        gaps=gaps,
        objective=objective,
        weighted=bool(weighted),
        left_out_after=sorted(in_trees - set(res.tree_after.labels())),
        seed=seed,
        splits=rows,
    )

    def pct(xs):
        return ", ".join(f"{100 * x:.0f}%" for x in xs)

    only_b = [support[m][0] for m in sorted(sb - sa, key=lambda m: -support[m][0])]
    only_a = [support[m][1] for m in sorted(sa - sb, key=lambda m: -support[m][1])]
    shared = sorted(sb & sa)
    text = f"Bootstrap ({replicates} replicates, {n_before} with a before tree, {n_after} with an after tree): "
    if only_b or only_a:
        text += (f"splits only in the before tree had support {pct(only_b) or 'none'} before repair; "
                 f"splits only in the after tree had support {pct(only_a) or 'none'} after repair")
    else:
        text += "no split differs"
    if shared:
        mb = float(np.median([support[m][0] for m in shared]))
        ma = float(np.median([support[m][1] for m in shared]))
        text += f"; shared splits: median support {100 * mb:.0f}% before, {100 * ma:.0f}% after repair"
    res.report.support_summary = text + "."
    from seqdist.trees.consensus import set_support

    # support on the trees themselves (their Newick text then carries it); none without replicates
    for tree, counts, k in ((res.tree_before, cb, n_before), (res.tree_after, ca, n_after)):
        if k:
            set_support(tree, {m: c / k for m, c in counts.items()}, taxa)
    return tallies
