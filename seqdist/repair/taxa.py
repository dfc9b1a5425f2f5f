"""Leaving taxa out: the fewest taxa whose removal leaves no violated triangle.

A violated *checked* triangle (three measured sides; the longest longer than
the sum of the other two by more than ``tol``, computed exactly as the audit
does, ``2 * longest - (sum of the sides) > tol``) is a set of three taxa. A set
of taxa whose removal leaves no violated checked triangle must hold at least
one taxon of each: a least **hitting set** of the violated triangles by taxon
(a least vertex cover of the 3-uniform hypergraph whose edges are the violated
triangles). Triangles with a missing side are not checked, so they do not
count here (the remaining matrix may still hold broken cycles through missing
entries; the repair objective that runs afterwards deals with them).

The problem is NP-hard (it contains vertex cover in graphs), so
:func:`fewest_taxa` combines:

1. **Counts** (:func:`taxon_counts`): per taxon, the violated triangles it is
   in. The *preference order* sorts the taxa by that count (more first), then
   by label; every tie below is broken by it.
2. **Greedy** (:func:`greedy_cover`): the taxon in the most violated triangles
   among those left, repeatedly, until none is left; then **prune**: chosen
   taxa go back, least preferred first, while no violated triangle forms.
3. **Forcing** (an exact reduction, :func:`link_matchings`): the violated
   triangles through a taxon ``v`` form a graph on the other taxa (its
   *link*). If that graph holds more than ``U`` pairwise disjoint pairs
   (``U`` the size of a known cover of the rest, so at least the least
   cover's size), a cover without ``v`` would need a distinct taxon for each
   pair: more than ``U``. So ``v`` is in every least cover; it is left out
   and the rule is applied again to the rest. (The high-degree rule of
   vertex-cover kernels, applied to triangles.) A scrambled row is in
   violated triangles with most pairs of other taxa, so it is forced at once.
4. **Lower bound**: the forced taxa plus, for the rest, a greedy packing of
   taxon-disjoint violated triangles (:func:`packing`; each needs its own
   taxon) and, when the rest's triangles are few enough to list, the linear
   relaxation (HiGHS), rounded up.
5. **Exact**: the binary program ``min sum_v c_v z_v`` subject to
   ``z_i + z_j + z_k >= 1`` per violated triangle of the rest, by scipy's
   ``milp`` (HiGHS), within the work budget. Costs are
   ``c_v = 1 + (p_v + 1) / (n (n + 1))`` with ``p_v`` the position in the
   preference order: the extra terms add up to at most 1/2 over any set, so
   the optimum is a least cover, and among least covers the one whose taxa
   come first in the preference order (least sum of positions).

Every step is a pure function on arrays; the kernels return the number of
triples they examined, which is what the work budget
(:class:`~seqdist.repair.problem.Budget`) is charged with: never the clock.
The kernels are Cython (``_taxa.pyx``, the branch-free scans in
``seqdist/kernels/src/taxa.h``), compiled when the package is installed; the two full scans
run on threads, with results that do not depend on their number.
:func:`reference_violated` (a plain loop) and :func:`reference_fewest_taxa`
(a plain search over all subsets) are for tests.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from seqdist.kernels.triangles import tile_starts
from seqdist.repair import _taxa
from seqdist.repair.problem import Budget

__all__ = ["TaxaCover", "taxon_counts", "violated_taxon_triangles", "preference_positions", "greedy_cover",
           "link_matchings", "packing", "lp_bound", "exact_cover", "fewest_taxa", "reference_violated",
           "reference_fewest_taxa"]

#: Counted work per triple examined by the kernels here, in reference seconds
#: (problem.REFERENCE_MACHINE; medians of n = 200 to 1000, measured once).
TRIPLE_COST = 4e-9
#: Counted work per triple of the count pass (branch-free inner loop).
COUNT_TRIPLE_COST = 1.7e-9
#: The cover programs (scipy's milp, HiGHS): the call up to its first node, per
#: unit of size (non-zeros + rows + columns; measured 1.0e-4 to 2.0e-4 at n = 30
#: to 200 on noisy matrices with 255 to 23,560 violated triangles). Nodes are
#: charged by the model of :mod:`seqdist.repair.kept_sets` (``mip_cost``): the
#: first nodes cost most (strong branching; measured up to 2.7e-4 per unit of
#: size each here), later ones far less; right within a factor of about 3.
MIP_ROOT_PER_SIZE = 2e-4
#: The linear bound: each call, and each simplex iteration per unit of size
#: (measured 1e-8 to 9e-8).
LP_CALL = 2e-3
LP_ITER_PER_SIZE = 3e-8


@dataclass
class TaxaCover:
    """What :func:`fewest_taxa` returns.

    Attributes
    ----------
    taxa : ndarray of int
        Indices of the taxa to leave out, ascending.
    lower_bound : int
        A proven lower bound on the least number of taxa whose removal leaves
        no violated checked triangle.
    optimal : bool
        True when ``len(taxa) == lower_bound``.
    details : dict
        Method, counts, bounds, rounds, counted ``work``.
    forced : ndarray of int
        The taxa the forcing rule proved to be in every least cover.
    """

    taxa: np.ndarray
    lower_bound: int
    optimal: bool
    details: dict = field(default_factory=dict)
    forced: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))


# ------------------------------------------------------------------ wrappers
def _arr(D) -> np.ndarray:
    return np.ascontiguousarray(D, dtype=np.float64)


def _mask(alive, n: int) -> np.ndarray:
    if alive is None:
        return np.ones(n, dtype=np.uint8)
    return np.ascontiguousarray(alive, dtype=np.uint8)


def _triples(a: int) -> float:
    return a * (a - 1) * (a - 2) / 6.0


#: Rows per tile of the count scan (as in :mod:`seqdist.kernels.triangles`).
TILE = 32
#: Least number of taxa for which the two full scans run on threads: below it a scan
#: takes a few milliseconds, less than waking threads can cost on a busy machine.
PARALLEL_MIN_N = 400


def _threads(n: int) -> int:
    return _taxa.threads() if n >= PARALLEL_MIN_N else 1


def _counts(D: np.ndarray, tol: float, alive: np.ndarray) -> np.ndarray:
    # Violated checked triangles (i < j < k, all alive) through each taxon: tiles of rows
    # on threads, each adding into its own row of integers (exact, in any order).
    n = D.shape[0]
    buf = np.zeros((_threads(n), n), dtype=np.int64)
    _taxa.counts(D, tol, alive, tile_starts(n, TILE), TILE, buf)
    return buf.sum(axis=0)


def taxon_counts(D: np.ndarray, tol: float, alive: np.ndarray | None = None) -> np.ndarray:
    """Violated checked triangles through each taxon (among ``alive`` taxa only).

    Parameters
    ----------
    D : ndarray (n, n)
        Symmetric distances; NaN where missing.
    tol : float
        A triangle is violated when ``2 * longest - (sum of sides) > tol``.
    alive : array of bool, optional
        The taxa that count (default: all); the others get 0.

    Examples
    --------
    >>> D = np.array([[0, 5, 1, 1], [5, 0, 1, 1], [1, 1, 0, 1], [1, 1, 1, 0.]])
    >>> taxon_counts(D, 1e-9).tolist()
    [2, 2, 1, 1]
    """
    D = _arr(D)
    return _counts(D, float(tol), _mask(alive, D.shape[0]))


def violated_taxon_triangles(D: np.ndarray, tol: float, alive: np.ndarray | None = None) -> np.ndarray:
    """(m, 3) array of the violated checked triangles ``(i, j, k)``, i < j < k, among ``alive`` taxa.

    Examples
    --------
    >>> violated_taxon_triangles(np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]), 1e-9).tolist()
    [[0, 1, 2]]
    """
    D = _arr(D)
    n = D.shape[0]
    a = _mask(alive, n)
    per_row = np.zeros(n, dtype=np.int64)
    _taxa.list_counts(D, float(tol), a, per_row, _threads(n))
    offsets = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(per_row, out=offsets[1:])
    out = np.empty((int(offsets[-1]), 3), dtype=np.int64)
    _taxa.list_fill(D, float(tol), a, offsets, out, _threads(n))
    return out


def preference_positions(counts: np.ndarray, labels: Sequence[str] | None = None) -> np.ndarray:
    """Position of each taxon in the preference order: more violated triangles first, then by label.

    Examples
    --------
    >>> preference_positions(np.array([1, 3, 1]), ["c", "a", "b"]).tolist()
    [2, 0, 1]
    """
    counts = np.asarray(counts)
    n = counts.size
    names = list(labels) if labels is not None else [f"{i:020d}" for i in range(n)]
    rank = np.empty(n, dtype=np.int64)
    rank[sorted(range(n), key=lambda i: names[i])] = np.arange(n)
    order = np.lexsort((rank, -counts))
    pos = np.empty(n, dtype=np.int64)
    pos[order] = np.arange(n)
    return pos


def greedy_cover(D: np.ndarray, tol: float, pos: np.ndarray,
                 alive: np.ndarray | None = None) -> tuple[np.ndarray, int]:
    """A cover of the violated triangles among ``alive`` taxa: greedy, then pruned.

    Returns the taxa (ascending) and the number of triples examined after the
    count pass (which examines every triple of ``alive`` taxa once).

    Examples
    --------
    >>> D = np.array([[0, 5, 1, 1], [5, 0, 1, 1], [1, 1, 0, 1], [1, 1, 1, 0.]])
    >>> greedy_cover(D, 1e-9, np.arange(4))[0].tolist()
    [0]
    """
    D = _arr(D)
    n = D.shape[0]
    a = _mask(alive, n)
    cnt = _counts(D, float(tol), a)
    picked = np.empty(n, dtype=np.int64)
    npick, w1 = _taxa.greedy(D, float(tol), a.copy(), cnt, np.ascontiguousarray(pos, dtype=np.int64), picked)
    picked = picked[:npick]
    kept = a.copy()
    kept[picked] = 0
    # least preferred back first, so the most preferred stay out
    order = np.ascontiguousarray(picked[np.argsort(-np.asarray(pos)[picked], kind="stable")])
    w2 = _taxa.prune(D, float(tol), kept, order)
    cover = np.flatnonzero((a != 0) & (kept == 0))
    return cover, int(w1 + w2)


def link_matchings(D: np.ndarray, tol: float, alive: np.ndarray | None, cand: np.ndarray | Sequence[int],
                   cap: int) -> tuple[np.ndarray, int]:
    """For each taxon of ``cand``, disjoint pairs in its violated triangles (greedy, up to ``cap + 1``).

    Returns the sizes and the number of triples examined. A size above the
    least cover's size forces the taxon into every least cover (module docs).
    """
    D = _arr(D)
    cand = np.ascontiguousarray(cand, dtype=np.int64)
    out = np.zeros(cand.shape[0], dtype=np.int64)
    work = _taxa.link_matching(D, float(tol), _mask(alive, D.shape[0]), cand, int(cap), out)
    return out, int(work)


def packing(D: np.ndarray, tol: float, order: np.ndarray | Sequence[int]) -> tuple[np.ndarray, int]:
    """Taxon-disjoint violated triangles among the taxa of ``order``, scanned in that order.

    Each needs its own taxon in any cover, so their number is a lower bound.
    Returns the triangles (k, 3) and the number of triples examined.
    """
    D = _arr(D)
    order = np.ascontiguousarray(order, dtype=np.int64)
    out = np.empty((order.shape[0] // 3 + 1, 3), dtype=np.int64)
    t, work = _taxa.pack(D, float(tol), order, out)
    return out[:t].copy(), int(work)


# ------------------------------------------------------------------ integer programs
def _incidence(tri: np.ndarray, cols: np.ndarray):
    import scipy.sparse as sp

    m = len(tri)
    inv = np.searchsorted(cols, tri.ravel())
    return sp.csr_matrix((np.ones(3 * m), (np.repeat(np.arange(m), 3), inv)), shape=(m, cols.size))


def lp_bound(tri: np.ndarray, budget: Budget) -> float | None:
    """Linear relaxation of the cover (unit costs) over the triangles ``tri``: a lower bound, or None."""
    from scipy.optimize import linprog

    from seqdist.repair.kept_sets import quiet_stdout

    if len(tri) == 0:
        return 0.0
    cols = np.unique(tri)
    A = _incidence(tri, cols)
    per_iter = LP_ITER_PER_SIZE * float(A.nnz + A.shape[0] + cols.size)
    budget.charge(LP_CALL)
    maxiter = budget.count(per_iter)
    if maxiter is not None and maxiter < 1:
        return None
    opts = {} if maxiter is None else {"maxiter": int(maxiter)}
    with quiet_stdout():
        res = linprog(np.ones(cols.size), A_ub=-A, b_ub=-np.ones(A.shape[0]), bounds=(0, 1), method="highs",
                      options=opts)
    budget.charge(per_iter * float(getattr(res, "nit", 0) or 0))
    if res.status != 0:
        return None
    # minus a solver tolerance, to stay on the safe side
    return float(res.fun) * (1 - 1e-9) - 1e-7


def exact_cover(tri: np.ndarray, cost: np.ndarray, budget: Budget) -> dict:
    """The least-cost cover of the triangles ``tri`` by the binary program (HiGHS), within ``budget``.

    ``cost`` is indexed by taxon. Returns ``taxa`` (a cover, or None when
    none was found), ``bound`` (a proven lower bound on the least cost),
    ``optimal``, ``status`` and ``nodes``. HiGHS gets a node limit from the
    budget, never a time limit; a call whose root would not fit in what is
    left is not started.
    """
    from seqdist.repair.kept_sets import milp, mip_cost, mip_nodes

    cols = np.unique(tri)
    A = _incidence(tri, cols)
    size = float(A.nnz + A.shape[0] + cols.size)
    root = MIP_ROOT_PER_SIZE * size
    left = budget.left()
    # HiGHS takes no work limit before its first node: not started unless root and node fit
    if left is not None and left < root + mip_cost(1, size):
        return {"taxa": None, "bound": 0.0, "optimal": False, "status": "time limit (not started)", "nodes": 0}
    budget.charge(root)
    left = budget.left()
    opts = {"disp": False, "mip_rel_gap": 1e-9}
    node_limit = None
    if left is not None:
        node_limit = mip_nodes(left, size)
        opts["node_limit"] = node_limit
    res = milp(np.asarray(cost, dtype=np.float64)[cols], A, opts)
    used = int(getattr(res, "mip_node_count", 0) or 0)
    budget.charge(mip_cost(used, size))
    bound = 0.0
    if res.status == 0:
        bound = float(res.fun)
    elif getattr(res, "mip_dual_bound", None) is not None and np.isfinite(res.mip_dual_bound):
        bound = float(res.mip_dual_bound)
    taxa = None
    if res.x is not None:
        taxa = cols[np.asarray(res.x) > 0.5]
        if not np.isin(tri, taxa).any(axis=1).all():  # pragma: no cover - HiGHS returns feasible points only
            taxa = None
    limited = res.status != 0 and node_limit is not None and used >= node_limit
    status = ("optimal" if res.status == 0 else "time limit" if limited or res.status == 1
              else f"solver status {res.status}")
    return {"taxa": taxa, "bound": bound, "optimal": res.status == 0 and taxa is not None, "status": status,
            "nodes": used}


# ------------------------------------------------------------------ the whole search
def fewest_taxa(D: np.ndarray, tol: float, labels: Sequence[str] | None = None, method: str = "auto",
                budget: Budget | None = None, exact_max_rows: int = 100000, lp_max_rows: int = 300000) -> TaxaCover:
    """The fewest taxa whose removal leaves no violated checked triangle (see the module docs).

    Parameters
    ----------
    D : ndarray (n, n)
        Symmetric distances, zero diagonal; NaN where missing (triangles with a
        missing side are not checked and do not count).
    tol : float
        Metric tolerance (a triangle is violated when its longest side exceeds
        the sum of the other two by more than ``tol``).
    labels : sequence of str, optional
        Taxon labels: ties are broken by label after the number of violated
        triangles (default: index order).
    method : {"auto", "exact", "heuristic"}
        ``heuristic``: greedy, prune, forcing and bounds only; ``exact``: also
        the integer program on what forcing leaves, whatever its size;
        ``auto``: the integer program when at most ``exact_max_rows`` violated
        triangles are left.
    budget : Budget, optional
        Work budget (reference seconds) of the integer program and the linear
        bound; the greedy cover always runs to the end.
    exact_max_rows, lp_max_rows : int
        Most violated triangles (after forcing) for the integer program under
        ``auto`` and for the linear bound.

    Returns
    -------
    TaxaCover
        ``taxa`` (indices, ascending; a set whose removal leaves no violated
        checked triangle, verified), ``lower_bound``, ``optimal``, ``details``.

    Examples
    --------
    >>> D = np.array([[0, 9, 1, 1, 1], [9, 0, 1, 1, 1], [1, 1, 0, 1, 1], [1, 1, 1, 0, 1], [1, 1, 1, 1, 0.]])
    >>> r = fewest_taxa(D, 1e-9, labels=["a", "b", "c", "d", "e"])
    >>> r.taxa.tolist(), r.lower_bound, r.optimal
    ([0], 1, True)
    """
    if method not in ("auto", "exact", "heuristic"):
        raise ValueError(f"method must be auto, exact or heuristic, got {method!r}")
    D = _arr(D)
    tol = float(tol)
    n = D.shape[0]
    budget = budget if budget is not None else Budget(None)
    alive = np.ones(n, dtype=np.uint8)
    cnt = _counts(D, tol, alive)
    budget.charge(COUNT_TRIPLE_COST * _triples(n))
    total = int(cnt.sum() // 3)
    details = {"violated_triangles": total, "method": "none needed (no violated triangle)", "forced": 0,
               "forcing_rounds": 0}
    if total == 0:
        details["work"] = round(budget.spent, 6)
        return TaxaCover(np.zeros(0, dtype=np.int64), 0, True, details)
    pos = preference_positions(cnt, labels)

    best, w = greedy_cover(D, tol, pos, alive)
    budget.charge(TRIPLE_COST * w + COUNT_TRIPLE_COST * _triples(n))
    details["greedy"] = int(best.size)
    forced = np.zeros(0, dtype=np.int64)
    rest = best  # a cover of the taxa not forced
    rounds = 0
    while rest.size and not budget.exhausted():
        rounds += 1
        cap = int(rest.size)
        mu, w = link_matchings(D, tol, alive, rest, cap)
        budget.charge(TRIPLE_COST * w)
        new = rest[mu > cap]
        if new.size == 0:
            break
        forced = np.union1d(forced, new)
        alive[new] = 0
        # the old cover without the forced taxa still covers the rest; greedy may do better
        again, w = greedy_cover(D, tol, pos, alive)
        budget.charge(TRIPLE_COST * w + COUNT_TRIPLE_COST * _triples(int(alive.sum())))
        old = np.setdiff1d(rest, new)
        rest = again if again.size < old.size else old
        if forced.size + rest.size < best.size:
            best = np.union1d(forced, rest)
    details["forcing_rounds"] = rounds
    details["forced"] = int(forced.size)
    if forced.size + rest.size <= best.size:
        best = np.union1d(forced, rest)  # holds the forced taxa: the preferred answer among equals

    cnt_rest = _counts(D, tol, alive)
    budget.charge(COUNT_TRIPLE_COST * _triples(int(alive.sum())))
    m_rest = int(cnt_rest.sum() // 3)
    details["violated_after_forcing"] = m_rest
    lb_rest = 0
    how = "greedy, prune" + (", forcing" if forced.size else "")
    if m_rest:
        live = np.flatnonzero(cnt_rest > 0)
        order = live[np.lexsort((pos[live], cnt_rest[live]))]  # rarely-involved taxa first
        packed, w = packing(D, tol, order)
        budget.charge(TRIPLE_COST * w)
        lb_rest = int(len(packed))
        details["packing_bound"] = int(forced.size) + lb_rest
        run_exact = method == "exact" or (method == "auto" and m_rest <= exact_max_rows)
        run_lp = m_rest <= lp_max_rows
        if lb_rest < rest.size and (run_exact or run_lp):
            tri = violated_taxon_triangles(D, tol, alive)
            budget.charge(COUNT_TRIPLE_COST * 2 * _triples(int(alive.sum())))
            if run_exact:
                cost = 1.0 + (pos + 1.0) / (n * (n + 1.0))
                res = exact_cover(tri, cost, budget)
                details["exact_status"] = res["status"]
                details["exact_nodes"] = res["nodes"]
                # any cover costs between its size and its size + 1/2
                lb_rest = max(lb_rest, int(math.ceil(res["bound"] - 0.5 - 1e-6)))
                if res["taxa"] is not None and (res["optimal"] or res["taxa"].size < rest.size):
                    rest = np.asarray(res["taxa"], dtype=np.int64)
                    how += ", integer program"
                    if res["optimal"]:
                        lb_rest = max(lb_rest, int(rest.size))
                    if res["optimal"] or forced.size + rest.size < best.size:
                        best = np.union1d(forced, rest)
            if lb_rest < rest.size and run_lp and not budget.exhausted():
                lpb = lp_bound(tri, budget)
                if lpb is not None:
                    details["lp_bound"] = int(forced.size) + lpb
                    lb_rest = max(lb_rest, int(math.ceil(lpb - 1e-6)))
    lower = min(int(forced.size) + lb_rest, int(best.size))
    # never return a set that leaves a violated triangle
    kept = np.ones(n, dtype=np.uint8)
    kept[best] = 0
    if int(_counts(D, tol, kept).sum()):  # pragma: no cover - a bug, not bad input
        raise RuntimeError("leaving taxa out: the chosen taxa leave a violated triangle")
    details["method"] = how
    details["work"] = round(budget.spent, 6)
    return TaxaCover(np.asarray(best, dtype=np.int64), lower, bool(best.size <= lower), details,
                     np.asarray(forced, dtype=np.int64))


# ------------------------------------------------------------------ plain reference
def reference_violated(D: np.ndarray, tol: float) -> list[tuple[int, int, int]]:
    """The violated checked triangles by a plain loop (for tests), with the audit's formula."""
    n = len(D)
    out = []
    for i, j, k in itertools.combinations(range(n), 3):
        x, y, z = float(D[i, k]), float(D[j, k]), float(D[i, j])
        if any(v != v for v in (x, y, z)):
            continue
        if 2.0 * max(x, y, z) - (x + y + z) > tol:
            out.append((i, j, k))
    return out


def reference_fewest_taxa(D: np.ndarray, tol: float,
                          labels: Sequence[str] | None = None) -> tuple[int, int, list[tuple[int, ...]]]:
    """Brute force over all subsets, smallest first (for tests; tiny n only).

    Returns the least size, the least sum of preference positions among sets
    of that size, and every set of that size and sum.
    """
    n = len(D)
    tri = reference_violated(D, tol)
    counts = [sum(v in t for t in tri) for v in range(n)]
    names = list(labels) if labels is not None else [f"{i:020d}" for i in range(n)]
    order = sorted(range(n), key=lambda v: (-counts[v], names[v]))
    pos = {v: p for p, v in enumerate(order)}
    for size in range(n + 1):
        covers = [set(c) for c in itertools.combinations(range(n), size)
                  if all(any(v in c for v in t) for t in tri)]
        if covers:
            sums = [sum(pos[v] for v in c) for c in covers]
            least = min(sums)
            return size, least, [tuple(sorted(c)) for c, s in zip(covers, sums) if s == least]
    raise AssertionError("unreachable: all taxa always cover")  # pragma: no cover
