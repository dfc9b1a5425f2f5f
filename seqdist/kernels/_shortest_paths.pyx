# cython: language_level=3, boundscheck=False, wraparound=False, cdivision=True, initializedcheck=False
"""Compiled part of :mod:`seqdist.kernels.shortest_paths` (see its docstring for the method).

The loops are C (``src/shortest_paths.h``: the panel and the portable min-plus
update built for AVX2 and for the baseline, chosen at load time; an AVX-512 form of
the update, chosen at run time where the CPU has it; each in float64 and float32 from
one source). This module runs the rounds and, with more than one thread, hands the row
blocks of a round to OpenMP threads (dynamic schedule, chunk 1, heavy and light blocks
interleaved). Each row block writes only its own rows and reads only the round's panel,
so the answer does not depend on the number of threads or the order they finish in.
"""

from cython.parallel cimport prange
from libc.stdint cimport int64_t
from openmp cimport omp_get_max_threads


cdef extern from "src/shortest_paths.h" nogil:
    void sd_sp_gather(double* d, double* P, double* S, double* PT, int64_t n, int64_t b, int64_t k0, int64_t kb)
    void sd_sp_update_rows(double* d, const double* P, const double* PT, int64_t n, int64_t b, int64_t i0,
                           int64_t i1, int64_t kb, int64_t tile, int wide)
    void sd_sp_mirror(double* d, int64_t n)
    void sd_sp_gather_f32(float* d, float* P, float* S, float* PT, int64_t n, int64_t b, int64_t k0, int64_t kb)
    void sd_sp_update_rows_f32(float* d, const float* P, const float* PT, int64_t n, int64_t b, int64_t i0,
                               int64_t i1, int64_t kb, int64_t tile, int wide)
    void sd_sp_mirror_f32(float* d, int64_t n)
    int sd_sp_has_avx512()


ctypedef fused real:
    float
    double


def max_threads():
    """The number of threads OpenMP would use (``OMP_NUM_THREADS``, else the cores)."""
    return omp_get_max_threads()


def has_avx512():
    """True when the min-plus update runs in its AVX-512 form on this CPU."""
    return sd_sp_has_avx512() == 1


cdef inline void _update(real* pd, real* pU, real* pT, Py_ssize_t n, Py_ssize_t b, Py_ssize_t nb, Py_ssize_t I,
                         Py_ssize_t kb, Py_ssize_t tile, int wide) noexcept nogil:
    cdef Py_ssize_t i1 = I * b + b
    if i1 > n:
        i1 = n
    if real is double:
        sd_sp_update_rows(pd, pU, pT, n, b, I * b, i1, kb, tile, wide)
    else:
        sd_sp_update_rows_f32(pd, pU, pT, n, b, I * b, i1, kb, tile, wide)


def fw_blocked(real[:, ::1] d, real[:, ::1] P, real[:, ::1] PT, Py_ssize_t tile, int threads, bint wide=True,
               S=None):
    """Blocked Floyd-Warshall in place on the C-contiguous float64 or float32 (n, n) ``d``.

    ``P`` (b, n) and ``PT`` (n, b) are work buffers of ``d``'s type; ``b`` is the
    pivot block size. Only the upper triangle of ``d`` is read; the result is
    mirrored. ``threads`` 1 runs serially; more share each round's row blocks.
    ``wide=False`` keeps to the portable form of the update (for tests: every
    form gives the same bits). With ``S`` (a third (b, n) buffer) the update
    reads each pivot row as it stood at its own pivot, so the result is the
    textbook loop's bit for bit for any ``b``; without it the update reads the
    closed panel (the float64 kernel's bits since it was written).
    """
    cdef Py_ssize_t n = d.shape[0], b = P.shape[0], nb, K, I, q, k0, kb
    cdef int wide_c = 1 if wide else 0
    cdef real[:, ::1] Sv
    cdef real* pS = NULL
    if n <= 1:
        return
    if b < 1 or P.shape[1] != n or PT.shape[0] != n or PT.shape[1] != b or tile < 1 or d.shape[1] != n:
        raise ValueError("fw_blocked: work buffers do not match the matrix")
    if S is not None:
        Sv = S
        if Sv.shape[0] != b or Sv.shape[1] != n:
            raise ValueError("fw_blocked: work buffers do not match the matrix")
        pS = &Sv[0, 0]
    nb = (n + b - 1) // b
    cdef real* pd = &d[0, 0]
    cdef real* pP = &P[0, 0]
    cdef real* pT = &PT[0, 0]
    cdef real* pU = pS if pS != NULL else pP
    with nogil:
        for K in range(nb):
            k0 = K * b
            kb = (n if k0 + b > n else k0 + b) - k0
            if real is double:
                sd_sp_gather(pd, pP, pS, pT, n, b, k0, kb)
            else:
                sd_sp_gather_f32(pd, pP, pS, pT, n, b, k0, kb)
            if threads <= 1:
                for I in range(nb):
                    if I != K:
                        _update(pd, pU, pT, n, b, nb, I, kb, tile, wide_c)
            else:
                for q in prange(nb, num_threads=threads, schedule="dynamic", chunksize=1):
                    # first, last, second, second to last, ...: the top blocks hold more columns
                    I = q // 2 if q % 2 == 0 else nb - 1 - q // 2
                    if I != K:
                        _update(pd, pU, pT, n, b, nb, I, kb, tile, wide_c)
        if real is double:
            sd_sp_mirror(pd, n)
        else:
            sd_sp_mirror_f32(pd, n)
