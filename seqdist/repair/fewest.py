"""``fewest``: change as few entries as possible (weighted count), in either direction.

The idea (docs/repair.md): a kept set ``F`` can stay unchanged exactly when
no kept entry is longer than the shortest kept path between its ends. Every
broken cycle (an entry longer than a path) must lose at least one entry to
the change set ``S``, and conversely a set ``S`` that meets every broken
cycle leaves a feasible ``F``. So fewest is a weighted hitting set of the
broken cycles.

Algorithm
---------
1. **Heuristic** (always; it is the answer beyond exact reach and the
   starting incumbent otherwise): a greedy hitting set of the violated
   triangles (the entry in most unhit violated triangles per unit weight,
   repeatedly); then every kept entry still longer than its shortest kept
   path joins ``S`` (this cannot break another kept entry: removing entries
   only lengthens paths); then :func:`~seqdist.repair.kept_sets.prune` puts
   changed entries back while the kept set stays feasible.
2. **Lower bound**: a greedy packing of violated triangles (a feasible
   solution of the dual of the hitting-set LP relaxation).
3. **Exact** (``method="exact"``, or ``"auto"`` when the problem is small
   enough): the binary program min sum w_e z_e subject to one row
   sum_{e in C} z_e >= 1 per broken cycle C, starting with the violated
   triangles; solve (HiGHS), compute shortest paths over the kept set, add a
   cut for every kept entry longer than its shortest kept path (the entry
   plus the path's entries), repeat. Each relaxation's optimum is a lower
   bound; when its kept set has no broken cycle it is optimal. A feasible
   set built from every round (add the broken entries, prune) updates the
   incumbent, so a time limit returns the best verified answer.
4. **Values** (the second stage; the count is already fixed): shortest
   paths over the kept set, then each changed entry in turn moved to the
   value nearest its input that the triangle inequalities with all other
   entries allow, until nothing moves. This is exact feasibility by
   construction (no LP tolerance to clean up) and never moves an entry
   further than the shortest-path choice; it is not a proven least-L1
   choice among all repairs with the same kept set.

Work, not time: every stage stops by a work budget
(:class:`~seqdist.repair.problem.Budget`, from ``time_limit`` in reference
seconds), counted in shortest-path runs, insert tests, simplex iterations and
branch-and-bound nodes; so answers depend only on the input and the options.

Options: see :data:`OPTIONS`.
"""

from __future__ import annotations

import time

import numpy as np

from seqdist.kernels import kept_graph
from seqdist.repair import kept_sets
from seqdist.repair.problem import Option, RepairProblem, Solution, rescaled, validate_options

__all__ = ["heuristic", "make_feasible", "cut_locked", "packing_lower_bound", "exact", "solve"]

#: The options fewest reads (checked by :func:`~seqdist.repair.problem.validate_options`).
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


def _var_mask(problem: RepairProblem) -> np.ndarray:
    return problem.observed & ~problem.locked


def heuristic(problem: RepairProblem, tri=None, budget=None, greedy_weights=None):
    """Greedy + repair + prune. Returns (S_edges (m,2), F mask, info).

    ``greedy_weights`` replaces the weights in the greedy step only (the
    LP-guided pass); repair and prune always use the true weights. The
    greedy step and the repair always run (they make the answer feasible);
    prune stops early when ``budget`` is spent.
    """
    D, tol, n = problem.D, problem.tol, problem.n
    var = _var_mask(problem)
    if tri is None:
        tri = kept_graph.violated_triangles(D, tol)
    cand = _cand(tri, var)
    picked, cnt = kept_graph.greedy_hitting(n, tri, cand, problem.weights if greedy_weights is None else greedy_weights)
    S = np.zeros((n, n), dtype=bool)
    S.flat[picked] = True
    keyval = np.zeros((n, n))
    keyval.flat[picked] = cnt
    S = kept_sets.sym(S)
    F = problem.observed & ~S
    S, F, extra = make_feasible(problem, S, F, budget)
    S_edges = np.argwhere(np.triu(S, 1))
    w = problem.weights[S_edges[:, 0], S_edges[:, 1]]
    keys = (keyval[S_edges[:, 0], S_edges[:, 1]] + 1.0) / np.maximum(w, 1e-300)  # free entries last
    before = len(S_edges)
    S_edges = kept_sets.prune(D, F, S_edges, keys, False, tol, budget)
    info = {"greedy": int(len(picked)), "cycle_repairs": extra, "pruned": before - len(S_edges)}
    return S_edges, F, info


def _cand(tri, var):
    i, j, k = tri[:, 0], tri[:, 1], tri[:, 2]
    return np.stack([var[i, j], var[i, k], var[j, k]], 1)


