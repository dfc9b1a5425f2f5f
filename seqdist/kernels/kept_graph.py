"""Compiled helpers for the combinatorial repair objectives (shrink, fewest, grow).

Conventions: a *graph* matrix ``W`` holds edge lengths with ``inf`` for an
absent edge (a missing entry, or an entry outside the kept set); zeros are
real edges. ``A`` is the all-pairs shortest-path matrix of a graph
(:func:`seqdist.kernels.shortest_paths.apsp`).

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

__all__ = ["dijkstra_kernel", "shortest_tree", "path_from_tree", "path_between", "insert_ok", "insert_edge",
           "sweep_nearest", "violated_triangles", "triangle_sides", "greedy_hitting", "packing_bound"]


# ------------------------------------------------------- shortest paths
@njit(cache=True)
def dijkstra_kernel(W, s):  # pragma: no cover - compiled
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
    return dijkstra_kernel(np.ascontiguousarray(W, dtype=np.float64), int(s))


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


# ------------------------------------------------- violated triangles
@njit(cache=True)
def _violated_triangles(D, tol, count_only, out):  # pragma: no cover - compiled
    # All triples i < j < k with every side observed and the longest side
    # longer than the sum of the other two by more than tol. out[t] = (i, j, k, h)
    # with h the heavy side: 0 = (i, j), 1 = (i, k), 2 = (j, k).
    n = D.shape[0]
    t = 0
    for i in range(n):
        for j in range(i + 1, n):
            dij = D[i, j]
            if dij != dij:
                continue
            for k in range(j + 1, n):
                dik = D[i, k]
                djk = D[j, k]
                if dik != dik or djk != djk:
                    continue
                h = -1
                if dij > dik + djk + tol:
                    h = 0
                elif dik > dij + djk + tol:
                    h = 1
                elif djk > dij + dik + tol:
                    h = 2
                if h >= 0:
                    if not count_only:
                        out[t, 0] = i
                        out[t, 1] = j
                        out[t, 2] = k
                        out[t, 3] = h
                    t += 1
    return t


def violated_triangles(D: np.ndarray, tol: float) -> np.ndarray:
    """(m, 4) int array of violated triangles ``(i, j, k, heavy)``, i < j < k.

    ``heavy`` names the longest side: 0 = (i, j), 1 = (i, k), 2 = (j, k).
    Triangles with a missing (NaN) side are skipped.

    Examples
    --------
    >>> violated_triangles(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]), 1e-9).tolist()
    [[0, 1, 2, 0]]
    """
    D = np.ascontiguousarray(D, dtype=np.float64)
    dummy = np.empty((0, 4), dtype=np.int64)
    m = _violated_triangles(D, float(tol), True, dummy)
    out = np.empty((m, 4), dtype=np.int64)
    _violated_triangles(D, float(tol), False, out)
    return out


def triangle_sides(tri: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The three sides of each triangle as (m, 2) arrays: heavy side first, then the two light ones."""
    i, j, k, h = tri[:, 0], tri[:, 1], tri[:, 2], tri[:, 3]
    s_ij = np.stack([i, j], 1)
    s_ik = np.stack([i, k], 1)
    s_jk = np.stack([j, k], 1)
    heavy = np.where((h == 0)[:, None], s_ij, np.where((h == 1)[:, None], s_ik, s_jk))
    l1 = np.where((h == 0)[:, None], s_ik, s_ij)
    l2 = np.where((h == 2)[:, None], s_ik, s_jk)
    return heavy, l1, l2


