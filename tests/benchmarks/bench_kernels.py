#!/usr/bin/env python
"""Each compiled kernel against an earlier version of the package, in one run.

For every case below, the same input is timed with this checkout's package and
with the package at an earlier commit (``--old``, default: the last commit
whose kernels were numba), each in its own child process, the two interleaved
repeat by repeat so that a noisy neighbour slows both alike. Each process first
calls the function on a small input (for numba, that loads or compiles the
kernel) and then times ``--reps`` calls on the real input; the table gives the
minimum of each and the ratio new / old (below 1: the new kernel is faster).

Cases, at the sizes of the other benchmarks:

* ``distances``: K80 distances of a simulated DNA alignment, L = 1000
  (``seqdist.models.distances.pairwise_distances``);
* ``shrink``: the shortest-path closure (``seqdist.repair.repair(..., "shrink")``);
* ``audit``: the triangle audit without the bounds (``seqdist.audit.audit``);
* ``nj``, ``bionj``, ``upgma``: ``seqdist.trees.build.build_tree``;
* ``l2``: the least-squares repair (``seqdist.repair.repair(..., "l2")``);
* ``triangles``: ``seqdist.kernels.triangles.count_violations``.

Usage::

    python tests/benchmarks/bench_kernels.py [--old REV] [--quick] [--cases nj,shrink] [--reps 3]

The old commit is unpacked with ``git archive`` into a temporary folder and
imported from there; it needs its own dependencies (numba) in this
environment.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

#: The last commit whose kernels were all numba.
OLD_DEFAULT = "b4e0b6b"

FULL = {
    "distances": [1000, 2000, 4000],
    "shrink": [1500, 2000, 4000],
    "audit": [2000, 4000],
    "nj": [2000, 5000],
    "bionj": [2000, 5000],
    "upgma": [2000, 5000],
    "l2": [500],
    "triangles": [2000, 4000],
}
QUICK = {"distances": [1000], "shrink": [1500], "audit": [2000], "nj": [2000], "bionj": [2000],
         "upgma": [2000], "l2": [500], "triangles": [2000]}

CHILD = r'''
import json, sys, time
root, case, n, reps = sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4])
sys.path.insert(0, root)
import numpy as np
import seqdist
assert seqdist.__file__.startswith(root), seqdist.__file__


def metric(n, seed=0, noise=0.02):
    rng = np.random.default_rng(seed)
    x = rng.random((n, 5))
    d = np.sqrt(((x[:, None] - x[None]) ** 2).sum(-1))
    d = np.abs(d + rng.normal(0, noise, d.shape))
    d = (d + d.T) / 2
    np.fill_diagonal(d, 0)
    return d


def labelled(d):
    from seqdist.core.matrix import DistanceMatrix
    return DistanceMatrix.from_array(d, [f"t{i}" for i in range(d.shape[0])])


def dna(n, length=1000, seed=0):
    from seqdist.io.alignment import read_alignment
    import os, tempfile
    rng = np.random.default_rng(seed)
    anc = rng.integers(0, 4, length)
    rows = []
    for i in range(n):
        s = anc.copy()
        flip = rng.random(length) < 0.05 + 0.2 * (i % 7) / 7
        s[flip] = rng.integers(0, 4, int(flip.sum()))
        rows.append("".join("ACGT"[c] for c in s))
    fd, path = tempfile.mkstemp(suffix=".fasta")
    with os.fdopen(fd, "w") as fh:
        for i, r in enumerate(rows):
            fh.write(f">s{i}\n{r}\n")
    aln = read_alignment(path)
    os.unlink(path)
    return aln


def prepare(case, n):
    if case == "distances":
        from seqdist.models.distances import pairwise_distances
        aln = dna(n)
        return lambda: pairwise_distances(aln, "k80")
    if case in ("shrink", "l2"):
        from seqdist.repair import repair
        dm = labelled(metric(n))
        return lambda: repair(dm, case, progress=False)
    if case == "audit":
        from seqdist.audit import audit
        dm = labelled(metric(n))
        return lambda: audit(dm, bounds=False, suspects=False)
    if case in ("nj", "bionj", "upgma"):
        from seqdist.trees.build import build_tree
        dm = labelled(metric(n))
        return lambda: build_tree(dm, case)
    if case == "triangles":
        from seqdist.kernels.triangles import count_violations
        d = metric(n)
        return lambda: count_violations(d)
    raise SystemExit(f"unknown case {case}")


import warnings
warnings.simplefilter("ignore")
prepare(case, 40)()  # load or compile the kernels
f = prepare(case, n)
times = []
for _ in range(reps):
    t = time.perf_counter()
    f()
    times.append(time.perf_counter() - t)
print(json.dumps({"min": min(times)}))
'''


def unpack(rev: str) -> str:
    dest = tempfile.mkdtemp(prefix="seqdist-old-")
    archive = subprocess.run(["git", "-C", ROOT, "archive", rev, "seqdist"], check=True, capture_output=True).stdout
    subprocess.run(["tar", "-x", "-C", dest], input=archive, check=True)
    return dest


def child(root: str, case: str, n: int, reps: int) -> float:
    out = subprocess.run([sys.executable, "-c", CHILD, root, case, str(n), str(reps)], capture_output=True,
                         text=True, env={**os.environ, "PYTHONWARNINGS": "ignore"})
    if out.returncode != 0:
        raise SystemExit(f"{case} n={n} in {root} failed:\n{out.stderr[-2000:]}")
    return json.loads(out.stdout.strip().splitlines()[-1])["min"]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--old", default=OLD_DEFAULT, help=f"earlier commit to compare with (default {OLD_DEFAULT})")
    ap.add_argument("--quick", action="store_true", help="one small size per case")
    ap.add_argument("--cases", default=None, help="comma-separated cases (default: all)")
    ap.add_argument("--reps", type=int, default=3, help="timed calls per process (default 3)")
    ap.add_argument("--rounds", type=int, default=2, help="processes per side, interleaved (default 2)")
    ap.add_argument("--json", default=None, help="also write the rows to this JSON file")
    a = ap.parse_args()
    plan = QUICK if a.quick else FULL
    cases = a.cases.split(",") if a.cases else list(plan)
    old_root = unpack(a.old)
    print(f"old: {a.old} (unpacked in {old_root}); new: {ROOT}; {a.rounds} x {a.reps} calls each, minimum kept")
    print(f"{'case':<10} {'n':>6} {'old s':>9} {'new s':>9} {'new/old':>8}")
    rows = []
    for case in cases:
        for n in plan[case]:
            old, new = [], []
            for _ in range(a.rounds):  # interleaved: a busy neighbour slows both sides alike
                old.append(child(old_root, case, n, a.reps))
                new.append(child(ROOT, case, n, a.reps))
            o, w = min(old), min(new)
            rows.append({"case": case, "n": n, "old": o, "new": w, "ratio": w / o})
            print(f"{case:<10} {n:>6} {o:>9.3f} {w:>9.3f} {w / o:>8.2f}", flush=True)
    if a.json:
        with open(a.json, "w") as fh:
            json.dump(rows, fh, indent=1)


if __name__ == "__main__":
    main()
