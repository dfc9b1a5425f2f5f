"""Compiled byte-compare kernel for alignment distances.

Counts equal bytes between rows of two re-coded copies of an alignment,
``sum_k [a[i, k] == b[j, k]]``; with missing residues re-coded to different
values on the two sides they never match. Used by
:func:`seqdist.kernels.pair_counts.equal_counts`.

The loop is compiled when the package is installed (Cython, ``_pair_bytes.pyx``,
with the compare in C, ``src/pair_bytes.h``, built for AVX2 and for the baseline
and chosen at load time): 32 columns per vector operation, counted in byte
lanes that are summed before they can overflow, four rows of ``a`` against
each row of ``b``. Groups of rows go to OpenMP threads; the counts are exact
integers, so they do not depend on the number of threads.
"""

from __future__ import annotations

import numpy as np

from seqdist.kernels._pair_bytes import eq_rows

__all__ = ["eq_tile"]


def eq_tile(a: np.ndarray, b: np.ndarray, i0: int, i1: int) -> np.ndarray:
    """Counts ``sum_k [a[i, k] == b[j, k]]`` for rows i in [i0, i1), columns j >= i.

    Parameters
    ----------
    a, b : ndarray of uint8, shape (n, L)
        The two re-coded copies of the alignment.
    i0, i1 : int
        The rows of the tile.

    Returns
    -------
    ndarray of int32, shape (i1 - i0, n - i0)
        ``out[i - i0, j - i0]`` is the count for ``j >= i``; 0 below that.

    Examples
    --------
    >>> a = np.array([[1, 2, 3], [1, 0, 3]], dtype=np.uint8)
    >>> eq_tile(a, a, 0, 2).tolist()
    [[3, 2], [0, 3]]
    """
    a = np.ascontiguousarray(a, dtype=np.uint8)
    b = np.ascontiguousarray(b, dtype=np.uint8)
    if a.ndim != 2 or a.shape != b.shape:
        raise ValueError(f"eq_tile needs two arrays of one 2-d shape, got {a.shape} and {b.shape}")
    n, L = a.shape
    i0, i1 = int(i0), int(i1)
    if not 0 <= i0 <= i1 <= n:
        raise ValueError(f"eq_tile: rows [{i0}, {i1}) out of range for {n} rows")
    if L >= 2 ** 31:
        raise ValueError(f"eq_tile: {L} columns overflow the int32 counts")
    out = np.zeros((i1 - i0, n - i0), np.int32)
    eq_rows(a, b, i0, i1, out)
    return out
