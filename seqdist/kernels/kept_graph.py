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
* :func:`violated_triangles`, :func:`greedy_hitting`, :func:`packing_bound` -
  the violated triangles, a greedy hitting set of their sides and a lower bound
  on any hitting set.

The loops are Cython (``_kept_graph.pyx``, with the branch-free inner loops in
``src/kept_graph.h``), compiled when the package is installed; each does the
float operations of the plain loop it replaces, in the same order. The plain
references are in tests/test_repair_taxa.py.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from seqdist.kernels import _kept_graph

if TYPE_CHECKING:  # only for the annotations
    from numpy.typing import ArrayLike

__all__ = ["dijkstra_kernel", "shortest_tree", "path_from_tree", "path_between", "insert_ok", "insert_edge",
           "sweep_nearest", "violated_triangles", "triangle_sides", "greedy_hitting", "packing_bound"]


#: Least number of taxa for which the triangle listing runs on threads: below it the
#: scan takes a few milliseconds, less than waking threads can cost on a busy machine.
PARALLEL_MIN_N = 400


def _f64(a) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=np.float64)


def _u8(a) -> np.ndarray:
    a = np.ascontiguousarray(a)
    # bool and uint8 share one byte per entry: a view, no copy
    return a.view(np.uint8) if a.dtype == np.bool_ else np.ascontiguousarray(a != 0, dtype=np.uint8)


# ------------------------------------------------------- shortest paths
def dijkstra_kernel(W: np.ndarray, s: int) -> tuple[np.ndarray, np.ndarray]:
    """Dense O(n^2) Dijkstra from ``s``: distances and predecessors (-1: none) over ``W``.

    ``W[i, j]`` is the edge length, ``inf`` for an absent edge; zeros are real
    edges.

    Examples
    --------
    >>> dijkstra_kernel(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]), 0)[1].tolist()
    [-1, 2, 0]
    """
    W = _f64(W)
    n = W.shape[0]
    dist = np.empty(n)
    pred = np.empty(n, dtype=np.int64)
    _kept_graph.dijkstra(W, int(s), dist, pred)
    return dist, pred


def shortest_tree(W: np.ndarray, s: int) -> tuple[np.ndarray, np.ndarray]:
    """Distances and predecessors from ``s`` over the graph ``W`` (inf = no edge).

    Examples
    --------
    >>> shortest_tree(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]), 0)[0].tolist()
    [0.0, 2.0, 1.0]
    """
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
def insert_ok(A: np.ndarray, D: np.ndarray, check: np.ndarray, i: int, j: int, w: float, tol: float) -> bool:
    """True when adding edge (i, j) of length ``w`` keeps ``D <= A' + tol`` on ``check``.

    ``A`` holds the shortest paths of the graph, ``D`` the entries to keep
    satisfied (NaN never fails) and ``check`` (bool) marks them.

    Examples
    --------
    >>> A = np.array([[0, 2, 1], [2, 0, 1], [1, 1, 0.]])
    >>> insert_ok(A, A, np.ones((3, 3), bool), 0, 1, 0.5, 1e-9), insert_ok(A, A, np.ones((3, 3), bool), 0, 1, 3, 1e-9)
    (False, True)
    """
    return _kept_graph.insert_ok(_f64(A), _f64(D), _u8(check), int(i), int(j), float(w), float(tol))


def insert_edge(A: np.ndarray, i: int, j: int, w: float) -> np.ndarray:
    """Update shortest paths ``A`` in place for a new edge (i, j) of length ``w``; returns ``A``.

    Examples
    --------
    >>> A = np.array([[0, 2, 1], [2, 0, 1], [1, 1, 0.]])
    >>> insert_edge(A, 0, 1, 0.5)[0].tolist()
    [0.0, 0.5, 1.0]
    """
    if A.dtype == np.float64 and A.flags.c_contiguous and A.flags.writeable:
        _kept_graph.insert_edge(A, int(i), int(j), float(w))
    else:
        B = np.ascontiguousarray(A, dtype=np.float64).copy()
        _kept_graph.insert_edge(B, int(i), int(j), float(w))
        A[...] = B
    return A


