"""Compiled kernels of the audit (see :mod:`seqdist.audit.report` and docs/audit.md).

* :func:`scan_triangles` - one pass over all triangles: violated counts, the
  per-entry counts, summed excess and longest-side counts, the histogram of
  violation sizes, the top-K worst triangles of each row, and per pair the
  number of violated triangles large enough to force a change; in the same
  pass, the largest three-point deviation ``longest - middle`` (ultrametric
  condition).
* :func:`collect_triangles` - the forcing violated triangles themselves (for
  the lower bounds), up to a cap.
* :func:`greedy_packing` - entry-disjoint violated triangles, greedily.
* :func:`quartet_stats` - four-point and delta statistics over all quartets or
  a given list of quartets.

Tiling and the vector inner loop are those of :mod:`seqdist.kernels.triangles`. Work that
several threads could share (entries ``(j, k)`` of a triangle found while
scanning row ``i``, the histogram) goes to per-thread accumulators, merged
afterwards; all of them are integers, so the merged result does not depend on
how the tiles were scheduled (summed excess is accumulated in fixed point,
units of ``largest entry * 2**-40``, for the same reason).
"""

from __future__ import annotations

import numba
import numpy as np
from numba import njit, prange

__all__ = ["scan_triangles", "collect_triangles", "greedy_packing", "quartet_stats"]

#: Fixed-point scale of the summed excess (units of largest entry / 2**40).
QBITS = 40


class dynamic_chunks:
    """Context manager: hand prange iterations out one by one (dynamic)."""

    def __enter__(self):
        self.old = numba.get_parallel_chunksize()
        numba.set_parallel_chunksize(1)
        return self

    def __exit__(self, *exc):
        numba.set_parallel_chunksize(self.old)
        return False


@njit(cache=True, inline="always")
def _pidx(i, j, n):  # pragma: no cover - compiled
    # index of the pair i < j in the packed upper triangle, row by row
    return i * (2 * n - i - 1) // 2 + (j - i - 1)


