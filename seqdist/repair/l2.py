"""``l2``: the nearest metric in weighted least squares (metric nearness).

Minimise ``sum_{i<j} w_ij (x_ij - d_ij)^2`` over the observed entries,
subject to ``x`` being a metric (the engine fills missing entries).

Algorithm (details and the bound's derivation in docs/repair_convex.md):

1. **Hildreth's method** (dual coordinate ascent; for a least-squares
   objective it is the same as Dykstra's cyclic projections) over a *pool*
   of triangle constraints with their duals stored sparsely: only
   constraints that are violated or have a positive dual. Each round scans
   every triangle for new violations (a compiled, two-thread scan), merges
   them in, forgets satisfied constraints with dual 0, then sweeps the pool
   several times. A scan adds at most ``max(10^6, n^2)`` constraints, the
   most violated first (far from a metric half of all triangles are
   violated). When some entries are missing or have weight 0, a
   shortest-path oracle adds cycle constraints through them.
2. **Certificate.** Any duals ``lam >= 0`` give a Lagrangian lower bound
   (:func:`seqdist.repair.convex.bound_l2`); the shortest-path closure of the iterate is
   a feasible metric whose objective is an upper bound, lowered further by a
   pass of coordinate descent over the metrics when that may close the gap
   (:func:`seqdist.repair.convex.descend`). The reported gap is the
   difference.
3. **Schedule.** Sweeps per round and scan frequency follow work counts
   (triangles per scan against constraints per sweep), never the clock, so
   the same input and options give the same iterates on any machine; and
   ``time_limit`` is a work budget (:class:`~seqdist.repair.problem.Budget`)
   spent by the same counts, so a run stopped by it is reproducible too.
4. **Primal-dual finish** (option ``pdhg``, on by default when every entry
   is a variable). Once the relative gap is ``pdhg_from_gap`` (1e-3) and
   the pool holds at most 4 rows per entry, the restarted, reflected
   Halpern primal-dual hybrid gradient method
   (:class:`seqdist.repair.convex.PrimalDual`) goes on from Hildreth's
   point and duals over the same pool, with the same scans and
   certificates (:func:`seqdist.repair.convex.primal_dual_phase`).
   Hildreth's method has a slow linear tail on noisy matrices; measured,
   noisy n = 500 closed 1e-6 in 4.8 s instead of 18.6 s, and n = 1000 in
   44 s where Hildreth's method stood at 1.2e-4 after 26 s.
5. **Active-set polish** (option, off by default). The constraints with a
   positive dual are made equalities and the equality-constrained
   least-squares problem is solved by conjugate gradients on
   ``A W^-1 A^T mu = A x``; constraints with a negative multiplier are
   dropped, newly violated ones added, and the step repeated. Only
   improvements of the bound or of the feasible point are kept. Measured
   here it reaches gaps near 1e-10 at n = 200, but the linear systems
   become too ill-conditioned for conjugate gradients by n = 500, and at
   the default tolerance plain Hildreth is faster (1.4 s against 5.2 s at
   n = 200), hence off by default.

Options (``problem.options``): see :data:`OPTIONS`.

Examples
--------
>>> import numpy as np
>>> from seqdist.repair.problem import RepairProblem
>>> D = np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]])
>>> obs = ~np.eye(3, dtype=bool)
>>> sol = solve(RepairProblem(D, np.where(obs, 1.0, 0.0), np.zeros((3, 3), bool), obs, 1e-9))
>>> round(float(sol.X[0, 1]), 6), round(sol.objective_value, 6), sol.optimal  # (5, 1, 1) -> (4, 2, 2)
(4.0, 3.0, True)
"""

from __future__ import annotations

import time

import numpy as np

from seqdist.kernels import convex as K
from seqdist.repair import convex as C
from seqdist.repair.problem import Option, RepairProblem, Solution, rescaled

__all__ = ["solve"]

_DEFAULT_GAP = 1e-6
_MAX_POLISH = 12
_CG_MAX_ITER = 3000
_CG_RTOL = 1e-9

