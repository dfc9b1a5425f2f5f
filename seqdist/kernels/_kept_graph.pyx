# cython: language_level=3, boundscheck=False, wraparound=False, cdivision=True, initializedcheck=False
"""Compiled part of :mod:`seqdist.kernels.kept_graph` (see its docstring for what each computes).

The dense loops are C (``src/kept_graph.h``; the branch-free ones built for
AVX-512, AVX2 and the baseline, chosen at load time). Every float operation is
the one the plain loop does, in the same order, so results are bit for bit
those of the reference loops. From ``PARALLEL_MIN_N`` taxa on (see
kept_graph.py) the triangle listing runs rows on OpenMP threads, each row
writing to its own slots, so the output does not depend on the thread count.
"""

import numpy as np

from cython.parallel cimport prange
from openmp cimport omp_get_max_threads
from libc.stdint cimport int64_t, uint8_t
from libc.math cimport INFINITY, fabs
from libc.stdlib cimport free, malloc


cdef extern from "src/kept_graph.h" nogil:
    void sd_dijkstra(const double* W, int64_t n, int64_t s, double* dist, int64_t* pred, void* scratch)
    int sd_insert_ok(const double* A, const double* D, const uint8_t* check, int64_t n, int64_t i, int64_t j,
                     double w, double tol)
    void sd_insert_edge(double* A, const double* ci, const double* cj, int64_t n, double w)
    int64_t sd_vt_count(const double* xi, const double* yj, int64_t m, double z, double tol)
    int64_t sd_vt_fill_row(const double* d, int64_t n, int64_t i, double tol, int64_t* out, int64_t t)
    void sd_sweep_bounds(const double* ri, const double* rj, int64_t n, int64_t i, int64_t j, double* lo,
                         double* hi)


def dijkstra(const double[:, ::1] W, int64_t s, double[::1] dist, int64_t[::1] pred):
    """Fill ``dist`` / ``pred`` with the shortest distances and predecessors from ``s`` over ``W``."""
    cdef int64_t n = W.shape[0]
    cdef void* scratch
    if n == 0:
        return
    scratch = malloc(<size_t>n * 9)
    if scratch == NULL:
        raise MemoryError()
    with nogil:
        sd_dijkstra(&W[0, 0], n, s, &dist[0], &pred[0], scratch)
    free(scratch)


def insert_ok(const double[:, ::1] A, const double[:, ::1] D, const uint8_t[:, ::1] check, int64_t i, int64_t j,
              double w, double tol):
    """True when edge (i, j) of length ``w`` keeps ``D <= A' + tol`` on every entry marked in ``check``."""
    cdef int64_t n = A.shape[0]
    cdef int r
    if n == 0:
        return True
    with nogil:
        r = sd_insert_ok(&A[0, 0], &D[0, 0], &check[0, 0], n, i, j, w, tol)
    return r != 0


def insert_edge(double[:, ::1] A, int64_t i, int64_t j, double w):
    """Update the shortest paths ``A`` in place for a new edge (i, j) of length ``w``."""
    cdef int64_t n = A.shape[0], a
    cdef double* ci
    cdef double* cj
    if n == 0:
        return
    ci = <double*>malloc(<size_t>n * 16)
    if ci == NULL:
        raise MemoryError()
    cj = ci + n
    with nogil:
        for a in range(n):
            ci[a] = A[a, i]
            cj[a] = A[a, j]
        sd_insert_edge(&A[0, 0], ci, cj, n, w)
    free(ci)


def sweep(double[:, ::1] X, const int64_t[::1] ei, const int64_t[::1] ej, const double[::1] target,
          const double[::1] lower, double tol, int64_t max_sweeps):
    """Gauss-Seidel sweeps moving each entry (ei, ej) of ``X`` towards its target; returns the sweeps run."""
    cdef int64_t n = X.shape[0], m = ei.shape[0]
    cdef int64_t sweeps = 0, it, e, i, j
    cdef double moved, lo, hi, cur, v, dv
    with nogil:
        for it in range(max_sweeps):
            sweeps += 1
            moved = 0.0
            for e in range(m):
                i = ei[e]
                j = ej[e]
                lo = lower[e]
                hi = INFINITY
                sd_sweep_bounds(&X[i, 0], &X[j, 0], n, i, j, &lo, &hi)
                cur = X[i, j]
                if lo > hi:
                    continue  # only possible through rounding: keep the current value
                v = target[e]
                if v < lo:
                    v = lo
                elif v > hi:
                    v = hi
                dv = fabs(v - cur)
                if dv > moved:
                    moved = dv
                X[i, j] = v
                X[j, i] = v
            if moved <= tol:
                break
    return sweeps