def make_feasible(problem: RepairProblem, S, F, budget=None):
    """Grow ``S`` until ``F`` has no broken cycle (on copies). Returns (S, F, entries added).

    Each round computes shortest paths over ``F``; every unlocked kept entry
    longer than its shortest kept path leaves ``F``, and for every such
    locked entry :func:`cut_locked` removes unlocked entries from its short
    kept paths until none is left. Removing entries only lengthens paths, so
    this never breaks another kept entry, and each round removes at least one
    entry: at most as many rounds as there are kept entries. (The engine has
    already checked that the locked entries alone are feasible, so every short
    path has an unlocked entry to give way.) Always runs to the end (the
    answer must be feasible); its work is charged to ``budget``.
    """
    D, tol = problem.D, problem.tol
    S = S.copy()
    F = F.copy()
    added = 0
    while True:
        A = kept_sets.kept_paths(D, F)
        if budget is not None:
            budget.charge(kept_sets.cost_apsp(problem.n))
        bad = kept_sets.broken_edges(D, A, F, tol)
        if len(bad) == 0:
            return S, F, added
        lk = problem.locked[bad[:, 0], bad[:, 1]]
        free = bad[~lk]
        S[free[:, 0], free[:, 1]] = S[free[:, 1], free[:, 0]] = True
        F[free[:, 0], free[:, 1]] = F[free[:, 1], free[:, 0]] = False
        cut = cut_locked(problem, S, F, bad[lk], budget) if lk.any() else 0
        if len(free) + cut == 0:  # pragma: no cover - excluded by the engine's lock check
            raise RuntimeError("fewest: a locked entry is longer than a path of locked entries")
        added += len(free) + cut


def cut_locked(problem: RepairProblem, S, F, pairs, budget=None) -> int:
    """Remove unlocked entries from ``F`` (into ``S``, in place) until no locked
    entry of ``pairs`` is longer than its shortest kept path. Returns how many.

    For each locked entry in turn: the shortest kept path between its ends
    (one Dijkstra), and on it the unlocked entry of least weight (free entries
    first; ties: the longest, then the first) leaves ``F``; repeat until the
    path is long enough. The first cut is made even when the Dijkstra length
    differs from the all-pairs one by a rounding, so every call makes progress.
    A loop per entry, not one entry per shortest-path round: a long locked
    entry may have hundreds of short paths through a dense matrix.
    """
    D, tol, w, locked = problem.D, problem.tol, problem.weights, problem.locked
    W = np.where(F, D, np.inf)
    np.fill_diagonal(W, 0.0)
    removed = 0
    for i, j in pairs:
        i, j = int(i), int(j)
        first = True
        while True:
            dist, pred = kept_graph.shortest_tree(W, i)
            if budget is not None:
                budget.charge(kept_sets.cost_dijkstra(problem.n))
            if not (first or D[i, j] > dist[j] + tol):
                break
            first = False
            path = kept_graph.path_from_tree(pred, i, j)
            best, best_key = None, None
            for a, b in zip(path[:-1], path[1:]) if path else ():
                if locked[a, b]:
                    continue
                key = (w[a, b], -D[a, b])
                if best is None or key < best_key:
                    best, best_key = (a, b), key
            if best is None:
                break
            a, b = best
            S[a, b] = S[b, a] = True
            F[a, b] = F[b, a] = False
            W[a, b] = W[b, a] = np.inf
            removed += 1
    return removed


def packing_lower_bound(problem: RepairProblem, tri, cand) -> float:
    """Weighted packing of violated triangles, triangles with rarely-shared sides first."""
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


def exact(problem: RepairProblem, tri, cand, incumbent_edges, budget, log):
    """The lazy-cut binary program (see the module docs)."""
    D, tol, n = problem.D, problem.tol, problem.n
    var = _var_mask(problem)
    cuts = []
    sides = [(tri[:, 0], tri[:, 1]), (tri[:, 0], tri[:, 2]), (tri[:, 1], tri[:, 2])]
    ids = [a * n + b for a, b in sides]
    for t in range(len(tri)):
        cuts.append([int(ids[s][t]) for s in range(3) if cand[t, s]])

    def separate(S_ids):
        S = kept_sets.ids_to_mask(S_ids, n)
        F = problem.observed & ~S
        A = kept_sets.kept_paths(D, F)
        budget.charge(kept_sets.cost_apsp(n))
        bad = kept_sets.broken_edges(D, A, F, tol)
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
            edges = [int(i) * n + int(j)] + (kept_sets.path_edges(path, n) if path else [])
            new.append([e for e in edges if var.flat[e]])
        S2, F2, _ = make_feasible(problem, S, F, budget)
        S_edges = np.argwhere(np.triu(S2, 1))
        w = problem.weights[S_edges[:, 0], S_edges[:, 1]]
        S_edges = kept_sets.prune(D, F2, S_edges, -w, False, tol, budget)
        return new, kept_sets.edges_to_ids(S_edges, n)

    inc_val = (float(problem.weights[incumbent_edges[:, 0], incumbent_edges[:, 1]].sum())
               if len(incumbent_edges) else 0.0)
    return kept_sets.lazy_hitting_set(n, np.where(var, problem.weights, 0.0), cuts, separate,
                                     (kept_sets.edges_to_ids(incumbent_edges, n), inc_val), budget,
                                     problem.progress, log=log)


