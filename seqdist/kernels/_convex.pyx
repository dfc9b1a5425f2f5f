# cython: language_level=3, boundscheck=False, wraparound=False, cdivision=True, initializedcheck=False
"""Compiled part of :mod:`seqdist.kernels.convex` (see its docstring for the conventions).

Every function here gives bit for bit what the plain loop it replaces gives:
the same float operations in the same order, so the l1 and l2 iterates (and
the output bytes) do not depend on how they are compiled. An operation is
left out only where its result cannot change anything (the l2 sweep skips the
division for a satisfied constraint whose dual is 0). The full scans (violated
triangles, the blend step) hand rows to OpenMP threads; per-row results go to
their own slots and are combined by integer counts or maxima, so the answer
does not depend on the number of threads. The sweeps are Gauss-Seidel: each
update reads the previous one, so they run on one thread, in order.

The hot inner loops are C in ``src/convex.h`` (the scan's count, built for
AVX2 and the baseline; the scan's fill; the Dijkstra of the cycle search).
Outputs of known size are allocated by the caller (numpy) and passed in as
typed memoryviews; ``merge_active_c`` and ``violated_cycles_c`` build theirs.
Each ``name_c`` here is the loop of ``name`` in convex.py.
"""

from cython.parallel cimport prange
from openmp cimport omp_get_max_threads, omp_get_thread_num
from libc.math cimport INFINITY, fabs
from libc.stdint cimport int32_t, int64_t
from libc.stdlib cimport free, malloc, realloc
from libc.string cimport memcpy

import numpy as np


cdef extern from "src/convex.h" nogil:
    int64_t sd_cvx_count_row(const double* x, const unsigned char* gm, int64_t n, int full, double thr, int64_t i)
    int64_t sd_cvx_fill_row(const double* x, const unsigned char* gm, int64_t n, int full, double thr, int64_t i,
                            int64_t* out, int64_t* buf)
    double sd_cvx_blend_row(const double* Y, const double* Z, int64_t n, int64_t i, double best)
    void sd_cvx_dijkstra(const double* W, int64_t n, int64_t s, int64_t* pred, double* dist)
    void sd_cvx_clamp_one(double* Y, int64_t n, int64_t i, int64_t j, double target)
    void sd_cvx_pdhg_primal(int64_t ne, double* x, double* xbar, const double* c, const double* d,
                            const double* tau, const double* tw, double M, int quad)
    void sd_cvx_pdhg_dual(int64_t m, const int32_t* rows, double* y, const double* xbar, double* c, double sigma)
    void sd_cvx_pdhg_primal_h(int64_t ne, double* x, double* xbar, const double* x0, const double* c, const double* d,
                              const double* tau, const double* tw, double M, int quad, double a, double rho)
    void sd_cvx_pdhg_dual_h(int64_t m, const int32_t* rows, double* y, const double* y0, const double* xbar,
                            double* c, double sigma, double a, double rho)


# ------------------------------------------------------------ argument checks
# The loops below index without bounds checks, so the sizes they rely on are checked first
# (O(1); the keys and edge indices themselves are trusted: they come from the scans).
cdef int need(bint ok, str what) except -1:
    if not ok:
        raise ValueError(what)
    return 0


# ------------------------------------------------------------ key helpers
cdef inline void sides(int64_t key, int64_t n, int64_t* e0, int64_t* e1, int64_t* e2) noexcept nogil:
    # flat indices a * n + b of the long side and the two short sides of a triangle key
    cdef int64_t i = key >> 42
    cdef int64_t j = (key >> 22) & 0xFFFFF
    cdef int64_t k = (key >> 2) & 0xFFFFF
    cdef int64_t s = key & 3
    if s == 0:
        e0[0] = i * n + j
        e1[0] = i * n + k
        e2[0] = j * n + k
    elif s == 1:
        e0[0] = i * n + k
        e1[0] = i * n + j
        e2[0] = j * n + k
    else:
        e0[0] = j * n + k
        e1[0] = i * n + j
        e2[0] = i * n + k


# ------------------------------------------------------------ the triangle scan
def scan_count_c(const double[:, ::1] x, const unsigned char[:, ::1] gm, bint full, double thr, Py_ssize_t nb,
                 int64_t[::1] cnt):
    """``cnt[i]``: the violated (triangle, long side) pairs of row ``i``.

    Rows are interleaved over ``nb`` blocks (row ``i`` costs about
    ``(n - i)^2``); blocks go to threads one at a time.
    """
    cdef Py_ssize_t n = x.shape[0], b, i
    cdef const double* px
    cdef const unsigned char* pg
    need(x.shape[1] == x.shape[0] and gm.shape[0] == x.shape[0] and gm.shape[1] == x.shape[0],
         "scan_count: x and gm must be square, of one size")
    need(cnt.shape[0] >= x.shape[0] and 0 < nb, "scan_count: cnt too short or nb < 1")
    if n == 0:
        return
    px = &x[0, 0]
    pg = &gm[0, 0]
    for b in prange(nb, nogil=True, schedule="dynamic", chunksize=1):
        i = b
        while i < n:
            cnt[i] = sd_cvx_count_row(px, pg, n, full, thr, i)
            i = i + nb