#: The options l2 reads (checked by :func:`~seqdist.repair.problem.validate_options`).
OPTIONS = {
    "gap_tol": Option(_DEFAULT_GAP, "relative gap that counts as optimal", low=0.0, low_open=True),
    "max_rounds": Option(100000, "stop after this many rounds (status 'round limit')", low=1),
    "polish": Option(False, "the active-set polish (conjugate gradients on the positive-dual set)"),
    "relax": Option(1.0, "over-relaxation of each Hildreth step (1 is the plain method)",
                    low=0.0, high=2.0, low_open=True, high_open=True),
    "max_sweeps": Option(256, "most sweeps over the pool between two scans", low=2),
    "pdhg": Option(True, "Hildreth's method until the relative gap pdhg_from_gap, then the restarted primal-dual "
                         "hybrid gradient method (false: Hildreth's method to the end)"),
    "pdhg_from_gap": Option(1e-3, "with pdhg: Hildreth's method runs until this relative gap", low=0.0),
    "verbose": Option(False, "a log line per round on standard error"),
}

def _x_of(pool: C.Pool, S: C.Setup) -> np.ndarray:
    """The primal point of the duals: ``x = d - W^-1 A^T lam`` (upper triangle)."""
    return S.d - S.winv * pool.accumulate()


def _certify(x, pool, S):
    # the descent pass is left to the loop's schedule (C.Descent)
    Y, info = C.feasible_point(x, S, descent=False)
    p = C.objective_l2(Y, S)
    g = C.bound_l2(pool.accumulate(), S)
    return Y, p, g, info


def _cg(pool: C.Pool, S: C.Setup, r1, r2, max_iter, budget):
    """Solve ``A W^-1 A^T delta = r`` (Jacobi-preconditioned conjugate gradients)."""
    n = S.n
    d1, d2 = pool.denominators(S.winv)
    dg = np.concatenate([d1, d2])
    use = dg > 0
    pre = np.where(use, 1.0 / np.where(use, dg, 1.0), 0.0)
    r = np.where(use, np.concatenate([r1, r2]), 0.0)
    m1 = d1.size

    def mat(v):
        c = np.zeros((n, n))
        K.accumulate_tri(pool.keys, v[:m1], c)
        if pool.clam.size:
            K.accumulate_cyc(pool.ptr, pool.edges, v[m1:], c.reshape(-1))
        a1, a2 = pool.apply(S.winv * c)
        return np.where(use, np.concatenate([a1, a2]), 0.0)

    x = np.zeros_like(r)
    res = r.copy()
    z = pre * res
    p = z.copy()
    rz = float(res @ z)
    r0 = float(np.sqrt(res @ res))
    it = 0
    if r0 == 0.0:
        return x, 0, True
    ok = False
    for it in range(1, max_iter + 1):
        q = mat(p)
        pq = float(p @ q)
        if not pq > 0:
            break
        a = rz / pq
        x += a * p
        res -= a * q
        if float(np.sqrt(res @ res)) <= _CG_RTOL * r0:
            ok = True
            break
        z = pre * res
        rz2 = float(res @ z)
        p = z + (rz2 / rz) * p
        rz = rz2
        budget.charge(C.CG_PER_CONSTRAINT * (r.size + pool.edges.size) + 2e-9 * n * n)
        if budget.exhausted():
            break
    return x, it, ok


