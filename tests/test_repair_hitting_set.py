"""The kept-set method shared by fewest and grow (seqdist.repair.hitting_set)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from seqdist.kernels.kept_graph import violated_triangles
from seqdist.repair import fewest, grow
from seqdist.repair.hitting_set import OPTIONS, candidates, solve
from seqdist.repair.kept_sets import round_bound
from seqdist.repair.problem import RepairProblem

from conftest import euclidean


def problem(D):
    n = len(D)
    obs = ~np.isnan(D) & ~np.eye(n, dtype=bool)
    return RepairProblem(D, obs * 1.0, np.zeros((n, n), bool), obs, 1e-9 * np.nanmax(D))


EXACT = {**{k: o.default for k, o in OPTIONS.items()}, "method": "exact"}


def test_candidates_are_the_sides_that_can_hit_a_triangle():
    # By definition (docs/repair.md; common practice for the triangle rows of a hitting set):
    # a violated triangle is hit by changing any unlocked side, or, when entries may only
    # increase, either shorter side (growing the longest one never mends it).
    rng = np.random.default_rng(4)
    a = np.triu(rng.choice([1.0, 2.0, 3.0, 7.0], (8, 8)), 1)
    D = a + a.T
    var = ~np.eye(8, dtype=bool)
    var[0, 1] = var[1, 0] = var[2, 5] = var[5, 2] = False  # two locked entries
    tri = violated_triangles(D, 1e-9)
    assert len(tri) > 10
    for increase_only in (False, True):
        got = candidates(tri, var, increase_only)
        for (i, j, k, h), row in zip(tri, got):
            sides = [(i, j), (i, k), (j, k)]
            longest = int(np.argmax([D[s] for s in sides]))
            assert h == longest
            want = [bool(var[s]) and not (increase_only and q == h) for q, s in enumerate(sides)]
            assert row.tolist() == want


@settings(max_examples=200, deadline=None)
@given(st.floats(0.0, 1e6), st.floats(0.0, 1e6), st.booleans())
def test_rounding_the_bound_twice_changes_nothing(x, y, integer_weights):
    # solve rounds grow's bound before the exact stage and again at the end: the second
    # rounding must be a no-op, and rounding must keep the order of two bounds (max then
    # round = round then max). Integer costs make every change set's cost an integer
    # (common practice), which is all the rounding uses.
    w = np.array([[0.0, 1.0], [1.0, 0.0]]) * (1.0 if integer_weights else 0.5)
    r = round_bound(x, w)
    assert round_bound(r, w) == r
    assert round_bound(max(x, y), w) == max(r, round_bound(y, w))


@pytest.mark.parametrize("seed", range(4))
@pytest.mark.parametrize("rules", [fewest.RULES, grow.RULES], ids=["fewest", "grow"])
def test_when_the_bound_is_rounded_never_changes_the_optimum(rules, seed):
    # round_bound_first only decides whether the exact stage runs; with it on or off the
    # exact method proves the same optimum (noisy Euclidean distances: common practice).
    rng = np.random.default_rng(seed)
    D = euclidean(7, seed=seed) * np.exp(rng.normal(0, 0.5, (7, 7)))
    D = np.triu(D, 1)
    D = D + D.T
    flipped = dataclasses.replace(rules, round_bound_first=not rules.round_bound_first)
    a, b = solve(problem(D), rules, EXACT), solve(problem(D), flipped, EXACT)
    assert a.optimal and b.optimal
    assert a.objective_value == b.objective_value >= 1
