"""Pair counts for alignment distances: feature matrix products and a byte-compare kernel.

Every count a distance model needs is a sum over columns of a product of
per-residue features, ``C[i, j] = sum_k f(x_ik) g(x_jk)``, so a whole block
of pairs is one matrix product of feature matrices (the BLAS supplies the
threads). Features are looked up from small tables indexed by the residue
code. Products of a feature matrix with itself (``F @ F.T``) let numpy use
the symmetric rank-k update, which does half the work.

Counts are exact: feature values are small integers, so every partial sum
is an integer, which float32 holds exactly below 2**24; callers pass
``dtype=np.float64`` (exact below 2**53) when a count could be larger.

For very many pairs the work is cut into *tiles*: rows ``[i0, i1)`` against
columns ``[i0, n)`` (the upper block triangle), and columns of the alignment
into chunks, so memory is the output plus one bounded tile.

The byte-compare kernel (compiled, :mod:`seqdist.kernels.pair_bytes`) counts equal bytes between two re-coded
copies of the alignment, ``sum_k [a_ik == b_jk]``; with missing residues
re-coded to different values on the two sides they never match. It beats
a one-hot product when the alphabet is large (protein: 20 features per
column against one byte compare).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Callable, Sequence

import numpy as np

if TYPE_CHECKING:  # only for the annotations
    from numpy.typing import DTypeLike

__all__ = ["tile_plan", "column_chunks", "feature_products", "onehot_cross", "equal_counts", "recode"]

EXACT_FLOAT32 = 2 ** 24


def tile_plan(n: int, bytes_per_pair: int, budget: int) -> list[tuple[int, int]]:
    """Row ranges ``[(i0, i1), ...]`` whose tiles ``(i1-i0) x (n-i0)`` fit ``budget`` bytes.

    One tile ``(0, n)`` when the whole matrix fits.

    Examples
    --------
    >>> tile_plan(10, 8, 10_000)
    [(0, 10)]
    >>> tile_plan(10, 8, 400)
    [(0, 5), (5, 10)]
    """
    if n * n * bytes_per_pair <= budget:
        return [(0, n)]
    plan = []
    i0 = 0
    while i0 < n:
        m = max(1, budget // ((n - i0) * bytes_per_pair))
        i1 = min(n, i0 + m)
        plan.append((i0, i1))
        i0 = i1
    return plan


def column_chunks(length: int, rows: int, features: int, itemsize: int,
                  budget: int = 64 << 20) -> list[tuple[int, int]]:
    """Column ranges so that ``rows x chunk x features`` feature values fit ``budget`` bytes."""
    step = max(64, budget // max(1, rows * features * itemsize))
    return [(c0, min(length, c0 + step)) for c0 in range(0, length, step)]


def feature_products(codes: np.ndarray, i0: int, i1: int, tables: np.ndarray,
                     specs: Sequence[Sequence[int]], dtype: DTypeLike = np.float32, chunk_budget: int = 64 << 20,
                     on_chunk: Callable[[], object] | None = None) -> list[np.ndarray]:
    """Symmetric feature products for the tile rows ``[i0, i1)`` x columns ``[i0, n)``.

    Parameters
    ----------
    codes : (n, L) uint8
        Residue codes.
    tables : (F, 256) array
        ``tables[f, c]`` is feature ``f`` of code ``c``.
    specs : list of lists of feature indices
        Count ``s`` is ``sum_{f in specs[s]} F_f[I] @ F_f[J].T``.
    dtype : numpy dtype
        float32 (exact while every count stays below 2**24) or float64.
    on_chunk : callable, optional
        Called after each column chunk (progress).

    Returns
    -------
    list of (i1-i0, n-i0) arrays, one per spec.

    Examples
    --------
    >>> codes = np.array([[0, 1], [0, 0]], dtype=np.uint8)
    >>> tab = np.zeros((1, 256)); tab[0, 0] = 1          # feature: "is code 0"
    >>> feature_products(codes, 0, 2, tab, [[0]])[0].tolist()
    [[1.0, 1.0], [1.0, 2.0]]
    """
    n, L = codes.shape
    mI, rows = i1 - i0, n - i0
    used = sorted({f for spec in specs for f in spec})
    tabs = {f: np.ascontiguousarray(tables[f], dtype=dtype) for f in used}
    whole = i0 == 0 and i1 == n
    acc: list[np.ndarray | None] = [None] * len(specs)
    for c0, c1 in column_chunks(L, rows, len(used), np.dtype(dtype).itemsize, chunk_budget):
        sub = codes[i0:, c0:c1]
        feats = {f: tabs[f][sub] for f in used}
        for s, spec in enumerate(specs):
            G = feats[spec[0]] if len(spec) == 1 else np.concatenate([feats[f] for f in spec], axis=1)
            # G @ G.T on the very same array lets numpy call the symmetric rank-k BLAS routine.
            prod = G @ G.T if whole else G[:mI] @ G.T
            if acc[s] is None:
                acc[s] = prod
            else:
                acc[s] += prod
            del prod, G
        del feats
        if on_chunk is not None:
            on_chunk()
    return acc  # type: ignore[return-value]


def onehot_cross(codes: np.ndarray, i0: int, i1: int, table: np.ndarray, dtype: DTypeLike = np.float32,
                 chunk_budget: int = 64 << 20, on_chunk: Callable[[], object] | None = None) -> np.ndarray:
    """Per-pair K x K count matrices for the tile rows ``[i0, i1)`` x columns ``[i0, n)``.

    ``table`` is (K, 256): the weight of each code on each of K residues
    (one-hot, or spread for ambiguity codes). Returns an array ``N`` of
    shape (K, i1-i0, K, n-i0) with ``N[a, i, b, j] = sum_k w_a(x_ik) w_b(x_jk)``;
    one matrix product of the residue-stacked one-hot matrix with itself.

    Examples
    --------
    >>> codes = np.array([[0, 1], [0, 0]], dtype=np.uint8)
    >>> tab = np.zeros((2, 256)); tab[0, 0] = tab[1, 1] = 1
    >>> N = onehot_cross(codes, 0, 2, tab)
    >>> N[:, 0, :, 1].tolist()   # row 0 = "01" against row 1 = "00"
    [[1.0, 0.0], [1.0, 0.0]]
    """
    n, L = codes.shape
    K = table.shape[0]
    mI, rows = i1 - i0, n - i0
    tab = np.ascontiguousarray(table, dtype=dtype)
    whole = i0 == 0 and i1 == n
    acc = None
    for c0, c1 in column_chunks(L, rows, K, np.dtype(dtype).itemsize, chunk_budget):
        sub = codes[i0:, c0:c1]
        X = tab[:, sub].reshape(K * rows, c1 - c0)  # (K*rows, C): residue-major stacking
        if whole:
            prod = X @ X.T
        else:
            XI = tab[:, sub[:mI]].reshape(K * mI, c1 - c0)
            prod = XI @ X.T
        if acc is None:
            acc = prod
        else:
            acc += prod
        del prod, X
        if on_chunk is not None:
            on_chunk()
    return acc.reshape(K, mI, K, rows)


# ----------------------------------------------------------------- byte compare
def equal_counts(a: np.ndarray, b: np.ndarray, i0: int, i1: int) -> np.ndarray:
    """``out[ii, jj] = sum_k [a[i0+ii, k] == b[i0+jj, k]]`` for the tile ``[i0, i1) x [i0, n)``.

    A compiled byte-compare kernel (Cython and C, parallel over rows). Only pairs
    ``j >= i`` are compared; the lower part of the diagonal block is copied
    from its mirror, so ``a`` and ``b`` must be re-codings of one alignment
    for which the count is symmetric.

    Examples
    --------
    >>> a = np.array([[1, 2, 3], [1, 0, 3]], dtype=np.uint8)
    >>> equal_counts(a, a, 0, 2).tolist()
    [[3, 2], [2, 3]]
    """
    a = np.ascontiguousarray(a, dtype=np.uint8)
    b = np.ascontiguousarray(b, dtype=np.uint8)
    from seqdist.kernels.pair_bytes import eq_tile

    out = eq_tile(a, b, i0, i1)
    m = i1 - i0
    if m > 1:
        blk = out[:, :m]
        il = np.tril_indices(m, -1)
        blk[il] = blk.T[il]
    return out


def recode(codes: np.ndarray, mapping: np.ndarray) -> np.ndarray:
    """Apply a 256-entry uint8 lookup table to every code."""
    return np.asarray(mapping, dtype=np.uint8)[codes]
