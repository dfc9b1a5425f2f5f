#!/usr/bin/env python
"""Benchmark of the combinatorial repair objectives (shrink, fewest, grow).

Prints tables; every ratio compares figures measured in the same run.

1. Planted corruption in Euclidean metrics (points uniform in a 10 x 10
   square; a fraction k of the entries multiplied by 1.5-3 ("up"), by
   0.1-0.5 ("down") or either ("both"); several seeds). Per objective:
   entries changed against the planted count, the lower bound, proven
   optimal or not, seconds. Beside it, on the sizes it can solve, a general
   solver: scipy ``milp`` (HiGHS) on the big-M formulation with every
   triangle row (x_e new values, z_e binary, |x_e - d_e| <= M z_e).
2. Dense multiplicative noise (every entry times exp(N(0, s^2))): fewest and
   grow, heuristic against the proven optimum where the exact method finishes.
3. The shrink kernel against scipy's ``floyd_warshall`` on the same matrix.
4. The whole command (read, repair, write) against a script that reads with
   pandas, runs scipy's ``floyd_warshall`` and writes with pandas.

Usage: python tests/benchmarks/bench_repair.py [--quick]
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
sys.path.insert(0, ROOT)

from seqdist.repair import repair  # noqa: E402


def euclid(n, rng):
    X = rng.uniform(0, 10, (n, 2))
    return np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1))


def planted(n, frac, mode, seed):
    rng = np.random.default_rng(seed)
    D = euclid(n, rng)
    iu = np.triu_indices(n, 1)
    m = len(iu[0])
    k = max(1, int(round(frac * m)))
    sel = rng.choice(m, k, replace=False)
    up = rng.uniform(1.5, 3.0, k)
    down = rng.uniform(0.1, 0.5, k)
    f = {"up": up, "down": down, "both": np.where(rng.random(k) < 0.5, up, down)}[mode]
    v = D[iu][sel] * f
    D[iu[0][sel], iu[1][sel]] = v
    D[iu[1][sel], iu[0][sel]] = v
    return D, k


def noisy(n, s, seed):
    rng = np.random.default_rng(seed)
    D = euclid(n, rng)
    E = np.exp(rng.normal(0, s, (n, n)))
    E = np.triu(E, 1)
    return D * (E + E.T + np.eye(n))


def general_milp(D, objective, time_limit):
    """Big-M integer program with every triangle row (the general-solver baseline)."""
    import scipy.sparse as sp
    from scipy.optimize import LinearConstraint, milp

    n = len(D)
    iu = np.triu_indices(n, 1)
    m = len(iu[0])
    pos = -np.ones((n, n), dtype=np.int64)
    pos[iu] = np.arange(m)
    pos[(iu[1], iu[0])] = np.arange(m)
    d = D[iu]
    M = (n - 1) * float(d.max())
    rows, cols, vals = [], [], []
    r = 0
    for i in range(n):
        for j in range(i + 1, n):
            for k in range(j + 1, n):
                a, b, c = pos[i, j], pos[i, k], pos[j, k]
                for x, y, z in ((a, b, c), (b, a, c), (c, a, b)):
                    rows += [r, r, r]
                    cols += [x, y, z]
                    vals += [1.0, -1.0, -1.0]
                    r += 1
    T = sp.csr_matrix((vals, (rows, cols)), shape=(r, 2 * m))
    # |x - d| <= M z  ->  x - M z <= d  and  -x - M z <= -d
    I = sp.identity(m, format="csr")
    B1 = sp.hstack([I, -M * I])
    B2 = sp.hstack([-I, -M * I])
    A = sp.vstack([T, B1, B2]).tocsr()
    ub = np.concatenate([np.zeros(r), d, -d])
    lo_x = d if objective == "grow" else np.zeros(m)
    bounds_lo = np.concatenate([lo_x, np.zeros(m)])
    bounds_hi = np.concatenate([np.full(m, M), np.ones(m)])
    from scipy.optimize import Bounds

    t = time.perf_counter()
    from seqdist.repair.kept_sets import quiet_stdout

    with quiet_stdout():
        res = milp(np.concatenate([np.zeros(m), np.ones(m)]), constraints=LinearConstraint(A, -np.inf, ub),
                   integrality=np.concatenate([np.zeros(m), np.ones(m)]), bounds=Bounds(bounds_lo, bounds_hi),
                   options={"time_limit": time_limit, "disp": False})
    dt = time.perf_counter() - t
    val = float(res.fun) if res.x is not None else float("nan")
    bound = getattr(res, "mip_dual_bound", float("nan"))
    return val, bound, res.status == 0, dt


def fmt(v, nd=1):
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, (int, np.integer)):
        return str(v)
    if v != v:
        return "-"
    return f"{v:.{nd}f}"


def table(head, rows):
    w = [max(len(str(h)), *(len(str(r[q])) for r in rows)) if rows else len(str(h)) for q, h in enumerate(head)]
    print("  ".join(str(h).rjust(w[q]) for q, h in enumerate(head)))
    for r in rows:
        print("  ".join(str(x).rjust(w[q]) for q, x in enumerate(r)))
    print()


def bench_planted(sizes, seeds, general_max_n, general_limit):
    print("## Planted corruption (Euclidean points; k = share of entries moved)\n")
    head = ["n", "k%", "moved", "seed", "objective", "planted", "changed", "lower bnd", "obj/LB", "optimal",
            "seconds", "general", "gen bnd", "gen opt", "gen s"]
    rows = []
    worst = {"fewest_ratio": 1.0, "grow_ratio": 1.0, "fewest_over_k": 0, "grow_over_k": 0,
             "fewest_not_optimal_le150": 0}
    for n in sizes:
        for frac in (0.01, 0.05):
            for mode in ("up", "down", "both"):
                for seed in seeds:
                    D, k = planted(n, frac, mode, seed)
                    objs = ["shrink", "fewest"] + (["grow"] if mode == "down" else [])
                    for obj in objs:
                        t = time.perf_counter()
                        r = repair(D, obj, progress=False)
                        dt = time.perf_counter() - t
                        rep = r.report.to_dict()
                        lb = rep["lower_bound"]
                        ratio = rep["objective_value"] / lb if lb > 0 else 1.0
                        gen = ("-", "-", "-", "-")
                        if obj in ("fewest", "grow") and n <= general_max_n and seed == seeds[0]:
                            gv, gb, go, gs = general_milp(D, obj, general_limit)
                            gen = (fmt(gv, 0), fmt(gb, 0), fmt(go), fmt(gs, 1))
                        if obj in ("fewest", "grow"):
                            worst[f"{obj}_ratio"] = max(worst[f"{obj}_ratio"], ratio)
                            if rep["changed_entries"] > k:
                                worst[f"{obj}_over_k"] += 1
                            if obj == "fewest" and n <= 150 and not rep["optimal"]:
                                worst["fewest_not_optimal_le150"] += 1
                        shown_lb = fmt(lb, 0) if obj != "shrink" else "(L1)"
                        rows.append([n, fmt(100 * frac, 0), mode, seed, obj, k, rep["changed_entries"], shown_lb,
                                     fmt(ratio, 3) if obj != "shrink" else "-", fmt(rep["optimal"]), fmt(dt, 2),
                                     *gen])
                        sys.stdout.flush()
    table(head, rows)
    print(f"worst objective / lower bound: fewest {worst['fewest_ratio']:.4f}, grow {worst['grow_ratio']:.4f}")
    print(f"runs changing more than the planted k: fewest {worst['fewest_over_k']}, grow {worst['grow_over_k']}")
    print(f"fewest runs with n <= 150 not proven optimal: {worst['fewest_not_optimal_le150']}\n")


def bench_noise(sizes, sigmas, seeds, exact_limit):
    print("## Dense multiplicative noise (every entry times exp(N(0, s^2)))\n")
    head = ["n", "s", "seed", "objective", "violated", "heuristic", "exact", "exact LB", "proven", "heur/opt",
            "heur s", "exact s"]
    rows = []
    worst = 1.0
    for n in sizes:
        for s in sigmas:
            for seed in seeds:
                D = noisy(n, s, seed)
                for obj in ("fewest", "grow"):
                    t = time.perf_counter()
                    h = repair(D, obj, method="heuristic", progress=False).report.to_dict()
                    th = time.perf_counter() - t
                    t = time.perf_counter()
                    e = repair(D, obj, method="exact", time_limit=exact_limit, progress=False).report.to_dict()
                    te = time.perf_counter() - t
                    ratio = h["objective_value"] / e["objective_value"] if e["objective_value"] else 1.0
                    if e["optimal"]:
                        worst = max(worst, ratio)
                    rows.append([n, s, seed, obj, h["violated_before"], fmt(h["objective_value"], 0),
                                 fmt(e["objective_value"], 0), fmt(e["lower_bound"], 0), fmt(e["optimal"]),
                                 fmt(ratio, 3) if e["optimal"] else f"<= {ratio:.3f}", fmt(th, 2), fmt(te, 1)])
                    sys.stdout.flush()
    table(head, rows)
    print(f"worst heuristic / proven optimum: {worst:.4f}\n")


def bench_shrink_kernel(sizes):
    from scipy.sparse.csgraph import floyd_warshall

    from seqdist.kernels.shortest_paths import apsp

    print("## Shrink kernel: seqdist.kernels.shortest_paths.apsp against scipy floyd_warshall (same matrix, float64)\n")
    rows = []
    rng = np.random.default_rng(0)
    apsp(np.ones((4, 4)))  # load the compiled kernel
    for n in sizes:
        D = noisy(n, 0.3, 1)
        D = np.ascontiguousarray(D)
        t = time.perf_counter()
        A = apsp(D)
        ta = time.perf_counter() - t
        t = time.perf_counter()
        B = floyd_warshall(D, directed=False)
        tb = time.perf_counter() - t
        rows.append([n, fmt(ta, 2), fmt(tb, 2), fmt(ta / tb, 3), f"{np.abs(A - B).max():.1e}"])
        sys.stdout.flush()
    table(["n", "seqdist s", "scipy s", "ratio", "max |diff|"], rows)
    del rng


REFERENCE_SCRIPT = r'''
import sys, numpy as np, pandas as pd
from scipy.sparse.csgraph import floyd_warshall
f = pd.read_csv(sys.argv[1], sep="\t", index_col=0)
D = np.ascontiguousarray(f.to_numpy(dtype=np.float64))
X = floyd_warshall(D, directed=False)
pd.DataFrame(X, index=f.index, columns=f.columns).to_csv(sys.argv[2], sep="\t", float_format="%.17g")
'''


def bench_command(sizes):
    from seqdist.core.matrix import DistanceMatrix
    from seqdist.io.matrices import write_matrix

    print("## Whole command: 'seqdist repair --objective shrink' against read + scipy floyd_warshall + write\n")
    rows = []
    with tempfile.TemporaryDirectory() as t:
        ref = os.path.join(t, "ref.py")
        with open(ref, "w") as f:
            f.write(REFERENCE_SCRIPT)
        for n in sizes:
            D = noisy(n, 0.3, 2)
            src = os.path.join(t, f"m{n}.tsv")
            write_matrix(src, DistanceMatrix.from_array(D, [f"s{i}" for i in range(n)]))
            t0 = time.perf_counter()
            p = subprocess.run([sys.executable, "-m", "seqdist.cli", "repair", src, "-o", os.path.join(t, "o.tsv"),
                                "--objective", "shrink", "--quiet"], cwd=ROOT, capture_output=True, text=True)
            ts = time.perf_counter() - t0
            assert p.returncode == 0, p.stderr
            t0 = time.perf_counter()
            p = subprocess.run([sys.executable, ref, src, os.path.join(t, "r.tsv")], capture_output=True, text=True)
            tr = time.perf_counter() - t0
            assert p.returncode == 0, p.stderr
            rows.append([n, fmt(ts, 2), fmt(tr, 2), fmt(ts / tr, 3)])
            sys.stdout.flush()
    table(["n", "seqdist repair s", "script s", "ratio"], rows)


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="small sizes and one seed (development)")
    ap.add_argument("--part", choices=("all", "planted", "noise", "kernel", "command"), default="all")
    a = ap.parse_args()
    try:
        from threadpoolctl import threadpool_info

        blas = [f"{i.get('internal_api')} {i.get('architecture')} threads={i.get('num_threads')}"
                for i in threadpool_info()]
    except Exception:  # pragma: no cover
        blas = ["unknown"]
    print(f"# bench_repair {'(quick)' if a.quick else ''}; BLAS: {'; '.join(blas)}; "
          f"load average {os.getloadavg()[0]:.1f}\n")
    if a.quick:
        parts = dict(planted=([50, 100], [0], 50, 20.0), noise=([12, 18], [0.3], [0], 20.0),
                     kernel=[600, 1000], command=[600])
    else:
        parts = dict(planted=([50, 100, 200, 500], [0, 1, 2], 50, 60.0),
                     noise=([15, 20, 25], [0.1, 0.3], [0, 1], 120.0),
                     kernel=[1500, 3000], command=[1500, 3000])
    if a.part in ("all", "planted"):
        bench_planted(*parts["planted"])
    if a.part in ("all", "noise"):
        bench_noise(*parts["noise"])
    if a.part in ("all", "kernel"):
        bench_shrink_kernel(parts["kernel"])
    if a.part in ("all", "command"):
        bench_command(parts["command"])


if __name__ == "__main__":
    main()
