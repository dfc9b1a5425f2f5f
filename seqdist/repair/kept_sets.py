"""Kept sets, their repair and the lazy-cut integer program, shared by fewest and grow.

Vocabulary (see docs/repair.md): the observed entries are the edges of a
graph; a repair changes a set ``S`` and keeps ``F`` (the rest). Masks are
symmetric boolean (n, n) arrays; edge ids are ``i * n + j`` with ``i < j``.

* :func:`kept_paths` - shortest paths over a kept set.
* :func:`broken_edges` - the entries a kept set cannot accommodate.
* :func:`prune` - put changed entries back into the kept set while that
  stays feasible (one pass is enough: adding edges only shortens paths, so an
  entry that cannot return now never can later).
* :func:`complete` - the values for a feasible kept set: shortest paths over
  it, then each changed entry moved as near its input value as the others allow.
* :func:`lazy_hitting_set` - the exact binary program with lazy cycle cuts
  (scipy's ``milp``, HiGHS).

The method built on these (its stages, bounds and bookkeeping) is
:mod:`seqdist.repair.hitting_set`.

Every stopping decision follows a :class:`~seqdist.repair.problem.Budget`
charged by the work model below (counted steps times fixed per-step costs),
never the clock: HiGHS gets node and iteration limits, not time limits.
"""

from __future__ import annotations

import contextlib
import os
from typing import TYPE_CHECKING, Callable, Collection, Iterable, Iterator, Sequence

import numpy as np

from seqdist.kernels import kept_graph
from seqdist.kernels.shortest_paths import apsp
from seqdist.repair.problem import Budget

if TYPE_CHECKING:  # only for the annotations: scipy is imported where it is used
    from scipy.optimize import OptimizeResult
    from scipy.sparse import spmatrix

__all__ = ["mip_cost", "mip_nodes", "cost_apsp", "cost_dijkstra", "kept_paths", "broken_edges", "sym", "prune",
           "complete", "paths_for", "path_edges", "quiet_stdout", "milp", "lazy_hitting_set", "lp_bound",
           "round_bound", "unscale_weights", "edges_to_ids", "ids_to_mask"]

# ------------------------------------------------------------------ work model
# Cost of each counted step in reference seconds (problem.REFERENCE_MACHINE),
# measured once there (medians over n = 100 to 400, and over the HiGHS calls of
# fewest and grow runs at n = 12 to 60) and fixed here: a budget is spent by
# these counts, never by the clock, so answers do not depend on the machine or
# its load. HiGHS's branch and bound is the least regular (strong branching
# and root cuts); its model is right within a factor of about 2-3.
APSP_PER_N3 = 3e-10            # seqdist.kernels.shortest_paths.apsp (blocked Floyd-Warshall), per n^3
DIJKSTRA_PER_N2 = 1.3e-9       # one dense Dijkstra (kept_graph.shortest_tree), per n^2
INSERT_PER_N2 = 1.6e-9         # prune: insert test + update of the kept paths, per n^2
TRIANGLES_PER_N3 = 1.2e-9      # kept_graph.violated_triangles (count and fill), per n^3
LP_CALL = 2e-3                 # fixed part of one linprog call
LP_ITER_PER_NZ = 6e-9          # one HiGHS simplex iteration, per unit of size (non-zeros + rows + columns;
                               # measured 6e-10 to 2e-8 on the LPs here: the least regular item)
MIP_ROOT_PER_NZ = 8e-4         # one milp call up to its first node (presolve, cuts, root strong
                               # branching, heuristics), per unit of size: fewest's cuts (6e-4 to
                               # 1.6e-3 measured); grow's two-entry cuts are far easier (4e-6 to
                               # 1.5e-4): GROW_MIP_SCALE
GROW_MIP_SCALE = 0.1           # grow's milp calls: this times fewest's root and node costs
MIP_EARLY_NODES = 20           # the first nodes of a milp call pay for strong branching:
MIP_EARLY_PER_NZ = 1.5e-4      #   each, per unit of size
MIP_NODE_PER_SQRT_NZ = 6e-4    # later nodes, per square root of the size


def mip_cost(nodes: int, size: float, scale: float = 1.0) -> float:
    """Counted work of ``nodes`` branch-and-bound nodes of a milp call of ``size`` (root excluded)."""
    early = min(nodes, MIP_EARLY_NODES)
    return scale * (early * MIP_EARLY_PER_NZ * size + (nodes - early) * MIP_NODE_PER_SQRT_NZ * np.sqrt(size))


