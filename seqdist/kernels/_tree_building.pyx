# cython: language_level=3, boundscheck=False, wraparound=False, cdivision=True, initializedcheck=False
"""Compiled part of :mod:`seqdist.kernels.tree_building` (the methods are described in
:mod:`seqdist.trees.build`).

Both kernels work in place on the C-contiguous float64 array they are given and run
without the GIL on one thread: each join depends on the one before, and a barrier per
join loses on a shared machine.

Every floating-point value is computed by the same operations in the same order as the
numba kernels they replace (the build does not contract ``a*b+c``), and every choice
follows the same rule, so the joins and lengths are the same to the last bit (the
tests compare both with plain references; the port was checked against the numba
kernels on integer, few-valued, tied and tree-like matrices). What changed is where
values are read and written:

* neighbor joining keeps the active clusters in the first ``m`` slots (the merged
  cluster takes the lower slot, the last active slot moves into the freed one); the
  new cluster's column and the moved column are written in one pass over the rows;
* UPGMA moves no slot (see :func:`upgma_kernel`): only the new column is written;
* those column writes touch one far-apart cache line per row, which no hardware
  prefetcher foresees: the rows a few steps ahead are asked for early (the same for
  the heads of the sorted rows); at n = 5000 this halves UPGMA's time;
* the sorted-row search reads the row sums by cluster id (joined clusters hold -inf,
  which makes their Q +inf) instead of id -> slot -> row sum, so the common path has
  one indirect load and no branch on whether an entry is still live;
* rows are sorted by a radix sort of the values' bit patterns (the order of equal
  values does not matter: the search is exact whatever that order, see build.py);
* the row minima, the row sums (eight rows side by side, each summed in order), the
  column writes and UPGMA's merged row are C in ``src/tree_building.h``.
"""

import numpy as np

from libc.math cimport INFINITY
from libc.stdint cimport int32_t, int64_t, uint64_t
from libc.string cimport memcpy, memmove, memset


cdef extern from "src/tree_building.h" nogil:
    void sd_prefetch(const void* p)
    double sd_nj_row_qmin(const double* row, const double* R, int64_t a, double c, double ra)
    int64_t sd_upgma_best(const double* nbv, const double* pen, int64_t p, const int64_t* nbs, const int64_t* key)
    void sd_upgma_merge_row(double* di, const double* dj, int64_t p, double si, double sj)
    int64_t sd_upgma_nearest(const double* row, const double* pen, int64_t a, int64_t p, const int64_t* key,
                             double* out)
    void sd_row_sums(const double* d, int64_t stride, int64_t m, double* R)
    void sd_nj_write_columns(double* d, int64_t n, int64_t m, int64_t i, int64_t j, int64_t last,
                             const double* newd)
    void sd_upgma_write_column(double* d, int64_t n, const int64_t* live, int64_t m, int64_t i, int64_t j,
                               const double* di, const int64_t* nbs, unsigned char* stale)


# ------------------------------------------------------------------ sorting a row
cdef inline uint64_t _order_bits(double v) noexcept nogil:
    # an unsigned integer in the order of the doubles (negatives reversed, sign flipped)
    cdef uint64_t u
    memcpy(&u, &v, 8)
    if u >> 63:
        return ~u
    return u | (<uint64_t>1 << 63)


cdef inline double _from_order_bits(uint64_t u) noexcept nogil:
    cdef double v
    if u >> 63:
        u = u ^ (<uint64_t>1 << 63)
    else:
        u = ~u
    memcpy(&v, &u, 8)
    return v


cdef void _radix(uint64_t** ka, uint64_t** kb, int32_t** ia, int32_t** ib, Py_ssize_t t, int64_t* hist,
                 int p0) noexcept nogil:
    # stable least-significant-digit radix passes over bytes p0 .. 7 of the keys in ka[0]
    # (ids in ia[0]), a pass skipped when every key has the same byte there; the result
    # ends in ka[0] / ia[0] (the buffers are swapped as the passes go)
    cdef Py_ssize_t x, s, tot, c
    cdef int p
    cdef uint64_t u
    cdef uint64_t* kt
    cdef int32_t* it
    cdef int64_t* h
    memset(hist, 0, 8 * 256 * sizeof(int64_t))
    for x in range(t):
        u = ka[0][x]
        for p in range(p0, 8):
            hist[p * 256 + <Py_ssize_t>((u >> (8 * p)) & 255)] += 1
    for p in range(p0, 8):
        h = hist + p * 256
        if h[<Py_ssize_t>((ka[0][0] >> (8 * p)) & 255)] == t:
            continue  # every key has this byte
        tot = 0
        for s in range(256):
            c = h[s]
            h[s] = tot
            tot += c
        for x in range(t):
            u = ka[0][x]
            s = <Py_ssize_t>((u >> (8 * p)) & 255)
            kb[0][h[s]] = u
            ib[0][h[s]] = ia[0][x]
            h[s] += 1
        kt = ka[0]
        ka[0] = kb[0]
        kb[0] = kt
        it = ia[0]
        ia[0] = ib[0]
        ib[0] = it


