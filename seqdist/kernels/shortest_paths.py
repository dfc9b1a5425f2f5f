"""All-pairs shortest paths on dense distance matrices (the shrink closure).

:func:`apsp` runs Floyd-Warshall (Floyd 1962, "Algorithm 97: Shortest path",
CACM 5(6):345) over the finite entries: missing entries (NaN) and ``inf`` are
absent edges, and zero distances are real edges (unlike scipy's dense routine,
which reads an off-diagonal 0 as "no edge").

The kernel is a blocked (tiled) Floyd-Warshall (the blocked form of
Venkataraman, Sahni & Mukhopadhyaya 2003, "A blocked all-pairs shortest-paths
algorithm", J. Exp. Algorithmics 8) that uses symmetry:

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

Two element types:

* **float64** (any input that is not float32 is converted): the min-plus
  update reads the closed panel, so the result is the exact minimum over
  paths of the rounded path sums, but some sums are added in another order
  than the textbook loop's (by an ulp or so, depending on ``block``).
* **float32** (a float32 array, an ``np.memmap`` included): every sum is
  rounded to float32 and the update reads each pivot row as it stood when its
  own pivot started (a copy kept during the panel phase), so every entry sees
  exactly the textbook loop's candidates ``d[i, k] + d[k, j]`` in the same
  order of pivots: the result equals the plain float32 loop bit for bit, for
  any ``block`` (tested). Half the memory of float64, and the vector units
  hold twice the lanes; with ``out`` the work is done in place (a file-backed
  memmap works), so 20,000-30,000 taxa (1.6-3.6 GB) fit a 24 GB machine.

One thread by default; with ``threads`` the row blocks of each round are
shared among OpenMP threads (one barrier per round of ``b`` pivots; a barrier
per pivot is ruinous on shared cores).

The loops are compiled when the package is installed (Cython,
``_shortest_paths.pyx``, with the hot loops in C, ``src/shortest_paths.h``,
built for AVX2 and for the baseline and chosen at load time, one source for
both element types). The min-plus update takes four rows at a time, so each
value of the panel is loaded once for four rows; where the CPU has AVX-512
(checked at run time) a block of 8 rows by 2 vectors of columns stays in
registers over the pivots of a round instead, about 2.8x faster, and the
columns go in tiles so that the panel stays in the core's cache at large n
(in float64 at n = 6,000 it halved the time per n^3). For every
entry the candidate sums are formed and compared in the same order of pivots,
so the result does not depend on the vector width, the form of the update,
the tiling or the number of threads (bitwise; tested).
"""

from __future__ import annotations

import numpy as np

from seqdist.kernels._shortest_paths import fw_blocked, max_threads

_BLOCK = 64
_TILE = 512
#: entries per chunk of rows in the preparation (a few MB: no whole-matrix temporary)
_CHUNK = 1 << 20


def _source(values) -> tuple[np.ndarray, type]:
    """``values`` as an array (no copy for an ndarray) and the element type of the work."""
    a = np.asarray(values)
    if a.ndim != 2 or a.shape[0] != a.shape[1]:
        raise ValueError(f"apsp needs a square matrix, got shape {a.shape}")
    return a, (np.float32 if a.dtype == np.float32 else np.float64)


