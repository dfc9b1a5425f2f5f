"""Shortest paths (seqdist.kernels.shortest_paths) and the shrink objective against scipy's shortest paths.

References: scipy.sparse.csgraph (Dijkstra / Floyd-Warshall on a sparse graph
with explicit zeros: its docs say the dense input reads 0 as "no edge", so a
sparse matrix with stored zeros is the way to keep zero-length edges).
The closure is the largest decrease-only metric (derivation in docs/repair.md).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.sparse.csgraph import shortest_path

from seqdist.kernels.shortest_paths import apsp, apsp_reference
from seqdist.kernels.triangles import count_violations, is_metric
from seqdist.repair import repair

from conftest import euclidean


def scipy_apsp(D):
    """scipy reference: sparse graph with explicit zeros; NaN = absent edge."""
    n = len(D)
    i, j = np.nonzero(~np.eye(n, dtype=bool) & ~np.isnan(D))
    g = sp.csr_matrix((D[i, j], (i, j)), shape=D.shape)
    return shortest_path(g, method="D", directed=False)


def random_sym(rng, n, zeros=0.1, missing=0.0, scale=10.0):
    a = rng.uniform(0, scale, (n, n))
    a[rng.random((n, n)) < zeros] = 0.0
    if missing:
        a[rng.random((n, n)) < missing] = np.nan
    a = np.triu(a, 1)
    a = a + a.T
    np.fill_diagonal(a, 0.0)
    return a


@st.composite
def sym(draw, nan=True):
    n = draw(st.integers(2, 9))
    # a few distinct values make zeros and ties common
    vals = draw(st.lists(st.sampled_from([0.0, 0.5, 1.0, 1.0, 2.0, 3.0, 7.5]), min_size=n * n, max_size=n * n))
    a = np.triu(np.array(vals).reshape(n, n), 1)
    if nan and n > 2 and draw(st.booleans()):
        a[0, n - 1] = np.nan
    a = a + a.T
    np.fill_diagonal(a, 0.0)
    return a


# ---------------------------------------------------------------- kernel
def test_blocked_kernel_matches_scipy_across_block_edges():
    rng = np.random.default_rng(1)
    for n in [1, 2, 3, 7, 15, 16, 17, 33, 64, 65, 131]:
        D = random_sym(rng, n, zeros=0.05, missing=0.3)
        ref = scipy_apsp(D)
        for block, tile in [(4, 8), (16, 16), (64, 512)]:
            got = apsp(D, block=block, tile=tile)
            assert np.array_equal(np.isinf(got), np.isinf(ref))
            fin = np.isfinite(ref)
            assert np.allclose(got[fin], ref[fin], rtol=1e-13, atol=1e-13), (n, block)
            assert np.array_equal(got, got.T)
        assert np.allclose(apsp_reference(D)[np.isfinite(ref)], ref[np.isfinite(ref)], rtol=1e-13)


def test_zero_distances_are_edges():
    # identical sequences: a 0 entry is a real edge (scipy dense would read it as absent)
    D = np.array([[0, 0, 4.0], [0, 0, 1.0], [4.0, 1.0, 0]])
    assert apsp(D)[0, 2] == 1.0


def test_apsp_does_not_modify_input():
    D = random_sym(np.random.default_rng(2), 20, missing=0.2)
    before = D.copy()
    apsp(D)
    assert np.array_equal(D, before, equal_nan=True)


@settings(max_examples=60, deadline=None)
@given(sym())
def test_apsp_property_matches_scipy(D):
    ref = scipy_apsp(D)
    got = apsp(D, block=2, tile=3)
    fin = np.isfinite(ref)
    assert np.array_equal(np.isinf(got), ~fin)
    assert np.allclose(got[fin], ref[fin], atol=1e-12)


# ---------------------------------------------------------------- shrink
def test_shrink_equals_scipy_shortest_paths():
    rng = np.random.default_rng(3)
    D = random_sym(rng, 40, zeros=0.05)
    r = repair(D, "shrink", progress=False, tol=0.0)
    assert np.allclose(r.matrix.values, scipy_apsp(D), rtol=1e-13, atol=1e-13)
    assert r.report.optimal and r.report.lower_bound == r.report.objective_value
    assert r.report.violated_after == 0 and r.report.violated_before == count_violations(D, 0.0)[0]


def test_shrink_changes_only_broken_entries_and_is_l1_least():
    # a planted increase in a Euclidean metric (common practice: points in the plane)
    D = euclidean(12, seed=4)
    D[0, 1] = D[1, 0] = D[0, 1] * 3 + 5
    r = repair(D, "shrink", progress=False)
    X = r.matrix.values
    assert r.report.changed_entries == 1 and X[0, 1] < D[0, 1]
    assert r.changes[0][:2] == ("t0", "t1")
    # every decrease-only metric is below the closure: the closure's L1 change is least
    assert np.isclose(r.report.l1_change, D[0, 1] - X[0, 1])


def test_metric_input_comes_back_unchanged():
    D = euclidean(30, seed=5)
    r = repair(D, "shrink", progress=False)
    assert np.array_equal(r.matrix.values, D)
    assert r.changes == [] and r.report.changed_entries == 0


def test_missing_entries_filled_by_shortest_paths():
    D = euclidean(10, seed=6)
    D[2, 7] = D[7, 2] = np.nan
    D[0, 9] = D[9, 0] = np.nan
    r = repair(D, "shrink", progress=False)
    ref = scipy_apsp(D)
    X = r.matrix.values
    assert np.isclose(X[2, 7], ref[2, 7]) and np.isclose(X[0, 9], ref[0, 9])
    assert r.report.filled_entries == 2
    filled = [c for c in r.changes if np.isnan(c[2])]
    assert {c[:2] for c in filled} == {("t2", "t7"), ("t0", "t9")}


def test_disconnected_observed_entries_are_left_out_or_filled_as_a_metric():
    # two groups {0,1,2} and {3,4} with no observed entry between them: no
    # distance between the groups can be inferred, so the smaller group is
    # left out by default and named; kept on request with one made-up value
    # that keeps a metric, marked as such in the changes.
    from seqdist.core.errors import DataWarning

    D = np.full((5, 5), np.nan)
    np.fill_diagonal(D, 0)
    for (i, j, v) in [(0, 1, 1.0), (1, 2, 2.0), (0, 2, 2.5), (3, 4, 4.0)]:
        D[i, j] = D[j, i] = v
    with pytest.warns(DataWarning, match="t3.*t4"):
        r = repair(D, "shrink", progress=False)
    assert r.matrix.labels == ("t0", "t1", "t2") and r.report.left_out_taxa == ["t3", "t4"]
    assert r.report.filled_entries == 0 and r.changes == []
    with pytest.warns(DataWarning, match="made-up"):
        r = repair(D, "shrink", progress=False, keep_unmeasured=True)
    X = r.matrix.values
    assert is_metric(X) and r.report.observed_groups == 2 and r.report.left_out_taxa == []
    assert X[0, 3] == r.report.between_groups_value == 4.0
    assert r.report.filled_without_evidence == 6 and r.report.filled_by_path == 0
    assert {c[5] for c in r.changes} == {"filled_without_evidence"} and len(r.changes) == 6


@settings(max_examples=60, deadline=None)
@given(sym())
def test_shrink_output_is_metric_and_never_increases(D):
    r = repair(D, "shrink", progress=False)
    X = r.matrix.values
    tol = r.report.tol
    assert is_metric(X, tol)
    obs = ~np.isnan(D)
    assert (X[obs] <= D[obs] + tol).all()
    assert r.report.lower_bound <= r.report.objective_value + 1e-12


def test_shrink_with_feasible_lock_keeps_it():
    D = euclidean(8, seed=7)
    D[0, 1] = D[1, 0] = D[0, 1] * 4 + 3
    r = repair(D, "shrink", lock=[("t2", "t3")], progress=False)
    assert r.matrix.values[2, 3] == D[2, 3]


def test_parallel_kernel_matches_reference():
    rng = np.random.default_rng(9)
    for n in [5, 70, 200]:
        D = random_sym(rng, n, zeros=0.05, missing=0.2)
        ref = apsp_reference(D)
        for threads in (0, 2):
            got = apsp(D, threads=threads, block=16, tile=32)
            fin = np.isfinite(ref)
            assert np.array_equal(np.isinf(got), ~fin)
            assert np.allclose(got[fin], ref[fin], rtol=1e-13, atol=1e-13)


def test_changes_text_matches_rows():
    from seqdist.repair import format_changes

    D = random_sym(np.random.default_rng(10), 12, zeros=0.1, missing=0.1)
    r = repair(D, "shrink", progress=False)
    assert r.changes_text() == format_changes(r.changes)
    assert len(r.changes_text().splitlines()) == 1 + r.report.changed_entries + r.report.filled_entries


def test_closure_float32_in_float32_and_a_metric_within_its_tolerance():
    """closure on float32 values stays float32, equals the float32 Floyd-Warshall paths where it
    changed an entry (Floyd 1962, "Algorithm 97: Shortest path", CACM 5(6)), keeps NaN, and is a
    metric within the float32 default tolerance (2**-22 of the largest entry)."""
    from seqdist.core.matrix import default_tol
    from seqdist.kernels.shortest_paths import apsp_reference
    from seqdist.kernels.triangles import count_violations
    from seqdist.repair.shrink import closure

    rng = np.random.default_rng(11)
    n = 70
    D = rng.uniform(0.1, 5.0, (n, n)).astype(np.float32)
    D = np.triu(D, 1)
    D = D + D.T
    D[3, 9] = D[9, 3] = np.nan
    X = closure(D)
    assert X.dtype == np.float32
    A = apsp_reference(D)
    assert A.dtype == np.float32
    moved = ~np.isnan(D) & (X != D)
    assert moved.any() and np.array_equal(X[moved], A[moved])
    assert np.isnan(X[3, 9]) and np.isnan(X[9, 3])
    assert count_violations(X, default_tol(X))[0] == 0
    assert np.all((X <= D) | np.isnan(D))
