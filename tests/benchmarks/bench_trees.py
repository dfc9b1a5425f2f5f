"""Tree builders: timings against named references, measured in the same run.

    python tests/benchmarks/bench_trees.py          # full table (several minutes)
    python tests/benchmarks/bench_trees.py --quick  # small sizes, for development

References
  * Biopython's DistanceTreeConstructor().nj (pure Python) at n = 200 and 400;
  * a plain vectorised numpy neighbor joining (below; the yardstick of
    /work/shared/PERFORMANCE.md: 0.03 / 5.5 / 98 s at n = 400 / 2000 / 5000);
  * scipy's linkage(method='average') beside our UPGMA (Biopython's upgma is
    WPGMA, a different method, so it is not a reference for UPGMA).
Inputs: Euclidean distances between random points in 5 dimensions (a
metric, not tree-like; seed 1). Each of our timings is the median of a few
runs after one warm-up call (numba compiles or loads its cache); machine
shared with other jobs, so read the ratios, which are measured side by side.
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__)))))

from seqdist import DistanceMatrix  # noqa: E402
from seqdist.trees import build_tree, robinson_foulds  # noqa: E402


def points(n, seed=1):
    X = np.random.default_rng(seed).uniform(0, 1, (n, 5))
    return np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1))


def numpy_nj(D):
    """Plain vectorised numpy neighbor joining (reference; returns the join list).

    Full Q matrix per step, argmin, in-place update with the last active
    slot moved into the freed one: O(n^3) time, O(n^2) memory.
    """
    D = np.array(D, dtype=np.float64)
    n = D.shape[0]
    m = n
    R = D.sum(axis=1)
    ids = list(range(n))
    joins = []
    nxt = n
    while m > 3:
        A = D[:m, :m]
        Q = (m - 2) * A - R[:m, None] - R[None, :m]
        np.fill_diagonal(Q, np.inf)
        i, j = divmod(int(np.argmin(Q)), m)
        if i > j:
            i, j = j, i
        dij = A[i, j]
        li = 0.5 * dij + (R[i] - R[j]) / (2 * (m - 2))
        new = 0.5 * (A[i] + A[j] - dij)
        R[:m] += new - A[i] - A[j]
        new[i] = new[j] = 0.0
        D[i, :m] = new
        D[:m, i] = new
        R[i] = new.sum()
        joins.append((ids[i], ids[j], li, dij - li))
        ids[i] = nxt
        nxt += 1
        last = m - 1
        if j != last:
            D[j, :m] = D[last, :m]
            D[:m, j] = D[:m, last]
            D[j, j] = 0.0
            R[j] = R[last]
            ids[j] = ids[last]
        m -= 1
    return joins


def biopython_nj(D, labels):
    from Bio.Phylo.TreeConstruction import DistanceMatrix as BioDM
    from Bio.Phylo.TreeConstruction import DistanceTreeConstructor

    lower = [[float(D[i, j]) for j in range(i + 1)] for i in range(len(labels))]
    return DistanceTreeConstructor().nj(BioDM(list(labels), lower))


def timed(fn, repeat=1):
    out = []
    result = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        result = fn()
        out.append(time.perf_counter() - t0)
    return statistics.median(out), result


def blas_info():
    try:
        from threadpoolctl import threadpool_info

        return "; ".join(f"{x.get('internal_api')} {x.get('version')} ({x.get('architecture')}, "
                         f"{x.get('num_threads')} threads)" for x in threadpool_info())
    except Exception as exc:  # threadpoolctl missing
        return f"unknown ({exc})"


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="small sizes only")
    args = ap.parse_args()
    from seqdist.trees import Tree

    print(f"python {platform.python_version()}, numpy {np.__version__}, cores {os.cpu_count()}, "
          f"load {os.getloadavg()[0]:.1f}; BLAS: {blas_info()}")
    for k in ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE", "NUMBA_NUM_THREADS"):
        if os.environ.get(k):
            print(f"  {k}={os.environ[k]}")
    warm = DistanceMatrix.from_array(points(10), None)
    for m in ("nj", "bionj", "upgma"):
        build_tree(warm, m)

    nj_sizes = [200, 400] if args.quick else [200, 400, 2000, 5000]
    bio_sizes = [200] if args.quick else [200, 400]
    numpy_sizes = [200, 400] if args.quick else [200, 400, 2000]
    print("\nneighbor joining / BIONJ (seconds; ratio = reference time / ours)")
    print(f"{'n':>6} {'ours NJ':>9} {'ours BIONJ':>11} {'numpy NJ':>9} {'x numpy':>8} {'Biopython':>10} "
          f"{'x Biopython':>12}  check")
    for n in nj_sizes:
        D = points(n)
        dm = DistanceMatrix.from_array(D)
        rep = 3 if n <= 400 else 1
        t_nj, tree = timed(lambda: build_tree(dm, "nj"), rep)
        t_bi, _ = timed(lambda: build_tree(dm, "bionj"), rep)
        row = f"{n:>6} {t_nj:>9.3f} {t_bi:>11.3f}"
        check = ""
        if n in numpy_sizes:
            t_np, joins = timed(lambda: numpy_nj(D), 1)
            row += f" {t_np:>9.3f} {t_np / t_nj:>8.1f}"
        else:
            row += f" {'-':>9} {'-':>8}"
        if n in bio_sizes:
            t_bio, bt = timed(lambda: biopython_nj(D, dm.labels), 1)
            rf = robinson_foulds(tree, Tree.from_phylo(bt))
            row += f" {t_bio:>10.2f} {t_bio / t_nj:>12.0f}"
            check = f"RF to Biopython {rf}"
        else:
            row += f" {'-':>10} {'-':>12}"
        print(row + "  " + check, flush=True)

    print("\nUPGMA (seconds; ratio = scipy time / ours)")
    print(f"{'n':>6} {'ours':>9} {'scipy average':>14} {'ratio':>7}  check")
    from scipy.cluster.hierarchy import cophenet, linkage
    from scipy.spatial.distance import squareform

    for n in ([200, 400] if args.quick else [400, 2000, 5000]):
        D = points(n)
        dm = DistanceMatrix.from_array(D)
        cond = squareform(D, checks=False)
        t_up, t = timed(lambda: build_tree(dm, "upgma"), 3)
        t_sc, Z = timed(lambda: linkage(cond, method="average"), 3)
        same = np.allclose(squareform(cophenet(Z)), t.path_lengths(dm.labels), rtol=1e-9) if n <= 2000 else None
        print(f"{n:>6} {t_up:>9.3f} {t_sc:>14.3f} {t_sc / t_up:>7.2f}  "
              + ("" if same is None else f"cophenetic equal: {same}"), flush=True)


if __name__ == "__main__":
    main()
