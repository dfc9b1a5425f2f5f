"""All-pairs shortest paths on dense distance matrices (the shrink closure).

:func:`apsp` runs Floyd-Warshall over the finite entries: missing entries
(NaN) are absent edges and zero distances are real edges (unlike scipy's
dense routine, which reads an off-diagonal 0 as "no edge").
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True)
def _fw_inplace(d):  # pragma: no cover - compiled
    # Floyd-Warshall on a symmetric matrix: only i < j updated, then mirrored
    # per pivot row; one thread (a barrier per pivot loses on 2 shared cores).
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


def apsp(values: np.ndarray) -> np.ndarray:
    """All-pairs shortest-path distances over the finite entries.

    Parameters
    ----------
    values : ndarray, shape (n, n)
        Symmetric non-negative distances; NaN or inf entries are absent edges.

    Returns
    -------
    ndarray
        Shortest-path distances (inf where no path exists).

    Examples
    --------
    >>> apsp(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))[0, 1]
    2.0
    """
    d = np.array(values, dtype=np.float64, order="C", copy=True)
    d[np.isnan(d)] = np.inf
    np.fill_diagonal(d, 0.0)
    return _fw_inplace(d)
