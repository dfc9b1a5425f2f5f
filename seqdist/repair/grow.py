"""``grow``: increase entries only; fewest increased entries, then least total increase.

The idea (docs/repair.md): keep a set ``F`` unchanged and increase the rest
(``S``). A metric ``X`` with ``X = D`` on ``F`` has every entry at most the
shortest kept path between its ends; growing needs ``X >= D``. So ``F`` can
be kept exactly when **every** observed entry (kept or grown) is at most the
shortest path over ``F`` between its ends (then the shortest paths over
``F`` themselves are such a metric). A violation is an entry ``e`` longer
than a kept path ``P``; growing ``e`` cannot help, so one of the entries of
``P`` must grow: the cut is ``sum_{f in P} z_f >= 1`` (the light edges of
the broken cycle), and for a violated triangle with longest side ``h`` it
reads ``z_a + z_b >= 1`` for the two shorter sides.

Algorithm: as for ``fewest`` (:mod:`seqdist.repair.fewest`) with these cuts:
a greedy hitting set of the light sides of violated triangles; then, while
some observed entry is longer than its shortest kept path, a greedy hitting
set of those paths' entries leaves ``F``; then changed entries return to
``F`` while every observed entry stays at most its shortest kept path
(:func:`~seqdist.repair.kept_sets.prune`). Bounds: a greedy packing of
violated triangles over their light sides and the LP relaxation over the
triangle rows. Exact (small problems): the binary program with lazy cuts
from the path oracle above.

Second stage (least total increase for the chosen ``S``): start from the
shortest paths over ``F`` (the largest admissible values) and lower each
grown entry in turn as far as the triangle inequalities with all others
allow, never below its input, until nothing moves. Exact feasibility by
construction; the total increase is reported but not proven least.

Feasibility: without locks growing always succeeds (all entries raised to
the largest one is a metric). With locks, ``U`` = shortest paths over the
locked entries bounds every admissible metric from above, so an observed
entry longer than ``U`` can never be kept or grown: the engine refuses such
a request (exit 3) and names the entry and the locked path.

Work, not time: as for fewest, every stage stops by a work budget
(:class:`~seqdist.repair.problem.Budget`), never by the clock.

Options: see :data:`OPTIONS` (those of fewest; exact only up to 60 taxa
under ``auto``: growing is harder, the relaxations are weaker).
"""

from __future__ import annotations

import time
from dataclasses import replace

import numpy as np

from seqdist.kernels import kept_graph
from seqdist.repair import kept_sets
from seqdist.repair.fewest import OPTIONS as _FEWEST_OPTIONS
from seqdist.repair.fewest import packing_lower_bound
from seqdist.repair.problem import RepairProblem, Solution, rescaled, validate_options

__all__ = ["make_feasible", "heuristic", "exact", "solve"]

#: The options grow reads (those of fewest, with a smaller exact_max_n).
OPTIONS = dict(_FEWEST_OPTIONS)
OPTIONS["exact_max_n"] = replace(_FEWEST_OPTIONS["exact_max_n"], default=60)


def _cand_light(tri, var):
    i, j, k, h = tri[:, 0], tri[:, 1], tri[:, 2], tri[:, 3]
    c = np.stack([var[i, j], var[i, k], var[j, k]], 1)
    c[np.arange(len(tri)), h] = False  # the longest side growing never helps
    return c