def mip_nodes(work: float, size: float, scale: float = 1.0) -> int:
    """The most nodes whose :func:`mip_cost` fits in ``work`` (at least 1).

    >>> mip_nodes(1.001 * mip_cost(7, 1000.0), 1000.0), mip_nodes(1.001 * mip_cost(500, 1000.0), 1000.0)
    (7, 500)
    """
    e = scale * MIP_EARLY_PER_NZ * size
    if work < MIP_EARLY_NODES * e:
        return max(1, int(work // e))
    return MIP_EARLY_NODES + int((work - MIP_EARLY_NODES * e) // (scale * MIP_NODE_PER_SQRT_NZ * np.sqrt(size)))


def cost_apsp(n: int) -> float:
    return APSP_PER_N3 * float(n) ** 3


def cost_dijkstra(n: int) -> float:
    return DIJKSTRA_PER_N2 * float(n) ** 2


def kept_paths(D: np.ndarray, F: np.ndarray) -> np.ndarray:
    """All-pairs shortest paths over the kept entries ``F`` (inf where unreachable)."""
    W = np.where(F, D, np.inf)
    np.fill_diagonal(W, 0.0)
    return apsp(W)


def broken_edges(D: np.ndarray, A: np.ndarray, check: np.ndarray, tol: float) -> np.ndarray:
    """(m, 2) array of entries (i < j) in ``check`` with ``D > A + tol``."""
    bad = np.triu(check & (D > A + tol), 1)
    return np.argwhere(bad)


def sym(mask: np.ndarray) -> np.ndarray:
    m = np.triu(mask, 1)
    return m | m.T


def prune(D: np.ndarray, F: np.ndarray, S_edges: np.ndarray, keys: np.ndarray, check_all: bool, tol: float,
          budget: Budget | None = None) -> np.ndarray:
    """Return entries of ``S_edges`` to the kept set ``F`` where possible (in place on F).

    Parameters
    ----------
    D : ndarray
        Input distances.
    F : ndarray of bool
        Feasible kept set (symmetric); updated in place.
    S_edges : (m, 2) int array
        Changed entries, tried in the order of ``keys`` (ascending).
    check_all : bool
        False (fewest): only kept entries must stay at most their shortest
        kept path. True (grow): every observed entry must (``check`` is then
        the observed mask, passed as ``F``'s companion via ``D`` not NaN).
    budget : Budget, optional
        Charged per entry tried; once spent, the remaining entries stay
        changed (still feasible: the kept set only ever grows while it stays so).

    Returns the list of entries that stay changed.
    """
    n = D.shape[0]
    A = kept_paths(D, F)
    if budget is not None:
        budget.charge(cost_apsp(n))
    check = ~np.isnan(D) if check_all else F.copy()
    np.fill_diagonal(check, False)
    order = np.lexsort((np.arange(len(keys)), keys))
    stay = []
    step = INSERT_PER_N2 * float(n) ** 2
    for q, idx in enumerate(order):
        i, j = int(S_edges[idx, 0]), int(S_edges[idx, 1])
        if budget is not None and budget.exhausted():
            stay.extend((int(S_edges[r, 0]), int(S_edges[r, 1])) for r in order[q:])
            break
        d = D[i, j]
        if d > A[i, j] + tol:
            stay.append((i, j))
            continue
        if budget is not None:
            budget.charge(step)
        if not check_all:
            check[i, j] = check[j, i] = True
        if kept_graph.insert_ok(A, D, check, i, j, d, tol):
            kept_graph.insert_edge(A, i, j, d)
            F[i, j] = F[j, i] = True
        else:
            if not check_all:
                check[i, j] = check[j, i] = False
            stay.append((i, j))
    return np.array(stay, dtype=np.int64).reshape(-1, 2)


def complete(D: np.ndarray, F: np.ndarray, S_edges: np.ndarray, tol: float, lower: np.ndarray | None = None,
             sweeps: int = 50) -> tuple[np.ndarray, int]:
    """Values for a feasible kept set ``F``: a metric equal to ``D`` on ``F``.

    Start from the shortest paths over ``F`` (the largest such metric;
    pairs with no kept path get the largest finite shortest-path distance,
    which keeps it a metric), then move each changed entry in turn to the
    value nearest its input that the triangle inequalities with all other
    entries allow (never below ``lower`` when given), until nothing moves.
    Returns the full matrix (missing entries hold shortest-path values).
    """
    A = kept_paths(D, F)
    if not np.isfinite(A).all():
        fin = A[np.isfinite(A)]
        A = np.where(np.isfinite(A), A, fin.max() if fin.size else 0.0)
    X = np.where(F, D, A)
    np.fill_diagonal(X, 0.0)
    X = np.ascontiguousarray(X)
    if len(S_edges):
        ei, ej = S_edges[:, 0], S_edges[:, 1]
        lo = np.zeros(len(ei)) if lower is None else np.asarray(lower, dtype=np.float64)
        n_sweeps = kept_graph.sweep_nearest(X, ei, ej, D[ei, ej], lo, tol, sweeps)
    else:
        n_sweeps = 0
    return X, n_sweeps


def paths_for(W: np.ndarray, pairs: np.ndarray, max_pairs: int | None = None) -> list[list[int]]:
    """One shortest path (node list) over ``W`` for each pair, one Dijkstra per distinct source."""
    out = []
    if max_pairs is not None:
        pairs = pairs[:max_pairs]
    by_src: dict[int, list[int]] = {}
    for q, (i, j) in enumerate(pairs):
        by_src.setdefault(int(i), []).append(q)
    res: list = [None] * len(pairs)
    for s, qs in by_src.items():
        _, pred = kept_graph.shortest_tree(W, s)
        for q in qs:
            res[q] = kept_graph.path_from_tree(pred, s, int(pairs[q][1]))
    for p in res:
        out.append(p)
    return out


def path_edges(path: list[int], n: int) -> list[int]:
    """Edge ids (i*n+j, i<j) along a node path."""
    return [min(a, b) * n + max(a, b) for a, b in zip(path[:-1], path[1:])]


@contextlib.contextmanager
def quiet_stdout() -> Iterator[None]:
    """Send file descriptor 1 to /dev/null while a solver runs.

    HiGHS (inside scipy) can print diagnostics from C straight to standard
    output, which may carry the repaired matrix (``-o -``).
    """
    import sys

    try:
        sys.stdout.flush()
        fd = sys.stdout.fileno()
    except (AttributeError, OSError, ValueError):  # no real stdout (e.g. captured): nothing to guard
        yield
        return
    saved = os.dup(fd)
    devnull = os.open(os.devnull, os.O_WRONLY)
    try:
        os.dup2(devnull, fd)
        yield
    finally:
        os.dup2(saved, fd)
        os.close(saved)
        os.close(devnull)


def milp(c: np.ndarray, A: np.ndarray | spmatrix, options: dict) -> OptimizeResult:
    """scipy's ``milp`` (HiGHS) on ``min c z, A z >= 1, z binary``.

    Only work limits go in ``options`` (``node_limit``), never ``time_limit``:
    HiGHS's branch and bound is deterministic for a given node limit.
    (HiGHS ignores a simplex iteration limit inside branch and bound, so nodes
    are the one work limit it takes.)
    """
    from scipy.optimize import LinearConstraint, milp

    with quiet_stdout():
        return milp(c, constraints=LinearConstraint(A, lb=1.0, ub=np.inf), integrality=np.ones(len(c)),
                    bounds=(0, 1), options=dict(options))


def lazy_hitting_set(n: int, w: np.ndarray, cuts: Iterable[Collection[int]],
                     separate: Callable[[list[int]], tuple[Sequence[Collection[int]], Collection[int] | None]],
                     incumbent: tuple[Iterable[int], float], budget: Budget,
                     progress: Callable[[float | None, str | None], object] | None = None, max_rounds: int = 500,
                     log: list[dict] | None = None, mip_scale: float = 1.0) -> dict:
    """Exact weighted hitting set of broken cycles with lazy cuts.

    Parameters
    ----------
    n : int
    w : ndarray (n, n)
        Weight of each unlocked entry (upper triangle used).
    cuts : list of sequences of edge ids
        Initial cuts: each says "at least one of these entries changes".
    separate : callable
        ``separate(S_ids) -> (new_cuts, feasible_ids or None)``: the cuts
        violated by changing exactly ``S_ids`` (empty when that change set
        is feasible) and, optionally, a feasible change set built from it.
        It charges its own work to ``budget``.
    incumbent : (ids, value)
        A feasible change set to start from (from the heuristic).
    budget : Budget
        Work budget: each ``milp`` call gets the branch-and-bound nodes and
        simplex iterations that fit in what is left (never a time limit), and
        is charged by its size and node count; the loop stops when it is spent.
    mip_scale : float
        Factor on the counted work of each milp call (it depends on the kind
        of cuts, see the work model).

    Returns
    -------
    dict with ``ids``, ``value``, ``lower_bound``, ``optimal``, ``rounds``,
    ``cuts``, ``status``, ``nodes``.
    """
    import scipy.sparse as sp

    best_ids, best_val = list(incumbent[0]), float(incumbent[1])
    lb = 0.0
    rounds = 0
    nodes = 0
    status = "optimal"
    all_cuts = [tuple(sorted(set(c))) for c in cuts if len(c)]
    seen = set(all_cuts)
    all_cuts = list(seen)
    all_cuts.sort()
    wf = w.ravel()
    eps = 1e-9 * best_val  # relative: values may be tiny or huge
    while rounds < max_rounds:
        rounds += 1
        if best_val <= lb + eps:
            break
        if budget.exhausted():
            status = "time limit"
            break
        cols = np.unique(np.fromiter((e for c in all_cuts for e in c), dtype=np.int64))
        if cols.size == 0:
            lb = 0.0
            ids = []
        else:
            pos = {int(e): q for q, e in enumerate(cols)}
            indptr = [0]
            indices = []
            for c in all_cuts:
                indices.extend(pos[e] for e in c)
                indptr.append(len(indices))
            Amat = sp.csr_matrix((np.ones(len(indices)), np.array(indices), np.array(indptr)),
                                 shape=(len(all_cuts), cols.size))
            size = float(len(indices) + len(all_cuts) + cols.size)
            # HiGHS takes no work limit inside the root node: a call whose
            # root would not fit in what is left is not started
            left = budget.left()
            root = mip_scale * MIP_ROOT_PER_NZ * size
            if left is not None and left < root:
                status = "time limit"
                break
            budget.charge(root)
            left = budget.left()
            node_limit = None if left is None else mip_nodes(left, size, mip_scale)
            opts = {"disp": False, "mip_rel_gap": 1e-9}
            if node_limit is not None:
                opts["node_limit"] = node_limit
            res = milp(wf[cols], Amat, opts)
            used = int(getattr(res, "mip_node_count", 0) or 0)
            nodes += used
            budget.charge(mip_cost(used, size, mip_scale))
            bound = getattr(res, "mip_dual_bound", None)
            if res.status == 0:
                lb = max(lb, float(res.fun))
            elif bound is not None and np.isfinite(bound):
                lb = max(lb, float(bound))
            # stopped by the node limit, i.e. by the work budget
            limited = res.status != 0 and node_limit is not None and used >= node_limit
            if res.x is None:
                status = "time limit" if limited or res.status == 1 else f"solver status {res.status}"
                break
            ids = [int(e) for e in cols[res.x > 0.5]]
            if res.status != 0:
                status = "time limit" if limited or res.status == 1 else f"solver status {res.status}"
        new_cuts, feasible = separate(ids)
        if feasible is not None:
            val = float(sum(wf[e] for e in feasible))
            if val < best_val - eps:
                best_ids, best_val = list(feasible), val
        if log is not None:
            log.append({"round": rounds, "cuts": len(all_cuts), "lower_bound": lb, "best": best_val,
                        "new_cuts": len(new_cuts), "nodes": nodes})
        if progress is not None:
            progress(lb / best_val if best_val > 0 else 1.0,
                     f"round {rounds}: {len(all_cuts)} cuts, bound {lb:.6g}, best {best_val:.6g}")
        if not new_cuts:
            if status == "optimal":
                # the relaxation's optimum is feasible: it is optimal
                val = float(sum(wf[e] for e in ids))
                if val < best_val - eps or (val <= best_val + eps and len(ids) < len(best_ids)):
                    best_ids, best_val = ids, val
                lb = max(lb, val)
            break
        if status != "optimal":
            break
        added = 0
        for c in new_cuts:
            t = tuple(sorted(set(c)))
            if t and t not in seen:
                seen.add(t)
                all_cuts.append(t)
                added += 1
        if added == 0:  # pragma: no cover - a cut oracle that repeats itself
            status = "no new cuts"
            break
    optimal = best_val <= lb + eps
    return {"ids": best_ids, "value": best_val, "lower_bound": min(lb, best_val), "optimal": bool(optimal),
            "rounds": rounds, "cuts": len(all_cuts), "status": "optimal" if optimal else status, "nodes": nodes}


def lp_bound(n: int, cuts_tri: np.ndarray, cand: np.ndarray, w: np.ndarray, budget: Budget,
             max_rows: int = 300000,
             return_x: bool = False) -> float | None | tuple[float | None, np.ndarray | None]:
    """LP relaxation of the hitting set over the triangle rows (a lower bound), or None.

    ``cuts_tri`` holds (i, j, k) triangles and ``cand`` which of the sides
    (i,j), (i,k), (j,k) may change. The rows are a subset of all cycle rows,
    so the relaxation's optimum bounds every repair from below. Skipped when
    there are more than ``max_rows`` rows; HiGHS gets the simplex iterations
    that fit in ``budget`` (None, i.e. no bound, when they run out). With
    ``return_x`` also the LP values as an (n, n) array (upper triangle; None
    when skipped), which guide a second greedy pass (LP-guided rounding).
    """
    import scipy.sparse as sp
    from scipy.optimize import linprog

    m = len(cuts_tri)
    if m == 0 or m > max_rows:
        out = None if m else 0.0
        return (out, None) if return_x else out
    i, j, k = cuts_tri[:, 0], cuts_tri[:, 1], cuts_tri[:, 2]
    ids = np.stack([i * n + j, i * n + k, j * n + k], 1)
    rows = np.repeat(np.arange(m), 3)[cand.ravel()]
    flat = ids.ravel()[cand.ravel()]
    cols, inv = np.unique(flat, return_inverse=True)
    A = sp.csr_matrix((-np.ones(len(flat)), (rows, inv)), shape=(m, len(cols)))
    per_iter = LP_ITER_PER_NZ * float(len(flat) + m + len(cols))
    budget.charge(LP_CALL)
    maxiter = budget.count(per_iter)
    if maxiter is not None and maxiter < 1:
        return (None, None) if return_x else None
    opts = {} if maxiter is None else {"maxiter": int(maxiter)}
    with quiet_stdout():
        res = linprog(w.ravel()[cols], A_ub=A, b_ub=-np.ones(m), bounds=(0, 1), method="highs", options=opts)
    budget.charge(per_iter * float(getattr(res, "nit", 0) or 0))
    if res.status != 0:
        return (None, None) if return_x else None
    # the dual objective is the proven bound; it equals res.fun at optimality,
    # minus a solver tolerance we take off to stay on the safe side
    bound = float(res.fun) * (1 - 1e-9) - 1e-7
    if not return_x:
        return bound
    x = np.zeros(n * n)
    x[cols] = np.clip(res.x, 0.0, 1.0)
    return bound, x.reshape(n, n)


def round_bound(lb: float, w: np.ndarray) -> float:
    """With integer weights every change set has an integer cost: round the bound up."""
    vals = w[np.isfinite(w) & (w > 0)]
    if vals.size and np.all(vals == np.round(vals)):
        return max(0.0, float(np.ceil(lb - 1e-6)))
    return max(0.0, lb)


def unscale_weights(details: dict, value: float, lb: float, wexp: int) -> tuple[float, float]:
    """Undo a power-of-two scaling of the weights (by ``2**wexp``) on a hitting-set result.

    The value, the bound and the weighted figures in ``details`` go back to
    the caller's units (exact: powers of two); ``details`` is changed in place.
    Returns ``(value, lower_bound)``.

    Examples
    --------
    >>> d = {"lp_bound": 8.0}
    >>> unscale_weights(d, 16.0, 8.0, 3), d
    ((2.0, 1.0), {'lp_bound': 1.0, 'weights_scaled_by': 8.0})
    """
    if not wexp:
        return value, lb
    details["weights_scaled_by"] = float(np.ldexp(1.0, wexp))
    for key in ("heuristic_value", "packing_bound", "lp_bound", "lp_guided_value"):
        if key in details:
            details[key] = float(np.ldexp(details[key], -wexp))
    for entry in details.get("exact_log", []):
        entry["lower_bound"], entry["best"] = (float(np.ldexp(entry["lower_bound"], -wexp)),
                                               float(np.ldexp(entry["best"], -wexp)))
    return float(np.ldexp(value, -wexp)), float(np.ldexp(lb, -wexp))


def edges_to_ids(edges: np.ndarray | Iterable[tuple[int, int]], n: int) -> list:
    """Edge ids ``i * n + j`` of ``(i, j)`` pairs."""
    return [int(a) * n + int(b) for a, b in edges]


def ids_to_mask(ids: Iterable[int], n: int) -> np.ndarray:
    """The symmetric (n, n) mask of a set of edge ids."""
    S = np.zeros((n, n), dtype=bool)
    S.flat[np.asarray(list(ids), dtype=np.int64)] = True
    return sym(S)
