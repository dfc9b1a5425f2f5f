"""The repair engine that every objective shares.

:func:`run` does the same steps for every objective:

1. **Input.** The matrix (NaN = missing), weights (a matrix with the same
   labels, non-negative, 0 = free; missing entries are free), locks (pairs of
   labels; a lock is an infinite weight) and the tolerance become a
   :class:`~seqdist.repair.problem.RepairProblem`.
2. **Locks.** One all-pairs shortest-path run over the locked entries: a
   locked entry longer than the shortest locked path between its ends (by
   more than ``tol``) can never be kept, whatever the objective, and the
   request fails with :class:`~seqdist.core.errors.InfeasibleError` naming the
   entry and the path. ``shrink`` and ``grow`` have their own, stronger
   conditions (see :func:`check_locks`).
3. **Solve.** ``seqdist.repair.<objective>.solve(problem) -> Solution``,
   found by name (:func:`load_objective`), so new objectives plug in
   without changes here.
4. **Finish.** Entries within ``tol`` of the input are set back to it
   exactly; missing entries are filled by shortest paths over the repaired
   observed entries (pairs in different connected groups of observed
   entries: the largest of those shortest-path distances, which keeps the
   matrix a metric); locks are checked; and the result is verified to be a
   metric within ``tol``. A result that fails is never returned: that is an
   internal error.
5. **Report.** A :class:`~seqdist.repair.result.RepairReport`: the contract's
   keys (objective, changed_entries, l1_change, l2_change, max_change,
   violated_before, violated_after, objective_value, lower_bound, optimal,
   seconds) and more as typed fields, plus the list of changes.

A repaired matrix is altered data: the report says so, and users should
give the objective and the list of changes with any result they publish.
"""

from __future__ import annotations

import time
from typing import TYPE_CHECKING, Any, Callable, Iterable, Mapping, Sequence

import numpy as np

from seqdist.core.errors import InfeasibleError, InputError
from seqdist.core.matrix import DistanceMatrix, default_tol
from seqdist.core.params import NONNEG, POSITIVE
from seqdist.repair import registry
from seqdist.repair.problem import RepairProblem, Solution

# the objective registry's names, re-exported for the engine's callers
from seqdist.repair.registry import OBJECTIVE_GUIDE, OBJECTIVES, WEIGHTED_OBJECTIVES  # noqa: F401
from seqdist.repair.result import RepairReport

if TYPE_CHECKING:  # only for the annotations: pandas and the work budget are imported where they are used
    import pandas as pd
    from numpy.typing import ArrayLike

    from seqdist.repair.problem import Budget

__all__ = ["RepairResult", "load_objective", "check_options", "as_matrix", "weights_array",
           "lock_mask", "build_problem", "describe_path", "check_locks", "fill_missing", "measured_groups",
           "unmeasured_taxa", "verify_metric", "finish", "change_rows", "format_changes", "build_report",
           "checked_triangles", "leave_out_request", "suspect_reasons", "fewest_left_out", "check_magnitude", "run"]

ALTERED_NOTE = ("A repaired matrix is altered data: report the objective and the list of changed "
                "entries with any result you publish.")

#: Above this size the metric test uses one shortest-path run (a sufficient
#: test, see :func:`verify_metric`) before the triangle scan.
_FAST_VERIFY_N = 400


class RepairResult:
    """What :func:`seqdist.repair.repair` returns.

    Attributes
    ----------
    matrix : DistanceMatrix
        The repaired matrix (a metric within ``tol``; missing entries filled).
    changes : list of tuple
        ``(label, label, before, after, change, how)`` for every changed entry
        and every filled missing entry (``before`` and ``change`` NaN there),
        in row order of the upper triangle (built on first use); ``how`` says
        how the entry was made (see :func:`change_rows`).
    report : RepairReport
        What the repair did, one typed field per key of the ``--json``
        document (:meth:`RepairReport.to_dict` gives the document),
        including ``left_out_taxa``.
    """

    def __init__(self, matrix: DistanceMatrix, report: RepairReport, before: np.ndarray | None = None,
                 observed: np.ndarray | None = None, tol: float = 0.0, changes: list | None = None,
                 no_evidence: np.ndarray | None = None):
        self.matrix = matrix
        self.report = report
        self._before = before
        self._observed = observed
        self._tol = tol
        self._changes = changes
        self._no_evidence = no_evidence

    @property
    def changes(self) -> list:
        if self._changes is None:
            self._changes = change_rows(self.matrix.labels, self._before, self.matrix.values, self._observed,
                                        self._tol, self._no_evidence)
        return self._changes

    def changes_frame(self) -> pd.DataFrame:
        """The changes as a pandas DataFrame (columns ``label_a, label_b, before, after, change, how``).

        Examples
        --------
        >>> r = run(DistanceMatrix.from_array([[0, 1, 5], [1, 0, 1], [5, 1, 0]], list("abc")), "shrink",
        ...         progress=False)
        >>> r.changes_frame()[["label_a", "label_b", "after", "how"]].to_dict("records")
        [{'label_a': 'a', 'label_b': 'c', 'after': 2.0, 'how': 'changed'}]
        """
        import pandas as pd

        return pd.DataFrame(self.changes, columns=["label_a", "label_b", "before", "after", "change", "how"])

    def changes_text(self) -> str:
        """The ``--changes`` file (see :func:`format_changes`), built without Python tuples per entry."""
        if self._changes is not None or self._before is None:
            return format_changes(self.changes)
        return _changes_text(self.matrix.labels, self._before, self.matrix.values, self._observed, self._tol,
                             self._no_evidence)

    def __repr__(self) -> str:
        return f"RepairResult(objective={self.report.objective!r}, changed_entries={self.report.changed_entries})"


