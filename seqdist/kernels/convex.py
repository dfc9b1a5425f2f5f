"""Compiled kernels shared by the convex repair objectives (:mod:`.l1`, :mod:`.l2`).

Conventions
-----------
* A repair iterate ``x`` is an (n, n) float64 array of which only the upper
  triangle (``x[i, j]``, ``i < j``) is read or written.
* The optimisation graph ``G`` holds the entries that carry a cost or are
  locked (observed, weight > 0). Missing entries and entries of weight 0 are
  not variables: they are filled afterwards (see :func:`feasible_point`).
* A *triangle constraint* is stored as one int64 key
  ``i << 42 | j << 22 | k << 2 | s`` with ``i < j < k`` and ``s`` naming the
  long side (0: ``ij``, 1: ``ik``, 2: ``jk``); the constraint reads
  ``x[long] - x[short1] - x[short2] <= 0``. Sorted keys sweep the matrix row
  by row (good memory locality) and merge in linear time.
* A *cycle constraint* (only when ``G`` is not complete) is a list of flat
  edge indices ``a * n + b`` (``a < b``), the long edge first:
  ``x[e0] - sum_k x[e_k] <= 0``; stored in CSR form (``ptr``, ``edges``).
* ``winv`` holds ``1 / w`` on ``G`` (0 on locked entries, which never move).

The loops are Cython (``_convex.pyx``; the triangle scan's inner loops and
the Dijkstra of the cycle search are C, ``src/convex.h``), compiled when the
package is installed. Each gives bit for bit what a plain loop gives (the same
float operations in the same order), so the l1 and l2 iterates do not depend
on the compiler; the scans share rows between threads but combine them by
integer counts and maxima only.

Every kernel has a plain-Python reference in tests/test_repair_convex_kernels.py.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from seqdist.kernels._convex import (
    accumulate_cyc_c,
    accumulate_rows_c,
    accumulate_tri_c,
    apply_cyc_c,
    apply_tri_c,
    ascend_l1_bound_c,
    blend_step_c,
    clamp_free_c,
    denominators_tri_c,
    merge_active_c,
    pdhg_halpern_c,
    pdhg_tri_c,
    scan_count_c,
    scan_fill_c,
    sweep_l1_cyc_c,
    sweep_l1_tri_c,
    sweep_l2_cyc_c,
    sweep_l2_tri_c,
    violated_cycles_c,
)

if TYPE_CHECKING:
    from numpy.typing import ArrayLike

__all__ = ["encode", "decode", "violated_triangles", "count_violated", "violated_triangles_capped", "merge_active",
           "sweep_l2_tri", "sweep_l2_cyc", "sweep_l1_tri", "sweep_l1_cyc", "ascend_l1_bound", "accumulate_tri",
           "accumulate_cyc", "apply_tri", "apply_cyc", "denominators_tri", "violated_cycles", "blend_step",
           "clamp_free", "entry_rows", "pdhg_tri", "pdhg_halpern",
           "accumulate_rows"]

_SI = 42
_SJ = 22
_SK = 2
_M20 = (1 << 20) - 1
MAX_N = 1 << 20


def _i64(a) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=np.int64)


def _f64(a) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=np.float64)


# The small kernels are called many times per round: each wrapper first hands its arguments to the
# compiled loop as they are (C-contiguous int64 / float64 arrays, as the solvers pass them) and
# converts them only if that is refused (a TypeError or ValueError before any work is done; the
# loop checks the sizes it relies on). Arguments changed in place are never converted.
_REFUSED = (TypeError, ValueError)


# ------------------------------------------------------------ key helpers
def encode(i: ArrayLike, j: ArrayLike, k: ArrayLike, s: ArrayLike) -> np.ndarray:
    """Keys of triangle constraints (vectorised; ``i < j < k``, ``s`` the long side).

    Examples
    --------
    >>> int(encode(0, 1, 2, 1)) == (1 << 22) | (2 << 2) | 1
    True
    """
    return (np.asarray(i, np.int64) << _SI) | (np.asarray(j, np.int64) << _SJ) | \
        (np.asarray(k, np.int64) << _SK) | np.asarray(s, np.int64)


def decode(keys: ArrayLike) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """``(i, j, k, s)`` arrays from triangle keys.

    Examples
    --------
    >>> [a.tolist() for a in decode(encode([3], [5], [8], [2]))]
    [[3], [5], [8], [2]]
    """
    keys = np.asarray(keys, np.int64)
    return keys >> _SI, (keys >> _SJ) & _M20, (keys >> _SK) & _M20, keys & 3


# ------------------------------------------------------------ the triangle scan
def violated_triangles(x: np.ndarray, gm: np.ndarray, full: bool, thr: float) -> np.ndarray:
    """Sorted keys of the triangle constraints that ``x`` violates by more than ``thr``.

    Only triangles with all three sides in the graph (``gm``) count, unless
    ``full``. ``x`` is read in its upper triangle.

    Rows are counted first, then filled into their own slices of the output
    (two passes over the rows, which the threads share; row ``i`` costs about
    ``(n - i)^2``, so rows are interleaved over 64 blocks).

    Examples
    --------
    >>> x = np.triu(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))
    >>> decode(violated_triangles(x, np.ones((3, 3), np.bool_), True, 0.0))[3]
    array([0])
    """
    x = _f64(x)
    g = np.ascontiguousarray(gm, dtype=np.bool_).view(np.uint8)
    if x.shape[0] < 3:
        return np.empty(0, np.int64)
    return _fill(x, g, full, thr, _row_counts(x, g, full, thr))


def _row_counts(x, g, full, thr) -> np.ndarray:
    # violated (triangle, long side) pairs per row (x float64, g uint8, both C-contiguous)
    n = x.shape[0]
    cnt = np.zeros(n, np.int64)
    scan_count_c(x, g, bool(full), float(thr), min(n, 64), cnt)
    return cnt


def _fill(x, g, full, thr, cnt) -> np.ndarray:
    # the keys counted in cnt (the second pass of violated_triangles)
    n = x.shape[0]
    offs = np.zeros(n + 1, np.int64)
    np.cumsum(cnt, out=offs[1:])
    out = np.empty(int(offs[-1]), np.int64)
    if out.size:
        scan_fill_c(x, g, bool(full), float(thr), min(n, 64), offs, out)
    return out


def count_violated(x: np.ndarray, gm: np.ndarray, full: bool, thr: float) -> int:
    """How many triangle constraints ``x`` violates by more than ``thr`` (the first pass of
    :func:`violated_triangles` alone: no keys are written, so it costs a fraction of a full scan).

    Examples
    --------
    >>> x = np.triu(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))
    >>> count_violated(x, np.ones((3, 3), np.bool_), True, 0.0), count_violated(x, np.ones((3, 3), np.bool_), True, 3.0)
    (1, 0)
    """
    x = _f64(x)
    g = np.ascontiguousarray(gm, dtype=np.bool_).view(np.uint8)
    if x.shape[0] < 3:
        return 0
    return int(_row_counts(x, g, full, thr).sum())


def violated_triangles_capped(x: np.ndarray, gm: np.ndarray, full: bool, thr: float,
                              cap: int) -> tuple[np.ndarray, float, int]:
    """The most violated constraints of ``x``, at most ``cap`` of them: ``(keys, threshold, counts)``.

    When more than ``cap`` constraints are violated by more than ``thr`` (far
    from convergence, e.g. a random matrix, where half of all triangles are
    violated), the threshold is raised: halved by growing powers of two from
    ``span`` (a bound on any violation) until more than ``cap`` lie above it,
    then bisected (geometric midpoints) until the keys above the lower end
    fill at least a quarter of ``cap``; each step is a count-only pass. If
    ties leave nothing below the cap, the ``cap`` most violated are taken in
    a stable order. Every step is a function of ``x`` alone, so the result
    does not depend on the machine or on timing. ``counts`` is how many
    count-only passes were made beyond the first.

    Why: a scan that stores every violated constraint holds C(n, 3) / 2 keys
    on a random matrix (665 million at n = 2000, 5 GB, then twice that in
    the merge), and most of them are satisfied as a side effect of
    projecting the worst ones.

    Examples
    --------
    >>> x = np.triu(np.array([[0, 5, 1, 1], [5, 0, 1, 3], [1, 1, 0, 1], [1, 3, 1, 0.]]))
    >>> keys, t, _ = violated_triangles_capped(x, np.ones((4, 4), np.bool_), True, 0.0, 1)
    >>> [a.tolist() for a in decode(keys)], t  # of the 3 violated, the one by 3
    ([[0], [1], [2], [0]], 1.25)
    """
    x = _f64(x)
    n = x.shape[0]
    if n < 3:
        return np.empty(0, np.int64), float(thr), 0
    g = np.ascontiguousarray(gm, dtype=np.bool_).view(np.uint8)
    cnt = _row_counts(x, g, full, thr)
    if int(cnt.sum()) <= cap:  # the plain scan, its count reused
        return _fill(x, g, full, thr, cnt), float(thr), 0
    up = x[np.triu_indices(n, 1)]
    # a violation x_long - x_a - x_b is at most max(x) - 2 min(0, min(x)): none above span
    span = float(up.max()) - 2.0 * min(0.0, float(up.min()))
    lo_t, lo_c, hi_t = span, 0, float(thr)  # counts: <= cap above lo_t, > cap above hi_t
    counts = 0
    b = 1
    while span * 2.0 ** -b > thr:  # bracket: halve the threshold by growing powers of two
        t = span * 2.0 ** -b
        counts += 1
        c = count_violated(x, gm, full, t)
        if c > cap:
            hi_t = t
            break
        lo_t, lo_c = t, c
        b *= 2
    for _ in range(16):  # then bisect (geometric midpoints) until a quarter of the cap is taken
        if lo_c >= cap // 4 or hi_t <= 0.0:
            break
        t = float(np.sqrt(lo_t * hi_t))
        if not hi_t < t < lo_t:
            break
        counts += 1
        c = count_violated(x, gm, full, t)
        if c > cap:
            hi_t = t
        else:
            lo_t, lo_c = t, c
    if lo_c > 0:
        return violated_triangles(x, gm, full, lo_t), lo_t, counts
    # many violations of one size (ties): the cap most violated above hi_t, by a stable order
    keys = violated_triangles(x, gm, full, hi_t)
    v = apply_tri(keys, x)
    keep = np.sort(np.argsort(-v, kind="stable")[:cap])
    return keys[keep], hi_t, counts


# ------------------------------------------------------------ active-set bookkeeping
def merge_active(ka: np.ndarray, la: np.ndarray, kb: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
    """Union of sorted key arrays ``ka`` (with duals ``la``) and ``kb`` (new, dual 0).

    Constraints of ``ka`` whose dual is 0 and that are not in ``kb`` (no
    longer violated) are forgotten; they come back if violated again.
    Returns the merged keys, their duals and how many keys were not in ``ka``.

    Examples
    --------
    >>> ko, lo, added = merge_active(np.array([1, 4]), np.array([0.5, 0.0]), np.array([2]))
    >>> ko.tolist(), lo.tolist(), added
    ([1, 2], [0.5, 0.0], 1)
    """
    try:
        return merge_active_c(ka, la, kb)
    except _REFUSED:
        return merge_active_c(_i64(ka), _f64(la), _i64(kb))


# ------------------------------------------------------------ weighted least squares (l2)
def sweep_l2_tri(keys: np.ndarray, lam: np.ndarray, xw: np.ndarray, forward: bool, omega: float) -> float:
    """One Hildreth sweep over triangle constraints (in place).

    ``xw[a, b, 0]`` is the iterate and ``xw[a, b, 1]`` the inverse weight of
    entry (a, b): interleaved so that one cache line serves both (the sweep
    is bound by memory latency). ``omega`` over-relaxes the step (1 is the
    plain method). ``lam`` and ``xw`` are updated in place (C-contiguous
    float64). Returns the largest change of an entry.

    Examples
    --------
    >>> xw = np.zeros((3, 3, 2)); xw[0, 1] = (4.0, 1.0); xw[0, 2, 1] = xw[1, 2, 1] = 1.0
    >>> lam = np.zeros(1)
    >>> sweep_l2_tri(encode([0], [1], [2], [0]), lam, xw, True, 1.0), xw[:, :, 0][np.triu_indices(3, 1)].tolist()
    (4.0, [2.666666666666667, 1.3333333333333333, 1.3333333333333333])
    """
    try:
        return sweep_l2_tri_c(keys, lam, xw, forward, omega)
    except _REFUSED:
        return sweep_l2_tri_c(_i64(keys), lam, xw, bool(forward), float(omega))


def sweep_l2_cyc(ptr: np.ndarray, edges: np.ndarray, lam: np.ndarray, xwf: np.ndarray, omega: float) -> float:
    """One Hildreth sweep over cycle constraints; ``xwf`` is the interleaved
    array of :func:`sweep_l2_tri` viewed as (n * n, 2).

    Examples
    --------
    >>> xwf = np.zeros((9, 2)); xwf[[1, 2, 5]] = [(4.0, 1.0), (0.0, 1.0), (0.0, 1.0)]
    >>> sweep_l2_cyc(np.array([0, 3]), np.array([1, 2, 5]), np.zeros(1), xwf, 1.0), xwf[[1, 2, 5], 0].tolist()
    (4.0, [2.666666666666667, 1.3333333333333333, 1.3333333333333333])
    """
    try:
        return sweep_l2_cyc_c(ptr, edges, lam, xwf, omega)
    except _REFUSED:
        return sweep_l2_cyc_c(_i64(ptr), _i64(edges), lam, xwf, float(omega))


# ------------------------------------------------------------ proximal LP (l1)
def sweep_l1_tri(keys: np.ndarray, lam: np.ndarray, c: np.ndarray, A: np.ndarray, d: np.ndarray, iw: np.ndarray,
                 h: float) -> float:
    """One exact dual coordinate-ascent sweep of the proximal LP step
    ``min sum w |x - d| + (1 / 2h) sum w (x - z)^2`` over triangle
    constraints, with ``A = z - d`` and ``iw = h / w`` (0 on locked entries).
    ``c`` holds ``A^T lam`` (upper triangle, updated in place); the primal
    point is ``x = d + soft(A - c * iw, h)``.

    The step along each constraint is the exact maximiser of the dual, the
    first root of a nonincreasing piecewise-linear function walked from
    breakpoint to breakpoint. Returns the largest change of a dual.

    Examples
    --------
    >>> d = np.triu(np.array([[0, 4, 1], [0, 0, 1], [0, 0, 0.]]))
    >>> lam, c = np.zeros(1), np.zeros((3, 3))
    >>> sweep_l1_tri(encode([0], [1], [2], [0]), lam, c, np.zeros((3, 3)), d, np.triu(np.ones((3, 3)), 1), 1.0)
    1.6666666666666665
    """
    try:
        return sweep_l1_tri_c(keys, lam, c, A, d, iw, h)
    except _REFUSED:
        return sweep_l1_tri_c(_i64(keys), lam, c, _f64(A), _f64(d), _f64(iw), float(h))


def sweep_l1_cyc(ptr: np.ndarray, edges: np.ndarray, lam: np.ndarray, cf: np.ndarray, Af: np.ndarray,
                 df: np.ndarray, iwf: np.ndarray, h: float) -> float:
    """:func:`sweep_l1_tri` over cycle constraints (flat views; ``cf`` updated in place).

    Examples
    --------
    >>> cf = np.zeros(9)
    >>> df = np.zeros(9); df[[1, 2, 5]] = (4.0, 1.0, 1.0)
    >>> iwf = np.zeros(9); iwf[[1, 2, 5]] = 1.0
    >>> sweep_l1_cyc(np.array([0, 3]), np.array([1, 2, 5]), np.zeros(1), cf, np.zeros(9), df, iwf, 1.0)
    1.6666666666666665
    """
    try:
        return sweep_l1_cyc_c(ptr, edges, lam, cf, Af, df, iwf, h)
    except _REFUSED:
        return sweep_l1_cyc_c(_i64(ptr), _i64(edges), lam, cf, _f64(Af), _f64(df), _f64(iwf), float(h))


def ascend_l1_bound(keys: np.ndarray, lam: np.ndarray, c: np.ndarray, d: np.ndarray, w: np.ndarray,
                    M: float) -> int:
    """One sweep of exact coordinate ascent on the l1 Lagrangian bound itself (in place).

    The bound at duals ``lam >= 0`` (``c = A^T lam``) is
    ``sum_e phi_e(c_e)`` with ``phi_e(c) = min_{0 <= x <= M} w_e |x - d_e| + c x``
    (:func:`seqdist.repair.convex.bound_l1`), concave and piecewise linear in
    ``c`` (slope ``M`` below ``-w``, ``d`` between, 0 above ``w``; a locked
    entry, ``w = inf``, has slope ``d``). Along one dual it is concave and
    piecewise linear with at most 6 breakpoints; each step moves the dual to
    a maximiser (the nearest one to where it is), so the bound never falls.
    ``c`` (upper triangle) follows ``lam``. Returns how many duals moved.

    Examples
    --------
    >>> d = np.triu(np.array([[0, 4, 1], [0, 0, 1], [0, 0, 0.]]))
    >>> w = np.triu(np.ones((3, 3)), 1)
    >>> lam, c = np.zeros(1), np.zeros((3, 3))
    >>> ascend_l1_bound(encode([0], [1], [2], [0]), lam, c, d, w, 4.0), lam.tolist()  # dual 1 = weight
    (1, [1.0])
    """
    try:
        return ascend_l1_bound_c(keys, lam, c, d, w, float(M))
    except _REFUSED:
        return ascend_l1_bound_c(_i64(keys), lam, c, _f64(d), _f64(w), float(M))


# ------------------------------------------------------------ A^T lam and A y
def accumulate_tri(keys: np.ndarray, lam: np.ndarray, c: np.ndarray) -> None:
    """``c += A^T lam`` over triangle constraints (upper triangle of ``c``, in place).

    Examples
    --------
    >>> c = np.zeros((3, 3))
    >>> accumulate_tri(encode([0], [1], [2], [1]), np.array([2.0]), c)
    >>> c[np.triu_indices(3, 1)].tolist()
    [-2.0, 2.0, -2.0]
    """
    try:
        accumulate_tri_c(keys, lam, c)
    except _REFUSED:
        accumulate_tri_c(_i64(keys), _f64(lam), c)


def accumulate_cyc(ptr: np.ndarray, edges: np.ndarray, lam: np.ndarray, cf: np.ndarray) -> None:
    """``c += A^T lam`` over cycle constraints (flat view of ``c``, in place).

    Examples
    --------
    >>> cf = np.zeros(4)
    >>> accumulate_cyc(np.array([0, 3]), np.array([3, 1, 2]), np.array([0.5]), cf)
    >>> cf.tolist()
    [0.0, -0.5, -0.5, 0.5]
    """
    try:
        accumulate_cyc_c(ptr, edges, lam, cf)
    except _REFUSED:
        accumulate_cyc_c(_i64(ptr), _i64(edges), _f64(lam), cf)


def apply_tri(keys: np.ndarray, y: np.ndarray) -> np.ndarray:
    """``A y`` for triangle constraints: ``y[long] - y[short] - y[short]``.

    Examples
    --------
    >>> y = np.triu(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))
    >>> apply_tri(encode([0, 0], [1, 1], [2, 2], [0, 2]), y).tolist()
    [3.0, -5.0]
    """
    r = np.empty(len(keys))
    try:
        apply_tri_c(keys, y, r)
    except _REFUSED:
        apply_tri_c(_i64(keys), _f64(y), r)
    return r


def apply_cyc(ptr: np.ndarray, edges: np.ndarray, yf: np.ndarray) -> np.ndarray:
    """``A y`` for cycle constraints (flat view of ``y``).

    Examples
    --------
    >>> apply_cyc(np.array([0, 3]), np.array([1, 2, 5]), np.arange(9.0)).tolist()
    [-6.0]
    """
    r = np.empty(max(len(ptr) - 1, 0))
    try:
        apply_cyc_c(ptr, edges, yf, r)
    except _REFUSED:
        apply_cyc_c(_i64(ptr), _i64(edges), _f64(yf), r)
    return r


def denominators_tri(keys: np.ndarray, winv: np.ndarray) -> np.ndarray:
    """``a^T W^-1 a`` per triangle constraint (the diagonal of ``A W^-1 A^T``).

    Examples
    --------
    >>> denominators_tri(encode([0], [1], [2], [0]), np.triu(np.full((3, 3), 0.5), 1)).tolist()
    [1.5]
    """
    r = np.empty(len(keys))
    try:
        denominators_tri_c(keys, winv, r)
    except _REFUSED:
        denominators_tri_c(_i64(keys), _f64(winv), r)
    return r


# ------------------------------------------------------------ cycles through absent entries
def violated_cycles(W: np.ndarray, src: np.ndarray, dst: np.ndarray, min_edges: int
                    ) -> tuple[np.ndarray, np.ndarray]:
    """Cycle constraints for the violated entries ``(src[q], dst[q])`` of the graph ``W``.

    ``W`` holds the current lengths (inf off the graph), ``src`` is sorted so
    that one Dijkstra serves all pairs of a source. For each pair the shortest
    path is read from the predecessor tree; paths with fewer than
    ``min_edges`` edges are skipped (a two-edge path is a triangle, found by
    the triangle scan). Returns ``ptr, edges`` in CSR form (long edge first).

    The Dijkstra is the dense one of :func:`seqdist.kernels.kept_graph.shortest_tree`
    (ties to the lowest index), so the paths are the same.

    Examples
    --------
    >>> W = np.full((4, 4), np.inf); np.fill_diagonal(W, 0.0)
    >>> for a, b, v in ((0, 1, 1.0), (1, 2, 1.0), (2, 3, 1.0), (0, 3, 9.0)):
    ...     W[a, b] = W[b, a] = v
    >>> ptr, edges = violated_cycles(W, np.array([0]), np.array([3]), 3)
    >>> ptr.tolist(), edges.tolist()
    ([0, 4], [3, 11, 6, 1])
    """
    W, src, dst = _f64(W), _i64(src), _i64(dst)
    n = W.shape[0]
    if src.size and (min(src.min(), dst.min()) < 0 or max(src.max(), dst.max()) >= n):
        raise ValueError("violated_cycles: a node index is outside the graph")
    return violated_cycles_c(W, src, dst, int(min_edges))


# ------------------------------------------------------------ turning an iterate into a metric
def blend_step(Y: np.ndarray, Z: np.ndarray) -> float:
    """The smallest ``t`` in [0, 1] such that ``(1 - t) Y + t Z`` is a metric (``Z`` a metric).

    Examples
    --------
    >>> Y = np.array([[0, 4, 1], [4, 0, 1], [1, 1, 0.]])
    >>> Z = np.array([[0, 1, 1], [1, 0, 1], [1, 1, 0.]])
    >>> blend_step(Y, Z)  # (1 - t) 4 + t = 2
    0.6666666666666666
    """
    n = Y.shape[0]
    if n < 3:
        return 0.0
    Y, Z = _f64(Y), _f64(Z)
    nb = min(n, 64)
    tb = np.zeros(nb)
    blend_step_c(Y, Z, nb, tb)
    return float(tb.max())


def clamp_free(Y: np.ndarray, fi: np.ndarray, fj: np.ndarray, target: np.ndarray) -> None:
    """Move entries ``(fi, fj)`` of the metric ``Y`` one at a time towards ``target``.

    Each entry goes to the point of ``[max_k |Y_ik - Y_jk|, min_k Y_ik + Y_kj]``
    nearest its target; changing one entry inside that interval keeps every
    triangle, so ``Y`` stays a metric (both halves are written, in place).

    Examples
    --------
    >>> Y = np.array([[0, 2, 1], [2, 0, 1], [1, 1, 0.]])
    >>> clamp_free(Y, np.array([0]), np.array([1]), np.array([5.0]))
    >>> Y.tolist()  # 5 is out of reach: 0-1 stops at the path 0-2-1
    [[0.0, 2.0, 1.0], [2.0, 0.0, 1.0], [1.0, 1.0, 0.0]]
    """
    fi, fj, target = _i64(fi), _i64(fj), _f64(target)
    if fi.size and (min(fi.min(), fj.min()) < 0 or max(fi.max(), fj.max()) >= Y.shape[0]):
        raise ValueError("clamp_free: an entry index is outside the matrix")
    clamp_free_c(Y, fi, fj, target)


# ------------------------------------------------------------ primal-dual hybrid gradient (compact entries)
def entry_rows(keys: np.ndarray, n: int) -> np.ndarray:
    """Triangle keys as rows of entry slots ``(long, short, short)``, int32 of shape (m, 3).

    The slot of entry ``(i, j)``, ``i < j``, is its place in the row-major
    order of the upper triangle, ``i n - i (i + 1) / 2 + j - i - 1`` (the
    order of ``np.triu_indices(n, 1)``). Needs ``n (n - 1) / 2 < 2**31``.

    Examples
    --------
    >>> entry_rows(encode([0, 1], [1, 2], [2, 3], [0, 2]), 4).tolist()  # (0,1) (0,2) (0,3) (1,2) (1,3) (2,3)
    [[0, 1, 3], [5, 3, 4]]
    """
    if n * (n - 1) // 2 >= 2 ** 31:
        raise ValueError("entry_rows: too many entries for int32 slots")
    i, j, k, s = decode(keys)

    def pos(a, b):
        return a * n - a * (a + 1) // 2 + (b - a - 1)

    eij, eik, ejk = pos(i, j), pos(i, k), pos(j, k)
    out = np.empty((i.size, 3), np.int32)
    out[:, 0] = np.select([s == 0, s == 1], [eij, eik], ejk)
    out[:, 1] = np.where(s == 0, eik, eij)
    out[:, 2] = np.where(s == 2, eik, ejk)
    return out


def pdhg_tri(rows: np.ndarray, y: np.ndarray, x: np.ndarray, xbar: np.ndarray, c: np.ndarray, d: np.ndarray,
             tau: np.ndarray, tw: np.ndarray, sigma: float, M: float, iters: int, quad: bool) -> None:
    """``iters`` iterations of the primal-dual hybrid gradient method (in place).

    The saddle problem is ``min_{0 <= x <= M} max_{y >= 0} sum_e f_e(x_e) + y^T A x``
    with ``A`` the triangle rows (``rows``: entry slots, long side first, as
    :func:`entry_rows` gives) and ``f_e = w_e |x_e - d_e|`` (``quad`` false)
    or ``w_e (x_e - d_e)^2`` (``quad`` true). One iteration (Chambolle and
    Pock 2011, with per-entry steps ``tau`` and one dual step ``sigma``)::

        x+ = prox_{tau f}(x - tau c)      (soft thresholding, or a weighted mean; clipped to [0, M])
        xbar = 2 x+ - x
        y+ = max(0, y + sigma A xbar);    c = A^T y+ (kept by the change of y)

    ``tw`` is ``tau w`` (l1) or ``2 tau w`` (l2); an entry with ``tau = 0``
    (locked) never moves. Entry arrays are compact (one slot per entry,
    float64); ``c`` must hold ``A^T y`` on entry (:func:`accumulate_rows`).
    Rows are taken in order on one thread, so the result is the same on every
    machine.

    Examples
    --------
    >>> rows = np.array([[0, 1, 2]], np.int32)       # x0 <= x1 + x2
    >>> d = np.array([4.0, 1.0, 1.0]); x = d.copy(); y = np.zeros(1); c = np.zeros(3)
    >>> pdhg_tri(rows, y, x, np.zeros(3), c, d, np.full(3, 0.5), np.full(3, 0.5), 0.3, 4.0, 200, False)
    >>> bool(x[0] - x[1] - x[2] < 1e-6), round(float(np.abs(x - d).sum()), 4)
    (True, 2.0)
    """
    pdhg_tri_c(rows, y, x, xbar, c, d, tau, tw, float(sigma), float(M), int(iters), bool(quad))


def pdhg_halpern(rows: np.ndarray, y: np.ndarray, y0: np.ndarray, x: np.ndarray, x0: np.ndarray, xbar: np.ndarray,
                 c: np.ndarray, d: np.ndarray, tau: np.ndarray, tw: np.ndarray, sigma: float, M: float, k0: int,
                 iters: int, rho: float, quad: bool) -> None:
    """``iters`` iterations of the reflected Halpern form of :func:`pdhg_tri` (in place).

    With ``T`` one step of :func:`pdhg_tri` and ``z0 = (x0, y0)`` the anchor
    (the last restart point), iteration ``k`` (counted from the anchor,
    ``k0`` first) is ``z+ = a ((1 + rho) T(z) - rho z) + (1 - a) z0`` with
    ``a = (k + 1) / (k + 2)`` (Lu and Yang 2024, "Restarted Halpern PDHG for
    linear programming"). The iterate's duals may be negative: read them
    through ``max(y, 0)``. ``c`` holds ``A^T y`` and follows ``y``.

    Examples
    --------
    >>> rows = np.array([[0, 1, 2]], np.int32)
    >>> d = np.array([4.0, 1.0, 1.0]); x = d.copy(); y = np.zeros(1); c = np.zeros(3)
    >>> pdhg_halpern(rows, y, y.copy(), x, d.copy(), np.zeros(3), c, d, np.full(3, 0.5), np.full(3, 0.5), 0.3, 4.0,
    ...              0, 500, 1.0, False)
    >>> bool(x[0] - x[1] - x[2] < 1e-2), round(float(np.abs(x - d).sum()), 2)
    (True, 2.0)
    """
    pdhg_halpern_c(rows, y, y0, x, x0, xbar, c, d, tau, tw, float(sigma), float(M), int(k0), int(iters), float(rho),
                   bool(quad))


def accumulate_rows(rows: np.ndarray, y: np.ndarray, c: np.ndarray) -> None:
    """``c += A^T y`` over triangle rows of entry slots (:func:`entry_rows`), in place.

    Examples
    --------
    >>> c = np.zeros(3)
    >>> accumulate_rows(np.array([[1, 0, 2]], np.int32), np.array([2.0]), c)
    >>> c.tolist()
    [-2.0, 2.0, -2.0]
    """
    accumulate_rows_c(rows, _f64(y), c)
