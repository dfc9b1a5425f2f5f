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
``threads`` the row blocks of each round are shared among OpenMP threads
(one barrier per round of ``b`` pivots; a barrier per pivot is ruinous on
shared cores).

The loops are compiled when the package is installed (Cython,
``_shortest_paths.pyx``, with the hot loops in C, ``src/shortest_paths.h``,
built for AVX2 and for the baseline and chosen at load time). The min-plus
update takes four rows at a time, so each value of the panel is loaded once
for four rows; where the CPU has AVX-512 (checked at run time) a block of 8
rows by 16 columns stays in registers over the pivots of a round instead,
about 2.8x faster. For every entry the candidate sums are formed and compared
in the same order of pivots as the textbook loop, so the result does not
depend on the vector width, the form of the update, the tiling or the number
of threads (bitwise; tested).
"""

from __future__ import annotations

import numpy as np

from seqdist.kernels._shortest_paths import fw_blocked, max_threads

_BLOCK = 64
_TILE = 512


def _prepare(values) -> np.ndarray:
    d = np.array(values, dtype=np.float64, order="C", copy=True)
    if d.ndim != 2 or d.shape[0] != d.shape[1]:
        raise ValueError(f"apsp needs a square matrix, got shape {d.shape}")
    d[np.isnan(d)] = np.inf
    np.fill_diagonal(d, 0.0)
    return d


def apsp(values: np.ndarray, *, block: int = _BLOCK, tile: int = _TILE, threads: int | None = None) -> np.ndarray:
    """All-pairs shortest-path distances over the finite entries.

    Parameters
    ----------
    values : ndarray, shape (n, n)
        Symmetric non-negative distances; NaN or inf entries are absent edges,
        zeros are edges of length 0. Only the upper triangle is read (the
        matrix is assumed symmetric). The input is not modified.
    block, tile : int
        Pivot block size, and column tile width of the portable update (the
        AVX-512 form works on blocks of 16 columns). ``tile`` never changes
        the result; ``block`` may, by an ulp or so (it sets the order in which
        path sums are formed).
    threads : int, optional
        1 (the default) runs serially; 0 uses all OpenMP threads
        (``OMP_NUM_THREADS``, else the cores) and ``k > 1`` uses ``k``,
        handing the row blocks of each round to them. On the shared 2-core
        machine here the parallel kernel gained nothing under load (other jobs
        held the cores), hence serial by default.

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
    if threads < 0:
        raise ValueError(f"threads must be >= 0, got {threads}")
    if threads == 0:
        threads = max_threads()
    b = min(int(block), n)
    if b < 1 or int(tile) < 1:
        raise ValueError(f"block and tile must be >= 1, got {block} and {tile}")
    P = np.empty((b, n))
    PT = np.empty((n, b))
    fw_blocked(d, P, PT, int(tile), int(threads))
    return d


def apsp_reference(values: np.ndarray) -> np.ndarray:
    """Plain (unblocked, full-matrix) Floyd-Warshall in numpy, for tests of :func:`apsp`.

    Pivot ``k`` replaces every ``d[i, j]`` by ``d[i, k] + d[k, j]`` when that is
    smaller; row and column ``k`` do not change during their own pivot (zero
    diagonal), so the whole matrix is updated at once. ``fmin`` leaves an entry
    alone where the sum is undefined (``inf + -inf``), as the textbook ``<`` does.

    Examples
    --------
    >>> apsp_reference(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))[0].tolist()
    [0.0, 2.0, 1.0]
    """
    d = _prepare(values)
    for k in range(d.shape[0]):
        np.fmin(d, d[:, k, None] + d[None, k, :], out=d)
    return d


__all__ = ["apsp", "apsp_reference"]
