# cython: language_level=3, boundscheck=False, wraparound=False, cdivision=True, initializedcheck=False
"""Compiled part of :mod:`seqdist.kernels.tree_building` (the methods are described in
:mod:`seqdist.trees.build`).

Both kernels run without the GIL on one thread: each join depends on the one before,
and a barrier per join loses on a shared machine.

Every floating-point value is computed by the same operations in the same order as the
numba kernels they replace (the build does not contract ``a*b+c``), and every choice
follows the same rule, so the joins and lengths are the same to the last bit (the
tests compare both with plain references; the port was checked against the numba
kernels on integer, few-valued, tied and tree-like matrices, and the packed kernel
below against the full-matrix one it replaced). What changed is where values are read
and written:

* neighbor joining keeps its working matrix as a packed strictly lower triangle (half
  the memory of the full matrix; BIONJ's variances the same) and the active clusters
  in the first ``m`` slots (the merged cluster takes the lower slot, the last active
  slot moves into the freed one); a slot's full row is its packed row (contiguous)
  and its column in the rows below (one cell per row), read into a buffer before the
  join and written back after it; the row sums keep the order of a plain loop over
  the full row (``sd_nj_packed_row_sums``);
* the sorted-row search keeps each pair once, as a float32 lower bound of its distance
  and the cluster id it leads to (8 bytes a pair, where a float64 value and a 32-bit
  index per ordered pair took 24), all rows in one arena that is compacted when it is
  full or the clusters have halved; an entry whose bound of Q can win has its exact Q
  computed from the packed cell, so the choice is the full scan's;
* each row's head entry (its bound and cluster) is kept beside the cluster, so most
  rows are dismissed at every step without reading them; the row sums are read by
  cluster id (joined clusters hold -inf, which makes their Q +inf);
* rows are sorted by a radix sort of the bounds' bit patterns (the order of equal
  bounds does not matter: the search is exact whatever that order, see build.py);
* UPGMA moves no slot (see :func:`upgma_kernel`): only the new column is written; its
  column writes touch one far-apart cache line per row, which no hardware prefetcher
  foresees: the rows a few steps ahead are asked for early (at n = 5000 this halves
  UPGMA's time);
* the row minima, the row sums, the strided row reads and writes and UPGMA's merged
  row are C in ``src/tree_building.h``.
"""

import numpy as np

from libc.math cimport INFINITY
from libc.stdint cimport int32_t, int64_t, uint32_t, uint64_t
from libc.string cimport memcpy, memmove, memset


cdef extern from "src/tree_building.h" nogil:
    void sd_prefetch(const void* p)
    double sd_nj_row_qmin(const double* row, const double* R, int64_t a, double c, double ra)
    int64_t sd_upgma_best(const double* nbv, const double* pen, int64_t p, const int64_t* nbs, const int64_t* key)
    void sd_upgma_merge_row(double* di, const double* dj, int64_t p, double si, double sj)
    int64_t sd_upgma_nearest(const double* row, const double* pen, int64_t a, int64_t p, const int64_t* key,
                             double* out)
    void sd_upgma_write_column(double* d, int64_t n, const int64_t* live, int64_t m, int64_t i, int64_t j,
                               const double* di, const int64_t* nbs, unsigned char* stale)
    void sd_nj_packed_row_sums(const double* P, int64_t m, double* R)
    void sd_nj_gather(const double* P, const double* V, int64_t m, int64_t i, int64_t j,
                      double* di, double* dj, double* vi, double* vj)
    void sd_nj_scatter(double* P, double* V, int64_t m, int64_t i, int64_t j, const double* newd,
                       const double* newv)


# one entry of a sorted row: a lower bound of the distance (float32) and the cluster it leads to
cdef struct Entry:
    float v
    int32_t id


# ------------------------------------------------------------------ sorting a row
cdef inline float _lower32(double d) noexcept nogil:
    # the largest float32 not above d (rounding to nearest may go up one step: then
    # one step down, on the bits: +inf -> the largest float, 0 -> the smallest negative)
    cdef float f = <float>d
    cdef uint32_t u
    if <double>f > d:
        memcpy(&u, &f, 4)
        if f > 0:
            u -= 1
        elif f == 0:
            u = 0x80000001
        else:
            u += 1
        memcpy(&f, &u, 4)
    return f