cdef bint _insertion(uint64_t* ka, int32_t* ia, Py_ssize_t t, Py_ssize_t budget) noexcept nogil:
    # stable insertion sort of the keys (with their ids); gives up (False) after
    # `budget` moves, leaving a permutation of the items
    cdef Py_ssize_t x, y, moves = 0
    cdef uint64_t u
    cdef int32_t idx
    for x in range(1, t):
        u = ka[x]
        if ka[x - 1] <= u:
            continue
        idx = ia[x]
        y = x - 1
        while y >= 0 and ka[y] > u:
            ka[y + 1] = ka[y]
            ia[y + 1] = ia[y]
            y -= 1
            moves += 1
        ka[y + 1] = u
        ia[y + 1] = idx
        if moves > budget:
            return False
    return True


cdef void _sort_row(const double* vals, const int64_t* ids, Py_ssize_t t, double* out_v, int32_t* out_i,
                    uint64_t* ka, uint64_t* kb, int32_t* ia, int32_t* ib, int64_t* hist) noexcept nogil:
    """Sort ``vals`` (with their ``ids``) increasingly into ``out_v`` / ``out_i``.

    The doubles are mapped to integers in the same order, then: short rows by
    insertion sort; longer ones by a radix sort on the top four bytes (sign,
    exponent, 20 bits of mantissa), which leaves only runs of keys that agree
    there, put in order by an insertion sort; should that need many moves (values
    that agree in their first 32 bits but not in the rest), by a full radix sort.
    Every route gives the same result: a stable sort on the whole key.
    ``ka``, ``kb``, ``ia``, ``ib`` hold ``t`` items each, ``hist`` 8 * 256 counts.
    """
    cdef Py_ssize_t x
    for x in range(t):
        ka[x] = _order_bits(vals[x])
        ia[x] = <int32_t>ids[x]
    if t < 48:
        _insertion(ka, ia, t, t * t)
    else:
        _radix(&ka, &kb, &ia, &ib, t, hist, 4)
        if not _insertion(ka, ia, t, 2 * t + 64):
            _radix(&ka, &kb, &ia, &ib, t, hist, 0)
    for x in range(t):
        out_v[x] = _from_order_bits(ka[x])
        out_i[x] = ia[x]


cdef inline bint _better(double q, double best, int64_t lo, int64_t hi, int64_t k0, int64_t k1) noexcept nogil:
    # the documented order: smaller Q, then smaller (min key, max key)
    return q < best or (q == best and (lo < k0 or (lo == k0 and hi < k1)))


