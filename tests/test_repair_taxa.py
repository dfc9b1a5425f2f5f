"""Leaving taxa out as a remedy: the fewest taxa search, the engine's ``leave_out`` and the command line.

References used here:
* a plain search over all subsets of taxa, smallest first, over the violated
  triangles listed by a plain loop (``seqdist.repair.taxa.reference_*``;
  common practice for checking a combinatorial optimum on tiny inputs);
* the audit's own triangle count (``seqdist.kernels.triangles.count_violations``) for
  "no violated checked triangle remains";
* a planted bad row (one taxon's distances scrambled among the others) in a
  Euclidean metric: that taxon alone is the answer (common practice for
  outlier tests: a planted fault must be found);
* every compiled kernel of ``seqdist.repair.taxa`` and ``seqdist.kernels.kept_graph``
  against the same method as plain Python loops (common practice for compiled kernels).
"""

from __future__ import annotations

import itertools
import json
import math
import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from seqdist.core.errors import InputError
from seqdist.core.matrix import DistanceMatrix
from seqdist.kernels import kept_graph
from seqdist.kernels.shortest_paths import apsp_reference
from seqdist.kernels.triangles import count_violations, is_metric
from seqdist.repair import repair, taxa
from seqdist.repair.problem import Budget

from conftest import euclidean, open_text, write_tsv

TOL = 1e-9


# ------------------------------------------------------------------ inputs
@st.composite
def small(draw, max_n=9):
    """A symmetric matrix of n <= max_n taxa: ties, exact equalities (2 = 1 + 1) and missing entries."""
    n = draw(st.integers(3, max_n))
    vals = draw(st.lists(st.sampled_from([0.0, 0.5, 1.0, 1.0, 2.0, 2.0, 3.0, 7.5]), min_size=n * n,
                         max_size=n * n))
    a = np.triu(np.array(vals).reshape(n, n), 1)
    holes = draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=n))
    for i, j in holes:
        if i != j:
            a[min(i, j), max(i, j)] = np.nan
    a = a + a.T
    np.fill_diagonal(a, 0.0)
    return a


def planted(n, bad, seed=0, dim=3):
    """A Euclidean metric with the rows of ``bad`` scrambled among the other taxa."""
    rng = np.random.default_rng(seed)
    D = euclidean(n, dim=dim, seed=seed)
    for b in bad:
        others = np.setdiff1d(np.arange(n), [b])
        row = D[b, others].copy()
        rng.shuffle(row)
        D[b, others] = row
        D[others, b] = row
    return D


def labels(n):
    return [f"t{i:02d}" for i in range(n)]


def kept_violations(D, drop):
    keep = np.setdiff1d(np.arange(len(D)), drop)
    return count_violations(D[np.ix_(keep, keep)], TOL)[0]


def least_covers(D):
    """Every least cover (all of them, not only the preferred ones): plain search."""
    tri = taxa.reference_violated(D, TOL)
    n = len(D)
    for size in range(n + 1):
        found = [set(c) for c in itertools.combinations(range(n), size)
                 if all(any(v in c for v in t) for t in tri)]
        if found:
            return found


# ------------------------------------------------------------------ kernels against plain loops
@settings(max_examples=60, deadline=None)
@given(small(max_n=10))
def test_kernels_match_plain_loops_and_the_audit(D):
    ref = taxa.reference_violated(D, TOL)
    assert [tuple(t) for t in taxa.violated_taxon_triangles(D, TOL).tolist()] == ref
    counts = [sum(v in t for t in ref) for v in range(len(D))]
    assert taxa.taxon_counts(D, TOL).tolist() == counts
    # the same triangles the audit counts (its formula, its order of additions)
    assert len(ref) == count_violations(D, TOL)[0]
    alive = np.ones(len(D), dtype=bool)
    alive[0] = False
    sub = [t for t in ref if 0 not in t]
    assert [tuple(t) for t in taxa.violated_taxon_triangles(D, TOL, alive).tolist()] == sub


