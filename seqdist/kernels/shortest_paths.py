"""All-pairs shortest paths on dense distance matrices (the shrink closure).

:func:`apsp` runs Floyd-Warshall over the finite entries: missing entries
(NaN) and ``inf`` are absent edges, and zero distances are real edges (unlike
scipy's dense routine, which reads an off-diagonal 0 as "no edge").

The kernel is a blocked (tiled) Floyd-Warshall in float64 that uses symmetry:

* round ``K`` takes the row panel of the pivot block ``K`` (``b`` rows by
  ``n`` columns) into a contiguous buffer ``P`` and runs plain
  Floyd-Warshall on it with the pivots of ``K`` only. Rows in ``K`` depend
  only on rows in ``K`` for those pivots, so this is exactly the diagonal and
  row-panel phases of the blocked algorithm; the column panel is ``P``
  transposed, by symmetry.
* every other entry ``(i, j)`` with ``i <= j`` (block-wise) then takes
  ``min(d[i, j], min_k P[k, i] + P[k, j])``, a min-plus product that reads
  only ``P``; blocks below the diagonal are not touched until one mirror at
  the end, which halves the work.

Float64 throughout: the result is the exact minimum over paths of the
rounded path sums (path sums may round differently from another routine's
order of additions, by an ulp or so). One thread by default; with
``threads`` the row blocks of each round are shared among numba's threads
(one barrier per round of ``b`` pivots; a barrier per pivot is ruinous on
shared cores).
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

_BLOCK = 64
_TILE = 512


@njit(cache=True)
def _panel_fw(P, k0, kb):  # pragma: no cover - compiled
    # Floyd-Warshall on the kb x n row panel with pivots k0 .. k0+kb-1.
    n = P.shape[1]
    for kk in range(kb):
        rowk = P[kk]
        for r in range(kb):
            a = P[r, k0 + kk]
            if a == np.inf:
                continue
            rowr = P[r]
            for j in range(n):
                v = a + rowk[j]
                if v < rowr[j]:
                    rowr[j] = v


@njit(cache=True)
def _gather(d, P, PT, k0, kb):  # pragma: no cover - compiled
    # the current row panel of pivot block K from the upper-triangle storage,
    # closed over the pivots of K, scattered back, and kept transposed too
    n = d.shape[0]
    for r in range(kb):
        for j in range(k0):
            P[r, j] = d[j, k0 + r]
        for j in range(k0, n):
            P[r, j] = d[k0 + r, j]
    _panel_fw(P, k0, kb)
    for r in range(kb):
        for j in range(k0):
            d[j, k0 + r] = P[r, j]
        for j in range(k0, n):
            d[k0 + r, j] = P[r, j]
    for j in range(n):
        for r in range(kb):
            PT[j, r] = P[r, j]


@njit(cache=True)
def _update_rows(d, P, PT, i0, i1, kb, tile):  # pragma: no cover - compiled
    # min-plus update of rows i0..i1-1, columns from i0 on (upper blocks)
    n = d.shape[0]
    for j0 in range(i0, n, tile):
        j1 = min(n, j0 + tile)
        w = j1 - j0
        for i in range(i0, i1):
            # zero-based loops over slices: LLVM vectorises these (7x faster
            # here than indexing rows from j0 to j1)
            rowi = d[i, j0:j1]
            for kk in range(kb):
                a = PT[i, kk]
                if a == np.inf:
                    continue
                rowk = P[kk, j0:j1]
                for j in range(w):
                    v = a + rowk[j]
                    if v < rowi[j]:
                        rowi[j] = v


@njit(cache=True)
def _mirror(d):  # pragma: no cover - compiled
    n = d.shape[0]
    for i in range(n):
        for j in range(i + 1, n):
            d[j, i] = d[i, j]


@njit(cache=True)
def _fw_blocked(d, b, tile):  # pragma: no cover - compiled
    n = d.shape[0]
    nb = (n + b - 1) // b
    P = np.empty((b, n))
    PT = np.empty((n, b))
    for K in range(nb):
        k0 = K * b
        kb = min(n, k0 + b) - k0
        _gather(d, P, PT, k0, kb)
        for I in range(nb):
            if I != K:
                _update_rows(d, P, PT, I * b, min(n, I * b + b), kb, tile)
    _mirror(d)
    return d


@njit(parallel=True, cache=True)
def _fw_blocked_par(d, b, tile, order):  # pragma: no cover - compiled
    # The same rounds; the row blocks of one round are independent, so they
    # go to threads (one barrier per round of b pivots, not per pivot).
    n = d.shape[0]
    nb = (n + b - 1) // b
    P = np.empty((b, n))
    PT = np.empty((n, b))
    for K in range(nb):
        k0 = K * b
        kb = min(n, k0 + b) - k0
        _gather(d, P, PT, k0, kb)
        for q in prange(nb):
            I = order[q]
            if I != K:
                _update_rows(d, P, PT, I * b, min(n, I * b + b), kb, tile)
    _mirror(d)
    return d


@njit(cache=True)
def _fw_plain(d):  # pragma: no cover - compiled
    # Textbook Floyd-Warshall over the whole matrix; the reference for tests.
    n = d.shape[0]
    for k in range(n):
        rowk = d[k]
        for i in range(n):
            dik = d[i, k]
            if dik == np.inf:
                continue
            rowi = d[i]
            for j in range(n):
                v = dik + rowk[j]
                if v < rowi[j]:
                    rowi[j] = v
    return d


def _prepare(values) -> np.ndarray:
    d = np.array(values, dtype=np.float64, order="C", copy=True)
    if d.ndim != 2 or d.shape[0] != d.shape[1]:
        raise ValueError(f"apsp needs a square matrix, got shape {d.shape}")
    d[np.isnan(d)] = np.inf
    np.fill_diagonal(d, 0.0)
    return d


def _interleaved(nb: int) -> np.ndarray:
    # heavy (top) and light (bottom) row blocks alternate, for balance
    out = []
    lo, hi = 0, nb - 1
    while lo <= hi:
        out.append(lo)
        if lo != hi:
            out.append(hi)
        lo += 1
        hi -= 1
    return np.array(out, dtype=np.int64)


def apsp(values: np.ndarray, *, block: int = _BLOCK, tile: int = _TILE, threads: int | None = None) -> np.ndarray:
    """All-pairs shortest-path distances over the finite entries.

    Parameters
    ----------
    values : ndarray, shape (n, n)
        Symmetric non-negative distances; NaN or inf entries are absent edges,
        zeros are edges of length 0. Only the upper triangle is read (the
        matrix is assumed symmetric). The input is not modified.
    block, tile : int
        Pivot block size and column tile width of the blocked kernel.
    threads : int, optional
        1 (the default) runs serially; 0 uses all of numba's threads and
        ``k > 1`` uses ``k``, handing the row blocks of each round to them.
        On the shared 2-core machine here the parallel kernel gained nothing
        under load (other jobs held the cores), hence serial by default.

    Returns
    -------
    ndarray
        Shortest-path distances (inf where no path exists), symmetric, with a
        zero diagonal.

    Examples
    --------
    >>> float(apsp(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))[0, 1])
    2.0
    >>> float(apsp(np.array([[0, np.nan, 0], [np.nan, 0, 2], [0, 2, 0.]]))[0, 1])
    2.0
    """
    d = _prepare(values)
    n = d.shape[0]
    if n <= 1:
        return d
    if threads is None:
        threads = 1
    if threads == 1:
        return _fw_blocked(d, int(block), int(tile))
    import numba

    nb = (n + int(block) - 1) // int(block)
    old = numba.get_num_threads()
    try:
        if threads > 1:
            numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
        prev = numba.set_parallel_chunksize(1)  # dynamic hand-out of row blocks
        try:
            return _fw_blocked_par(d, int(block), int(tile), _interleaved(nb))
        finally:
            numba.set_parallel_chunksize(prev)
    finally:
        numba.set_num_threads(old)


def apsp_reference(values: np.ndarray) -> np.ndarray:
    """Plain (unblocked, full-matrix) Floyd-Warshall, for tests of :func:`apsp`."""
    return _fw_plain(_prepare(values))


__all__ = ["apsp", "apsp_reference"]