# ------------------------------------------------------------------ neighbor joining
def nj_kernel(double[:, ::1] D, double[:, ::1] V, bint bionj, bint sorted_rows):
    """Neighbor joining / BIONJ on the (n, n) array D (overwritten); V is BIONJ's
    variance matrix (a copy of D, overwritten; unused otherwise).

    Returns ``(kids, lens, last3, len3)``: the two ids joined at each step (new
    clusters take ids n, n + 1, ...) and their branch lengths, then the three ids
    left and their lengths. ``sorted_rows`` chooses the search (see build.py); both
    pick the same pair at every step.
    """
    cdef Py_ssize_t n = D.shape[0]
    if D.shape[1] != n:
        raise ValueError(f"expected a square matrix, got shape ({n}, {D.shape[1]})")
    if bionj and (V.shape[0] != n or V.shape[1] != n):
        raise ValueError("bionj needs a variance matrix of the shape of D")
    cdef Py_ssize_t steps = n - 3 if n > 3 else 0
    cdef Py_ssize_t ns = n if sorted_rows else 1
    kids_a = np.empty((steps, 2), dtype=np.int64)
    lens_a = np.empty((steps, 2))
    last3_a = np.zeros(3, dtype=np.int64)
    len3_a = np.zeros(3)
    if n == 0:
        return kids_a, lens_a, last3_a, len3_a
    # work arrays carved out of three blocks (a numpy allocation costs a few microseconds)
    iw_a = np.empty(9 * n + 3 * ns + 2048, dtype=np.int64)
    dw_a = np.empty(8 * n)
    i32_a = np.empty(2 * n, dtype=np.int32)
    SV_a = np.empty((ns, ns))  # each row's distances, increasing (sorted search)
    SI_a = np.empty((ns, ns), dtype=np.int32)  # and the ids they lead to
    cdef int64_t[:, ::1] kids_v = kids_a
    cdef double[:, ::1] lens_v = lens_a
    cdef int64_t[::1] last3_v = last3_a
    cdef double[::1] len3_v = len3_a
    cdef int64_t[::1] iw_v = iw_a
    cdef double[::1] dw_v = dw_a
    cdef int32_t[::1] i32_v = i32_a
    cdef double[:, ::1] SV_v = SV_a
    cdef int32_t[:, ::1] SI_v = SI_a
    # raw pointers in the loops (a memoryview's data pointer is reloaded at every use)
    cdef int64_t* kids = &kids_v[0, 0] if steps > 0 else NULL
    cdef double* lens = &lens_v[0, 0] if steps > 0 else NULL
    cdef int64_t* ids = &iw_v[0]  # cluster id per slot
    cdef int64_t* key = ids + n  # smallest leaf position per slot (tie-breaks)
    cdef int64_t* slot_of = key + n  # slot per cluster id (2n), -1 once joined
    cdef int64_t* tmpi = slot_of + 2 * n
    cdef uint64_t* ka = <uint64_t*>(tmpi + n)  # radix-sort buffers
    cdef uint64_t* kb = ka + n
    cdef int64_t* hist = <int64_t*>(kb + n)
    cdef int64_t* length = hist + 2048  # per storage row (sorted search)
    cdef int64_t* head = length + ns
    cdef int64_t* store = head + ns  # storage row per slot
    cdef double* R = &dw_v[0]  # row sums per slot
    cdef double* newd = R + n
    cdef double* newv = newd + n
    cdef double* Rid = newv + n  # row sum per cluster id (2n), -inf once joined
    cdef double* tmpv = Rid + 2 * n
    cdef int32_t* ia = &i32_v[0]
    cdef int32_t* ib = ia + n
    cdef double* SV = &SV_v[0, 0]
    cdef int32_t* SI = &SI_v[0, 0]
    cdef double* D0 = &D[0, 0]
    cdef double* V0 = &V[0, 0] if bionj else NULL

    cdef Py_ssize_t m = n, a, b, k, t, h, hend, st, step, i, j, bi, bj, last, o0, o1, compact_at
    cdef int64_t k0, k1, ka_, kb_, lo, hi
    cdef double s, c, best, ra, rmax, base, d, q, dij, li, lj, lam, vij, dk, ru
    cdef double* row
    cdef double* Di
    cdef double* Dj
    cdef double* Vi = NULL
    cdef double* Vj = NULL
    cdef double* sv
    cdef int32_t* si
    with nogil:
        for a in range(n):
            ids[a] = a
            key[a] = a
            slot_of[a] = a
            slot_of[n + a] = -1
            Rid[a] = -INFINITY
            Rid[n + a] = -INFINITY
        for a in range(ns):
            length[a] = 0
            head[a] = 0
            store[a] = a
        sd_row_sums(D0, n, n, R)
        if sorted_rows:
            for a in range(n):
                t = 0
                row = D0 + a * n
                for b in range(n):
                    if b != a:
                        tmpv[t] = row[b]
                        tmpi[t] = b
                        t += 1
                _sort_row(tmpv, tmpi, t, SV + a * ns, SI + a * ns, ka, kb, ia, ib, hist)
                length[a] = t
        compact_at = n // 2
        for step in range(steps):
            if step > 0 and step % 64 == 0:
                sd_row_sums(D0, n, m, R)
            c = m - 2.0
            best = INFINITY
            bi = -1
            bj = -1
            k0 = n
            k1 = n
            if not sorted_rows:
                for a in range(1, m):
                    row = D0 + a * n
                    ra = R[a]
                    # the vectorised row minimum first; the exact scan with index
                    # and tie-break only runs for rows that can win
                    if sd_nj_row_qmin(row, R, a, c, ra) > best:
                        continue
                    ka_ = key[a]
                    for b in range(a):
                        q = c * row[b] - (ra + R[b])
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
                    for a in range(m):
                        st = store[a]
                        sv = SV + st * ns
                        si = SI + st * ns
                        t = 0
                        for h in range(head[st], length[st]):
                            if slot_of[si[h]] >= 0:
                                sv[t] = sv[h]
                                si[t] = si[h]
                                t += 1
                        length[st] = t
                        head[st] = 0
                    compact_at = m // 2
                rmax = -INFINITY
                for a in range(m):
                    if R[a] > rmax:
                        rmax = R[a]
                    Rid[ids[a]] = R[a]
                # a first best from each row's nearest live entry (rows lie far
                # apart: the heads of the rows a few steps ahead are asked for early)
                for a in range(m):
                    if a + 8 < m:
                        st = store[a + 8]
                        sd_prefetch(SI + st * ns + head[st])
                        sd_prefetch(SV + st * ns + head[st])
                    st = store[a]
                    si = SI + st * ns
                    h = head[st]
                    hend = length[st]
                    while h < hend and slot_of[si[h]] < 0:
                        h += 1
                    head[st] = h
                    if h < hend:
                        b = slot_of[si[h]]
                        q = c * SV[st * ns + h] - (R[a] + R[b])
                        lo = key[a] if key[a] < key[b] else key[b]
                        hi = key[a] if key[a] > key[b] else key[b]
                        if _better(q, best, lo, hi, k0, k1):
                            best = q
                            bi = a
                            bj = b
                            k0 = lo
                            k1 = hi
                for a in range(m):
                    st = store[a]
                    sv = SV + st * ns
                    si = SI + st * ns
                    ra = R[a]
                    base = ra + rmax
                    ka_ = key[a]
                    hend = length[st]
                    for h in range(head[st], hend):
                        d = sv[h]
                        # rounding is monotone: this bound never exceeds a computed Q
                        if c * d - base > best:
                            break
                        # a joined cluster's row sum is -inf here, so its Q is +inf
                        q = c * d - (ra + Rid[si[h]])
                        if q <= best:
                            b = slot_of[si[h]]
                            if b < 0:
                                continue
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
            Di = D0 + i * n
            Dj = D0 + j * n
            dij = Di[j]
            li = 0.5 * dij + (R[i] - R[j]) / (2.0 * c)
            lj = dij - li
            lam = 0.5
            vij = 0.0
            if bionj:
                Vi = V0 + i * n
                Vj = V0 + j * n
                vij = Vi[j]
                if vij > 0.0:
                    s = 0.0
                    for k in range(m):
                        if k != i and k != j:
                            s += Vj[k] - Vi[k]
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
                    dk = lam * (Di[k] - li) + (1.0 - lam) * (Dj[k] - lj)
                    newv[k] = lam * Vi[k] + (1.0 - lam) * Vj[k] - lam * (1.0 - lam) * vij
                else:
                    dk = 0.5 * (Di[k] + Dj[k] - dij)
                newd[k] = dk
                R[k] += dk - Di[k] - Dj[k]
                ru += dk
            kids[2 * step] = ids[i]
            kids[2 * step + 1] = ids[j]
            lens[2 * step] = li
            lens[2 * step + 1] = lj
            # the new cluster takes slot i, the last active slot moves into slot j:
            # rows i and j first, then both columns in one pass over the rows
            last = m - 1
            for k in range(m):
                if k != i and k != j:
                    Di[k] = newd[k]
            Di[j] = 0.0
            if j != last:
                memcpy(Dj, D0 + last * n, m * sizeof(double))
                Dj[i] = newd[last]
                Dj[j] = 0.0
                Di[j] = newd[last]
            if bionj:
                for k in range(m):
                    if k != i and k != j:
                        Vi[k] = newv[k]
                Vi[j] = 0.0
                if j != last:
                    memcpy(Vj, V0 + last * n, m * sizeof(double))
                    Vj[i] = newv[last]
                    Vj[j] = 0.0
                    Vi[j] = newv[last]
            sd_nj_write_columns(D0, n, m, i, j, last, newd)
            if bionj:
                sd_nj_write_columns(V0, n, m, i, j, last, newv)
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
                    store[j] = store[last]
                    slot_of[ids[j]] = j
            m -= 1
            if sorted_rows:
                # the new cluster's row: every other live cluster, sorted
                t = 0
                for k in range(m):
                    if k != i:
                        tmpv[t] = Di[k]
                        tmpi[t] = ids[k]
                        t += 1
                st = store[i]
                _sort_row(tmpv, tmpi, t, SV + st * ns, SI + st * ns, ka, kb, ia, ib, hist)
                length[st] = t
                head[st] = 0
        # the three that remain meet at one node (three-point formula)
        if n >= 3:
            d = D0[1]
            dk = D0[2]
            dij = D0[n + 2]
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