def threads():
    """The most OpenMP threads a parallel loop here may use."""
    return omp_get_max_threads()


def violated_counts(const double[:, ::1] D, double tol, int64_t[::1] per_row, int nthreads):
    """``per_row[i]``: violated triangles (i, j, k), i < j < k, with every side observed (on ``nthreads``)."""
    cdef int64_t n = D.shape[0], i, j, c
    cdef const double* d
    cdef double z
    if n < 3:
        return
    d = &D[0, 0]
    for i in prange(n, nogil=True, schedule="dynamic", chunksize=1, num_threads=nthreads):
        c = 0
        for j in range(i + 1, n):
            z = d[i * n + j]
            if z == z:
                c = c + sd_vt_count(d + i * n + j + 1, d + j * n + j + 1, n - j - 1, z, tol)
        per_row[i] = c


def violated_fill(const double[:, ::1] D, double tol, const int64_t[::1] offsets, int64_t[:, ::1] out, int nthreads):
    """Write row i's violated triangles ``(i, j, k, heavy)`` to ``out[offsets[i]:]``."""
    cdef int64_t n = D.shape[0], i
    cdef const double* d
    if n < 3 or out.shape[0] == 0:
        return
    d = &D[0, 0]
    for i in prange(n, nogil=True, schedule="dynamic", chunksize=1, num_threads=nthreads):
        if offsets[i + 1] > offsets[i]:
            sd_vt_fill_row(d, n, i, tol, &out[0, 0], offsets[i])


cdef inline void _side(int64_t i, int64_t j, int64_t k, int64_t s, int64_t* a, int64_t* b) noexcept nogil:
    # sides of a triangle i < j < k: 0 = (i, j), 1 = (i, k), 2 = (j, k)
    a[0] = i if s < 2 else j
    b[0] = j if s == 0 else k


cdef void _row_best(const int64_t* cnt, const double* w, const double* bias, int64_t n, int64_t a,
                    double* best, int64_t* be) noexcept nogil:
    # The best score of row a (strictly above 0, first b among equals), as the full scan finds it.
    cdef int64_t b, c
    cdef double s, ww, bs = 0.0
    cdef int64_t bb = -1
    for b in range(a + 1, n):
        c = cnt[a * n + b]
        if c > 0:
            ww = w[a * n + b]
            if ww == 0:
                s = INFINITY
            else:
                s = (<double>c + bias[a * n + b]) / ww
            if s > bs:
                bs = s
                bb = b
    best[a] = bs
    be[a] = bb


