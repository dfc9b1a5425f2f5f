"""``shrink``: decrease entries only; the all-pairs shortest-path closure.

With ``A`` the shortest-path distances over the observed entries, the
repair sets every entry ``d(i, j) > A(i, j) + tol`` to ``A(i, j)`` and
keeps the rest. This is exact:

* every decrease-only metric ``X <= D`` satisfies ``X <= A`` (an entry of a
  metric is at most the length of any path, measured in ``X``, hence in
  ``D``), so ``A`` is the largest one and moves each entry the least: it is
  the least-change repair for *every* non-negative weighting of the L1 change;
* an entry that some decrease-only metric keeps has ``d = X <= A``, so the
  closure keeps it too: the closure changes the fewest entries (its change
  set is inside every other's).

Entries within ``tol`` of their shortest path are kept exactly; the result
is still a metric within ``tol``, because every entry is at least its
shortest-path value and the shortest paths form a metric.

With locks: decrease-only with the locked entries fixed is feasible exactly
when the closure does not decrease any locked entry (the engine checks this
before calling :func:`solve` and names the path that undercuts the lock);
the closure is then the answer, since it keeps those entries anyway.
Weights do not change the answer (it is optimal for all of them at once).
Missing entries are free; the engine fills them with the same shortest paths.
"""

from __future__ import annotations

import numpy as np

from seqdist.repair.problem import RepairProblem, Solution, validate_options

__all__ = ["closure", "solve"]

#: shrink has no options (it is exact, with no stopping rule).
OPTIONS: dict = {}


def closure(D: np.ndarray, tol: float = 0.0) -> np.ndarray:
    """The decrease-only repair of ``D``: entries above their shortest path by more than ``tol`` set to it.

    Missing entries (NaN) stay NaN.

    Examples
    --------
    >>> float(closure(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))[0, 1])
    2.0
    """
    from seqdist.kernels.shortest_paths import apsp

    A = apsp(D)
    X = np.where(D > A + tol, A, D)
    np.fill_diagonal(X, 0.0)
    return X


def solve(problem: RepairProblem) -> Solution:
    """The shortest-path closure (exact; ``lower_bound`` = ``objective_value``)."""
    validate_options("shrink", OPTIONS, problem.options)
    D, obs, tol = problem.D, problem.observed, problem.tol
    problem.report(0.0, "shortest paths")
    X = closure(D, tol)
    iu = np.triu(obs, 1)
    ch = iu & (np.abs(X - D) > tol)
    w = problem.weights[ch]
    value = float((w * (D - X)[ch]).sum()) if ch.any() else 0.0
    problem.report(1.0, "done")
    return Solution(X=X, objective_value=value, lower_bound=value, optimal=True,
                    details={"method": "shortest-path closure (blocked Floyd-Warshall)",
                             "changed_by_closure": int(ch.sum())})