def make_feasible(problem: RepairProblem, S, F, budget=None):
    """Grow ``S`` until every observed entry is at most its shortest kept path.

    Each round: shortest paths over ``F``; one shortest kept path for every
    entry longer than it; a greedy weighted hitting set of those paths'
    unlocked entries leaves ``F``. Every round removes at least one kept
    entry, so there are at most as many rounds as kept entries (a fixed round
    cap once made feasible requests fail on dense matrices with a long locked
    entry). The engine's lock check guarantees each path has an unlocked entry.
    Always runs to the end; its work is charged to ``budget``.
    """
    D, tol, n = problem.D, problem.tol, problem.n
    S = S.copy()
    F = F.copy()
    obs = problem.observed
    var = obs & ~problem.locked
    added = 0
    while True:
        A = kept_sets.kept_paths(D, F)
        bad = kept_sets.broken_edges(D, A, obs, tol)
        if budget is not None:
            budget.charge(kept_sets.cost_apsp(n) + kept_sets.cost_dijkstra(n) * len(np.unique(bad[:, 0])))
        if len(bad) == 0:
            return S, F, added
        W = np.where(F, D, np.inf)
        np.fill_diagonal(W, 0.0)
        paths = [p for p in kept_sets.paths_for(W, bad) if p]
        # greedy hitting set of the paths' unlocked entries
        sets = [[e for e in kept_sets.path_edges(p, n) if var.flat[e]] for p in paths]
        alive = [q for q, s in enumerate(sets) if s]
        if not alive:  # pragma: no cover - excluded by the engine's lock check
            raise RuntimeError("grow: a locked path undercuts an entry")
        while alive:
            count: dict[int, float] = {}
            for q in alive:
                for e in sets[q]:
                    count[e] = count.get(e, 0.0) + 1.0
            best = max(sorted(count), key=lambda e: count[e] / max(problem.weights.flat[e], 1e-300))
            a, b = divmod(best, n)
            S[a, b] = S[b, a] = True
            F[a, b] = F[b, a] = False
            added += 1
            alive = [q for q in alive if best not in sets[q]]


def heuristic(problem: RepairProblem, tri, cand, budget=None, greedy_weights=None):
    D, tol, n = problem.D, problem.tol, problem.n
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
    S_edges = kept_sets.prune(D, F, S_edges, keys, True, tol, budget)
    return S_edges, F, {"greedy": int(len(picked)), "cycle_repairs": extra, "pruned": before - len(S_edges)}


def exact(problem: RepairProblem, tri, cand, incumbent_edges, budget, log):
    D, tol, n = problem.D, problem.tol, problem.n
    obs = problem.observed
    var = obs & ~problem.locked
    sides = [(tri[:, 0], tri[:, 1]), (tri[:, 0], tri[:, 2]), (tri[:, 1], tri[:, 2])]
    ids = [a * n + b for a, b in sides]
    cuts = [[int(ids[s][t]) for s in range(3) if cand[t, s]] for t in range(len(tri))]

    def separate(S_ids):
        S = kept_sets.ids_to_mask(S_ids, n)
        F = obs & ~S
        A = kept_sets.kept_paths(D, F)
        budget.charge(kept_sets.cost_apsp(n))
        bad = kept_sets.broken_edges(D, A, obs, tol)
        if len(bad) == 0:
            return [], None
        W = np.where(F, D, np.inf)
        np.fill_diagonal(W, 0.0)
        viol = D[bad[:, 0], bad[:, 1]] - A[bad[:, 0], bad[:, 1]]
        bad = bad[np.lexsort((np.arange(len(bad)), -viol))][:5000]
        budget.charge(kept_sets.cost_dijkstra(n) * len(np.unique(bad[:, 0])))
        new = []
        for path in kept_sets.paths_for(W, bad):
            if path:
                new.append([e for e in kept_sets.path_edges(path, n) if var.flat[e]])
        S2, F2, _ = make_feasible(problem, S, F, budget)
        S_edges = np.argwhere(np.triu(S2, 1))
        w = problem.weights[S_edges[:, 0], S_edges[:, 1]]
        S_edges = kept_sets.prune(D, F2, S_edges, -w, True, tol, budget)
        return new, kept_sets.edges_to_ids(S_edges, n)

    inc_val = (float(problem.weights[incumbent_edges[:, 0], incumbent_edges[:, 1]].sum())
               if len(incumbent_edges) else 0.0)
    return kept_sets.lazy_hitting_set(n, np.where(var, problem.weights, 0.0), cuts, separate,
                                     (kept_sets.edges_to_ids(incumbent_edges, n), inc_val), budget,
                                     problem.progress, log=log,
                                     mip_scale=kept_sets.GROW_MIP_SCALE)