cdef inline uint32_t _order32(float v) noexcept nogil:
    # an unsigned integer in the order of the floats (negatives reversed, sign flipped)
    cdef uint32_t u
    memcpy(&u, &v, 4)
    if u >> 31:
        return ~u
    return u | (<uint32_t>1 << 31)


cdef inline float _from_order32(uint32_t u) noexcept nogil:
    cdef float v
    if u >> 31:
        u = u ^ (<uint32_t>1 << 31)
    else:
        u = ~u
    memcpy(&v, &u, 4)
    return v


cdef void _sort_row(const double* vals, const int64_t* ids, Py_ssize_t t, Entry* out,
                    uint64_t* ka, uint64_t* kb, int64_t* hist) noexcept nogil:
    """Write ``t`` entries (lower bound of ``vals[x]``, ``ids[x]``) to ``out`` in increasing order.

    Each item is one 64-bit integer: the bound's order bits above, the id below; a
    stable sort on the upper half (insertion sort for short rows, else least-significant
    digit radix passes over its four bytes, a pass skipped when every item has the same
    byte there). The order of equal bounds does not matter (the search is exact whatever
    it is, see build.py), but it is fixed by the input order, so runs repeat.
    ``ka``, ``kb`` hold ``t`` items each, ``hist`` 4 * 256 counts.
    """
    cdef Py_ssize_t x, y, s, tot, c
    cdef int p
    cdef uint64_t u
    cdef uint64_t* kt
    cdef int64_t* h
    for x in range(t):
        ka[x] = (<uint64_t>_order32(_lower32(vals[x])) << 32) | <uint64_t><uint32_t>ids[x]
    if t < 48:
        for x in range(1, t):
            u = ka[x]
            y = x - 1
            while y >= 0 and (ka[y] >> 32) > (u >> 32):
                ka[y + 1] = ka[y]
                y -= 1
            ka[y + 1] = u
    elif t > 0:
        memset(hist, 0, 4 * 256 * sizeof(int64_t))
        for x in range(t):
            u = ka[x] >> 32
            for p in range(4):
                hist[p * 256 + <Py_ssize_t>((u >> (8 * p)) & 255)] += 1
        for p in range(4):
            h = hist + p * 256
            if h[<Py_ssize_t>((ka[0] >> (32 + 8 * p)) & 255)] == t:
                continue  # every item has this byte
            tot = 0
            for s in range(256):
                c = h[s]
                h[s] = tot
                tot += c
            for x in range(t):
                u = ka[x]
                s = <Py_ssize_t>((u >> (32 + 8 * p)) & 255)
                kb[h[s]] = u
                h[s] += 1
            kt = ka
            ka = kb
            kb = kt
    for x in range(t):
        out[x].v = _from_order32(<uint32_t>(ka[x] >> 32))
        out[x].id = <int32_t><uint32_t>ka[x]  # the lower half


cdef inline bint _better(double q, double best, int64_t lo, int64_t hi, int64_t k0, int64_t k1) noexcept nogil:
    # the documented order: smaller Q, then smaller (min key, max key)
    return q < best or (q == best and (lo < k0 or (lo == k0 and hi < k1)))