def greedy_hit(int64_t n, const int64_t[:, ::1] tri, const uint8_t[:, ::1] cand, const double[:, ::1] w,
               const uint8_t[::1] alive, const double[:, ::1] bias):
    """Greedy weighted hitting set of the triangles' candidate sides; returns (edge ids, counts at pick time).

    Each step picks the side of largest ``(unhit triangles + bias) / weight``
    (``inf`` for weight 0), the first in row-major order among equals, until
    no side is in an unhit triangle. The best of each row is kept and only the
    rows whose best side lost a triangle are scanned again (a score only falls
    with its count when the weight is >= 0; a row with a side of another
    weight is scanned again whenever a count in it changes), which picks
    exactly what a full scan per step picks.
    """
    cdef int64_t m = tri.shape[0], nn = n * n
    cdef int64_t t, s, i, j, k, a, b, e, q, x, y, r, ra, npick = 0, limit
    cdef double top
    cdef int64_t[::1] cnt = np.zeros(max(nn, 1), dtype=np.int64)
    cdef int64_t[::1] ptr = np.zeros(nn + 1, dtype=np.int64)
    cdef int64_t[::1] fill
    cdef int64_t[::1] inc
    cdef uint8_t[::1] hit = np.zeros(max(m, 1), dtype=np.uint8)
    cdef double[::1] rbest = np.zeros(max(n, 1))
    cdef int64_t[::1] rbe = np.full(max(n, 1), -1, dtype=np.int64)
    cdef uint8_t[::1] dirty = np.zeros(max(n, 1), dtype=np.uint8)
    cdef int64_t[::1] dlist = np.zeros(max(n, 1), dtype=np.int64)
    cdef int64_t nd
    cdef int64_t[::1] picked
    cdef int64_t[::1] pcnt
    cdef const double* wp
    cdef const double* bp
    # incidence: for each side, the triangles it is a candidate in (CSR, triangles ascending)
    with nogil:
        for t in range(m):
            i = tri[t, 0]
            j = tri[t, 1]
            k = tri[t, 2]
            for s in range(3):
                if cand[t, s]:
                    _side(i, j, k, s, &a, &b)
                    ptr[a * n + b + 1] += 1
        for e in range(nn):
            ptr[e + 1] += ptr[e]
    fill = np.array(ptr[:nn], dtype=np.int64) if nn else np.zeros(1, dtype=np.int64)
    inc = np.empty(max(ptr[nn], 1), dtype=np.int64)
    limit = 0
    with nogil:
        for t in range(m):
            i = tri[t, 0]
            j = tri[t, 1]
            k = tri[t, 2]
            for s in range(3):
                if cand[t, s]:
                    _side(i, j, k, s, &a, &b)
                    inc[fill[a * n + b]] = t
                    fill[a * n + b] += 1
        for t in range(m):
            hit[t] = 0 if alive[t] else 1
            if alive[t]:
                limit += 1
                i = tri[t, 0]
                j = tri[t, 1]
                k = tri[t, 2]
                for s in range(3):
                    if cand[t, s]:
                        _side(i, j, k, s, &a, &b)
                        cnt[a * n + b] += 1
    # every pick hits at least one unhit triangle
    picked = np.empty(max(limit, 1), dtype=np.int64)
    pcnt = np.empty(max(limit, 1), dtype=np.int64)
    if n == 0 or m == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    wp = &w[0, 0]
    bp = &bias[0, 0]
    with nogil:
        for a in range(n):
            _row_best(&cnt[0], wp, bp, n, a, &rbest[0], &rbe[0])
        while True:
            top = 0.0
            r = -1
            for a in range(n):
                if rbe[a] >= 0 and rbest[a] > top:
                    top = rbest[a]
                    r = a
            if r < 0:
                break
            e = r * n + rbe[r]
            picked[npick] = e
            pcnt[npick] = cnt[e]
            npick += 1
            nd = 0
            for q in range(ptr[e], ptr[e + 1]):
                t = inc[q]
                if hit[t]:
                    continue
                hit[t] = 1
                i = tri[t, 0]
                j = tri[t, 1]
                k = tri[t, 2]
                for s in range(3):
                    if cand[t, s]:
                        _side(i, j, k, s, &x, &y)
                        cnt[x * n + y] -= 1
                        # a side's score only falls with its count (weight >= 0), so the row's
                        # best changes only when its best side falls
                        if not dirty[x] and (rbe[x] == y or not wp[x * n + y] >= 0):
                            dirty[x] = 1
                            dlist[nd] = x
                            nd += 1
            for q in range(nd):
                ra = dlist[q]
                dirty[ra] = 0
                _row_best(&cnt[0], wp, bp, n, ra, &rbest[0], &rbe[0])
    return np.array(picked[:npick], dtype=np.int64), np.array(pcnt[:npick], dtype=np.int64)


def packing(int64_t n, const int64_t[:, ::1] tri, const uint8_t[:, ::1] cand, const int64_t[::1] order,
            double[:, ::1] R):
    """Greedy fractional packing of triangles in ``order``; ``R`` (residual weights) is updated in place."""
    cdef double total = 0.0, y
    cdef int64_t q, t, i, j, k, s, a, b
    with nogil:
        for q in range(order.shape[0]):
            t = order[q]
            i = tri[t, 0]
            j = tri[t, 1]
            k = tri[t, 2]
            y = INFINITY
            for s in range(3):
                if cand[t, s]:
                    _side(i, j, k, s, &a, &b)
                    if R[a, b] < y:
                        y = R[a, b]
            if y > 0 and y < INFINITY:
                total += y
                for s in range(3):
                    if cand[t, s]:
                        _side(i, j, k, s, &a, &b)
                        R[a, b] -= y
    return total
