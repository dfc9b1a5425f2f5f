# cython: language_level=3, boundscheck=False, wraparound=False, cdivision=True, initializedcheck=False
"""Compiled part of :mod:`seqdist.kernels.audit_scans` (see its docstring for the method).

The fused triangle scan of one tile is C (``src/audit_scans.h``, built for AVX2
and for the baseline, chosen at load time); this module hands the tiles to
OpenMP threads one at a time (dynamic schedule, chunk 1). Each thread has its
own scratch and its own rows of the per-pair and histogram tallies; everything
indexed by a row belongs to the one tile that holds the row. All merged tallies
are integers, so the results do not depend on the number of threads or on the
order in which tiles finish.

The collection of forcing triangles runs in parallel over pairs, each writing
its own slots; the greedy packing and the quartet statistics (C, in the same
header) are sequential (their float sums are kept in the order of the loops).
"""

from cython.parallel cimport prange
from libc.stdint cimport int32_t, int64_t, uint8_t
from libc.stdlib cimport free, malloc
from openmp cimport omp_get_max_threads, omp_get_thread_num


cdef extern from "src/audit_scans.h" nogil:
    void sd_audit_scan_tile(const double* d, int64_t n, double tol, double hard, double utol, double qscale,
                            double inv_top, const double* edges, int64_t nb, int64_t a0, int64_t a1, int64_t K,
                            int64_t* row_viol, int64_t* row_hard, double* row_max, int32_t* pair_hard,
                            double* topv, int32_t* topb, int32_t* topc, double* topmin, int64_t* hist,
                            int32_t* cnt, int64_t* qex, int32_t* lng, int64_t* row_ub, int64_t* row_uc,
                            int32_t* Ac, int64_t* Aq, int32_t* Al, int32_t* Bc, int64_t* Bq, int32_t* Bl,
                            double* ebuf, int64_t* hit, int64_t* H)
    ctypedef struct sd_quartet_acc:
        int64_t examined
        int64_t missing
        int64_t violated
        int64_t delta_n
        int64_t star
        double rel_sum
        double rel_max
        double delta_sum
    void sd_quartets(const double* d, int64_t n, const int64_t* Q, int64_t nq, double tol, sd_quartet_acc* out,
                     double* dsum, int64_t* dcnt, int64_t* dhist, int64_t nb, int64_t* qworst)


def max_threads():
    """Threads an OpenMP parallel loop of this module uses (rows of the per-thread tallies)."""
    return omp_get_max_threads()


