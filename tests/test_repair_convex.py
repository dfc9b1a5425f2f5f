"""The convex repair objectives ``l1`` and ``l2`` against general-purpose solvers.

References (outside the project):

* l2 (metric nearness, Brickell, Dhillon, Sra & Tropp 2008, "The metric
  nearness problem", SIAM J. Matrix Anal. Appl. 30(1)): the same convex
  program written out in cvxpy with every triangle inequality, solved by
  CLARABEL (an interior-point conic solver).
* l1: the linear program with every triangle row, built here independently
  and solved by scipy's ``linprog`` (HiGHS); and the same problem in cvxpy
  (solver HIGHS).
* Worked examples: the projection of (5, 1, 1) onto the half-space
  ``a <= b + c`` is (4, 2, 2) (the textbook projection onto a half-space,
  x - (a.x / |a|^2) a; common practice).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from seqdist.kernels.triangles import is_metric
from seqdist.repair import l1, l2, repair
from seqdist.repair.problem import RepairProblem

from conftest import euclidean

cp = pytest.importorskip("cvxpy")


# ------------------------------------------------------------------ helpers
def problem(D, W=None, L=None, **options):
    D = np.array(D, dtype=float)
    n = len(D)
    obs = ~np.isnan(D)
    np.fill_diagonal(obs, False)
    W = np.where(obs, 1.0, 0.0) if W is None else np.where(obs, np.array(W, dtype=float), 0.0)
    L = np.zeros((n, n), bool) if L is None else np.array(L, bool)
    W = np.where(L, np.inf, W)
    return RepairProblem(D, W, L, obs, 1e-9 * np.nanmax(D), options=options)


def noisy(n, seed, sigma=0.3):
    rng = np.random.default_rng(seed)
    D = euclidean(n, seed=seed) * np.exp(rng.normal(0, sigma, (n, n)))
    D = np.triu(D, 1)
    return D + D.T


def rand_weights(n, seed):
    rng = np.random.default_rng(seed + 100)
    W = np.triu(rng.uniform(0.2, 3.0, (n, n)), 1)
    return W + W.T


def cvx_solve(D, W, L, kind):
    """The repair written out for cvxpy with every triangle inequality."""
    n = len(D)
    X = cp.Variable((n, n), symmetric=True)
    cons = [cp.diag(X) == 0]
    for i, j, k in itertools.permutations(range(n), 3):
        if i < j:
            cons.append(X[i, j] <= X[i, k] + X[k, j])
    terms = []
    for i, j in itertools.combinations(range(n), 2):
        if L[i, j]:
            cons.append(X[i, j] == D[i, j])
        elif not np.isnan(D[i, j]) and W[i, j] > 0:
            r = X[i, j] - D[i, j]
            terms.append(W[i, j] * (cp.square(r) if kind == "l2" else cp.abs(r)))
    prob = cp.Problem(cp.Minimize(cp.sum(cp.hstack(terms))), cons)
    prob.solve(solver="CLARABEL" if kind == "l2" else "HIGHS")
    return prob.value


def linprog_all_rows(D, W):
    """The l1 LP with all 3 C(n,3) triangle rows (t >= |x - d| form), scipy HiGHS."""
    from scipy.optimize import linprog
    from scipy.sparse import coo_matrix

    n = len(D)
    pairs = list(itertools.combinations(range(n), 2))
    idx = {p: q for q, p in enumerate(pairs)}
    m = len(pairs)
    rows, cols, vals, rhs = [], [], [], []
    r = 0
    for i, j, k in itertools.combinations(range(n), 3):
        e = [idx[(i, j)], idx[(i, k)], idx[(j, k)]]
        for s in range(3):
            others = [e[t] for t in range(3) if t != s]
            rows += [r, r, r]
            cols += [e[s], others[0], others[1]]
            vals += [1, -1, -1]
            rhs.append(0.0)
            r += 1
    for q, (i, j) in enumerate(pairs):  # x - t <= d, -x - t <= -d
        rows += [r, r, r + 1, r + 1]
        cols += [q, m + q, q, m + q]
        vals += [1, -1, -1, -1]
        rhs += [D[i, j], -D[i, j]]
        r += 2
    A = coo_matrix((vals, (rows, cols)), shape=(r, 2 * m)).tocsr()
    c = np.concatenate([np.zeros(m), [W[i, j] for i, j in pairs]])
    res = linprog(c, A_ub=A, b_ub=rhs, bounds=[(0, None)] * (2 * m), method="highs")
    assert res.status == 0
    return res.fun


def weighted(D, X, W, kind):
    iu = np.triu_indices(len(D), 1)
    ok = ~np.isnan(D[iu]) & np.isfinite(W[iu]) & (W[iu] > 0)
    r = (X[iu] - D[iu])[ok]
    return float((W[iu][ok] * (r * r if kind == "l2" else np.abs(r))).sum())


def complete(X, D):
    """The engine's fill for checking metric-ness of a Solution directly."""
    from seqdist.repair.engine import fill_missing

    obs = ~np.isnan(D)
    np.fill_diagonal(obs, False)
    return fill_missing(X, obs)[0]


