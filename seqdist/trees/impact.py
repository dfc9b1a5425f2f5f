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

from ..errors import InputError
from ..matrix import DistanceMatrix, default_tol
from .build import build_tree, check_matrix
from .compare import _branch_score, nontrivial, sorted_splits, splits
from .compare import cophenetic_correlation
from .tree import Tree

CAUTION = ("A repaired matrix is altered data: trees built from it are not what the measured "
           "distances said. Report the repair objective and the changed entries with any published result.")


@dataclass
class ImpactResult:
    """The report (a JSON-ready dict) plus the objects the html page draws."""

    report: dict
    before: DistanceMatrix
    after: DistanceMatrix  # aligned to ``before``'s label order
    tree_before: Tree
    tree_after: Tree
    truth: Tree | None = None
    taxa: list = field(default_factory=list)  # sorted compared labels: the split bit order
    support: dict | None = None  # split bitset -> (support before, support after)
    splits_before: set = field(default_factory=set)  # non-trivial split bitsets over ``taxa``
    splits_after: set = field(default_factory=set)


def align(before: DistanceMatrix, after: DistanceMatrix, names=("BEFORE", "AFTER")) -> DistanceMatrix:
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
        parts = []
        for name, only in ((names[0], sorted(la - lb)), (names[1], sorted(lb - la))):
            if only:
                more = f" and {len(only) - 5} more" if len(only) > 5 else ""
                parts.append(f"only in {name}: {', '.join(only[:5])}{more}")
        raise InputError(f"{names[0]} and {names[1]} must have the same labels (" + "; ".join(parts) + ")")
    if after.labels == before.labels:
        return after
    return after.subset(before.labels)


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
    """Entries changed (``|after - before| > tol``) and their sizes.

    Missing entries of ``before`` filled in ``after`` count as changed.
    """
    n = before.n
    iu = np.triu_indices(n, 1)
    b, a = before.values[iu], after.values[iu]
    filled = np.isnan(b) & ~np.isnan(a)
    diff = np.where(np.isnan(b) | np.isnan(a), 0.0, a - b)
    changed = (np.abs(diff) > tol) | filled
    order = np.argsort(-np.abs(diff), kind="stable")[:top]
    largest = [{"a": before.labels[iu[0][k]], "b": before.labels[iu[1][k]], "before": float(b[k]),
                "after": float(a[k]), "change": float(diff[k])} for k in order if changed[k] and diff[k] != 0]
    return {
        "entries": int(b.size),
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
           names: tuple[str, str] = ("BEFORE", "AFTER")) -> ImpactResult:
    """Build a tree from each matrix and report how they differ.

    Parameters
    ----------
    before, after : DistanceMatrix
        The same labels (any order; ``after`` is aligned by label).
    method : {"nj", "bionj", "upgma"}
    truth : Tree, optional
        A reference tree on the same labels to score both trees against.
    tol : float, optional
        An entry counts as changed when ``|after - before| > tol``; also the
        triangle tolerance. Default: the contract's 1e-9 times the largest
        entry of either matrix.
    clamp_negative : bool
        Set negative branch lengths to zero in both trees (counted first).
    drop_incomplete : bool
        Instead of refusing a matrix with missing entries, build its tree
        without the taxa that have them (see :func:`incomplete_taxa`; listed
        as ``dropped_taxa``). A complete AFTER (e.g. repaired, which fills
        missing entries) still gives a tree on every taxon; the two trees
        are compared on the taxa both hold (``n_compared``), the other tree
        pruned to them. Matrix figures are over all entries.
    names : (str, str)
        How to call the two matrices in messages (e.g. their file names).

    Returns
    -------
    ImpactResult
        ``.report`` holds the JSON keys.

    Examples
    --------
    >>> D = np.array([[0, 3, 4, 6], [3, 0, 5, 7], [4, 5, 0, 4], [6, 7, 4, 0.]])
    >>> a = DistanceMatrix.from_array(D, list("abcd"))
    >>> E = D.copy(); E[0, 1] = E[1, 0] = 9.0
    >>> r = impact(a, DistanceMatrix.from_array(E, list("abcd"))).report
    >>> r["entries_changed"], r["rf"]
    (1, 2)
    """
    from ..metric import count_violations, max_violation

    after = align(before, after, names)
    hint = "" if drop_incomplete else ", or leave those taxa out with --drop-incomplete"
    drop_b = incomplete_taxa(before) if drop_incomplete else []
    drop_a = incomplete_taxa(after) if drop_incomplete else []
    keep_b = [lab for lab in before.labels if lab not in set(drop_b)]
    keep_a = [lab for lab in after.labels if lab not in set(drop_a)]
    for name, keep in ((names[0], keep_b), (names[1], keep_a)):
        if len(keep) < 3 <= before.n:
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
    # Trees are compared on the taxa both have (all of them unless some were left out).
    common = set(keep_b) & set(keep_a)
    if len(common) < 3:
        raise InputError("fewer than 3 taxa are left in both trees")
    taxa = sorted(common)
    n = len(taxa)
    cb = t_before if len(keep_b) == n else prune(t_before, common)
    ca = t_after if len(keep_a) == n else prune(t_after, common)
    sb, sa = splits(cb, taxa), splits(ca, taxa)
    nb, na = nontrivial(sb, n), nontrivial(sa, n)
    rf = len(nb ^ na)
    vb, _ = count_violations(before.values, tol)
    va, _ = count_violations(after.values, tol)
    N = before.n
    report = {
        "n": N,
        "n_compared": n,
        "method": method,
        "tol": float(tol),
        "rf": rf,
        "rf_normalized": rf / (2.0 * (n - 3)) if n > 3 else 0.0,
        "rf_max": 2 * (n - 3),
        "branch_score": _branch_score(sb, sa),
        "shared_splits": len(nb & na),
        "splits_before": len(nb),
        "splits_after": len(na),
        "splits_only_before": sorted_splits(nb - na, taxa),
        "splits_only_after": sorted_splits(na - nb, taxa),
        "negative_branches_before": neg_b,
        "negative_branches_after": neg_a,
        "clamped_branches_before": clamped_b,
        "clamped_branches_after": clamped_a,
        "tree_length_before": t_before.total_length(),
        "tree_length_after": t_after.total_length(),
        "cophenetic_before": cophenetic_correlation(t_before, mb),
        "cophenetic_after": cophenetic_correlation(t_after, ma),
        "violated_triangles_before": vb,
        "violated_triangles_after": va,
        "max_violation_before": max(0.0, max_violation(before.values)),
        "max_violation_after": max(0.0, max_violation(after.values)),
        "triangles": N * (N - 1) * (N - 2) // 6,
        "dropped_taxa": drop_b,
        "dropped_taxa_after": drop_a,
    }
    report.update(matrix_change(before, after, tol))
    if truth is not None:
        leaves = set(truth.check_labels("reference tree"))
        if leaves != set(before.labels):
            missing, extra = sorted(set(before.labels) - leaves), sorted(leaves - set(before.labels))
            raise InputError("the reference tree's leaves differ from the matrix labels ("
                             + "; ".join(([f"missing from the tree: {', '.join(missing[:5])}"] if missing else [])
                                         + ([f"not in the matrices: {', '.join(extra[:5])}"] if extra else []))
                             + ")")
        ct = truth if n == N else prune(truth, common)
        st = splits(ct, taxa)
        nt = nontrivial(st, n)
        has_lengths = all(x.length is not None for x in ct.branches())
        report.update({
            "rf_to_truth_before": len(nb ^ nt),
            "rf_to_truth_after": len(na ^ nt),
            "rf_to_truth_normalized_before": len(nb ^ nt) / (2.0 * (n - 3)) if n > 3 else 0.0,
            "rf_to_truth_normalized_after": len(na ^ nt) / (2.0 * (n - 3)) if n > 3 else 0.0,
            "branch_score_to_truth_before": _branch_score(sb, st) if has_lengths else None,
            "branch_score_to_truth_after": _branch_score(sa, st) if has_lengths else None,
        })
    report["caution"] = CAUTION
    return ImpactResult(report, before, after, t_before, t_after, truth, taxa, None, nb, na)


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