def scan_tiles(const double[:, ::1] d, double tol, double hard, double utol, double qscale, double inv_top,
               const double[::1] edges, const int64_t[::1] starts, Py_ssize_t rows,
               int64_t[::1] row_viol, int64_t[::1] row_hard, double[::1] row_max, int32_t[::1] pair_hard,
               double[:, ::1] topv, int32_t[:, ::1] topb, int32_t[:, ::1] topc, double[::1] topmin,
               int64_t[:, ::1] hist, int32_t[:, ::1] cnt, int64_t[:, ::1] qex, int32_t[:, ::1] lng,
               int64_t[:, ::1] row_ub, int64_t[::1] row_uc,
               int32_t[:, ::1] Ac, int64_t[:, ::1] Aq, int32_t[:, ::1] Al, int32_t[:, ::1] Bc,
               int64_t[:, ::1] Bq, int32_t[:, ::1] Bl, double[:, ::1] ebuf, int64_t[:, ::1] hit,
               int64_t[:, ::1] H):
    """The fused pass over every tile; outputs as in ``audit_scans.scan_triangles``.

    ``hist``, ``cnt``, ``qex``, ``lng`` have one row per thread (``max_threads()``);
    ``Ac`` .. ``H`` are per-thread scratch (``Ac/Aq/Al`` of shape (threads, rows * n),
    ``Bc/Bq/Bl/ebuf`` (threads, n), ``hit`` (threads, n + 1), ``H`` (threads,
    bins)), all zero on entry; they are left zero. Runs without the GIL.
    """
    cdef Py_ssize_t n = d.shape[0], nt = starts.shape[0], nb = edges.shape[0] - 1, K = topv.shape[1]
    cdef Py_ssize_t t, a0, a1, P = n * (n - 1) // 2
    cdef int tid
    cdef double* ptopv = NULL
    cdef int32_t* ptopb = NULL
    cdef int32_t* ptopc = NULL
    cdef int T = omp_get_max_threads()
    if n < 3 or nt == 0:
        return
    # the kernel trusts these sizes (no bounds checks): refuse arrays that are too small
    if (min(hist.shape[0], cnt.shape[0], qex.shape[0], lng.shape[0], Ac.shape[0], Aq.shape[0], Al.shape[0],
            Bc.shape[0], Bq.shape[0], Bl.shape[0], ebuf.shape[0], hit.shape[0], H.shape[0]) < T
            or min(Ac.shape[1], Aq.shape[1], Al.shape[1]) < rows * n
            or min(Bc.shape[1], Bq.shape[1], Bl.shape[1], ebuf.shape[1], hit.shape[1] - 1) < n
            or H.shape[1] < nb or hist.shape[1] < nb or min(cnt.shape[1], qex.shape[1], lng.shape[1]) < P
            or pair_hard.shape[0] < P or min(row_viol.shape[0], row_hard.shape[0], row_max.shape[0],
                                              topmin.shape[0], row_uc.shape[0], row_ub.shape[0], topv.shape[0]) < n
            or row_ub.shape[1] < 2 or topb.shape[1] != K or topc.shape[1] != K or d.shape[1] != n or nb < 1):
        raise ValueError("scan_tiles: an output or scratch array is too small")
    for t in range(nt):
        if not 0 <= starts[t] < n:
            raise ValueError("scan_tiles: a tile starts outside the matrix")
    if K > 0:
        ptopv = &topv[0, 0]
        ptopb = &topb[0, 0]
        ptopc = &topc[0, 0]
    for t in prange(nt, nogil=True, schedule="dynamic", chunksize=1):
        tid = omp_get_thread_num()
        a0 = starts[t]
        a1 = a0 + rows
        if a1 > n:
            a1 = n
        sd_audit_scan_tile(&d[0, 0], n, tol, hard, utol, qscale, inv_top, &edges[0], nb, a0, a1, K,
                           &row_viol[0], &row_hard[0], &row_max[0], &pair_hard[0], ptopv, ptopb, ptopc,
                           &topmin[0], &hist[tid, 0], &cnt[tid, 0], &qex[tid, 0], &lng[tid, 0],
                           &row_ub[0, 0], &row_uc[0], &Ac[tid, 0], &Aq[tid, 0], &Al[tid, 0],
                           &Bc[tid, 0], &Bq[tid, 0], &Bl[tid, 0], &ebuf[tid, 0], &hit[tid, 0], &H[tid, 0])


def collect_pairs(const double[:, ::1] d, double hard, const int64_t[::1] pa, const int64_t[::1] pb,
                  const int64_t[::1] offs, const int64_t[::1] take, int32_t[:, ::1] out_abc, double[::1] out_e):
    """For each pair ``p``, the first ``take[p]`` triangles ``(pa[p], pb[p], k)``, k > pb[p],
    with excess above ``hard``, written from slot ``offs[p]`` on. Runs without the GIL."""
    cdef Py_ssize_t n = d.shape[0], npairs = pa.shape[0], p, k
    cdef int64_t pos, end, a, b
    cdef double x, y, z, m, e
    if pb.shape[0] < npairs or offs.shape[0] < npairs or take.shape[0] < npairs or d.shape[1] != n:
        raise ValueError("collect_pairs: arrays of different lengths")
    for p in range(npairs):
        if not (0 <= pa[p] < pb[p] < n and take[p] >= 0 and 0 <= offs[p] and offs[p] + take[p] <= out_e.shape[0]
                and offs[p] + take[p] <= out_abc.shape[0]):
            raise ValueError("collect_pairs: a pair or its slots out of range")
    if out_abc.shape[1] < 3:
        raise ValueError("collect_pairs: out_abc needs 3 columns")
    for p in prange(npairs, nogil=True, schedule="dynamic", chunksize=1):
        pos = offs[p]
        end = pos + take[p]
        a = pa[p]
        b = pb[p]
        z = d[a, b]
        for k in range(b + 1, n):
            if pos >= end:
                break
            x = d[a, k]
            y = d[b, k]
            m = x if x > y else y
            m = m if m > z else z
            e = 2.0 * m - (x + y + z)
            if e > hard:
                out_abc[pos, 0] = <int32_t>a
                out_abc[pos, 1] = <int32_t>b
                out_abc[pos, 2] = <int32_t>k
                out_e[pos] = e
                pos = pos + 1


