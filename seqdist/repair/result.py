"""The repair's report as a typed record, and the two functions that turn records into JSON and back.

:class:`RepairReport` has one field per key of the ``repair --json`` document,
in the document's order; :meth:`RepairReport.to_dict` gives that document
(the same keys, order and values as when the report was a dict), and
:meth:`RepairReport.from_dict` reads it back. Inside the package the report
travels as the record: a misspelt field name fails at once, where a misspelt
key in a dict quietly read nothing.

A few keys are written only in some cases (``violated_after_by`` above 1000
taxa; ``violated_before_leaving_out`` when taxa were left out on request; the
``leave_out_*`` figures with ``leave_out="fewest"``). Their fields are None when
the key is absent, and :meth:`~RepairReport.to_dict` leaves them out; a key
that is present never holds null. The rules that make the document live in
:mod:`seqdist.core.records` and serve the impact report too.
"""

from __future__ import annotations

from dataclasses import dataclass

from seqdist.core.records import optional, record_dict, record_from_dict

__all__ = ["RepairReport"]


@dataclass(frozen=True, kw_only=True)
class RepairReport:
    """What a repair did, one field per key of the ``repair --json`` document (in its order).

    The matrix's distance unit is written "d" below; counts are numbers of
    entries (unordered pairs of taxa) or of triangles (unordered triples).
    Every figure is on the ``n`` taxa the repair kept, unless it says
    otherwise.

    Attributes
    ----------
    objective : str
        The objective's name (``shrink``, ``grow``, ``fewest``, ``l1``, ``l2``).
    changed_entries : int
        Measured entries moved by more than ``tol`` (count).
    l1_change : float
        Sum of ``|after - before|`` over the measured entries (d).
    l2_change : float
        Sum of ``(after - before)**2`` over the measured entries (d squared).
    max_change : float
        Largest ``|after - before|`` of a measured entry (d).
    violated_before : int
        Violated triangles of the input, among the triangles with three measured sides (count).
    violated_after : int
        Violated triangles of the output (count; 0, as the output is verified to be a metric;
        recounted up to 1000 taxa, see ``violated_after_by`` above).
    triangles : int
        All triangles, ``n(n-1)(n-2)/6`` (count).
    checked_triangles_before : int
        Triangles of the input whose three sides are measured: the ones ``violated_before`` can see (count).
    objective_value : float
        What the objective measures, on the delivered matrix: the summed weights of the changed entries
        for ``fewest`` and ``grow`` (entries when unweighted), the weighted ``l1`` change for ``shrink``
        and ``l1`` (d), the weighted squared change for ``l2`` (d squared).
    lower_bound : float
        A proven lower bound on the optimal ``objective_value`` (same unit).
    optimal : bool
        True when ``objective_value`` is proven optimal.
    seconds : float
        Wall-clock time of the whole repair (seconds, 4 decimals; kept out of ``seqdist run``'s data files).
    n : int
        Taxa repaired (the input's less those left out).
    entries : int
        Entries of the output, ``n(n-1)/2`` (count).
    observed_entries : int
        Measured (not missing) entries of the input among them (count).
    increased_entries : int
        Measured entries increased by more than ``tol`` (count).
    decreased_entries : int
        Measured entries decreased by more than ``tol`` (count).
    filled_entries : int
        Missing entries given a value (count): ``filled_by_path + filled_without_evidence``.
    filled_by_path : int
        Missing entries filled with the length of a shortest path of measured entries (count).
    filled_without_evidence : int
        Missing entries with no such path, given one made-up value, ``between_groups_value`` (count).
    weighted_l1_change : float
        Sum of ``weight * |after - before|`` over the changed entries (d times the weight unit).
    max_violation_before : float
        Largest excess of a violated triangle of the input (d).
    gap : float
        ``objective_value - lower_bound``, at least 0 (the objective's unit).
    relative_gap : float
        ``gap / objective_value`` (a fraction; 0 when the value is 0).
    tol : float
        The tolerance: an entry counts as changed, a triangle as violated, beyond it (d).
    time_limit : float or None
        The work budget asked for (reference seconds; None: none).
    locked_entries : int
        Entries locked against change (count).
    free_entries : int
        Measured entries of weight 0, free to change at no cost (count).
    weights : str
        ``uniform`` (every measured entry weighs 1) or ``given``.
    observed_groups : int
        Groups of taxa joined by paths of measured entries (count; 1 when all are joined).
    between_groups_value : float or None
        The made-up value of the entries between those groups (d; None when there is one group).
    seed : int
        Seed of the randomised steps.
    details : dict
        The objective's own figures (method, bounds, work, solver status, times; the keys
        differ by objective, see docs/repair.md).
    note : str
        The reminder that a repaired matrix is altered data.
    violated_after_by : str or None
        Above 1000 taxa, how ``violated_after`` was established (the metric verification) instead of
        a recount; absent (None) otherwise.
    n_input : int
        Taxa of the input matrix.
    left_out_taxa : list of str
        The input's labels not in the output, in input order (empty when none).
    left_out_reasons : dict of str to str
        Why each of them was left out.
    unmeasured_taxa : dict of str to str
        Taxa that no path of measured entries joins to the largest group, with why (left out, or kept
        with made-up values when ``kept_unmeasured``).
    kept_unmeasured : bool
        True when such taxa were kept on request (with made-up distances).
    leave_out : list of str, str or None
        The leave-out request: labels, ``suspects``, ``fewest``, or None (none asked).
    violated_before_leaving_out : int or None
        Violated triangles of the whole input, before the taxa were left out (count; present only
        with a leave-out request).
    leave_out_lower_bound : int or None
        With ``leave_out="fewest"``: a proven lower bound on how many taxa must be left out (count).
    leave_out_optimal : bool or None
        With ``leave_out="fewest"``: True when the taxa left out are proven the fewest.
    leave_out_details : dict or None
        With ``leave_out="fewest"``: the search's own figures (bounds, work, status).

    Examples
    --------
    >>> import numpy as np
    >>> from seqdist.repair import repair
    >>> r = repair(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]), "shrink", progress=False).report
    >>> r.changed_entries, r.max_change, list(r.to_dict())[:3]
    (1, 3.0, ['objective', 'changed_entries', 'l1_change'])
    """

    objective: str
    changed_entries: int
    l1_change: float
    l2_change: float
    max_change: float
    violated_before: int
    violated_after: int
    triangles: int
    checked_triangles_before: int
    objective_value: float
    lower_bound: float
    optimal: bool
    seconds: float
    n: int
    entries: int
    observed_entries: int
    increased_entries: int
    decreased_entries: int
    filled_entries: int
    filled_by_path: int
    filled_without_evidence: int
    weighted_l1_change: float
    max_violation_before: float
    gap: float
    relative_gap: float
    tol: float
    time_limit: float | None
    locked_entries: int
    free_entries: int
    weights: str
    observed_groups: int
    between_groups_value: float | None
    seed: int
    details: dict
    note: str
    violated_after_by: str | None = optional()
    n_input: int
    left_out_taxa: list
    left_out_reasons: dict
    unmeasured_taxa: dict
    kept_unmeasured: bool
    leave_out: list | str | None
    violated_before_leaving_out: int | None = optional()
    leave_out_lower_bound: int | None = optional()
    leave_out_optimal: bool | None = optional()
    leave_out_details: dict | None = optional()

    def __repr__(self) -> str:
        return (f"RepairReport(objective={self.objective!r}, changed_entries={self.changed_entries}, "
                f"filled_entries={self.filled_entries}, optimal={self.optimal}, "
                f"left_out_taxa={len(self.left_out_taxa)})")

    def to_dict(self) -> dict:
        """The ``repair --json`` document: every key in order, the absent optional ones left out."""
        return record_dict(self)

    @classmethod
    def from_dict(cls, data: dict) -> RepairReport:
        """The report from its JSON document (``input``, which the command line adds, is not a field)."""
        return record_from_dict(cls, data)
