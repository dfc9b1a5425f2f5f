# cython: language_level=3, boundscheck=False, wraparound=False, cdivision=True, initializedcheck=False
"""Compiled part of :mod:`seqdist.repair.taxa` (see its docstring for the method).

Every triangle test is the audit's, ``2 * longest - (x + y + z) > tol`` with the
sides read at sorted indices and added in the audit's order, so a triangle is
violated here exactly when the audit says so. The two full scans (counts per
taxon, and the listing) have their branch-free inner loops in C
(``seqdist/kernels/src/taxa.h``, built for AVX-512, AVX2 and the baseline,
chosen at load time) and run on OpenMP threads from ``PARALLEL_MIN_N`` taxa on
(see taxa.py): the counts in tiles of rows, each thread adding into its own
integer buffer; the listing row by row, each row writing to its own slots.
Neither result depends on the number of threads. The other kernels are
sequential and stop early; each returns the number of triples it examined (the
work budget's unit).
"""

import numpy as np

from cython.parallel cimport prange
from libc.stdint cimport int64_t, uint8_t
from libc.stdlib cimport free, malloc
from openmp cimport omp_get_max_threads, omp_get_thread_num


cdef extern from "../kernels/src/taxa.h" nogil:
    void sd_taxa_count_tile(const double* d, const uint8_t* alive, int64_t n, double tol, int64_t a0, int64_t a1,
                            int64_t* cnt)
    int64_t sd_taxa_row_count(const double* xs, const double* ys, const uint8_t* al, int64_t m, double z, double tol)
    int64_t sd_taxa_list_row(const double* d, const uint8_t* alive, int64_t n, int64_t i, double tol, int64_t* out,
                             int64_t t)
    int64_t sd_taxa_scan_dec(const double* d, const double* colv, const uint8_t* alive, int64_t n, int64_t v,
                             int64_t j, double tol, int64_t* cnt)
    int64_t sd_taxa_scan(const double* d, const double* colv, const uint8_t* alive, int64_t n, int64_t v, int64_t j,
                         double tol)


cdef inline bint _viol(const double* d, int64_t n, int64_t a, int64_t b, int64_t c, double tol) noexcept nogil:
    # The audit's test, with the sides read at sorted indices.
    cdef int64_t t
    cdef double x, y, z, m
    if a > b:
        t = a
        a = b
        b = t
    if b > c:
        t = b
        b = c
        c = t
    if a > b:
        t = a
        a = b
        b = t
    x = d[a * n + c]
    y = d[b * n + c]
    z = d[a * n + b]
    m = x if x > y else y
    m = m if m > z else z
    return 2.0 * m - (x + y + z) > tol


def threads():
    """The most OpenMP threads a parallel loop here may use (rows of the per-thread buffers)."""
    return omp_get_max_threads()


def counts(const double[:, ::1] D, double tol, const uint8_t[::1] alive, const int64_t[::1] starts, int64_t rows,
           int64_t[:, ::1] buf):
    """Add the violated triangles through each taxon into ``buf[thread]`` (sum the rows for the counts).

    Runs on at most ``buf.shape[0]`` threads.
    """
    cdef int64_t n = D.shape[0], nt = starts.shape[0], t, a0, a1
    cdef int nthreads = buf.shape[0]
    cdef const double* d
    if n < 3 or nt == 0:
        return
    d = &D[0, 0]
    for t in prange(nt, nogil=True, schedule="dynamic", chunksize=1, num_threads=nthreads):
        a0 = starts[t]
        a1 = a0 + rows
        if a1 > n:
            a1 = n
        sd_taxa_count_tile(d, &alive[0], n, tol, a0, a1, &buf[omp_get_thread_num(), 0])


def list_counts(const double[:, ::1] D, double tol, const uint8_t[::1] alive, int64_t[::1] per_row, int nthreads):
    """``per_row[i]``: violated triangles (i, j, k), i < j < k, among alive taxa."""
    cdef int64_t n = D.shape[0], i
    if n < 3:
        return
    for i in prange(n, nogil=True, schedule="dynamic", chunksize=1, num_threads=nthreads):
        if alive[i] != 0:
            per_row[i] = sd_taxa_list_row(&D[0, 0], &alive[0], n, i, tol, NULL, 0)


def list_fill(const double[:, ::1] D, double tol, const uint8_t[::1] alive, const int64_t[::1] offsets,
              int64_t[:, ::1] out, int nthreads):
    """Write row i's violated triangles ``(i, j, k)`` to ``out[offsets[i]:]``."""
    cdef int64_t n = D.shape[0], i
    if n < 3 or out.shape[0] == 0:
        return
    for i in prange(n, nogil=True, schedule="dynamic", chunksize=1, num_threads=nthreads):
        if offsets[i + 1] > offsets[i]:
            sd_taxa_list_row(&D[0, 0], &alive[0], n, i, tol, &out[0, 0], offsets[i])


