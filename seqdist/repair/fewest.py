"""``fewest``: change as few entries as possible (weighted count), in either direction.

The idea (docs/repair.md): a kept set ``F`` can stay unchanged exactly when
no kept entry is longer than the shortest kept path between its ends. Every
broken cycle (an entry longer than a path) must lose at least one entry to
the change set ``S``, and conversely a set ``S`` that meets every broken
cycle leaves a feasible ``F``. So fewest is a weighted hitting set of the
broken cycles.

Algorithm
---------
The stages are shared with grow (:mod:`seqdist.repair.hitting_set`); this
module holds what is fewest's own: :func:`make_feasible` with
:func:`cut_locked`, :func:`values` and :data:`RULES`.

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

import numpy as np

from seqdist.kernels import kept_graph
from seqdist.repair import hitting_set, kept_sets
from seqdist.repair.problem import Budget, RepairProblem, Solution, validate_options

__all__ = ["make_feasible", "cut_locked", "values", "solve"]

#: The options fewest reads: those of the method (:data:`seqdist.repair.hitting_set.OPTIONS`).
OPTIONS = dict(hitting_set.OPTIONS)


def make_feasible(problem: RepairProblem, S: np.ndarray, F: np.ndarray,
                  budget: Budget | None = None) -> tuple[np.ndarray, np.ndarray, int]:
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


def cut_locked(problem: RepairProblem, S: np.ndarray, F: np.ndarray, pairs: np.ndarray,
               budget: Budget | None = None) -> int:
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


def values(problem: RepairProblem, F: np.ndarray, S_edges: np.ndarray) -> tuple[np.ndarray, dict[str, int]]:
    """The second stage: values for the kept set ``F``; returns ``(X, report entries)``.

    Shortest paths over ``F``, then each changed entry moved to the value
    nearest its input that the triangle inequalities allow
    (:func:`~seqdist.repair.kept_sets.complete`).

    Examples
    --------
    >>> from seqdist.repair.problem import RepairProblem
    >>> D = np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]])
    >>> F = np.array([[0, 0, 1], [0, 0, 1], [1, 1, 0]], dtype=bool)  # (0, 1) changes
    >>> X, extra = values(RepairProblem(D, 1 - np.eye(3), np.zeros((3, 3), bool), D > 0, 1e-9), F, np.array([[0, 1]]))
    >>> float(X[0, 1]), extra  # the longest (0, 1) can be: the path 0-2-1
    (2.0, {'value_sweeps': 1, 'unlocked_entries': 3})
    """
    X, sweeps = kept_sets.complete(problem.D, F, S_edges, problem.tol)
    return X, {"value_sweeps": sweeps, "unlocked_entries": int(np.triu(problem.observed & ~problem.locked, 1).sum())}


#: What fewest's hitting set is (:class:`~seqdist.repair.hitting_set.Rules`).
RULES = hitting_set.Rules(
    increase_only=False, make_feasible=make_feasible, values=values,
    heuristic_method="heuristic (greedy hitting set, cycle repair, prune)",
    exact_method="exact (lazy cycle cuts, HiGHS)")


def solve(problem: RepairProblem) -> Solution:
    """Fewest changed entries (weighted); see the module docs.

    Examples
    --------
    >>> from seqdist.repair.problem import RepairProblem
    >>> D = np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]])  # (0, 1) is longer than the path 0-2-1
    >>> W = np.array([[0, 9, 1], [9, 0, 2], [1, 2, 0.]])  # (0, 2) is the cheapest to change
    >>> s = solve(RepairProblem(D, W, np.zeros((3, 3), bool), D > 0, 1e-9))
    >>> s.objective_value, s.optimal, float(s.X[0, 2])
    (1.0, True, 4.0)
    """
    return hitting_set.solve(problem, RULES, validate_options("fewest", OPTIONS, problem.options))
