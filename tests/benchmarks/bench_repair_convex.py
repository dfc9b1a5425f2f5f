#!/usr/bin/env python
"""Benchmark of the convex repair objectives ``l1`` and ``l2``.

Prints one table per objective; every ratio compares figures measured in the
same run on the same matrix.

Matrices (seeded):

* ``random``: every entry uniform on [0, 1] (far from a metric: most
  triangles are violated);
* ``noisy``: Euclidean distances of points uniform in a 10 x 10 square, each
  entry times exp(N(0, 0.3^2)).

Per size: seqdist's objective value, certified relative gap, seconds; beside
it the general solvers that finish on that size:

* l2: cvxpy with CLARABEL (interior point) on the program with every
  triangle row, built as one sparse matrix (so building is not what is timed);
* l1: scipy ``linprog`` (HiGHS) with every triangle row; seqdist's own ``lp``
  method is the lazy-row route (only violated rows, re-check, add), and its
  default beyond n = 100 (``auto``: the projection method, then the
  primal-dual method where that applies; the method column says which ran).

Each row also gives the load average (1 minute) when the case finished: on
a shared machine the seconds mean little without it.

To compare with another version of the package in the same run, run the
script twice, interleaved, with ``SEQDIST_BENCH_ROOT`` naming the folder
that holds the other ``seqdist`` (e.g. a ``git worktree`` of an older
commit, built in place).

Usage: python tests/benchmarks/bench_repair_convex.py [--sizes 10,50,100,200,500,1000]
       [--kinds random,noisy] [--objectives l1,l2] [--ref-max-l2 100] [--ref-max-l1 50]
       [--limit-l2 600] [--limit-l1 180]
"""

from __future__ import annotations

import argparse
import itertools
import os
import sys
import time

import numpy as np

ROOT = os.environ.get("SEQDIST_BENCH_ROOT") or \
    os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
sys.path.insert(0, ROOT)

from seqdist.repair import l1, l2  # noqa: E402
from seqdist.repair.problem import RepairProblem  # noqa: E402


def matrix(kind: str, n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    if kind == "random":
        D = rng.uniform(0.0, 1.0, (n, n))
    else:
        X = rng.uniform(0, 10, (n, 2))
        D = np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1)) * np.exp(rng.normal(0, 0.3, (n, n)))
    D = np.triu(D, 1)
    return D + D.T


def problem(D, **options) -> RepairProblem:
    n = len(D)
    obs = ~np.eye(n, dtype=bool)
    return RepairProblem(D, obs * 1.0, np.zeros((n, n), bool), obs, 1e-9 * D.max(), options=options)


def triangle_rows(n: int):
    """Sparse rows x_long - x_a - x_b <= 0 over the pair variables (3 C(n,3) rows)."""
    from scipy.sparse import coo_matrix

    idx = -np.ones((n, n), np.int64)
    iu = np.triu_indices(n, 1)
    idx[iu] = np.arange(iu[0].size)
    t = np.array(list(itertools.combinations(range(n), 3)), dtype=np.int64)
    e = np.stack([idx[t[:, 0], t[:, 1]], idx[t[:, 0], t[:, 2]], idx[t[:, 1], t[:, 2]]], 1)
    rows, cols, vals = [], [], []
    r = np.arange(t.shape[0])
    for s in range(3):
        o = [q for q in range(3) if q != s]
        rr = 3 * r + s
        rows += [rr, rr, rr]
        cols += [e[:, s], e[:, o[0]], e[:, o[1]]]
        vals += [np.ones(r.size), -np.ones(r.size), -np.ones(r.size)]
    A = coo_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                   shape=(3 * r.size, iu[0].size)).tocsr()
    return A, iu


def ref_l2_cvxpy(D):
    import cvxpy as cp

    A, iu = triangle_rows(len(D))
    d = D[iu]
    x = cp.Variable(d.size)
    prob = cp.Problem(cp.Minimize(cp.sum_squares(x - d)), [A @ x <= 0])
    t = time.perf_counter()
    prob.solve(solver="CLARABEL")
    return float(prob.value), time.perf_counter() - t


def ref_l1_linprog(D):
    from scipy.optimize import linprog
    from scipy.sparse import csr_matrix, hstack, identity, vstack

    A, iu = triangle_rows(len(D))
    d = D[iu]
    m = d.size
    # variables x (m), t (m): t >= |x - d|
    Z = csr_matrix((A.shape[0], m))
    I = identity(m, format="csr")
    Aub = vstack([hstack([A, Z]), hstack([I, -I]), hstack([-I, -I])], format="csr")
    bub = np.concatenate([np.zeros(A.shape[0]), d, -d])
    c = np.concatenate([np.zeros(m), np.ones(m)])
    t = time.perf_counter()
    res = linprog(c, A_ub=Aub, b_ub=bub, bounds=[(0, None)] * (2 * m), method="highs")
    return float(res.fun), time.perf_counter() - t


