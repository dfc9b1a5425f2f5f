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

Every kernel has a plain-Python reference in tests/test_repair_convex_kernels.py.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from seqdist.kernels.kept_graph import dijkstra_kernel  # the one dense Dijkstra of the repair package

__all__ = ["encode", "decode", "violated_triangles", "merge_active", "sweep_l2_tri", "sweep_l2_cyc", "sweep_l1_tri",
           "sweep_l1_cyc", "accumulate_tri", "accumulate_cyc", "apply_tri", "apply_cyc", "denominators_tri",
           "violated_cycles", "blend_step", "clamp_free"]

_SI = 42
_SJ = 22
_SK = 2
_M20 = (1 << 20) - 1
MAX_N = 1 << 20


# ------------------------------------------------------------ key helpers
@njit(cache=True, inline="always")
def _sides(key):  # pragma: no cover - compiled
    i = key >> 42
    j = (key >> 22) & 0xFFFFF
    k = (key >> 2) & 0xFFFFF
    s = key & 3
    # (long edge), (short edge), (short edge)
    if s == 0:
        return i, j, i, k, j, k
    elif s == 1:
        return i, k, i, j, j, k
    return j, k, i, j, i, k


def encode(i, j, k, s):
    """Keys of triangle constraints (vectorised; ``i < j < k``, ``s`` the long side)."""
    return (np.asarray(i, np.int64) << _SI) | (np.asarray(j, np.int64) << _SJ) | \
        (np.asarray(k, np.int64) << _SK) | np.asarray(s, np.int64)


def decode(keys):
    """``(i, j, k, s)`` arrays from triangle keys."""
    keys = np.asarray(keys, np.int64)
    return keys >> _SI, (keys >> _SJ) & _M20, (keys >> _SK) & _M20, keys & 3


# ------------------------------------------------------------ the triangle scan
@njit(cache=True)
def _scan_row(x, gm, full, thr, i, out, p, count_only):  # pragma: no cover - compiled
    n = x.shape[0]
    c = 0
    for j in range(i + 1, n):
        if not full and not gm[i, j]:
            continue
        xij = x[i, j]
        for k in range(j + 1, n):
            if not full and (not gm[i, k] or not gm[j, k]):
                continue
            xik = x[i, k]
            xjk = x[j, k]
            e0 = xij - xik - xjk
            e1 = xik - xij - xjk
            e2 = xjk - xij - xik
            if e0 > thr or e1 > thr or e2 > thr:
                if count_only:
                    c += (e0 > thr) + (e1 > thr) + (e2 > thr)
                else:
                    base = (np.int64(i) << 42) | (np.int64(j) << 22) | (np.int64(k) << 2)
                    if e0 > thr:
                        out[p] = base
                        p += 1
                    if e1 > thr:
                        out[p] = base | 1
                        p += 1
                    if e2 > thr:
                        out[p] = base | 2
                        p += 1
    return c if count_only else p


@njit(parallel=True, cache=True)
def _scan_count(x, gm, full, thr, nb):  # pragma: no cover - compiled
    n = x.shape[0]
    cnt = np.zeros(n, np.int64)
    dummy = np.empty(0, np.int64)
    # rows interleaved over blocks: row i costs ~ (n - i)^2, so contiguous
    # chunks per thread would leave one thread with most of the work
    for b in prange(nb):
        for i in range(b, n, nb):
            cnt[i] = _scan_row(x, gm, full, thr, i, dummy, 0, True)
    return cnt


@njit(parallel=True, cache=True)
def _scan_fill(x, gm, full, thr, nb, offs, out):  # pragma: no cover - compiled
    n = x.shape[0]
    for b in prange(nb):
        for i in range(b, n, nb):
            _scan_row(x, gm, full, thr, i, out, offs[i], False)