# ------------------------------------------------------------- dispatch
def load_objective(name: str) -> Callable[[RepairProblem], Solution]:
    """The ``solve`` function of objective ``name`` (see :mod:`seqdist.repair.registry`).

    Raises
    ------
    InputError
        Unknown objective.
    """
    return registry.get(name).solver()


def check_options(name: str, options: dict | None) -> dict:
    """Objective ``name``'s options, checked against what its module declares (``OPTIONS``).

    Called before any data is read, so a misspelt or inapplicable option
    fails at once (:class:`InputError` naming it and the valid ones).

    Examples
    --------
    >>> check_options("shrink", {})
    {}
    >>> check_options("shrink", {"method": "exact"})
    Traceback (most recent call last):
    ...
    seqdist.core.errors.InputError: objective 'shrink' has no option 'method' (its options: none)
    """
    from seqdist.repair.problem import validate_options

    return validate_options(name, registry.get(name).options(), options)


# ---------------------------------------------------------------- input
def as_matrix(dm: DistanceMatrix | ArrayLike) -> DistanceMatrix:
    """A :class:`DistanceMatrix` from a matrix or anything array-like (validated)."""
    if isinstance(dm, DistanceMatrix):
        return dm
    return DistanceMatrix.from_array(dm)


def weights_array(weights: DistanceMatrix | ArrayLike | None, dm: DistanceMatrix, observed: np.ndarray,
                  source: str = "weights") -> np.ndarray:
    """Validated per-entry weights (1 by default; 0 on missing entries and the diagonal).

    ``weights`` may be None, a :class:`DistanceMatrix` with the same labels
    (any order), or an (n, n) array. Weights must be finite and non-negative
    on every observed entry; NaN is allowed only where the distance is
    missing.
    """
    n = dm.n
    if weights is None:
        return observed.astype(np.float64)
    if isinstance(weights, DistanceMatrix):
        if weights.labels != dm.labels:
            if sorted(weights.labels) != sorted(dm.labels):
                extra = [lab for lab in weights.labels if lab not in dm._index_map()]
                absent = [lab for lab in dm.labels if lab not in weights._index_map()]
                what = f"label '{extra[0]}' is not in the matrix" if extra else f"label '{absent[0]}' is missing"
                raise InputError(f"{source}: {what}; the weights need the same labels as the matrix")
            weights = weights.subset(dm.labels)
        w = np.array(weights.values, dtype=np.float64)
    else:
        try:
            w = np.array(weights, dtype=np.float64)
        except (TypeError, ValueError):
            raise InputError(f"{source}: not numeric") from None
        if w.shape != (n, n):
            raise InputError(f"{source}: shape {w.shape} does not match the {n} x {n} matrix")
    bad = observed & ~np.isfinite(w)
    if bad.any():
        i, j = np.argwhere(bad)[0]
        raise InputError(f"{source}: entry ({dm.labels[i]}, {dm.labels[j]}) is missing or infinite, "
                         "but the distance is observed")
    neg = observed & (w < 0)
    if neg.any():
        i, j = np.argwhere(neg)[0]
        raise InputError(f"{source}: negative weight {float(w[i, j])!r} at ({dm.labels[i]}, {dm.labels[j]})")
    if np.abs(np.where(observed, w - w.T, 0.0)).max(initial=0.0) > 0:
        i, j = np.argwhere(observed & (w != w.T))[0]
        raise InputError(f"{source}: asymmetric at ({dm.labels[i]}, {dm.labels[j]})")
    w = np.where(observed, w, 0.0)
    return w


def lock_mask(lock: np.ndarray | Sequence[tuple[str | int, str | int]] | None, dm: DistanceMatrix,
              observed: np.ndarray) -> np.ndarray:
    """Symmetric boolean mask of locked entries.

    ``lock`` may be None, an (n, n) boolean array, or a sequence of pairs of
    labels or of indices (e.g. from :func:`seqdist.io.matrices.read_pairs`). Locking a
    missing entry is an input error (there is no value to keep).
    """
    n = dm.n
    mask = np.zeros((n, n), dtype=bool)
    if lock is None:
        return mask
    arr = np.asarray(lock) if not isinstance(lock, (list, tuple)) else None
    if arr is not None and arr.dtype == bool:
        if arr.shape != (n, n):
            raise InputError(f"lock mask of shape {arr.shape} does not match the {n} x {n} matrix")
        mask = arr | arr.T
    else:
        for pair in lock:
            a, b = pair
            i = dm.index(a) if isinstance(a, str) else int(a)
            j = dm.index(b) if isinstance(b, str) else int(b)
            if not (0 <= i < n and 0 <= j < n):
                raise InputError(f"locked pair ({a}, {b}) is outside the {n} x {n} matrix")
            if i == j:
                raise InputError(f"locked pair ({dm.labels[i]}, {dm.labels[j]}) needs two different labels")
            mask[i, j] = mask[j, i] = True
    np.fill_diagonal(mask, False)
    bad = mask & ~observed
    if bad.any():
        i, j = np.argwhere(bad)[0]
        raise InputError(f"locked pair ({dm.labels[i]}, {dm.labels[j]}) is a missing entry: there is no value to keep")
    return mask