def _polish(pool: C.Pool, S: C.Setup, rounds: int, budget, log):
    """Primal-dual active-set steps from the pool's positive duals.

    Returns the best feasible point found ``(p, Y)``, the best duals
    ``(g, pool)`` and statistics. Nothing here needs to succeed: the caller
    keeps only improvements.
    """
    act = pool.positive()
    best_p, best_Y, best_g, best_pool = np.inf, None, -np.inf, None
    stats = {"polish_steps": 0, "cg_iterations": 0, "kkt": False}
    for step in range(rounds):
        if budget.exhausted():
            break
        x0 = _x_of(act, S)
        r1, r2 = act.apply(x0)
        delta, its, ok = _cg(act, S, r1, r2, _CG_MAX_ITER, budget)
        stats["polish_steps"] += 1
        stats["cg_iterations"] += its
        m1 = act.keys.size
        mu = act.lam + delta[:m1]
        cmu = act.clam + delta[m1:] if act.clam.size else act.clam
        c = np.zeros((S.n, S.n))
        K.accumulate_tri(act.keys, delta[:m1], c)
        if act.clam.size:
            K.accumulate_cyc(act.ptr, act.edges, delta[m1:], c.reshape(-1))
        xp = x0 - S.winv * c
        if not ok or not np.isfinite(xp).all():
            # far from the right active set: the equalities distort; give up quietly
            log(f"polish step {step}: CG stopped after {its} iterations; polish abandoned")
            break
        Y, info = C.feasible_point(xp, S)
        budget.charge(C.certificate_cost(S) + C.scan_cost(S))
        p = C.objective_l2(Y, S)
        cand = C.Pool(S.n, act.keys.copy(), np.maximum(mu, 0.0), act.ptr.copy(), act.edges.copy(),
                      np.maximum(cmu, 0.0))
        g = C.bound_l2(cand.accumulate(), S)
        if p < best_p:
            best_p, best_Y = p, Y
        if g > best_g:
            best_g, best_pool = g, cand
        newk, newc = C.find_violations(xp, S)
        neg = int((mu < 0).sum() + (cmu < 0).sum())
        log(f"polish step {step}: {act.size} equalities, CG {its} ({'converged' if ok else 'stopped'}), "
            f"feasible {p:.12g}, bound {g:.12g}, {neg} negative, {newk.size} violated")
        if neg == 0 and newk.size == 0 and newc is None:
            stats["kkt"] = True
            break
        if newk.size > act.size:
            break
        # next active set: drop negative multipliers, add the violated constraints
        cand = C.Pool(S.n, act.keys[mu > 0].copy(), mu[mu > 0].copy())
        if act.clam.size:
            keep = np.nonzero(cmu > 0)[0]
            segs = [act.edges[act.ptr[t]:act.ptr[t + 1]] for t in keep]
            cand.ptr = np.zeros(len(segs) + 1, np.int64)
            if segs:
                cand.ptr[1:] = np.cumsum([s.size for s in segs])
                cand.edges = np.concatenate(segs)
            cand.clam = cmu[keep].copy()
        cand.add(newk, newc)
        act = cand
    return best_p, best_Y, best_g, best_pool, stats


def solve(problem: RepairProblem) -> Solution:
    """Nearest metric in weighted least squares, with a certified gap.

    Parameters
    ----------
    problem : RepairProblem
        Input, weights (0 free, inf locked), locks, missing entries, time
        limit and options (``gap_tol``, ``max_rounds``, ``polish``).

    Returns
    -------
    Solution
        ``X`` a metric on the observed entries (NaN where missing; locks
        kept exactly), ``objective_value`` = sum of w (X - D)^2 over the
        observed entries, ``lower_bound`` a Lagrangian bound,
        ``optimal`` when the relative gap is at most ``gap_tol``.

    Examples
    --------
    >>> import numpy as np
    >>> from seqdist.repair.problem import RepairProblem
    >>> D = np.array([[0, 4, 1], [4, 0, 1], [1, 1, 0.]])
    >>> obs = ~np.eye(3, dtype=bool)
    >>> s = solve(RepairProblem(D, obs * 1.0, np.zeros((3, 3), bool), obs, 1e-9))
    >>> round(s.objective_value, 9)  # move 4 down and both 1s up by 2/3
    1.333333333
    """
    # distances or weights far from 1 are rescaled by powers of two (exact),
    # as for l1, so that the solver's thresholds meet values near 1
    problem, a, b = rescaled(problem)
    return C.rescale_solution(_solve(problem), a, b, 2)


