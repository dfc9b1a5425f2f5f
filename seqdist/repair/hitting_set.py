"""The kept-set method shared by ``fewest`` and ``grow``: a weighted hitting set of broken cycles.

Both objectives keep a set ``F`` of entries unchanged and change the rest
(``S``); ``F`` can be kept exactly when ``S`` meets every broken cycle, so
both are a weighted hitting set (docs/repair.md). They differ only in what a
broken cycle is and which of its entries may hit it, and in how an infeasible
kept set is made feasible and how the changed entries get their values; a
:class:`Rules` entry in each objective module says that, and :func:`solve`
does the rest, in the same stages for both:

1. **Heuristic**: a greedy hitting set of the violated triangles, then the
   objective's ``make_feasible``, then :func:`~seqdist.repair.kept_sets.prune`.
2. **Bounds**: a greedy packing of violated triangles and the LP relaxation
   over the triangle rows (:func:`~seqdist.repair.kept_sets.lp_bound`), whose
   values also guide a second greedy pass (LP-guided rounding).
3. **Exact** (``method="exact"``, or ``"auto"`` when the problem is small
   enough): the binary program with lazy cycle cuts
   (:func:`~seqdist.repair.kept_sets.lazy_hitting_set`) from a shortest-path
   oracle over the kept set, starting from the heuristic's answer.
4. **Values**: the objective's own second stage for the chosen kept set.

The primitives (kept paths, prune, the integer program, the work model) are
in :mod:`seqdist.repair.kept_sets`; this module is the method built on them.
Every stage stops by a work budget (:class:`~seqdist.repair.problem.Budget`),
never by the clock.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Callable

import numpy as np

from seqdist.kernels import kept_graph
from seqdist.repair import kept_sets
from seqdist.repair.problem import Option, RepairProblem, Solution, rescaled

__all__ = ["Rules", "candidates", "solve"]

#: The options of the method (checked by :func:`~seqdist.repair.problem.validate_options`); each
#: objective's ``OPTIONS`` is a copy (grow lowers ``exact_max_n``).
OPTIONS = {
    "method": Option("auto", "exact: the integer program; heuristic: greedy + repair + prune with bounds; "
                             "auto: exact when the problem is small enough (exact_max_n, exact_max_rows)",
                     choices=("auto", "exact", "heuristic")),
    "exact_budget": Option(120.0, "work budget of the exact stage under method auto without a time limit, "
                                  "in reference seconds", low=0.0),
    "exact_max_n": Option(200, "largest number of taxa for the exact stage under method auto", low=0),
    "exact_max_rows": Option(600000, "largest number of violated triangles for the exact stage under auto", low=0),
    "lp_bound": Option(True, "compute the LP relaxation bound (and the LP-guided second greedy pass)"),
    "lp_budget": Option(30.0, "work budget of the LP bound, in reference seconds", low=0.0),
}


@dataclass(frozen=True)
class Rules:
    """What one kept-set objective's hitting set is; :func:`solve` does the rest.

    Attributes
    ----------
    increase_only : bool
        False (fewest): a broken cycle (an entry longer than a kept path) is
        hit by any of its unlocked entries, and only kept entries must stay at
        most their shortest kept path. True (grow): growing the long entry
        never helps, so only the path's entries hit it (for a violated
        triangle, its two shorter sides), and every observed entry must stay
        at most its shortest kept path.
    make_feasible : callable
        ``make_feasible(problem, S, F, budget) -> (S, F, entries added)``:
        grow ``S`` until ``F`` has no broken cycle (on copies).
    values : callable
        ``values(problem, F, S_edges) -> (X, report entries)``: the second
        stage, the values of the changed entries for a feasible ``F``.
    heuristic_method, exact_method : str
        The report's ``method`` when the heuristic's answer, or the exact
        stage's proven optimum, is returned.
    mip_scale : float
        Factor on the counted work of each milp call (see the work model in
        :mod:`seqdist.repair.kept_sets`).
    round_bound_first : bool
        True (grow): round the bound of the heuristic stages up (integer
        weights, :func:`~seqdist.repair.kept_sets.round_bound`) and test
        optimality with it before deciding whether the exact stage is needed.
        False (fewest): optimality is tested again only after an LP-guided
        pass (so an LP bound alone does not spare the exact stage), and the
        bound is rounded at the end.

    Examples
    --------
    >>> from seqdist.repair import fewest, grow
    >>> fewest.RULES.increase_only, grow.RULES.increase_only
    (False, True)
    """

    increase_only: bool
    make_feasible: Callable
    values: Callable
    heuristic_method: str
    exact_method: str
    mip_scale: float = 1.0
    round_bound_first: bool = False


def _var_mask(problem: RepairProblem) -> np.ndarray:
    return problem.observed & ~problem.locked


def candidates(tri: np.ndarray, var: np.ndarray, increase_only: bool) -> np.ndarray:
    """Which sides ``(i,j), (i,k), (j,k)`` of each violated triangle may hit it, as an (m, 3) bool array.

    A side may when it is unlocked and observed (``var``); with
    ``increase_only`` never the longest side (``tri[:, 3]``), since growing it
    never helps.

    Examples
    --------
    >>> tri = np.array([[0, 1, 2, 0]])  # side (0, 1) is the longest
    >>> var = ~np.eye(3, dtype=bool)
    >>> candidates(tri, var, False).tolist(), candidates(tri, var, True).tolist()
    ([[True, True, True]], [[False, True, True]])
    """
    i, j, k = tri[:, 0], tri[:, 1], tri[:, 2]
    c = np.stack([var[i, j], var[i, k], var[j, k]], 1)
    if increase_only:
        c[np.arange(len(tri)), tri[:, 3]] = False
    return c


def _heuristic(problem: RepairProblem, rules: Rules, tri, cand, budget=None, greedy_weights=None):
    """Greedy + the objective's repair + prune. Returns ``(S_edges (m, 2), F mask, info)``.

    ``greedy_weights`` replaces the weights in the greedy step only (the
    LP-guided pass); repair and prune always use the true weights. The
    greedy step and the repair always run (they make the answer feasible);
    prune stops early when ``budget`` is spent.
    """
    D, tol, n = problem.D, problem.tol, problem.n
    picked, cnt = kept_graph.greedy_hitting(n, tri, cand, problem.weights if greedy_weights is None else greedy_weights)
    S = np.zeros((n, n), dtype=bool)
    S.flat[picked] = True
    keyval = np.zeros((n, n))
    keyval.flat[picked] = cnt
    S = kept_sets.sym(S)
    F = problem.observed & ~S
    S, F, extra = rules.make_feasible(problem, S, F, budget)
    S_edges = np.argwhere(np.triu(S, 1))
    w = problem.weights[S_edges[:, 0], S_edges[:, 1]]
    keys = (keyval[S_edges[:, 0], S_edges[:, 1]] + 1.0) / np.maximum(w, 1e-300)  # free entries last
    before = len(S_edges)
    S_edges = kept_sets.prune(D, F, S_edges, keys, rules.increase_only, tol, budget)
    return S_edges, F, {"greedy": int(len(picked)), "cycle_repairs": extra, "pruned": before - len(S_edges)}


def _packing_lower_bound(problem: RepairProblem, tri, cand) -> float:
    """Weighted packing of violated triangles, triangles with rarely-shared sides first.

    Each triangle needs one of its ``cand`` sides changed; triangles that
    share no candidate side need different ones, so a packing bounds every
    repair from below (a feasible solution of the LP relaxation's dual).
    """
    n = problem.n
    if len(tri) == 0:
        return 0.0
    i, j, k = tri[:, 0], tri[:, 1], tri[:, 2]
    cnt = np.zeros((n, n))
    for s, (a, b) in enumerate([(i, j), (i, k), (j, k)]):
        np.add.at(cnt, (a[cand[:, s]], b[cand[:, s]]), 1.0)
    key = np.zeros(len(tri))
    for s, (a, b) in enumerate([(i, j), (i, k), (j, k)]):
        key += np.where(cand[:, s], cnt[a, b], 0.0)
    order = np.lexsort((np.arange(len(tri)), key))
    w = np.where(problem.locked, np.inf, problem.weights)
    return kept_graph.packing_bound(n, tri, cand, w, order)


def _exact(problem: RepairProblem, rules: Rules, tri, cand, incumbent_edges, budget, log):
    """The lazy-cut binary program, starting from the triangle rows and the incumbent.

    Each round's change set is checked by shortest paths over its kept set:
    every entry longer than its shortest kept path gives a cut (the cycle's
    entries that may change, :attr:`Rules.increase_only`), and a feasible set
    built from it (the objective's ``make_feasible``, then prune) may improve
    the incumbent, so a spent budget still returns the best verified answer.
    Returns :func:`~seqdist.repair.kept_sets.lazy_hitting_set`'s dict.
    """
    D, tol, n = problem.D, problem.tol, problem.n
    obs = problem.observed
    var = _var_mask(problem)
    sides = [(tri[:, 0], tri[:, 1]), (tri[:, 0], tri[:, 2]), (tri[:, 1], tri[:, 2])]
    ids = [a * n + b for a, b in sides]
    cuts = [[int(ids[s][t]) for s in range(3) if cand[t, s]] for t in range(len(tri))]

    def separate(S_ids):
        S = kept_sets.ids_to_mask(S_ids, n)
        F = obs & ~S
        A = kept_sets.kept_paths(D, F)
        budget.charge(kept_sets.cost_apsp(n))
        bad = kept_sets.broken_edges(D, A, obs if rules.increase_only else F, tol)
        if len(bad) == 0:
            return [], None
        W = np.where(F, D, np.inf)
        np.fill_diagonal(W, 0.0)
        # most broken first; a few thousand cuts per round are plenty
        viol = D[bad[:, 0], bad[:, 1]] - A[bad[:, 0], bad[:, 1]]
        bad = bad[np.lexsort((np.arange(len(bad)), -viol))][:5000]
        budget.charge(kept_sets.cost_dijkstra(n) * len(np.unique(bad[:, 0])))
        new = []
        for (i, j), path in zip(bad, kept_sets.paths_for(W, bad)):
            cycle = kept_sets.path_edges(path, n) if path else []
            if not rules.increase_only:  # the long entry itself may change too
                cycle = [int(i) * n + int(j)] + cycle
            if cycle:
                new.append([e for e in cycle if var.flat[e]])
        S2, F2, _ = rules.make_feasible(problem, S, F, budget)
        S_edges = np.argwhere(np.triu(S2, 1))
        w = problem.weights[S_edges[:, 0], S_edges[:, 1]]
        S_edges = kept_sets.prune(D, F2, S_edges, -w, rules.increase_only, tol, budget)
        return new, kept_sets.edges_to_ids(S_edges, n)

    inc_val = (float(problem.weights[incumbent_edges[:, 0], incumbent_edges[:, 1]].sum())
               if len(incumbent_edges) else 0.0)
    return kept_sets.lazy_hitting_set(n, np.where(var, problem.weights, 0.0), cuts, separate,
                                     (kept_sets.edges_to_ids(incumbent_edges, n), inc_val), budget,
                                     problem.progress, log=log, mip_scale=rules.mip_scale)


def _value(w, S_edges) -> float:
    return float(w[S_edges[:, 0], S_edges[:, 1]].sum()) if len(S_edges) else 0.0


def solve(problem: RepairProblem, rules: Rules, opts: dict) -> Solution:
    """The least-weight change set under ``rules`` and its values, in the stages of the module docs.

    ``opts`` are the objective's options of :data:`OPTIONS`, already checked
    (each objective checks its own, as every ``solve`` does).

    Examples
    --------
    >>> from seqdist.repair import fewest, grow
    >>> from seqdist.repair.problem import RepairProblem
    >>> D = np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]])  # (0, 1) is longer than the path 0-2-1
    >>> p = RepairProblem(D, 1 - np.eye(3), np.zeros((3, 3), bool), D > 0, 1e-9)
    >>> opts = {k: o.default for k, o in OPTIONS.items()}
    >>> [(s.objective_value, s.optimal) for s in (solve(p, fewest.RULES, opts), solve(p, grow.RULES, opts))]
    [(1.0, True), (1.0, True)]
    """
    t0 = time.perf_counter()  # for the report's seconds only, never a decision
    # weights far from 1 are rescaled by a power of two (exact): HiGHS takes
    # costs above 1e20 as infinite, and the optimality tests compare at 1e-9
    problem, _, wexp = rescaled(problem, distances=False)
    D, tol, n = problem.D, problem.tol, problem.n
    method = opts["method"]
    budget = problem.budget()
    var = _var_mask(problem)
    w = problem.weights
    wvar = np.where(var, w, 0.0)
    tri = kept_graph.violated_triangles(D, tol)
    budget.charge(kept_sets.TRIANGLES_PER_N3 * float(n) ** 3)
    cand = candidates(tri, var, rules.increase_only)
    problem.report(0.05, f"{len(tri)} violated triangles")
    S_edges, F, hinfo = _heuristic(problem, rules, tri, cand, budget)
    value = _value(w, S_edges)
    lb = min(value, _packing_lower_bound(problem, tri, cand))
    seconds = {"heuristic": round(time.perf_counter() - t0, 3)}
    details = {"method": rules.heuristic_method, "heuristic_value": value, "packing_bound": lb,
               "violated_triangles": int(len(tri)), **hinfo}
    optimal = value <= lb + 1e-9 * value
    if not optimal and opts["lp_bound"]:
        left = budget.left()
        lp_stage = budget.stage(opts["lp_budget"] if left is None else min(opts["lp_budget"], 0.5 * left))
        lpb, xlp = kept_sets.lp_bound(n, tri[:, :3], cand, wvar, lp_stage, return_x=True)
        if lpb is not None:
            details["lp_bound"] = lpb
            lb = max(lb, min(value, lpb))
        if xlp is not None and value > lb + 1e-9 * value:
            # LP-guided rounding: a second greedy pass where entries the LP
            # changes are cheap; keep whichever answer is better
            S2, F2, _ = _heuristic(problem, rules, tri, cand, budget, greedy_weights=w * (1.05 - xlp))
            v2 = _value(w, S2)
            details["lp_guided_value"] = v2
            if v2 < value - 1e-12:
                S_edges, F, value = S2, F2, v2
            optimal = value <= lb + 1e-9 * value
    if rules.round_bound_first:
        lb = kept_sets.round_bound(lb, wvar)
        optimal = value <= lb + 1e-9 * value
    problem.report(1.0 if value == 0 else max(0.2, lb / value), "heuristic done")
    run_exact = not optimal and (method == "exact" or (
        method == "auto" and n <= opts["exact_max_n"] and len(tri) <= opts["exact_max_rows"]))
    if run_exact:
        # under auto without a time limit the exact stage has its own budget
        stage = budget.stage(opts["exact_budget"] if method == "auto" and problem.time_limit is None else None)
        log: list = []
        res = _exact(problem, rules, tri, cand, S_edges, stage, log)
        details.update({"method": rules.exact_method if res["optimal"] else
                        "exact stage stopped early (" + res["status"] + "); best verified answer",
                        "rounds": res["rounds"], "cuts": res["cuts"], "nodes": res["nodes"],
                        "exact_status": res["status"], "exact_log": log[-20:]})
        res_lb = res["lower_bound"]
        lb = max(lb, kept_sets.round_bound(res_lb, wvar) if rules.round_bound_first else res_lb)
        if res["value"] < value - 1e-12 or res["optimal"]:
            S = kept_sets.ids_to_mask(res["ids"], n)
            F = problem.observed & ~S
            S_edges = np.argwhere(np.triu(S, 1))
            value = res["value"]
        optimal = res["optimal"] or value <= lb + 1e-9 * value
    # (a no-op under round_bound_first: rounding an already rounded bound changes nothing)
    lb = kept_sets.round_bound(lb, wvar)
    optimal = optimal or value <= lb + 1e-9 * value
    X, extra = rules.values(problem, F, S_edges)
    details.update(extra)
    details["work"] = round(budget.spent, 6)
    seconds["total"] = round(time.perf_counter() - t0, 3)
    details["seconds"] = seconds
    value, lb = kept_sets.unscale_weights(details, value, lb, wexp)
    return Solution(X=X, objective_value=value, lower_bound=min(lb, value), optimal=bool(optimal), details=details)