def solve(problem: RepairProblem) -> Solution:
    """Fewest increased entries (weighted), then least total increase; see the module docs."""
    t0 = time.perf_counter()  # for the report's seconds only, never a decision
    opts = validate_options("grow", OPTIONS, problem.options)
    # weights far from 1 are rescaled by a power of two (exact): HiGHS takes
    # costs above 1e20 as infinite, and the optimality tests compare at 1e-9
    problem, _, wexp = rescaled(problem, distances=False)
    D, tol, n = problem.D, problem.tol, problem.n
    method = opts["method"]
    budget = problem.budget()
    var = problem.observed & ~problem.locked
    w = problem.weights
    tri = kept_graph.violated_triangles(D, tol)
    budget.charge(kept_sets.TRIANGLES_PER_N3 * float(n) ** 3)
    cand = _cand_light(tri, var)
    problem.report(0.05, f"{len(tri)} violated triangles")
    S_edges, F, hinfo = heuristic(problem, tri, cand, budget)
    value = float(w[S_edges[:, 0], S_edges[:, 1]].sum()) if len(S_edges) else 0.0
    lb = min(value, packing_lower_bound(problem, tri, cand))
    seconds = {"heuristic": round(time.perf_counter() - t0, 3)}
    details = {"method": "heuristic (greedy hitting set of light sides, path repair, prune)",
               "heuristic_value": value, "packing_bound": lb, "violated_triangles": int(len(tri)), **hinfo}
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
            S2, F2, h2 = heuristic(problem, tri, cand, budget, greedy_weights=gw)
            v2 = float(w[S2[:, 0], S2[:, 1]].sum()) if len(S2) else 0.0
            details["lp_guided_value"] = v2
            if v2 < value - 1e-12:
                S_edges, F, value = S2, F2, v2
    lb = kept_sets.round_bound(lb, np.where(var, w, 0.0))
    optimal = value <= lb + 1e-9 * value
    problem.report(1.0 if value == 0 else max(0.2, lb / value), "heuristic done")
    run_exact = not optimal and (method == "exact" or (
        method == "auto" and n <= opts["exact_max_n"] and len(tri) <= opts["exact_max_rows"]))
    if run_exact:
        # under auto without a time limit the exact stage has its own budget
        stage = budget.stage(opts["exact_budget"] if method == "auto" and problem.time_limit is None else None)
        log: list = []
        res = exact(problem, tri, cand, S_edges, stage, log)
        details.update({"method": "exact (lazy increase-only cycle cuts, HiGHS)" if res["optimal"] else
                        "exact stage stopped early (" + res["status"] + "); best verified answer",
                        "rounds": res["rounds"], "cuts": res["cuts"], "nodes": res["nodes"],
                        "exact_status": res["status"], "exact_log": log[-20:]})
        lb = max(lb, kept_sets.round_bound(res["lower_bound"], np.where(var, w, 0.0)))
        if res["value"] < value - 1e-12 or res["optimal"]:
            S = kept_sets.ids_to_mask(res["ids"], n)
            F = problem.observed & ~S
            S_edges = np.argwhere(np.triu(S, 1))
            value = res["value"]
        optimal = res["optimal"] or value <= lb + 1e-9 * value
    lower = D[S_edges[:, 0], S_edges[:, 1]] if len(S_edges) else np.zeros(0)
    X, sweeps = kept_sets.complete(D, F, S_edges, tol, lower=lower)
    inc = X[S_edges[:, 0], S_edges[:, 1]] - lower if len(S_edges) else np.zeros(0)
    details["total_increase"] = float(inc.sum())
    details["value_sweeps"] = sweeps
    details["work"] = round(budget.spent, 6)
    seconds["total"] = round(time.perf_counter() - t0, 3)
    details["seconds"] = seconds
    value, lb = kept_sets.unscale_weights(details, value, lb, wexp)
    return Solution(X=X, objective_value=value, lower_bound=min(lb, value), optimal=bool(optimal), details=details)