def scan_fill_c(const double[:, ::1] x, const unsigned char[:, ::1] gm, bint full, double thr, Py_ssize_t nb,
                const int64_t[::1] offs, int64_t[::1] out):
    """Write row ``i``'s keys (sorted) to ``out[offs[i]:offs[i + 1]]`` (rows with none are skipped)."""
    cdef Py_ssize_t n = x.shape[0], b, i
    cdef const double* px
    cdef const unsigned char* pg
    cdef int64_t* po
    cdef int64_t* pb
    cdef int64_t[:, ::1] scratch
    need(x.shape[1] == x.shape[0] and gm.shape[0] == x.shape[0] and gm.shape[1] == x.shape[0],
         "scan_fill: x and gm must be square, of one size")
    need(offs.shape[0] > x.shape[0] and 0 < nb, "scan_fill: offs too short or nb < 1")
    need(x.shape[0] == 0 or offs[x.shape[0]] <= out.shape[0], "scan_fill: out too short")
    if n == 0 or out.shape[0] == 0:
        return
    # one scratch row per thread (3 keys per k of one (i, j))
    scratch = np.empty((omp_get_max_threads(), 3 * n + 3), np.int64)
    px = &x[0, 0]
    pg = &gm[0, 0]
    po = &out[0]
    for b in prange(nb, nogil=True, schedule="dynamic", chunksize=1):
        pb = &scratch[omp_get_thread_num(), 0]
        i = b
        while i < n:
            if offs[i + 1] > offs[i]:
                sd_cvx_fill_row(px, pg, n, full, thr, i, po + offs[i], pb)
            i = i + nb


# ------------------------------------------------------------ active-set bookkeeping
def merge_active_c(const int64_t[::1] ka, const double[::1] la, const int64_t[::1] kb):
    """``(keys, duals, added)``: the merge of :func:`seqdist.kernels.convex.merge_active`.

    The merge runs into C buffers with room for ``ka.size + kb.size`` and only
    the kept part is copied to the numpy outputs (numpy may ask the kernel for
    huge pages on large arrays, which can stall on a busy machine; the large
    temporaries do not need them).
    """
    cdef Py_ssize_t na = ka.shape[0], nb = kb.shape[0], a = 0, b = 0, p = 0, added = 0
    cdef int64_t* ko
    cdef double* lo
    cdef int64_t[::1] kout
    cdef double[::1] lout
    need(la.shape[0] == na, "merge_active: ka and la must have one length")
    ko = <int64_t*> malloc((na + nb + 1) * sizeof(int64_t))
    lo = <double*> malloc((na + nb + 1) * sizeof(double))
    try:
        if ko == NULL or lo == NULL:
            raise MemoryError()
        with nogil:
            while a < na or b < nb:
                if b >= nb or (a < na and ka[a] < kb[b]):
                    if la[a] > 0.0:
                        ko[p] = ka[a]
                        lo[p] = la[a]
                        p += 1
                    a += 1
                elif a >= na or kb[b] < ka[a]:
                    ko[p] = kb[b]
                    lo[p] = 0.0
                    p += 1
                    b += 1
                    added += 1
                else:
                    ko[p] = ka[a]
                    lo[p] = la[a]
                    p += 1
                    a += 1
                    b += 1
        keys = np.empty(p, np.int64)
        duals = np.empty(p, np.float64)
        if p:
            kout = keys
            lout = duals
            memcpy(&kout[0], ko, p * sizeof(int64_t))
            memcpy(&lout[0], lo, p * sizeof(double))
        return keys, duals, added
    finally:
        free(ko)
        free(lo)