def test_rounding_decides_as_in_the_audit():
    # points on a line: every triangle is degenerate, and with tol = 0 the order of the
    # additions decides which count as violated; the kernels must agree with the audit
    x = np.sort(np.random.default_rng(0).uniform(0, 10, 40)) * np.pi
    D = np.abs(x[:, None] - x[None])
    n_audit = count_violations(D, 0.0)[0]
    assert 0 < n_audit < 40 * 39 * 38 // 6
    assert len(taxa.violated_taxon_triangles(D, 0.0)) == n_audit == len(taxa.reference_violated(D, 0.0))
    assert int(taxa.taxon_counts(D, 0.0).sum()) == 3 * n_audit
    r = taxa.fewest_taxa(D, 0.0, method="heuristic")
    assert kept_violations0(D, r.taxa) == 0


def kept_violations0(D, drop):
    keep = np.setdiff1d(np.arange(len(D)), drop)
    return count_violations(D[np.ix_(keep, keep)], 0.0)[0]


@settings(max_examples=60, deadline=None)
@given(small(max_n=10))
def test_packing_is_disjoint_violated_triangles(D):
    ref = set(taxa.reference_violated(D, TOL))
    packed, _ = taxa.packing(D, TOL, np.arange(len(D)))
    flat = packed.ravel().tolist()
    assert len(flat) == len(set(flat))
    assert all(tuple(sorted(t)) in ref for t in packed.tolist())
    # maximal: every violated triangle meets a packed one
    assert all(set(t) & set(flat) for t in ref)


# ------------------------------------------------------------------ compiled kernels against plain loops
# Each kernel of seqdist.repair.taxa and seqdist.kernels.kept_graph against the same method written
# as plain Python loops (common practice for checking a compiled kernel): same answers, same tie
# breaks, same counted work, bit-identical floats. "threads" runs the scans that use threads on
# them even for these tiny inputs (the result must not depend on it).
def ref_greedy_cover(D, tol, pos, alive):
    """Greedy by count (ties: smaller pos), then prune least preferred first; the triples examined."""
    n = len(D)
    viol = set(taxa.reference_violated(D, tol))
    live = [bool(alive[v]) for v in range(n)]
    left = [t for t in viol if all(live[v] for v in t)]
    picked, work = [], 0
    while True:
        cnt = [sum(v in t for t in left) for v in range(n)]
        cands = [v for v in range(n) if live[v] and cnt[v] > 0]
        if not cands:
            break
        v = min(cands, key=lambda u: (-cnt[u], pos[u]))
        picked.append(v)
        live[v] = False
        work += sum(n - j - 1 for j in range(n) if live[j] and D[v, j] == D[v, j])
        left = [t for t in left if v not in t]
    kept = [bool(alive[v]) and v not in picked for v in range(n)]
    for v in sorted(picked, key=lambda u: -pos[u]):
        fits = True
        for j in range(n):
            if not kept[j] or j == v or D[v, j] != D[v, j]:
                continue
            work += n - j - 1
            if any(kept[k] and k != v and tuple(sorted((v, j, k))) in viol for k in range(j + 1, n)):
                fits = False
                break
        if fits:
            kept[v] = True
    return [v for v in range(n) if alive[v] and not kept[v]], work


def ref_link_matchings(D, tol, alive, cand, cap):
    n = len(D)
    viol = set(taxa.reference_violated(D, tol))
    out, work = [], 0
    for v in cand:
        used, mu = set(), 0
        for j in range(n):
            if not alive[j] or j == v or j in used or D[v, j] != D[v, j]:
                continue
            for k in range(j + 1, n):
                work += 1
                if alive[k] and k != v and k not in used and tuple(sorted((v, j, k))) in viol:
                    used |= {j, k}
                    mu += 1
                    break
            if mu > cap:
                break
        out.append(mu)
    return out, work


def ref_packing(D, tol, order):
    viol = set(taxa.reference_violated(D, tol))
    used, out, work = set(), [], 0
    L = len(order)
    for a in range(L):
        i = order[a]
        if i in used:
            continue
        for b in range(a + 1, L):
            j = order[b]
            if j in used or D[i, j] != D[i, j]:
                continue
            for c in range(b + 1, L):
                work += 1
                k = order[c]
                if k not in used and tuple(sorted((i, j, k))) in viol:
                    used |= {i, j, k}
                    out.append([i, j, k])
                    break
            if i in used:
                break
    return out, work