def build_problem(dm: DistanceMatrix, weights: DistanceMatrix | ArrayLike | None = None,
                  lock: np.ndarray | Sequence[tuple[str | int, str | int]] | None = None, tol: float | None = None,
                  time_limit: float | None = None, seed: int = 0, options: Mapping[str, Any] | None = None,
                  progress: Callable[[float | None, str | None], object] | None = None,
                  weights_source: str = "weights") -> RepairProblem:
    """Turn user input into a :class:`RepairProblem` (validated)."""
    D = np.array(dm.values, dtype=np.float64)
    observed = ~np.isnan(D)
    np.fill_diagonal(observed, False)
    if tol is None:
        tol = default_tol(D)
    tol = NONNEG.check("tol", tol)
    if time_limit is not None:
        time_limit = POSITIVE.check("time_limit", time_limit)
    w = weights_array(weights, dm, observed, weights_source)
    locked = lock_mask(lock, dm, observed)
    w[locked] = np.inf
    return RepairProblem(D=D, weights=w, locked=locked, observed=observed, tol=tol, time_limit=time_limit,
                         progress=progress, seed=int(seed), options=dict(options or {}), labels=dm.labels)


# ---------------------------------------------------------------- locks
def _graph(D: np.ndarray, mask: np.ndarray) -> np.ndarray:
    W = np.where(mask, D, np.inf)
    np.fill_diagonal(W, 0.0)
    return W


def describe_path(problem: RepairProblem, W: np.ndarray, i: int, j: int) -> str:
    """``a - c - b (length 3.5)`` for one shortest path over ``W`` from i to j."""
    from seqdist.kernels.kept_graph import path_between

    path = path_between(W, i, j)
    if path is None:
        return "(no path)"
    length = sum(W[a, b] for a, b in zip(path[:-1], path[1:]))
    return f"{' - '.join(problem.label(v) for v in path)} (length {length:.12g})"


def _conflicts(bad: np.ndarray) -> list[tuple[int, int]]:
    iu = np.argwhere(np.triu(bad, 1))
    return [(int(a), int(b)) for a, b in iu]


def check_locks(problem: RepairProblem, objective: str) -> None:
    """Raise :class:`InfeasibleError` when no repair of ``objective`` can keep the locks.

    * Any objective: a locked entry longer than the shortest path over the
      other locked entries (by more than ``tol``). Otherwise the locked entries
      alone satisfy every cycle inequality, and shortest paths over them (with
      a huge length on every other pair) give a metric that keeps them.
    * ``shrink`` (decrease only): the closure of the whole matrix is the
      largest decrease-only metric, so the locks are feasible exactly when the
      closure does not decrease a locked entry.
    * ``grow`` (increase only): with ``U`` the shortest paths over the locked
      entries, every metric keeping the locks has ``X <= U``, and growing
      needs ``X >= D``; shortest paths with a huge length on every unlocked
      pair reach ``U`` within each group of locked-connected taxa. So grow is
      feasible exactly when every observed entry satisfies ``D <= U + tol``.
    """
    from seqdist.kernels.shortest_paths import apsp

    L = problem.locked
    if not L.any():
        return
    D, tol = problem.D, problem.tol
    WL = _graph(D, L)
    UL = apsp(WL)
    bad = L & (D > UL + tol)
    if bad.any():
        _raise_conflicts(problem, bad, WL, True, "{pair} is longer than the locked path {path}",
                         "locked entries conflict, no repair can keep them all: ", "")
    if objective == "shrink":
        WD = _graph(D, problem.observed)
        bad = L & (D > apsp(WD) + tol)
        if bad.any():
            _raise_conflicts(problem, bad, WD, True, "locked {pair} is longer than the path {path}",
                             "shrink only decreases entries, so it cannot keep these locks: ",
                             " (try --objective fewest or l1)")
    elif objective == "grow":
        bad = problem.observed & ~L & (D > UL + tol)
        if bad.any():
            _raise_conflicts(problem, bad, WL, False,
                             "{pair} may not decrease but is longer than the locked path {path}",
                             "grow only increases entries, so it cannot keep these locks: ",
                             " (try --objective fewest or l1)")


def _raise_conflicts(problem, bad, W, drop_edge: bool, each: str, lead: str, hint: str):
    """Raise InfeasibleError naming up to three conflicting entries and the path
    each is longer than (over ``W``; without the entry itself when ``drop_edge``)."""
    D = problem.D
    pairs = _conflicts(bad)
    msgs = []
    for i, j in pairs[:3]:
        Wp = W
        if drop_edge:
            Wp = W.copy()
            Wp[i, j] = Wp[j, i] = np.inf
        msgs.append(each.format(pair=f"({problem.label(i)}, {problem.label(j)}) = {D[i, j]:.12g}",
                                path=describe_path(problem, Wp, i, j)))
    more = f" and {len(pairs) - 3} more" if len(pairs) > 3 else ""
    raise InfeasibleError(lead + "; ".join(msgs) + more + hint)


