"""The fewest objective against a brute-force search that does not use our cycle theory.

Reference: for each candidate change set S (smallest first), scipy's
``linprog`` (HiGHS) decides whether some metric keeps every other entry
exactly (all triangle inequalities of the complete matrix as rows; missing
entries free). The smallest feasible S is the optimum. This checks the
kept-set criterion of docs/repair.md (no kept entry longer than its
shortest kept path) independently.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import linprog

from seqdist.core.errors import InfeasibleError
from seqdist.kernels.triangles import is_metric
from seqdist.repair import repair

from conftest import euclidean


def feasible_lp(D, S, grow=False):
    """Is there a metric X with X = D off S (observed entries), X >= D on S when grow?"""
    n = len(D)
    pairs = list(itertools.combinations(range(n), 2))
    free = [p for p in pairs if p in S or np.isnan(D[p])]
    if not free:
        X = D
        return all(X[i, j] <= X[i, k] + X[k, j] + 1e-9 for i, j in pairs for k in range(n) if k not in (i, j))
    idx = {p: q for q, p in enumerate(free)}
    rows, rhs = [], []
    for i, j, k in itertools.permutations(range(n), 3):
        if i > j:
            continue
        # x_ij - x_ik - x_kj <= 0 with fixed entries moved to the right-hand side
        row = np.zeros(len(free))
        b = 0.0
        for (a, c), sgn in (((i, j), 1.0), ((min(i, k), max(i, k)), -1.0), ((min(k, j), max(k, j)), -1.0)):
            if (a, c) in idx:
                row[idx[(a, c)]] += sgn
            else:
                b -= sgn * D[a, c]
        if row.any():
            rows.append(row)
            rhs.append(b)
        elif b < -1e-9:
            return False
    lo = [D[p] if (grow and p in S) else 0.0 for p in free]
    res = linprog(np.zeros(len(free)), A_ub=np.array(rows) if rows else None, b_ub=np.array(rhs) if rows else None,
                  bounds=list(zip(lo, [None] * len(free))), method="highs")
    return res.status == 0


def brute_force(D, w=None, grow=False, locked=()):
    n = len(D)
    cand = [p for p in itertools.combinations(range(n), 2) if not np.isnan(D[p]) and p not in locked]
    best = None
    for s in range(len(cand) + 1):
        for S in itertools.combinations(cand, s):
            cost = len(S) if w is None else sum(w[p] for p in S)
            if best is not None and cost >= best:
                continue
            if feasible_lp(D, set(S), grow):
                best = cost
        if w is None and best is not None:
            break
    return best


def small_cases():
    rng = np.random.default_rng(11)
    out = []
    for n in (4, 5, 5, 6):
        D = euclidean(n, seed=int(rng.integers(1000)))
        k = int(rng.integers(1, 3))
        iu = np.triu_indices(n, 1)
        for q in rng.choice(len(iu[0]), k, replace=False):
            i, j = iu[0][q], iu[1][q]
            D[i, j] = D[j, i] = D[i, j] * (4.0 if rng.random() < 0.5 else 0.1)
        out.append(D)
    # dense random values: many broken cycles, optimum of several entries
    for n in (4, 5):
        a = np.triu(rng.choice([0.0, 1.0, 2.0, 3.0, 6.0], (n, n)), 1)
        out.append(a + a.T)
    return out


@pytest.mark.parametrize("case", range(6))
def test_fewest_matches_brute_force(case):
    D = small_cases()[case]
    opt = brute_force(D)
    r = repair(D, "fewest", method="exact", progress=False)
    assert r.report.objective_value == opt
    assert r.report.optimal and r.report.lower_bound == opt
    assert is_metric(r.matrix.values, r.report.tol)
    h = repair(D, "fewest", method="heuristic", progress=False)
    assert h.report.lower_bound <= opt <= h.report.objective_value


def test_fewest_weighted_matches_brute_force():
    rng = np.random.default_rng(5)
    D = small_cases()[1]
    W = np.triu(rng.choice([0.5, 1.0, 3.0], D.shape), 1)
    W = W + W.T
    opt = brute_force(D, w={p: W[p] for p in itertools.combinations(range(len(D)), 2)})
    r = repair(D, "fewest", weights=W, method="exact", progress=False)
    assert np.isclose(r.report.objective_value, opt) and r.report.optimal


def test_fewest_with_missing_entry_matches_brute_force():
    D = small_cases()[2].copy()
    D[0, 3] = D[3, 0] = np.nan
    opt = brute_force(D)
    r = repair(D, "fewest", method="exact", progress=False)
    assert r.report.objective_value == opt and np.isfinite(r.matrix.values).all()


def test_triangles_alone_are_not_enough():
    # the 4-cycle example of docs/repair.md: a-b, b-c, c-d of length 1, a-d = 10, chords a-c = b-d = 2
    a, b, c, d = range(4)
    D = np.zeros((4, 4))
    for (i, j, v) in [(a, b, 1), (b, c, 1), (c, d, 1), (a, d, 10), (a, c, 2), (b, d, 2)]:
        D[i, j] = D[j, i] = v
    from seqdist.kernels.kept_graph import violated_triangles

    tri = {tuple(t[:3]) for t in violated_triangles(D, 1e-9)}
    assert tri == {(a, b, d), (a, c, d)}
    # S = {a-c, b-d} meets both violated triangles, yet no metric keeps the rest (LP says so)
    assert not feasible_lp(D, {(a, c), (b, d)})
    assert feasible_lp(D, {(a, d)})
    r = repair(D, "fewest", lock=[(a, d)], method="exact", progress=False)
    assert r.report.objective_value == brute_force(D, locked={(a, d)}) == 2


def test_planted_gross_errors_are_found_and_proven():
    # planted corruption in a Euclidean metric (common practice for repair benchmarks)
    rng = np.random.default_rng(2)
    n = 40
    D = euclidean(n, seed=3)
    iu = np.triu_indices(n, 1)
    sel = rng.choice(len(iu[0]), 20, replace=False)
    for q in sel:
        i, j = iu[0][q], iu[1][q]
        D[i, j] = D[j, i] = D[i, j] * (3.0 if q % 2 else 0.1) + (1.0 if q % 2 else 0.0)
    r = repair(D, "fewest", progress=False)
    assert r.report.optimal and r.report.objective_value <= 20
    assert r.report.lower_bound == r.report.objective_value


def test_metric_input_unchanged():
    D = euclidean(25, seed=8)
    for obj in ("fewest", "grow"):
        r = repair(D, obj, progress=False)
        assert np.array_equal(r.matrix.values, D) and r.report.optimal and r.report.objective_value == 0


def test_time_limit_returns_verified_answer():
    rng = np.random.default_rng(4)
    n = 30
    D = euclidean(n, seed=4) * np.exp(rng.normal(0, 0.3, (n, n)))
    D = np.triu(D, 1)
    D = D + D.T
    r = repair(D, "fewest", method="exact", time_limit=3, progress=False)
    assert is_metric(r.matrix.values, r.report.tol)
    assert r.report.lower_bound <= r.report.objective_value
    assert r.report.optimal == (r.report.lower_bound == r.report.objective_value)


@st.composite
def sym(draw):
    n = draw(st.integers(3, 8))
    vals = draw(st.lists(st.sampled_from([0.0, 0.5, 1.0, 1.0, 2.0, 3.0, 7.5]), min_size=n * n, max_size=n * n))
    a = np.triu(np.array(vals).reshape(n, n), 1)
    if draw(st.booleans()):
        a[0, n - 1] = np.nan
    a = a + a.T
    np.fill_diagonal(a, 0.0)
    lock = draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)).filter(lambda p: p[0] < p[1]
                                                                                       and p != (0, n - 1)),
                         max_size=3, unique=True))
    return a, lock


@settings(max_examples=40, deadline=None)
@given(sym(), st.sampled_from(["fewest", "grow"]), st.sampled_from(["heuristic", "exact"]))
def test_outputs_are_metrics_locks_hold_and_directions(case, obj, method):
    D, lock = case
    try:
        r = repair(D, obj, lock=lock, method=method, progress=False)
    except InfeasibleError:
        # the engine refused: check that the LP agrees that no repair keeps the locks
        S = {p for p in itertools.combinations(range(len(D)), 2) if p not in lock and not np.isnan(D[p])}
        assert not feasible_lp(D, S, grow=(obj == "grow"))
        return
    X = r.matrix.values
    tol = r.report.tol
    assert is_metric(X, tol)
    for i, j in lock:
        assert X[i, j] == D[i, j]
    obs = ~np.isnan(D)
    if obj == "grow":
        assert (X[obs] >= D[obs] - tol).all()
    assert r.report.lower_bound <= r.report.objective_value + 1e-9
    assert r.report.changed_entries == (r.report.objective_value)


# ---------------------------------------------------------------- weights, locks and missing entries together
def noisy_case(n, seed, sigma=0.3, n_missing=5, n_locks=3, stretch=4.0):
    """Noisy Euclidean distances (common practice) with weights in {0, .5, 1, 2, 5}, missing
    entries, random locks, and the first locked entry stretched (a long entry that must stay)."""
    rng = np.random.default_rng(seed)
    D = euclidean(n, seed=seed) * np.exp(rng.normal(0, sigma, (n, n)))
    D = np.triu(D, 1)
    D = D + D.T
    W = np.triu(rng.choice([0.0, 0.5, 1.0, 2.0, 5.0], (n, n)), 1)
    W = W + W.T
    iu = np.triu_indices(n, 1)
    miss = rng.choice(len(iu[0]), n_missing, replace=False)
    D[iu[0][miss], iu[1][miss]] = D[iu[1][miss], iu[0][miss]] = np.nan
    obs = np.setdiff1d(np.arange(len(iu[0])), miss)
    lock = [(int(iu[0][q]), int(iu[1][q])) for q in rng.choice(obs, n_locks, replace=False)]
    i, j = lock[0]
    D[i, j] = D[j, i] = D[i, j] * stretch
    return D, W, lock


def test_long_locked_entry_in_a_dense_matrix_is_repaired():
    # Regression: a locked entry 4x its true length in a 25-taxon matrix has hundreds of short
    # kept paths; the kept-set repair cut one entry per shortest-path round and gave up after
    # 100 rounds ("could not make the kept set feasible", exit 1) while l1 solved the problem.
    D, W, lock = noisy_case(25, 1)
    assert repair(D, "l1", lock=lock, progress=False).report.optimal  # feasible
    for weights in (None, W):
        for obj in ("fewest", "grow"):
            r = repair(D, obj, weights=weights, lock=lock, method="heuristic", progress=False)
            X = r.matrix.values
            assert is_metric(X, r.report.tol) and all(X[i, j] == D[i, j] for i, j in lock)
            assert r.report.lower_bound <= r.report.objective_value


@st.composite
def weighted_locked(draw):
    n = draw(st.integers(6, 12))
    seed = draw(st.integers(0, 10 ** 6))
    n_locks = draw(st.integers(1, 4))
    stretch = draw(st.sampled_from([1.0, 2.0, 4.0, 10.0]))
    return noisy_case(n, seed, sigma=draw(st.sampled_from([0.1, 0.4])), n_missing=draw(st.integers(0, 3)),
                      n_locks=n_locks, stretch=stretch)


@settings(max_examples=40, deadline=None, derandomize=True)
@given(weighted_locked(), st.sampled_from(["fewest", "grow"]), st.sampled_from(["heuristic", "exact"]))
def test_weights_locks_missing_either_a_verified_metric_or_an_lp_confirmed_infeasibility(case, obj, method):
    D, W, lock = case
    n = len(D)
    try:
        r = repair(D, obj, weights=W, lock=lock, method=method, progress=False)
    except InfeasibleError:
        # independent check (scipy linprog, every triangle row): no metric keeps the locks
        # (fewest), or none keeps them while never decreasing an entry (grow)
        S = {p for p in itertools.combinations(range(n), 2) if p not in lock and not np.isnan(D[p])}
        assert not feasible_lp(D, S, grow=(obj == "grow"))
        return
    X, tol = r.matrix.values, r.report.tol
    assert is_metric(X, tol)
    assert all(X[i, j] == D[i, j] for i, j in lock)
    obs = ~np.isnan(D)
    if obj == "grow":
        assert (X[obs] >= D[obs] - tol).all()
    changed = np.triu(obs, 1) & (np.abs(X - np.where(obs, D, 0.0)) > tol)
    assert np.isclose(r.report.objective_value, W[changed].sum())
    assert r.report.lower_bound <= r.report.objective_value + 1e-9


# ---------------------------------------------------------------- magnitudes
@pytest.mark.parametrize("obj", ["shrink", "fewest", "grow"])
@pytest.mark.parametrize("dscale,wscale", [(1e100, 1.0), (1e-100, 1.0), (1.0, 1e250), (1.0, 1e30), (1.0, 1e-250)])
def test_extreme_magnitudes_give_the_scaled_answer(obj, dscale, wscale):
    # Scaling distances changes nothing in a count and scaling weights scales it (common
    # practice). Before: weights of 1e30 or more were infinite costs to HiGHS (the exact stage
    # stopped with "solver status 4", optimal false) and at 1e-250 an absolute 1e-9 test called
    # 8e-250 against a bound of 6e-250 optimal.
    import warnings

    D = small_cases()[5]  # dense random values: the heuristic alone is not proven optimal
    W = np.ones_like(D)
    np.fill_diagonal(W, 0.0)
    base = repair(D, obj, weights=W, progress=False).report
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        r = repair(D * dscale, obj, weights=W * wscale, progress=False)
    X, rep = r.matrix.values, r.report
    assert is_metric(X, rep.tol) and np.isfinite(rep.objective_value)
    assert rep.lower_bound <= rep.objective_value
    assert rep.optimal == base.optimal == True  # noqa: E712
    factor = wscale * (dscale if obj == "shrink" else 1.0)
    assert np.isclose(rep.objective_value, base.objective_value * factor, rtol=1e-12)
    assert np.isclose(rep.lower_bound, rep.objective_value, rtol=1e-12)