def solve(problem: RepairProblem) -> Solution:
    """Fewest changed entries (weighted); see the module docs."""
    t0 = time.perf_counter()  # for the report's seconds only, never a decision
    opts = validate_options("fewest", OPTIONS, problem.options)
    # weights far from 1 are rescaled by a power of two (exact): HiGHS takes
    # costs above 1e20 as infinite, and the optimality tests compare at 1e-9
    problem, _, wexp = rescaled(problem, distances=False)
    D, tol, n = problem.D, problem.tol, problem.n
    method = opts["method"]
    budget = problem.budget()
    var = _var_mask(problem)
    tri = kept_graph.violated_triangles(D, tol)
    budget.charge(kept_sets.TRIANGLES_PER_N3 * float(n) ** 3)
    cand = _cand(tri, var)
    problem.report(0.05, f"{len(tri)} violated triangles")
    S_edges, F, hinfo = heuristic(problem, tri, budget)
    w = problem.weights
    value = float(w[S_edges[:, 0], S_edges[:, 1]].sum()) if len(S_edges) else 0.0
    lb = min(value, packing_lower_bound(problem, tri, cand))
    seconds = {"heuristic": round(time.perf_counter() - t0, 3)}
    details = {"method": "heuristic (greedy hitting set, cycle repair, prune)", "heuristic_value": value,
               "packing_bound": lb, "violated_triangles": int(len(tri)), **hinfo}
    optimal = value <= lb + 1e-9 * value
    if not optimal and opts["lp_bound"]:
        left = budget.left()
        lp_stage = budget.stage(opts["lp_budget"] if left is None else min(opts["lp_budget"], 0.5 * left))
        lpb, xlp = kept_sets.lp_bound(n, tri[:, :3], cand, np.where(var, w, 0.0), lp_stage, return_x=True)
        if lpb is not None:
            details["lp_bound"] = lpb
            lb = max(lb, min(value, lpb))
        if xlp is not None and value > lb + 1e-9 * value:
            # LP-guided rounding: a second greedy pass where entries the LP
            # changes are cheap; keep whichever answer is better
            gw = w * (1.05 - xlp)
            S2, F2, h2 = heuristic(problem, tri, budget, greedy_weights=gw)
            v2 = float(w[S2[:, 0], S2[:, 1]].sum()) if len(S2) else 0.0
            details["lp_guided_value"] = v2
            if v2 < value - 1e-12:
                S_edges, F, value = S2, F2, v2
            optimal = value <= lb + 1e-9 * value
    problem.report(1.0 if value == 0 else max(0.2, lb / value), "heuristic done")
    nvar = int(np.triu(var, 1).sum())
    run_exact = not optimal and (method == "exact" or (
        method == "auto" and n <= opts["exact_max_n"] and len(tri) <= opts["exact_max_rows"]))
    if run_exact:
        # under auto without a time limit the exact stage has its own budget
        stage = budget.stage(opts["exact_budget"] if method == "auto" and problem.time_limit is None else None)
        log: list = []
        res = exact(problem, tri, cand, S_edges, stage, log)
        details.update({"method": "exact (lazy cycle cuts, HiGHS)" if res["optimal"] else
                        "exact stage stopped early (" + res["status"] + "); best verified answer",
                        "rounds": res["rounds"], "cuts": res["cuts"], "nodes": res["nodes"],
                        "exact_status": res["status"], "exact_log": log[-20:]})
        lb = max(lb, res["lower_bound"])
        if res["value"] < value - 1e-12 or res["optimal"]:
            S = kept_sets.ids_to_mask(res["ids"], n)
            F = problem.observed & ~S
            S_edges = np.argwhere(np.triu(S, 1))
            value = res["value"]
        optimal = res["optimal"] or value <= lb + 1e-9 * value
    lb = kept_sets.round_bound(lb, np.where(var, w, 0.0))
    optimal = optimal or value <= lb + 1e-9 * value
    X, sweeps = kept_sets.complete(D, F, S_edges, tol)
    details["value_sweeps"] = sweeps
    details["unlocked_entries"] = nvar
    details["work"] = round(budget.spent, 6)
    seconds["total"] = round(time.perf_counter() - t0, 3)
    details["seconds"] = seconds
    value, lb = kept_sets.unscale_weights(details, value, lb, wexp)
    return Solution(X=X, objective_value=value, lower_bound=min(lb, value), optimal=bool(optimal), details=details)