# ------------------------------------------------------ greedy hitting
@njit(cache=True)
def _greedy_hit(n, tri, cand, w, alive, start_score):  # pragma: no cover - compiled
    # Greedy weighted hitting set of the triangles' candidate sides.
    # cand[t, s] (s = 0..2) is 1 when side s of triangle t may be picked
    # (an unlocked side of the right kind); sides are (i,j), (i,k), (j,k).
    # Picks the side in most unhit triangles per unit weight, until every
    # triangle is hit. Returns the picked sides (as i*n+j) and their counts.
    m = tri.shape[0]
    cnt = np.zeros((n, n), dtype=np.int64)
    # incidence: for each side, the triangles it is a candidate in
    deg = np.zeros(n * n, dtype=np.int64)
    for t in range(m):
        i, j, k = tri[t, 0], tri[t, 1], tri[t, 2]
        for s in range(3):
            if cand[t, s]:
                a = i if s < 2 else j
                b = j if s == 0 else k
                deg[a * n + b] += 1
    ptr = np.zeros(n * n + 1, dtype=np.int64)
    for e in range(n * n):
        ptr[e + 1] = ptr[e] + deg[e]
    fill = ptr[:-1].copy()
    inc = np.empty(ptr[-1], dtype=np.int64)
    for t in range(m):
        i, j, k = tri[t, 0], tri[t, 1], tri[t, 2]
        for s in range(3):
            if cand[t, s]:
                a = i if s < 2 else j
                b = j if s == 0 else k
                inc[fill[a * n + b]] = t
                fill[a * n + b] += 1
    hit = ~alive.copy()
    for t in range(m):
        if alive[t]:
            i, j, k = tri[t, 0], tri[t, 1], tri[t, 2]
            for s in range(3):
                if cand[t, s]:
                    a = i if s < 2 else j
                    b = j if s == 0 else k
                    cnt[a, b] += 1
    picked = []
    picked_cnt = []
    while True:
        best = 0.0
        be = -1
        for a in range(n):
            for b in range(a + 1, n):
                c = cnt[a, b]
                if c > 0:
                    ww = w[a, b]
                    s = np.inf if ww == 0 else (c + start_score[a, b]) / ww
                    if s > best:
                        best = s
                        be = a * n + b
        if be < 0:
            break
        a = be // n
        b = be % n
        picked.append(be)
        picked_cnt.append(cnt[a, b])
        for q in range(ptr[be], ptr[be + 1]):
            t = inc[q]
            if hit[t]:
                continue
            hit[t] = True
            i, j, k = tri[t, 0], tri[t, 1], tri[t, 2]
            for s in range(3):
                if cand[t, s]:
                    x = i if s < 2 else j
                    y = j if s == 0 else k
                    cnt[x, y] -= 1
    out = np.empty(len(picked), dtype=np.int64)
    outc = np.empty(len(picked), dtype=np.int64)
    for q in range(len(picked)):
        out[q] = picked[q]
        outc[q] = picked_cnt[q]
    return out, outc


def greedy_hitting(n: int, tri: np.ndarray, cand: np.ndarray, w: np.ndarray, alive=None, bias=None):
    """Greedy weighted hitting set over triangles; returns (edge ids i*n+j, counts at pick time)."""
    if alive is None:
        alive = np.ones(tri.shape[0], dtype=np.bool_)
    if bias is None:
        bias = np.zeros((n, n))
    return _greedy_hit(int(n), np.ascontiguousarray(tri, dtype=np.int64), np.ascontiguousarray(cand, dtype=np.bool_),
                       np.ascontiguousarray(w, dtype=np.float64), np.ascontiguousarray(alive, dtype=np.bool_),
                       np.ascontiguousarray(bias, dtype=np.float64))


# ------------------------------------------------------- packing bound
@njit(cache=True)
def _packing(n, tri, cand, order, R):  # pragma: no cover - compiled
    # Greedy fractional packing of triangles (dual of the hitting-set LP):
    # y_t = least residual weight among the candidate sides; R -= y_t.
    total = 0.0
    for q in range(order.shape[0]):
        t = order[q]
        i, j, k = tri[t, 0], tri[t, 1], tri[t, 2]
        y = np.inf
        for s in range(3):
            if cand[t, s]:
                a = i if s < 2 else j
                b = j if s == 0 else k
                if R[a, b] < y:
                    y = R[a, b]
        if y > 0 and y < np.inf:
            total += y
            for s in range(3):
                if cand[t, s]:
                    a = i if s < 2 else j
                    b = j if s == 0 else k
                    R[a, b] -= y
    return total


def packing_bound(n: int, tri: np.ndarray, cand: np.ndarray, w: np.ndarray, order: np.ndarray) -> float:
    """A lower bound on the weighted hitting set: a greedy packing of the triangles.

    Any ``y >= 0`` with ``sum_{t containing e} y_t <= w_e`` for every
    candidate side ``e`` is feasible for the dual of the hitting-set LP, so
    ``sum y_t`` bounds every hitting set from below (weak duality).
    """
    R = np.array(w, dtype=np.float64)
    return float(_packing(int(n), np.ascontiguousarray(tri, dtype=np.int64), np.ascontiguousarray(cand, dtype=np.bool_),
                          np.ascontiguousarray(order, dtype=np.int64), R))