@pytest.fixture(params=["serial", "threads"])
def threads(request, monkeypatch):
    if request.param == "threads":
        monkeypatch.setattr(taxa, "PARALLEL_MIN_N", 0)
        monkeypatch.setattr(kept_graph, "PARALLEL_MIN_N", 0)
    return request.param


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(small(max_n=10), st.integers(0, 2**32 - 1))
def test_taxa_kernels_match_plain_loops(threads, D, seed):
    rng = np.random.default_rng(seed)
    n = len(D)
    alive = rng.random(n) < 0.8
    ref = [t for t in taxa.reference_violated(D, TOL) if alive[list(t)].all()]
    assert [tuple(t) for t in taxa.violated_taxon_triangles(D, TOL, alive).tolist()] == ref
    assert taxa.taxon_counts(D, TOL, alive).tolist() == [sum(v in t for t in ref) for v in range(n)]
    pos = rng.permutation(n)
    cover, work = taxa.greedy_cover(D, TOL, pos, alive)
    assert (cover.tolist(), work) == ref_greedy_cover(D, TOL, pos, alive)
    cand = rng.permutation(n)[: rng.integers(0, n + 1)]
    cap = int(rng.integers(0, 4))
    mu, work = taxa.link_matchings(D, TOL, alive, cand, cap)
    assert (mu.tolist(), work) == ref_link_matchings(D, TOL, alive, cand.tolist(), cap)
    order = rng.permutation(n)
    packed, work = taxa.packing(D, TOL, order)
    assert (packed.tolist(), work) == ref_packing(D, TOL, order.tolist())


def ref_dijkstra(W, s):
    n = len(W)
    dist, pred, done = [math.inf] * n, [-1] * n, [False] * n
    dist[s] = 0.0
    for _ in range(n):
        u, best = -1, math.inf
        for v in range(n):
            if not done[v] and dist[v] < best:
                best, u = dist[v], v
        if u < 0:
            break
        done[u] = True
        for v in range(n):
            if not done[v] and best + W[u, v] < dist[v]:
                dist[v], pred[v] = best + W[u, v], u
    return dist, pred


def ref_violated_sides(D, tol):
    """Violated triangles (i, j, k, heavy) with every side observed; heavy by the first test that holds."""
    out = []
    for i, j, k in itertools.combinations(range(len(D)), 3):
        dij, dik, djk = D[i, j], D[i, k], D[j, k]
        tests = [dij > dik + djk + tol, dik > dij + djk + tol, djk > dij + dik + tol]
        if any(tests):
            out.append((i, j, k, tests.index(True)))
    return out


def ref_greedy_hitting(n, tri, cand, w, alive, bias):
    """A full scan per step for the side of largest (unhit triangles + bias) / weight, first among equals."""
    sides = [[(t[0], t[1]), (t[0], t[2]), (t[1], t[2])] for t in tri]
    hit = [not a for a in alive]
    picked, counts = [], []
    while True:
        cnt = {}
        for t in range(len(tri)):
            if not hit[t]:
                for s in range(3):
                    if cand[t][s]:
                        cnt[sides[t][s]] = cnt.get(sides[t][s], 0) + 1
        best, be = 0.0, None
        for a in range(n):
            for b in range(a + 1, n):
                c = cnt.get((a, b), 0)
                if c > 0:
                    score = math.inf if w[a, b] == 0 else (c + bias[a, b]) / w[a, b]
                    if score > best:
                        best, be = score, (a, b)
        if be is None:
            return picked, counts
        picked.append(be[0] * n + be[1])
        counts.append(cnt[be])
        for t in range(len(tri)):
            if any(cand[t][s] and sides[t][s] == be for s in range(3)):
                hit[t] = True