SOLVERS = {"l1": l1.solve, "l2": l2.solve}


# ------------------------------------------------------------------ worked examples
def test_l2_worked_example_half_space_projection():
    s = l2.solve(problem([[0, 5, 1], [5, 0, 1], [1, 1, 0]]))
    assert np.allclose(s.X, [[0, 4, 2], [4, 0, 2], [2, 2, 0]], atol=1e-9)
    assert np.isclose(s.objective_value, 3.0) and s.optimal and s.lower_bound <= 3.0 + 1e-12


def test_l1_worked_example():
    # the long side must lose 3 in total (or the short ones gain it): 3 is the least change
    for method in ("lp", "projection"):
        s = l1.solve(problem([[0, 5, 1], [5, 0, 1], [1, 1, 0]], method=method))
        assert np.isclose(s.objective_value, 3.0, rtol=1e-6) and is_metric(s.X, 1e-9)


# ------------------------------------------------------------------ against general solvers
CASES = [(8, 0, False, False), (9, 1, True, False), (9, 2, False, True), (10, 3, True, True)]


@pytest.mark.parametrize("n,seed,use_w,use_lock", CASES)
def test_l2_matches_clarabel(n, seed, use_w, use_lock):
    D = noisy(n, seed)
    W = rand_weights(n, seed) if use_w else np.ones((n, n))
    L = np.zeros((n, n), bool)
    if use_lock:
        L[0, 1] = L[1, 0] = L[2, 3] = L[3, 2] = True
    s = l2.solve(problem(D, W, L))
    ref = cvx_solve(D, np.where(L, np.inf, W), L, "l2")
    assert s.optimal
    assert abs(s.objective_value - ref) <= 1e-4 * ref  # the target: 1e-4 relative
    assert s.lower_bound <= s.objective_value
    assert np.isclose(weighted(D, s.X, np.where(L, np.inf, W), "l2"), s.objective_value)
    assert is_metric(s.X, 1e-9 * D.max())
    assert np.array_equal(s.X[L], D[L])


@pytest.mark.parametrize("method", ["lp", "projection"])
@pytest.mark.parametrize("n,seed,use_w,use_lock", CASES)
def test_l1_matches_cvxpy_highs(method, n, seed, use_w, use_lock):
    D = noisy(n, seed)
    W = rand_weights(n, seed) if use_w else np.ones((n, n))
    L = np.zeros((n, n), bool)
    if use_lock:
        L[0, 1] = L[1, 0] = L[2, 3] = L[3, 2] = True
    s = l1.solve(problem(D, W, L, method=method))
    ref = cvx_solve(D, np.where(L, np.inf, W), L, "l1")
    assert s.optimal
    assert abs(s.objective_value - ref) <= 2e-6 * ref
    assert s.lower_bound <= s.objective_value
    assert is_metric(s.X, 1e-9 * D.max())
    assert np.array_equal(s.X[L], D[L])


