"""Compiled kernels on plain arrays for triangle checks, shared by audit, scores,
repair and impact. Shortest paths live in :mod:`seqdist.kernels.shortest_paths`.

* :func:`count_violations` - exact count of violated triangles and the
  largest violation, skipping triangles with a missing side.
* :func:`max_violation` - the largest ``d(i,j) - d(i,k) - d(k,j)`` over all
  triples (0 for a metric).
* :func:`is_metric` - the contract's metric test within a tolerance.

How the kernels are fast
------------------------
Every triangle ``i < j < k`` is visited once. The work is cut into tiles of
``TILE`` consecutive rows ``i``; inside a tile the middle index ``j`` is the
outer loop, so the tail of row ``j`` is read once per tile and reused for all
rows of the tile (cache blocking; without it the kernel is bound by memory
bandwidth from n of about 1500 on). The innermost loop over ``k`` runs over two
contiguous row slices and is branch-free, so the C compiler turns it into SIMD
code. The columns ``k`` go in chunks of ``CHUNK`` values, so that the tile's
rows stay in the level-2 cache at any n (at 20,000 taxa a row is 160 KB and a
tile of whole rows 5 MB); chunking never changes the count.

A float32 matrix (for instance a memory-mapped one read from a float32 npz)
is counted where it lies, without a float64 copy: each chunk is widened to
float64 in a small scratch buffer and every excess is computed in float64,
so the count is exact for the stored float32 values.

The loops are Cython (``_triangles.pyx``), compiled when the package is
installed. The excess of a triangle is computed as ``2 * longest - (sum of the three sides)``;
a triangle with a missing (NaN) side gives NaN, which never compares greater
than the tolerance, so missing sides cost nothing. Only pairs ``(i, j)`` whose
vector count is non-zero are scanned a second time, with branches, to find the
largest violation. Tiles are handed to threads dynamically (heavy and light
tiles interleaved; OpenMP's dynamic schedule, chunk size 1), which keeps both
cores busy on a shared machine.

All kernels are pure functions on float64 or float32 arrays (inputs are not modified)
and are checked in the tests against plain loops.
"""

from __future__ import annotations

import numpy as np

from seqdist.core.matrix import default_tol
from seqdist.kernels._triangles import count_tiles, count_tiles_f32

__all__ = ["tile_starts", "count_violations", "max_violation", "is_metric"]

#: Rows per tile of the triangle kernels (32 measured best here: 16 KB row
#: tails times 32 rows stay in the 1 MB level-2 cache up to n = 4000).
TILE = 32


def tile_starts(n: int, rows: int = TILE) -> np.ndarray:
    """First rows of the tiles, heavy and light tiles interleaved.

    Tile ``t`` holds rows ``starts[t] .. starts[t] + rows - 1``; a tile near
    the top holds more triangles (row ``i`` owns ``(n - i)^2 / 2``), so the
    order alternates first, last, second, second-to-last, ... for balance.

    Examples
    --------
    >>> tile_starts(100, 32).tolist()
    [0, 96, 32, 64]
    """
    s = list(range(0, max(n, 0), rows))
    out = []
    lo, hi = 0, len(s) - 1
    while lo <= hi:
        out.append(s[lo])
        if lo != hi:
            out.append(s[hi])
        lo += 1
        hi -= 1
    return np.array(out, dtype=np.int64)


#: Columns per chunk of the count (4096 values: a tile's 32 rows of chunks, 1 MB in float64,
#: stay in the 2 MB level-2 cache, and the chunk of the middle row in level 1, at any n).
CHUNK = 4096


def _as_c(values) -> np.ndarray:
    """A C-contiguous float64 or float32 view of ``values`` (copied only when it must be)."""
    d = np.asarray(values)
    if d.dtype != np.float32:
        d = np.asarray(d, dtype=np.float64)
    if d.ndim != 2 or d.shape[0] != d.shape[1]:
        raise ValueError(f"expected a square matrix, got shape {d.shape}")
    return np.ascontiguousarray(d)


def count_violations(values: np.ndarray, tol: float | None = None) -> tuple[int, float]:
    """Exact number of violated triangles and the largest violation.

    A triangle (unordered triple of distinct taxa) is violated when its
    longest side exceeds the sum of the other two by more than ``tol``
    (computed in float64 as ``2 * longest - (sum of the three sides)``).
    Triangles with a missing (NaN) side are skipped. Only the upper triangle
    of ``values`` is read.

    Parameters
    ----------
    values : ndarray, shape (n, n)
        Symmetric distances; NaN where missing.
    tol : float, optional
        Tolerance (default: 1e-9 times the largest entry).

    Returns
    -------
    (int, float)
        Number of violated triangles; the largest excess among them (0.0
        when there is none).

    Examples
    --------
    >>> count_violations(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))
    (1, 3.0)
    """
    d = _as_c(values)
    if tol is None:
        tol = default_tol(d)
    if d.shape[0] < 3:
        return 0, 0.0
    starts = tile_starts(d.shape[0])
    counts = np.zeros(starts.shape[0], dtype=np.int64)
    worst = np.zeros(starts.shape[0])
    kernel = count_tiles_f32 if d.dtype == np.float32 else count_tiles
    kernel(d, float(tol), starts, TILE, counts, worst, CHUNK)
    return int(counts.sum()), float(worst.max())


def max_violation(values: np.ndarray) -> float:
    """Largest ``d(i,j) - (d(i,k) + d(k,j))`` over all triples (0 for a metric).

    Triangles with a missing side are skipped.

    Examples
    --------
    >>> max_violation(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))
    3.0
    """
    return count_violations(values, 0.0)[1]


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
    # upper triangle only, so a tiny asymmetry within tol cannot double-count
    return count_violations(d, tol)[0] == 0
