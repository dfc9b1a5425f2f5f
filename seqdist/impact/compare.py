"""What a change of the matrix (e.g. a metric repair) did to the tree.

:func:`impact` builds one tree from each matrix with the same method and
reports how they differ (the contract's keys ``rf``, ``rf_normalized``,
``branch_score``, ``splits_only_before``, ``splits_only_after``,
``negative_branches_before``, ``negative_branches_after``; with a reference
tree also ``rf_to_truth_before`` / ``rf_to_truth_after``), together with
the matrix side of the change: entries changed (``|after - before| > tol``,
the contract's tolerance), violated triangles before and after, tree
lengths and the cophenetic correlation of each tree with its own matrix.

A repaired matrix is altered data: a tree built from it answers "what tree
would these distances give if they were a metric", not "what did the data
say". Report the repair objective and the changes with any result.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from seqdist.core.errors import InputError
from seqdist.core.matrix import DistanceMatrix, default_tol
from seqdist.core.tree import Tree
from seqdist.impact.result import EntryChange, ImpactReport, RemedyRow, RemedyTable
from seqdist.trees.build import build_tree, check_matrix
from seqdist.trees.compare import branch_score_splits, cophenetic_correlation, nontrivial, sorted_splits, splits

__all__ = ["ImpactResult", "align", "shared_labels", "incomplete_taxa", "matrix_change", "impact", "prune",
           "summary_lines", "remedy_table"]

CAUTION = ("A repaired matrix is altered data: trees built from it are not what the measured "
           "distances said. Report the repair objective, the changed entries and any taxa left out (with "
           "why) with any published result.")


@dataclass
class ImpactResult:
    """The report (an :class:`~seqdist.impact.result.ImpactReport`; ``report.to_dict()`` is
    the JSON document) plus the objects the html page draws."""

    def __repr__(self) -> str:
        r = self.report
        return (f"ImpactResult(n_compared={r.n_compared}, rf={r.rf}, "
                f"rf_to_truth_before={r.rf_to_truth_before}, rf_to_truth_after={r.rf_to_truth_after}, "
                f"left_out_taxa={r.left_out_taxa})")

    report: ImpactReport
    before: DistanceMatrix
    after: DistanceMatrix  # aligned to ``before``'s label order
    tree_before: Tree
    tree_after: Tree
    truth: Tree | None = None
    taxa: list = field(default_factory=list)  # sorted compared labels: the split bit order
    support: dict | None = None  # split bitset -> (support before, support after)
    splits_before: set = field(default_factory=set)  # non-trivial split bitsets over ``taxa``
    splits_after: set = field(default_factory=set)


def align(before: DistanceMatrix, after: DistanceMatrix,
          names: tuple[str, str] = ("BEFORE", "AFTER")) -> DistanceMatrix:
    """``after`` in ``before``'s label order; :class:`InputError` naming any
    label found in only one of them.

    Examples
    --------
    >>> a = DistanceMatrix.from_array([[0, 1], [1, 0]], ["x", "y"])
    >>> b = DistanceMatrix.from_array([[0, 2], [2, 0]], ["y", "x"])
    >>> align(a, b).labels
    ('x', 'y')
    """
    la, lb = set(before.labels), set(after.labels)
    if la != lb:
        raise InputError(_label_mismatch(before, after, names))
    if after.labels == before.labels:
        return after
    return after.subset(before.labels)


def _label_mismatch(before, after, names) -> str:
    la, lb = set(before.labels), set(after.labels)
    parts = []
    for name, only in ((names[0], sorted(la - lb)), (names[1], sorted(lb - la))):
        if only:
            more = f" and {len(only) - 5} more" if len(only) > 5 else ""
            parts.append(f"only in {name}: {', '.join(only[:5])}{more}")
    return f"{names[0]} and {names[1]} must have the same labels (" + "; ".join(parts) + ")"


def shared_labels(before: DistanceMatrix, after: DistanceMatrix,
                  names: tuple[str, str] = ("BEFORE", "AFTER")) -> tuple[list, dict]:
    """The labels of both matrices (in ``before``'s order) and the ones left out, with why.

    One matrix may lack taxa of the other (a repair leaves out taxa with no
    measured distance to the rest); anything else (labels found only in
    each of them) is an :class:`InputError`.

    Examples
    --------
    >>> a = DistanceMatrix.from_array(np.ones((3, 3)) - np.eye(3), ["x", "y", "z"])
    >>> shared_labels(a, a.subset(["y", "x"]))
    (['x', 'y'], {'z': 'not in AFTER'})
    """
    la, lb = set(before.labels), set(after.labels)
    if (la - lb) and (lb - la):
        raise InputError(_label_mismatch(before, after, names))
    shared = [lab for lab in before.labels if lab in lb]
    why = {lab: f"not in {names[1]}" for lab in before.labels if lab not in lb}
    why.update({lab: f"not in {names[0]}" for lab in after.labels if lab not in la})
    return shared, why


def incomplete_taxa(*mats: DistanceMatrix) -> list[str]:
    """Taxa to leave out so that every matrix is complete: repeatedly the
    taxon with the most missing entries (ties: the first in label order).

    Examples
    --------
    >>> D = np.array([[0, 1, np.nan], [1, 0, 2], [np.nan, 2, 0]])
    >>> incomplete_taxa(DistanceMatrix.from_array(D, list("abc")))
    ['a']
    """
    labels = list(mats[0].labels)
    miss = np.zeros((len(labels), len(labels)), dtype=bool)
    for m in mats:
        miss |= np.isnan(m.subset(labels).values)
    alive = np.ones(len(labels), dtype=bool)
    dropped = []
    while True:
        counts = (miss & alive[None, :] & alive[:, None]).sum(axis=1)
        if counts.max() == 0:
            return dropped
        k = int(np.argmax(counts))  # first maximum: label order breaks ties
        alive[k] = False
        dropped.append(labels[k])


def matrix_change(before: DistanceMatrix, after: DistanceMatrix, tol: float, top: int = 10) -> dict:
    """Measured entries changed (``|after - before| > tol``), missing ones filled, and their sizes.

    ``before`` and ``after`` have the same labels in the same order.
    ``entries_changed`` counts measured entries only (the repair's
    ``changed_entries``); a missing entry of ``before`` given a value in
    ``after`` counts in ``entries_filled``. Returns these fields of
    :class:`~seqdist.impact.result.ImpactReport` (``entries`` to
    ``largest_changes``, the latter :class:`~seqdist.impact.result.EntryChange`
    records) as keyword arguments.

    Examples
    --------
    >>> a = DistanceMatrix.from_array([[0, 1, 2], [1, 0, 2], [2, 2, 0]], list("xyz"))
    >>> b = DistanceMatrix.from_array([[0, 1, 3], [1, 0, 2], [3, 2, 0]], list("xyz"))
    >>> c = matrix_change(a, b, 1e-9)
    >>> c["entries_changed"], c["largest_changes"]
    (1, [EntryChange(a='x', b='z', before=2.0, after=3.0, change=1.0)])
    """
    n = before.n
    iu = np.triu_indices(n, 1)
    b, a = before.values[iu], after.values[iu]
    filled = np.isnan(b) & ~np.isnan(a)
    diff = np.where(np.isnan(b) | np.isnan(a), 0.0, a - b)
    changed = np.abs(diff) > tol
    order = np.argsort(-np.abs(diff), kind="stable")[:top]
    largest = [EntryChange(a=before.labels[iu[0][k]], b=before.labels[iu[1][k]], before=float(b[k]),
                           after=float(a[k]), change=float(diff[k])) for k in order if changed[k]]
    return {
        "entries": int(b.size),
        "entries_measured": int((~np.isnan(b)).sum()),
        "entries_changed": int(changed.sum()),
        "entries_increased": int((diff > tol).sum()),
        "entries_decreased": int((diff < -tol).sum()),
        "entries_filled": int(filled.sum()),
        "l1_change": float(np.abs(diff).sum()),
        "max_change": float(np.abs(diff).max()) if diff.size else 0.0,
        "largest_changes": largest,
    }


def impact(before: DistanceMatrix, after: DistanceMatrix, method: str = "nj", *, truth: Tree | None = None,
           tol: float | None = None, clamp_negative: bool = False, drop_incomplete: bool = False,
           names: tuple[str, str] = ("BEFORE", "AFTER"), reasons: dict | None = None) -> ImpactResult:
    """Build a tree from each matrix and report how they differ, on one set of taxa.

    Every comparison (Robinson-Foulds, "same topology", branch score, tree
    lengths, cophenetic correlations, violated triangles, entries changed) is
    made on the same taxa, ``n_compared`` of them; ``left_out_taxa`` lists
    the others with ``left_out_reasons``.

    Parameters
    ----------
    before, after : DistanceMatrix
        The same labels (any order; ``after`` is aligned by label), or one
        lacking some taxa of the other (a repair that left taxa out); those
        are left out of the comparison.
    method : {"nj", "bionj", "upgma"}
    truth : Tree, optional
        A reference tree on the labels of ``before`` to score both trees against.
    tol : float, optional
        An entry counts as changed when ``|after - before| > tol``; also the
        triangle tolerance. Default: the contract's 1e-9 times the largest
        entry of either matrix.
    clamp_negative : bool
        Set negative branch lengths to zero in both trees (counted first).
    drop_incomplete : bool
        Instead of refusing a matrix with missing entries, build its tree
        without the taxa that have them (see :func:`incomplete_taxa`; listed
        as ``dropped_taxa``). A complete AFTER (e.g. repaired with the
        made-up fill kept) still gives a tree on those taxa; the trees are
        compared on the taxa both hold, the other tree pruned to them.
    names : (str, str)
        How to call the two matrices in messages (e.g. their file names).
    reasons : dict, optional
        ``{label: why}`` for taxa one matrix lacks (e.g. the repair's reason
        for leaving them out), used in ``left_out_reasons``.

    Returns
    -------
    ImpactResult
        ``.report`` is the :class:`~seqdist.impact.result.ImpactReport`
        (``.report.to_dict()``: the JSON document).

    Examples
    --------
    >>> D = np.array([[0, 3, 4, 6], [3, 0, 5, 7], [4, 5, 0, 4], [6, 7, 4, 0.]])
    >>> a = DistanceMatrix.from_array(D, list("abcd"))
    >>> E = D.copy(); E[0, 1] = E[1, 0] = 9.0
    >>> r = impact(a, DistanceMatrix.from_array(E, list("abcd"))).report
    >>> r.entries_changed, r.rf, r.n_compared
    (1, 2, 4)
    """
    from seqdist.kernels.triangles import count_violations, max_violation

    for name, m in zip(names, (before, after)):
        if m.n < 3:
            raise InputError(f"{name}: {m.n} taxa; a tree needs at least 3 taxa")
    shared, why = shared_labels(before, after, names)
    if len(shared) < 3:
        raise InputError(f"{names[0]} and {names[1]} share {len(shared)} taxa; a comparison needs at least 3 taxa")
    b_all, a_all = before.subset(shared), after.subset(shared)
    hint = "" if drop_incomplete else ", or leave those taxa out with --drop-incomplete"
    # Each tree is built from all of its own matrix (what that matrix says),
    # then the trees are compared on the taxa both hold.
    drop_b = incomplete_taxa(before) if drop_incomplete else []
    drop_a = incomplete_taxa(after) if drop_incomplete else []
    keep_b = [lab for lab in before.labels if lab not in set(drop_b)]
    keep_a = [lab for lab in after.labels if lab not in set(drop_a)]
    for name, keep in ((names[0], keep_b), (names[1], keep_a)):
        if len(keep) < 3:
            raise InputError(f"{name}: leaving out the taxa with missing entries leaves {len(keep)}; "
                             "a tree needs at least 3")
    mb, ma = before.subset(keep_b), after.subset(keep_a)
    check_matrix(mb, source=names[0], hint=hint)
    check_matrix(ma, source=names[1], hint=hint)
    if tol is None:
        tol = max(default_tol(before.values), default_tol(after.values))
    t_before = build_tree(mb, method)
    t_after = build_tree(ma, method)
    neg_b, neg_a = t_before.negative_branches(), t_after.negative_branches()
    clamped_b = t_before.clamp_negative() if clamp_negative else 0
    clamped_a = t_after.clamp_negative() if clamp_negative else 0
    # Everything is compared on the taxa both trees hold.
    common = set(keep_b) & set(keep_a)
    if len(common) < 3:
        raise InputError("fewer than 3 taxa are left in both trees")
    compared = [lab for lab in shared if lab in common]
    for lab in drop_b:
        why.setdefault(lab, f"missing entries in {names[0]}")
    for lab in drop_a:
        why.setdefault(lab, f"missing entries in {names[1]}")
    left_out = [lab for lab in list(before.labels) + [x for x in after.labels if x not in set(before.labels)]
                if lab not in common]
    taxa = sorted(common)
    n = len(taxa)
    cb = t_before if len(keep_b) == n else prune(t_before, common)
    ca = t_after if len(keep_a) == n else prune(t_after, common)
    sb, sa = splits(cb, taxa), splits(ca, taxa)
    nb, na = nontrivial(sb, n), nontrivial(sa, n)
    rf = len(nb ^ na)
    cmp_b, cmp_a = b_all.subset(compared), a_all.subset(compared)
    vb, _ = count_violations(cmp_b.values, tol)
    va, _ = count_violations(cmp_a.values, tol)
    fields = dict(
        n=before.n,
        n_compared=n,
        left_out_taxa=left_out,
        left_out_reasons={lab: (reasons or {}).get(lab) or why.get(lab, "") for lab in left_out},
        n_tree_before=len(keep_b),
        n_tree_after=len(keep_a),
        method=method,
        tol=float(tol),
        rf=rf,
        rf_normalized=rf / (2.0 * (n - 3)) if n > 3 else 0.0,
        rf_max=2 * (n - 3),
        branch_score=branch_score_splits(sb, sa),
        shared_splits=len(nb & na),
        splits_before=len(nb),
        splits_after=len(na),
        splits_only_before=sorted_splits(nb - na, taxa),
        splits_only_after=sorted_splits(na - nb, taxa),
        negative_branches_before=neg_b,
        negative_branches_after=neg_a,
        clamped_branches_before=clamped_b,
        clamped_branches_after=clamped_a,
        tree_length_before=cb.total_length(),
        tree_length_after=ca.total_length(),
        cophenetic_before=cophenetic_correlation(cb, cmp_b),
        cophenetic_after=cophenetic_correlation(ca, cmp_a),
        violated_triangles_before=vb,
        violated_triangles_after=va,
        max_violation_before=max(0.0, max_violation(cmp_b.values)),
        max_violation_after=max(0.0, max_violation(cmp_a.values)),
        triangles=n * (n - 1) * (n - 2) // 6,
        dropped_taxa=drop_b,
        dropped_taxa_after=drop_a,
        # The matrix change is a fact about the matrices: counted over every taxon
        # both hold (n_shared), so that filled entries of left-out-of-the-tree
        # taxa are counted too (the same figures as the repair's report).
        n_shared=len(shared),
        **matrix_change(b_all, a_all, tol),
    )
    if truth is not None:
        leaves = set(truth.check_labels("reference tree"))
        if leaves != set(before.labels):
            missing, extra = sorted(set(before.labels) - leaves), sorted(leaves - set(before.labels))
            raise InputError("the reference tree's leaves differ from the matrix labels ("
                             + "; ".join(([f"missing from the tree: {', '.join(missing[:5])}"] if missing else [])
                                         + ([f"not in the matrices: {', '.join(extra[:5])}"] if extra else []))
                             + ")")
        ct = truth if n == len(leaves) else prune(truth, common)
        st = splits(ct, taxa)
        nt = nontrivial(st, n)
        has_lengths = all(x.length is not None for x in ct.branches())
        fields.update(
            rf_to_truth_before=len(nb ^ nt),
            rf_to_truth_after=len(na ^ nt),
            rf_to_truth_normalized_before=len(nb ^ nt) / (2.0 * (n - 3)) if n > 3 else 0.0,
            rf_to_truth_normalized_after=len(na ^ nt) / (2.0 * (n - 3)) if n > 3 else 0.0,
            branch_score_to_truth_before=branch_score_splits(sb, st) if has_lengths else None,
            branch_score_to_truth_after=branch_score_splits(sa, st) if has_lengths else None,
        )
        # A tree holding more taxa than were compared (e.g. kept with a made-up
        # fill) is also scored on all of its own taxa, so that what the extra
        # taxa do to it is not hidden.
        for side, tree, keep in (("before", t_before, keep_b), ("after", t_after, keep_a)):
            if len(keep) > n and set(keep) <= leaves:
                own = sorted(keep)
                so = nontrivial(splits(tree, own), len(own))
                sto = nontrivial(splits(prune(truth, set(own)), own), len(own))
                fields[f"rf_to_truth_{side}_own_taxa"] = len(so ^ sto)
                fields[f"n_tree_{side}_scored"] = len(own)
    report = ImpactReport(**fields, caution=CAUTION)
    return ImpactResult(report, b_all, a_all, t_before, t_after, truth, taxa, None, nb, na)


def prune(tree: Tree, keep: set) -> Tree:
    """A copy of ``tree`` with only the leaves in ``keep`` (nodes left with
    one child are spliced out, their branch lengths added)."""
    t = tree.copy()
    for node in t.postorder():
        if node.is_leaf and node is not t.root and node.name not in keep:
            node.parent.children.remove(node)
    for node in t.postorder():
        if node is t.root:
            continue
        if not node.children and node.name is None:
            node.parent.children.remove(node)
        elif len(node.children) == 1:
            only = node.children[0]
            only.length = (only.length or 0.0) + (node.length or 0.0) if (only.length is not None or
                                                                         node.length is not None) else None
            up = node.parent
            up.children[up.children.index(node)] = only
            only.parent = up
    while len(t.root.children) == 1:
        t.root = t.root.children[0]
        t.root.parent = None
        t.root.length = None
    return t


def summary_lines(report: ImpactReport, names: tuple[str, str] = ("before", "after")) -> list[str]:
    """A short plain-language summary (for standard output and the html page).

    Every figure is on the ``n_compared`` taxa both trees hold; taxa left
    out are named with why.

    Examples
    --------
    >>> D = np.array([[0, 3, 4, 6, 7], [3, 0, 5, 7, 8], [4, 5, 0, 4, 5], [6, 7, 4, 0, 3], [7, 8, 5, 3, 0.]])
    >>> E = D.copy(); E[0, 2] = E[2, 0] = 1.0
    >>> r = impact(DistanceMatrix.from_array(D, list("abcde")), DistanceMatrix.from_array(E, list("abcde")))
    >>> summary_lines(r.report)[0]
    'On the 5 taxa of both matrices: 1 of 10 measured entries changed (largest change 3).'
    """
    r = report
    ob, oa = len(r.splits_only_before), len(r.splits_only_after)
    nsplit = max(ob, oa)
    lines = []
    first = (f"On the {r.n_shared:,} taxa of both matrices: {r.entries_changed:,} of {r.entries_measured:,} "
             "measured entries changed")
    if r.entries_changed:
        first += f" (largest change {r.max_change:.4g})"
    if r.entries_filled:
        first += f", {r.entries_filled:,} missing entries filled"
    lines.append(first + ".")
    second = f"On the {r.n_compared:,} taxa both trees hold: "
    if r.rf == 0:
        second += "the two trees have the same topology."
    else:
        detail = "" if ob == oa else f"{ob} only {names[0]}, {oa} only {names[1]}; "
        second += (f"{nsplit:,} split{'s differ' if nsplit != 1 else ' differs'} "
                   f"({detail}Robinson-Foulds {r.rf:,} of at most {r.rf_max:,}).")
    lines.append(second)
    lines.append(f"Violated triangles: {r.violated_triangles_before:,} {names[0]}, "
                 f"{r.violated_triangles_after:,} {names[1]} (of {r.triangles:,}). "
                 f"Negative branches: {r.negative_branches_before} {names[0]}, "
                 f"{r.negative_branches_after} {names[1]}. "
                 f"Branch score distance {r.branch_score:.4g}.")
    left = r.left_out_taxa
    if left:
        reasons = r.left_out_reasons
        groups: dict[str, list] = {}
        for lab in left:
            groups.setdefault(reasons.get(lab, ""), []).append(lab)
        parts = [f"{', '.join(labs[:8])}{f' and {len(labs) - 8} more' if len(labs) > 8 else ''}"
                 + (f" ({why})" if why else "") for why, labs in groups.items()]
        lines.append(f"Left out of the comparison: {'; '.join(parts)}.")
    if r.has_truth:
        lines.append(f"Against the reference tree, on the same {r.n_compared:,} taxa: Robinson-Foulds "
                     f"{r.rf_to_truth_before} {names[0]}, {r.rf_to_truth_after} {names[1]}.")
        for name, own, scored in ((names[0], r.rf_to_truth_before_own_taxa, r.n_tree_before_scored),
                                  (names[1], r.rf_to_truth_after_own_taxa, r.n_tree_after_scored)):
            if own is not None:
                lines.append(f"The {name} tree holds {scored:,} taxa; on all of them its "
                             f"Robinson-Foulds distance to the reference tree is {own}.")
    if r.support_summary is not None:
        lines.append(r.support_summary)
    return lines


def remedy_table(trees: dict, truth: Tree | None = None) -> RemedyTable:
    """Trees from several remedies compared on the taxa they all hold.

    Parameters
    ----------
    trees : dict of str to Tree
        Named trees, the first being the reference (e.g. the measured
        matrix's tree); each may hold a different set of taxa.
    truth : Tree, optional
        A reference tree holding at least the common taxa.

    Returns
    -------
    RemedyTable
        ``n_compared`` and ``taxa`` (the common taxa, sorted) and ``rows``
        (:class:`~seqdist.impact.result.RemedyRow`): per tree its ``name``,
        ``n_taxa`` (its own leaves),
        ``rf_to_first`` and, with ``truth``, ``rf_to_truth`` and
        ``rf_to_truth_normalized``, every RF on the common taxa (the trees
        pruned to them); with ``truth`` also ``rf_to_truth_own_taxa``
        (normalised) on all of the tree's own taxa, which shows what keeping
        more taxa cost. ``rf_between[i][j]`` is the RF between rows i and
        j on the common taxa.

    Examples
    --------
    >>> from seqdist.io.newick import read_newick
    >>> t = {"a": read_newick("((a,b),c,(d,e),f);"), "b": read_newick("((a,c),b,(d,e));")}
    >>> r = remedy_table(t)
    >>> r.n_compared, [row.rf_to_first for row in r.rows], r.rf_between
    (5, [0, 2], [[0, 2], [2, 0]])
    """
    names = list(trees)
    common = set.intersection(*(set(t.labels()) for t in trees.values()))
    if len(common) < 4:
        raise InputError(f"the trees share {len(common)} taxa; comparing them needs at least 4")
    taxa = sorted(common)
    n = len(taxa)

    def split_set(t: Tree) -> set:
        tt = t if t.n_leaves == n else prune(t, common)
        return nontrivial(splits(tt, taxa), n)

    sets = {k: split_set(t) for k, t in trees.items()}
    st = None
    if truth is not None:
        if not common <= set(truth.labels()):
            raise InputError("the reference tree lacks taxa the trees hold")
        st = split_set(truth)
    rows = []
    for k in names:
        row = RemedyRow(name=k, n_taxa=trees[k].n_leaves, rf_to_first=len(sets[k] ^ sets[names[0]]))
        if st is not None:
            rf = len(sets[k] ^ st)
            row.rf_to_truth, row.rf_to_truth_normalized = rf, rf / (2.0 * (n - 3))
            own = sorted(trees[k].labels())
            if set(own) <= set(truth.labels()) and len(own) > 3:
                m = len(own)
                so = nontrivial(splits(trees[k], own), m)
                sto = nontrivial(splits(truth if truth.n_leaves == m else prune(truth, set(own)), own), m)
                row.rf_to_truth_own_taxa_normalized = len(so ^ sto) / (2.0 * (m - 3))
        rows.append(row)
    between = [[len(sets[a] ^ sets[b]) for b in names] for a in names]
    return RemedyTable(n_compared=n, taxa=taxa, rf_max=2 * (n - 3), rows=rows, rf_between=between)