@pytest.mark.parametrize("seed", [0, 1])
def test_l1_matches_linprog_with_all_triangle_rows(seed):
    n = 11
    D = noisy(n, seed)
    W = rand_weights(n, seed)
    ref = linprog_all_rows(D, W)
    s = l1.solve(problem(D, W))
    assert s.optimal and abs(s.objective_value - ref) <= 1e-7 * ref
    sp = l1.solve(problem(D, W, method="projection"))
    assert abs(sp.objective_value - ref) <= 2e-6 * ref and sp.lower_bound <= ref + 1e-9


@pytest.mark.parametrize("kind", ["l1", "l2"])
def test_missing_entries_are_free_and_filled(kind):
    n = 9
    D = noisy(n, 4)
    D[0, 1] = D[1, 0] = np.nan
    D[2, 7] = D[7, 2] = np.nan
    s = SOLVERS[kind](problem(D))
    ref = cvx_solve(D, np.ones((n, n)), np.zeros((n, n), bool), kind)
    assert abs(s.objective_value - ref) <= 2e-6 * ref
    assert np.isnan(s.X[0, 1]) and np.isnan(s.X[7, 2])
    assert is_metric(complete(s.X, D), 1e-9 * np.nanmax(D))


@pytest.mark.parametrize("kind,method", [("l1", "lp"), ("l1", "projection"), ("l2", None)])
def test_missing_entries_that_need_cycle_constraints(kind, method):
    # a 4-cycle whose long entry is longer than the path through a missing pair's
    # neighbours: with (0, 2) and (1, 3) missing no triangle is complete, so only
    # cycle inequalities (found by the shortest-path oracle) can repair it
    D = np.array([[0, 1, np.nan, 9], [1, 0, 1, np.nan], [np.nan, 1, 0, 1], [9, np.nan, 1, 0.0]])
    s = SOLVERS[kind](problem(D, method=method) if method else problem(D))
    ref = cvx_solve(D, np.ones((4, 4)), np.zeros((4, 4), bool), kind)
    assert abs(s.objective_value - ref) <= 1e-6 * max(ref, 1)
    if method != "lp":  # the LP runs over all pairs; the others need the cycle
        assert s.details["cycle_constraints"] >= 1
    assert is_metric(complete(s.X, D), 1e-9)


# ------------------------------------------------------------------ properties of every answer
@pytest.mark.parametrize("kind", ["l1", "l2"])
def test_metric_input_comes_back_unchanged(kind):
    D = euclidean(12, seed=3)
    r = repair(D, kind, progress=False)
    assert np.array_equal(r.matrix.values, D)
    assert r.report.changed_entries == 0 and r.report.objective_value == 0.0
    assert r.report.optimal


@pytest.mark.parametrize("kind", ["l1", "l2"])
def test_weight_zero_lets_an_entry_move_freely(kind):
    D = euclidean(10, seed=5)
    D[0, 1] = D[1, 0] = D[0, 1] * 5 + 3  # one gross error
    W = np.ones_like(D)
    W[0, 1] = W[1, 0] = 0.0
    r = repair(D, kind, weights=W, progress=False)
    X = r.matrix.values
    # the free entry takes the whole repair: nothing else changes, at no cost
    assert r.report.objective_value <= 1e-12
    mask = np.ones_like(D, bool)
    mask[0, 1] = mask[1, 0] = False
    assert np.allclose(X[mask], D[mask], atol=1e-9)
    assert X[0, 1] < D[0, 1] and is_metric(X, 1e-9 * D.max())
    # without the zero weight the same error costs something
    r1 = repair(D, kind, progress=False)
    assert r1.report.objective_value > 0.1


@pytest.mark.parametrize("kind", ["l1", "l2"])
def test_gap_closes_as_the_tolerance_tightens(kind):
    D = noisy(40, 7)
    gaps = []
    for tol in (1e-2, 1e-4, 1e-7):
        opts = {"gap_tol": tol}
        if kind == "l1":
            opts["method"] = "projection"
        else:
            opts["polish"] = False
        s = SOLVERS[kind](problem(D, **opts))
        assert s.lower_bound <= s.objective_value
        assert s.details["relative_gap"] <= tol and s.optimal
        gaps.append(s.details["relative_gap"])
    assert gaps[0] >= gaps[1] >= gaps[2]
    assert gaps[2] < 1e-7 <= gaps[0] + 1e-7