def greedy(const double[:, ::1] D, double tol, uint8_t[::1] alive, int64_t[::1] cnt, const int64_t[::1] pos,
           int64_t[::1] picked):
    """Take the alive taxon in most violated triangles (ties: smaller ``pos``) until none is in any.

    ``alive`` and ``cnt`` are updated in place; the picks go to ``picked``.
    Returns the number of picks and the triples examined.
    """
    cdef int64_t n = D.shape[0], npick = 0, work = 0, best, v, j, k, s
    cdef const double* d
    cdef double* colv
    if n == 0:
        return 0, 0
    d = &D[0, 0]
    colv = <double*>malloc(<size_t>n * sizeof(double))
    if colv == NULL:
        raise MemoryError()
    with nogil:
        while True:
            best = -1
            for v in range(n):
                if alive[v] != 0 and cnt[v] > 0:
                    if best < 0 or cnt[v] > cnt[best] or (cnt[v] == cnt[best] and pos[v] < pos[best]):
                        best = v
            if best < 0:
                break
            picked[npick] = best
            npick += 1
            alive[best] = 0
            v = best
            for k in range(n):
                colv[k] = d[k * n + v]
            for j in range(n):
                if alive[j] == 0 or d[v * n + j] != d[v * n + j]:
                    continue
                work += n - j - 1
                # the violated (v, j, k), k > j alive: -1 on cnt[k] each, and on cnt[j] for all
                s = sd_taxa_scan_dec(d, colv, &alive[0], n, v, j, tol, &cnt[0])
                cnt[j] -= s
    free(colv)
    return npick, work


cdef bint _fits(const double* d, double* colv, int64_t n, double tol, const uint8_t* kept, int64_t v,
                int64_t* work) noexcept nogil:
    # True when v forms no violated triangle with two kept taxa; adds the triples examined to work
    # (every k of a j is examined, up to the first j that has a violated triangle, as a scan that
    # stops at it counts them).
    cdef int64_t j, k
    for k in range(n):
        colv[k] = d[k * n + v]
    for j in range(n):
        if kept[j] == 0 or j == v or d[v * n + j] != d[v * n + j]:
            continue
        work[0] += n - j - 1
        if sd_taxa_scan(d, colv, kept, n, v, j, tol) > 0:
            return False
    return True


def prune(const double[:, ::1] D, double tol, uint8_t[::1] kept, const int64_t[::1] order):
    """Return the taxa of ``order`` to ``kept`` (in place), in that order, while they fit; the triples examined."""
    cdef int64_t n = D.shape[0], q, v, work = 0
    cdef double* colv
    if n == 0:
        return 0
    colv = <double*>malloc(<size_t>n * sizeof(double))
    if colv == NULL:
        raise MemoryError()
    with nogil:
        for q in range(order.shape[0]):
            v = order[q]
            if _fits(&D[0, 0], colv, n, tol, &kept[0], v, &work):
                kept[v] = 1
    free(colv)
    return work


def link_matching(const double[:, ::1] D, double tol, const uint8_t[::1] alive, const int64_t[::1] cand,
                  int64_t cap, int64_t[::1] out):
    """For each taxon v of ``cand``: greedy disjoint pairs {j, k} of alive taxa with (v, j, k) violated,
    stopping once there are more than ``cap``; their number goes to ``out``. Returns the triples examined.
    """
    cdef int64_t n = D.shape[0], q, v, j, k, mu, work = 0
    cdef uint8_t[::1] used = np.zeros(max(n, 1), dtype=np.uint8)
    cdef const double* d
    if n == 0:
        return 0
    d = &D[0, 0]
    with nogil:
        for q in range(cand.shape[0]):
            v = cand[q]
            used[:] = 0
            mu = 0
            for j in range(n):
                if alive[j] == 0 or j == v or used[j] != 0 or d[v * n + j] != d[v * n + j]:
                    continue
                for k in range(j + 1, n):
                    work += 1
                    if alive[k] != 0 and k != v and used[k] == 0 and _viol(d, n, v, j, k, tol):
                        used[j] = 1
                        used[k] = 1
                        mu += 1
                        break
                if mu > cap:
                    break
            out[q] = mu
    return work


def pack(const double[:, ::1] D, double tol, const int64_t[::1] order, int64_t[:, ::1] out):
    """Greedy taxon-disjoint violated triangles, scanning triples in ``order``, into ``out``.

    Returns their number and the triples examined.
    """
    cdef int64_t n = D.shape[0], L = order.shape[0], a, b, c, i, j, k, t = 0, work = 0
    cdef uint8_t[::1] used = np.zeros(max(n, 1), dtype=np.uint8)
    cdef const double* d
    if n == 0:
        return 0, 0
    d = &D[0, 0]
    with nogil:
        for a in range(L):
            i = order[a]
            if used[i] != 0:
                continue
            for b in range(a + 1, L):
                j = order[b]
                if used[j] != 0 or d[i * n + j] != d[i * n + j]:
                    continue
                for c in range(b + 1, L):
                    work += 1
                    k = order[c]
                    if used[k] == 0 and _viol(d, n, i, j, k, tol):
                        used[i] = 1
                        used[j] = 1
                        used[k] = 1
                        out[t, 0] = i
                        out[t, 1] = j
                        out[t, 2] = k
                        t += 1
                        break
                if used[i] != 0:
                    break
    return t, work
