"""``l1``: the metric with the least weighted absolute change.

Minimise ``sum_{i<j} w_ij |x_ij - d_ij|`` over the observed entries subject
to ``x`` being a metric (the engine fills missing entries).

Three methods (details and derivations in docs/repair_convex.md):

* ``lp`` (exact; default up to ``lp_max_n`` taxa): the linear program with
  ``x = b + p - m`` (``p, m >= 0``) over all pairs, solved by HiGHS through
  :func:`scipy.optimize.linprog` with *constraint generation*: only the
  triangle rows the current solution violates are added, then the solution is
  checked against every triangle again, until none is violated. Missing and
  weight-0 entries are variables without cost.
* ``projection`` (large matrices, or when the LP would not finish): exact
  dual coordinate ascent on the regularised problem
  ``sum w |x - d| + (eps / 2) sum w (x - d)^2`` over the same sparse pool
  of triangle constraints as :mod:`.l2` (the same scan, merge and forget),
  each step an exact line maximisation of the piecewise-quadratic dual;
  ``eps`` shrinks by stages (for small enough ``eps`` the regularised
  solution solves the LP: exact regularisation). The bound is taken after
  two sweeps of exact coordinate ascent on the Lagrangian bound itself from
  a copy of the proximal duals (:func:`seqdist.kernels.convex.ascend_l1_bound`).
* ``pdhg`` (default beyond ``lp_max_n`` taxa when every entry is a
  variable): the projection method until the relative gap is
  ``pdhg_from_gap`` (and its pool holds at most 4 rows per entry), then the
  restarted, reflected Halpern primal-dual hybrid gradient method
  (:class:`seqdist.repair.convex.PrimalDual`) on the same pool, started from
  the projection method's point and duals; the bound is taken at the duals
  of one plain step, after the same ascent. Missing entries or entries of
  weight 0 need cycle rows, which it does not take: the projection method
  runs instead.

Both report a certified gap: any non-negative duals give the Lagrangian
bound :func:`seqdist.repair.convex.bound_l1`, and the shortest-path closure of the primal
point is a feasible metric.

Work, not time: ``time_limit`` is a work budget
(:class:`~seqdist.repair.problem.Budget`): HiGHS gets simplex iteration
limits (never a time limit) and the projection method counts scans and
constraint updates, so a run stopped by it is reproducible.

Options (``problem.options``): see :data:`OPTIONS`.

Examples
--------
>>> import numpy as np
>>> from seqdist.repair.problem import RepairProblem
>>> D = np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]])
>>> obs = ~np.eye(3, dtype=bool)
>>> s = solve(RepairProblem(D, obs * 1.0, np.zeros((3, 3), bool), obs, 1e-9))
>>> round(s.objective_value, 9), s.optimal
(3.0, True)
"""

from __future__ import annotations

import time

import numpy as np

from seqdist.kernels import convex as K
from seqdist.repair import convex as C
from seqdist.repair import kept_sets
from seqdist.repair.problem import Option, RepairProblem, Solution, rescaled

__all__ = ["solve"]

_DEFAULT_GAP = 1e-6
_LP_MAX_N = 100
_PROJECTION = "proximal point with exact dual coordinate ascent"
_ASCENT_SWEEPS = 2  # more changed nothing measured (8 sweeps: the same rounds at n = 200)