@njit(cache=True)
def _scan_tile(d, tol, hard, utol, qscale, inv_top, edges, a0, a1, tid,
               row_viol, row_hard, row_max, pair_hard, topv, topb, topc, topmin,
               hist, cnt, qex, lng, row_ub, row_uc):  # pragma: no cover - compiled
    n = d.shape[0]
    R = a1 - a0
    K = topv.shape[1]
    nb = edges.shape[0] - 1
    # Tile-local accumulators keep the scattered updates in cache: A holds the
    # entries (a, .) of the tile's rows, B the entries (b, .) of the current
    # middle row b; both are added to this thread's packed arrays in contiguous runs.
    Ac = np.zeros((R, n), np.int32)
    Aq = np.zeros((R, n), np.int64)
    Al = np.zeros((R, n), np.int32)
    Bc = np.zeros(n, np.int32)
    Bq = np.zeros(n, np.int64)
    Bl = np.zeros(n, np.int32)
    ebuf = np.zeros(n)
    ubuf = np.zeros(n)
    iubuf = ubuf.view(np.int64)
    hit = np.zeros(n + 1, np.int64)
    H = np.zeros(nb, np.int64)  # tile-local: a shared row would bounce between cores
    tile_hit = False
    for b in range(a0 + 1, n):
        ys = d[b, b + 1:]
        m_ = ys.shape[0]
        kmin = n
        kmax = -1
        for a in range(a0, min(a1, b)):
            z = d[a, b]
            if z != z:
                continue
            xs = d[a, b + 1:]
            c_ = 0
            uc_ = 0
            for c in range(m_):  # branch-free: vectorised
                x = xs[c]
                y = ys[c]
                hi = x if x > y else y
                lo = y if x > y else x
                m = hi if hi > z else z
                e = 2.0 * m - (x + y + z)
                c_ += e > tol
                ebuf[c] = e
                # three-point deviation longest - middle; 0 * (x + y) makes it NaN
                # when a side is missing, and NaN fails every comparison
                t_ = hi if hi < z else z
                med = lo if lo > t_ else t_
                u = (m - med) + 0.0 * (x + y)
                uc_ += u > utol
                ubuf[c] = u if u > 0.0 else 0.0
            # largest deviation of the pair: an integer max over the bit patterns
            # of non-negative floats (same order; vectorises, a float max does not)
            w = 0
            for c in range(m_):
                q = iubuf[c]
                w = q if q > w else w
            row_uc[a] += uc_
            if w > row_ub[a, 1]:
                row_ub[a, 1] = w
                row_ub[a, 0] = b
            if c_ == 0:
                continue
            tile_hit = True
            ra = a - a0
            row_viol[a] += c_
            h_ = 0
            pc = 0
            pq = 0
            pl = 0
            # positions of the violated c, branch-free compaction
            nh = 0
            for c in range(m_):
                hit[nh] = c
                nh += ebuf[c] > tol
            for h in range(nh):
                c = hit[h]
                e = ebuf[c]
                x = xs[c]
                y = ys[c]
                k = b + 1 + c
                if k < kmin:
                    kmin = k
                if k > kmax:
                    kmax = k
                q = np.int64(e * qscale + 0.5)
                pc += 1
                pq += q
                Ac[ra, k] += 1
                Aq[ra, k] += q
                Bc[k] += 1
                Bq[k] += q
                # the longest side (ties: first of (a,b), (a,k), (b,k))
                if z >= x and z >= y:
                    pl += 1
                elif x >= y:
                    Al[ra, k] += 1
                else:
                    Bl[k] += 1
                if e > hard:
                    h_ += 1
                if e > row_max[a]:
                    row_max[a] = e
                r = e * inv_top
                bi = nb - 1
                while bi > 0 and r < edges[bi]:
                    bi -= 1
                H[bi] += 1
                # top-K of row a: keep the K smallest keys (-e, b, k). Scan order makes
                # a later triangle's key larger among equal e, so only a strictly
                # larger e than the smallest kept enters; it evicts the smallest e
                # (among ties the latest).
                if K > 0 and e > topmin[a]:
                    w = 0
                    for t in range(1, K):
                        if topv[a, t] < topv[a, w] or (topv[a, t] == topv[a, w] and (
                                topb[a, t] > topb[a, w] or (topb[a, t] == topb[a, w] and topc[a, t] > topc[a, w]))):
                            w = t
                    topv[a, w] = e
                    topb[a, w] = b
                    topc[a, w] = k
                    lo = topv[a, 0]
                    for t in range(1, K):
                        if topv[a, t] < lo:
                            lo = topv[a, t]
                    topmin[a] = lo
            Ac[ra, b] += pc
            Aq[ra, b] += pq
            Al[ra, b] += pl
            pair_hard[_pidx(a, b, n)] = h_
            row_hard[a] += h_
        if kmax >= 0:
            base = _pidx(b, kmin, n)
            w_c = cnt[tid, base:base + kmax - kmin + 1]
            w_q = qex[tid, base:base + kmax - kmin + 1]
            w_l = lng[tid, base:base + kmax - kmin + 1]
            for t in range(kmax - kmin + 1):
                w_c[t] += Bc[kmin + t]
                w_q[t] += Bq[kmin + t]
                w_l[t] += Bl[kmin + t]
                Bc[kmin + t] = 0
                Bq[kmin + t] = 0
                Bl[kmin + t] = 0
    if tile_hit:
        for t in range(nb):
            hist[tid, t] += H[t]
        for ra in range(R):
            a = a0 + ra
            if a + 1 >= n:
                continue
            base = _pidx(a, a + 1, n)
            L = n - a - 1
            w_c = cnt[tid, base:base + L]
            w_q = qex[tid, base:base + L]
            w_l = lng[tid, base:base + L]
            s_c = Ac[ra, a + 1:]
            s_q = Aq[ra, a + 1:]
            s_l = Al[ra, a + 1:]
            for t in range(L):
                w_c[t] += s_c[t]
                w_q[t] += s_q[t]
                w_l[t] += s_l[t]


