"""Compiled kernels of the tree builders (see :mod:`seqdist.trees.build`).

Imported lazily: numba costs start-up time and memory. Each kernel works in
place on the array it is given (the caller passes a private copy) and is
tested against plain references (Biopython, scipy) in tests/test_trees*.py.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["nj_kernel", "upgma_kernel"]


@njit(cache=True, fastmath={"nnan", "ninf"})
def _row_q_min(row, R, a, c):  # pragma: no cover - compiled
    # min over b < a of Q(a, b), with the same operations in the same order
    # as the exact scan (no contraction), so the values agree bit for bit
    lo = np.inf
    ra = R[a]
    for b in range(a):
        q = c * row[b] - (ra + R[b])
        lo = min(lo, q)
    return lo


@njit(cache=True)
def _better(q, best, lo, hi, k0, k1):  # pragma: no cover - compiled
    # the documented order: smaller Q, then smaller (min key, max key)
    return q < best or (q == best and (lo < k0 or (lo == k0 and hi < k1)))


@njit(cache=True)
def _sorted_row(vals, ids, out_v, out_i):  # pragma: no cover - compiled
    order = np.argsort(vals)
    for t in range(order.size):
        out_v[t] = vals[order[t]]
        out_i[t] = ids[order[t]]


@njit(cache=True)
def nj_kernel(D, V, bionj, sorted_rows):  # pragma: no cover - compiled
    """Neighbor joining / BIONJ on the (n, n) array D (overwritten).

    sorted_rows=False: every step scans the lower triangle (with a cheap
    vectorised row minimum first). sorted_rows=True: each row also keeps its
    distances in increasing order, and a row's scan stops as soon as
    c d - (R_a + max R) exceeds the best Q so far; a pair is stored in the
    row of its younger member (distances between surviving clusters never
    change), entries of joined clusters are skipped and compacted away when
    half of the clusters have gone. Both pick the same pair every step.
    """
    n = D.shape[0]
    m = n
    ids = np.arange(n)
    key = np.arange(n)
    R = np.zeros(n)
    for a in range(n):
        s = 0.0
        for b in range(n):
            s += D[a, b]
        R[a] = s
    steps = max(n - 3, 0)
    kids = np.empty((steps, 2), dtype=np.int64)
    lens = np.empty((steps, 2))
    newd = np.empty(n)
    newv = np.empty(n)
    # sorted rows (storage row per slot), used when sorted_rows
    ns = n if sorted_rows else 1
    SV = np.empty((ns, ns))
    SI = np.empty((ns, ns), dtype=np.int32)
    length = np.zeros(ns, dtype=np.int64)
    head = np.zeros(ns, dtype=np.int64)
    store = np.arange(ns)
    slot_of = np.full(2 * n, -1, dtype=np.int64)
    slot_of[:n] = np.arange(n)
    tmpv = np.empty(n)
    tmpi = np.empty(n, dtype=np.int64)
    if sorted_rows:
        for a in range(n):
            t = 0
            for b in range(n):
                if b != a:
                    tmpv[t] = D[a, b]
                    tmpi[t] = b
                    t += 1
            _sorted_row(tmpv[:t], tmpi[:t], SV[a], SI[a])
            length[a] = t
    compact_at = n // 2
    for step in range(steps):
        if step > 0 and step % 64 == 0:
            for a in range(m):
                s = 0.0
                row = D[a]
                for b in range(m):
                    s += row[b]
                R[a] = s
        c = m - 2.0
        best = np.inf
        bi = -1
        bj = -1
        k0 = n
        k1 = n
        if not sorted_rows:
            for a in range(1, m):
                row = D[a]
                ra = R[a]
                # cheap vectorised row minimum first; the exact scan with
                # index and tie-break only runs for rows that can win
                if _row_q_min(row, R, a, c) > best:
                    continue
                ka = key[a]
                for b in range(a):
                    q = c * row[b] - (ra + R[b])
                    if q <= best:
                        kb = key[b]
                        lo = min(ka, kb)
                        hi = max(ka, kb)
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
                    t = 0
                    for h in range(head[st], length[st]):
                        if slot_of[SI[st, h]] >= 0:
                            SV[st, t] = SV[st, h]
                            SI[st, t] = SI[st, h]
                            t += 1
                    length[st] = t
                    head[st] = 0
                compact_at = m // 2
            rmax = -np.inf
            for a in range(m):
                if R[a] > rmax:
                    rmax = R[a]
            # a first best from each row's nearest live entry
            for a in range(m):
                st = store[a]
                h = head[st]
                while h < length[st] and slot_of[SI[st, h]] < 0:
                    h += 1
                head[st] = h
                if h < length[st]:
                    b = slot_of[SI[st, h]]
                    q = c * SV[st, h] - (R[a] + R[b])
                    lo = min(key[a], key[b])
                    hi = max(key[a], key[b])
                    if _better(q, best, lo, hi, k0, k1):
                        best = q
                        bi = a
                        bj = b
                        k0 = lo
                        k1 = hi
            for a in range(m):
                st = store[a]
                ra = R[a]
                base = ra + rmax
                ka = key[a]
                for h in range(head[st], length[st]):
                    d = SV[st, h]
                    # rounding is monotone: this bound never exceeds a computed Q
                    if c * d - base > best:
                        break
                    b = slot_of[SI[st, h]]
                    if b < 0:
                        continue
                    q = c * d - (ra + R[b])
                    if q <= best:
                        kb = key[b]
                        lo = min(ka, kb)
                        hi = max(ka, kb)
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
            ka = min(key[o0], key[o1])
            kb = max(key[o0], key[o1])
            if ka < k0 or (ka == k0 and kb < k1):
                bi = o0
                bj = o1
        i = bi
        j = bj  # i < j
        dij = D[i, j]
        li = 0.5 * dij + (R[i] - R[j]) / (2.0 * c)
        lj = dij - li
        lam = 0.5
        if bionj:
            vij = V[i, j]
            if vij > 0.0:
                s = 0.0
                for k in range(m):
                    if k != i and k != j:
                        s += V[j, k] - V[i, k]
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
                dk = lam * (D[i, k] - li) + (1.0 - lam) * (D[j, k] - lj)
                newv[k] = lam * V[i, k] + (1.0 - lam) * V[j, k] - lam * (1.0 - lam) * V[i, j]
            else:
                dk = 0.5 * (D[i, k] + D[j, k] - dij)
            newd[k] = dk
            R[k] += dk - D[i, k] - D[j, k]
            ru += dk
        kids[step, 0] = ids[i]
        kids[step, 1] = ids[j]
        lens[step, 0] = li
        lens[step, 1] = lj
        # the new cluster takes slot i
        for k in range(m):
            if k == i or k == j:
                continue
            D[i, k] = newd[k]
            D[k, i] = newd[k]
            if bionj:
                V[i, k] = newv[k]
                V[k, i] = newv[k]
        D[i, j] = 0.0
        D[j, i] = 0.0
        R[i] = ru
        if sorted_rows:
            slot_of[ids[i]] = -1
            slot_of[ids[j]] = -1
            slot_of[n + step] = i
        ids[i] = n + step
        if key[j] < key[i]:
            key[i] = key[j]
        # the last active slot moves into slot j
        last = m - 1
        if j != last:
            for k in range(m):
                D[j, k] = D[last, k]
            for k in range(m):
                D[k, j] = D[k, last]
            D[j, j] = 0.0
            if bionj:
                for k in range(m):
                    V[j, k] = V[last, k]
                for k in range(m):
                    V[k, j] = V[k, last]
                V[j, j] = 0.0
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
                    tmpv[t] = D[i, k]
                    tmpi[t] = ids[k]
                    t += 1
            st = store[i]
            _sorted_row(tmpv[:t], tmpi[:t], SV[st], SI[st])
            length[st] = t
            head[st] = 0
    # the three that remain meet at one node (three-point formula)
    last3 = np.empty(3, dtype=np.int64)
    len3 = np.empty(3)
    if n >= 3:
        d01 = D[0, 1]
        d02 = D[0, 2]
        d12 = D[1, 2]
        len3[0] = 0.5 * (d01 + d02 - d12)
        len3[1] = 0.5 * (d01 + d12 - d02)
        len3[2] = 0.5 * (d02 + d12 - d01)
        for a in range(3):
            last3[a] = ids[a]
    return kids, lens, last3, len3


@njit(cache=True)
def _row_min(D, a, m, key):  # pragma: no cover - compiled
    # nearest active neighbour of slot a; ties by the smallest key
    bv = np.inf
    bs = -1
    row = D[a]
    for b in range(m):
        if b != a:
            x = row[b]
            if x < bv or (x == bv and bs >= 0 and key[b] < key[bs]):
                bv = x
                bs = b
    return bv, bs


@njit(cache=True)
def upgma_kernel(D):  # pragma: no cover - compiled
    n = D.shape[0]
    m = n
    ids = np.arange(n)
    key = np.arange(n)
    size = np.ones(n)
    nbv = np.empty(n)  # cached nearest-neighbour distance per slot
    nbs = np.empty(n, dtype=np.int64)  # and its slot
    stale = np.zeros(n, dtype=np.bool_)
    steps = n - 1
    kids = np.empty((steps, 2), dtype=np.int64)
    hts = np.empty(steps)
    for a in range(n):
        nbv[a], nbs[a] = _row_min(D, a, m, key)
    for step in range(steps):
        # the best pair from the cached row minima: smallest distance, then
        # smallest (min key, max key)
        bi = -1
        best = np.inf
        k0 = n
        k1 = n
        for a in range(m):
            v = nbv[a]
            ka = key[a]
            kb = key[nbs[a]]
            if ka > kb:
                ka, kb = kb, ka
            if v < best or (v == best and (ka < k0 or (ka == k0 and kb < k1))):
                best = v
                bi = a
                k0 = ka
                k1 = kb
        i = bi
        j = nbs[bi]
        if j < i:
            i, j = j, i
        kids[step, 0] = ids[i]
        kids[step, 1] = ids[j]
        hts[step] = 0.5 * D[i, j]
        if m == 2:
            break
        si = size[i]
        sj = size[j]
        for a in range(m):
            stale[a] = nbs[a] == i or nbs[a] == j
        for k in range(m):
            if k == i or k == j:
                continue
            dk = (si * D[i, k] + sj * D[j, k]) / (si + sj)
            D[i, k] = dk
            D[k, i] = dk
        size[i] = si + sj
        ids[i] = n + step
        if key[j] < key[i]:
            key[i] = key[j]
        last = m - 1
        if j != last:
            for k in range(m):
                D[j, k] = D[last, k]
            for k in range(m):
                D[k, j] = D[k, last]
            D[j, j] = 0.0
            size[j] = size[last]
            ids[j] = ids[last]
            key[j] = key[last]
            nbv[j] = nbv[last]
            nbs[j] = nbs[last]
            stale[j] = stale[last]
            for a in range(m):
                if nbs[a] == last:
                    nbs[a] = j
        m -= 1
        # A cached minimum stays right unless its partner was merged; the
        # merged cluster may become a row's new nearest neighbour.
        for a in range(m):
            if a == i:
                continue
            if stale[a]:
                nbv[a], nbs[a] = _row_min(D, a, m, key)
            else:
                v = D[a, i]
                if v < nbv[a] or (v == nbv[a] and key[i] < key[nbs[a]]):
                    nbv[a] = v
                    nbs[a] = i
        nbv[i], nbs[i] = _row_min(D, i, m, key)
    return kids, hts
