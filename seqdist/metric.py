"""Compiled kernels on plain arrays for triangle checks, shared by audit, scores,
repair and impact. Shortest paths live in :mod:`seqdist.paths`.

* :func:`count_violations` - exact count of violated triangles and the
  largest violation, skipping triangles with a missing side.
* :func:`max_violation` - the largest ``d(i,j) - d(i,k) - d(k,j)`` over all
  triples, by a min-plus product (cheaper than counting).
* :func:`is_metric` - the contract's metric test within a tolerance.

All kernels are pure functions on float64 arrays (inputs are not modified)
and are checked in the tests against scipy and plain loops.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from .matrix import default_tol


@njit(parallel=True, cache=True)
def _count_kernel(d, tol):  # pragma: no cover - compiled
    n = d.shape[0]
    counts = np.zeros(n, dtype=np.int64)
    worst = np.zeros(n)
    for i in prange(n):
        c = 0
        w = 0.0
        for j in range(i + 1, n):
            dij = d[i, j]
            if dij != dij:
                continue
            for k in range(j + 1, n):
                dik = d[i, k]
                djk = d[j, k]
                if dik != dik or djk != djk:
                    continue
                # largest side minus the sum of the other two
                if dij >= dik and dij >= djk:
                    e = dij - dik - djk
                elif dik >= djk:
                    e = dik - dij - djk
                else:
                    e = djk - dij - dik
                if e > tol:
                    c += 1
                    if e > w:
                        w = e
        counts[i] = c
        worst[i] = w
    return counts, worst


def count_violations(values: np.ndarray, tol: float | None = None) -> tuple[int, float]:
    """Exact number of violated triangles and the largest violation.

    A triangle (unordered triple of distinct taxa) is violated when its
    longest side exceeds the sum of the other two by more than ``tol``.
    Triangles with a missing side are skipped.

    Examples
    --------
    >>> count_violations(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))
    (1, 3.0)
    """
    d = np.ascontiguousarray(values, dtype=np.float64)
    if tol is None:
        tol = default_tol(d)
    if d.shape[0] < 3:
        return 0, 0.0
    counts, worst = _count_kernel(d, float(tol))
    return int(counts.sum()), float(worst.max())


@njit(parallel=True, cache=True)
def _max_violation_kernel(d):  # pragma: no cover - compiled
    # max over i<j of d[i,j] - min_k (d[i,k] + d[k,j]); NaN entries ignored.
    n = d.shape[0]
    out = np.zeros(n)
    for i in prange(n):
        best = 0.0
        rowi = d[i]
        m = np.full(n, np.inf)
        for k in range(n):
            dik = rowi[k]
            if dik != dik or k == i:
                continue
            rowk = d[k]
            for j in range(n):
                v = dik + rowk[j]
                if v < m[j]:
                    m[j] = v
        for j in range(n):
            if j != i and rowi[j] == rowi[j]:
                e = rowi[j] - m[j]
                if e > best:
                    best = e
        out[i] = best
    return out


def max_violation(values: np.ndarray) -> float:
    """Largest ``d(i,j) - (d(i,k) + d(k,j))`` over all triples (0 for a metric).

    Examples
    --------
    >>> max_violation(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))
    3.0
    """
    d = np.ascontiguousarray(values, dtype=np.float64)
    if d.shape[0] < 3:
        return 0.0
    return float(_max_violation_kernel(d).max())


def is_metric(values: np.ndarray, tol: float | None = None) -> bool:
    """The contract's metric test: finite, non-negative, zero diagonal,
    symmetric, and ``d(i,j) <= d(i,k) + d(k,j) + tol`` for every triple.

    Examples
    --------
    >>> is_metric(np.array([[0, 2, 1], [2, 0, 1], [1, 1, 0.]]))
    True
    """
    d = np.asarray(values, dtype=np.float64)
    if not np.isfinite(d).all() or (d < 0).any():
        return False
    if tol is None:
        tol = default_tol(d)
    if np.abs(np.diagonal(d)).max(initial=0.0) > tol or np.abs(d - d.T).max(initial=0.0) > tol:
        return False
    return max_violation(d) <= tol