# ------------------------------------------------------------ weighted least squares (l2)
def sweep_l2_tri_c(const int64_t[::1] keys, double[::1] lam, double[:, :, ::1] xw, bint forward, double omega):
    """One Hildreth sweep over triangle constraints (see :func:`seqdist.kernels.convex.sweep_l2_tri`)."""
    cdef Py_ssize_t m = keys.shape[0], q, t
    cdef int64_t n = xw.shape[1], e0, e1, e2
    cdef double* p
    cdef double big = 0.0, w0, w1, w2, den, v, lt, nl, dl, ch
    need(xw.shape[1] == xw.shape[0] and xw.shape[2] == 2, "sweep_l2_tri: xw must be (n, n, 2)")
    need(lam.shape[0] >= keys.shape[0], "sweep_l2_tri: lam shorter than keys")
    # With a zero dual, a satisfied constraint (v <= 0) and a positive finite step and denominator,
    # the new dual 0 + omega * v / den is <= 0 and is clipped to 0: nothing changes, so the
    # division is skipped (most of the pool is inactive). NaN never takes the shortcut.
    cdef bint shortcut = 0.0 < omega < INFINITY
    if m == 0:
        return big
    p = &xw[0, 0, 0]
    with nogil:
        for q in range(m):
            t = q if forward else m - 1 - q
            sides(keys[t], n, &e0, &e1, &e2)
            e0 *= 2
            e1 *= 2
            e2 *= 2
            w0 = p[e0 + 1]
            w1 = p[e1 + 1]
            w2 = p[e2 + 1]
            den = w0 + w1 + w2
            if den == 0.0:
                continue
            v = p[e0] - p[e1] - p[e2]
            lt = lam[t]
            if lt == 0.0 and v <= 0.0 and shortcut and 0.0 < den < INFINITY:
                continue
            nl = lt + omega * v / den
            if nl < 0.0:
                nl = 0.0
            dl = nl - lt
            if dl != 0.0:
                lam[t] = nl
                p[e0] -= dl * w0
                p[e1] += dl * w1
                p[e2] += dl * w2
                ch = fabs(dl) * den
                if ch > big:
                    big = ch
    return big


def sweep_l2_cyc_c(const int64_t[::1] ptr, const int64_t[::1] edges, double[::1] lam, double[:, ::1] xwf,
                   double omega):
    """One Hildreth sweep over cycle constraints (``xwf`` the interleaved array as (n * n, 2))."""
    cdef Py_ssize_t t, q, nc = ptr.shape[0] - 1
    cdef int64_t p0, p1, e0, e
    cdef double* p
    cdef double big = 0.0, den, v, lt, nl, dl, ch
    need(xwf.shape[1] == 2, "sweep_l2_cyc: xwf must be (n * n, 2)")
    need(ptr.shape[0] >= 1 and lam.shape[0] >= ptr.shape[0] - 1, "sweep_l2_cyc: ptr empty or lam too short")
    need(ptr[ptr.shape[0] - 1] <= edges.shape[0], "sweep_l2_cyc: edges shorter than ptr says")
    if nc <= 0 or xwf.shape[0] == 0:
        return big
    p = &xwf[0, 0]
    with nogil:
        for t in range(nc):
            p0 = ptr[t]
            p1 = ptr[t + 1]
            e0 = 2 * edges[p0]
            den = p[e0 + 1]
            v = p[e0]
            for q in range(p0 + 1, p1):
                e = 2 * edges[q]
                den += p[e + 1]
                v -= p[e]
            if den == 0.0:
                continue
            lt = lam[t]
            nl = lt + omega * v / den
            if nl < 0.0:
                nl = 0.0
            dl = nl - lt
            if dl != 0.0:
                lam[t] = nl
                p[e0] -= dl * p[e0 + 1]
                for q in range(p0 + 1, p1):
                    e = 2 * edges[q]
                    p[e] += dl * p[e + 1]
                ch = fabs(dl) * den
                if ch > big:
                    big = ch
    return big


# ------------------------------------------------------------ proximal LP (l1)
cdef inline double soft(double z, double h) noexcept nogil:
    if z > h:
        return z - h
    if z < -h:
        return z + h
    return 0.0


cdef double phi(double t, const double* cs, const double* As, const double* ds, const double* iw, const double* sg,
                Py_ssize_t m, double h) noexcept nogil:
    # a^T x(t) with x_e = d_e + soft(A_e - (c_e + sg_e t) iw_e, h)
    cdef double v = 0.0, xe
    cdef Py_ssize_t q
    for q in range(m):
        xe = ds[q] + soft(As[q] - (cs[q] + sg[q] * t) * iw[q], h)
        if sg[q] > 0:
            v += xe
        else:
            v += -xe
    return v


cdef double line_max(const double* cs, const double* As, const double* ds, const double* iw, const double* sg,
                     Py_ssize_t m, double h, double lt) noexcept nogil:
    # Exact maximiser over t >= -lt of the concave piecewise-quadratic dual
    # along one constraint: the first root of the nonincreasing
    # piecewise-linear phi(t) = a^T x(t), walked breakpoint by breakpoint.
    # g = direction * phi is positive at t = 0 and decreases along the walk.
    cdef double f0, direction, t, g, nb, dist, limit, step, slope, tb, gb, sgn
    cdef Py_ssize_t it, q, r
    f0 = phi(0.0, cs, As, ds, iw, sg, m, h)
    if f0 == 0.0:
        return 0.0
    direction = 1.0 if f0 > 0.0 else -1.0
    if direction < 0.0 and lt <= 0.0:
        return 0.0
    t = 0.0
    g = fabs(f0)
    for it in range(4 * m + 8):
        nb = INFINITY
        for q in range(m):
            if iw[q] == 0.0:
                continue
            for r in range(2):
                sgn = -1.0 if r == 0 else 1.0
                dist = (sg[q] * ((As[q] + sgn * h) / iw[q] - cs[q]) - t) * direction
                if dist > 0.0 and dist < nb:
                    nb = dist
        limit = t + lt if direction < 0.0 else INFINITY
        step = nb if nb < limit else limit
        if step == INFINITY:
            # beyond every breakpoint every free entry is on a slope
            slope = 0.0
            for q in range(m):
                slope += iw[q]
            if slope == 0.0:
                return t
            return t + direction * g / slope
        tb = t + direction * step
        gb = direction * phi(tb, cs, As, ds, iw, sg, m, h)
        if gb <= 0.0:
            return t + direction * step * (g / (g - gb))
        if step == limit:
            return -lt
        t = tb
        g = gb
    return t


