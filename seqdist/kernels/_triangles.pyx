# cython: language_level=3, boundscheck=False, wraparound=False, cdivision=True, initializedcheck=False
"""Compiled part of :mod:`seqdist.kernels.triangles` (see its docstring for the method).

The loops over one tile are C (``src/triangles.h``, built for AVX2 and for the
baseline, chosen at load time); this module hands the tiles to threads.

Each tile of rows is one unit of work; tiles go to OpenMP threads one at a time
(dynamic schedule, chunk 1), which keeps both cores busy when tiles differ in
weight. Per-tile results are written to their own slots, so the answer does not
depend on the number of threads or the order they finish in.
"""

from cython.parallel cimport prange
from libc.stdint cimport int64_t
from openmp cimport omp_get_max_threads, omp_get_thread_num

import numpy as np


cdef extern from "src/triangles.h" nogil:
    void sd_tri_count_tile(const double* d, int64_t n, double tol, int64_t a0, int64_t a1, int64_t cw,
                           int64_t* count_out, double* worst_out)
    void sd_tri_count_tile_f32(const float* d, int64_t n, double tol, int64_t a0, int64_t a1, int64_t cw,
                               double* X, int64_t* count_out, double* worst_out)


def count_tiles(const double[:, ::1] d, double tol, const int64_t[::1] starts, Py_ssize_t rows,
                int64_t[::1] counts, double[::1] worst, Py_ssize_t chunk=0):
    """Fill ``counts[t]`` / ``worst[t]`` with tile ``t``'s violated triangles and largest excess.

    ``d`` is C-contiguous float64 (n, n); tile ``t`` holds rows ``starts[t]``
    to ``starts[t] + rows - 1``; the columns go in chunks of ``chunk`` (0: one
    chunk). Runs without the GIL on OpenMP threads.
    """
    cdef Py_ssize_t n = d.shape[0], nt = starts.shape[0], t, a0, a1
    cdef const double* p
    if n == 0 or nt == 0:
        return
    _check(n, d.shape[1], starts, counts, worst)
    p = &d[0, 0]
    for t in prange(nt, nogil=True, schedule="dynamic", chunksize=1):
        a0 = starts[t]
        a1 = a0 + rows
        if a1 > n:
            a1 = n
        sd_tri_count_tile(p, n, tol, a0, a1, chunk, &counts[t], &worst[t])


def count_tiles_f32(const float[:, ::1] d, double tol, const int64_t[::1] starts, Py_ssize_t rows,
                    int64_t[::1] counts, double[::1] worst, Py_ssize_t chunk=0):
    """:func:`count_tiles` for a float32 matrix (excesses in float64: exact for the stored values)."""
    cdef Py_ssize_t n = d.shape[0], nt = starts.shape[0], t, a0, a1
    cdef const float* p
    cdef int tid
    if n == 0 or nt == 0:
        return
    _check(n, d.shape[1], starts, counts, worst)
    if chunk < 1 or chunk > n:
        chunk = n
    if rows < 1:
        raise ValueError("count_tiles_f32: rows must be >= 1")
    # each thread's float64 copy of its tile's rows and of one middle row, chunk by chunk
    cdef double[:, ::1] scratch = np.empty((omp_get_max_threads(), (rows + 1) * chunk))
    p = &d[0, 0]
    for t in prange(nt, nogil=True, schedule="dynamic", chunksize=1):
        tid = omp_get_thread_num()
        a0 = starts[t]
        a1 = a0 + rows
        if a1 > n:
            a1 = n
        sd_tri_count_tile_f32(p, n, tol, a0, a1, chunk, &scratch[tid, 0], &counts[t], &worst[t])


cdef _check(Py_ssize_t n, Py_ssize_t n2, const int64_t[::1] starts, int64_t[::1] counts, double[::1] worst):
    # the kernel trusts these (no bounds checks)
    cdef Py_ssize_t t
    if n2 != n or counts.shape[0] < starts.shape[0] or worst.shape[0] < starts.shape[0]:
        raise ValueError("count_tiles: the matrix is not square or an output is too short")
    for t in range(starts.shape[0]):
        if not 0 <= starts[t] < n:
            raise ValueError("count_tiles: a tile starts outside the matrix")
