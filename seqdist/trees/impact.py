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
from .compare import _branch_score, common_taxa, nontrivial, sorted_splits, splits
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
    taxa: list = field(default_factory=list)  # sorted labels: the split bit order
    support: dict | None = None  # split bitset -> (support before, support after)


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
           tol: float | None = None, clamp_negative: bool = False,
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
    check_matrix(before, source=names[0])
    check_matrix(after, source=names[1])
    if tol is None:
        tol = max(default_tol(before.values), default_tol(after.values))
    t_before = build_tree(before, method)
    t_after = build_tree(after, method)
    neg_b, neg_a = t_before.negative_branches(), t_after.negative_branches()
    clamped_b = t_before.clamp_negative() if clamp_negative else 0
    clamped_a = t_after.clamp_negative() if clamp_negative else 0
    taxa = sorted(before.labels)
    n = len(taxa)
    sb, sa = splits(t_before, taxa), splits(t_after, taxa)
    nb, na = nontrivial(sb, n), nontrivial(sa, n)
    rf = len(nb ^ na)
    vb, wb = count_violations(before.values, tol)
    va, wa = count_violations(after.values, tol)
    change = matrix_change(before, after, tol)
    report = {
        "n": n,
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
        "cophenetic_before": cophenetic_correlation(t_before, before),
        "cophenetic_after": cophenetic_correlation(t_after, after),
        "violated_triangles_before": vb,
        "violated_triangles_after": va,
        "max_violation_before": max(0.0, max_violation(before.values)),
        "max_violation_after": max(0.0, max_violation(after.values)),
        "triangles": n * (n - 1) * (n - 2) // 6,
    }
    del wb, wa
    report.update(change)
    if truth is not None:
        common_taxa(truth, t_before, ("reference tree", "matrices"))
        st = splits(truth, taxa)
        nt = nontrivial(st, n)
        has_lengths = all(x.length is not None for x in truth.branches())
        report.update({
            "rf_to_truth_before": len(nb ^ nt),
            "rf_to_truth_after": len(na ^ nt),
            "rf_to_truth_normalized_before": len(nb ^ nt) / (2.0 * (n - 3)) if n > 3 else 0.0,
            "rf_to_truth_normalized_after": len(na ^ nt) / (2.0 * (n - 3)) if n > 3 else 0.0,
            "branch_score_to_truth_before": _branch_score(sb, st) if has_lengths else None,
            "branch_score_to_truth_after": _branch_score(sa, st) if has_lengths else None,
        })
    report["caution"] = CAUTION
    return ImpactResult(report, before, after, t_before, t_after, truth, taxa)


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
    if "rf_to_truth_before" in r:
        lines.append(f"Against the reference tree: Robinson-Foulds {r['rf_to_truth_before']} {names[0]}, "
                     f"{r['rf_to_truth_after']} {names[1]}.")
    if "support_summary" in r:
        lines.append(r["support_summary"])
    return lines