#: The options l1 reads (checked by :func:`~seqdist.repair.problem.validate_options`).
OPTIONS = {
    "method": Option("auto", "lp (or exact): the linear program with lazy rows; projection (or heuristic): "
                             "the proximal projection method; pdhg: the projection method, then the restarted "
                             "primal-dual hybrid gradient method; auto: lp up to lp_max_n taxa, pdhg beyond",
                     choices=("auto", "lp", "exact", "pdhg", "projection", "heuristic")),
    "gap_tol": Option(_DEFAULT_GAP, "relative gap that counts as optimal", low=0.0, low_open=True),
    "lp_max_n": Option(_LP_MAX_N, "largest number of taxa for the LP under method auto", low=0),
    "max_rounds": Option(100000, "stop after this many rounds (status 'round limit')", low=1),
    "prox_step": Option(0.05, "first proximal step, times the median entry", low=0.0, low_open=True),
    "prox_step_max": Option(0.1, "largest proximal step, times the largest entry", low=0.0, low_open=True),
    "prox_growth": Option(2.0, "factor by which the proximal step grows each centre", low=1.0),
    "prox_inner": Option(1, "rounds per proximal centre", low=1),
    "pdhg_from_gap": Option(1e-3, "method pdhg: the projection method runs until this relative gap, then the "
                                  "primal-dual method", low=0.0),
    "verbose": Option(False, "a log line per round on standard error"),
}


# ------------------------------------------------------------------ the LP
def _lp_rows(keys, var_p, base, n, nv):
    """Sparse rows ``x_long - x_short - x_short <= 0`` in the split variables."""
    from scipy.sparse import csr_matrix

    i, j, k, s = K.decode(keys)
    e_ij, e_ik, e_jk = i * n + j, i * n + k, j * n + k
    long_ = np.select([s == 0, s == 1], [e_ij, e_ik], e_jk)
    s1 = np.select([s == 0, s == 1], [e_ik, e_ij], e_ij)
    s2 = np.select([s == 0, s == 1], [e_jk, e_jk], e_ik)
    m = keys.size
    rows, cols, vals = [], [], []
    rhs = -(base[long_] - base[s1] - base[s2])
    for e, sign in ((long_, 1.0), (s1, -1.0), (s2, -1.0)):
        v = var_p[e]
        ok = v >= 0  # locked entries are constants (no variable)
        r = np.nonzero(ok)[0]
        # p has column v, m has column v + 1: x = base + p - m
        rows += [r, r]
        cols += [v[ok], v[ok] + 1]
        vals += [np.full(r.size, sign), np.full(r.size, -sign)]
    A = csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                   shape=(m, nv))
    return A, rhs


