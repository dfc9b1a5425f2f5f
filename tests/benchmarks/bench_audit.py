#!/usr/bin/env python
"""Scaling of ``seqdist audit`` against scipy's Floyd-Warshall on the same matrix.

For each n: a metric-ish matrix (Euclidean distances between random points in
five dimensions, then 1% of the entries multiplied by a factor drawn from
[0.3, 2], which breaks many triangles) is written to a tsv file. Measured in
the same run, on the same matrix:

* ``count``: :func:`seqdist.kernels.triangles.count_violations` (the exact violation count);
* ``audit``: the whole command ``seqdist audit FILE --json OUT`` as a user
  runs it (a new process: start-up, reading the file, the default report);
* ``fw``: ``scipy.sparse.csgraph.floyd_warshall`` (dense, C-contiguous input),
  the yardstick named in the issue.

Targets (issue 5): count <= 0.25 x fw at n = 2000; audit <= 1 x fw; n = 4000
finishes in under 2 minutes. The machine may be shared: the ratios are the
figures to read, and the load average is printed with the table.

Run: ``python tests/benchmarks/bench_audit.py [n ...]`` (default 500 1000 2000 4000).
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(HERE))
sys.path.insert(0, ROOT)


def matrix(n: int, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 10, (n, 5))
    D = np.sqrt(((X[:, None, :] - X[None, :, :]) ** 2).sum(-1))
    iu = np.triu_indices(n, 1)
    pick = rng.random(len(iu[0])) < 0.01
    f = rng.uniform(0.3, 2.0, int(pick.sum()))
    D[iu[0][pick], iu[1][pick]] *= f
    D[iu[1][pick], iu[0][pick]] *= f
    return D


def write_tsv(path, D):
    labels = [f"s{i}" for i in range(len(D))]
    with open(path, "w") as fh:
        fh.write("\t" + "\t".join(labels) + "\n")
        for lab, row in zip(labels, D):
            fh.write(lab + "\t" + "\t".join(repr(float(v)) for v in row) + "\n")


def main(ns):
    from scipy.sparse.csgraph import floyd_warshall

    from seqdist.kernels.triangles import count_violations

    count_violations(matrix(10))  # load the compiled kernels once
    rows = []
    tmp = tempfile.mkdtemp(prefix="bench-audit-")
    for n in ns:
        D = matrix(n)
        path = os.path.join(tmp, f"m{n}.tsv")
        write_tsv(path, D)
        t = time.perf_counter()
        v, _w = count_violations(D)
        t_count = time.perf_counter() - t
        t = time.perf_counter()
        p = subprocess.run([sys.executable, "-m", "seqdist.cli", "audit", path, "--json",
                            os.path.join(tmp, f"a{n}.json"), "--quiet"], capture_output=True, text=True, cwd=ROOT)
        t_audit = time.perf_counter() - t
        if p.returncode != 0:
            print(p.stderr, file=sys.stderr)
            raise SystemExit(f"audit failed at n = {n}")
        t = time.perf_counter()
        floyd_warshall(np.ascontiguousarray(D), directed=False)
        t_fw = time.perf_counter() - t
        rows.append((n, v, t_count, t_audit, t_fw))
        print(f"# n={n} done (load {os.getloadavg()[0]:.2f})", file=sys.stderr, flush=True)
    try:
        from threadpoolctl import threadpool_info

        blas = ", ".join(f"{d.get('internal_api')} {d.get('architecture')}" for d in threadpool_info())
    except Exception:  # pragma: no cover - optional
        blas = "unknown"
    threads = os.environ.get("OMP_NUM_THREADS", os.cpu_count())
    print(f"OpenMP threads: {threads}; BLAS: {blas}; load average now: "
          f"{' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    print()
    print("| n | violated triangles | count s | audit command s | scipy FW s | count/FW | audit/FW | targets |")
    print("| ---: | ---: | ---: | ---: | ---: | ---: | ---: | --- |")
    for n, v, tc, ta, tf in rows:
        notes = []
        if n == 2000:
            notes.append("count<=0.25 FW: " + ("met" if tc <= 0.25 * tf else "NOT met"))
        notes.append("audit<=FW: " + ("met" if ta <= tf else "NOT met"))
        if n == 4000:
            notes.append("<2 min: " + ("met" if ta < 120 else "NOT met"))
        print(f"| {n} | {v} | {tc:.2f} | {ta:.2f} | {tf:.2f} | {tc / tf:.3f} | {ta / tf:.3f} | {'; '.join(notes)} |")


if __name__ == "__main__":
    main([int(x) for x in sys.argv[1:]] or [500, 1000, 2000, 4000])