def greedy(const int64_t[:, ::1] ids, const int64_t[::1] order, Py_ssize_t nent, uint8_t[::1] chosen):
    """Take the triangles in ``order`` whose three entries are all still free;
    ``chosen[t]`` becomes 1 for each one taken (``chosen`` zero on entry)."""
    cdef Py_ssize_t r, t
    cdef int64_t a, b, c
    cdef uint8_t* used
    if chosen.shape[0] < ids.shape[0] or (ids.shape[0] and ids.shape[1] < 3):
        raise ValueError("greedy: chosen shorter than ids, or ids without 3 columns")
    for r in range(order.shape[0]):
        t = order[r]
        if not 0 <= t < ids.shape[0]:
            raise ValueError("greedy: order names a triangle not in ids")
    for r in range(ids.shape[0]):
        if not (0 <= ids[r, 0] < nent and 0 <= ids[r, 1] < nent and 0 <= ids[r, 2] < nent):
            raise ValueError("greedy: an entry number outside 0 .. nent - 1")
    used = <uint8_t*>malloc(nent if nent > 0 else 1)
    if used == NULL:
        raise MemoryError()
    try:
        with nogil:
            for r in range(nent):
                used[r] = 0
            for r in range(order.shape[0]):
                t = order[r]
                a = ids[t, 0]
                b = ids[t, 1]
                c = ids[t, 2]
                if not (used[a] or used[b] or used[c]):
                    used[a] = 1
                    used[b] = 1
                    used[c] = 1
                    chosen[t] = 1
    finally:
        free(used)


# ------------------------------------------------------------- quartets
def quartets(const double[:, ::1] d, double tol, const int64_t[:, ::1] Q, double[::1] dsum, int64_t[::1] dcnt,
             int64_t[::1] dhist, int64_t[::1] qworst):
    """Four-point and delta tallies over every quartet ``i < j < k < l`` (``Q`` None)
    or over the rows of ``Q``, in that order; ``dsum``, ``dcnt``, ``dhist`` are
    added to and ``qworst`` set. Returns ``(examined, missing, violated, rel_sum,
    rel_max, delta_sum, delta_n, star)``."""
    cdef sd_quartet_acc acc
    cdef Py_ssize_t n = d.shape[0], i, r
    cdef int64_t nb = dhist.shape[0]
    cdef const int64_t* pq = NULL
    cdef int64_t nq = 0
    acc.examined = acc.missing = acc.violated = acc.delta_n = acc.star = 0
    acc.rel_sum = acc.rel_max = acc.delta_sum = 0.0
    if nb < 1 or qworst.shape[0] < 4 or dsum.shape[0] < n or dcnt.shape[0] < n or d.shape[1] != n:
        raise ValueError("quartets: output arrays too small")
    if Q is not None:
        if Q.shape[0] and Q.shape[1] != 4:
            raise ValueError("quartets: Q needs 4 columns")
        for r in range(Q.shape[0]):
            for i in range(4):
                if not 0 <= Q[r, i] < n:
                    raise ValueError("quartets: a taxon number outside 0 .. n - 1")
        nq = Q.shape[0]
        if nq == 0:
            return (0, 0, 0, 0.0, 0.0, 0.0, 0, 0)
        pq = &Q[0, 0]
    if n == 0:
        return (0, 0, 0, 0.0, 0.0, 0.0, 0, 0)
    with nogil:
        sd_quartets(&d[0, 0], n, pq, nq, tol, &acc, &dsum[0], &dcnt[0], &dhist[0], nb, &qworst[0])
    return (acc.examined, acc.missing, acc.violated, acc.rel_sum, acc.rel_max, acc.delta_sum, acc.delta_n,
            acc.star)