def sweep_l1_tri_c(const int64_t[::1] keys, double[::1] lam, double[:, ::1] c, const double[:, ::1] A,
                   const double[:, ::1] d, const double[:, ::1] iw, double h):
    """One exact dual coordinate-ascent sweep over triangle constraints
    (see :func:`seqdist.kernels.convex.sweep_l1_tri`)."""
    cdef Py_ssize_t m = keys.shape[0], t
    cdef int64_t n = c.shape[0], e0, e1, e2
    cdef double cs[3]
    cdef double As[3]
    cdef double ds[3]
    cdef double ws[3]
    cdef double sg[3]
    cdef double big = 0.0, lt, dt
    cdef double* pc
    cdef const double* pA
    cdef const double* pd
    cdef const double* pw
    need(c.shape[1] == n and A.shape[0] == n and A.shape[1] == n and d.shape[0] == n and d.shape[1] == n
         and iw.shape[0] == n and iw.shape[1] == n, "sweep_l1_tri: c, A, d and iw must be (n, n)")
    need(lam.shape[0] >= keys.shape[0], "sweep_l1_tri: lam shorter than keys")
    if m == 0:
        return big
    pc = &c[0, 0]
    pA = &A[0, 0]
    pd = &d[0, 0]
    pw = &iw[0, 0]
    sg[0] = 1.0
    sg[1] = -1.0
    sg[2] = -1.0
    with nogil:
        for t in range(m):
            sides(keys[t], n, &e0, &e1, &e2)
            ws[0] = pw[e0]
            ws[1] = pw[e1]
            ws[2] = pw[e2]
            if ws[0] == 0.0 and ws[1] == 0.0 and ws[2] == 0.0:
                continue
            cs[0] = pc[e0]
            cs[1] = pc[e1]
            cs[2] = pc[e2]
            As[0] = pA[e0]
            As[1] = pA[e1]
            As[2] = pA[e2]
            ds[0] = pd[e0]
            ds[1] = pd[e1]
            ds[2] = pd[e2]
            lt = lam[t]
            dt = line_max(cs, As, ds, ws, sg, 3, h, lt)
            if dt < -lt:
                dt = -lt
            if dt != 0.0:
                lam[t] = lt + dt
                pc[e0] += dt
                pc[e1] -= dt
                pc[e2] -= dt
                if fabs(dt) > big:
                    big = fabs(dt)
    return big


def sweep_l1_cyc_c(const int64_t[::1] ptr, const int64_t[::1] edges, double[::1] lam, double[::1] cf,
                   const double[::1] Af, const double[::1] df, const double[::1] iwf, double h):
    """:func:`sweep_l1_tri` over cycle constraints (flat views)."""
    cdef Py_ssize_t t, q, m, nc = ptr.shape[0] - 1, mmax = 1
    cdef int64_t p0, e
    cdef double big = 0.0, lt, dt
    cdef bint anyfree
    cdef double* buf
    cdef double* cs
    cdef double* As
    cdef double* ds
    cdef double* ws
    cdef double* sg
    need(Af.shape[0] == cf.shape[0] and df.shape[0] == cf.shape[0] and iwf.shape[0] == cf.shape[0],
         "sweep_l1_cyc: cf, Af, df and iwf must have one length")
    need(ptr.shape[0] >= 1 and lam.shape[0] >= ptr.shape[0] - 1, "sweep_l1_cyc: ptr empty or lam too short")
    need(ptr[ptr.shape[0] - 1] <= edges.shape[0], "sweep_l1_cyc: edges shorter than ptr says")
    if nc <= 0:
        return big
    for t in range(nc):
        if ptr[t + 1] - ptr[t] > mmax:
            mmax = ptr[t + 1] - ptr[t]
    buf = <double*> malloc(5 * mmax * sizeof(double))
    if buf == NULL:
        raise MemoryError()
    cs = buf
    As = buf + mmax
    ds = buf + 2 * mmax
    ws = buf + 3 * mmax
    sg = buf + 4 * mmax
    with nogil:
        for t in range(nc):
            p0 = ptr[t]
            m = ptr[t + 1] - p0
            anyfree = False
            for q in range(m):
                e = edges[p0 + q]
                cs[q] = cf[e]
                As[q] = Af[e]
                ds[q] = df[e]
                ws[q] = iwf[e]
                sg[q] = 1.0 if q == 0 else -1.0
                if ws[q] != 0.0:
                    anyfree = True
            if not anyfree:
                continue
            lt = lam[t]
            dt = line_max(cs, As, ds, ws, sg, m, h, lt)
            if dt < -lt:
                dt = -lt
            if dt != 0.0:
                lam[t] = lt + dt
                cf[edges[p0]] += dt
                for q in range(1, m):
                    cf[edges[p0 + q]] -= dt
                if fabs(dt) > big:
                    big = fabs(dt)
    free(buf)
    return big


