"""Compiled kernels of the tree builders (see :mod:`seqdist.trees.build`).

The loops are Cython (``_tree_building.pyx``, with the row minima in C in
``src/tree_building.h``), compiled when the package is installed. Each kernel
works in place on the array it is given (the caller passes a private copy),
releases the GIL while it runs, and is tested against plain references
(Biopython, scipy, literal loops from the papers' formulas) in
tests/test_trees*.py.
"""

from __future__ import annotations

import numpy as np

from seqdist.kernels._tree_building import nj_kernel as _nj
from seqdist.kernels._tree_building import upgma_kernel as _upgma

__all__ = ["nj_kernel", "upgma_kernel"]


def _work_array(a: np.ndarray, name: str) -> np.ndarray:
    # the kernels overwrite their input, so a copy made here would hide the
    # caller's mistake: ask for the right array instead
    if not (isinstance(a, np.ndarray) and a.dtype == np.float64 and a.flags.c_contiguous and a.flags.writeable
            and a.ndim == 2 and a.shape[0] == a.shape[1]):
        raise ValueError(f"{name} must be a writable, C-contiguous, square float64 array")
    return a


def nj_kernel(D: np.ndarray, V: np.ndarray, bionj: bool,
              sorted_rows: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Neighbor joining / BIONJ on the (n, n) array D (overwritten).

    sorted_rows=False: every step scans the lower triangle (with a cheap
    vectorised row minimum first). sorted_rows=True: each row also keeps its
    distances in increasing order, and a row's scan stops as soon as
    c d - (R_a + max R) exceeds the best Q so far; a pair is stored in the
    row of its younger member (distances between surviving clusters never
    change), entries of joined clusters are skipped and compacted away when
    half of the clusters have gone. Both pick the same pair every step.

    Parameters
    ----------
    D : numpy.ndarray
        Writable C-contiguous float64 (n, n) distances, complete; overwritten.
    V : numpy.ndarray
        BIONJ's variances, initially a copy of ``D`` (overwritten); not
        read when ``bionj`` is false (pass anything, e.g. ``np.zeros((1, 1))``).
    bionj : bool
        BIONJ's variance-weighted reduction instead of neighbor joining's.
    sorted_rows : bool
        The sorted-row search (else the full scan).

    Returns
    -------
    kids : numpy.ndarray
        (n - 3, 2) int64: the ids joined at each step; leaves are 0..n-1, the
        cluster made at step s is n + s.
    lens : numpy.ndarray
        (n - 3, 2) float64: their branch lengths.
    last3, len3 : numpy.ndarray
        The three ids left at the end and their branch lengths.

    Examples
    --------
    >>> D = np.array([[0, 5, 9, 9, 8], [5, 0, 10, 10, 9], [9, 10, 0, 8, 7],
    ...               [9, 10, 8, 0, 3], [8, 9, 7, 3, 0]], dtype=float)
    >>> kids, lens, last3, len3 = nj_kernel(D, np.zeros((1, 1)), False, True)
    >>> kids.tolist(), lens.tolist()
    ([[0, 1], [5, 2]], [[2.0, 3.0], [3.0, 4.0]])
    >>> last3.tolist(), len3.tolist()
    ([6, 4, 3], [2.0, 1.0, 2.0])
    """
    _work_array(D, "D")
    if bionj:
        _work_array(V, "V")
        if V.shape != D.shape:
            raise ValueError("V must have the shape of D")
    else:
        V = np.zeros((1, 1))  # not read
    return _nj(D, V, bool(bionj), bool(sorted_rows))


def upgma_kernel(D: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """UPGMA (average linkage) on the (n, n) array D (overwritten).

    Each row caches its nearest active neighbour (smallest distance, ties by
    the smallest key); a cached minimum is only recomputed when its partner
    was just merged, so the work is close to ``O(n^2)`` in practice.

    Parameters
    ----------
    D : numpy.ndarray
        Writable C-contiguous float64 (n, n) distances, complete; overwritten.

    Returns
    -------
    kids : numpy.ndarray
        (n - 1, 2) int64: the ids joined at each step; leaves are 0..n-1, the
        cluster made at step s is n + s.
    hts : numpy.ndarray
        (n - 1,) float64: the height of each node made (half the joining distance).

    Examples
    --------
    >>> D = np.array([[0, 2, 6], [2, 0, 6], [6, 6, 0]], dtype=float)
    >>> kids, hts = upgma_kernel(D)
    >>> kids.tolist(), hts.tolist()
    ([[0, 1], [3, 2]], [1.0, 3.0])
    """
    return _upgma(_work_array(D, "D"))