def _solve_lp(problem, S, budget, gap_tol, log):
    from scipy.optimize import linprog
    from scipy.sparse import vstack

    from seqdist.kernels.shortest_paths import apsp

    n = S.n
    up = np.triu(np.ones((n, n), dtype=bool), 1)
    # base values: the input on observed entries; missing entries start at
    # the shortest path over the observed ones (any start works: no cost)
    Dobs = np.where(S.observed, S.D, np.inf)
    np.fill_diagonal(Dobs, 0.0)
    SP = apsp(Dobs)
    fin = np.isfinite(SP)
    SP[~fin] = float(SP[fin].max()) if fin.any() else 0.0
    base = np.where(S.observed, np.nan_to_num(S.D), SP)
    base = np.maximum(base, 0.0)
    Mbox = max(S.M, float(base[up].max()) if n > 1 else 0.0)
    Wfull = np.where(S.observed, np.asarray(problem.weights, dtype=np.float64), 0.0)
    locked = S.locked
    var_p = np.full(n * n, -1, np.int64)
    ii, jj = np.nonzero(up & ~locked)
    var_p[ii * n + jj] = 2 * np.arange(ii.size)
    nv = 2 * ii.size
    cost = np.repeat(Wfull[ii, jj], 2)
    bflat = base.reshape(-1)
    bnd = np.empty((nv, 2))
    bnd[0::2, 0] = 0.0
    bnd[0::2, 1] = Mbox - bflat[ii * n + jj]
    bnd[1::2, 0] = 0.0
    bnd[1::2, 1] = bflat[ii * n + jj]
    allG = np.ones((n, n), dtype=bool)
    thr = max(1e-9 * Mbox, 1e-300)

    def xval(sol):
        x = base.copy()
        x[ii, jj] += sol[0::2] - sol[1::2]
        return np.triu(x, 1)

    keys = K.violated_triangles(np.triu(base, 1), allG, True, thr)
    A, b = _lp_rows(keys, var_p, bflat, n, nv)
    best = None
    rounds = 0
    lam_keys, lam = keys, np.zeros(keys.size)
    status = "optimal"
    while True:
        rounds += 1
        if budget.exhausted():
            status = "time limit"
            break
        opts = {"presolve": True}
        # one simplex iteration of HiGHS, counted by the problem's size
        per_iter = kept_sets.LP_ITER_PER_NZ * float(A.nnz + A.shape[0] + nv)
        budget.charge(kept_sets.LP_CALL)
        maxiter = budget.count(per_iter)
        if maxiter is not None:
            if maxiter < 1:
                status = "time limit"
                break
            opts["maxiter"] = int(maxiter)
        if keys.size == 0:
            sol = np.zeros(nv)
            lam = np.zeros(0)
        else:
            res = linprog(cost, A_ub=A, b_ub=b, bounds=bnd, method="highs", options=opts)
            budget.charge(per_iter * float(getattr(res, "nit", 0) or 0))
            if res.x is None:
                status = "time limit" if res.status == 1 else f"LP status {res.status}"
                break
            sol = res.x
            lam = np.maximum(-np.asarray(res.ineqlin.marginals, dtype=np.float64), 0.0)
            if res.status != 0:
                status = "time limit" if res.status == 1 else f"LP status {res.status}"
        lam_keys = keys
        x = xval(sol)
        c = np.zeros((n, n))
        K.accumulate_tri(keys, lam, c)
        g = C.bound_l1(c, S, off_graph=True)
        Y, _ = C.feasible_point(x, S)
        p = C.objective_l1(Y, S)
        budget.charge(C.certificate_cost(S) + C.SCAN_PER_TRIANGLE * n * (n - 1) * (n - 2) / 6.0)
        if best is None or p < best[0]:
            best = [p, Y, g]
        best[2] = max(best[2], g)
        new = K.violated_triangles(x, allG, True, thr)
        new = np.setdiff1d(new, keys, assume_unique=True)
        log(f"LP round {rounds}: {keys.size} rows, feasible {best[0]:.12g}, bound {best[2]:.12g}, "
            f"{new.size} rows violated")
        if problem.progress is not None:
            problem.report(None, f"LP round {rounds}, {keys.size} rows")
        if status != "optimal":
            break
        if new.size == 0 or C.relative_gap(best[0], best[2]) <= 0.1 * gap_tol:
            break
        A2, b2 = _lp_rows(new, var_p, bflat, n, nv)
        A = vstack([A, A2], format="csr")
        b = np.concatenate([b, b2])
        keys = np.concatenate([keys, new])
    if best is None:
        return None
    return {"p": best[0], "Y": best[1], "g": best[2], "rounds": rounds, "rows": int(keys.size),
            "status": status, "active": int((lam > 0).sum()) if lam.size == lam_keys.size else 0}


# ------------------------------------------------------------------ the projection method
def _x_prox(c, Adiff, S, iw, h):
    """Primal minimiser ``x = d + soft(A - c * iw, h)`` (upper triangle; locked: d)."""
    z = Adiff - c * iw
    return S.d + np.sign(z) * np.maximum(np.abs(z) - h, 0.0) * (iw > 0)


