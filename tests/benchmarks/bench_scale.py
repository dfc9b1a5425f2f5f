#!/usr/bin/env python
"""Large matrices as a user meets them: whole commands, time and peak memory, in one run.

For each size n, a noisy tree-like matrix (distances along a random tree of
n leaves plus multiplicative noise, so neighbor joining has real work to do)
is written once as ``.npz`` (the binary format) and, up to ``--text-max``, as
``.tsv``. Then each command runs as its own process, and the table gives the
wall time and the process's peak resident memory (``ru_maxrss`` from
``os.wait4``; the matrices are made in a child process so that this script
stays small: Linux counts a parent's peak into a forked child's), beside two references measured in the same run:

* reading the matrix alone (``python -c "read_matrix(...)"``), so the share
  of the command spent reading is visible;
* for the tree, the same join with the full scan (``search="full"``, every
  pair examined at every step): the ratio sorted / full is what the sorted-row
  search bound saves (Simonsen, Mailund & Pedersen 2008, "Rapid
  neighbour-joining", WABI 2008), and the two trees are compared (they must
  be identical: same topology, same lengths, bit for bit, as written).

Usage::

    python tests/benchmarks/bench_scale.py [--sizes 2000,5000,8000] [--methods nj,bionj]
        [--text-max 8000] [--full-max 8000] [--seed 1] [--dtype float64|float32]
    python tests/benchmarks/bench_scale.py --kernels --sizes 20000 --dtype float32 [--reference 2000]
        [--threads 0]

Targets (issue 19): NJ on 8,000 taxa from the binary format at most 45 s as a
whole process; 20,000 taxa under 5 minutes; the same tree as the plain join.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time

import numpy as np

NEUTRAL = tempfile.mkdtemp(prefix="seqdist-scale-cwd-")


def tree_matrix(n: int, seed: int) -> np.ndarray:
    """Path lengths on a random binary tree with n leaves (random joins, exponential branch
    lengths), times symmetric log-normal noise (sd 0.05), zero diagonal."""
    rng = np.random.default_rng(seed)
    # leaves' depths and the lowest common ancestors' depths via random sequential joins:
    # keep each cluster's members; joining two clusters at a new node gives every cross pair
    # the path through it.
    D = np.zeros((n, n))
    depth_to_top = np.zeros(n)  # each leaf's distance to the top of its current cluster
    clusters = [[i] for i in range(n)]
    while len(clusters) > 1:
        a, b = rng.choice(len(clusters), 2, replace=False)
        ca, cb = clusters[a], clusters[b]
        la, lb = rng.exponential(0.05, 2)
        ia, ib = np.array(ca), np.array(cb)
        depth_to_top[ia] += la
        depth_to_top[ib] += lb
        D[np.ix_(ia, ib)] = depth_to_top[ia][:, None] + depth_to_top[ib][None, :]
        D[np.ix_(ib, ia)] = D[np.ix_(ia, ib)].T
        clusters[a] = ca + cb
        clusters.pop(b)
    # symmetric noise sqrt(e^N(i,j) e^N(j,i)) = e^((N(i,j) + N(j,i)) / 2), a block of rows at a
    # time: one n x n array of draws beside D, not three (30,000 taxa: 14 GB instead of 29)
    N = rng.normal(0, 0.05, (n, n))
    step = max(1, (1 << 23) // n)
    for r0 in range(0, n, step):
        D[r0:r0 + step] *= np.exp(0.5 * (N[r0:r0 + step] + N[:, r0:r0 + step].T))
    del N
    np.fill_diagonal(D, 0)
    return D


MAKE = r"""
import sys
sys.path.insert(0, sys.argv[1])
from bench_scale import tree_matrix
from seqdist.core.matrix import DistanceMatrix
from seqdist.io.matrices import write_matrix
import numpy as np
n, seed, dtype = int(sys.argv[2]), int(sys.argv[3]), sys.argv[4]
D = tree_matrix(n, seed)
if dtype == "float32":
    D = D.astype(np.float32)  # the float64 one is freed here