# ------------------------------------------------------ nearest values
def sweep_nearest(X: np.ndarray, ei: ArrayLike, ej: ArrayLike, target: ArrayLike, lower: ArrayLike, tol: float,
                  max_sweeps: int = 50) -> int:
    """Move entries ``(ei, ej)`` of the metric ``X`` towards ``target`` (in place).

    Each entry in turn takes the value nearest its target inside the interval
    ``[max(lower, max_k |X_ik - X_kj|), min_k X_ik + X_kj]`` that the others
    allow, so every triangle through it holds; sweeps repeat until nothing
    moves by more than ``tol``. ``X`` stays a metric throughout. Returns the
    number of sweeps.

    Examples
    --------
    >>> X = np.array([[0, 1, 1], [1, 0, 1], [1, 1, 0.]])
    >>> sweep_nearest(X, [0], [1], [5.0], [0.0], 1e-12), float(X[0, 1])
    (2, 2.0)
    """
    ei = np.ascontiguousarray(ei, dtype=np.int64)
    ej = np.ascontiguousarray(ej, dtype=np.int64)
    target = np.ascontiguousarray(target, dtype=np.float64)
    lower = np.ascontiguousarray(lower, dtype=np.float64)
    if ei.size == 0:
        return 0
    if X.dtype == np.float64 and X.flags.c_contiguous and X.flags.writeable:
        return int(_kept_graph.sweep(X, ei, ej, target, lower, float(tol), int(max_sweeps)))
    Y = np.ascontiguousarray(X, dtype=np.float64).copy()
    sweeps = int(_kept_graph.sweep(Y, ei, ej, target, lower, float(tol), int(max_sweeps)))
    X[...] = Y
    return sweeps


# ------------------------------------------------- violated triangles
def violated_triangles(D: np.ndarray, tol: float) -> np.ndarray:
    """(m, 4) int array of violated triangles ``(i, j, k, heavy)``, i < j < k.

    ``heavy`` names the longest side: 0 = (i, j), 1 = (i, k), 2 = (j, k).
    Triangles with a missing (NaN) side are skipped.

    Examples
    --------
    >>> violated_triangles(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]), 1e-9).tolist()
    [[0, 1, 2, 0]]
    """
    D = _f64(D)
    n = D.shape[0]
    threads = _kept_graph.threads() if n >= PARALLEL_MIN_N else 1
    per_row = np.zeros(n, dtype=np.int64)
    _kept_graph.violated_counts(D, float(tol), per_row, threads)
    offsets = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(per_row, out=offsets[1:])
    out = np.empty((int(offsets[-1]), 4), dtype=np.int64)
    _kept_graph.violated_fill(D, float(tol), offsets, out, threads)
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
def greedy_hitting(n: int, tri: np.ndarray, cand: np.ndarray, w: np.ndarray, alive: np.ndarray | None = None,
                   bias: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Greedy weighted hitting set over triangles; returns (edge ids i*n+j, counts at pick time).

    ``cand[t, s]`` (s = 0, 1, 2 for the sides (i, j), (i, k), (j, k) of
    ``tri[t]``) marks the sides that may be picked. Each step picks the side in
    the most unhit ``alive`` triangles plus ``bias``, per unit of weight ``w``
    (a side of weight 0 first), the first in row-major order among equals,
    until every triangle that has a candidate side is hit.

    Examples
    --------
    >>> tri = np.array([[0, 1, 2, 0], [0, 1, 3, 0]])
    >>> greedy_hitting(4, tri, np.ones((2, 3), bool), np.ones((4, 4)))
    (array([1]), array([2]))
    """
    if alive is None:
        alive = np.ones(tri.shape[0], dtype=np.bool_)
    if bias is None:
        bias = np.zeros((n, n))
    return _kept_graph.greedy_hit(int(n), np.ascontiguousarray(tri, dtype=np.int64),
                                  _u8(np.asarray(cand, dtype=np.bool_)), _f64(w),
                                  _u8(np.asarray(alive, dtype=np.bool_)), _f64(bias))


# ------------------------------------------------------- packing bound
def packing_bound(n: int, tri: np.ndarray, cand: np.ndarray, w: np.ndarray, order: np.ndarray) -> float:
    """A lower bound on the weighted hitting set: a greedy packing of the triangles.

    Any ``y >= 0`` with ``sum_{t containing e} y_t <= w_e`` for every
    candidate side ``e`` is feasible for the dual of the hitting-set LP, so
    ``sum y_t`` bounds every hitting set from below (weak duality). The
    triangles are packed in ``order``; each takes the least residual weight
    among its candidate sides.

    Examples
    --------
    >>> tri = np.array([[0, 1, 2, 0], [0, 1, 3, 0]])
    >>> packing_bound(4, tri, np.ones((2, 3), bool), np.ones((4, 4)), np.array([0, 1]))
    1.0
    """
    R = np.array(w, dtype=np.float64)
    return float(_kept_graph.packing(int(n), np.ascontiguousarray(tri, dtype=np.int64),
                                     _u8(np.asarray(cand, dtype=np.bool_)), np.ascontiguousarray(order, dtype=np.int64),
                                     R))
