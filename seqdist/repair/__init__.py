"""Metric repair: a metric close to the input under a chosen objective.

One public function, :func:`repair`, and one module per objective behind it:
``seqdist.repair.<objective>`` exposes ``solve(problem) -> Solution``
(:mod:`seqdist.repair.problem`) and is found by name, so every objective
shares the engine (:mod:`seqdist.repair.engine`): input checks, weights,
locks, missing entries, final verification and the report (a typed
:class:`~seqdist.repair.result.RepairReport`).

Leaving taxa out (``leave_out=``) is a remedy of its own, chosen before the
objective runs on the remaining taxa (:mod:`seqdist.repair.taxa`).

Objectives: ``shrink`` (decrease only; the shortest-path closure),
``grow`` (increase only; fewest increased entries, then least increase),
``fewest`` (fewest changed entries, either direction), ``l1`` and ``l2``.
See docs/repair.md for the algorithms, bounds and guarantees.

A repaired matrix is altered data: report the objective and the list of
changed entries with any result you publish.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, Iterable, Sequence

from seqdist.repair.engine import ALTERED_NOTE, RepairResult, format_changes, load_objective, unmeasured_taxa
from seqdist.repair.registry import OBJECTIVE_GUIDE, OBJECTIVES, REGISTRY, WEIGHTED_OBJECTIVES
from seqdist.repair.result import RepairReport

if TYPE_CHECKING:  # only for the annotations
    import numpy as np
    from numpy.typing import ArrayLike

    from seqdist.core.matrix import DistanceMatrix


def repair(dm: DistanceMatrix | ArrayLike, objective: str, weights: DistanceMatrix | ArrayLike | None = None,
           lock: np.ndarray | Sequence[tuple[str | int, str | int]] | None = None, tol: float | None = None,
           time_limit: float | None = None, seed: int = 0, keep_unmeasured: bool = False,
           unmeasured_reasons: dict | None = None, source: str | None = None, weights_source: str | None = None,
           leave_out: str | Iterable[str] | dict[str, str] | None = None, **options: Any) -> RepairResult:
    """Return a metric close to ``dm`` under ``objective``.

    Parameters
    ----------
    dm : DistanceMatrix or array_like
        The input distances; NaN marks a missing entry (filled in the output
        by shortest paths over the repaired observed entries).
    objective : {"shrink", "grow", "fewest", "l1", "l2"}
        What "close" means (see the module docs).
    weights : DistanceMatrix or array_like, optional
        Non-negative weight on the change of each entry (same labels);
        0 means the entry is free. Default 1 everywhere.
    lock : sequence of pairs, optional
        Entries that must not change: pairs of labels or indices (e.g. from
        :func:`seqdist.io.matrices.read_pairs`), or an (n, n) boolean mask.
    tol : float, optional
        Metric tolerance (default 1e-9 times the largest entry); an entry
        counts as changed when it moves by more than ``tol``.
    time_limit : float, optional
        A work budget in reference seconds (about that many seconds on the
        reference machine; see docs/repair.md, "Time limits"); when spent,
        the best verified answer so far is returned with ``optimal`` False.
        Counted in work, not read from the clock: results depend only on
        the input and the options.
    seed : int
        Seed of any randomised step (results are deterministic for a seed).
    keep_unmeasured : bool
        Taxa with no measured distance to the largest group of measured taxa
        (no path of measured entries joins them to it) have no evidence for
        any distance to the rest. By default they are left out of the output
        (``report.left_out_taxa``) and named in a
        :class:`~seqdist.core.errors.DataWarning`. With True they are kept, and
        their distances to the rest are one made-up value (the largest
        within-group distance, which keeps a metric), marked
        ``filled_without_evidence`` in :attr:`RepairResult.changes`.
    unmeasured_reasons : dict, optional
        ``{label: reason}`` saying why a taxon has no measured distance
        (e.g. "saturated against all 29 others", from the distances step);
        used in the warning and the report instead of the generic reason.
    source, weights_source : str, optional
        File names of the matrix and the weights, for error messages.
    leave_out : None, list of str, dict, "suspects" or "fewest"
        Taxa to leave out before repairing, as a remedy (docs/repair.md,
        "Leaving taxa out"): a list of labels ("named by the user"), a dict
        ``{label: reason}`` (e.g. suspects found with the alignment),
        ``"suspects"`` (the taxa :func:`seqdist.audit.suspects.find_suspects` names
        from the matrix), or ``"fewest"`` (the fewest taxa whose removal
        leaves no violated checked triangle: exact by integer program where
        the work budget allows, else greedy with a proven lower bound). The
        objective then repairs the remaining taxa. ``report.left_out_taxa``
        lists every taxon left out and ``report.left_out_reasons`` why;
        with "fewest" also ``leave_out_lower_bound`` and
        ``leave_out_optimal``. Unknown labels, locks on a left-out taxon and
        fewer than 3 taxa left are input errors.
    **options
        Objective-specific options, e.g. ``method="exact"`` or
        ``method="heuristic"`` for fewest and grow; ``progress=False``
        turns the progress bar off.

    Returns
    -------
    RepairResult
        ``matrix`` (a metric within ``tol``, without the left-out taxa),
        ``changes`` (label, label, before, after, change, how) and ``report``
        (a :class:`~seqdist.repair.result.RepairReport`: one typed field per
        key of the JSON document, the contract's objective, changed_entries,
        l1_change, l2_change, max_change, violated_before, violated_after,
        objective_value, lower_bound, optimal, seconds, and more;
        ``report.to_dict()`` is the document).

    Raises
    ------
    InputError
        Unknown objective, bad weights or locks (exit code 2 on the command line).
    InfeasibleError
        Locks that no repair of this objective can keep (exit code 3).

    Examples
    --------
    >>> import numpy as np
    >>> D = np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]])
    >>> r = repair(D, "shrink", progress=False)
    >>> float(r.matrix.values[0, 1]), r.report.changed_entries
    (2.0, 1)
    >>> r.changes
    [('t0', 't1', 5.0, 2.0, -3.0, 'changed')]
    >>> D = np.array([[0, 9, 1, 1], [9, 0, 1, 1], [1, 1, 0, 1], [1, 1, 1, 0.]])
    >>> r = repair(D, "shrink", leave_out="fewest", progress=False)
    >>> r.report.left_out_taxa, r.report.leave_out_optimal, r.matrix.labels
    (['t0'], True, ('t1', 't2', 't3'))
    """
    from seqdist.repair.engine import run

    return run(dm, objective, weights=weights, lock=lock, tol=tol, time_limit=time_limit, seed=seed,
               keep_unmeasured=keep_unmeasured, unmeasured_reasons=unmeasured_reasons, source=source,
               weights_source=weights_source, leave_out=leave_out, **options)


__all__ = ["repair", "RepairResult", "RepairReport", "OBJECTIVES", "OBJECTIVE_GUIDE", "WEIGHTED_OBJECTIVES",
           "REGISTRY", "ALTERED_NOTE", "format_changes", "load_objective", "unmeasured_taxa"]