def violated_triangles(x: np.ndarray, gm: np.ndarray, full: bool, thr: float) -> np.ndarray:
    """Sorted keys of the triangle constraints that ``x`` violates by more than ``thr``.

    Only triangles with all three sides in the graph (``gm``) count, unless
    ``full``. ``x`` is read in its upper triangle.

    Examples
    --------
    >>> x = np.triu(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))
    >>> decode(violated_triangles(x, np.ones((3, 3), np.bool_), True, 0.0))[3]
    array([0])
    """
    n = x.shape[0]
    if n < 3:
        return np.empty(0, np.int64)
    nb = min(n, 64)
    cnt = _scan_count(x, gm, full, float(thr), nb)
    offs = np.zeros(n + 1, np.int64)
    np.cumsum(cnt, out=offs[1:])
    out = np.empty(int(offs[-1]), np.int64)
    if out.size:
        _scan_fill(x, gm, full, float(thr), nb, offs, out)
    return out


# ------------------------------------------------------------ active-set bookkeeping
@njit(cache=True)
def merge_active(ka, la, kb):  # pragma: no cover - compiled
    """Union of sorted key arrays ``ka`` (with duals ``la``) and ``kb`` (new, dual 0).

    Constraints of ``ka`` whose dual is 0 and that are not in ``kb`` (no
    longer violated) are forgotten; they come back if violated again.
    Returns the merged keys, their duals and how many keys were not in ``ka``.
    """
    na = ka.size
    nb = kb.size
    added = 0
    ko = np.empty(na + nb, np.int64)
    lo = np.empty(na + nb)
    p = 0
    a = 0
    b = 0
    while a < na or b < nb:
        if b >= nb or (a < na and ka[a] < kb[b]):
            if la[a] > 0.0:
                ko[p] = ka[a]
                lo[p] = la[a]
                p += 1
            a += 1
        elif a >= na or kb[b] < ka[a]:
            ko[p] = kb[b]
            lo[p] = 0.0
            p += 1
            b += 1
            added += 1
        else:
            ko[p] = ka[a]
            lo[p] = la[a]
            p += 1
            a += 1
            b += 1
    return ko[:p].copy(), lo[:p].copy(), added


# ------------------------------------------------------------ weighted least squares (l2)
@njit(cache=True)
def sweep_l2_tri(keys, lam, xw, forward, omega):  # pragma: no cover - compiled
    """One Hildreth sweep over triangle constraints (in place).

    ``xw[a, b, 0]`` is the iterate and ``xw[a, b, 1]`` the inverse weight of
    entry (a, b): interleaved so that one cache line serves both (the sweep
    is bound by memory latency). ``omega`` over-relaxes the step (1 is the
    plain method). Returns the largest change of an entry.
    """
    m = keys.size
    big = 0.0
    for q in range(m):
        t = q if forward else m - 1 - q
        a0, b0, a1, b1, a2, b2 = _sides(keys[t])
        w0 = xw[a0, b0, 1]
        w1 = xw[a1, b1, 1]
        w2 = xw[a2, b2, 1]
        den = w0 + w1 + w2
        if den == 0.0:
            continue
        v = xw[a0, b0, 0] - xw[a1, b1, 0] - xw[a2, b2, 0]
        lt = lam[t]
        nl = lt + omega * v / den
        if nl < 0.0:
            nl = 0.0
        dl = nl - lt
        if dl != 0.0:
            lam[t] = nl
            xw[a0, b0, 0] -= dl * w0
            xw[a1, b1, 0] += dl * w1
            xw[a2, b2, 0] += dl * w2
            ch = abs(dl) * den
            if ch > big:
                big = ch
    return big


@njit(cache=True)
def sweep_l2_cyc(ptr, edges, lam, xwf, omega):  # pragma: no cover - compiled
    """One Hildreth sweep over cycle constraints; ``xwf`` is the interleaved
    array of :func:`sweep_l2_tri` viewed as (n * n, 2)."""
    big = 0.0
    for t in range(ptr.size - 1):
        p0 = ptr[t]
        p1 = ptr[t + 1]
        e0 = edges[p0]
        den = xwf[e0, 1]
        v = xwf[e0, 0]
        for q in range(p0 + 1, p1):
            den += xwf[edges[q], 1]
            v -= xwf[edges[q], 0]
        if den == 0.0:
            continue
        lt = lam[t]
        nl = lt + omega * v / den
        if nl < 0.0:
            nl = 0.0
        dl = nl - lt
        if dl != 0.0:
            lam[t] = nl
            xwf[e0, 0] -= dl * xwf[e0, 1]
            for q in range(p0 + 1, p1):
                e = edges[q]
                xwf[e, 0] += dl * xwf[e, 1]
            ch = abs(dl) * den
            if ch > big:
                big = ch
    return big


