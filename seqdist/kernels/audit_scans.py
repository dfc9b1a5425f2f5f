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

The loops are compiled when the package is installed: Cython in
``_audit_scans.pyx`` (tiles handed to OpenMP threads one at a time), and the
scan of one tile in C (``src/audit_scans.h``, built for AVX2 and the baseline).
"""

from __future__ import annotations

import numpy as np

from seqdist.kernels._audit_scans import collect_pairs, greedy, max_threads, scan_tiles
from seqdist.kernels._audit_scans import quartets as quartet_loop

__all__ = ["scan_triangles", "collect_triangles", "greedy_packing", "quartet_stats"]

#: Fixed-point scale of the summed excess (units of largest entry / 2**40).
QBITS = 40


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
    d = np.ascontiguousarray(d, np.float64)
    n = d.shape[0]
    P = n * (n - 1) // 2
    T = max_threads()
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
        nb = len(edges) - 1
        # per-thread scratch, zero on entry and left zero by the kernel
        scratch = dict(Ac=np.zeros((T, rows * n), np.int32), Aq=np.zeros((T, rows * n), np.int64),
                       Al=np.zeros((T, rows * n), np.int32), Bc=np.zeros((T, n), np.int32),
                       Bq=np.zeros((T, n), np.int64), Bl=np.zeros((T, n), np.int32), ebuf=np.zeros((T, n)),
                       hit=np.zeros((T, n + 1), np.int64), H=np.zeros((T, nb), np.int64))
        scan_tiles(d, float(tol), float(hard), float(tol), qscale, inv_top,
                   np.ascontiguousarray(edges, np.float64), np.ascontiguousarray(starts, np.int64), int(rows),
                   row_viol, row_hard, row_max, pair_hard, topv, topb, topc, topmin, hist, cnt, qex, lng,
                   row_ub, row_uc, **scratch)
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
def collect_triangles(d: np.ndarray, hard: float, pair_hard: np.ndarray, cap: int) -> tuple[np.ndarray, np.ndarray]:
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
    d = np.ascontiguousarray(d, np.float64)
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
        collect_pairs(d, float(hard), np.ascontiguousarray(pa, np.int64), np.ascontiguousarray(pb, np.int64),
                      offs, np.ascontiguousarray(take, np.int64), out_abc, out_e)
    return out_abc, out_e


# ------------------------------------------------------------- packing
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
    chosen = np.zeros(len(ids), dtype=bool)
    greedy(np.ascontiguousarray(ids, np.int64), order, int(nent), chosen.view(np.uint8))
    return chosen


# ------------------------------------------------------------- quartets
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
    d = np.ascontiguousarray(d, np.float64)
    dsum = np.zeros(n)
    dcnt = np.zeros(n, np.int64)
    dhist = np.zeros(nbins, np.int64)
    qworst = np.full(4, -1, np.int64)
    acc = (0, 0, 0, 0.0, 0.0, 0.0, 0, 0)
    if quartets is None:
        if n >= 4:
            acc = quartet_loop(d, float(tol), None, dsum, dcnt, dhist, qworst)
    elif len(quartets):
        acc = quartet_loop(d, float(tol), np.ascontiguousarray(quartets, np.int64), dsum, dcnt, dhist, qworst)
    examined, missing, violated, rel_sum, rel_max, delta_sum, delta_n, star = acc
    return dict(examined=int(examined), missing=int(missing), violated=int(violated), rel_sum=float(rel_sum),
                rel_max=float(rel_max), worst=tuple(int(x) for x in qworst) if qworst[0] >= 0 else (),
                delta_sum=float(delta_sum), delta_n=int(delta_n), star=int(star),
                taxon_delta_sum=dsum, taxon_delta_n=dcnt, delta_hist=dhist)
