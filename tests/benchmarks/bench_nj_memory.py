#!/usr/bin/env python
"""Neighbor joining and BIONJ on large matrices: wall time and peak memory of the join.

For each size n a child process writes a noisy tree-like matrix (``tree_matrix`` of
bench_scale.py, its values rounded to float32 so that both inputs below hold the same
numbers) in the binary format twice: as float64 (``npz``) and as float32 (``npz32``). Then each
step runs as its own process, and the table gives its wall time, its peak resident
memory (``ru_maxrss`` from ``os.wait4``; the parent never holds a matrix: Linux counts
a parent's peak into a forked child's), that peak over the size of the float64 matrix
(8 n^2 bytes), and the load average when the step started (the machine is shared):

* ``read``: reading the matrix alone (what every command pays first; a large npz is
  memory-mapped, its pages counted as they are touched);
* ``nj`` / ``bionj``: the read, then ``neighbor_joining`` (sorted-row search), Newick
  text out; the float32 matrix must give the float64 one's tree (same values, float64
  arithmetic in the join): the script checks it;
* with ``--cli``: the whole ``seqdist tree`` command, which also computes the cophenetic
  correlation of the tree for its summary;
* with ``--before DIR``: each join also run from another copy of the package (``DIR``
  holds its ``seqdist`` folder, built), interleaved, so old and new meet the same load;
  the trees must agree.

Usage::

    python tests/benchmarks/bench_nj_memory.py [--sizes 8000,20000] [--methods nj,bionj] [--cli]
        [--before DIR] [--seed 1]
"""

from __future__ import annotations

import argparse
import hashlib
import os
import subprocess
import sys
import tempfile
import time

NEUTRAL = tempfile.mkdtemp(prefix="seqdist-njmem-cwd-")
HERE = os.path.dirname(os.path.abspath(__file__))

MAKE = r"""
import sys
import numpy as np
sys.path.insert(0, sys.argv[1])
from bench_scale import tree_matrix
from seqdist.core.matrix import DistanceMatrix
from seqdist.io.matrices import write_matrix
n, seed, npz, npz32 = int(sys.argv[2]), int(sys.argv[3]), sys.argv[4], sys.argv[5]
labels = [f"s{i}" for i in range(n)]
D = tree_matrix(n, seed).astype(np.float32)
write_matrix(npz32, DistanceMatrix.from_array(D, labels, copy=False, dtype=np.float32))
D = D.astype(np.float64)
write_matrix(npz, DistanceMatrix.from_array(D, labels, copy=False))
"""

READ = "import sys; from seqdist.io.matrices import read_matrix; read_matrix(sys.argv[1])"

JOIN = r"""
import sys
from seqdist.io.matrices import read_matrix
from seqdist.trees.build import neighbor_joining
path, method, out = sys.argv[1], sys.argv[2], sys.argv[3]
t = neighbor_joining(read_matrix(path), bionj=method == "bionj")
open(out, "w").write(t.to_newick())
"""


def run(cmd: list[str], root: str | None = None) -> tuple[float, float, float]:
    """Wall seconds, peak resident memory (GB) and the load average at the start of one child
    (with ``root`` first on its module path: another copy of the package)."""
    env = dict(os.environ)
    if root:
        env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    load = os.getloadavg()[0]
    t = time.perf_counter()
    p = subprocess.Popen(cmd, cwd=NEUTRAL, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env)
    _, status, usage = os.wait4(p.pid, 0)
    took = time.perf_counter() - t
    err = p.stderr.read().decode()
    p.stderr.close()
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"failed: {' '.join(cmd)}\n{err[-2000:]}")
    return took, usage.ru_maxrss / 1e6, load  # ru_maxrss is in kB on Linux


def digest(path: str) -> str:
    with open(path, "rb") as f:
        return hashlib.sha256(f.read()).hexdigest()[:12]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", default="8000,20000")
    ap.add_argument("--methods", default="nj,bionj")
    ap.add_argument("--inputs", default="npz,npz32", help="npz (float64), npz32 (float32)")
    ap.add_argument("--cli", action="store_true", help="also the whole seqdist tree command on each input")
    ap.add_argument("--before", default=None, metavar="DIR",
                    help="also run each join from the package copy in DIR (its seqdist folder, built)")
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args()
    py = sys.executable
    print(f"{os.cpu_count()} cores; peak = ru_maxrss of the step's process; x = peak / (8 n^2 bytes)")
    print("| n | input | step | seconds | peak GB | x float64 matrix | load | note |")
    print("| --- | --- | --- | --- | --- | --- | --- | --- |")
    with tempfile.TemporaryDirectory() as tmp:
        for n in [int(x) for x in args.sizes.split(",")]:
            full = 8.0 * n * n / 1e9
            paths = {"npz": os.path.join(tmp, f"m{n}.npz"), "npz32": os.path.join(tmp, f"m{n}_32.npz")}
            s, gb, load = run([py, "-c", MAKE, HERE, str(n), str(args.seed), paths["npz"], paths["npz32"]])
            print(f"| {n} | - | make the matrix | {s:.1f} | {gb:.2f} | - | {load:.1f} | float64 matrix "
                  f"{full:.2f} GB, npz {os.path.getsize(paths['npz']) / 1e9:.2f} GB |", flush=True)
            for kind in args.inputs.split(","):
                s, gb, load = run([py, "-c", READ, paths[kind]])
                print(f"| {n} | {kind} | read only | {s:.1f} | {gb:.2f} | {gb / full:.2f} | {load:.1f} | |",
                      flush=True)
            for method in args.methods.split(","):
                trees = {}
                for kind in args.inputs.split(","):
                    for version in ["this"] + (["before"] if args.before else []):
                        out = os.path.join(tmp, f"{method}_{kind}_{version}.nwk")
                        s, gb, load = run([py, "-c", JOIN, paths[kind], method, out],
                                          args.before if version == "before" else None)
                        trees[kind, version] = digest(out)
                        note = f"tree {trees[kind, version]}"
                        if (kind, version) != ("npz", "this") and ("npz", "this") in trees:
                            note += ", same as npz: " + ("yes" if trees[kind, version] == trees["npz", "this"]
                                                         else "NO")
                        step = method + (" (before)" if version == "before" else "")
                        print(f"| {n} | {kind} | {step} | {s:.1f} | {gb:.2f} | {gb / full:.2f} | {load:.1f} | "
                              f"{note} |", flush=True)
                        os.remove(out)
                for kind in args.inputs.split(",") if args.cli else []:
                    out = os.path.join(tmp, f"{method}_cli.nwk")
                    s, gb, load = run([py, "-m", "seqdist", "tree", paths[kind], "-o", out, "--method", method,
                                       "--quiet"])
                    print(f"| {n} | {kind} | `seqdist tree --method {method}` | {s:.1f} | {gb:.2f} | "
                          f"{gb / full:.2f} | {load:.1f} | tree {digest(out)} |", flush=True)
                    os.remove(out)
                if len(set(trees.values())) > 1:
                    raise SystemExit("the trees differ (float32 input or the other version)")
            for f in paths.values():
                os.remove(f)


if __name__ == "__main__":
    main()
