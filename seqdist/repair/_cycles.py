"""Compiled helpers for the combinatorial repair objectives (shrink, fewest, grow).

Conventions: a *graph* matrix ``W`` holds edge lengths with ``inf`` for an
absent edge (a missing entry, or an entry outside the kept set); zeros are
real edges. ``A`` is the all-pairs shortest-path matrix of a graph
(:func:`seqdist.paths.apsp`).

* :func:`path_between` - one shortest path by a dense Dijkstra (exact with
  zero-length edges, unlike a next-hop walk).
* :func:`insert_ok` / :func:`insert_edge` - can an edge join the kept set
  without breaking another kept entry, and the O(n^2) update of ``A``.
* :func:`sweep_nearest` - moves changed entries, one at a time, as close to a
  target as the triangle inequalities with all other entries allow.
"""

from __future__ import annotations

import numpy as np
from numba import njit


# ------------------------------------------------------- shortest paths
@njit(cache=True)
def _dijkstra(W, s):  # pragma: no cover - compiled
    # Dense O(n^2) Dijkstra; W[i, j] = inf for an absent edge, zeros allowed.
    n = W.shape[0]
    dist = np.full(n, np.inf)
    pred = np.full(n, -1, dtype=np.int64)
    done = np.zeros(n, dtype=np.bool_)
    dist[s] = 0.0
    for _ in range(n):
        u = -1
        best = np.inf
        for v in range(n):
            if not done[v] and dist[v] < best:
                best = dist[v]
                u = v
        if u < 0:
            break
        done[u] = True
        row = W[u]
        for v in range(n):
            if not done[v]:
                nd = best + row[v]
                if nd < dist[v]:
                    dist[v] = nd
                    pred[v] = u
    return dist, pred


def shortest_tree(W: np.ndarray, s: int) -> tuple[np.ndarray, np.ndarray]:
    """Distances and predecessors from ``s`` over the graph ``W`` (inf = no edge)."""
    return _dijkstra(np.ascontiguousarray(W, dtype=np.float64), int(s))


def path_from_tree(pred: np.ndarray, s: int, t: int) -> list[int] | None:
    """The node list s .. t read from a predecessor array (None if unreachable)."""
    if s == t:
        return [s]
    if pred[t] < 0:
        return None
    path = [t]
    while path[-1] != s:
        path.append(int(pred[path[-1]]))
        if len(path) > len(pred) + 1:  # pragma: no cover - defensive
            return None
    return path[::-1]


def path_between(W: np.ndarray, s: int, t: int) -> list[int] | None:
    """One shortest path from ``s`` to ``t`` over ``W`` as a node list.

    Examples
    --------
    >>> W = np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]])
    >>> path_between(W, 0, 1)
    [0, 2, 1]
    """
    _, pred = shortest_tree(W, s)
    return path_from_tree(pred, s, t)


# ------------------------------------------------- growing the kept set
@njit(cache=True)
def _insert_ok(A, D, check, i, j, w, tol):  # pragma: no cover - compiled
    # With edge (i, j) of length w added to the graph whose shortest paths are A,
    # does every entry marked in `check` still satisfy D <= path + tol?
    n = A.shape[0]
    Ai = A[i]
    Aj = A[j]
    for a in range(n):
        ra = A[a]
        ca = check[a]
        Da = D[a]
        x = ra[i] + w
        y = ra[j] + w
        for b in range(n):
            if ca[b]:
                p = min(x + Aj[b], y + Ai[b])
                if Da[b] > p + tol:
                    return False
    return True


def insert_ok(A, D, check, i, j, w, tol) -> bool:
    """True when adding edge (i, j) of length ``w`` keeps ``D <= A' + tol`` on ``check``."""
    return bool(_insert_ok(A, D, check, int(i), int(j), float(w), float(tol)))


@njit(cache=True)
def _insert_edge(A, i, j, w):  # pragma: no cover - compiled
    n = A.shape[0]
    ci = A[:, i].copy()
    cj = A[:, j].copy()
    for a in range(n):
        x = ci[a] + w
        y = cj[a] + w
        ra = A[a]
        for b in range(n):
            p = min(x + cj[b], y + ci[b])
            if p < ra[b]:
                ra[b] = p
    return A


def insert_edge(A, i, j, w) -> np.ndarray:
    """Update shortest paths ``A`` in place for a new edge (i, j) of length ``w``."""
    return _insert_edge(A, int(i), int(j), float(w))


# ------------------------------------------------------ nearest values
@njit(cache=True)
def _sweep(X, ei, ej, target, lower, tol, max_sweeps):  # pragma: no cover - compiled
    n = X.shape[0]
    m = ei.shape[0]
    sweeps = 0
    for _ in range(max_sweeps):
        sweeps += 1
        moved = 0.0
        for e in range(m):
            i = ei[e]
            j = ej[e]
            lo = lower[e]
            hi = np.inf
            ri = X[i]
            rj = X[j]
            for k in range(n):
                if k == i or k == j:
                    continue
                a = ri[k]
                b = rj[k]
                s = a + b
                if s < hi:
                    hi = s
                dlt = a - b if a > b else b - a
                if dlt > lo:
                    lo = dlt
            cur = X[i, j]
            if lo > hi:
                continue  # only possible through rounding: keep the current value
            v = target[e]
            if v < lo:
                v = lo
            elif v > hi:
                v = hi
            dv = abs(v - cur)
            if dv > moved:
                moved = dv
            X[i, j] = v
            X[j, i] = v
        if moved <= tol:
            break
    return sweeps


def sweep_nearest(X: np.ndarray, ei, ej, target, lower, tol: float, max_sweeps: int = 50) -> int:
    """Move entries ``(ei, ej)`` of the metric ``X`` towards ``target`` (in place).

    Each entry in turn takes the value nearest its target inside the interval
    ``[max(lower, max_k |X_ik - X_kj|), min_k X_ik + X_kj]`` that the others
    allow, so every triangle through it holds; sweeps repeat until nothing
    moves by more than ``tol``. ``X`` stays a metric throughout. Returns the
    number of sweeps.
    """
    ei = np.ascontiguousarray(ei, dtype=np.int64)
    ej = np.ascontiguousarray(ej, dtype=np.int64)
    target = np.ascontiguousarray(target, dtype=np.float64)
    lower = np.ascontiguousarray(lower, dtype=np.float64)
    if ei.size == 0:
        return 0
    return int(_sweep(X, ei, ej, target, lower, float(tol), int(max_sweeps)))