dm = DistanceMatrix.from_array(D, [f"s{i}" for i in range(n)], copy=False, dtype=D.dtype)
del D
for path in sys.argv[5:]:
    write_matrix(path, dm)
"""


def write_inputs(n: int, seed: int, folder: str, text: bool, dtype: str = "float64") -> dict:
    # In a child process: Linux carries a parent's peak resident memory over fork and exec into
    # the child's ru_maxrss, so the parent stays small (numpy only) and never holds a matrix.
    paths = {"npz": os.path.join(folder, f"m{n}.npz")}
    if text:
        paths["tsv"] = os.path.join(folder, f"m{n}.tsv")
    subprocess.run([sys.executable, "-c", MAKE, os.path.dirname(os.path.abspath(__file__)), str(n), str(seed),
                    dtype, *paths.values()], check=True, cwd=NEUTRAL)
    return paths


def run(cmd: list[str]) -> tuple[float, float]:
    """Wall seconds and peak resident memory (GB) of one child process."""
    t = time.perf_counter()
    p = subprocess.Popen(cmd, cwd=NEUTRAL, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(p.pid, 0)
    took = time.perf_counter() - t
    err = p.stderr.read().decode()
    p.stderr.close()
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"failed: {' '.join(cmd)}\n{err[-2000:]}")
    return took, usage.ru_maxrss / 1e6  # ru_maxrss is in kB on Linux


READ = "import sys; from seqdist.io.matrices import read_matrix; read_matrix(sys.argv[1])"
FULL = ("import sys; from seqdist.io.matrices import read_matrix; from seqdist.trees.build import neighbor_joining;"
        "t = neighbor_joining(read_matrix(sys.argv[1]), bionj=sys.argv[2] == 'bionj', search='full');"
        "open(sys.argv[3], 'w').write(t.to_newick())")


KERNEL = r"""
import sys, time, json
import numpy as np
from seqdist.io.matrices import read_matrix
from seqdist.kernels.triangles import count_violations
from seqdist.repair import shrink
from seqdist.kernels import shortest_paths
dm = read_matrix(sys.argv[1])  # a large npz is memory-mapped; a float32 one stays float32
n = dm.n
D = dm.values
out = {"dtype": str(D.dtype)}
t = time.perf_counter(); v, m = count_violations(D); out["count"] = time.perf_counter() - t
out["violated"] = int(v)
threads = int(sys.argv[2])
if threads != 1:  # the closure's threads (apsp's default is one)
    _apsp = shortest_paths.apsp
    shortest_paths.apsp = lambda *a, **k: _apsp(*a, threads=threads, **k)