def _prepare_into(a: np.ndarray, d: np.ndarray) -> None:
    """Copy ``a`` into ``d`` (unless they are the same memory), NaN -> inf, zero diagonal.

    In chunks of rows, so the only temporaries are a chunk's NaN mask and, for a
    memory-mapped ``d``, the pages of the chunk being written.
    """
    n = d.shape[0]
    same = a.__array_interface__["data"][0] == d.__array_interface__["data"][0] and a.strides == d.strides
    rows = max(1, _CHUNK // max(n, 1))
    for i0 in range(0, n, rows):
        i1 = min(n, i0 + rows)
        blk = d[i0:i1]
        if not same:
            np.copyto(blk, a[i0:i1], casting="unsafe")
        np.copyto(blk, np.inf, where=np.isnan(blk))
        idx = np.arange(i0, i1)
        blk[idx - i0, idx] = 0.0


def _target(a: np.ndarray, dtype: type, out) -> np.ndarray:
    """The array the closure is computed in: ``out`` when given (checked), else a new one."""
    n = a.shape[0]
    if out is None:
        return np.empty((n, n), dtype=dtype)
    if not isinstance(out, np.ndarray):
        raise ValueError(f"out must be a numpy array, got {type(out).__name__}")
    if out.dtype != dtype or out.shape != (n, n) or not out.flags.c_contiguous or not out.flags.writeable:
        raise ValueError(f"out must be a writeable C-contiguous ({n}, {n}) {np.dtype(dtype).name} array, "
                         f"got {out.dtype} {out.shape} (C-contiguous {out.flags.c_contiguous}, "
                         f"writeable {out.flags.writeable})")
    same = a.__array_interface__["data"][0] == out.__array_interface__["data"][0] and a.strides == out.strides
    if not same and np.may_share_memory(a, out):
        raise ValueError("out overlaps values without being values itself")
    return out


def apsp(values: np.ndarray, *, block: int = _BLOCK, tile: int = _TILE, threads: int | None = None,
         out: np.ndarray | None = None) -> np.ndarray:
    """All-pairs shortest-path distances over the finite entries.

    Parameters
    ----------
    values : ndarray, shape (n, n)
        Symmetric non-negative distances; NaN or inf entries are absent edges,
        zeros are edges of length 0. Only the upper triangle is read (the
        matrix is assumed symmetric). A float32 array (``np.memmap``
        included) is closed in float32; anything else in float64. The input
        is not modified unless it is also ``out``.
    block, tile : int
        Pivot block size, and column tile width of the update (the AVX-512
        form rounds it up to 2 vectors; its row groups share each tile of
        the panel from the core's own cache). ``tile`` never
        changes the result; in float64 ``block`` may, by an ulp or so (it sets
        the order in which path sums are formed); in float32 it does not.
    threads : int, optional
        1 (the default) runs serially; 0 uses all OpenMP threads
        (``OMP_NUM_THREADS``, else the cores) and ``k > 1`` uses ``k``,
        handing the row blocks of each round to them. On the shared 2-core
        machine here the parallel kernel gained nothing under load (other jobs
        held the cores), hence serial by default.
    out : ndarray, optional
        A writeable C-contiguous (n, n) array of the work's type (float32 for
        float32 input, else float64) that receives the result; an
        ``np.memmap`` opened ``r+`` works, and ``out=values`` closes the
        matrix in place. Then the only other memory is two or three panels
        of ``block`` x n. Without ``out`` one copy of the matrix is made.

    Returns
    -------
    ndarray
        Shortest-path distances (inf where no path exists), symmetric, with a
        zero diagonal; ``out`` itself when given.

    Examples
    --------
    >>> float(apsp(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))[0, 1])
    2.0
    >>> float(apsp(np.array([[0, np.nan, 0], [np.nan, 0, 2], [0, 2, 0.]]))[0, 1])
    2.0

    In float32, in place:

    >>> d = np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0]], dtype=np.float32)
    >>> r = apsp(d, out=d)
    >>> r is d, d.dtype.name, float(d[0, 1])
    (True, 'float32', 2.0)
    """
    a, dtype = _source(values)
    n = a.shape[0]
    if threads is None:
        threads = 1
    if threads < 0:
        raise ValueError(f"threads must be >= 0, got {threads}")
    if int(block) < 1 or int(tile) < 1:
        raise ValueError(f"block and tile must be >= 1, got {block} and {tile}")
    d = _target(a, dtype, out)
    _prepare_into(a, d)
    if n <= 1:
        return d
    if threads == 0:
        threads = max_threads()
    b = min(int(block), n)
    P = np.empty((b, n), dtype=dtype)
    PT = np.empty((n, b), dtype=dtype)
    # float32: the pivot rows as they stood at their own pivot (the textbook's candidates);
    # float64 keeps reading the closed panel, so its bits stay those it always had
    S = np.empty((b, n), dtype=dtype) if dtype == np.float32 else None
    fw_blocked(d, P, PT, int(tile), int(threads), S=S)
    return d


def apsp_reference(values: np.ndarray) -> np.ndarray:
    """Plain (unblocked, full-matrix) Floyd-Warshall in numpy, for tests of :func:`apsp`.

    Pivot ``k`` replaces every ``d[i, j]`` by ``d[i, k] + d[k, j]`` when that is
    smaller; row and column ``k`` do not change during their own pivot (zero
    diagonal), so the whole matrix is updated at once. ``fmin`` leaves an entry
    alone where the sum is undefined (``inf + -inf``), as the textbook ``<`` does.
    A float32 input is closed in float32 (every sum rounded to float32), anything
    else in float64.

    Examples
    --------
    >>> apsp_reference(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]))[0].tolist()
    [0.0, 2.0, 1.0]
    >>> apsp_reference(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0]], dtype=np.float32)).dtype.name
    'float32'
    """
    a, dtype = _source(values)
    d = np.empty(a.shape, dtype=dtype)
    _prepare_into(a, d)
    for k in range(d.shape[0]):
        np.fmin(d, d[:, k, None] + d[None, k, :], out=d)
    return d


__all__ = ["apsp", "apsp_reference"]