# ------------------------------------------------------------ A^T lam and A y
def accumulate_tri_c(const int64_t[::1] keys, const double[::1] lam, double[:, ::1] c):
    """``c += A^T lam`` over triangle constraints (upper triangle of ``c``)."""
    cdef Py_ssize_t t, m = keys.shape[0]
    cdef int64_t n = c.shape[0], e0, e1, e2
    cdef double lt
    cdef double* pc
    need(c.shape[1] == c.shape[0], "accumulate_tri: c must be square")
    need(lam.shape[0] >= keys.shape[0], "accumulate_tri: lam shorter than keys")
    if m == 0:
        return
    pc = &c[0, 0]
    with nogil:
        for t in range(m):
            lt = lam[t]
            if lt == 0.0:
                continue
            sides(keys[t], n, &e0, &e1, &e2)
            pc[e0] += lt
            pc[e1] -= lt
            pc[e2] -= lt


def accumulate_cyc_c(const int64_t[::1] ptr, const int64_t[::1] edges, const double[::1] lam, double[::1] cf):
    """``c += A^T lam`` over cycle constraints (flat view of ``c``)."""
    cdef Py_ssize_t t, q, nc = ptr.shape[0] - 1
    cdef double lt
    need(ptr.shape[0] >= 1 and lam.shape[0] >= ptr.shape[0] - 1, "accumulate_cyc: ptr empty or lam too short")
    need(ptr[ptr.shape[0] - 1] <= edges.shape[0], "accumulate_cyc: edges shorter than ptr says")
    with nogil:
        for t in range(nc):
            lt = lam[t]
            if lt == 0.0:
                continue
            cf[edges[ptr[t]]] += lt
            for q in range(ptr[t] + 1, ptr[t + 1]):
                cf[edges[q]] -= lt


def apply_tri_c(const int64_t[::1] keys, const double[:, ::1] y, double[::1] r):
    """``r = A y`` for triangle constraints: ``y[long] - y[short] - y[short]``."""
    cdef Py_ssize_t t, m = keys.shape[0]
    cdef int64_t n = y.shape[0], e0, e1, e2
    cdef const double* py
    need(y.shape[1] == y.shape[0], "apply_tri: y must be square")
    need(r.shape[0] >= keys.shape[0], "apply_tri: r shorter than keys")
    if m == 0:
        return
    py = &y[0, 0]
    with nogil:
        for t in range(m):
            sides(keys[t], n, &e0, &e1, &e2)
            r[t] = py[e0] - py[e1] - py[e2]


def apply_cyc_c(const int64_t[::1] ptr, const int64_t[::1] edges, const double[::1] yf, double[::1] r):
    """``r = A y`` for cycle constraints (flat view of ``y``)."""
    cdef Py_ssize_t t, q, nc = ptr.shape[0] - 1
    cdef double v
    need(ptr.shape[0] >= 1 and r.shape[0] >= ptr.shape[0] - 1, "apply_cyc: ptr empty or r too short")
    need(ptr[ptr.shape[0] - 1] <= edges.shape[0], "apply_cyc: edges shorter than ptr says")
    with nogil:
        for t in range(nc):
            v = yf[edges[ptr[t]]]
            for q in range(ptr[t] + 1, ptr[t + 1]):
                v -= yf[edges[q]]
            r[t] = v


def denominators_tri_c(const int64_t[::1] keys, const double[:, ::1] winv, double[::1] r):
    """``r = a^T W^-1 a`` per triangle constraint."""
    cdef Py_ssize_t t, m = keys.shape[0]
    cdef int64_t n = winv.shape[0], e0, e1, e2
    cdef const double* pw
    need(winv.shape[1] == winv.shape[0], "denominators_tri: winv must be square")
    need(r.shape[0] >= keys.shape[0], "denominators_tri: r shorter than keys")
    if m == 0:
        return
    pw = &winv[0, 0]
    with nogil:
        for t in range(m):
            sides(keys[t], n, &e0, &e1, &e2)
            r[t] = pw[e0] + pw[e1] + pw[e2]


# ------------------------------------------------------------ cycles through absent entries
cdef int grow(int64_t** buf, Py_ssize_t* cap, Py_ssize_t need) noexcept nogil:
    # make room for `need` items in a malloc'd buffer; 0 on failure
    cdef Py_ssize_t c = cap[0]
    cdef int64_t* p
    if need <= c:
        return 1
    while c < need:
        c = 2 * c + 16
    p = <int64_t*> realloc(buf[0], c * sizeof(int64_t))
    if p == NULL:
        return 0
    buf[0] = p
    cap[0] = c
    return 1