def _solve(problem: RepairProblem) -> Solution:
    t0, opts, budget, log = C.run_context(problem, "l2", OPTIONS)
    gap_tol = opts["gap_tol"]
    max_rounds = opts["max_rounds"]
    use_polish = opts["polish"]
    omega = opts["relax"]
    S = C.setup(problem)
    n = S.n
    pool = C.Pool(n)
    # iterate and inverse weights interleaved (see sweep_l2_tri); x is a view
    xw = np.empty((n, n, 2))
    xw[:, :, 0] = S.d
    xw[:, :, 1] = S.winv
    x = xw[:, :, 0]
    best_p, best_Y, best_g = np.inf, None, 0.0  # every objective value is >= 0: 0 is a bound
    rounds = sweeps = scans = 0
    t_scan = t_sweep = t_cert = t_polish = 0.0
    per_round = 4
    scan_every = 1
    since_scan = 0
    last_polish_gap = np.inf
    polish_calls = 0
    polish_stats = {"polish_steps": 0, "cg_iterations": 0, "kkt": False}
    status = "running"
    gap0 = None
    max_sweeps = opts["max_sweeps"]
    descent = C.Descent(C.objective_l2, gap_tol)
    use_pd = opts["pdhg"]
    last_rel = None
    while True:
        # separation: a full scan, less often once scans stop finding new constraints
        if since_scan + 1 >= scan_every or rounds == 0:
            ta = time.perf_counter()
            sinfo = {}
            newk, newc = C.find_violations(np.ascontiguousarray(x), S, pool, info=sinfo)
            budget.charge(C.scan_cost(S) + sinfo["counts"] * C.count_cost(S))
            t_scan += time.perf_counter() - ta
            scans += 1
            since_scan = 0
            if rounds == 0 and newk.size == 0 and newc is None:
                status = "metric input"
                best_Y, _ = C.feasible_point(np.ascontiguousarray(x), S)
                best_p, best_g = C.objective_l2(best_Y, S), 0.0
                break
            added = pool.add(newk, newc)
            if sinfo["capped"]:
                scan_every = 1  # more violated constraints wait than one scan took
            elif added <= max(50, 0.002 * pool.size):
                scan_every = min(2 * scan_every, 16)
            else:
                scan_every = max(1, scan_every // 2)
        else:
            since_scan += 1
        tb = time.perf_counter()
        xwf = xw.reshape(-1, 2)
        for s_ in range(per_round):
            K.sweep_l2_tri(pool.keys, pool.lam, xw, s_ % 2 == 0, omega)
            if pool.clam.size:
                K.sweep_l2_cyc(pool.ptr, pool.edges, pool.clam, xwf, omega)
        budget.charge(per_round * C.sweep_cost(pool, C.L2_PER_CONSTRAINT))
        sweeps += per_round
        rounds += 1
        t_sweep += time.perf_counter() - tb
        # balance: the sweeps of a round cost about what one scan costs. Counted
        # in work units, not measured in seconds, so that the same input gives
        # the same iterates (and the same output bytes) on any machine.
        per_round = C.sweeps_per_round(n, pool.size, max_sweeps)
        # certificate: a closure, an accumulation and a bound, cheap beside a
        # round (about a tenth of one scan), so every round
        tc = time.perf_counter()
        x[:] = _x_of(pool, S)  # drop accumulated rounding of the incremental updates
        Y, p, g, _ = _certify(np.ascontiguousarray(x), pool, S)
        budget.charge(C.certificate_cost(S))
        best_g = max(best_g, g)
        Y, p = descent(Y, p, best_g, S, rounds, budget)
        t_cert += time.perf_counter() - tc
        if p < best_p:
            best_p, best_Y = p, Y
        rel = C.relative_gap(best_p, best_g)
        gap0 = rel if gap0 is None else gap0
        log(f"round {rounds}: pool {pool.size} ({pool.nonzero} positive, {pool.cycles} cycles), "
            f"scan every {scan_every}, feasible {best_p:.12g}, bound {best_g:.12g}, gap {rel:.3e}, "
            f"{per_round} sweeps/round")
        if problem.progress is not None and rel > 0 and gap0 and gap0 > gap_tol:
            frac = np.log(gap0 / rel) / np.log(gap0 / gap_tol)
            problem.report(float(np.clip(frac, 0.0, 0.99)), f"gap {rel:.1e}")
        if rel <= gap_tol:
            status = "gap closed"
            break
        if use_pd and C.hand_over(S, pool, rel, last_rel, opts["pdhg_from_gap"]):
            status = "primal-dual"
            break
        last_rel = rel
        # polish once the pool is near the optimal active set
        if use_polish and rel < 2e-4 and rel < 0.3 * last_polish_gap and polish_calls < _MAX_POLISH:
            polish_calls += 1
            tp = time.perf_counter()
            pp, pY, pg, ppool, st = _polish(pool, S, 6, budget, log)
            t_polish += time.perf_counter() - tp
            last_polish_gap = rel
            for k_ in ("polish_steps", "cg_iterations"):
                polish_stats[k_] += st[k_]
            polish_stats["kkt"] = polish_stats["kkt"] or st["kkt"]
            if pp < best_p:
                best_p, best_Y = pp, pY
            if pg > best_g:
                best_g = pg
                # continue from the better duals
                pool = ppool
                x[:] = _x_of(pool, S)
            rel = C.relative_gap(best_p, best_g)
            if rel <= gap_tol:
                status = "gap closed"
                break
        if budget.exhausted():
            status = "time limit"
            break
        if rounds >= max_rounds:
            status = "round limit"
            break
    x = np.ascontiguousarray(x)
    pd_res = None
    if status == "primal-dual":
        # the restarted primal-dual method from Hildreth's point and duals (its y is twice Hildreth's
        # duals: it solves sum w (x - d)^2, Hildreth 1/2 of that)
        pool.lam *= 2.0
        pd = C.PrimalDual(S, pool, quad=True, x=np.ascontiguousarray(x[S.gi, S.gj]))
        pd_res = C.primal_dual_phase(problem, S, pd, (best_p, best_Y, best_g), budget, gap_tol, max_rounds, log,
                                     C.objective_l2, lambda y: C.bound_l2(0.5 * pool.accumulate(y), S), descent,
                                     rounds, scans)
        best_p, best_Y, best_g = pd_res["p"], pd_res["Y"], pd_res["g"]
        status, rounds, scans = pd_res["status"], pd_res["rounds"], pd_res["scans"]
    if best_Y is None:
        best_Y, _ = C.feasible_point(x, S)
        best_p = C.objective_l2(best_Y, S)
        best_g = max(best_g, C.bound_l2(pool.accumulate(), S))
    elif status not in ("gap closed", "metric input") and pd_res is None:
        # a last descent pass on the best point (it never raises the cost)
        Y2 = C.descend(best_Y, S)
        p2 = C.objective_l2(Y2, S)
        if p2 < best_p:
            best_p, best_Y = p2, Y2
    best_g = max(best_g, 0.0)  # every objective value is >= 0
    rel = C.relative_gap(best_p, best_g)
    optimal = rel <= gap_tol
    best_g = min(best_g, best_p)
    details = {
        "method": "Hildreth cyclic projections with an active-set polish" + (
            ", then restarted primal-dual hybrid gradient" if pd_res is not None else ""),
        "status": status,
        "rounds": rounds,
        "sweeps": sweeps,
        "scans": scans,
        "active_constraints": pool.nonzero,
        "pool_constraints": pool.size,
        "cycle_constraints": pool.cycles,
        "gap": float(max(0.0, best_p - best_g)),
        "relative_gap": rel,
        "gap_tol": gap_tol,
        "certified_lower_bound": float(best_g),
        "descent_passes": descent.passes,
        "polish_steps": polish_stats["polish_steps"],
        "cg_iterations": polish_stats["cg_iterations"],
        "kkt_reached": polish_stats["kkt"],
        "work": round(budget.spent, 6),
        "seconds": {"scan": round(t_scan, 3), "sweep": round(t_sweep, 3), "certificate": round(t_cert, 3),
                    "polish": round(t_polish, 3), "total": round(time.perf_counter() - t0, 3)},
    }
    if pd_res is not None:
        details.update(iterations=pd_res["iterations"], restarts=pd_res["restarts"],
                       active_constraints=pd_res["active"], pool_constraints=pd_res["pool"],
                       descent_passes=pd_res["descent_passes"])
        details["seconds"].update(pd_res["seconds"])
    return Solution(X=C.output_matrix(best_Y, S), objective_value=float(best_p), lower_bound=float(best_g),
                    optimal=bool(optimal), details=details)
