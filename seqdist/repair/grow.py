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

Algorithm: the stages of ``fewest`` (shared: :mod:`seqdist.repair.hitting_set`;
this module holds what is grow's own: :func:`make_feasible`, :func:`values`
and :data:`RULES`) with these cuts:
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

Options: see :data:`OPTIONS` (those of fewest and the method; exact only up to 60 taxa
under ``auto``: growing is harder, the relaxations are weaker).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from seqdist.repair import hitting_set, kept_sets
from seqdist.repair.problem import Budget, RepairProblem, Solution, validate_options

__all__ = ["make_feasible", "values", "solve"]

#: The options grow reads: those of the method (:data:`seqdist.repair.hitting_set.OPTIONS`), with a
#: smaller exact_max_n.
OPTIONS = dict(hitting_set.OPTIONS)
OPTIONS["exact_max_n"] = replace(hitting_set.OPTIONS["exact_max_n"], default=60)


def make_feasible(problem: RepairProblem, S: np.ndarray, F: np.ndarray,
                  budget: Budget | None = None) -> tuple[np.ndarray, np.ndarray, int]:
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


def values(problem: RepairProblem, F: np.ndarray, S_edges: np.ndarray) -> tuple[np.ndarray, dict[str, float]]:
    """The second stage: least total increase for the kept set ``F``; returns ``(X, report entries)``.

    From the shortest paths over ``F`` (the largest admissible values), each
    grown entry is lowered in turn as far as the triangle inequalities
    allow, never below its input (:func:`~seqdist.repair.kept_sets.complete`).

    Examples
    --------
    >>> from seqdist.repair.problem import RepairProblem
    >>> D = np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]])
    >>> p = RepairProblem(D, 1 - np.eye(3), np.zeros((3, 3), bool), D > 0, 1e-9)
    >>> F = p.observed.copy()
    >>> F[0, 2] = F[2, 0] = False  # (0, 2) grows
    >>> X, extra = values(p, F, np.array([[0, 2]]))
    >>> float(X[0, 2]), extra  # the least (0, 2) can be: 5 - 1
    (4.0, {'total_increase': 3.0, 'value_sweeps': 2})
    """
    D, tol = problem.D, problem.tol
    lower = D[S_edges[:, 0], S_edges[:, 1]] if len(S_edges) else np.zeros(0)
    X, sweeps = kept_sets.complete(D, F, S_edges, tol, lower=lower)
    inc = X[S_edges[:, 0], S_edges[:, 1]] - lower if len(S_edges) else np.zeros(0)
    return X, {"total_increase": float(inc.sum()), "value_sweeps": sweeps}


#: What grow's hitting set is (:class:`~seqdist.repair.hitting_set.Rules`); its milp calls (two-entry
#: triangle cuts) are counted at GROW_MIP_SCALE of fewest's work.
RULES = hitting_set.Rules(
    increase_only=True, make_feasible=make_feasible, values=values,
    heuristic_method="heuristic (greedy hitting set of light sides, path repair, prune)",
    exact_method="exact (lazy increase-only cycle cuts, HiGHS)", mip_scale=kept_sets.GROW_MIP_SCALE,
    round_bound_first=True)


def solve(problem: RepairProblem) -> Solution:
    """Fewest increased entries (weighted), then least total increase; see the module docs.

    Examples
    --------
    >>> from seqdist.repair.problem import RepairProblem
    >>> D = np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]])
    >>> s = solve(RepairProblem(D, 1 - np.eye(3), np.zeros((3, 3), bool), D > 0, 1e-9))
    >>> s.objective_value, s.optimal, s.details["total_increase"]
    (1.0, True, 3.0)
    """
    return hitting_set.solve(problem, RULES, validate_options("grow", OPTIONS, problem.options))