def violated_cycles_c(const double[:, ::1] W, const int64_t[::1] src, const int64_t[::1] dst, int64_t min_edges):
    """``(ptr, edges)`` of the cycle constraints (see :func:`seqdist.kernels.convex.violated_cycles`)."""
    cdef Py_ssize_t n = W.shape[0], npairs = src.shape[0], q, r, plen, ecap = 0, pcap = 0, ne = 0, np_ = 1
    cdef int64_t s, t, v, cur = -1, a, b, u, v2
    cdef bint ok, failed = False
    cdef double* dist = NULL
    cdef int64_t* pred = NULL
    cdef int64_t* path = NULL
    cdef int64_t* eb = NULL
    cdef int64_t* pb = NULL
    cdef const double* pW
    need(W.shape[1] == W.shape[0], "violated_cycles: W must be square")
    need(src.shape[0] == dst.shape[0], "violated_cycles: src and dst must have one length")
    try:
        dist = <double*> malloc((n + 1) * sizeof(double))
        pred = <int64_t*> malloc((n + 1) * sizeof(int64_t))
        path = <int64_t*> malloc((n + 2) * sizeof(int64_t))
        if dist == NULL or pred == NULL or path == NULL or not grow(&pb, &pcap, 1):
            raise MemoryError()
        pb[0] = 0
        if n > 0:
            pW = &W[0, 0]
            with nogil:
                for q in range(npairs):
                    s = src[q]
                    t = dst[q]
                    if s != cur:
                        sd_cvx_dijkstra(pW, n, s, pred, dist)
                        cur = s
                    # path t -> s
                    path[0] = t
                    plen = 1
                    v = t
                    ok = True
                    while v != s:
                        v = pred[v]
                        if v < 0 or plen > n:
                            ok = False
                            break
                        path[plen] = v
                        plen += 1
                    if not ok or plen - 1 < min_edges:
                        continue
                    # the path must not use the long edge itself
                    if plen == 2:
                        continue
                    if not grow(&eb, &ecap, ne + plen) or not grow(&pb, &pcap, np_ + 1):
                        failed = True
                        break
                    a = s if s < t else t
                    b = t if s < t else s
                    eb[ne] = a * n + b
                    ne += 1
                    for r in range(plen - 1):
                        u = path[r]
                        v2 = path[r + 1]
                        a = u if u < v2 else v2
                        b = v2 if u < v2 else u
                        eb[ne] = a * n + b
                        ne += 1
                    pb[np_] = ne
                    np_ += 1
            if failed:
                raise MemoryError()
        ptr = np.empty(np_, np.int64)
        edges = np.empty(ne, np.int64)
        copy_into(pb, np_, ptr)
        copy_into(eb, ne, edges)
        return ptr, edges
    finally:
        free(dist)
        free(pred)
        free(path)
        free(eb)
        free(pb)


cdef void copy_into(const int64_t* src, Py_ssize_t m, int64_t[::1] out) noexcept:
    cdef Py_ssize_t q
    for q in range(m):
        out[q] = src[q]


# ------------------------------------------------------------ turning an iterate into a metric
def blend_step_c(const double[:, ::1] Y, const double[:, ::1] Z, Py_ssize_t nb, double[::1] tb):
    """``tb[b]``: the largest restoring step over the rows of block ``b`` (rows interleaved)."""
    cdef Py_ssize_t n = Y.shape[0], b, i
    cdef double best
    cdef const double* py
    cdef const double* pz
    need(Y.shape[1] == Y.shape[0] and Z.shape[0] == Y.shape[0] and Z.shape[1] == Y.shape[0],
         "blend_step: Y and Z must be square, of one size")
    need(tb.shape[0] >= nb and 0 < nb, "blend_step: tb too short or nb < 1")
    if n == 0:
        return
    py = &Y[0, 0]
    pz = &Z[0, 0]
    for b in prange(nb, nogil=True, schedule="dynamic", chunksize=1):
        best = 0.0
        i = b
        while i < n:
            best = sd_cvx_blend_row(py, pz, n, i, best)
            i = i + nb
        tb[b] = best


def clamp_free_c(double[:, ::1] Y, const int64_t[::1] fi, const int64_t[::1] fj, const double[::1] target):
    """Move entries ``(fi, fj)`` of the metric ``Y`` one at a time towards ``target`` (both halves)."""
    cdef Py_ssize_t n = Y.shape[0], q
    cdef double* py
    need(Y.shape[1] == Y.shape[0], "clamp_free: Y must be square")
    need(fj.shape[0] == fi.shape[0] and target.shape[0] == fi.shape[0],
         "clamp_free: fi, fj and target must have one length")
    if n == 0 or fi.shape[0] == 0:
        return
    py = &Y[0, 0]
    with nogil:
        for q in range(fi.shape[0]):
            sd_cvx_clamp_one(py, n, fi[q], fj[q], target[q])


