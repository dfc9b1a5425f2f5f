"""Compiled kernels of the convex repair objectives against plain references.

Every kernel in seqdist/repair/_convex_kernels.py is checked here against a
slow obvious loop, a dense matrix, scipy, or a brute-force search.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy.optimize import minimize_scalar
from scipy.sparse.csgraph import shortest_path

from seqdist.kernels import convex as K
from seqdist.kernels.triangles import is_metric


def rand_sym(rng, n, zeros=0.0):
    D = rng.uniform(0, 1, (n, n))
    D[rng.uniform(size=(n, n)) < zeros] = 0.0
    D = np.triu(D, 1)
    return D + D.T


def ref_violated(x, gm, thr):
    # plain loops over i < j < k and the three long sides
    n = x.shape[0]
    out = []
    for i, j, k in itertools.combinations(range(n), 3):
        if not (gm[i, j] and gm[i, k] and gm[j, k]):
            continue
        a, b, c = x[i, j], x[i, k], x[j, k]
        for s, v in enumerate((a - b - c, b - a - c, c - a - b)):
            if v > thr:
                out.append((i << 42) | (j << 22) | (k << 2) | s)
    return np.array(sorted(out), dtype=np.int64)


@pytest.mark.parametrize("n", [3, 7, 30, 70])
def test_violated_triangles_match_loops(n):
    rng = np.random.default_rng(n)
    x = np.triu(rand_sym(rng, n, zeros=0.1), 1)
    full = np.ones((n, n), dtype=bool)
    assert np.array_equal(K.violated_triangles(x, full, True, 0.0), ref_violated(x, full, 0.0))
    gm = rand_sym(rng, n) > 0.2
    gm = gm | gm.T
    assert np.array_equal(K.violated_triangles(x, gm, False, 0.05), ref_violated(x, gm, 0.05))


def test_encode_decode_roundtrip():
    i, j, k, s = np.array([0, 5, 999]), np.array([1, 6, 1000]), np.array([2, 900, 1001]), np.array([0, 2, 1])
    assert all(np.array_equal(a, b) for a, b in zip(K.decode(K.encode(i, j, k, s)), (i, j, k, s)))


def test_merge_keeps_duals_and_forgets_zero_duals():
    ka = np.array([1, 4, 6, 9], np.int64)
    la = np.array([0.5, 0.0, 0.0, 2.0])
    kb = np.array([2, 6, 10], np.int64)
    ko, lo, added = K.merge_active(ka, la, kb)
    # 4 (dual 0, no longer violated) is forgotten; 6 (dual 0 but violated) stays
    assert ko.tolist() == [1, 2, 6, 9, 10]
    assert lo.tolist() == [0.5, 0.0, 0.0, 2.0, 0.0]
    assert added == 2


def dense_A(keys, n):
    # one row per constraint over the flat (i * n + j) upper-triangle entries
    i, j, k, s = K.decode(keys)
    A = np.zeros((keys.size, n * n))
    for r, (a, b, c, t) in enumerate(zip(i, j, k, s)):
        e = [a * n + b, a * n + c, b * n + c]
        long_ = e.pop(t)
        A[r, long_] = 1
        A[r, e[0]] = A[r, e[1]] = -1
    return A


def test_accumulate_and_apply_match_a_dense_matrix():
    rng = np.random.default_rng(1)
    n = 9
    x = np.triu(rand_sym(rng, n), 1)
    keys = K.violated_triangles(x, np.ones((n, n), bool), True, -1.0)  # every constraint
    A = dense_A(keys, n)
    lam = rng.uniform(0, 1, keys.size)
    c = np.zeros((n, n))
    K.accumulate_tri(keys, lam, c)
    assert np.allclose(c.reshape(-1), A.T @ lam)
    assert np.allclose(K.apply_tri(keys, x), A @ x.reshape(-1))
    winv = np.triu(rng.uniform(0.5, 2, (n, n)), 1)
    assert np.allclose(K.denominators_tri(keys, winv), (A ** 2) @ winv.reshape(-1))
    # the cycle versions on the same constraints written as cycles
    i, j, k, s = K.decode(keys)
    ptr = np.arange(0, 3 * keys.size + 1, 3, dtype=np.int64)
    edges = dense_rows_as_cycles(A, n)
    c2 = np.zeros((n, n))
    K.accumulate_cyc(ptr, edges, lam, c2.reshape(-1))
    assert np.allclose(c2, c)
    assert np.allclose(K.apply_cyc(ptr, edges, x.reshape(-1)), A @ x.reshape(-1))


def dense_rows_as_cycles(A, n):
    out = []
    for row in A:
        out.append(int(np.flatnonzero(row == 1)[0]))
        out.extend(int(e) for e in np.flatnonzero(row == -1))
    return np.array(out, np.int64)


def ref_hildreth_sweep(keys, lam, x, winv):
    # Hildreth (1957): exact maximisation of the dual along one multiplier at a time
    i, j, k, s = K.decode(keys)
    for t in range(keys.size):
        e = [(i[t], j[t]), (i[t], k[t]), (j[t], k[t])]
        L = e.pop(s[t])
        v = x[L] - x[e[0]] - x[e[1]]
        den = winv[L] + winv[e[0]] + winv[e[1]]
        if den == 0:
            continue
        new = max(0.0, lam[t] + v / den)
        dl = new - lam[t]
        lam[t] = new
        x[L] -= dl * winv[L]
        x[e[0]] += dl * winv[e[0]]
        x[e[1]] += dl * winv[e[1]]


def test_l2_sweep_matches_reference_and_keeps_the_primal_dual_link():
    rng = np.random.default_rng(2)
    n = 12
    d = np.triu(rand_sym(rng, n), 1)
    winv = np.triu(rng.uniform(0.2, 3, (n, n)), 1)
    winv[0, 1] = 0.0  # a locked entry
    keys = K.violated_triangles(d, np.ones((n, n), bool), True, 0.0)
    lam1, x1 = np.zeros(keys.size), d.copy()
    ref_hildreth_sweep(keys, lam1, x1, winv)
    xw = np.stack([d, winv], axis=-1).copy()
    lam2 = np.zeros(keys.size)
    K.sweep_l2_tri(keys, lam2, xw, True, 1.0)
    assert np.allclose(lam1, lam2) and np.allclose(x1, xw[:, :, 0])
    # x = d - W^-1 A^T lam after any number of sweeps
    for _ in range(5):
        K.sweep_l2_tri(keys, lam2, xw, False, 1.0)
    c = np.zeros((n, n))
    K.accumulate_tri(keys, lam2, c)
    assert np.allclose(xw[:, :, 0], d - winv * c)
    assert xw[0, 1, 0] == d[0, 1]
    # cycle sweep on the same constraints written as cycles gives the same result
    A = dense_A(keys, n)
    ptr = np.arange(0, 3 * keys.size + 1, 3, dtype=np.int64)
    edges = dense_rows_as_cycles(A, n)
    xw3 = np.stack([d, winv], axis=-1).copy()
    lam3 = np.zeros(keys.size)
    K.sweep_l2_cyc(ptr, edges, lam3, xw3.reshape(-1, 2), 1.0)
    assert np.allclose(lam3, lam1) and np.allclose(xw3[:, :, 0], x1)


def prox_dual_1d(t, cs, As, ds, iw, sg, h):
    # the proximal-LP dual along one constraint, up to a constant: for each entry
    # min_x w|x - d| + (w / 2h)(x - z)^2 + c x, with w = h / iw (entries with iw = 0 are fixed)
    val = 0.0
    for c0, a, d, wi, s in zip(cs, As, ds, iw, sg):
        c = c0 + s * t
        if wi == 0:
            val += c * d
            continue
        w = h / wi
        u = np.sign(a - c * wi) * max(abs(a - c * wi) - h, 0.0)
        x = d + u
        val += w * abs(u) + (w / (2 * h)) * (x - (d + a)) ** 2 + c * x
    return val


@pytest.mark.parametrize("seed", range(12))
def test_l1_line_search_is_the_exact_maximiser(seed):
    rng = np.random.default_rng(seed)
    n = 3
    d = np.triu(rand_sym(rng, n), 1)
    d[0, 1] = 2.5  # violated
    c = np.triu(rng.normal(0, 1, (n, n)), 1)
    A = np.triu(rng.normal(0, 0.3, (n, n)), 1)
    iw = np.triu(rng.uniform(0.1, 2, (n, n)), 1)
    if seed % 4 == 3:
        iw[0, 2] = 0.0  # a locked side
    h = float(rng.uniform(0.1, 2))
    keys = K.encode([0], [1], [2], [0])
    lam0 = float(rng.uniform(0, 1)) if seed % 2 else 0.0
    lam = np.array([lam0])
    c_new = c.copy()
    K.sweep_l1_tri(keys, lam, c_new, A, d, iw, h)
    t_kernel = lam[0] - lam0
    e = [(0, 1), (0, 2), (1, 2)]
    args = ([c[a] for a in e], [A[a] for a in e], [d[a] for a in e], [iw[a] for a in e], [1, -1, -1], h)
    r = minimize_scalar(lambda t: -prox_dual_1d(t, *args), bounds=(-lam0, 50), method="bounded",
                        options={"xatol": 1e-10})
    # same maximum value (the maximiser can be a flat segment)
    assert prox_dual_1d(t_kernel, *args) >= prox_dual_1d(r.x, *args) - 1e-7
    assert lam[0] >= 0


def test_violated_cycles_are_shortest_paths():
    rng = np.random.default_rng(5)
    n = 14
    x = rand_sym(rng, n)
    W = np.where(rng.uniform(size=(n, n)) < 0.5, x, np.inf)
    W = np.minimum(W, W.T)
    np.fill_diagonal(W, 0.0)
    ref = shortest_path(np.where(np.isfinite(W), W, 0.0), directed=False)  # scipy: 0 = no edge here
    iu = np.argwhere(np.triu(np.isfinite(W), 1))
    viol = [(i, j) for i, j in iu if W[i, j] > ref[i, j] + 1e-12]
    assert viol
    src = np.array([v[0] for v in viol], np.int64)
    dst = np.array([v[1] for v in viol], np.int64)
    ptr, edges = K.violated_cycles(W, src, dst, 2)
    assert ptr.size - 1 == len(viol)
    for t, (i, j) in enumerate(viol):
        seg = edges[ptr[t]:ptr[t + 1]]
        assert seg[0] == i * n + j
        length = sum(W[e // n, e % n] for e in seg[1:])
        assert np.isclose(length, ref[i, j])


def test_blend_step_is_the_smallest_restoring_step():
    rng = np.random.default_rng(7)
    n = 8
    P = rng.uniform(0, 1, (n, 2))
    Z = np.sqrt(((P[:, None] - P[None]) ** 2).sum(-1))  # a metric (Euclidean)
    Y = Z * rng.uniform(0.7, 1.3, (n, n))
    Y = np.triu(Y, 1)
    Y = Y + Y.T
    t = K.blend_step(Y, Z)
    assert 0 < t < 1
    assert is_metric((1 - t) * Y + t * Z, tol=1e-12)
    assert not is_metric((1 - 0.98 * t) * Y + 0.98 * t * Z, tol=1e-12)


def test_clamp_free_moves_towards_target_and_keeps_a_metric():
    rng = np.random.default_rng(8)
    n = 10
    P = rng.uniform(0, 1, (n, 2))
    Y = np.sqrt(((P[:, None] - P[None]) ** 2).sum(-1))
    fi = np.array([0, 2, 3], np.int64)
    fj = np.array([1, 5, 9], np.int64)
    target = np.array([10.0, 0.0, Y[3, 9] * 1.01])
    before = Y.copy()
    K.clamp_free(Y, fi, fj, target)
    assert is_metric(Y, tol=1e-12)
    # a too long target stops at the shortest two-step path, a zero at the largest difference
    others = [k for k in range(n) if k not in (0, 1)]
    assert np.isclose(Y[0, 1], min(before[0, k] + before[k, 1] for k in others))
    assert Y[2, 5] >= 0 and Y[2, 5] < before[2, 5]


# ---------------------------------------------------------------- references added with the port off numba


def ref_merge(ka, la, kb):
    # plain sets: keep what has a positive dual or is violated again; new keys get dual 0
    old = dict(zip(ka.tolist(), la.tolist()))
    keep = {k: v for k, v in old.items() if v > 0 or k in set(kb.tolist())}
    new = [k for k in kb.tolist() if k not in old]
    keep.update({k: 0.0 for k in new})
    keys = sorted(keep)
    return keys, [keep[k] for k in keys], len(new)


@pytest.mark.parametrize("seed", range(6))
def test_merge_active_matches_plain_sets(seed):
    rng = np.random.default_rng(seed)
    pool = np.unique(rng.integers(0, 400, 300))
    ka = np.sort(rng.choice(pool, pool.size // 2, replace=False)).astype(np.int64)
    la = rng.uniform(size=ka.size) * (rng.uniform(size=ka.size) < 0.5)
    kb = np.sort(rng.choice(pool, pool.size // 3, replace=False)).astype(np.int64)
    ko, lo, added = K.merge_active(ka, la, kb)
    keys, duals, n_new = ref_merge(ka, la, kb)
    assert ko.tolist() == keys and lo.tolist() == duals and added == n_new


def ref_hildreth_sweep_omega(keys, lam, x, winv, forward, omega):
    # Hildreth (1957) with an over-relaxed step (common practice, SOR): the kernel's update in either order
    i, j, k, s = K.decode(keys)
    order = range(keys.size) if forward else range(keys.size - 1, -1, -1)
    for t in order:
        e = [(i[t], j[t]), (i[t], k[t]), (j[t], k[t])]
        L = e.pop(s[t])
        den = winv[L] + winv[e[0]] + winv[e[1]]
        if den == 0:
            continue
        v = x[L] - x[e[0]] - x[e[1]]
        new = max(0.0, lam[t] + omega * v / den)
        dl = new - lam[t]
        lam[t] = new
        x[L] -= dl * winv[L]
        x[e[0]] += dl * winv[e[0]]
        x[e[1]] += dl * winv[e[1]]


@pytest.mark.parametrize("omega", [1.0, 1.6])
def test_l2_sweeps_in_both_orders_match_the_reference(omega):
    # several sweeps from duals partly zero, so satisfied constraints with a zero dual (left alone)
    # and positive duals driven back to zero both occur
    rng = np.random.default_rng(11)
    n = 10
    d = np.triu(rand_sym(rng, n), 1)
    winv = np.triu(rng.uniform(0.2, 3, (n, n)), 1)
    winv[1, 2] = 0.0
    keys = K.violated_triangles(d, np.ones((n, n), bool), True, -0.5)  # satisfied ones too
    lam0 = rng.uniform(0, 0.05, keys.size) * (rng.uniform(size=keys.size) < 0.3)
    lam1, x1 = lam0.copy(), d.copy()
    xw = np.stack([d, winv], axis=-1).copy()
    lam2 = lam0.copy()
    for s in range(4):
        ref_hildreth_sweep_omega(keys, lam1, x1, winv, s % 2 == 0, omega)
        K.sweep_l2_tri(keys, lam2, xw, s % 2 == 0, omega)
    assert np.allclose(lam1, lam2, rtol=1e-12, atol=1e-14)
    assert np.allclose(x1, xw[:, :, 0], rtol=1e-12, atol=1e-14)
    assert (lam2 == 0).any() and (lam2 > 0).any()


@pytest.mark.parametrize("seed", range(8))
def test_l1_cycle_line_search_is_the_exact_maximiser(seed):
    # a cycle of 4 or 5 edges, long edge first: the step maximises the same 1-d dual as for triangles
    rng = np.random.default_rng(100 + seed)
    m = 4 + seed % 2
    N = m + 1
    edges = np.arange(m, dtype=np.int64)  # flat indices into arrays of N * N entries (any distinct ones)
    cf = np.zeros(N * N)
    cf[:m] = rng.normal(0, 1, m)
    Af = np.zeros(N * N)
    Af[:m] = rng.normal(0, 0.3, m)
    df = np.zeros(N * N)
    df[:m] = rng.uniform(0, 1, m)
    df[0] = 3.0  # violated
    iwf = np.zeros(N * N)
    iwf[:m] = rng.uniform(0.1, 2, m)
    if seed % 4 == 3:
        iwf[2] = 0.0  # a locked edge
    h = float(rng.uniform(0.1, 2))
    lam0 = float(rng.uniform(0, 1)) if seed % 2 else 0.0
    lam = np.array([lam0])
    c_new = cf.copy()
    K.sweep_l1_cyc(np.array([0, m], np.int64), edges, lam, c_new, Af, df, iwf, h)
    t_kernel = lam[0] - lam0
    sg = [1] + [-1] * (m - 1)
    args = (cf[:m].tolist(), Af[:m].tolist(), df[:m].tolist(), iwf[:m].tolist(), sg, h)
    r = minimize_scalar(lambda t: -prox_dual_1d(t, *args), bounds=(-lam0, 50), method="bounded",
                        options={"xatol": 1e-10})
    assert prox_dual_1d(t_kernel, *args) >= prox_dual_1d(r.x, *args) - 1e-7
    assert lam[0] >= 0
    # c moved by the step along the constraint's row
    assert np.allclose(c_new[:m] - cf[:m], t_kernel * np.array(sg))


def ref_dijkstra_pred(W, s):
    # textbook dense Dijkstra (Dijkstra 1959): settle the smallest tentative distance, the lowest
    # index on a tie; a distance drops only when strictly shorter
    n = W.shape[0]
    dist = [np.inf] * n
    pred = [-1] * n
    done = [False] * n
    dist[s] = 0.0
    for _ in range(n):
        cand = [v for v in range(n) if not done[v] and dist[v] < np.inf]
        if not cand:
            break
        u = min(cand, key=lambda v: (dist[v], v))
        done[u] = True
        for v in range(n):
            if not done[v] and dist[u] + W[u, v] < dist[v]:
                dist[v] = dist[u] + W[u, v]
                pred[v] = u
    return pred


@pytest.mark.parametrize("seed", range(5))
def test_violated_cycles_follow_the_textbook_dijkstra_on_ties(seed):
    # small integer lengths and zeros make many shortest paths of equal length: the kernel must pick
    # the same one as the plain Dijkstra, edge for edge
    rng = np.random.default_rng(200 + seed)
    n = 12
    W = rng.integers(0, 3, (n, n)).astype(float)
    W[rng.uniform(size=(n, n)) < 0.5] = np.inf
    W = np.minimum(W, W.T)
    np.fill_diagonal(W, 0.0)
    src = np.repeat(np.arange(n), n).astype(np.int64)
    dst = np.tile(np.arange(n), n).astype(np.int64)
    keep = src != dst
    src, dst = src[keep], dst[keep]
    ptr, edges = K.violated_cycles(W, src, dst, 2)
    want = []
    for s in range(n):
        pred = ref_dijkstra_pred(W, s)
        for t in range(n):
            if t == s:
                continue
            path = [t]
            while path[-1] != s and pred[path[-1]] >= 0:
                path.append(pred[path[-1]])
            if path[-1] != s or len(path) < 3:
                continue
            a, b = min(s, t), max(s, t)
            want.append([a * n + b] + [min(u, v) * n + max(u, v) for u, v in zip(path, path[1:])])
    got = [edges[ptr[q]:ptr[q + 1]].tolist() for q in range(ptr.size - 1)]
    assert got == want and len(want) > 20


def ref_clamp_free(Y, fi, fj, target):
    # the plain loop (the kernel's documented rule), one entry at a time, k in increasing order
    n = Y.shape[0]
    for i, j, v in zip(fi, fj, target):
        lo, hi = 0.0, np.inf
        for k in range(n):
            if k in (i, j):
                continue
            a, b = Y[i, k], Y[j, k]
            if a + b < hi:
                hi = a + b
            if abs(a - b) > lo:
                lo = abs(a - b)
        v = min(max(v, lo), hi)
        Y[i, j] = Y[j, i] = v


@pytest.mark.parametrize("seed", range(6))
def test_clamp_free_matches_the_plain_loop_bit_for_bit(seed):
    # zeros of both signs, ties and a missing value: the compiled loop keeps several running
    # minima, so the sign of a zero bound is where it could differ from the plain loop
    rng = np.random.default_rng(300 + seed)
    n = 23
    Y = rng.integers(0, 3, (n, n)).astype(float)
    Y[rng.uniform(size=(n, n)) < 0.3] = -0.0
    Y[3, 7] = np.nan
    m = 40
    fi = rng.integers(0, n, m).astype(np.int64)
    fj = rng.integers(0, n, m).astype(np.int64)
    target = rng.choice([0.0, -0.0, 0.5, 2.0, 7.0], m)
    want, got = Y.copy(), Y.copy()
    ref_clamp_free(want, fi, fj, target)
    K.clamp_free(got, fi, fj, target)
    assert np.array_equal(want.view(np.int64), got.view(np.int64))


def ref_violations(x):
    # every (key, violation) of the upper triangle of x, plain loops
    n = x.shape[0]
    out = {}
    for i, j, k in itertools.combinations(range(n), 3):
        a, b, c = x[i, j], x[i, k], x[j, k]
        for s, v in enumerate((a - b - c, b - a - c, c - a - b)):
            out[(i << 42) | (j << 22) | (k << 2) | s] = v
    return out


@pytest.mark.parametrize("seed,cap", [(0, 40), (1, 300), (2, 5000), (3, 1)])
def test_capped_scan_takes_the_most_violated_within_the_cap(seed, cap):
    # a random matrix: about half of all triangles violated, so a small cap must bind
    rng = np.random.default_rng(seed)
    n = 25
    x = np.triu(rand_sym(rng, n), 1)
    full = np.ones((n, n), dtype=bool)
    viol = ref_violations(x)
    keys, t, counts = K.violated_triangles_capped(x, full, True, 0.0, cap)
    every = ref_violated(x, full, 0.0)
    assert K.count_violated(x, full, True, 0.0) == every.size
    if every.size <= cap:  # nothing to leave out: the plain scan
        assert np.array_equal(keys, every) and t == 0.0 and counts == 0
        return
    assert 0 < keys.size <= cap and t > 0.0 and counts >= 1
    assert np.all(np.diff(keys) > 0)  # sorted, no repeats
    # exactly the constraints violated by more than t (ties: a subset of those above t)
    above = ref_violated(x, full, t)
    if above.size <= cap:
        assert np.array_equal(keys, above)
    else:
        assert np.isin(keys, above).all()
    # no constraint left out is more violated than one taken
    taken = set(keys.tolist())
    worst_left = max((v for k_, v in viol.items() if k_ not in taken), default=-np.inf)
    assert worst_left <= min(viol[k_] for k_ in taken)


def test_capped_scan_breaks_ties_within_the_cap():
    # 20 taxa 3 apart, each 1 from taxon 0: every (0, j, k) triangle is violated by exactly 1,
    # so no threshold separates them; the cap still holds (the first in key order)
    n = 21
    x = np.full((n, n), 3.0)
    x[0, :] = 1.0
    x = np.triu(x, 1)
    full = np.ones((n, n), dtype=bool)
    keys, t, _ = K.violated_triangles_capped(x, full, True, 0.0, 50)
    assert keys.size == 50 and np.all(np.diff(keys) > 0)
    assert np.array_equal(keys, ref_violated(x, full, 0.0)[:50])


def phi_l1(c, w, d, M):
    # min over x in [0, M] of w |x - d| + c x, by its three candidates (the ends and d; common practice)
    xs = (0.0, d, M)
    return min((w * abs(x - d) if np.isfinite(w) else (0.0 if x == d else np.inf)) + c * x for x in xs)


def bound_plain(keys, lam, d, w, M, n):
    c = np.zeros((n, n))
    K.accumulate_tri(keys, lam, c)
    iu = np.triu_indices(n, 1)
    return sum(phi_l1(c[a, b], w[a, b], d[a, b], M) for a, b in zip(*iu)), c


@pytest.mark.parametrize("seed", range(4))
def test_l1_bound_ascent_never_lowers_the_bound_and_steps_to_a_maximiser(seed):
    rng = np.random.default_rng(seed)
    n = 9
    d = np.triu(rand_sym(rng, n), 1)
    w = np.triu(rng.uniform(0.2, 2.0, (n, n)), 1)
    if seed % 2:
        w[0, 1] = np.inf  # a locked entry: phi is linear there
    M = float(d.max())
    keys = K.violated_triangles(d, np.ones((n, n), bool), True, 0.0)
    lam = rng.uniform(0, 0.5, keys.size) * (rng.uniform(size=keys.size) < 0.6)
    g0, c = bound_plain(keys, lam, d, w, M, n)
    lam1, c1 = lam.copy(), c.copy()
    K.ascend_l1_bound(keys, lam1, c1, d, w, M)
    g1, cref = bound_plain(keys, lam1, d, w, M, n)
    assert np.all(lam1 >= 0)
    assert np.allclose(c1, cref)  # c follows lam
    assert g1 >= g0 - 1e-12
    # the last constraint's dual is a maximiser of the bound along it (others fixed): a dense grid
    t = keys.size - 1
    best = g1
    for s in np.linspace(-lam1[t], lam1[t] + 3.0, 601):
        trial = lam1.copy()
        trial[t] = lam1[t] + s
        best = max(best, bound_plain(keys, trial, d, w, M, n)[0])
    assert g1 >= best - 1e-9


# ------------------------------------------------------------ the primal-dual kernels (issue 19)
def ref_pdhg_step(rows, y, x, c, d, tau, tw, sigma, M, quad, a=None, rho=0.0, x0=None, y0=None):
    """One step of the primal-dual hybrid gradient method by plain loops (Chambolle and Pock 2011,
    "A first-order primal-dual algorithm for convex problems...", J. Math. Imaging Vis. 40, Algorithm 1
    with theta = 1); with ``a`` the reflected Halpern form (Lu and Yang 2024, arXiv:2407.16144)."""
    x, y, c = x.copy(), y.copy(), c.copy()
    xbar = np.empty_like(x)
    for e in range(x.size):
        xo = x[e]
        v = xo - tau[e] * c[e]
        if quad:
            xn = (v + tw[e] * d[e]) / (1.0 + tw[e])
        else:
            z = v - d[e]
            xn = d[e] + max(z - tw[e], 0.0) + min(z + tw[e], 0.0)
        xn = min(max(xn, 0.0), M)
        xbar[e] = 2.0 * xn - xo
        x[e] = xn if a is None else a * ((1.0 + rho) * xn - rho * xo) + (1.0 - a) * x0[e]
    for t in range(rows.shape[0]):
        e0, e1, e2 = rows[t]
        yt = max(y[t] + sigma * (xbar[e0] - xbar[e1] - xbar[e2]), 0.0)
        yn = yt if a is None else a * ((1.0 + rho) * yt - rho * y[t]) + (1.0 - a) * y0[t]
        dy = yn - y[t]
        y[t] = yn
        c[e0] += dy
        c[e1] -= dy
        c[e2] -= dy
    return x, y, c


def _pd_case(seed, n=9, locked=True):
    rng = np.random.default_rng(seed)
    D = rand_sym(rng, n)
    iu = np.triu_indices(n, 1)
    keys = K.violated_triangles(np.triu(D, 1), np.ones((n, n), bool), True, 0.0)
    rows = K.entry_rows(keys, n)
    d = D[iu].copy()
    ne = d.size
    tau = rng.uniform(0.05, 0.5, ne)
    if locked:
        tau[:2] = 0.0  # locked entries: tau = 0, they never move
    tw = tau * rng.uniform(0.5, 2.0, ne)
    x = np.clip(d + rng.normal(0, 0.1, ne), 0, None)
    x[:2] = d[:2]
    y = rng.uniform(0, 0.3, rows.shape[0]) * (rng.uniform(size=rows.shape[0]) < 0.6)
    c = np.zeros(ne)
    K.accumulate_rows(rows, y, c)
    return keys, rows, d, tau, tw, x, y, c, float(D.max())


def test_entry_rows_are_the_slots_of_the_three_sides():
    rng = np.random.default_rng(3)
    n = 8
    keys = K.violated_triangles(np.triu(rand_sym(rng, n), 1), np.ones((n, n), bool), True, 0.0)
    slot = {p: q for q, p in enumerate(itertools.combinations(range(n), 2))}  # np.triu_indices order
    rows = K.entry_rows(keys, n)
    i, j, k, s = K.decode(keys)
    for t in range(keys.size):
        sides = [(i[t], j[t]), (i[t], k[t]), (j[t], k[t])]
        long_ = sides.pop(int(s[t]))
        assert rows[t].tolist() == [slot[long_], slot[sides[0]], slot[sides[1]]]
    # A^T y over slots is accumulate_tri's matrix read in the same order
    y = rng.uniform(size=keys.size)
    c1 = np.zeros(n * (n - 1) // 2)
    K.accumulate_rows(rows, y, c1)
    c2 = np.zeros((n, n))
    K.accumulate_tri(keys, y, c2)
    assert np.allclose(c1, c2[np.triu_indices(n, 1)], rtol=0, atol=1e-12)


@pytest.mark.parametrize("seed", range(4))
@pytest.mark.parametrize("quad", [False, True])
def test_pdhg_step_matches_the_plain_loop_bit_for_bit(seed, quad):
    keys, rows, d, tau, tw, x, y, c, M = _pd_case(seed)
    xr, yr, cr = x, y, c
    for _ in range(5):
        xr, yr, cr = ref_pdhg_step(rows, yr, xr, cr, d, tau, tw, 0.4, M, quad)
    K.pdhg_tri(rows, y, x, np.empty_like(x), c, d, tau, tw, 0.4, M, 5, quad)
    assert np.array_equal(x, xr) and np.array_equal(y, yr) and np.array_equal(c, cr)
    assert (y >= 0).all() and (x >= 0).all() and (x <= M).all()
    assert np.array_equal(x[:2], d[:2])  # locked entries stay


@pytest.mark.parametrize("seed", range(4))
@pytest.mark.parametrize("quad", [False, True])
def test_pdhg_halpern_matches_the_plain_loop_bit_for_bit(seed, quad):
    keys, rows, d, tau, tw, x, y, c, M = _pd_case(seed)
    x0, y0 = x.copy(), y.copy()
    xr, yr, cr = x, y, c
    for k in range(3, 8):
        xr, yr, cr = ref_pdhg_step(rows, yr, xr, cr, d, tau, tw, 0.4, M, quad, a=(k + 1.0) / (k + 2.0), rho=1.0,
                                   x0=x0, y0=y0)
    K.pdhg_halpern(rows, y, y0, x, x0, np.empty_like(x), c, d, tau, tw, 0.4, M, 3, 5, 1.0, quad)
    assert np.array_equal(x, xr) and np.array_equal(y, yr) and np.array_equal(c, cr)


def test_pdhg_converges_to_the_lp_optimum_on_a_small_pool():
    # many iterations on a fixed set of rows reach the LP's optimum (scipy HiGHS on the same rows)
    from scipy.optimize import linprog
    from scipy.sparse import csr_matrix

    keys, rows, d, tau, tw, x, y, c, M = _pd_case(5, n=7, locked=False)
    ne, m = d.size, rows.shape[0]
    tau = np.full(ne, 0.2)
    tw = tau.copy()  # unit weights
    x0, y0 = x.copy(), y.copy()
    for _ in range(200):  # restarts every 500 iterations, at the plain step's point
        K.pdhg_halpern(rows, y, y0, x, x0, np.empty(ne), c, d, tau, tw, 0.2, M, 0, 500, 1.0, False)
        K.pdhg_tri(rows, y, x, np.empty(ne), c, d, tau, tw, 0.2, M, 1, False)
        x0, y0 = x.copy(), y.copy()
    A = csr_matrix((np.tile([1.0, -1.0, -1.0], m), (np.repeat(np.arange(m), 3), rows.reshape(-1))), shape=(m, ne))
    # x = d + p - q, p, q >= 0, cost p + q, A x <= 0 (the l1 LP on these rows)
    res = linprog(np.ones(2 * ne), A_ub=np.hstack([A.toarray(), -A.toarray()]), b_ub=-(A @ d),
                  bounds=[(0, M - v) for v in d] + [(0, v) for v in d], method="highs")  # 0 <= x <= M
    assert res.status == 0
    assert abs(np.abs(x - d).sum() - res.fun) <= 1e-6 * res.fun
    assert (A @ x).max() <= 1e-6