# ------------------------------------------------------------ proximal LP (l1)
@njit(cache=True, inline="always")
def _soft(z, h):  # pragma: no cover - compiled
    if z > h:
        return z - h
    if z < -h:
        return z + h
    return 0.0


@njit(cache=True)
def _phi(t, cs, As, ds, iw, sg, m, h):  # pragma: no cover - compiled
    # a^T x(t) with x_e = d_e + soft(A_e - (c_e + sg_e t) iw_e, h)
    v = 0.0
    for q in range(m):
        xe = ds[q] + _soft(As[q] - (cs[q] + sg[q] * t) * iw[q], h)
        v += xe if sg[q] > 0 else -xe
    return v


@njit(cache=True)
def _line_max(cs, As, ds, iw, sg, m, h, lt):  # pragma: no cover - compiled
    # Exact maximiser over t >= -lt of the concave piecewise-quadratic dual
    # along one constraint: the first root of the nonincreasing
    # piecewise-linear phi(t) = a^T x(t), walked breakpoint by breakpoint.
    # g = direction * phi is positive at t = 0 and decreases along the walk.
    f0 = _phi(0.0, cs, As, ds, iw, sg, m, h)
    if f0 == 0.0:
        return 0.0
    direction = 1.0 if f0 > 0.0 else -1.0
    if direction < 0.0 and lt <= 0.0:
        return 0.0
    t = 0.0
    g = abs(f0)
    for _ in range(4 * m + 8):
        nb = np.inf
        for q in range(m):
            if iw[q] == 0.0:
                continue
            for sgn in (-1.0, 1.0):
                dist = (sg[q] * ((As[q] + sgn * h) / iw[q] - cs[q]) - t) * direction
                if dist > 0.0 and dist < nb:
                    nb = dist
        limit = t + lt if direction < 0.0 else np.inf
        step = nb if nb < limit else limit
        if step == np.inf:
            # beyond every breakpoint every free entry is on a slope
            slope = 0.0
            for q in range(m):
                slope += iw[q]
            if slope == 0.0:
                return t
            return t + direction * g / slope
        tb = t + direction * step
        gb = direction * _phi(tb, cs, As, ds, iw, sg, m, h)
        if gb <= 0.0:
            return t + direction * step * (g / (g - gb))
        if step == limit:
            return -lt
        t = tb
        g = gb
    return t


@njit(cache=True)
def sweep_l1_tri(keys, lam, c, A, d, iw, h):  # pragma: no cover - compiled
    """One exact dual coordinate-ascent sweep of the proximal LP step
    ``min sum w |x - d| + (1 / 2h) sum w (x - z)^2`` over triangle
    constraints, with ``A = z - d`` and ``iw = h / w`` (0 on locked entries).
    ``c`` holds ``A^T lam`` (upper triangle, updated in place); the primal
    point is ``x = d + soft(A - c * iw, h)``."""
    cs = np.empty(3)
    As = np.empty(3)
    ds = np.empty(3)
    ws = np.empty(3)
    sg = np.array([1.0, -1.0, -1.0])
    big = 0.0
    for t in range(keys.size):
        a0, b0, a1, b1, a2, b2 = _sides(keys[t])
        ws[0] = iw[a0, b0]
        ws[1] = iw[a1, b1]
        ws[2] = iw[a2, b2]
        if ws[0] == 0.0 and ws[1] == 0.0 and ws[2] == 0.0:
            continue
        cs[0] = c[a0, b0]
        cs[1] = c[a1, b1]
        cs[2] = c[a2, b2]
        As[0] = A[a0, b0]
        As[1] = A[a1, b1]
        As[2] = A[a2, b2]
        ds[0] = d[a0, b0]
        ds[1] = d[a1, b1]
        ds[2] = d[a2, b2]
        lt = lam[t]
        dt = _line_max(cs, As, ds, ws, sg, 3, h, lt)
        if dt < -lt:
            dt = -lt
        if dt != 0.0:
            lam[t] = lt + dt
            c[a0, b0] += dt
            c[a1, b1] -= dt
            c[a2, b2] -= dt
            if abs(dt) > big:
                big = abs(dt)
    return big