# ------------------------------------------------------------ the l1 bound's own dual ascent
cdef inline double lp_slope(double c, double w, double d, double M) noexcept nogil:
    # right derivative of phi(c) = min_{0 <= x <= M} w |x - d| + c x: M below -w, d on [-w, w), 0 from w
    if c < -w:
        return M
    if c < w:
        return d
    return 0.0


def ascend_l1_bound_c(const int64_t[::1] keys, double[::1] lam, double[:, ::1] c, const double[:, ::1] d,
                      const double[:, ::1] w, double M):
    """One sweep of exact coordinate ascent on the l1 Lagrangian bound itself
    (see :func:`seqdist.kernels.convex.ascend_l1_bound`). Returns how many duals moved."""
    cdef Py_ssize_t m = keys.shape[0], t, a, b
    cdef int64_t n = c.shape[0], e0, e1, e2
    cdef double bp[6]
    cdef double cs[3]
    cdef double ws[3]
    cdef double ds[3]
    cdef double sg[3]
    cdef double lt, step, tmp, left
    cdef int moved = 0, q, r
    cdef double* pc
    cdef const double* pd
    cdef const double* pw
    need(c.shape[1] == n and d.shape[0] == n and d.shape[1] == n and w.shape[0] == n and w.shape[1] == n,
         "ascend_l1_bound: c, d and w must be (n, n)")
    need(lam.shape[0] >= keys.shape[0], "ascend_l1_bound: lam shorter than keys")
    if m == 0:
        return 0
    pc = &c[0, 0]
    pd = &d[0, 0]
    pw = &w[0, 0]
    sg[0] = 1.0
    sg[1] = -1.0
    sg[2] = -1.0
    with nogil:
        for t in range(m):
            sides(keys[t], n, &e0, &e1, &e2)
            cs[0] = pc[e0]
            cs[1] = pc[e1]
            cs[2] = pc[e2]
            ws[0] = pw[e0]
            ws[1] = pw[e1]
            ws[2] = pw[e2]
            ds[0] = pd[e0]
            ds[1] = pd[e1]
            ds[2] = pd[e2]
            lt = lam[t]
            # breakpoints in the step s (entry q sees c_q + sg_q s): where c_q + sg_q s = +-w_q
            r = 0
            for q in range(3):
                if ws[q] < INFINITY:
                    bp[r] = sg[q] * (ws[q] - cs[q])
                    bp[r + 1] = sg[q] * (-ws[q] - cs[q])
                    r += 2
            # insertion sort (at most 6)
            for a in range(1, r):
                tmp = bp[a]
                b = a - 1
                while b >= 0 and bp[b] > tmp:
                    bp[b + 1] = bp[b]
                    b -= 1
                bp[b + 1] = tmp
            # h(s) = sum_q phi_q(c_q + sg_q s) is concave and piecewise linear: the one-sided slopes at
            # 0 give the direction, then the breakpoints are walked to where the slope changes sign
            step = 0.0
            if right_slope(cs, ws, ds, sg, M, 0.0) > 0.0:
                # move up: the first breakpoint > 0 after which the right slope is <= 0
                step = INFINITY
                for a in range(r):
                    if bp[a] > 0.0 and right_slope(cs, ws, ds, sg, M, bp[a]) <= 0.0:
                        step = bp[a]
                        break
                if step == INFINITY:
                    continue  # unbounded direction (cannot happen with finite weights); leave it
            elif lt > 0.0 and left_slope(cs, ws, ds, sg, M, 0.0) < 0.0:
                # move down, at most to lam = 0: the last breakpoint < 0 before which the left slope is >= 0
                left = -lt
                step = left
                for a in range(r - 1, -1, -1):
                    if bp[a] < 0.0 and bp[a] > left and left_slope(cs, ws, ds, sg, M, bp[a]) >= 0.0:
                        step = bp[a]
                        break
            if step != 0.0:
                lam[t] = lt + step
                if lam[t] < 0.0:
                    lam[t] = 0.0
                step = lam[t] - lt
                pc[e0] += step
                pc[e1] -= step
                pc[e2] -= step
                moved += 1
    return moved


cdef double right_slope(const double* cs, const double* ws, const double* ds, const double* sg, double M,
                        double s) noexcept nogil:
    cdef double v = 0.0, cq
    cdef int q
    for q in range(3):
        cq = cs[q] + sg[q] * s
        if sg[q] > 0:
            v += lp_slope(cq, ws[q], ds[q], M)
        else:
            # d/ds phi(c - s) from the right = -(left derivative of phi at c - s)
            v -= lp_left(cq, ws[q], ds[q], M)
    return v