t = time.perf_counter(); X = shrink.closure(D); out["closure"] = time.perf_counter() - t
out["closure_dtype"] = str(X.dtype)
print(json.dumps(out))
"""


def kernels(sizes: list[int], seed: int, threads: int, dtype: str, reference: int) -> None:
    """The triangle count and the shrink closure at each size: time per triple (count: C(n,3)
    triangles; closure: n^3 relaxations) and peak memory of the process, for matrices stored in
    ``dtype`` (float32: the npz is read as float32, memory-mapped when large, and both kernels
    work on it without a float64 copy), after a float64 reference at ``reference`` taxa."""
    import json
    import math

    print(f"load average at start: {os.getloadavg()[0]:.1f}; closure threads {threads or 'all'}")
    print("| n | stored | matrix GB | count s | ns per triangle | closure s | ns per n^3 | peak GB | load |")
    print("| --- | --- | --- | --- | --- | --- | --- | --- | --- |")
    runs = ([(reference, "float64")] if reference else []) + [(n, dtype) for n in sizes]
    with tempfile.TemporaryDirectory() as tmp:
        for n, kind in runs:
            paths = write_inputs(n, seed, tmp, False, kind)
            p = subprocess.Popen([sys.executable, "-c", KERNEL, paths["npz"], str(threads)], cwd=NEUTRAL,
                                 stdout=subprocess.PIPE, stderr=subprocess.PIPE)
            _, status, usage = os.wait4(p.pid, 0)
            res = json.loads(p.stdout.read().decode())
            p.stdout.close()
            p.stderr.close()
            tri = math.comb(n, 3)
            if os.waitstatus_to_exitcode(status) != 0:
                raise SystemExit(f"the kernels failed at n = {n}")
            size = n * n * (4 if kind == "float32" else 8) / 1e9
            print(f"| {n} | {res['dtype']} | {size:.2f} | {res['count']:.1f} | {res['count'] / tri * 1e9:.3f} | "
                  f"{res['closure']:.1f} | {res['closure'] / n ** 3 * 1e9:.4f} | {usage.ru_maxrss / 1e6:.2f} | "
                  f"{os.getloadavg()[0]:.1f} |", flush=True)
            os.remove(paths["npz"])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", default="2000,5000,8000")
    ap.add_argument("--methods", default="nj,bionj")
    ap.add_argument("--text-max", type=int, default=8000, help="largest n also written and read as tsv")
    ap.add_argument("--full-max", type=int, default=8000, help="largest n also joined with the full scan")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--kernels", action="store_true",
                    help="instead: the audit's triangle count and the shrink closure, time per triple")
    ap.add_argument("--threads", type=int, default=0, help="closure threads with --kernels (0: all)")
    ap.add_argument("--dtype", choices=("float64", "float32"), default="float64",
                    help="precision the npz matrices are stored in")
    ap.add_argument("--reference", type=int, default=2000,
                    help="with --kernels: first a float64 run at this n, the yardstick of time per triple (0: none)")
    args = ap.parse_args()
    if args.kernels:
        kernels([int(x) for x in args.sizes.split(",")], args.seed, args.threads, args.dtype, args.reference)
        return
    py = sys.executable
    print(f"load average at start: {os.getloadavg()[0]:.1f}; {os.cpu_count()} cores")
    print("| n | input | step | seconds | peak GB | note |")
    print("| --- | --- | --- | --- | --- | --- |")
    with tempfile.TemporaryDirectory() as tmp:
        for n in [int(x) for x in args.sizes.split(",")]:
            t = time.perf_counter()
            paths = write_inputs(n, args.seed, tmp, n <= args.text_max, args.dtype)
            print(f"| {n} | - | make the matrix | {time.perf_counter() - t:.1f} | - | "
                  f"npz {os.path.getsize(paths['npz']) / 1e9:.2f} GB"
                  + (f", tsv {os.path.getsize(paths['tsv']) / 1e9:.2f} GB |" if "tsv" in paths else " |"))
            for kind, path in paths.items():
                s, gb = run([py, "-c", READ, path])
                print(f"| {n} | {kind} | read only | {s:.1f} | {gb:.2f} | |")
            for method in args.methods.split(","):
                outs = {}
                for kind, path in paths.items():
                    out = os.path.join(tmp, f"{method}_{n}_{kind}.nwk")
                    s, gb = run([py, "-m", "seqdist", "tree", path, "-o", out, "--method", method, "--quiet"])
                    outs[kind] = out
                    print(f"| {n} | {kind} | `seqdist tree --method {method}` | {s:.1f} | {gb:.2f} | |")
                if n <= args.full_max:
                    out = os.path.join(tmp, f"{method}_{n}_full.nwk")
                    s, gb = run([py, "-c", FULL, paths["npz"], method, out])
                    same = open(out).read() == open(outs["npz"]).read()
                    print(f"| {n} | npz | {method}, full scan (reference) | {s:.1f} | {gb:.2f} | "
                          f"same tree as the sorted search: {'yes' if same else 'NO'} |")
                    if not same:
                        raise SystemExit("the sorted search gave another tree")
                for kind in outs:
                    os.remove(outs[kind])
            for f in paths.values():
                os.remove(f)


if __name__ == "__main__":
    main()
