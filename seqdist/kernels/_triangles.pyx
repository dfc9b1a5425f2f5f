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


cdef extern from "src/triangles.h" nogil:
    void sd_tri_count_tile(const double* d, int64_t n, double tol, int64_t a0, int64_t a1, int64_t* count_out,
                           double* worst_out)


def count_tiles(const double[:, ::1] d, double tol, const int64_t[::1] starts, Py_ssize_t rows,
                int64_t[::1] counts, double[::1] worst):
    """Fill ``counts[t]`` / ``worst[t]`` with tile ``t``'s violated triangles and largest excess.

    ``d`` is C-contiguous float64 (n, n); tile ``t`` holds rows ``starts[t]``
    to ``starts[t] + rows - 1``. Runs without the GIL on OpenMP threads.
    """
    cdef Py_ssize_t n = d.shape[0], nt = starts.shape[0], t, a0, a1
    cdef const double* p
    if n == 0 or nt == 0:
        return
    p = &d[0, 0]
    for t in prange(nt, nogil=True, schedule="dynamic", chunksize=1):
        a0 = starts[t]
        a1 = a0 + rows
        if a1 > n:
            a1 = n
        sd_tri_count_tile(p, n, tol, a0, a1, &counts[t], &worst[t])