def short(details):
    """A short name of the method that ran (from the report's details)."""
    m = details.get("method", "")
    if m.startswith("linear program"):
        return "lp"
    return ("projection" if m.startswith("proximal") else "hildreth") + ("+pdhg" if "primal-dual" in m else "")


def run_ours(obj, D, limit=None, **opts):
    t = time.perf_counter()
    p = problem(D, **opts)
    p.time_limit = limit
    s = (l1 if obj == "l1" else l2).solve(p)
    return s, time.perf_counter() - t


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="10,50,100,200,500,1000")
    ap.add_argument("--kinds", default="random,noisy")
    ap.add_argument("--objectives", default="l2,l1")
    ap.add_argument("--ref-max-l2", type=int, default=100, help="largest n given to cvxpy/CLARABEL")
    ap.add_argument("--ref-max-l1", type=int, default=50, help="largest n given to linprog with all rows")
    ap.add_argument("--lp-max", type=int, default=100, help="largest n for seqdist's lazy-row LP")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--limit-l2", type=float, default=600, help="time limit per l2 case (s)")
    ap.add_argument("--limit-l1", type=float, default=180, help="time limit per l1 case (s)")
    a = ap.parse_args()
    sizes = [int(x) for x in a.sizes.split(",")]
    # warm the compiled kernels so that compilation is not timed
    run_ours("l2", matrix("noisy", 12, 0))
    run_ours("l1", matrix("noisy", 12, 0), method="projection")
    try:
        from threadpoolctl import threadpool_info

        blas = ", ".join(f"{i['internal_api']} {i.get('architecture', '')}" for i in threadpool_info())
    except Exception:  # pragma: no cover
        blas = "unknown"
    import seqdist

    print(f"# seqdist from {os.path.dirname(seqdist.__file__)}; BLAS: {blas}; "
          f"OpenMP threads: {os.environ.get('OMP_NUM_THREADS', 'default')}; cores: {os.cpu_count()}")
    for obj in a.objectives.split(","):
        print(f"\n## {obj}")
        if obj == "l2":
            print("| matrix | n | method | objective | rel. gap | seqdist s | work | cvxpy CLARABEL value | "
                  "CLARABEL s | rel. diff | CLARABEL / seqdist | load |")
            print("|---|---|---|---|---|---|---|---|---|---|---|---|")
        else:
            print("| matrix | n | method | objective | rel. gap | seqdist s | work | linprog all rows value | "
                  "linprog s | rel. diff | linprog / seqdist | load |")
            print("|---|---|---|---|---|---|---|---|---|---|---|---|")
        for kind in a.kinds.split(","):
            for n in sizes:
                D = matrix(kind, n, a.seed + n)
                if obj == "l2":
                    s, ts = run_ours("l2", D, a.limit_l2)
                    cells = ["-", "-", "-", "-"]
                    if n <= a.ref_max_l2:
                        rv, rt = ref_l2_cvxpy(D)
                        cells = [f"{rv:.10g}", f"{rt:.2f}", f"{abs(s.objective_value - rv) / rv:.1e}",
                                 f"{rt / ts:.1f}"]
                    limit = "" if s.optimal else " (limit)"
                    print(f"| {kind} | {n} | {short(s.details)} | {s.objective_value:.10g} | "
                          f"{s.details['relative_gap']:.1e}{limit} | {ts:.2f} | {s.details.get('work', 0):.1f} | "
                          + " | ".join(cells) + f" | {os.getloadavg()[0]:.1f} |", flush=True)
                else:
                    opts = {"method": "lp"} if n <= a.lp_max else {}  # beyond: the default (auto)
                    s, ts = run_ours("l1", D, a.limit_l1, **opts)
                    cells = ["-", "-", "-", "-"]
                    if n <= a.ref_max_l1:
                        rv, rt = ref_l1_linprog(D)
                        cells = [f"{rv:.10g}", f"{rt:.2f}", f"{abs(s.objective_value - rv) / rv:.1e}",
                                 f"{rt / ts:.1f}"]
                    limit = "" if s.optimal else " (limit)"
                    print(f"| {kind} | {n} | {short(s.details)} | {s.objective_value:.10g} | "
                          f"{s.details['relative_gap']:.1e}{limit} | {ts:.2f} | {s.details.get('work', 0):.1f} | "
                          + " | ".join(cells) + f" | {os.getloadavg()[0]:.1f} |", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