def ref_packing_bound(tri, cand, w, order):
    R = np.array(w, dtype=np.float64)
    total = 0.0
    for t in order:
        i, j, k = tri[t][:3]
        sides = [s for q, s in enumerate([(i, j), (i, k), (j, k)]) if cand[t][q]]
        y = min((R[s] for s in sides), default=math.inf)
        if 0 < y < math.inf:
            total += y
            for s in sides:
                R[s] -= y
    return total


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(small(max_n=9), st.integers(0, 2**32 - 1))
def test_kept_graph_kernels_match_plain_loops(threads, D, seed):
    rng = np.random.default_rng(seed)
    n = len(D)
    tri = kept_graph.violated_triangles(D, TOL)
    assert [tuple(t) for t in tri.tolist()] == ref_violated_sides(D, TOL)
    # shortest paths over the measured entries, some left out (inf), zeros allowed
    W = np.where(np.isnan(D) | (rng.random((n, n)) < 0.2), np.inf, D)
    W = np.minimum(W, W.T)
    s = int(rng.integers(n))
    dist, pred = kept_graph.dijkstra_kernel(W, s)
    rd, rp = ref_dijkstra(W, s)
    assert dist.tolist() == rd and pred.tolist() == rp
    # inserting an edge: the check, and the update of the shortest paths A
    A = apsp_reference(W)
    check = rng.random((n, n)) < 0.6
    i, j = (int(x) for x in rng.choice(n, 2, replace=False))
    w = float(rng.choice([0.0, 0.5, 1.0, 2.0, 7.5]))
    expect = all(not check[a, b] or not D[a, b] > min(A[a, i] + w + A[j, b], A[a, j] + w + A[i, b]) + TOL
                 for a in range(n) for b in range(n))
    assert kept_graph.insert_ok(A, D, check, i, j, w, TOL) == expect
    B = A.copy()
    kept_graph.insert_edge(B, i, j, w)
    ci, cj = A[:, i].copy(), A[:, j].copy()
    for a in range(n):
        for b in range(n):
            A[a, b] = min(A[a, b], min(ci[a] + w + cj[b], cj[a] + w + ci[b]))
    assert B.tobytes() == A.tobytes()
    # the sweep towards targets (Gauss-Seidel, entry by entry, k in order)
    X = np.where(np.isfinite(B), B, 10.0)
    X = np.minimum(X, X.T)
    np.fill_diagonal(X, 0.0)
    m = int(rng.integers(1, n * (n - 1) // 2 + 1))
    iu = np.triu_indices(n, 1)
    sel = rng.choice(len(iu[0]), m, replace=False)
    ei, ej = iu[0][sel], iu[1][sel]
    target, lower = rng.uniform(0, 9, m), rng.uniform(0, 1, m)
    Y = X.copy()
    sweeps = kept_graph.sweep_nearest(Y, ei, ej, target, lower, 1e-12, 7)
    ref_sweeps = 0
    for _ in range(7):
        ref_sweeps += 1
        moved = 0.0
        for e in range(m):
            a, b = ei[e], ej[e]
            ks = [k for k in range(n) if k not in (a, b)]
            hi = min([X[a, k] + X[b, k] for k in ks], default=math.inf)
            lo = max([lower[e]] + [abs(X[a, k] - X[b, k]) for k in ks])
            if lo > hi:
                continue
            v = min(max(target[e], lo), hi)
            moved = max(moved, abs(v - X[a, b]))
            X[a, b] = X[b, a] = v
        if moved <= 1e-12:
            break
    assert sweeps == ref_sweeps and Y.tobytes() == X.tobytes()
    # the greedy hitting set of the sides and the packing bound
    cand = rng.random((len(tri), 3)) < 0.8
    wts = np.triu(rng.choice([0.0, 0.5, 1.0, 2.0, 3.0], (n, n)), 1)
    wts = wts + wts.T
    alive = rng.random(len(tri)) < 0.9
    bias = rng.choice([0.0, 0.25], (n, n))
    picked, counts = kept_graph.greedy_hitting(n, tri, cand, wts, alive, bias)
    assert (picked.tolist(), counts.tolist()) == ref_greedy_hitting(n, tri.tolist(), cand.tolist(), wts, alive, bias)
    order = rng.permutation(len(tri))
    assert kept_graph.packing_bound(n, tri, cand, wts, order) == ref_packing_bound(tri.tolist(), cand.tolist(),
                                                                                  wts, order)


def test_threaded_scans_do_not_depend_on_the_thread_count(monkeypatch):
    # above PARALLEL_MIN_N the scans run on threads; the same matrix on one thread gives the same arrays
    rng = np.random.default_rng(5)
    n = max(taxa.PARALLEL_MIN_N, kept_graph.PARALLEL_MIN_N) + 3
    D = planted(n, [7, 300], seed=5) * np.exp(rng.normal(0, 0.02, (n, n)))
    D = np.triu(D, 1)
    D[rng.random((n, n)) < 0.01] = np.nan
    D = D + D.T
    runs = []
    for least in (0, 10**9):
        monkeypatch.setattr(taxa, "PARALLEL_MIN_N", least)
        monkeypatch.setattr(kept_graph, "PARALLEL_MIN_N", least)
        runs.append((taxa.taxon_counts(D, TOL), taxa.violated_taxon_triangles(D, TOL),
                     kept_graph.violated_triangles(D, TOL)))
    for a, b in zip(*runs):
        assert a.tobytes() == b.tobytes()
    assert len(runs[0][1]) == count_violations(D, TOL)[0] > 0 and len(runs[0][2]) > 0


# ------------------------------------------------------------------ fewest taxa against brute force
@settings(max_examples=80, deadline=None)
@given(small())
def test_fewest_taxa_equals_brute_force(D):
    names = labels(len(D))[::-1]  # label order differs from index order
    size, best_sum, preferred = taxa.reference_fewest_taxa(D, TOL, names)
    r = taxa.fewest_taxa(D, TOL, labels=names)
    assert len(r.taxa) == size
    assert r.optimal and r.lower_bound == size
    assert kept_violations(D, r.taxa) == 0
    pos = taxa.preference_positions(taxa.taxon_counts(D, TOL), names)
    if "integer program" in r.details["method"]:
        # ties broken by the preference order: the least sum of positions
        assert int(pos[r.taxa].sum()) == best_sum
        assert tuple(r.taxa.tolist()) in preferred


@settings(max_examples=80, deadline=None)
@given(small())
def test_heuristic_is_a_cover_and_never_below_its_bound(D):
    size, _, _ = taxa.reference_fewest_taxa(D, TOL)
    r = taxa.fewest_taxa(D, TOL, method="heuristic")
    assert r.lower_bound <= size <= len(r.taxa)
    assert kept_violations(D, r.taxa) == 0
    assert r.optimal == (r.lower_bound == len(r.taxa))
    g, _ = taxa.greedy_cover(D, TOL, np.arange(len(D)))
    assert kept_violations(D, g) == 0 and len(g) >= size


@pytest.mark.parametrize("seed", range(4))
def test_heuristic_bound_and_exact_on_noisy_matrices(seed):
    # beyond brute force: the exact answer lies between the heuristic's bound and its cover
    rng = np.random.default_rng(seed)
    D = euclidean(24, seed=seed) * np.exp(rng.normal(0, 0.2, (24, 24)))
    D = np.triu(D, 1)
    D = D + D.T
    D[3, 7] = D[7, 3] = np.nan
    h = taxa.fewest_taxa(D, TOL, method="heuristic")
    e = taxa.fewest_taxa(D, TOL, method="exact")
    assert e.optimal and e.lower_bound == len(e.taxa)
    assert h.lower_bound <= len(e.taxa) <= len(h.taxa)
    assert kept_violations(D, h.taxa) == 0 and kept_violations(D, e.taxa) == 0


def test_forcing_keeps_only_taxa_of_every_least_cover():
    # taxon 0 is far from 1-4 and very near 5-8: (0, a, b) is violated for a in 1-4, b in 5-8,
    # four disjoint pairs; a cover without 0 needs 4 taxa, so 0 is forced
    n = 9
    D = np.ones((n, n)) - np.eye(n)
    D[0, 1:5] = D[1:5, 0] = 10.0
    D[0, 5:] = D[5:, 0] = 0.1
    D[2, 3] = D[3, 2] = 5.0  # one more violated triangle (2, 3, x) without 0
    r = taxa.fewest_taxa(D, TOL)
    assert 0 in r.forced.tolist() and r.details["forced"] == len(r.forced)
    covers = least_covers(D)
    assert all(0 in c for c in covers)
    assert set(r.taxa.tolist()) in covers and r.optimal


@settings(max_examples=60, deadline=None)
@given(small(), st.sampled_from([[], [0], [1, 2]]))
def test_forced_taxa_are_in_every_least_cover(D, far):
    # rows made far from half the taxa and near the others give the forcing rule work to do
    n = len(D)
    for v in far:
        if v < n:
            D[v, :] = D[:, v] = np.where(np.arange(n) % 2, 7.5, 0.5)
            D[v, v] = 0.0
    r = taxa.fewest_taxa(D, TOL, method="heuristic")
    covers = least_covers(D)
    assert set(r.forced.tolist()) <= set.intersection(*covers)
    assert set(r.forced.tolist()) <= set(r.taxa.tolist()) or not r.optimal
    if r.optimal:
        assert set(r.taxa.tolist()) in covers


@pytest.mark.parametrize("n,bad", [(12, [5]), (30, [17]), (60, [3, 40, 41])])
def test_planted_bad_rows_are_found(n, bad):
    D = planted(n, bad, seed=n)
    r = taxa.fewest_taxa(D, TOL, labels=labels(n))
    assert sorted(r.taxa.tolist()) == bad and r.optimal
    assert kept_violations(D, r.taxa) == 0


def test_work_budget_not_clock():
    D = planted(40, [1, 2], seed=1)
    D = D * np.exp(np.random.default_rng(1).normal(0, 0.3, D.shape))
    D = np.triu(D, 1)
    D = D + D.T
    b = Budget(0.01)
    r = taxa.fewest_taxa(D, TOL, budget=b)
    assert kept_violations(D, r.taxa) == 0  # a tiny budget still gives a valid answer
    assert r.lower_bound <= len(r.taxa)
    again = taxa.fewest_taxa(D, TOL, budget=Budget(0.01))
    assert again.taxa.tolist() == r.taxa.tolist() and again.details == r.details


# ------------------------------------------------------------------ the engine
@settings(max_examples=40, deadline=None)
@given(small(), st.sampled_from(["shrink", "fewest", "l2"]))
def test_repair_leave_out_fewest_leaves_no_violated_triangle(D, objective):
    n = len(D)
    dm = DistanceMatrix.from_array(D, labels(n))
    size, _, _ = taxa.reference_fewest_taxa(D, TOL)
    if n - size < 3:
        with pytest.raises(InputError, match="a repair needs at least 3"):
            repair(dm, objective, tol=TOL, leave_out="fewest", progress=False)
        return
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # taxa cut off from the rest are named in a warning
            r = repair(dm, objective, tol=TOL, leave_out="fewest", progress=False)
    except InputError as exc:  # the measured entries left may not join 3 taxa
        assert "at least 3" in str(exc)
        return
    rep = r.report
    fewest = [lab for lab, why in rep.left_out_reasons.items() if why == taxa_reason()]
    assert len(fewest) == size and rep.leave_out_optimal and rep.leave_out_lower_bound == size
    idx = [dm.index(lab) for lab in fewest]
    assert kept_violations(D, idx) == 0
    assert rep.violated_before == 0 or rep.unmeasured_taxa
    assert is_metric(r.matrix.values, TOL)
    assert list(r.matrix.labels) == [lab for lab in dm.labels if lab not in rep.left_out_taxa]


def taxa_reason():
    from seqdist.repair.engine import REASON_FEWEST

    return REASON_FEWEST


def test_report_keys_and_reasons():
    D = planted(20, [4], seed=2)
    dm = DistanceMatrix.from_array(D, labels(20))
    r = repair(dm, "shrink", leave_out="fewest", progress=False)
    rep = r.report
    assert rep.left_out_taxa == ["t04"]
    assert rep.left_out_reasons == {"t04": "in the fewest taxa whose removal leaves a metric"}
    assert rep.leave_out == "fewest" and rep.leave_out_optimal is True and rep.leave_out_lower_bound == 1
    assert rep.violated_before_leaving_out == count_violations(D, rep.tol)[0] > 0
    assert rep.violated_before == 0 and rep.changed_entries == 0 and rep.n == 19 and rep.n_input == 20
    r = repair(dm, "l2", leave_out=["t09", "t01", "t09"], progress=False)
    assert r.report.left_out_taxa == ["t01", "t09"] and r.report.leave_out == ["t09", "t01"]
    assert r.report.left_out_reasons == {"t01": "named by the user", "t09": "named by the user"}
    assert r.report.leave_out_optimal is None and "leave_out_optimal" not in r.report.to_dict()
    r = repair(dm, "shrink", leave_out={"t03": "suspect: chimera"}, progress=False)
    assert r.report.left_out_reasons == {"t03": "suspect: chimera"}
    r = repair(dm, "shrink", progress=False)
    assert r.report.left_out_taxa == [] and r.report.left_out_reasons == {} and r.report.leave_out is None


def test_unmeasured_and_named_reasons_combine():
    D = planted(8, [], seed=3)
    D[7, :7] = D[:7, 7] = np.nan
    dm = DistanceMatrix.from_array(D, labels(8))
    with pytest.warns(UserWarning, match="no measured distance"):
        r = repair(dm, "shrink", leave_out=["t07", "t02"], progress=False)
    why = r.report.left_out_reasons
    assert r.report.left_out_taxa == ["t02", "t07"]
    assert why["t02"] == "named by the user"
    assert why["t07"].startswith("no measured distance") and why["t07"].endswith("also named by the user")


def test_leaving_out_a_bridge_leaves_out_what_it_joined():
    # t0 alone joins {t1, t2, t3} to {t4, t5, t6, t7}: once it is out, no measured distance joins them
    D = planted(8, [], seed=4)
    D[1:4, 4:] = D[4:, 1:4] = np.nan
    dm = DistanceMatrix.from_array(D, labels(8))
    with pytest.warns(UserWarning, match="once t00 was left out"):
        r = repair(dm, "shrink", leave_out=["t00"], progress=False)
    assert r.report.left_out_taxa == ["t00", "t01", "t02", "t03"]
    assert r.report.left_out_reasons["t02"] == "no measured distance to the other taxa once t00 was left out"
    assert r.report.filled_without_evidence == 0
    with pytest.warns(UserWarning, match="kept although"):
        r = repair(dm, "shrink", leave_out=["t00"], keep_unmeasured=True, progress=False)
    assert r.report.left_out_taxa == ["t00"] and r.report.filled_without_evidence == 12


@pytest.mark.parametrize("leave_out,needle", [
    (["t01", "nope"], "leave_out: unknown label 'nope'"),
    ("everything", "leave_out must be 'suspects', 'fewest' or a list of labels"),
    ([f"t{i:02d}" for i in range(4)], "leaving out 4 of 6 taxa (t00, t01, t02, t03) leaves 2; a repair needs at least 3"),  # noqa: E501 (the exact message)
    ({"t01": 3}, "the reason for 't01' must be text"),
])
def test_bad_requests(leave_out, needle):
    dm = DistanceMatrix.from_array(planted(6, [], seed=5), labels(6))
    with pytest.raises(InputError) as exc:
        repair(dm, "shrink", leave_out=leave_out, progress=False)
    assert needle in str(exc.value)


def test_lock_on_a_left_out_taxon_is_an_input_error():
    dm = DistanceMatrix.from_array(planted(10, [2], seed=6), labels(10))
    with pytest.raises(InputError, match=r"locked pair \(t02, t05\) involves t02, which is left out "
                                         r"\(in the fewest taxa whose removal leaves a metric\)"):
        repair(dm, "l2", lock=[("t02", "t05")], leave_out="fewest", progress=False)
    with pytest.raises(InputError, match=r"which is left out \(named by the user\)"):
        repair(dm, "l2", lock=[("t05", "t02")], leave_out=["t02"], progress=False)


def test_fewest_with_a_time_limit_leaves_work_to_the_objective():
    D = planted(30, [3], seed=7)
    r = repair(D, "fewest", leave_out="fewest", time_limit=5, progress=False)
    assert r.report.left_out_taxa == ["t3"] and r.report.time_limit < 5
    assert r.report.leave_out_details["work"] <= 2.5


# ------------------------------------------------------------------ suspects
def test_suspects_left_out_with_their_first_reason():
    sus = pytest.importorskip("seqdist.audit.suspects")
    if not hasattr(sus, "find_suspects"):
        pytest.skip("seqdist.audit.suspects has no find_suspects yet")
    D = planted(30, [11], seed=8)
    dm = DistanceMatrix.from_array(D, labels(30))
    named = sus.find_suspects(dm).suspects
    try:
        r = repair(dm, "shrink", leave_out="suspects", progress=False)
    except InputError as exc:  # so many suspects that fewer than 3 taxa stay
        assert "a repair needs at least 3" in str(exc)
        return
    assert sorted(r.report.left_out_taxa) == sorted(s.label for s in named)
    for s in named:
        first = s.reasons[0] if s.reasons else None
        why = r.report.left_out_reasons[s.label]
        assert why == (f"suspect sequence: {first}" if first else why) and why.startswith("suspect sequence")
    assert r.report.leave_out == "suspects"


# ------------------------------------------------------------------ the command line
@pytest.fixture
def mfile(tmp_path):
    p = tmp_path / "m.tsv"
    write_tsv(p, labels(16), planted(16, [6], seed=10))
    return p


def test_cli_fewest_list_and_file(tmp_path, cli, mfile):
    out, js = tmp_path / "o.tsv", tmp_path / "r.json"
    p = cli("repair", mfile, "-o", out, "--objective", "shrink", "--leave-out-fewest", "--json", js)
    assert p.returncode == 0, p.stderr
    r = json.loads(open_text(js))
    for key in ("left_out_taxa", "left_out_reasons", "leave_out", "leave_out_lower_bound", "leave_out_optimal",
                "violated_before_leaving_out"):
        assert key in r
    assert r["left_out_taxa"] == ["t06"] and r["leave_out"] == "fewest" and r["leave_out_optimal"]
    assert "left out 1 taxa: t06 (the fewest whose removal leaves no violated triangle, proven)" in p.stderr
    assert open_text(out).splitlines()[0].split("\t")[1:] == [lab for lab in labels(16) if lab != "t06"]

    p = cli("repair", mfile, "-o", out, "--objective", "l2", "--leave-out", "t03,t09", "--leave-out", "t01",
            "--json", js)
    assert p.returncode == 0, p.stderr
    r = json.loads(open_text(js))
    assert r["left_out_taxa"] == ["t01", "t03", "t09"] and r["leave_out"] == ["t03", "t09", "t01"]
    assert "left out 3 taxa: t01, t03, t09 (named)" in p.stderr

    lf = tmp_path / "out.txt"
    lf.write_text("# bad rows\nt05\n\n  t11  \r\n")
    p = cli("repair", mfile, "-o", out, "--objective", "shrink", "--leave-out-file", lf, "--json", js)
    assert p.returncode == 0, p.stderr
    r = json.loads(open_text(js))
    assert r["left_out_taxa"] == ["t05", "t11"]
    assert r["left_out_reasons"] == {"t05": "named by the user", "t11": "named by the user"}


@pytest.mark.parametrize("args,needle", [
    (["--leave-out", "t01,zz9"], "seqdist: error: --leave-out: unknown label 'zz9' (not in "),
    (["--leave-out", "t01,,t02"], "seqdist: error: --leave-out: an empty label in 't01,,t02'"),
    (["--leave-out", ",".join(labels(14))], "leaves 2; a repair needs at least 3"),
    (["--leave-out", "t01", "--leave-out-fewest"], "not allowed with argument --leave-out"),
])
def test_cli_bad_leave_out_exits_2_with_one_line(tmp_path, cli, mfile, args, needle):
    out = tmp_path / "o.tsv"
    out.write_text("precious\n")
    p = cli("repair", mfile, "-o", out, "--objective", "shrink", *args)
    assert p.returncode == 2
    assert len(p.stderr.strip().splitlines()) == 1 and needle in p.stderr, p.stderr
    assert out.read_text() == "precious\n"


def test_cli_bad_label_file_names_file_and_line(tmp_path, cli, mfile):
    lf = tmp_path / "out.txt"
    lf.write_text("t01\n# note\nt1x\n")
    p = cli("repair", mfile, "-o", tmp_path / "o.tsv", "--objective", "shrink", "--leave-out-file", lf)
    assert p.returncode == 2 and not (tmp_path / "o.tsv").exists()
    assert p.stderr.strip() == f"seqdist: error: {lf}: line 3: unknown label 't1x' (not in {mfile})"
    p = cli("repair", mfile, "-o", tmp_path / "o.tsv", "--objective", "shrink", "--leave-out-file",
            tmp_path / "absent.txt")
    assert p.returncode == 2 and len(p.stderr.strip().splitlines()) == 1 and "absent.txt" in p.stderr


def test_cli_deterministic_bytes(tmp_path, cli):
    rng = np.random.default_rng(11)
    D = planted(30, [2, 20], seed=11) * np.exp(rng.normal(0, 0.05, (30, 30)))
    D = np.triu(D, 1)
    D = D + D.T
    m = tmp_path / "m.tsv"
    write_tsv(m, labels(30), D)
    outs = []
    for k in range(2):
        o, c, j = tmp_path / f"o{k}.tsv", tmp_path / f"c{k}.tsv", tmp_path / f"r{k}.json"
        p = cli("repair", m, "-o", o, "--objective", "fewest", "--leave-out-fewest", "--changes", c, "--json", j)
        assert p.returncode == 0, p.stderr
        rep = json.loads(open_text(j))
        rep.pop("seconds")
        rep["details"].pop("seconds", None)
        outs.append((o.read_bytes(), c.read_bytes(), json.dumps(rep, sort_keys=True)))
    assert outs[0] == outs[1]
    assert {"t02", "t20"} <= set(json.loads(outs[0][2])["left_out_taxa"])