@njit(parallel=True, cache=True)
def _scan_kernel(d, tol, hard, utol, qscale, inv_top, edges, starts, rows,
                 row_viol, row_hard, row_max, pair_hard, topv, topb, topc, topmin,
                 hist, cnt, qex, lng, row_ub, row_uc):  # pragma: no cover - compiled
    n = d.shape[0]
    for t in prange(starts.shape[0]):
        a0 = starts[t]
        tid = numba.get_thread_id()
        _scan_tile(d, tol, hard, utol, qscale, inv_top, edges, a0, min(a0 + rows, n), tid,
                   row_viol, row_hard, row_max, pair_hard, topv, topb, topc, topmin, hist, cnt, qex, lng,
                   row_ub, row_uc)


def scan_triangles(d: np.ndarray, tol: float, hard: float, top: float, edges: np.ndarray, K: int,
                   starts: np.ndarray, rows: int) -> dict:
    """One fused pass over all triangles (see the module docs).

    Parameters
    ----------
    d : ndarray (n, n), C-contiguous float64
        Symmetric distances, NaN where missing.
    tol : float
        A triangle is violated when its excess ``2*longest - sum`` exceeds
        it, and breaks the three-point condition when ``longest - middle``
        does.
    hard : float
        Threshold above which a violated triangle forces a changed entry.
    top : float
        The largest entry (scale of the histogram and of the fixed point).
    edges : ndarray
        Histogram edges relative to ``top`` (first 0, last 1).
    K : int
        Worst triangles kept per row.

    Returns
    -------
    dict
        ``row_viol``, ``row_hard``, ``row_max`` (per smallest index),
        ``pair_hard`` (packed pairs), ``topv/topb/topc`` (n, K), ``hist``,
        ``cnt``, ``qex``, ``lng`` (packed pairs, summed over threads);
        ``umax`` (largest three-point deviation), ``ucount`` (triangles whose
        deviation exceeds ``tol``), ``uworst`` (a triangle with the largest
        deviation, or ``()``).

    Examples
    --------
    >>> from seqdist.kernels.triangles import tile_starts
    >>> d = np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]])
    >>> r = scan_triangles(d, 0.0, 0.0, 5.0, np.array([0, 0.5, 1.0]), 1, tile_starts(3), 32)
    >>> int(r["row_viol"].sum()), r["cnt"].tolist(), r["umax"], r["uworst"]
    (1, [1, 1, 1], 4.0, (0, 1, 2))
    """
    n = d.shape[0]
    P = n * (n - 1) // 2
    T = numba.get_num_threads()
    row_viol = np.zeros(n, np.int64)
    row_hard = np.zeros(n, np.int64)
    row_max = np.zeros(n)
    pair_hard = np.zeros(P, np.int32)
    topv = np.full((n, K), -1.0)
    topb = np.full((n, K), -1, np.int32)
    topc = np.full((n, K), -1, np.int32)
    topmin = np.full(n, -1.0)
    hist = np.zeros((T, len(edges) - 1), np.int64)
    # np.zeros maps fresh zero pages lazily: a clean matrix never touches these
    cnt = np.zeros((T, P), np.int32)
    qex = np.zeros((T, P), np.int64)
    lng = np.zeros((T, P), np.int32)
    row_ub = np.zeros((n, 2), np.int64)  # per row: b and the bits of the largest deviation
    row_uc = np.zeros(n, np.int64)
    qscale = float(2 ** QBITS) / top if top > 0 else 0.0
    inv_top = 1.0 / top if top > 0 else 0.0
    if n >= 3:
        with dynamic_chunks():
            _scan_kernel(d, float(tol), float(hard), float(tol), qscale, inv_top, np.asarray(edges, np.float64),
                         starts, rows, row_viol, row_hard, row_max, pair_hard, topv, topb, topc,
                         topmin, hist, cnt, qex, lng, row_ub, row_uc)
    if T > 1 and row_viol.any():
        cnt = cnt.sum(axis=0, dtype=np.int64)
        qex = qex.sum(axis=0)
        lng = lng.sum(axis=0, dtype=np.int64)
    else:
        cnt, qex, lng = cnt[0].astype(np.int64), qex[0], lng[0].astype(np.int64)
    umax, uworst = _ultra_worst(d, row_ub)
    return dict(row_viol=row_viol, row_hard=row_hard, row_max=row_max, pair_hard=pair_hard,
                topv=topv, topb=topb, topc=topc, hist=hist.sum(axis=0), cnt=cnt, qex=qex, lng=lng,
                umax=umax, ucount=int(row_uc.sum()), uworst=uworst)


