"""The impact report as typed records: one field per key of the ``impact --json`` document.

:class:`ImpactReport` is the document's top level; the lists and objects
inside it that have keys of their own are records too: the largest entry
changes (:class:`EntryChange`), the bootstrap support (:class:`BootstrapSupport`
with one :class:`SplitSupport` per split) and the trees of the remedies
``seqdist run`` compares (:class:`RemedyTable` with one :class:`RemedyRow`
per tree). ``to_dict()`` gives the document with the same keys, order and
values as when the report was a dict; ``from_dict()`` reads it back.

Keys written only in some cases are None when absent and left out of the
document (see :mod:`seqdist.repair.result`). The keys on the reference tree
come as a group: ``rf_to_truth_before`` is None without a reference tree,
and the other ``*_to_truth_*`` keys are written exactly when it is not
(``branch_score_to_truth_*`` may then be null: a reference tree without
branch lengths).
"""

from __future__ import annotations

from dataclasses import dataclass

from seqdist.core.records import nested, optional, present_with, record_dict, record_from_dict

__all__ = ["EntryChange", "SplitSupport", "BootstrapSupport", "RemedyRow", "RemedyTable", "ImpactReport"]


class _Record:
    """to_dict / from_dict shared by the records below."""

    def to_dict(self) -> dict:
        """The JSON object: every key in order, the absent optional ones left out."""
        return record_dict(self)

    @classmethod
    def from_dict(cls, data: dict):
        """The record from its JSON object (the inverse of :meth:`to_dict`)."""
        return record_from_dict(cls, data)


@dataclass(kw_only=True)
class EntryChange(_Record):
    """One of the largest changes of a measured entry.

    Attributes
    ----------
    a : str
        One taxon of the entry.
    b : str
        The other taxon.
    before : float
        The entry in BEFORE (distance units).
    after : float
        The entry in AFTER (distance units).
    change : float
        ``after - before`` (distance units).
    """

    a: str
    b: str
    before: float
    after: float
    change: float


@dataclass(kw_only=True)
class SplitSupport(_Record):
    """The bootstrap support of one split found in either main tree.

    Attributes
    ----------
    taxa : list of str
        One side of the split (the side without the first compared taxon in sorted order).
    in_before_tree : bool
        The split is in the tree of BEFORE.
    in_after_tree : bool
        The split is in the tree of AFTER.
    support_before : float
        Fraction of the replicates with a before tree whose tree has the split (0 to 1).
    support_after : float
        Fraction of the replicates with an after tree whose tree has the split (0 to 1).
    """

    taxa: list
    in_before_tree: bool
    in_after_tree: bool
    support_before: float
    support_after: float


@dataclass(kw_only=True)
class BootstrapSupport(_Record):
    """Split support before and after repair from column resamples (:func:`seqdist.impact.support.add_support`).

    Attributes
    ----------
    replicates : int
        Column resamples drawn (count).
    replicates_with_before_tree : int
        Replicates whose distances gave a before tree (no missing entry among its taxa; count).
    replicates_with_after_tree : int
        Replicates whose repair kept every taxon of the after tree (count).
    model : str
        Distance model of the replicates.
    gamma : float or None
        Gamma shape of the model (None: no rate variation).
    gaps : str
        Gap handling of the replicates (``pairwise`` or ``complete``).
    objective : str
        Repair objective of the replicates.
    weighted : bool
        Each replicate's repair was weighted by the inverse variances of its own distances.
    left_out_after : list of str
        Taxa of the trees that are not in the after tree, sorted.
    seed : int
        Base seed of the resampling.
    splits : list of SplitSupport
        Every split of the two main trees, smaller sides first.
    """

    replicates: int
    replicates_with_before_tree: int
    replicates_with_after_tree: int
    model: str
    gamma: float | None
    gaps: str
    objective: str
    weighted: bool
    left_out_after: list
    seed: int
    splits: list = nested(SplitSupport, many=True)


@dataclass(kw_only=True)
class RemedyRow(_Record):
    """One tree of a :class:`RemedyTable`.

    Attributes
    ----------
    name : str
        The tree's name (e.g. ``measured``, ``repaired, suspects left out``).
    n_taxa : int
        Leaves of the tree (count).
    rf_to_first : int
        Robinson-Foulds distance to the table's first tree, on the common taxa (count of splits).
    rf_to_truth : int or None
        Robinson-Foulds distance to the reference tree on the common taxa (absent without one).
    rf_to_truth_normalized : float or None
        The same divided by ``2(n_compared - 3)`` (0 to 1; absent without a reference tree).
    rf_to_truth_own_taxa_normalized : float or None
        Normalised Robinson-Foulds distance to the reference tree on all of this tree's own taxa
        (absent without a reference tree holding them, or with 3 taxa or fewer).
    """

    name: str
    n_taxa: int
    rf_to_first: int
    rf_to_truth: int | None = optional()
    rf_to_truth_normalized: float | None = optional()
    rf_to_truth_own_taxa_normalized: float | None = optional()


