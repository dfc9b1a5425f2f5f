# cython: language_level=3, boundscheck=False, wraparound=False, cdivision=True, initializedcheck=False
"""Compiled part of :mod:`seqdist.kernels.pair_bytes` (see its docstring).

The byte compare is C (``src/pair_bytes.h``, built for AVX2 and for the baseline,
chosen at load time). Groups of four rows are the units of work, handed to
OpenMP threads one at a time (dynamic schedule, chunk 1) with heavy and light
groups interleaved: row ``i`` is compared with the ``n - i`` rows from ``i`` on.
Each group writes only its own rows of the output, and the counts are exact
integers, so the answer does not depend on the number of threads.
"""

from cython.parallel cimport prange
from libc.stdint cimport int32_t, int64_t, uint8_t


cdef extern from "src/pair_bytes.h" nogil:
    void sd_pb_rows(const uint8_t* a, const uint8_t* b, int64_t n, int64_t L, int64_t i0, int64_t g0, int64_t g1,
                    int32_t* out, int64_t ldo)


def eq_rows(const uint8_t[:, ::1] a, const uint8_t[:, ::1] b, Py_ssize_t i0, Py_ssize_t i1, int32_t[:, ::1] out):
    """``out[i - i0, j - i0] = sum_k [a[i, k] == b[j, k]]`` for ``i0 <= i < i1``, ``i <= j < n``.

    ``a`` and ``b`` are C-contiguous uint8 (n, L); ``out`` is int32
    (i1 - i0, n - i0); entries with ``j < i`` are not written. Runs without
    the GIL on OpenMP threads.
    """
    cdef Py_ssize_t n = a.shape[0], L = a.shape[1], ng, q, g, g0, g1
    if b.shape[0] != n or b.shape[1] != L:
        raise ValueError(f"eq_rows: a is ({n}, {L}) but b is ({b.shape[0]}, {b.shape[1]})")
    if not (0 <= i0 <= i1 <= n) or out.shape[0] != i1 - i0 or out.shape[1] != n - i0:
        raise ValueError("eq_rows: rows or output shape out of range")
    if i1 == i0 or L == 0:
        return
    cdef const uint8_t* pa = &a[0, 0]
    cdef const uint8_t* pb = &b[0, 0]
    cdef int32_t* po = &out[0, 0]
    ng = (i1 - i0 + 3) // 4
    for q in prange(ng, nogil=True, schedule="dynamic", chunksize=1):
        # first, last, second, second to last, ...: the first rows have the most pairs
        g = q // 2 if q % 2 == 0 else ng - 1 - q // 2
        g0 = i0 + 4 * g
        g1 = g0 + 4
        if g1 > i1:
            g1 = i1
        sd_pb_rows(pa, pb, n, L, i0, g0, g1, po, n - i0)