def _ultra_worst(d, row_ub):
    """The largest three-point deviation and a triangle that has it."""
    if len(row_ub) == 0:
        return 0.0, ()
    a = int(np.argmax(row_ub[:, 1]))
    umax = float(row_ub[a:a + 1, 1].view(np.float64)[0])
    if not umax > 0:
        return 0.0, ()
    b = int(row_ub[a, 0])
    x, y, z = d[a, b + 1:], d[b, b + 1:], d[a, b]
    hi, lo = np.maximum(x, y), np.minimum(x, y)
    with np.errstate(invalid="ignore"):
        u = np.maximum(hi, z) - np.maximum(lo, np.minimum(hi, z))
    u[np.isnan(u)] = -1.0
    return umax, (a, b, b + 1 + int(np.argmax(u)))


# ------------------------------------------------------------- collection
@njit(parallel=True, cache=True)
def _collect_kernel(d, hard, pa, pb, offs, take, out_abc, out_e):  # pragma: no cover - compiled
    n = d.shape[0]
    for p in prange(pa.shape[0]):
        pos = offs[p]
        end = pos + take[p]
        a = pa[p]
        b = pb[p]
        z = d[a, b]
        for k in range(b + 1, n):
            if pos >= end:
                break
            x = d[a, k]
            y = d[b, k]
            m = x if x > y else y
            m = m if m > z else z
            e = 2.0 * m - (x + y + z)
            if e > hard:
                out_abc[pos, 0] = a
                out_abc[pos, 1] = b
                out_abc[pos, 2] = k
                out_e[pos] = e
                pos += 1


def collect_triangles(d: np.ndarray, hard: float, pair_hard: np.ndarray, cap: int):
    """Violated triangles with excess above ``hard``: all of them when there
    are at most ``cap``, else up to ``cap`` spread evenly over the first
    index (each row ``i`` gives at most ``cap / rows`` triangles, in order).

    ``pair_hard`` is the packed per-pair count from :func:`scan_triangles`.
    Triangles come out in lexicographic order ``(i, j, k)``, i < j < k.

    Returns
    -------
    (ndarray (m, 3) int32, ndarray (m,) float64)

    Examples
    --------
    >>> d = np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]])
    >>> abc, e = collect_triangles(d, 0.0, np.array([1, 0, 0], np.int32), 10)
    >>> abc.tolist(), e.tolist()
    ([[0, 1, 2]], [3.0])
    """
    n = d.shape[0]
    nz = np.flatnonzero(pair_hard)
    if nz.size == 0:
        return np.zeros((0, 3), np.int32), np.zeros(0)
    # rows and columns of the packed positions (inverse of i*(2n-i-1)/2 + j-i-1)
    ar = np.arange(n, dtype=np.int64)
    start = ar * (2 * n - ar - 1) // 2
    pa = np.searchsorted(start, nz, side="right").astype(np.int64) - 1
    pb = nz - start[pa] + pa + 1
    sizes = pair_hard[nz].astype(np.int64)
    total = int(sizes.sum())
    if total <= cap:
        take = sizes
    else:
        # a quota per first index; rows that need less leave room for the others
        rows, first = np.unique(pa, return_index=True)
        per_row = np.add.reduceat(sizes, first)
        lo, hi = 0, int(per_row.max())
        while lo < hi:  # the largest quota q with sum(min(per_row, q)) <= cap
            q = (lo + hi + 1) // 2
            if int(np.minimum(per_row, q).sum()) <= cap:
                lo = q
            else:
                hi = q - 1
        q = max(lo, 1)
        within = np.cumsum(sizes) - np.repeat(np.cumsum(per_row) - per_row, np.diff(np.append(first, len(pa))))
        before = within - sizes
        take = np.clip(q - before, 0, sizes)
    keep = take > 0
    pa, pb, take = pa[keep], pb[keep], take[keep]
    offs = np.concatenate([[0], np.cumsum(take)[:-1]]).astype(np.int64)
    m = int(take.sum())
    out_abc = np.zeros((m, 3), np.int32)
    out_e = np.zeros(m)
    if m:
        _collect_kernel(d, float(hard), pa, pb, offs, take.astype(np.int64), out_abc, out_e)
    return out_abc, out_e


