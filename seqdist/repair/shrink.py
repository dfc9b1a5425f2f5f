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

    Missing entries (NaN) stay NaN. A float32 ``D`` (for instance a
    memory-mapped one) gives a float32 result computed in float32, in one
    new matrix and a few rows of work space (the shortest paths are formed
    in the result's memory, then the entries within ``tol`` of them are put
    back, a block of rows at a time); float32 path sums round to 2**-24 of
    their size, so check the result with a tolerance of at least 2**-22
    times the largest entry (:data:`seqdist.core.matrix.FLOAT32_REL_TOL`).

    Examples
    --------
    >>> float(closure(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))[0, 1])
    2.0
    >>> closure(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]], dtype=np.float32)).dtype
    dtype('float32')
    """
    from seqdist.kernels.shortest_paths import apsp

    D = np.asarray(D)
    if D.dtype != np.float32:
        D = np.asarray(D, dtype=np.float64)
    X = apsp(D, out=np.empty(D.shape, dtype=D.dtype))
    step = max(1, (1 << 22) // max(1, D.shape[0]))
    for r0 in range(0, D.shape[0], step):
        d, x = D[r0:r0 + step], X[r0:r0 + step]
        # keep d where it is not above its path by more than tol (NaN stays NaN: NaN > ... is False)
        np.copyto(x, d, where=~(d > x + tol))
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