# --------------------------------------------------------------- finish
def fill_missing(X: np.ndarray, observed: np.ndarray) -> tuple[np.ndarray, dict]:
    """Fill missing entries by shortest paths over the observed entries of ``X``.

    A missing entry whose two taxa are joined by a path of observed entries
    is filled from evidence: the length of the shortest such path. Pairs with
    no such path (the observed entries fall into several connected groups)
    have no evidence at all; they get one value for all, the largest
    shortest-path distance within the groups. Such a constant ``C`` at least
    as large as every within-group distance keeps the matrix a metric (a
    triangle with sides from two or three groups has two sides ``C``, or
    three), but it is made up, not measured: the engine leaves such taxa out
    unless asked to keep them (see :func:`measured_groups`). Returns the
    filled matrix and a dict with ``filled_entries``, ``filled_by_path``,
    ``filled_without_evidence``, ``groups``, ``between_groups_value`` and
    ``no_evidence`` (a boolean mask of the entries filled without evidence).
    """
    from seqdist.kernels.shortest_paths import apsp

    n = X.shape[0]
    missing = ~observed.copy()
    np.fill_diagonal(missing, False)
    none = np.zeros((n, n), dtype=bool)
    info = {"filled_entries": int(missing.sum() // 2), "filled_by_path": int(missing.sum() // 2),
            "filled_without_evidence": 0, "groups": 1, "between_groups_value": None, "no_evidence": none}
    out = np.array(X, dtype=np.float64)
    np.fill_diagonal(out, 0.0)
    if not missing.any():
        return out, info
    A = apsp(np.where(observed, out, np.inf))
    unreachable = ~np.isfinite(A)
    if unreachable.any():
        fin = A[np.isfinite(A)]
        C = float(fin.max()) if fin.size else 0.0
        A = np.where(unreachable, C, A)
        info["groups"] = len(measured_groups(observed))
        info["between_groups_value"] = C
        info["no_evidence"] = unreachable & missing
        info["filled_without_evidence"] = int(np.triu(unreachable & missing, 1).sum())
        info["filled_by_path"] = info["filled_entries"] - info["filled_without_evidence"]
    out[missing] = A[missing]
    return out, info


def measured_groups(observed: np.ndarray) -> list[np.ndarray]:
    """Groups of taxa joined by paths of measured entries, largest first.

    Between two groups there is no measured distance at all, so no distance
    between them can be inferred. Ties in size go to the group holding the
    earlier taxon.

    Parameters
    ----------
    observed : ndarray (n, n) of bool
        True where the distance was measured (the diagonal is ignored).

    Returns
    -------
    list of ndarray
        Index arrays (sorted), the largest group first.

    Examples
    --------
    >>> obs = np.zeros((4, 4), dtype=bool)
    >>> obs[0, 2] = obs[2, 0] = True
    >>> [g.tolist() for g in measured_groups(obs)]
    [[0, 2], [1], [3]]
    """
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components

    obs = np.array(observed, dtype=bool)
    np.fill_diagonal(obs, False)
    _, comp = connected_components(csr_matrix(obs), directed=False)
    groups = [np.flatnonzero(comp == c) for c in np.unique(comp)]
    groups.sort(key=lambda g: (-g.size, int(g[0])))
    return groups


def unmeasured_taxa(dm: DistanceMatrix) -> dict:
    """Taxa with no measured distance to the largest group of measured taxa, and why.

    Returns ``{label: reason}`` in label order; empty when every taxon is
    joined to every other by a path of measured entries.

    Examples
    --------
    >>> D = np.array([[0, 1, 2, np.nan], [1, 0, 1.5, np.nan], [2, 1.5, 0, np.nan], [np.nan] * 3 + [0]])
    >>> unmeasured_taxa(DistanceMatrix.from_array(D, ["a", "b", "c", "d"]))
    {'d': 'no measured distance to any other taxon'}
    """
    observed = ~np.isnan(dm.values)
    groups = measured_groups(observed)
    out = {}
    if len(groups) < 2:
        return out
    main = len(groups[0])
    for g in groups[1:]:
        for i in g:
            if g.size == 1:
                why = "no measured distance to any other taxon"
            else:
                others = ", ".join(dm.labels[j] for j in g if j != i)
                why = (f"measured only against {others} (a group of {g.size} with no measured distance "
                       f"to the other {main} taxa)")
            out[dm.labels[int(i)]] = why
    return {lab: out[lab] for lab in dm.labels if lab in out}


def verify_metric(X: np.ndarray, tol: float) -> bool:
    """The contract's metric test within ``tol``.

    For n above a few hundred, one shortest-path run decides first: when no
    entry exceeds the shortest path between its ends by more than ``tol``,
    every triangle holds within ``tol`` (a sufficient condition, and
    n^3/2 min-plus steps against the triangle scan's n^3/6 with heavier
    steps). Otherwise, and always for small n, :func:`seqdist.kernels.triangles.is_metric`
    has the final word.
    """
    from seqdist.kernels.triangles import is_metric

    d = np.asarray(X, dtype=np.float64)
    if not np.isfinite(d).all() or (d < 0).any():
        return False
    if np.abs(np.diagonal(d)).max(initial=0.0) > tol or np.abs(d - d.T).max(initial=0.0) > tol:
        return False
    if d.shape[0] > _FAST_VERIFY_N:
        from seqdist.kernels.shortest_paths import apsp

        if float((d - apsp(d)).max(initial=0.0)) <= tol:
            return True
    return is_metric(d, tol)


def _finish(problem: RepairProblem, X: np.ndarray, snap: bool) -> tuple[np.ndarray, dict]:
    D, obs, tol = problem.D, problem.observed, problem.tol
    out = np.array(X, dtype=np.float64)
    if snap:
        close = obs & (np.abs(out - D) <= tol)
        out[close] = D[close]
    out[problem.locked] = D[problem.locked]
    out = 0.5 * (out + out.T)  # exact symmetry (identical halves stay identical)
    out, info = fill_missing(out, obs)
    return out, info


def finish(problem: RepairProblem, solution: Solution, objective: str) -> tuple[np.ndarray, dict]:
    """Snap, fill, check locks and direction, verify; never return a non-metric."""
    D, obs, tol = problem.D, problem.observed, problem.tol
    X = np.asarray(solution.X, dtype=np.float64)
    if X.shape != D.shape:
        raise RuntimeError(f"objective {objective} returned shape {X.shape} for a {D.shape} problem")
    if not np.isfinite(X[obs]).all():
        raise RuntimeError(f"objective {objective} returned non-finite values on observed entries")
    moved = problem.locked & (np.abs(X - D) > tol)
    if moved.any():
        i, j = np.argwhere(moved)[0]
        raise RuntimeError(f"objective {objective} moved locked entry ({problem.label(i)}, {problem.label(j)})")
    if objective == "shrink" and (obs & (X > D + tol)).any():
        raise RuntimeError("shrink increased an entry")
    if objective == "grow" and (obs & (X < D - tol)).any():
        raise RuntimeError("grow decreased an entry")
    for snap in (True, False):
        out, info = _finish(problem, X, snap)
        if verify_metric(out, tol):
            info["snapped"] = snap
            return out, info
    raise RuntimeError(f"objective {objective} returned a matrix that is not a metric within tol = {tol:g}; "
                       "nothing was written")


# --------------------------------------------------------------- report
#: How an entry of the output was made (the ``how`` column of the changes file).
HOW_CHANGED = "changed"                      # measured, moved by the repair
HOW_BY_PATH = "filled_by_path"               # missing; a path of measured entries gives its value
HOW_NO_EVIDENCE = "filled_without_evidence"  # missing; no path: a made-up value that keeps a metric


def _change_arrays(D, X, observed, tol, no_evidence):
    n = D.shape[0]
    iu, ju = np.triu_indices(n, 1)
    obs = observed[iu, ju]
    before = D[iu, ju]
    after = X[iu, ju]
    keep = ~obs | (np.abs(after - before) > tol)
    iu, ju, before, after, obs = iu[keep], ju[keep], before[keep], after[keep], obs[keep]
    nothing = np.zeros(iu.size, dtype=bool) if no_evidence is None else no_evidence[iu, ju]
    how = np.where(obs, HOW_CHANGED, np.where(nothing, HOW_NO_EVIDENCE, HOW_BY_PATH))
    return iu, ju, before, after, obs, how


def change_rows(labels: Sequence[str], D: np.ndarray, X: np.ndarray, observed: np.ndarray, tol: float,
                no_evidence: np.ndarray | None = None) -> list[tuple]:
    """``(label, label, before, after, change, how)`` for changed and filled entries (upper triangle).

    ``how`` is ``changed`` (a measured entry the repair moved),
    ``filled_by_path`` (a missing entry given the length of a path of
    measured entries) or ``filled_without_evidence`` (a missing entry with no
    such path: a made-up value).
    """
    iu, ju, before, after, obs, how = _change_arrays(D, X, observed, tol, no_evidence)
    return [(labels[i], labels[j], float(b) if o else float("nan"), float(a),
             float(a - b) if o else float("nan"), str(h))
            for i, j, b, a, o, h in zip(iu.tolist(), ju.tolist(), before.tolist(), after.tolist(),
                                        obs.tolist(), how.tolist())]


CHANGES_HEADER = "label_a\tlabel_b\tbefore\tafter\tchange\thow"


def _changes_text(labels, D, X, observed, tol, no_evidence=None) -> str:
    from seqdist.io.matrices import quote_cell

    iu, ju, before, after, obs, how = _change_arrays(D, X, observed, tol, no_evidence)
    q = [quote_cell(lab, "\t") for lab in labels]
    b = ["NA" if not o else repr(v) for v, o in zip(before.tolist(), obs.tolist())]
    a = list(map(repr, after.tolist()))
    c = ["NA" if not o else repr(v) for v, o in zip((after - np.where(obs, before, 0.0)).tolist(), obs.tolist())]
    lines = [CHANGES_HEADER]
    lines.extend(f"{q[i]}\t{q[j]}\t{x}\t{y}\t{z}\t{h}"
                 for i, j, x, y, z, h in zip(iu.tolist(), ju.tolist(), b, a, c, how.tolist()))
    return "\n".join(lines) + "\n"


def format_changes(rows: list[tuple]) -> str:
    """The ``--changes`` file: a tsv with one line per changed or filled entry.

    Columns ``label_a, label_b, before, after, change, how``; a filled
    missing entry has ``before`` and ``change`` written as ``NA``, and
    ``how`` says how each entry was made (``changed``, ``filled_by_path``,
    ``filled_without_evidence``; see :func:`change_rows`).

    Examples
    --------
    >>> print(format_changes([("a", "b", 5.0, 2.0, -3.0, "changed")]), end="")  # doctest: +NORMALIZE_WHITESPACE
    label_a	label_b	before	after	change	how
    a	b	5.0	2.0	-3.0	changed
    """
    from seqdist.io.matrices import quote_cell

    def f(v):
        return "NA" if v != v else repr(float(v))

    lines = [CHANGES_HEADER]
    for a, b, before, after, change, how in rows:
        lines.append("\t".join([quote_cell(a, "\t"), quote_cell(b, "\t"), f(before), f(after), f(change), how]))
    return "\n".join(lines) + "\n"


def build_report(problem: RepairProblem, objective: str, X: np.ndarray, solution: Solution, fill: dict,
                 seconds: float, violated_before: tuple[int, float], objective_value: float,
                 **taxa: Any) -> RepairReport:
    """The :class:`RepairReport` of a finished repair.

    ``taxa`` holds the fields on the taxa left out or kept (``n_input``,
    ``left_out_taxa``, ``left_out_reasons``, ``unmeasured_taxa``,
    ``kept_unmeasured``, ``leave_out`` and the optional ``leave_out_*`` ones),
    which :func:`run` knows.
    """
    from seqdist.kernels.triangles import count_violations

    D, obs, tol = problem.D, problem.observed, problem.tol
    iu = np.triu(obs, 1)
    diff = (X - D)[iu]
    changed = np.abs(diff) > tol
    ad = np.abs(diff)
    w = problem.weights[iu]
    # a verified metric has no violated triangle; counting again is a cheap double check for small n
    violated_after = count_violations(X, tol)[0] if problem.n <= 1000 else 0
    n = problem.n
    lb = float(solution.lower_bound)
    optimal = bool(solution.optimal)
    if optimal and objective in ("fewest", "grow") and objective_value > lb + 1e-9 * objective_value:
        optimal = False  # the solver's proof was for a value the finished matrix does not reach
    return RepairReport(
        objective=objective,
        changed_entries=int(changed.sum()),
        l1_change=float(ad.sum()),
        l2_change=float((diff ** 2).sum()),
        max_change=float(ad.max(initial=0.0)),
        violated_before=int(violated_before[0]),
        violated_after=int(violated_after),
        triangles=n * (n - 1) * (n - 2) // 6,
        checked_triangles_before=checked_triangles(obs),
        objective_value=float(objective_value),
        lower_bound=lb,
        optimal=optimal,
        seconds=round(float(seconds), 4),
        n=n,
        entries=n * (n - 1) // 2,
        observed_entries=int(iu.sum()),
        increased_entries=int((diff > tol).sum()),
        decreased_entries=int((diff < -tol).sum()),
        filled_entries=fill["filled_entries"],
        filled_by_path=fill["filled_by_path"],
        filled_without_evidence=fill["filled_without_evidence"],
        weighted_l1_change=_wsum(w[changed], ad[changed]),
        max_violation_before=float(violated_before[1]),
        gap=float(max(0.0, objective_value - solution.lower_bound)),
        relative_gap=float(max(0.0, objective_value - solution.lower_bound) / objective_value)
        if objective_value > 0 else 0.0,
        tol=tol,
        time_limit=problem.time_limit,
        locked_entries=int(np.triu(problem.locked, 1).sum()),
        free_entries=int((np.triu(obs, 1) & (problem.weights == 0)).sum()),
        weights="uniform" if bool(np.all(w[np.isfinite(w)] == 1)) else "given",
        observed_groups=fill["groups"],
        between_groups_value=fill["between_groups_value"],
        seed=problem.seed,
        details=dict(solution.details),
        note=ALTERED_NOTE,
        violated_after_by="verified metric (every triangle within tol)" if n > 1000 else None,
        **taxa,
    )


def checked_triangles(observed: np.ndarray) -> int:
    """Triangles whose three sides are all measured (the ones a violation count can see).

    Examples
    --------
    >>> obs = ~np.eye(4, dtype=bool); obs[0, 1] = obs[1, 0] = False
    >>> checked_triangles(obs)
    2
    """
    n = observed.shape[0]
    A = np.array(observed, dtype=np.float64)
    np.fill_diagonal(A, 0.0)
    if A.sum() == n * (n - 1):
        return n * (n - 1) * (n - 2) // 6
    # common measured neighbours of each measured pair, each triangle counted 6 times
    return int(round(float(((A @ A) * A).sum()) / 6.0))


def _wsum(w: np.ndarray, x: np.ndarray) -> float:
    """sum(w * x) over changed entries (a locked entry never changes, so no inf * 0)."""
    return float((w * x).sum()) if x.size else 0.0


# ------------------------------------------------------------------ run
class _Bar:
    def __init__(self, objective: str):
        from seqdist.core.console import Progress

        # the solvers report phases, not equal units of work: elapsed time only, no estimate
        self.bar = Progress(f"repair ({objective})", total=1.0, estimate=False)

    def __call__(self, fraction=None, note=None):
        if fraction is not None:
            self.bar.done = float(min(1.0, max(0.0, fraction)))
        if self.bar.done > 0:  # no line (and no estimate) before the first real step
            self.bar.update(0.0, note)

    def close(self):
        self.bar.close()


def _leave_out(problem: RepairProblem, keep: np.ndarray, remedy: dict | None = None) -> RepairProblem:
    """The same problem on the taxa ``keep`` only (locks on the others are an input error).

    ``remedy`` maps the labels left out on request to why (for the error
    message); the others are left out for want of a measured distance.
    """
    import dataclasses

    drop = np.setdiff1d(np.arange(problem.n), keep)
    locked = problem.locked
    if locked[drop].any():
        i = int(drop[np.flatnonzero(locked[drop].any(axis=1))[0]])
        j = int(np.flatnonzero(locked[i])[0])
        why = (remedy or {}).get(problem.label(i))
        if why is None:
            raise InputError(f"locked pair ({problem.label(i)}, {problem.label(j)}) involves {problem.label(i)}, "
                             "which is left out (no measured distance to the other taxa); "
                             "keep such taxa (keep_unmeasured) or drop the lock")
        raise InputError(f"locked pair ({problem.label(i)}, {problem.label(j)}) involves {problem.label(i)}, "
                         f"which is left out ({why}); drop the lock or keep {problem.label(i)}")
    ix = np.ix_(keep, keep)
    return dataclasses.replace(problem, D=problem.D[ix].copy(), weights=problem.weights[ix].copy(),
                               locked=locked[ix].copy(), observed=problem.observed[ix].copy(),
                               labels=tuple(problem.labels[k] for k in keep))


# ------------------------------------------------------------- leaving taxa out
#: Why a taxon is left out when the caller asked for it (``left_out_reasons``).
REASON_NAMED = "named by the user"
REASON_FEWEST = "in the fewest taxa whose removal leaves a metric"

#: Work budget of the "fewest" leave-out search, in reference seconds (at most
#: half of a time limit); its integer program stops when it is spent.
LEAVE_OUT_BUDGET = 30.0


def leave_out_request(leave_out: str | Iterable[str] | dict[str, str] | None, dm: DistanceMatrix,
                      source: str | None = None) -> tuple[str | None, dict[str, str] | None, str | list[str] | None]:
    """Check a ``leave_out`` request; returns ``(kind, {label: reason} or None, what to report)``.

    ``kind`` is None, ``"labels"``, ``"suspects"`` or ``"fewest"``. Labels
    may be a list (reason "named by the user") or a dict ``{label: reason}``.

    Examples
    --------
    >>> dm = DistanceMatrix.from_array(np.ones((3, 3)) - np.eye(3), ["a", "b", "c"])
    >>> leave_out_request(["b", "b"], dm)
    ('labels', {'b': 'named by the user'}, ['b'])
    >>> leave_out_request(["z"], dm)
    Traceback (most recent call last):
    ...
    seqdist.core.errors.InputError: leave_out: unknown label 'z' (not in the matrix)
    """
    if leave_out is None:
        return None, None, None
    if isinstance(leave_out, str):
        if leave_out in ("suspects", "fewest"):
            return leave_out, None, leave_out
        raise InputError(f"leave_out must be 'suspects', 'fewest' or a list of labels, got {leave_out!r}")
    if isinstance(leave_out, dict):
        items = list(leave_out.items())
    else:
        try:
            items = [(lab, REASON_NAMED) for lab in leave_out]
        except TypeError:
            raise InputError(f"leave_out must be 'suspects', 'fewest' or a list of labels, "
                             f"got {leave_out!r}") from None
    idx = dm._index_map()
    out = {}
    for lab, why in items:
        if not isinstance(lab, str) or lab not in idx:
            shown = f"'{lab}'" if isinstance(lab, str) else repr(lab)
            raise InputError(f"leave_out: unknown label {shown} (not in {source or 'the matrix'})")
        if not isinstance(why, str) or not why.strip():
            raise InputError(f"leave_out: the reason for '{lab}' must be text, got {why!r}")
        out.setdefault(lab, why)
    return "labels", out, list(out)


def suspect_reasons(dm: DistanceMatrix) -> dict:
    """Why each taxon :func:`seqdist.audit.suspects.find_suspects` names from the matrix is left out."""
    from seqdist.audit.suspects import find_suspects

    return find_suspects(dm).reasons()


def fewest_left_out(problem: RepairProblem, budget: Budget) -> tuple[dict, object]:
    """``({label: reason}, TaxaCover)``: the fewest taxa whose removal leaves no violated checked triangle."""
    from seqdist.repair.taxa import fewest_taxa

    cover = fewest_taxa(problem.D, problem.tol, labels=problem.labels, budget=budget)
    return {problem.label(int(i)): REASON_FEWEST for i in cover.taxa}, cover


def _names(labels: list, most: int = 5) -> str:
    shown = ", ".join(labels[:most])
    return shown + (f" and {len(labels) - most} more" if len(labels) > most else "")


def check_magnitude(D: np.ndarray, weights: np.ndarray, source: str | None = None) -> None:
    """Refuse entries so large that the repair's sums of changes would overflow.

    The objectives add up to n(n-1)/2 weighted absolute or squared changes,
    each at most the largest entry; the largest entry ``M`` and weight ``W``
    must keep ``W * M**2`` times the number of entries finite with room to
    spare (1e300), whatever the objective.
    """
    n = D.shape[0]
    entries = max(1, n * (n - 1) // 2)
    fin = D[np.isfinite(D)]
    M = float(np.abs(fin).max()) if fin.size else 0.0
    wf = weights[np.isfinite(weights)]
    W = max(1.0, float(wf.max()) if wf.size else 1.0)
    limit = float(np.sqrt(1e300 / (entries * W)))
    if M > limit:
        where = f"{source}: " if source else ""
        power = int(np.ceil(np.log10(M / limit))) + 1
        raise InputError(f"{where}entries up to {M:.3g} are too large for the repair's sums of changes "
                         f"(at most {limit:.3g} for {n} taxa{' and these weights' if W > 1 else ''}); "
                         f"rescale the matrix, e.g. divide every entry by 1e{power}")


def run(dm: DistanceMatrix | ArrayLike, objective: str, weights: DistanceMatrix | ArrayLike | None = None,
        lock: np.ndarray | Sequence[tuple[str | int, str | int]] | None = None, tol: float | None = None,
        time_limit: float | None = None, seed: int = 0, progress: bool = True, keep_unmeasured: bool = False,
        unmeasured_reasons: dict | None = None, source: str | None = None, weights_source: str | None = None,
        leave_out: str | Iterable[str] | dict[str, str] | None = None, **options: Any) -> RepairResult:
    """Repair ``dm`` under ``objective``; see :func:`seqdist.repair.repair`."""
    from seqdist.core.console import warn
    from seqdist.kernels.triangles import count_violations
    from seqdist.repair.problem import Budget

    t0 = time.perf_counter()
    solve = load_objective(objective)
    check_options(objective, options)
    dm = as_matrix(dm)
    kind, remedy, request = leave_out_request(leave_out, dm, source)
    bar = _Bar(objective) if progress else None
    where = f"{source}: " if source else ""
    violated_leaving = None  # violated triangles before taxa were left out on request
    # warnings wait until the input has passed every check, so a refused
    # input prints its one error line and nothing else
    pending = []
    try:
        problem = build_problem(dm, weights, lock, tol, time_limit, seed, options, bar,
                                weights_source=weights_source or "weights")
        check_magnitude(problem.D, problem.weights, source)
        unmeasured = unmeasured_taxa(dm)
        if unmeasured_reasons:
            unmeasured = {lab: unmeasured_reasons.get(lab, why) for lab, why in unmeasured.items()}
        left_out = [] if keep_unmeasured else list(unmeasured)
        keep = np.arange(dm.n)
        if left_out:
            keep = measured_groups(problem.observed)[0]
            if keep.size < 3:
                raise InputError(f"{where}measured distances join at most {keep.size} taxa; "
                                 "a repair needs at least 3 joined by measured distances")
        if unmeasured:
            shown = "; ".join(f"{lab} ({why})" for lab, why in list(unmeasured.items())[:5])
            more = f"; and {len(unmeasured) - 5} more" if len(unmeasured) > 5 else ""
            if left_out:
                pending.append(f"{len(unmeasured)} taxa left out of the repaired matrix, since no measured distance "
                               f"joins them to the others: {shown}{more}")
            else:
                pending.append(f"{len(unmeasured)} taxa kept although no measured distance joins them to the others; "
                               f"their distances to the rest are one made-up value, not evidence: {shown}{more}")
        if kind is not None:
            violated_leaving = int(count_violations(problem.D, problem.tol)[0])
        cover = None
        if kind == "suspects":
            remedy = suspect_reasons(dm)
        elif kind == "fewest":
            # on the taxa that measured distances join (the others are out already)
            limit = LEAVE_OUT_BUDGET if time_limit is None else min(LEAVE_OUT_BUDGET, 0.5 * float(time_limit))
            budget = Budget(limit)
            remedy, cover = fewest_left_out(_leave_out(problem, keep) if left_out else problem, budget)
            if time_limit is not None:
                # the objective gets what the search left of the time limit
                problem = _with_time_limit(problem, max(float(time_limit) - budget.spent, 1e-3))
        remedy = dict(remedy or {})
        reasons = {lab: unmeasured[lab] for lab in left_out}
        for lab, why in remedy.items():
            reasons[lab] = f"{reasons[lab]}; also {why}" if lab in reasons else why
        if remedy:
            idx = dm._index_map()
            out = np.zeros(dm.n, dtype=bool)
            out[[idx[lab] for lab in reasons]] = True
            keep = np.flatnonzero(~out)
            # leaving taxa out can cut the measured entries into groups with no
            # measured distance between them: as for unmeasured taxa, only the
            # largest group stays unless they are kept (with a made-up value)
            groups = measured_groups(problem.observed[np.ix_(keep, keep)]) if keep.size else []
            gone = [dm.labels[int(keep[i])] for g in groups[1:] for i in g]
            if gone:
                named = _names(list(remedy), 3)
                why = (f"no measured distance to the other taxa once {named} "
                       f"{'was' if len(remedy) == 1 else 'were'} left out")
                for lab in gone:
                    unmeasured[lab] = why
                if keep_unmeasured:
                    pending.append(f"{len(gone)} taxa kept although {why}; their distances to the rest are one made-up "
                                   f"value, not evidence: {_names(gone)}")
                else:
                    for lab in gone:
                        reasons[lab] = why
                    keep = keep[groups[0]]
                    pending.append(f"{len(gone)} taxa also left out of the repaired matrix: {why}: {_names(gone)}")
            if keep.size < 3:
                raise InputError(f"{where}leaving out {len(reasons)} of {dm.n} taxa ({_names(list(reasons))}) "
                                 f"leaves {keep.size}; a repair needs at least 3")
            problem = _leave_out(problem, keep, remedy)
        elif left_out:
            problem = _leave_out(problem, keep)
        left_out = [lab for lab in dm.labels if lab in reasons]
        check_locks(problem, objective)
        for message in pending:
            warn(message, stacklevel=3)
        before = count_violations(problem.D, problem.tol)
        solution = solve(problem)
        X, fill = finish(problem, solution, objective)
    finally:
        if bar is not None:
            bar.close()
    D, obs, tol = problem.D, problem.observed, problem.tol
    iu = np.triu(obs, 1)
    ad = np.abs(X - D)[iu]
    w = problem.weights[iu]
    if objective in ("fewest", "grow"):
        # what the objective counts, measured on the delivered matrix
        objective_value = float(w[ad > tol].sum())
    elif objective == "shrink":
        objective_value = _wsum(w[ad > tol], ad[ad > tol])
    else:
        objective_value = float(solution.objective_value)
    lb = float(solution.lower_bound)
    if lb > objective_value + 1e-9 * max(1.0, abs(objective_value)):
        raise RuntimeError(f"objective {objective}: lower bound {lb} above the value {objective_value}")
    seconds = time.perf_counter() - t0
    rep = build_report(problem, objective, X, solution, fill, seconds, before, objective_value,
                       n_input=dm.n, left_out_taxa=left_out,
                       left_out_reasons={lab: reasons[lab] for lab in left_out},
                       unmeasured_taxa={lab: unmeasured[lab] for lab in dm.labels if lab in unmeasured},
                       kept_unmeasured=bool(keep_unmeasured and unmeasured), leave_out=request,
                       violated_before_leaving_out=violated_leaving,
                       leave_out_lower_bound=int(cover.lower_bound) if cover is not None else None,
                       leave_out_optimal=bool(cover.optimal) if cover is not None else None,
                       leave_out_details=dict(cover.details) if cover is not None else None)
    matrix = DistanceMatrix._trusted(X, problem.labels)
    return RepairResult(matrix=matrix, report=rep, before=D, observed=obs, tol=tol, no_evidence=fill["no_evidence"])


def _with_time_limit(problem: RepairProblem, time_limit: float) -> RepairProblem:
    import dataclasses

    return dataclasses.replace(problem, time_limit=time_limit)
