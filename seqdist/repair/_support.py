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
"""

from __future__ import annotations

import contextlib
import os
import time

import numpy as np

from ..paths import apsp
from . import _cycles


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


def prune(D, F, S_edges, keys, check_all: bool, tol: float, deadline=None):
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
    Returns the list of entries that stay changed.
    """
    A = kept_paths(D, F)
    check = ~np.isnan(D) if check_all else F.copy()
    np.fill_diagonal(check, False)
    order = np.lexsort((np.arange(len(keys)), keys))
    stay = []
    for q, idx in enumerate(order):
        i, j = int(S_edges[idx, 0]), int(S_edges[idx, 1])
        if deadline is not None and q % 64 == 0 and time.perf_counter() > deadline:
            stay.extend((int(S_edges[r, 0]), int(S_edges[r, 1])) for r in order[q:])
            break
        d = D[i, j]
        if d > A[i, j] + tol:
            stay.append((i, j))
            continue
        if not check_all:
            check[i, j] = check[j, i] = True
        if _cycles.insert_ok(A, D, check, i, j, d, tol):
            _cycles.insert_edge(A, i, j, d)
            F[i, j] = F[j, i] = True
        else:
            if not check_all:
                check[i, j] = check[j, i] = False
            stay.append((i, j))
    return np.array(stay, dtype=np.int64).reshape(-1, 2)


def complete(D, F, S_edges, tol, lower=None, sweeps: int = 50):
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
        n_sweeps = _cycles.sweep_nearest(X, ei, ej, D[ei, ej], lo, tol, sweeps)
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
        _, pred = _cycles.shortest_tree(W, s)
        for q in qs:
            res[q] = _cycles.path_from_tree(pred, s, int(pairs[q][1]))
    for p in res:
        out.append(p)
    return out


def path_edges(path: list[int], n: int) -> list[int]:
    """Edge ids (i*n+j, i<j) along a node path."""
    return [min(a, b) * n + max(a, b) for a, b in zip(path[:-1], path[1:])]


@contextlib.contextmanager
def quiet_stdout():
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


class Deadline:
    """Seconds left before a deadline (None = no limit)."""

    def __init__(self, deadline: float | None):
        self.deadline = deadline

    def left(self) -> float | None:
        return None if self.deadline is None else self.deadline - time.perf_counter()

    def passed(self) -> bool:
        return self.deadline is not None and time.perf_counter() >= self.deadline


def lazy_hitting_set(n, w, cuts, separate, incumbent, deadline: Deadline, progress=None,
                     max_rounds: int = 500, log=None):
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
    incumbent : (ids, value)
        A feasible change set to start from (from the heuristic).
    deadline : Deadline

    Returns
    -------
    dict with ``ids``, ``value``, ``lower_bound``, ``optimal``, ``rounds``,
    ``cuts``, ``status``.
    """
    import scipy.sparse as sp
    from scipy.optimize import LinearConstraint, milp

    best_ids, best_val = list(incumbent[0]), float(incumbent[1])
    lb = 0.0
    rounds = 0
    status = "optimal"
    all_cuts = [tuple(sorted(set(c))) for c in cuts if len(c)]
    seen = set(all_cuts)
    all_cuts = list(seen)
    all_cuts.sort()
    wf = w.ravel()
    eps = 1e-9 * max(1.0, best_val)
    while rounds < max_rounds:
        rounds += 1
        if best_val <= lb + eps:
            break
        left = deadline.left()
        if left is not None and left <= 0.05:
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
            opts = {"disp": False, "mip_rel_gap": 1e-9}
            if left is not None:
                opts["time_limit"] = max(0.05, left)
            with quiet_stdout():
                res = milp(wf[cols], constraints=LinearConstraint(Amat, lb=1.0, ub=np.inf),
                           integrality=np.ones(cols.size), bounds=(0, 1), options=opts)
            bound = getattr(res, "mip_dual_bound", None)
            if res.status == 0:
                lb = max(lb, float(res.fun))
            elif bound is not None and np.isfinite(bound):
                lb = max(lb, float(bound))
            if res.x is None:
                status = "time limit" if res.status == 1 else f"solver status {res.status}"
                break
            ids = [int(e) for e in cols[res.x > 0.5]]
            if res.status != 0:
                status = "time limit"
        new_cuts, feasible = separate(ids)
        if feasible is not None:
            val = float(sum(wf[e] for e in feasible))
            if val < best_val - eps:
                best_ids, best_val = list(feasible), val
        if log is not None:
            log.append({"round": rounds, "cuts": len(all_cuts), "lower_bound": lb, "best": best_val,
                        "new_cuts": len(new_cuts)})
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
            "rounds": rounds, "cuts": len(all_cuts), "status": "optimal" if optimal else status}


def lp_bound(n: int, cuts_tri: np.ndarray, cand: np.ndarray, w: np.ndarray, deadline: Deadline,
             max_rows: int = 300000, max_seconds: float = 30.0, return_x: bool = False):
    """LP relaxation of the hitting set over the triangle rows (a lower bound), or None.

    ``cuts_tri`` holds (i, j, k) triangles and ``cand`` which of the sides
    (i,j), (i,k), (j,k) may change. The rows are a subset of all cycle rows,
    so the relaxation's optimum bounds every repair from below. Skipped when
    there are more than ``max_rows`` rows or no time is left. With
    ``return_x`` also the LP values as an (n, n) array (upper triangle; None
    when skipped), which guide a second greedy pass (LP-guided rounding).
    """
    import scipy.sparse as sp
    from scipy.optimize import linprog

    m = len(cuts_tri)
    if m == 0 or m > max_rows:
        out = None if m else 0.0
        return (out, None) if return_x else out
    left = deadline.left()
    if left is not None and left < 1.0:
        return (None, None) if return_x else None
    i, j, k = cuts_tri[:, 0], cuts_tri[:, 1], cuts_tri[:, 2]
    ids = np.stack([i * n + j, i * n + k, j * n + k], 1)
    rows = np.repeat(np.arange(m), 3)[cand.ravel()]
    flat = ids.ravel()[cand.ravel()]
    cols, inv = np.unique(flat, return_inverse=True)
    A = sp.csr_matrix((-np.ones(len(flat)), (rows, inv)), shape=(m, len(cols)))
    opts = {"time_limit": max_seconds if left is None else max(1.0, min(max_seconds, 0.5 * left))}
    with quiet_stdout():
        res = linprog(w.ravel()[cols], A_ub=A, b_ub=-np.ones(m), bounds=(0, 1), method="highs", options=opts)
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
