"""Compiled byte-compare kernel for alignment distances (numba; imported only when used).

Kept apart from :mod:`seqdist.kernels.pair_counts` so that the matrix-product
route never pays numba's import (about a second and 0.1 GB here).
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

__all__ = ["eq_tile"]


@njit(cache=True)
def _row(a, b, i0, ii, out):
    n, L = a.shape
    i = i0 + ii
    x = a[i]
    for j in range(i, n):
        y = b[j]
        m = 0
        # One byte compare per column; LLVM vectorises this reduction.
        for k in range(L):
            m += x[k] == y[k]
        out[ii, j - i0] = m


@njit(cache=True, parallel=True)
def eq_tile(a, b, i0, i1):
    """Counts ``sum_k [a[i, k] == b[j, k]]`` for rows i in [i0, i1), columns j >= i."""
    n, L = a.shape
    mI = i1 - i0
    out = np.zeros((mI, n - i0), np.int32)
    half = (mI + 1) // 2
    # Rows are paired first-with-last so both threads get equal work (row i does n - i pairs).
    for t in prange(half):
        _row(a, b, i0, t, out)
        u = mI - 1 - t
        if u != t:
            _row(a, b, i0, u, out)
    return out
