"""The grow objective: brute force (LP feasibility, see test_repair_fewest), direction, locks."""

from __future__ import annotations

import numpy as np
import pytest
from test_repair_fewest import brute_force, feasible_lp, small_cases

from seqdist.core.errors import InfeasibleError
from seqdist.kernels.triangles import is_metric
from seqdist.repair import repair

from conftest import euclidean


@pytest.mark.parametrize("case", range(6))
def test_grow_matches_brute_force(case):
    D = small_cases()[case]
    opt = brute_force(D, grow=True)
    r = repair(D, "grow", method="exact", progress=False)
    assert r.report.objective_value == opt and r.report.optimal
    X = r.matrix.values
    assert (X >= D - r.report.tol).all() and is_metric(X, r.report.tol)


def test_planted_shrunk_entries_grow_back():
    # planted decreases in a Euclidean metric (common practice): grow needs at most k increases
    rng = np.random.default_rng(6)
    n = 60
    D = euclidean(n, seed=6)
    iu = np.triu_indices(n, 1)
    sel = rng.choice(len(iu[0]), 30, replace=False)
    D[iu[0][sel], iu[1][sel]] *= 0.1
    D[iu[1][sel], iu[0][sel]] *= 0.1
    r = repair(D, "grow", progress=False)
    assert r.report.objective_value <= 30 and r.report.decreased_entries == 0
    assert r.report.lower_bound <= r.report.objective_value


def test_grow_increase_is_no_more_than_shortest_paths():
    # the second stage only lowers values from the shortest paths over the kept set
    D = small_cases()[3]
    r = repair(D, "grow", method="exact", progress=False)
    assert r.report.details["total_increase"] >= 0


def test_grow_lock_condition_is_exact():
    # a decreased entry whose ends are joined by a locked path shorter than another entry:
    # t0-t1 locked at 1, t1-t2 locked at 1, but t0-t2 = 5 may not decrease -> infeasible
    D = np.array([[0, 1, 5, 3], [1, 0, 1, 3], [5, 1, 0, 3], [3, 3, 3, 0.]])
    with pytest.raises(InfeasibleError, match="grow only increases"):
        repair(D, "grow", lock=[(0, 1), (1, 2)], progress=False)
    assert not feasible_lp(D, {(0, 3), (1, 3), (2, 3), (0, 2)}, grow=True)
    # without the second lock, growing t1-t2 works
    r = repair(D, "grow", lock=[(0, 1)], progress=False)
    assert r.matrix.values[0, 1] == 1 and r.matrix.values[1, 2] >= 4