def summary_lines(report: dict, names=("before", "after")) -> list[str]:
    """A short plain-language summary (for standard output and the html page).

    Examples
    --------
    >>> summary_lines({"entries": 10, "entries_changed": 1, "rf": 2, "rf_max": 4, "n": 5,
    ...                "splits_only_before": [["a", "b"]], "splits_only_after": [["a", "c"]],
    ...                "violated_triangles_before": 3, "violated_triangles_after": 0,
    ...                "negative_branches_before": 0, "negative_branches_after": 0,
    ...                "branch_score": 0.5, "max_change": 1.0})[0]
    '1 of 10 entries changed (largest change 1); 1 split differs (Robinson-Foulds 2 of at most 4).'
    """
    r = report
    ob, oa = len(r["splits_only_before"]), len(r["splits_only_after"])
    nsplit = max(ob, oa)
    lines = []
    first = f"{r['entries_changed']:,} of {r['entries']:,} entries changed"
    if r["entries_changed"]:
        first += f" (largest change {r['max_change']:.4g})"
    if r["rf"] == 0:
        first += "; the two trees have the same topology."
    else:
        detail = "" if ob == oa else f"{ob} only {names[0]}, {oa} only {names[1]}; "
        first += (f"; {nsplit:,} split{'s differ' if nsplit != 1 else ' differs'} "
                  f"({detail}Robinson-Foulds {r['rf']:,} of at most {r['rf_max']:,}).")
    lines.append(first)
    lines.append(f"Violated triangles: {r['violated_triangles_before']:,} {names[0]}, "
                 f"{r['violated_triangles_after']:,} {names[1]}. "
                 f"Negative branches: {r['negative_branches_before']} {names[0]}, "
                 f"{r['negative_branches_after']} {names[1]}. "
                 f"Branch score distance {r['branch_score']:.4g}.")
    for key, which in (("dropped_taxa", names[0]), ("dropped_taxa_after", names[1])):
        if r.get(key):
            lines.append(f"Left out of the {which} tree (missing entries): {', '.join(r[key])}; "
                         f"the trees are compared on the other {r['n_compared']:,} taxa.")
    if "rf_to_truth_before" in r:
        lines.append(f"Against the reference tree: Robinson-Foulds {r['rf_to_truth_before']} {names[0]}, "
                     f"{r['rf_to_truth_after']} {names[1]}.")
    if "support_summary" in r:
        lines.append(r["support_summary"])
    return lines
