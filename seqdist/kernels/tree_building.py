"""Compiled kernels of the tree builders (see :mod:`seqdist.trees.build`).

The loops are Cython (``_tree_building.pyx``, with the row minima, row sums and
strided row reads and writes in C in ``src/tree_building.h``), compiled when the
package is installed. Each kernel releases the GIL while it runs, and is tested
against plain references (Biopython, scipy, literal loops from the papers'
formulas) in tests/test_trees*.py.

Memory. UPGMA works in place on the (n, n) float64 array it is given (the caller
passes a private copy). Neighbor joining and BIONJ read the matrix they are
given (float64 or float32, possibly a read-only memory map) and never write to
it: they keep their own working copy of its lower triangle, packed row after
row in float64 (half a float64 matrix; BIONJ a second one for its variances),
and for the sorted search each pair once in a sorted row, as a float32 lower
bound of its distance and a 32-bit cluster id (half a float64 matrix, plus
1/32 room to grow). With a float64 input that is 2.02 times the float64 matrix
for neighbor joining and 2.52 for BIONJ (1.52 and 2.02 for a float32 input),
where a full working copy, sorted values and their indices took 3.5 and 4.5.
"""

from __future__ import annotations

import numpy as np

from seqdist.kernels._tree_building import nj_kernel as _nj
from seqdist.kernels._tree_building import upgma_kernel as _upgma

__all__ = ["nj_kernel", "packed_lower", "upgma_kernel"]


def _work_array(a: np.ndarray, name: str) -> np.ndarray:
    # the kernels overwrite their input, so a copy made here would hide the
    # caller's mistake: ask for the right array instead
    if not (isinstance(a, np.ndarray) and a.dtype == np.float64 and a.flags.c_contiguous and a.flags.writeable
            and a.ndim == 2 and a.shape[0] == a.shape[1]):
        raise ValueError(f"{name} must be a writable, C-contiguous, square float64 array")
    return a


def packed_lower(D: np.ndarray) -> np.ndarray:
    """The strictly lower triangle of the square array ``D``, row after row, as float64.

    The distance of taxa ``a > b`` lands at ``a (a - 1) / 2 + b``. Rows are
    converted one at a time, so a float32 or memory-mapped ``D`` is never
    copied whole in float64, and the entries above the diagonal are not read.

    Examples
    --------
    >>> packed_lower(np.array([[0, 1, 2], [1, 0, 3], [2, 3, 0]], dtype=np.float32)).tolist()
    [1.0, 2.0, 3.0]
    """
    if not (isinstance(D, np.ndarray) and D.ndim == 2 and D.shape[0] == D.shape[1]
            and D.dtype.kind in "fiu"):
        raise ValueError("D must be a square array of real numbers (float64 or float32)")
    n = D.shape[0]
    P = np.empty(n * (n - 1) // 2)
    t = 0
    for a in range(1, n):
        P[t:t + a] = D[a, :a]
        t += a
    return P


def nj_kernel(D: np.ndarray, bionj: bool,
              sorted_rows: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Neighbor joining / BIONJ on the symmetric (n, n) array D (not written to).

    Only the entries below the diagonal are read (the caller checks that the
    matrix is symmetric with a zero diagonal, as :class:`DistanceMatrix`
    does); float32 values are joined as the float64 numbers they are, with
    float64 arithmetic throughout, so the tree is the one of the same values
    in float64.

    sorted_rows=False: every step scans the lower triangle (with a cheap
    vectorised row minimum first). sorted_rows=True: each row also keeps a
    lower bound of its distances (float32, rounded down) in increasing order,
    and a row's scan stops as soon as c d - (R_a + max R) exceeds the best Q
    so far; an entry whose bound of Q can still win has its Q computed from
    the exact distance. A pair is stored once: in the row of the larger input
    position for two leaves, else in the row of its younger member (distances
    between surviving clusters never change); entries of joined clusters are
    skipped, and dropped when half of the clusters have gone or the rows'
    arena is full. Both pick the same pair every step.

    Parameters
    ----------
    D : numpy.ndarray
        (n, n) distances, complete, float64 or float32 (any layout, read-only
        or a memory map is fine).
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
    >>> kids, lens, last3, len3 = nj_kernel(D, False, True)
    >>> kids.tolist(), lens.tolist()
    ([[0, 1], [5, 2]], [[2.0, 3.0], [3.0, 4.0]])
    >>> last3.tolist(), len3.tolist()
    ([6, 4, 3], [2.0, 1.0, 2.0])
    """
    P = packed_lower(D)
    return _nj(P, D.shape[0], bool(bionj), bool(sorted_rows))


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