@pytest.mark.parametrize("kind", ["l1", "l2"])
def test_time_limit_returns_a_feasible_point_with_a_gap(kind):
    D = noisy(150, 8)
    # a gap no run reaches within a 0.3 s work budget, so the budget is what stops it
    opts = {"gap_tol": 1e-13} if kind == "l2" else {"method": "projection", "gap_tol": 1e-13}
    p = problem(D, **opts)
    p.time_limit = 0.3
    s = SOLVERS[kind](p)
    assert not s.optimal and s.details["status"] == "time limit"
    # l1's first proximal round may give a dual bound below 0, reported as 0
    assert 0 <= s.lower_bound < s.objective_value
    if kind == "l2":  # Hildreth's dual only rises from 0
        assert s.lower_bound > 0
    assert is_metric(s.X, 1e-9 * D.max())


def test_l2_objective_is_below_the_shrink_closure():
    # the closure is a feasible point, so the optimum can only be lower
    D = noisy(40, 9)
    s = repair(D, "shrink", progress=False)
    c = float(((s.matrix.values - D)[np.triu_indices(40, 1)] ** 2).sum())
    r = repair(D, "l2", progress=False)
    assert r.report.objective_value <= c and r.report.lower_bound <= r.report.objective_value


@st.composite
def small_matrix(draw):
    n = draw(st.integers(3, 7))
    vals = draw(st.lists(st.sampled_from([0.0, 0.5, 1.0, 1.0, 2.0, 3.0, 7.5]), min_size=n * (n - 1) // 2,
                         max_size=n * (n - 1) // 2))
    D = np.zeros((n, n))
    D[np.triu_indices(n, 1)] = vals
    return D + D.T


@settings(max_examples=40, deadline=None)
@given(small_matrix(), st.sampled_from(["l1", "l2"]), st.booleans())
def test_property_metric_with_bound_below_value(D, kind, weighted_):
    W = None
    if weighted_:
        rng = np.random.default_rng(int(D.sum() * 10) % 1000)
        W = np.triu(rng.choice([0.0, 0.5, 1.0, 4.0], size=D.shape), 1)
        W = W + W.T
    r = repair(D, kind, weights=W, progress=False)
    X = r.matrix.values
    assert is_metric(X, r.report.tol)
    assert r.report.lower_bound <= r.report.objective_value + 1e-9
    # the reported value is what the returned matrix costs
    Wf = np.ones_like(D) if W is None else W
    assert np.isclose(weighted(D, X, Wf, kind), r.report.objective_value, rtol=1e-6, atol=1e-9)
    if r.report.optimal:
        ref = cvx_solve(D, Wf, np.zeros(D.shape, bool), kind) if (Wf > 0).any() else 0.0
        assert r.report.objective_value <= ref * (1 + 1e-5) + 1e-7


# ------------------------------------------------------------------ magnitudes
def _six():
    return noisy(6, 11, 0.6)


@pytest.mark.parametrize("kind", ["l1", "l2"])
@pytest.mark.parametrize("method", [None, "projection"])
@pytest.mark.parametrize("dscale,wscale", [(1e100, 1.0), (1e-100, 1.0), (1.0, 1e250), (1.0, 1e-250), (1.0, 1e30),
                                           (1e100, 1e-100)])
def test_extreme_magnitudes_give_the_scaled_answer(kind, method, dscale, wscale):
    # The objective is homogeneous: scaling the distances by s and the weights by t scales the
    # optimum by t * s (l1) or t * s^2 (l2) (common practice). HiGHS's absolute tolerances
    # (1e-7) and its infinite-cost threshold (1e20) once made l1's LP give up at such scales
    # (gap 1 at 1e-100, a silent fall-back at weights 1e30).
    if kind == "l2" and method:
        return
    import warnings

    D = _six()
    W = np.ones_like(D)
    np.fill_diagonal(W, 0.0)
    opts = {"method": method} if method else {}
    base = repair(D, kind, weights=W, progress=False, **opts).report
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no raw RuntimeWarning (overflow, invalid value) may escape
        r = repair(D * dscale, kind, weights=W * wscale, progress=False, **opts)
    X = r.matrix.values
    assert is_metric(X, r.report.tol)
    factor = wscale * (dscale if kind == "l1" else dscale ** 2)
    val = r.report.objective_value
    assert np.isfinite(val) and np.isfinite(r.report.lower_bound)
    assert r.report.optimal and r.report.lower_bound <= val
    assert np.isclose(val, base.objective_value * factor, rtol=1e-5)
    assert np.isclose(weighted(D * dscale, X, W * wscale, kind), val, rtol=1e-9)
    if kind == "l1" and not method:
        assert r.report.details["method"].startswith("linear program")


@pytest.mark.parametrize("kind", ["l1", "l2"])
def test_subnormal_weights_raise_no_numpy_warning(kind):
    # a weight of 1e-310 made 1 / w overflow (raw numpy RuntimeWarnings, NaN steps)
    import warnings

    D = _six()
    W = np.where(np.random.default_rng(1).random(D.shape) < 0.5, 1e-310, 1.0)
    W = np.triu(W, 1)
    W = W + W.T
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        r = repair(D, kind, weights=W, progress=False)
    assert is_metric(r.matrix.values, r.report.tol) and np.isfinite(r.report.objective_value)
    assert r.report.lower_bound <= r.report.objective_value


@pytest.mark.parametrize("kind", ["l1", "l2"])
def test_a_scan_hands_the_pool_at_most_its_cap(kind, monkeypatch):
    # issue 19: far from a metric (a random matrix: half of all triangles violated) a scan
    # used to store every violated triangle (665 million keys at n = 2000); now at most the cap,
    # the most violated first, and the answer is the same (reference: CLARABEL / HiGHS, above)
    from seqdist.repair import convex as C

    n = 10
    rng = np.random.default_rng(5)
    D = np.triu(rng.uniform(0, 1, (n, n)), 1)
    D = D + D.T
    cap = 12
    monkeypatch.setattr(C, "SCAN_CAP_MIN", cap)
    monkeypatch.setattr(C, "SCAN_CAP_PER_N2", 0.0)
    sizes = []
    real = C.find_violations

    def spy(*a, **k):
        keys, cyc = real(*a, **k)
        sizes.append(keys.size)
        return keys, cyc

    monkeypatch.setattr(C, "find_violations", spy)
    opts = {"method": "projection"} if kind == "l1" else {}
    s = SOLVERS[kind](problem(D, **opts))
    L = np.zeros((n, n), bool)
    ref = cvx_solve(D, np.ones((n, n)), L, kind)
    assert sizes and max(sizes) <= cap
    assert s.optimal and abs(s.objective_value - ref) <= 2e-6 * ref
    assert is_metric(s.X, 1e-9 * D.max())


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_descent_pass_keeps_a_metric_and_never_raises_the_cost(seed):
    # issue 19: the feasible point's coordinate-descent pass (each entry to the point of
    # [max_k |Y_ik - Y_jk|, min_k Y_ik + Y_kj] nearest its input; common practice: a convex
    # function of one variable over an interval is least at the clipped unconstrained minimiser)
    from seqdist.kernels.shortest_paths import apsp
    from seqdist.repair import convex as C

    n = 14
    D = noisy(n, seed)
    L = np.zeros((n, n), bool)
    L[0, 1] = L[1, 0] = True
    W = np.where(L, np.inf, rand_weights(n, seed))
    S = C.setup(problem(D, np.where(L, 1.0, W), L))
    # a metric below D: the closure of D with a third of its entries lowered (as an iterate's are)
    rng = np.random.default_rng(seed)
    low = np.triu(rng.uniform(size=(n, n)) < 0.3, 1)
    X = np.where(low | low.T, 0.7 * D, D)
    Y = apsp(X)
    assert is_metric(Y, 1e-12)
    Y2 = C.descend(Y, S)
    assert is_metric(Y2, 1e-9 * D.max())
    assert np.array_equal(Y2[L], Y[L])
    assert C.objective_l2(Y2, S) <= C.objective_l2(Y, S) and C.objective_l1(Y2, S) <= C.objective_l1(Y, S)
    # entries below their input that no path holds down go back up
    assert C.objective_l1(Y2, S) < C.objective_l1(Y, S)


# ------------------------------------------------------------------ the primal-dual method (issue 19)
PD = {"method": "pdhg", "pdhg_from_gap": 1.0}  # hand over to the primal-dual method after the first round


@pytest.mark.parametrize("n,seed,use_w,use_lock", CASES)
def test_l1_pdhg_matches_cvxpy_highs(n, seed, use_w, use_lock):
    # issue 19: l1 by the restarted primal-dual method closes 1e-6 on noisy matrices, and its
    # certified bound lies below the optimum that HiGHS (through cvxpy, every triangle row) finds
    D = noisy(n, seed)
    W = rand_weights(n, seed) if use_w else np.ones((n, n))
    L = np.zeros((n, n), bool)
    if use_lock:
        L[0, 1] = L[1, 0] = L[2, 3] = L[3, 2] = True
    s = l1.solve(problem(D, W, L, **PD))
    ref = cvx_solve(D, np.where(L, np.inf, W), L, "l1")
    assert "primal-dual" in s.details["method"] and s.details["iterations"] > 0
    assert s.optimal and s.details["relative_gap"] <= 1e-6
    assert abs(s.objective_value - ref) <= 2e-6 * ref
    assert s.lower_bound <= ref * (1 + 1e-9)  # a valid bound (HiGHS's own tolerance is about 1e-9)
    assert np.isclose(weighted(D, s.X, np.where(L, np.inf, W), "l1"), s.objective_value)
    assert is_metric(s.X, 1e-9 * D.max())
    assert np.array_equal(s.X[L], D[L])


@pytest.mark.parametrize("n,seed,use_w", [(40, 7, False), (50, 12, True)])
def test_l1_pdhg_closes_on_noisy_matrices_below_linprog_with_all_rows(n, seed, use_w):
    # the same at n = 40-50 with scipy's HiGHS on the LP written out here with all 3 C(n, 3) rows
    D = noisy(n, seed)
    W = rand_weights(n, seed) if use_w else np.ones((n, n))
    ref = linprog_all_rows(D, W)
    s = l1.solve(problem(D, W, **PD))
    assert s.optimal and "primal-dual" in s.details["method"]
    assert s.lower_bound <= ref * (1 + 1e-9) and abs(s.objective_value - ref) <= 2e-6 * ref


def test_l1_pdhg_is_reproducible_to_the_byte():
    # house rule: the same input and options give the same bytes; with a work budget that stops the
    # primal-dual method part way too (the budget counts work, never the clock)
    D = noisy(45, 13)
    outs = []
    for limit in (None, None, 0.4, 0.4):
        p = problem(D, **PD, gap_tol=1e-12 if limit else 1e-6)
        p.time_limit = limit
        s = l1.solve(p)
        outs.append((s.X.tobytes(), s.objective_value, s.lower_bound, s.details["iterations"],
                     s.details["status"]))
    assert outs[0] == outs[1] and outs[2] == outs[3]
    assert outs[2][4] == "time limit" and outs[0][4] == "gap closed"
    assert outs[2][3] > 0  # the budget stopped it inside the primal-dual part


def test_l1_auto_uses_pdhg_beyond_the_lp_and_falls_back_without_a_complete_graph():
    D = noisy(24, 14)
    s = l1.solve(problem(D, lp_max_n=10, pdhg_from_gap=1.0))
    assert "primal-dual" in s.details["method"] and s.optimal
    D[0, 5] = D[5, 0] = np.nan  # a missing entry: cycle rows, which only the projection method takes
    s = l1.solve(problem(D, lp_max_n=10, pdhg_from_gap=1.0))
    assert s.details["method"].startswith("proximal point with exact") and "primal-dual" not in s.details["method"]
    assert s.optimal


def clarabel_all_rows(D, W):
    """min sum w (x - d)^2 over all pairs with all 3 C(n, 3) triangle rows as one sparse matrix (cvxpy, CLARABEL)."""
    from scipy.sparse import coo_matrix

    n = len(D)
    pairs = list(itertools.combinations(range(n), 2))
    idx = {p: q for q, p in enumerate(pairs)}
    rows, cols, vals = [], [], []
    r = 0
    for i, j, k in itertools.combinations(range(n), 3):
        e = [idx[(i, j)], idx[(i, k)], idx[(j, k)]]
        for s in range(3):
            others = [e[t] for t in range(3) if t != s]
            rows += [r, r, r]
            cols += [e[s], others[0], others[1]]
            vals += [1.0, -1.0, -1.0]
            r += 1
    A = coo_matrix((vals, (rows, cols)), shape=(r, len(pairs))).tocsr()
    d = np.array([D[p] for p in pairs])
    w = np.array([W[p] for p in pairs])
    x = cp.Variable(len(pairs))
    prob = cp.Problem(cp.Minimize(cp.sum(cp.multiply(w, cp.square(x - d)))), [A @ x <= 0])
    prob.solve(solver="CLARABEL")
    return prob.value


@pytest.mark.parametrize("n,seed,use_w,use_lock", CASES)
def test_l2_pdhg_matches_clarabel(n, seed, use_w, use_lock):
    # issue 19: l2's primal-dual finish closes 1e-6 and its bound is below CLARABEL's optimum
    D = noisy(n, seed)
    W = rand_weights(n, seed) if use_w else np.ones((n, n))
    L = np.zeros((n, n), bool)
    if use_lock:
        L[0, 1] = L[1, 0] = L[2, 3] = L[3, 2] = True
    s = l2.solve(problem(D, W, L, pdhg_from_gap=1.0))
    ref = cvx_solve(D, np.where(L, np.inf, W), L, "l2")
    assert "primal-dual" in s.details["method"] and s.details["iterations"] > 0
    assert s.optimal and s.details["relative_gap"] <= 1e-6
    assert abs(s.objective_value - ref) <= 2e-6 * ref
    assert s.lower_bound <= ref * (1 + 1e-7)  # CLARABEL's own tolerance is about 1e-8
    assert is_metric(s.X, 1e-9 * D.max())
    assert np.array_equal(s.X[L], D[L])


@pytest.mark.parametrize("n,seed,use_w", [(40, 15, False), (50, 16, True)])
def test_l2_pdhg_closes_on_noisy_matrices(n, seed, use_w):
    D = noisy(n, seed)
    W = rand_weights(n, seed) if use_w else np.ones((n, n))
    ref = clarabel_all_rows(D, W)
    s = l2.solve(problem(D, W, pdhg_from_gap=1.0))
    assert s.optimal and "primal-dual" in s.details["method"]
    assert s.lower_bound <= ref * (1 + 1e-7) and abs(s.objective_value - ref) <= 2e-6 * ref
    # the same without the primal-dual finish (Hildreth's method alone) agrees
    h = l2.solve(problem(D, W, pdhg=False))
    assert "primal-dual" not in h.details["method"] and abs(h.objective_value - s.objective_value) <= 2e-6 * ref


def test_l2_pdhg_is_reproducible_to_the_byte():
    D = noisy(45, 17)
    outs = []
    for limit in (None, None, 0.3, 0.3):
        p = problem(D, pdhg_from_gap=1.0, gap_tol=1e-13 if limit else 1e-6)
        p.time_limit = limit
        s = l2.solve(p)
        outs.append((s.X.tobytes(), s.objective_value, s.lower_bound, s.details["iterations"], s.details["status"]))
    assert outs[0] == outs[1] and outs[2] == outs[3]
    assert outs[2][4] == "time limit" and outs[0][4] == "gap closed" and outs[2][3] > 0