# ------------------------------------------------------------- packing
@njit(cache=True)
def _greedy(ids, order, nent):  # pragma: no cover - compiled
    used = np.zeros(nent, dtype=np.bool_)
    chosen = np.zeros(ids.shape[0], dtype=np.bool_)
    for t in order:
        a = ids[t, 0]
        b = ids[t, 1]
        c = ids[t, 2]
        if not (used[a] or used[b] or used[c]):
            used[a] = True
            used[b] = True
            used[c] = True
            chosen[t] = True
    return chosen


def greedy_packing(ids: np.ndarray, nent: int) -> np.ndarray:
    """Entry-disjoint triangles, chosen greedily: fewest conflicts first.

    Parameters
    ----------
    ids : ndarray (m, 3) int64
        Entry numbers (0 .. nent-1) of the three sides of each triangle.
    nent : int
        Number of distinct entries.

    Returns
    -------
    ndarray (m,) bool
        The chosen triangles (no two share an entry).

    Triangles are taken in increasing order of the summed degree of their
    entries (how many triangles of the list use each), ties by position: a
    triangle whose entries few others need blocks few others.

    Examples
    --------
    >>> greedy_packing(np.array([[0, 1, 2], [2, 3, 4], [5, 6, 7]]), 8).tolist()
    [True, False, True]
    """
    if len(ids) == 0:
        return np.zeros(0, dtype=bool)
    deg = np.bincount(ids.ravel(), minlength=nent)
    score = deg[ids].sum(axis=1)
    order = np.argsort(score, kind="stable").astype(np.int64)
    return _greedy(ids.astype(np.int64), order, nent)


# ------------------------------------------------------------- quartets
@njit(cache=True)
def _quartet(d, i, j, k, l, tol, acc, dsum, dcnt, dhist, qworst):  # pragma: no cover - compiled
    s1 = d[i, j] + d[k, l]
    s2 = d[i, k] + d[j, l]
    s3 = d[i, l] + d[j, k]
    if s1 != s1 or s2 != s2 or s3 != s3:
        acc[1] += 1.0  # a missing entry
        return
    # sort the three sums: S <= M <= L
    if s1 > s2:
        s1, s2 = s2, s1
    if s2 > s3:
        s2, s3 = s3, s2
    if s1 > s2:
        s1, s2 = s2, s1
    gap = s3 - s2
    acc[0] += 1.0
    if gap > tol:
        acc[2] += 1.0
    rel = gap / s3 if s3 > 0 else 0.0
    acc[3] += rel
    if rel > acc[4]:
        acc[4] = rel
        qworst[0] = i
        qworst[1] = j
        qworst[2] = k
        qworst[3] = l
    spread = s3 - s1
    if spread > tol:
        delta = gap / spread
        acc[5] += delta
        acc[6] += 1.0
        dsum[i] += delta
        dsum[j] += delta
        dsum[k] += delta
        dsum[l] += delta
        dcnt[i] += 1
        dcnt[j] += 1
        dcnt[k] += 1
        dcnt[l] += 1
        nb = dhist.shape[0]
        bi = int(delta * nb)
        if bi >= nb:
            bi = nb - 1
        dhist[bi] += 1
    else:
        acc[7] += 1.0  # all three sums equal within tol: delta undefined