@dataclass(kw_only=True)
class RemedyTable(_Record):
    """Trees from several remedies compared on the taxa they all hold (:func:`seqdist.impact.compare.remedy_table`).

    Attributes
    ----------
    n_compared : int
        Taxa every tree holds, on which every distance below is taken (count).
    taxa : list of str
        Those taxa, sorted.
    rf_max : int
        The largest Robinson-Foulds distance on them, ``2(n_compared - 3)``.
    rows : list of RemedyRow
        One per tree, the reference (first) tree first.
    rf_between : list of list of int
        ``rf_between[i][j]``: Robinson-Foulds distance between rows i and j on the common taxa.
    chosen : str or None
        ``seqdist run``: the name of the tree the run chose (absent elsewhere).
    suspects : list of str or None
        ``seqdist run``: the suspect sequences the two remedies treat differently (absent elsewhere).
    rf_with_without_suspects : int or None
        ``seqdist run``: Robinson-Foulds distance between the repaired trees with and without the
        suspects (absent elsewhere).
    """

    n_compared: int
    taxa: list
    rf_max: int
    rows: list = nested(RemedyRow, many=True)
    rf_between: list
    chosen: str | None = optional()
    suspects: list | None = optional()
    rf_with_without_suspects: int | None = optional()


@dataclass(kw_only=True)
class ImpactReport(_Record):
    """How two matrices' trees differ, one field per key of the ``impact --json`` document (in its order).

    Tree figures are on the ``n_compared`` taxa both trees hold; matrix
    figures on the ``n_shared`` taxa both matrices hold. Distances and
    lengths are in the matrices' distance unit; Robinson-Foulds distances
    count non-trivial splits.
    ``seqdist impact --json`` adds ``before`` and ``after`` (the two file
    names) after these keys; they are not fields.

    Attributes
    ----------
    n : int
        Taxa of BEFORE.
    n_compared : int
        Taxa both trees hold, on which the trees are compared.
    left_out_taxa : list of str
        Taxa of either matrix not compared, BEFORE's order first.
    left_out_reasons : dict of str to str
        Why each of them was left out.
    n_tree_before : int
        Leaves of the BEFORE tree (built from all of its own matrix).
    n_tree_after : int
        Leaves of the AFTER tree.
    method : str
        Tree method (``nj``, ``bionj``, ``upgma``).
    tol : float
        Tolerance of the changed-entry and violated-triangle counts (distance units).
    rf : int
        Robinson-Foulds distance between the trees: splits in one and not the other, summed over both.
    rf_normalized : float
        ``rf / (2(n_compared - 3))`` (0 to 1; 0 with 3 taxa).
    rf_max : int
        ``2(n_compared - 3)``, the largest possible ``rf``.
    branch_score : float
        Branch score distance between the trees (Kuhner and Felsenstein 1994; distance units).
    shared_splits : int
        Non-trivial splits found in both trees.
    splits_before : int
        Non-trivial splits of the BEFORE tree.
    splits_after : int
        Non-trivial splits of the AFTER tree.
    splits_only_before : list of list of str
        The splits found only in the BEFORE tree, each as the labels of one side.
    splits_only_after : list of list of str
        The splits found only in the AFTER tree.
    negative_branches_before : int
        Branches of negative length in the BEFORE tree, as built.
    negative_branches_after : int
        Branches of negative length in the AFTER tree, as built.
    clamped_branches_before : int
        Negative branches of the BEFORE tree set to zero on request.
    clamped_branches_after : int
        Negative branches of the AFTER tree set to zero on request.
    tree_length_before : float
        Summed branch lengths of the BEFORE tree on the compared taxa.
    tree_length_after : float
        Summed branch lengths of the AFTER tree on the compared taxa.
    cophenetic_before : float
        Correlation of the BEFORE tree's path lengths with its matrix (Pearson; -1 to 1).
    cophenetic_after : float
        Correlation of the AFTER tree's path lengths with its matrix.
    violated_triangles_before : int
        Violated triangles of BEFORE on the compared taxa (count).
    violated_triangles_after : int
        Violated triangles of AFTER on the compared taxa (count).
    max_violation_before : float
        Largest excess of a triangle of BEFORE, at least 0.
    max_violation_after : float
        Largest excess of a triangle of AFTER, at least 0.
    triangles : int
        Triangles of the compared taxa, ``n_compared`` choose 3.
    dropped_taxa : list of str
        Taxa left out of the BEFORE tree for missing entries (``drop_incomplete``).
    dropped_taxa_after : list of str
        Taxa left out of the AFTER tree for missing entries.
    n_shared : int
        Taxa both matrices hold, on which the matrix change is counted.
    entries : int
        Entries among them, ``n_shared(n_shared - 1)/2``.
    entries_measured : int
        Those measured (not missing) in BEFORE.
    entries_changed : int
        Measured entries with ``|after - before| > tol``.
    entries_increased : int
        Measured entries increased by more than ``tol``.
    entries_decreased : int
        Measured entries decreased by more than ``tol``.
    entries_filled : int
        Entries missing in BEFORE and given a value in AFTER.
    l1_change : float
        Sum of ``|after - before|`` over the measured entries.
    max_change : float
        Largest ``|after - before|`` of a measured entry.
    largest_changes : list of EntryChange
        The largest changed entries (up to 10), largest first.
    rf_to_truth_before : int or None
        Robinson-Foulds distance from the BEFORE tree to the reference tree, on the compared taxa
        (None: no reference tree, and then none of the ``*_to_truth_*`` keys is written).
    rf_to_truth_after : int or None
        The same for the AFTER tree.
    rf_to_truth_normalized_before : float or None
        ``rf_to_truth_before / (2(n_compared - 3))``.
    rf_to_truth_normalized_after : float or None
        ``rf_to_truth_after / (2(n_compared - 3))``.
    branch_score_to_truth_before : float or None
        Branch score distance from the BEFORE tree to the reference tree (null when the reference
        tree lacks branch lengths).
    branch_score_to_truth_after : float or None
        The same for the AFTER tree.
    rf_to_truth_before_own_taxa : int or None
        When the BEFORE tree holds more taxa than were compared: its Robinson-Foulds distance to the
        reference tree on all of its own taxa (absent otherwise).
    n_tree_before_scored : int or None
        The number of those taxa (absent with the previous key).
    rf_to_truth_after_own_taxa : int or None
        The same for the AFTER tree.
    n_tree_after_scored : int or None
        The number of the AFTER tree's own taxa so scored.
    caution : str
        The reminder that a repaired matrix is altered data.
    remedies : RemedyTable or None
        ``seqdist run``: the trees of the two choices about the suspect sequences, compared.
    support : BootstrapSupport or None
        With bootstrap replicates: the split support before and after repair.
    support_summary : str or None
        With bootstrap replicates: the support in one sentence.

    Examples
    --------
    >>> import numpy as np
    >>> from seqdist.core.matrix import DistanceMatrix
    >>> from seqdist.impact.compare import impact
    >>> D = np.array([[0, 3, 4, 6], [3, 0, 5, 7], [4, 5, 0, 4], [6, 7, 4, 0.]])
    >>> r = impact(DistanceMatrix.from_array(D, list("abcd")), DistanceMatrix.from_array(D, list("abcd"))).report
    >>> r.rf, r.n_compared, "rf_to_truth_before" in r.to_dict()
    (0, 4, False)
    """

    n: int
    n_compared: int
    left_out_taxa: list
    left_out_reasons: dict
    n_tree_before: int
    n_tree_after: int
    method: str
    tol: float
    rf: int
    rf_normalized: float
    rf_max: int
    branch_score: float
    shared_splits: int
    splits_before: int
    splits_after: int
    splits_only_before: list
    splits_only_after: list
    negative_branches_before: int
    negative_branches_after: int
    clamped_branches_before: int
    clamped_branches_after: int
    tree_length_before: float
    tree_length_after: float
    cophenetic_before: float
    cophenetic_after: float
    violated_triangles_before: int
    violated_triangles_after: int
    max_violation_before: float
    max_violation_after: float
    triangles: int
    dropped_taxa: list
    dropped_taxa_after: list
    n_shared: int
    entries: int
    entries_measured: int
    entries_changed: int
    entries_increased: int
    entries_decreased: int
    entries_filled: int
    l1_change: float
    max_change: float
    largest_changes: list = nested(EntryChange, many=True)
    rf_to_truth_before: int | None = optional()
    rf_to_truth_after: int | None = present_with("rf_to_truth_before")
    rf_to_truth_normalized_before: float | None = present_with("rf_to_truth_before")
    rf_to_truth_normalized_after: float | None = present_with("rf_to_truth_before")
    branch_score_to_truth_before: float | None = present_with("rf_to_truth_before")
    branch_score_to_truth_after: float | None = present_with("rf_to_truth_before")
    rf_to_truth_before_own_taxa: int | None = optional()
    n_tree_before_scored: int | None = optional()
    rf_to_truth_after_own_taxa: int | None = optional()
    n_tree_after_scored: int | None = optional()
    caution: str
    remedies: RemedyTable | None = nested(RemedyTable, is_optional=True)
    support: BootstrapSupport | None = nested(BootstrapSupport, is_optional=True)
    support_summary: str | None = optional()

    def __repr__(self) -> str:
        return (f"ImpactReport(n_compared={self.n_compared}, rf={self.rf}, entries_changed={self.entries_changed}, "
                f"rf_to_truth_before={self.rf_to_truth_before}, rf_to_truth_after={self.rf_to_truth_after})")

    @property
    def has_truth(self) -> bool:
        """True when the trees were scored against a reference tree (the ``*_to_truth_*`` keys are written)."""
        return self.rf_to_truth_before is not None