@njit(cache=True)
def sweep_l1_cyc(ptr, edges, lam, cf, Af, df, iwf, h):  # pragma: no cover - compiled
    """:func:`sweep_l1_tri` over cycle constraints (flat views)."""
    big = 0.0
    mmax = 1
    for t in range(ptr.size - 1):
        mmax = max(mmax, ptr[t + 1] - ptr[t])
    cs = np.empty(mmax)
    As = np.empty(mmax)
    ds = np.empty(mmax)
    ws = np.empty(mmax)
    sg = np.empty(mmax)
    for t in range(ptr.size - 1):
        p0 = ptr[t]
        m = ptr[t + 1] - p0
        anyfree = False
        for q in range(m):
            e = edges[p0 + q]
            cs[q] = cf[e]
            As[q] = Af[e]
            ds[q] = df[e]
            ws[q] = iwf[e]
            sg[q] = 1.0 if q == 0 else -1.0
            if ws[q] != 0.0:
                anyfree = True
        if not anyfree:
            continue
        lt = lam[t]
        dt = _line_max(cs, As, ds, ws, sg, m, h, lt)
        if dt < -lt:
            dt = -lt
        if dt != 0.0:
            lam[t] = lt + dt
            cf[edges[p0]] += dt
            for q in range(1, m):
                cf[edges[p0 + q]] -= dt
            if abs(dt) > big:
                big = abs(dt)
    return big


# ------------------------------------------------------------ A^T lam and A y
@njit(cache=True)
def accumulate_tri(keys, lam, c):  # pragma: no cover - compiled
    """``c += A^T lam`` over triangle constraints (upper triangle of ``c``)."""
    for t in range(keys.size):
        lt = lam[t]
        if lt == 0.0:
            continue
        a0, b0, a1, b1, a2, b2 = _sides(keys[t])
        c[a0, b0] += lt
        c[a1, b1] -= lt
        c[a2, b2] -= lt


@njit(cache=True)
def accumulate_cyc(ptr, edges, lam, cf):  # pragma: no cover - compiled
    """``c += A^T lam`` over cycle constraints (flat view of ``c``)."""
    for t in range(ptr.size - 1):
        lt = lam[t]
        if lt == 0.0:
            continue
        cf[edges[ptr[t]]] += lt
        for q in range(ptr[t] + 1, ptr[t + 1]):
            cf[edges[q]] -= lt


@njit(cache=True)
def apply_tri(keys, y):  # pragma: no cover - compiled
    """``A y`` for triangle constraints: ``y[long] - y[short] - y[short]``."""
    r = np.empty(keys.size)
    for t in range(keys.size):
        a0, b0, a1, b1, a2, b2 = _sides(keys[t])
        r[t] = y[a0, b0] - y[a1, b1] - y[a2, b2]
    return r


@njit(cache=True)
def apply_cyc(ptr, edges, yf):  # pragma: no cover - compiled
    """``A y`` for cycle constraints (flat view of ``y``)."""
    r = np.empty(ptr.size - 1)
    for t in range(ptr.size - 1):
        v = yf[edges[ptr[t]]]
        for q in range(ptr[t] + 1, ptr[t + 1]):
            v -= yf[edges[q]]
        r[t] = v
    return r


@njit(cache=True)
def denominators_tri(keys, winv):  # pragma: no cover - compiled
    """``a^T W^-1 a`` per triangle constraint (the diagonal of ``A W^-1 A^T``)."""
    r = np.empty(keys.size)
    for t in range(keys.size):
        a0, b0, a1, b1, a2, b2 = _sides(keys[t])
        r[t] = winv[a0, b0] + winv[a1, b1] + winv[a2, b2]
    return r