@njit(cache=True)
def _quartets_all(d, tol, acc, dsum, dcnt, dhist, qworst):  # pragma: no cover - compiled
    n = d.shape[0]
    for i in range(n):
        for j in range(i + 1, n):
            for k in range(j + 1, n):
                for l in range(k + 1, n):
                    _quartet(d, i, j, k, l, tol, acc, dsum, dcnt, dhist, qworst)


@njit(cache=True)
def _quartets_list(d, tol, Q, acc, dsum, dcnt, dhist, qworst):  # pragma: no cover - compiled
    for r in range(Q.shape[0]):
        _quartet(d, Q[r, 0], Q[r, 1], Q[r, 2], Q[r, 3], tol, acc, dsum, dcnt, dhist, qworst)


def quartet_stats(d: np.ndarray, tol: float, quartets: np.ndarray | None = None, nbins: int = 10) -> dict:
    """Four-point and delta statistics over all quartets or the given ones.

    For a quartet ``{i, j, k, l}`` the three pair sums ``d(i,j)+d(k,l)``,
    ``d(i,k)+d(j,l)``, ``d(i,l)+d(j,k)`` sorted are ``S <= M <= L``. The
    four-point condition holds when ``L - M <= tol``; ``(L - M) / L`` is the
    relative deviation; ``delta = (L - M) / (L - S)`` (Holland et al. 2002),
    undefined (left out, counted as ``star``) when ``L - S <= tol``.

    Parameters
    ----------
    quartets : ndarray (q, 4) int64, optional
        Quartets to examine (each with four distinct taxa); default all.

    Returns
    -------
    dict
        ``examined``, ``missing``, ``violated``, ``rel_sum``, ``rel_max``,
        ``worst`` (quartet), ``delta_sum``, ``delta_n``, ``star``,
        ``taxon_delta_sum``, ``taxon_delta_n``, ``delta_hist``.

    Examples
    --------
    >>> d = np.array([[0, 3, 4, 5], [3, 0, 5, 4], [4, 5, 0, 3], [5, 4, 3, 0.]])
    >>> r = quartet_stats(d, 0.0)
    >>> r["examined"], r["violated"], r["delta_sum"]
    (1, 1, 0.5)
    """
    n = d.shape[0]
    acc = np.zeros(8)
    dsum = np.zeros(n)
    dcnt = np.zeros(n, np.int64)
    dhist = np.zeros(nbins, np.int64)
    qworst = np.full(4, -1, np.int64)
    if quartets is None:
        if n >= 4:
            _quartets_all(d, float(tol), acc, dsum, dcnt, dhist, qworst)
    elif len(quartets):
        _quartets_list(d, float(tol), np.ascontiguousarray(quartets, np.int64), acc, dsum, dcnt, dhist, qworst)
    return dict(examined=int(acc[0]), missing=int(acc[1]), violated=int(acc[2]), rel_sum=float(acc[3]),
                rel_max=float(acc[4]), worst=tuple(int(x) for x in qworst) if qworst[0] >= 0 else (),
                delta_sum=float(acc[5]), delta_n=int(acc[6]), star=int(acc[7]),
                taxon_delta_sum=dsum, taxon_delta_n=dcnt, delta_hist=dhist)