def _solve_projection(problem, S, budget, gap_tol, max_rounds, log, opts, stop_gap=None):
    n = S.n
    pool = C.Pool(n)
    c = np.zeros((n, n))
    costed = np.isfinite(S.w) & (S.w > 0)
    scale = float(np.median(S.d[S.gi, S.gj])) if S.gi.size else 1.0
    scale = scale if scale > 0 else max(S.M, 1.0)
    h = opts["prox_step"] * scale
    h_max = opts["prox_step_max"] * max(S.M, scale)
    grow = opts["prox_growth"]
    inner = opts["prox_inner"]

    def iw_of(h):
        return np.where(costed, h / np.where(costed, S.w, 1.0), 0.0)

    iw = iw_of(h)
    z = S.d.copy()             # the proximal centre
    Adiff = np.zeros((n, n))   # z - d
    best_p, best_Y, best_g = np.inf, None, 0.0  # every objective value is >= 0: 0 is a bound
    rounds = sweeps = since_centre = centres = 0
    per_round = 4
    t_scan = t_sweep = t_cert = 0.0
    status = "running"
    gap0 = None
    scan_every, since_scan, scans = 1, 0, 0
    descent = C.Descent(C.objective_l1, gap_tol)
    last_rel = None
    while True:
        if since_scan + 1 >= scan_every or rounds == 0:
            x = _x_prox(c, Adiff, S, iw, h)
            ta = time.perf_counter()
            sinfo = {}
            newk, newc = C.find_violations(x, S, pool, info=sinfo)
            budget.charge(C.scan_cost(S) + sinfo["counts"] * C.count_cost(S))
            t_scan += time.perf_counter() - ta
            scans += 1
            since_scan = 0
            if rounds == 0 and newk.size == 0 and newc is None:
                status = "metric input"
                best_Y, _ = C.feasible_point(x, S)
                best_p, best_g = C.objective_l1(best_Y, S), 0.0
                break
            added = pool.add(newk, newc)
            # scan less often while scans find (almost) nothing new
            if sinfo["capped"]:
                scan_every = 1  # more violated constraints wait than one scan took
            elif added <= max(50, 0.002 * pool.size):
                scan_every = min(2 * scan_every, 16)
            else:
                scan_every = max(1, scan_every // 2)
        else:
            since_scan += 1
        tb = time.perf_counter()
        cf, Af, df, iwf = c.reshape(-1), Adiff.reshape(-1), S.d.reshape(-1), iw.reshape(-1)
        for _ in range(per_round):
            K.sweep_l1_tri(pool.keys, pool.lam, c, Adiff, S.d, iw, h)
            if pool.clam.size:
                K.sweep_l1_cyc(pool.ptr, pool.edges, pool.clam, cf, Af, df, iwf, h)
        budget.charge(per_round * C.sweep_cost(pool, C.L1_PER_CONSTRAINT))
        dt = time.perf_counter() - tb
        t_sweep += dt
        sweeps += per_round
        rounds += 1
        since_centre += 1
        # work counts, not the clock, set the schedule (reproducible runs)
        per_round = C.sweeps_per_round(n, pool.size)
        tc = time.perf_counter()
        c = pool.accumulate()  # drop rounding of the incremental updates
        x = _x_prox(c, Adiff, S, iw, h)
        Y, _ = C.feasible_point(x, S, descent=False)
        p = C.objective_l1(Y, S)
        g = C.bound_l1(c, S)
        if not pool.clam.size:
            # the proximal duals, moved by exact coordinate ascent on the bound itself (on a copy:
            # the proximal iteration keeps its own); measured: the bound a round gives rises by
            # about the gap, and noisy n = 200 closes in 1,770 rounds where it did not in 3,000
            lam2, c2 = pool.lam.copy(), c.copy()
            for _ in range(_ASCENT_SWEEPS):
                K.ascend_l1_bound(pool.keys, lam2, c2, S.d, S.w, S.M)
            g = max(g, C.bound_l1(pool.accumulate(lam2), S))  # c from the duals afresh: a proof
            budget.charge(_ASCENT_SWEEPS * C.sweep_cost(pool, C.ASCENT_PER_CONSTRAINT))
        budget.charge(C.certificate_cost(S))
        best_g = max(best_g, g)
        Y, p = descent(Y, p, best_g, S, rounds, budget)
        t_cert += time.perf_counter() - tc
        if p < best_p:
            best_p, best_Y = p, Y
        rel = C.relative_gap(best_p, best_g)
        gap0 = rel if gap0 is None else gap0
        log(f"round {rounds}: step {h:.3g}, pool {pool.size} ({pool.nonzero} positive), feasible "
            f"{best_p:.12g}, bound {best_g:.12g}, gap {rel:.3e}")
        if problem.progress is not None and rel > 0 and gap0 and gap0 > gap_tol:
            frac = np.log(gap0 / rel) / np.log(gap0 / gap_tol)
            problem.report(float(np.clip(frac, 0.0, 0.99)), f"gap {rel:.1e}")
        if rel <= gap_tol:
            status = "gap closed"
            break
        if stop_gap is not None and C.hand_over(S, pool, rel, last_rel, stop_gap):
            status = "warm"  # the primal-dual method goes on from here
            break
        last_rel = rel
        if since_centre >= inner:
            # proximal point: the next centre is the current primal point
            x = _x_prox(c, Adiff, S, iw, h)
            z = np.where(costed, x, S.d)
            Adiff = z - S.d
            h = min(h * grow, h_max)
            iw = iw_of(h)
            since_centre = 0
            centres += 1
        if budget.exhausted():
            status = "time limit"
            break
        if rounds >= max_rounds:
            status = "round limit"
            break
    if best_Y is None:
        c = pool.accumulate()
        best_Y, _ = C.feasible_point(_x_prox(c, Adiff, S, iw, h), S)
        best_p = C.objective_l1(best_Y, S)
        best_g = max(best_g, C.bound_l1(c, S))
    elif status not in ("gap closed", "metric input", "warm"):
        # a last descent pass on the best point (it never raises the cost)
        Y2 = C.descend(best_Y, S)
        p2 = C.objective_l1(Y2, S)
        if p2 < best_p:
            best_p, best_Y = p2, Y2
    if status == "warm":
        return {"p": best_p, "Y": best_Y, "g": best_g, "rounds": rounds, "sweeps": sweeps, "scans": scans,
                "status": status, "pool": pool, "x": _x_prox(pool.accumulate(), Adiff, S, iw, h),
                "descent": descent}
    return {"p": best_p, "Y": best_Y, "g": best_g, "rounds": rounds, "sweeps": sweeps, "scans": scans,
            "status": status,
            "active": pool.nonzero, "pool": pool.size, "cycles": pool.cycles, "prox_steps": centres,
            "descent_passes": descent.passes,
            "seconds": {"scan": round(t_scan, 3), "sweep": round(t_sweep, 3), "certificate": round(t_cert, 3)}}


# ------------------------------------------------------------------ the primal-dual method
def _bound_at(pool, lam, S, budget):
    """The Lagrangian bound at duals ``lam`` after the bound's own coordinate ascent (on a copy)."""
    lam2 = lam.copy()
    c2 = pool.accumulate(lam2)
    for _ in range(_ASCENT_SWEEPS):
        K.ascend_l1_bound(pool.keys, lam2, c2, S.d, S.w, S.M)
    budget.charge(_ASCENT_SWEEPS * C.sweep_cost(pool, C.ASCENT_PER_CONSTRAINT))
    return C.bound_l1(pool.accumulate(lam2), S)  # c from the duals afresh: a proof


def _solve_pdhg(problem, S, budget, gap_tol, max_rounds, log, opts):
    # far from the optimum the projection method is quick and finds the rows that matter; the
    # primal-dual method starts from its pool, duals and primal point
    warm = _solve_projection(problem, S, budget, gap_tol, max_rounds, log, opts, stop_gap=opts["pdhg_from_gap"])
    if warm["status"] != "warm":
        return dict(warm, method=_PROJECTION)
    pool = warm["pool"]
    pd = C.PrimalDual(S, pool, quad=False, x=np.ascontiguousarray(warm["x"][S.gi, S.gj]))
    res = C.primal_dual_phase(problem, S, pd, (warm["p"], warm["Y"], warm["g"]), budget, gap_tol, max_rounds, log,
                              C.objective_l1, lambda y: _bound_at(pool, y, S, budget), warm["descent"],
                              warm["rounds"], warm["scans"])
    return dict(res, sweeps=warm["sweeps"],
                method="proximal point with exact dual coordinate ascent, then restarted primal-dual hybrid gradient")


# ------------------------------------------------------------------ entry point
def solve(problem: RepairProblem) -> Solution:
    """Least weighted absolute change to a metric, with a certified gap.

    Parameters
    ----------
    problem : RepairProblem
        Input, weights (0 free, inf locked), locks, missing entries, time
        limit and options (``method``, ``gap_tol``, ``lp_max_n``).

    Returns
    -------
    Solution
        ``X`` a metric on the observed entries (NaN where missing; locks kept
        exactly), ``objective_value`` = sum of w |X - D| over the observed
        entries, ``lower_bound`` a Lagrangian bound, ``optimal`` when the
        relative gap is at most ``gap_tol``.

    Examples
    --------
    >>> import numpy as np
    >>> from seqdist.repair.problem import RepairProblem
    >>> D = np.array([[0, 4, 1], [4, 0, 1], [1, 1, 0.]])
    >>> obs = ~np.eye(3, dtype=bool)
    >>> s = solve(RepairProblem(D, obs * 1.0, np.zeros((3, 3), bool), obs, 1e-9))
    >>> round(s.objective_value, 9)
    2.0
    """
    # distances or weights far from 1 are rescaled by powers of two (exact):
    # HiGHS's tolerances are absolute (1e-7) and it takes costs above 1e20 as infinite
    problem, a, b = rescaled(problem)
    return C.rescale_solution(_solve(problem), a, b, 1)


def _solve(problem: RepairProblem) -> Solution:
    t0, opts, budget, log = C.run_context(problem, "l1", OPTIONS)
    gap_tol = opts["gap_tol"]
    method = {"exact": "lp", "heuristic": "projection"}.get(opts["method"], opts["method"])
    max_rounds = opts["max_rounds"]
    S = C.setup(problem)
    if method == "auto":
        method = "lp" if S.n <= opts["lp_max_n"] else "pdhg"
    res = None
    if method == "lp":
        res = _solve_lp(problem, S, budget, gap_tol, log)
        used = "linear program (HiGHS) with lazy triangle rows"
    if method == "pdhg" and not S.full:
        method = "projection"  # the primal-dual method needs every entry as a variable (no cycle rows)
    if res is None and method == "pdhg":
        res = _solve_pdhg(problem, S, budget, gap_tol, max_rounds, log, opts)
        used = res["method"]
    if res is None:
        res = _solve_projection(problem, S, budget, gap_tol, max_rounds, log, opts)
        used = _PROJECTION
    # every objective value is >= 0, so 0 is always a valid bound
    p, g = float(res["p"]), max(0.0, float(res["g"]))
    rel = C.relative_gap(p, g)
    g = min(g, p)
    details = {"method": used, "status": res["status"], "rounds": res["rounds"],
               "active_constraints": res.get("active", 0), "gap": float(max(0.0, p - g)),
               "relative_gap": rel, "gap_tol": gap_tol, "certified_lower_bound": g}
    for k_ in ("rows", "sweeps", "scans", "pool", "cycles", "prox_steps", "iterations", "restarts", "descent_passes"):
        if k_ in res:
            key = {"rows": "lp_rows", "cycles": "cycle_constraints", "pool": "pool_constraints"}.get(k_, k_)
            details[key] = res[k_]
    details["work"] = round(budget.spent, 6)
    details["seconds"] = dict(res.get("seconds", {}), total=round(time.perf_counter() - t0, 3))
    return Solution(X=C.output_matrix(res["Y"], S), objective_value=p, lower_bound=g,
                    optimal=bool(rel <= gap_tol), details=details)