# ------------------------------------------------------------ cycles through absent entries
@njit(cache=True)
def violated_cycles(W, src, dst, min_edges):  # pragma: no cover - compiled
    """Cycle constraints for the violated entries ``(src[q], dst[q])`` of the graph ``W``.

    ``W`` holds the current lengths (inf off the graph), ``src`` is sorted so
    that one Dijkstra serves all pairs of a source. For each pair the shortest
    path is read from the predecessor tree; paths with fewer than
    ``min_edges`` edges are skipped (a two-edge path is a triangle, found by
    the triangle scan). Returns ``ptr, edges`` in CSR form (long edge first).
    """
    n = W.shape[0]
    ptr = [np.int64(0)]
    edges = [np.int64(0) for _ in range(0)]
    cur = -1
    pred = np.empty(0, np.int64)
    for q in range(src.size):
        s = src[q]
        t = dst[q]
        if s != cur:
            _, pred = dijkstra_kernel(W, s)
            cur = s
        # path t -> s
        path = [t]
        v = t
        ok = True
        while v != s:
            v = pred[v]
            if v < 0 or len(path) > n:
                ok = False
                break
            path.append(v)
        if not ok or len(path) - 1 < min_edges:
            continue
        # the path must not use the long edge itself
        if len(path) == 2:
            continue
        a = min(s, t)
        b = max(s, t)
        edges.append(a * n + b)
        for r in range(len(path) - 1):
            u = path[r]
            v2 = path[r + 1]
            a = min(u, v2)
            b = max(u, v2)
            edges.append(a * n + b)
        ptr.append(np.int64(len(edges)))
    return np.array(ptr, np.int64), np.array(edges, np.int64)


# ------------------------------------------------------------ turning an iterate into a metric
@njit(parallel=True, cache=True)
def _blend_step(Y, Z, nb):  # pragma: no cover - compiled
    # smallest t in [0, 1] with (1 - t) Y + t Z a metric, given Z is one
    n = Y.shape[0]
    tb = np.zeros(nb)
    for b in prange(nb):
        best = 0.0
        for i in range(b, n, nb):
            for j in range(i + 1, n):
                for k in range(j + 1, n):
                    for s in range(3):
                        if s == 0:
                            vy = Y[i, j] - Y[i, k] - Y[j, k]
                            vz = Z[i, j] - Z[i, k] - Z[j, k]
                        elif s == 1:
                            vy = Y[i, k] - Y[i, j] - Y[j, k]
                            vz = Z[i, k] - Z[i, j] - Z[j, k]
                        else:
                            vy = Y[j, k] - Y[i, j] - Y[i, k]
                            vz = Z[j, k] - Z[i, j] - Z[i, k]
                        if vy > 0.0:
                            t = 1.0 if vz >= 0.0 else vy / (vy - vz)
                            if t > best:
                                best = t
        tb[b] = best
    return tb.max()


def blend_step(Y: np.ndarray, Z: np.ndarray) -> float:
    """The smallest ``t`` in [0, 1] such that ``(1 - t) Y + t Z`` is a metric (``Z`` a metric)."""
    n = Y.shape[0]
    if n < 3:
        return 0.0
    return float(_blend_step(np.ascontiguousarray(Y), np.ascontiguousarray(Z), min(n, 64)))


@njit(cache=True)
def clamp_free(Y, fi, fj, target):  # pragma: no cover - compiled
    """Move entries ``(fi, fj)`` of the metric ``Y`` one at a time towards ``target``.

    Each entry goes to the point of ``[max_k |Y_ik - Y_jk|, min_k Y_ik + Y_kj]``
    nearest its target; changing one entry inside that interval keeps every
    triangle, so ``Y`` stays a metric (both halves are written).
    """
    n = Y.shape[0]
    for q in range(fi.size):
        i = fi[q]
        j = fj[q]
        lo = 0.0
        hi = np.inf
        for k in range(n):
            if k == i or k == j:
                continue
            a = Y[i, k]
            b = Y[j, k]
            if a + b < hi:
                hi = a + b
            dab = abs(a - b)
            if dab > lo:
                lo = dab
        v = target[q]
        if v < lo:
            v = lo
        if v > hi:
            v = hi
        Y[i, j] = v
        Y[j, i] = v