cdef inline double _cell(const double* P, int64_t a, int64_t b) noexcept nogil:
    # the packed cell of slots a != b
    if a > b:
        return P[a * (a - 1) // 2 + b]
    return P[b * (b - 1) // 2 + a]


cdef int64_t _compact(Entry* E, int64_t* beg, int64_t* end, double* headv, int64_t* headid, const int64_t* slot_of,
                      int64_t n_ids) noexcept nogil:
    # the rows of live clusters moved down in cluster-id order (the order they lie in:
    # leaves first, then the clusters as they were made), without the entries of joined
    # clusters, their heads noted; returns the new top of the arena
    cdef int64_t w = 0, h, cid
    for cid in range(n_ids):
        if slot_of[cid] < 0:
            continue
        h = beg[cid]
        beg[cid] = w
        while h < end[cid]:
            if slot_of[E[h].id] >= 0:
                E[w] = E[h]
                w += 1
            h += 1
        end[cid] = w
        if beg[cid] < w:
            headv[cid] = <double>E[beg[cid]].v
            headid[cid] = E[beg[cid]].id
        else:
            headv[cid] = INFINITY
    return w


# ------------------------------------------------------------------ neighbor joining
def nj_arena_size(Py_ssize_t n):
    """Entries of the sorted rows' arena for ``n`` taxa (each pair once, plus 1/32 room to grow)."""
    cdef int64_t pairs = <int64_t>n * (n - 1) // 2
    return pairs + pairs // 32 + 2 * n + 64


def nj_kernel(double[::1] P, Py_ssize_t n, bint bionj, bint sorted_rows):
    """Neighbor joining / BIONJ on the packed strictly lower triangle ``P`` of a
    symmetric (n, n) matrix (overwritten): the distance of taxa a > b is
    ``P[a (a - 1) / 2 + b]``.

    Returns ``(kids, lens, last3, len3)``: the two ids joined at each step (new
    clusters take ids n, n + 1, ...) and their branch lengths, then the three ids
    left and their lengths. ``sorted_rows`` chooses the search (see build.py); both
    pick the same pair at every step.
    """
    cdef int64_t npairs = <int64_t>n * (n - 1) // 2 if n > 1 else 0
    if P.shape[0] != npairs:
        raise ValueError(f"expected {npairs} packed distances for {n} taxa, got {P.shape[0]}")
    cdef Py_ssize_t steps = n - 3 if n > 3 else 0
    kids_a = np.empty((steps, 2), dtype=np.int64)
    lens_a = np.empty((steps, 2))
    last3_a = np.zeros(3, dtype=np.int64)
    len3_a = np.zeros(3)
    if n < 3:
        return kids_a, lens_a, last3_a, len3_a
    # BIONJ's variances start as the distances
    V_a = np.array(P, copy=True) if bionj else np.zeros(1)
    # the sorted rows: one arena of entries, each cluster's row a range of it
    cdef int64_t cap = nj_arena_size(n) if sorted_rows else 1
    E_a = np.empty(2 * cap, dtype=np.int32)
    # work arrays carved out of three blocks (a numpy allocation costs a few microseconds)
    iw_a = np.empty(13 * n + 1024, dtype=np.int64)
    dw_a = np.empty(14 * n)
    kw_a = np.empty(2 * n + 2, dtype=np.uint64)
    cdef int64_t[:, ::1] kids_v = kids_a
    cdef double[:, ::1] lens_v = lens_a
    cdef int64_t[::1] last3_v = last3_a
    cdef double[::1] len3_v = len3_a
    cdef int64_t[::1] iw_v = iw_a
    cdef double[::1] dw_v = dw_a
    cdef uint64_t[::1] kw_v = kw_a
    cdef double[::1] V_v = V_a
    cdef int32_t[::1] E_v = E_a
    # raw pointers in the loops (a memoryview's data pointer is reloaded at every use)
    cdef int64_t* kids = &kids_v[0, 0] if steps > 0 else NULL
    cdef double* lens = &lens_v[0, 0] if steps > 0 else NULL
    cdef int64_t* ids = &iw_v[0]  # cluster id per slot
    cdef int64_t* key = ids + n  # smallest leaf position per slot (tie-breaks)
    cdef int64_t* slot_of = key + n  # slot per cluster id (2n), -1 once joined
    cdef int64_t* beg = slot_of + 2 * n  # per cluster id: its sorted row is E[beg:end]
    cdef int64_t* end = beg + 2 * n
    cdef int64_t* tmpi = end + 2 * n
    cdef int64_t* headid = tmpi + n  # per cluster id: the id its row's head entry leads to
    cdef int64_t* cand = headid + 2 * n  # the slots whose rows may hold the best pair
    cdef int64_t* hist = cand + n  # radix-sort counts (1024)
    cdef double* R = &dw_v[0]  # row sums per slot
    cdef double* newd = R + n
    cdef double* newv = newd + n
    cdef double* Rid = newv + n  # row sum per cluster id (2n), -inf once joined
    cdef double* headv = Rid + 2 * n  # per cluster id: its row's head entry's bound
    cdef double* tmpv = headv + 2 * n
    cdef double* xi = tmpv + n  # the full rows of the two slots joined
    cdef double* xj = xi + n
    cdef double* yi = xj + n  # and their variances
    cdef double* yj = yi + n
    cdef uint64_t* ka = &kw_v[0]
    cdef uint64_t* kb = ka + n + 1
    cdef Entry* E = <Entry*>&E_v[0]
    cdef double* P0 = &P[0]
    cdef double* V0 = &V_v[0] if bionj else NULL

    cdef Py_ssize_t m = n, a, b, k, t = 0, step, i, j, bi, bj, last, o0, o1, compact_at, nc, x
    cdef int64_t k0, k1, ka_, kb_, lo, hi, h, hend, top = 0, cid
    cdef double s, c, best, bestl, ra, rmax, base, d, dl, q, ql, dij, li, lj, lam, vij, dk, ru
    cdef Entry* row
    with nogil:
        for a in range(n):
            ids[a] = a
            key[a] = a
            slot_of[a] = a
            slot_of[n + a] = -1
            Rid[a] = -INFINITY
            Rid[n + a] = -INFINITY
            beg[a] = 0
            end[a] = 0
            beg[n + a] = 0
            end[n + a] = 0
            headv[a] = INFINITY
            headv[n + a] = INFINITY
            headid[a] = 0
            headid[n + a] = 0
        sd_nj_packed_row_sums(P0, n, R)
        if sorted_rows:
            # each pair once, in the row of its larger position (the leaves' rows are the
            # packed rows themselves, so they lie in the arena as in P)
            for a in range(n):
                for b in range(a):
                    tmpi[b] = b
                _sort_row(P0 + a * (a - 1) // 2, tmpi, a, E + top, ka, kb, hist)
                beg[a] = top
                end[a] = top + a
                if a > 0:
                    headv[a] = <double>E[top].v
                    headid[a] = E[top].id
                top += a
        compact_at = n // 2
        for step in range(steps):
            if step > 0 and step % 64 == 0:
                sd_nj_packed_row_sums(P0, m, R)
            c = m - 2.0
            best = INFINITY
            bi = -1
            bj = -1
            k0 = n
            k1 = n
            if not sorted_rows:
                for a in range(1, m):
                    ra = R[a]
                    # the vectorised row minimum first; the exact scan with index
                    # and tie-break only runs for rows that can win
                    if sd_nj_row_qmin(P0 + a * (a - 1) // 2, R, a, c, ra) > best:
                        continue
                    ka_ = key[a]
                    for b in range(a):
                        q = c * P0[a * (a - 1) // 2 + b] - (ra + R[b])
                        if q <= best:
                            kb_ = key[b]
                            lo = ka_ if ka_ < kb_ else kb_
                            hi = ka_ if ka_ > kb_ else kb_
                            if _better(q, best, lo, hi, k0, k1):
                                best = q
                                bi = b
                                bj = a
                                k0 = lo
                                k1 = hi
            else:
                if m <= compact_at:
                    # drop the entries of joined clusters (order is kept)
                    top = _compact(E, beg, end, headv, headid, slot_of, n + step)
                    compact_at = m // 2
                rmax = -INFINITY
                for a in range(m):
                    if R[a] > rmax:
                        rmax = R[a]
                    Rid[ids[a]] = R[a]
                # A first best: the row whose nearest live entry has the smallest bound of
                # Q, and that pair's exact Q. Each row's head entry (its bound and where it
                # leads) is kept beside the cluster, so only a row whose head has just been
                # joined is read here, to find its next live entry.
                bestl = INFINITY
                o0 = -1
                for a in range(m):
                    cid = ids[a]
                    h = beg[cid]
                    hend = end[cid]
                    if h >= hend:
                        continue
                    if slot_of[headid[cid]] < 0:
                        h += 1
                        while h < hend and slot_of[E[h].id] < 0:
                            h += 1
                        beg[cid] = h
                        if h >= hend:
                            headv[cid] = INFINITY
                            continue
                        headv[cid] = <double>E[h].v
                        headid[cid] = E[h].id
                    ql = c * headv[cid] - (R[a] + Rid[headid[cid]])
                    if ql < bestl:
                        bestl = ql
                        o0 = a
                if o0 >= 0:
                    a = o0
                    b = slot_of[headid[ids[a]]]
                    best = c * _cell(P0, a, b) - (R[a] + R[b])
                    bi = a
                    bj = b
                    k0 = key[a] if key[a] < key[b] else key[b]
                    k1 = key[a] if key[a] > key[b] else key[b]
                # the heads' bounds first: most rows stop there without being read (a row
                # dismissed now stays dismissed, as the best only gets better); the others
                # lie far apart in the arena and are asked for a few rows ahead
                nc = 0
                for a in range(m):
                    if c * headv[ids[a]] - (R[a] + rmax) <= best:
                        cand[nc] = a
                        nc += 1
                for x in range(nc):
                    if x + 4 < nc:
                        sd_prefetch(E + beg[ids[cand[x + 4]]])
                    a = cand[x]
                    cid = ids[a]
                    ra = R[a]
                    base = ra + rmax
                    if c * headv[cid] - base > best:
                        continue
                    row = E + beg[cid]
                    hend = end[cid] - beg[cid]
                    ka_ = key[a]
                    for h in range(hend):
                        dl = <double>row[h].v
                        # the entries are bounds in increasing order, and rounding is
                        # monotone: no later entry of this row has a Q below this
                        if c * dl - base > best:
                            break
                        # a bound of this entry's Q; a joined cluster's row sum is -inf
                        # here, so its bound is +inf
                        ql = c * dl - (ra + Rid[row[h].id])
                        if ql <= best:
                            b = slot_of[row[h].id]
                            if b < 0:
                                continue
                            q = c * _cell(P0, a, b) - (ra + R[b])
                            if q <= best:
                                kb_ = key[b]
                                lo = ka_ if ka_ < kb_ else kb_
                                hi = ka_ if ka_ > kb_ else kb_
                                if _better(q, best, lo, hi, k0, k1):
                                    best = q
                                    bi = a
                                    bj = b
                                    k0 = lo
                                    k1 = hi
                if bi > bj:
                    bi, bj = bj, bi
            if bi < 0:  # every Q is NaN: cannot happen on a valid matrix
                bi = 0
                bj = 1
            if m == 4:
                # With four clusters Q(i, j) = Q(k, l) for complementary pairs
                # (exactly, in real arithmetic): both give the same split, so
                # rounding must not decide; join the pair with the smaller keys.
                o0 = -1
                o1 = -1
                for a in range(4):
                    if a != bi and a != bj:
                        if o0 < 0:
                            o0 = a
                        else:
                            o1 = a
                ka_ = key[o0] if key[o0] < key[o1] else key[o1]
                kb_ = key[o0] if key[o0] > key[o1] else key[o1]
                if ka_ < k0 or (ka_ == k0 and kb_ < k1):
                    bi = o0
                    bj = o1
            i = bi
            j = bj  # i < j
            # the two rows in full (and their variances), from the packed triangles
            sd_nj_gather(P0, V0, m, i, j, xi, xj, yi, yj)
            dij = xi[j]
            li = 0.5 * dij + (R[i] - R[j]) / (2.0 * c)
            lj = dij - li
            lam = 0.5
            vij = 0.0
            if bionj:
                vij = yi[j]
                if vij > 0.0:
                    s = 0.0
                    for k in range(m):
                        if k != i and k != j:
                            s += yj[k] - yi[k]
                    lam = 0.5 + s / (2.0 * c * vij)
                    if lam < 0.0:
                        lam = 0.0
                    elif lam > 1.0:
                        lam = 1.0
            ru = 0.0
            for k in range(m):
                if k == i or k == j:
                    continue
                if bionj:
                    dk = lam * (xi[k] - li) + (1.0 - lam) * (xj[k] - lj)
                    newv[k] = lam * yi[k] + (1.0 - lam) * yj[k] - lam * (1.0 - lam) * vij
                else:
                    dk = 0.5 * (xi[k] + xj[k] - dij)
                newd[k] = dk
                R[k] += dk - xi[k] - xj[k]
                ru += dk
            kids[2 * step] = ids[i]
            kids[2 * step + 1] = ids[j]
            lens[2 * step] = li
            lens[2 * step + 1] = lj
            if sorted_rows:
                # the new cluster's row: every other live cluster (by id, so the slot move
                # below does not matter)
                t = 0
                for k in range(m):
                    if k != i and k != j:
                        tmpv[t] = newd[k]
                        tmpi[t] = ids[k]
                        t += 1
            # the new cluster takes slot i, the last active slot moves into slot j
            last = m - 1
            sd_nj_scatter(P0, V0, m, i, j, newd, newv)
            R[i] = ru
            if sorted_rows:
                slot_of[ids[i]] = -1
                slot_of[ids[j]] = -1
                Rid[ids[i]] = -INFINITY
                Rid[ids[j]] = -INFINITY
                slot_of[n + step] = i
            ids[i] = n + step
            if key[j] < key[i]:
                key[i] = key[j]
            if j != last:
                R[j] = R[last]
                ids[j] = ids[last]
                key[j] = key[last]
                if sorted_rows:
                    slot_of[ids[j]] = j
            m -= 1
            if sorted_rows:
                if top + t > cap:
                    # room for the new row: drop the rows and entries of joined clusters
                    top = _compact(E, beg, end, headv, headid, slot_of, n + step)
                _sort_row(tmpv, tmpi, t, E + top, ka, kb, hist)
                beg[n + step] = top
                end[n + step] = top + t
                if t > 0:
                    headv[n + step] = <double>E[top].v
                    headid[n + step] = E[top].id
                top += t
        # the three that remain meet at one node (three-point formula)
        d = P0[0]  # slots 0 and 1
        dk = P0[1]  # 0 and 2
        dij = P0[2]  # 1 and 2
        len3_v[0] = 0.5 * (d + dk - dij)
        len3_v[1] = 0.5 * (d + dij - dk)
        len3_v[2] = 0.5 * (dk + dij - d)
        for a in range(3):
            last3_v[a] = ids[a]
    return kids_a, lens_a, last3_a, len3_a


# ------------------------------------------------------------------ UPGMA
def upgma_kernel(double[:, ::1] D):
    """UPGMA on the (n, n) array D (overwritten).

    Returns ``(kids, hts)``: the two ids joined at each step (new clusters take
    ids n, n + 1, ...) and the height of the node made (half the joining distance).

    Slots do not move: the merged cluster stays in the slot of the member that the
    slot-moving scheme of build.py would keep (the lower slot there, followed as a
    "virtual" slot so the two ids of each step come in the same order); the other
    slot dies (+inf in ``pen``, left out of the sorted list ``live``), and the
    live slots are packed together whenever half of the slots are dead. Only the
    new cluster's column is written into the other rows (a write per row, the
    costly part at large n), where moving a slot costs two more. The choice at
    each step depends only on the values and the keys, never on where a cluster
    sits, so the joins are those of the slot-moving scheme, to the bit.
    """
    cdef Py_ssize_t n = D.shape[0]
    if D.shape[1] != n:
        raise ValueError(f"expected a square matrix, got shape ({n}, {D.shape[1]})")
    cdef Py_ssize_t steps = n - 1 if n > 1 else 0
    kids_a = np.empty((steps, 2), dtype=np.int64)
    hts_a = np.empty(steps)
    if n < 2:
        return kids_a, hts_a
    # work arrays carved out of three blocks (a numpy allocation costs a few microseconds)
    iw_a = np.empty(7 * n, dtype=np.int64)
    dw_a = np.empty(3 * n)
    stale_a = np.empty(n, dtype=np.uint8)
    cdef int64_t[:, ::1] kids_v = kids_a
    cdef double[::1] hts_v = hts_a
    cdef int64_t[::1] iw_v = iw_a
    cdef double[::1] dw_v = dw_a
    cdef unsigned char[::1] stale_v = stale_a
    # raw pointers in the loops (a memoryview's data pointer is reloaded at every use)
    cdef int64_t* kids = &kids_v[0, 0]
    cdef double* hts = &hts_v[0]
    cdef int64_t* ids = &iw_v[0]  # cluster id per slot
    cdef int64_t* key = ids + n  # smallest leaf position per slot (tie-breaks)
    cdef int64_t* nbs = key + n  # cached nearest neighbour's slot per slot
    cdef int64_t* vslot = nbs + n  # slot of the slot-moving scheme
    cdef int64_t* vphys = vslot + n  # and its inverse
    cdef int64_t* live = vphys + n  # the live slots, increasing
    cdef int64_t* newidx = live + n
    cdef double* size = &dw_v[0]  # leaves per cluster
    cdef double* nbv = size + n  # cached nearest-neighbour distance per slot
    cdef double* pen = nbv + n  # 0 for a live slot, +inf for a dead one
    cdef unsigned char* stale = &stale_v[0]
    cdef double* D0 = &D[0, 0]
    cdef Py_ssize_t m = n, p = n, a, b, k, t, lo_, hi_, mid, r, step, bi, i, j, vj, q, na
    cdef int64_t ki
    cdef double v, si, sj, ssum
    cdef double* Di
    cdef double* Dj
    cdef double* Dk
    cdef const double* src
    cdef bint bad = False
    with nogil:
        for a in range(n):
            ids[a] = a
            key[a] = a
            vslot[a] = a
            vphys[a] = a
            live[a] = a
            size[a] = 1.0
            pen[a] = 0.0
        for a in range(n):
            nbs[a] = sd_upgma_nearest(D0 + a * n, pen, a, p, key, &nbv[a])
        for step in range(steps):
            # the best pair from the cached row minima: smallest distance, then
            # smallest (min key, max key)
            bi = sd_upgma_best(nbv, pen, p, nbs, key)
            if bi < 0:  # no finite distance left: cannot happen on a valid matrix
                bad = True
                break
            i = bi
            j = nbs[bi]
            if vslot[j] < vslot[i]:
                i, j = j, i
            kids[2 * step] = ids[i]
            kids[2 * step + 1] = ids[j]
            Di = D0 + i * n
            Dj = D0 + j * n
            hts[step] = 0.5 * Di[j]
            if m == 2:
                break
            si = size[i]
            sj = size[j]
            ssum = si + sj
            # the merged cluster's row over every slot (no branch, so it is SIMD code;
            # dead and own slots get values nobody reads), then its column in the
            # live rows
            sd_upgma_merge_row(Di, Dj, p, si, sj)
            sd_upgma_write_column(D0, n, live, m, i, j, Di, nbs, stale)
            size[i] = ssum
            ids[i] = n + step
            if key[j] < key[i]:
                key[i] = key[j]
            pen[j] = INFINITY
            # j leaves the sorted live list
            lo_ = 0
            hi_ = m - 1
            while lo_ < hi_:
                mid = (lo_ + hi_) // 2
                if live[mid] < j:
                    lo_ = mid + 1
                else:
                    hi_ = mid
            memmove(live + lo_, live + lo_ + 1, (m - 1 - lo_) * sizeof(int64_t))
            # the slot-moving scheme moves its last slot into j's
            vj = vslot[j]
            if vj != m - 1:
                q = vphys[m - 1]
                vslot[q] = vj
                vphys[vj] = q
            m -= 1
            # A cached minimum stays right unless its partner was merged; the
            # merged cluster may become a row's new nearest neighbour. D(a, i)
            # is read from row i (the same value: the column was written from it).
            ki = key[i]
            for t in range(m):
                a = live[t]
                if a == i:
                    continue
                if stale[a]:
                    nbs[a] = sd_upgma_nearest(D0 + a * n, pen, a, p, key, &nbv[a])
                else:
                    na = nbs[a]
                    if na >= 0:
                        v = Di[a]
                        if v < nbv[a] or (v == nbv[a] and ki < key[na]):
                            nbv[a] = v
                            nbs[a] = i
            nbs[i] = sd_upgma_nearest(Di, pen, i, p, key, &nbv[i])
            if 2 * m <= p:
                # pack the live slots (in slot order, so a row is never overwritten
                # before it is read)
                for r in range(m):
                    newidx[live[r]] = r
                for r in range(m):
                    a = live[r]
                    src = D0 + a * n
                    Dk = D0 + r * n
                    for b in range(m):
                        Dk[b] = src[live[b]]
                    ids[r] = ids[a]
                    key[r] = key[a]
                    size[r] = size[a]
                    nbv[r] = nbv[a]
                    nbs[r] = newidx[nbs[a]] if nbs[a] >= 0 else -1
                    vslot[r] = vslot[a]
                    pen[r] = 0.0
                for r in range(m):
                    vphys[r] = newidx[vphys[r]]
                    live[r] = r
                p = m
    if bad:
        raise ValueError("no finite distance left between the clusters")
    return kids_a, hts_a