cdef double left_slope(const double* cs, const double* ws, const double* ds, const double* sg, double M,
                       double s) noexcept nogil:
    cdef double v = 0.0, cq
    cdef int q
    for q in range(3):
        cq = cs[q] + sg[q] * s
        if sg[q] > 0:
            v += lp_left(cq, ws[q], ds[q], M)
        else:
            v -= lp_slope(cq, ws[q], ds[q], M)
    return v


cdef inline double lp_left(double c, double w, double d, double M) noexcept nogil:
    # left derivative of phi: M up to -w, d on (-w, w], 0 beyond w
    if c <= -w:
        return M
    if c <= w:
        return d
    return 0.0



# ------------------------------------------------------------ primal-dual hybrid gradient (l1, l2)
def pdhg_tri_c(const int32_t[:, ::1] rows, double[::1] y, double[::1] x, double[::1] xbar, double[::1] c,
               const double[::1] d, const double[::1] tau, const double[::1] tw, double sigma, double M,
               Py_ssize_t iters, bint quad):
    """``iters`` iterations of the primal-dual hybrid gradient method over triangle rows
    (see :func:`seqdist.kernels.convex.pdhg_tri`). Entry arrays are compact (one slot per entry)."""
    cdef Py_ssize_t m = rows.shape[0], ne = x.shape[0], it, t
    need(rows.shape[1] == 3, "pdhg_tri: rows must be (m, 3)")
    need(xbar.shape[0] == ne and c.shape[0] == ne and d.shape[0] == ne and tau.shape[0] == ne and tw.shape[0] == ne,
         "pdhg_tri: the entry arrays must have one length")
    need(y.shape[0] >= m, "pdhg_tri: y shorter than rows")
    if ne == 0:
        return
    if m and (np.min(rows) < 0 or np.max(rows) >= ne):
        raise ValueError("pdhg_tri: an entry index is outside the entry arrays")
    with nogil:
        for it in range(iters):
            # primal step: x+ = prox_{tau f}(x - tau c) and the extrapolation 2 x+ - x (vectorised, C)
            sd_cvx_pdhg_primal(ne, &x[0], &xbar[0], &c[0], &d[0], &tau[0], &tw[0], M, quad)
            # dual step: y+ = max(0, y + sigma A xbar); c = A^T y follows incrementally
            if m:
                sd_cvx_pdhg_dual(m, &rows[0, 0], &y[0], &xbar[0], &c[0], sigma)


def accumulate_rows_c(const int32_t[:, ::1] rows, const double[::1] y, double[::1] c):
    """``c += A^T y`` over triangle rows of entry slots (see :func:`seqdist.kernels.convex.accumulate_rows`)."""
    cdef Py_ssize_t m = rows.shape[0], ne = c.shape[0], t
    cdef double yt
    need(rows.shape[1] == 3, "accumulate_rows: rows must be (m, 3)")
    need(y.shape[0] >= m, "accumulate_rows: y shorter than rows")
    if m == 0:
        return
    if np.min(rows) < 0 or np.max(rows) >= ne:
        raise ValueError("accumulate_rows: an entry index is outside c")
    with nogil:
        for t in range(m):
            yt = y[t]
            c[rows[t, 0]] += yt
            c[rows[t, 1]] -= yt
            c[rows[t, 2]] -= yt


def pdhg_halpern_c(const int32_t[:, ::1] rows, double[::1] y, const double[::1] y0, double[::1] x,
                   const double[::1] x0, double[::1] xbar, double[::1] c, const double[::1] d, const double[::1] tau,
                   const double[::1] tw, double sigma, double M, Py_ssize_t k0, Py_ssize_t iters, double rho,
                   bint quad):
    """``iters`` reflected Halpern iterations from iteration ``k0`` after the anchor ``(x0, y0)``
    (see :func:`seqdist.kernels.convex.pdhg_halpern`)."""
    cdef Py_ssize_t m = rows.shape[0], ne = x.shape[0], it
    cdef double a
    need(rows.shape[1] == 3, "pdhg_halpern: rows must be (m, 3)")
    need(xbar.shape[0] == ne and x0.shape[0] == ne and c.shape[0] == ne and d.shape[0] == ne
         and tau.shape[0] == ne and tw.shape[0] == ne, "pdhg_halpern: the entry arrays must have one length")
    need(y.shape[0] >= m and y0.shape[0] >= m, "pdhg_halpern: y or y0 shorter than rows")
    if ne == 0:
        return
    if m and (np.min(rows) < 0 or np.max(rows) >= ne):
        raise ValueError("pdhg_halpern: an entry index is outside the entry arrays")
    with nogil:
        for it in range(iters):
            a = (k0 + it + 1.0) / (k0 + it + 2.0)
            sd_cvx_pdhg_primal_h(ne, &x[0], &xbar[0], &x0[0], &c[0], &d[0], &tau[0], &tw[0], M, quad, a, rho)
            if m:
                sd_cvx_pdhg_dual_h(m, &rows[0, 0], &y[0], &y0[0], &xbar[0], &c[0], sigma, a, rho)
