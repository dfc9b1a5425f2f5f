#!/usr/bin/env python
"""The shrink closure (blocked Floyd-Warshall, seqdist.kernels.shortest_paths.apsp) in float32 against float64.

For each size n a seeded dense random matrix (uniform in [0, 10), symmetric, so
every pivot can shorten paths and the kernel does its full n^3 / 2 relaxations)
is closed in float64 and in float32, serially, interleaved, the best of three
repeats; the table gives ns per n^3 and the ratio float32 / float64.

With ``--large N`` the same kind of matrix of N taxa is written in float32 to a
file in a temporary directory (row chunks, by a child process), then another
child process opens it as an ``np.memmap`` (``r+``) and closes it in place
(``apsp(mm, out=mm)``); the table gives its wall time, ns per n^3 and peak
resident memory (``ru_maxrss`` from ``os.wait4``: it counts the file's pages
the child touched, i.e. the matrix itself) and CPU seconds (wall time above
them is time other jobs held the core). The large run comes first, while
this script is still small (Linux counts the parent's peak into a forked
child's), and is compared with float64 at the smallest size of ``--sizes``.
The load average (``os.getloadavg()``) is printed beside the figures: the
machine is shared.

Usage::

    python tests/benchmarks/bench_closure_float32.py [--sizes 2000,4000] [--large N] [--threads 1]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time

import numpy as np

from seqdist.kernels._shortest_paths import has_avx512
from seqdist.kernels.shortest_paths import apsp


def random_matrix(n: int, seed: int, dtype) -> np.ndarray:
    rng = np.random.default_rng(seed)
    a = np.triu(rng.uniform(0, 10, (n, n)), 1)
    return (a + a.T).astype(dtype)


WRITE = r"""
import sys
import numpy as np
n, seed, path = int(sys.argv[1]), int(sys.argv[2]), sys.argv[3]
rng = np.random.default_rng(seed)
mm = np.memmap(path, dtype=np.float32, mode="w+", shape=(n, n))
# only the upper triangle is read by the closure; rows are written in chunks
for i0 in range(0, n, 256):
    mm[i0:i0 + 256] = rng.uniform(0, 10, (min(256, n - i0), n)).astype(np.float32)
mm.flush()
"""

CLOSE = r"""
import sys, time, json
import numpy as np
from seqdist.kernels.shortest_paths import apsp
n, path, threads = int(sys.argv[1]), sys.argv[2], int(sys.argv[3])
mm = np.memmap(path, dtype=np.float32, mode="r+", shape=(n, n))
t = time.perf_counter()
r = apsp(mm, out=mm, threads=threads)
took = time.perf_counter() - t
assert r is mm and r.dtype == np.float32
mm.flush()
print(json.dumps({"seconds": took, "d01": float(mm[0, 1])}))
"""


def run_child(args: list[str]) -> tuple[str, float, float]:
    p = subprocess.Popen([sys.executable, "-c", *args], stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(p.pid, 0)
    out, err = p.stdout.read().decode(), p.stderr.read().decode()
    p.stdout.close()
    p.stderr.close()
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"child failed:\n{err[-2000:]}")
    # peak RSS in kB on Linux -> GB; CPU seconds of the whole child (its start included)
    return out, usage.ru_maxrss / 1e6, usage.ru_utime + usage.ru_stime


def large(n: int, seed: int, threads: int) -> dict:
    with tempfile.TemporaryDirectory(prefix="seqdist-closure32-") as tmp:
        path = os.path.join(tmp, "d.f32")
        run_child([WRITE, str(n), str(seed), path])
        load = os.getloadavg()[0]
        out, peak, cpu = run_child([CLOSE, str(n), path, str(threads)])
        res = json.loads(out)
        res.update(peak_gb=peak, cpu=cpu, load=load, load_after=os.getloadavg()[0])
        return res


def timed(D: np.ndarray, threads: int) -> float:
    t = time.perf_counter()
    apsp(D, threads=threads)
    return time.perf_counter() - t


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", default="2000,4000")
    ap.add_argument("--large", type=int, default=0, help="also close an N x N float32 memmap in place (child)")
    ap.add_argument("--threads", type=int, default=1, help="threads of the closure (1: serial)")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args()
    sizes = [int(x) for x in args.sizes.split(",")]
    print(f"AVX-512 form: {has_avx512()}; threads {args.threads}; load average at start "
          f"{os.getloadavg()[0]:.1f}")
    big = large(args.large, args.seed, args.threads) if args.large else None

    rows = []
    print("| n | float64 s | float64 ns per n^3 | float32 s | float32 ns per n^3 | float32 / float64 | load |")
    print("| --- | --- | --- | --- | --- | --- | --- |")
    for n in sizes:
        D64 = random_matrix(n, args.seed, np.float64)
        D32 = D64.astype(np.float32)
        t64 = t32 = float("inf")
        for _ in range(args.repeats):  # interleaved, so both see the same load
            t64 = min(t64, timed(D64, args.threads))
            t32 = min(t32, timed(D32, args.threads))
        rows.append((n, t64, t32))
        print(f"| {n} | {t64:.2f} | {t64 / n ** 3 * 1e9:.4f} | {t32:.2f} | {t32 / n ** 3 * 1e9:.4f} | "
              f"{t32 / t64:.2f} | {os.getloadavg()[0]:.1f} |", flush=True)
        del D64, D32

    if big:
        n = args.large
        n0, t64, _ = rows[0]
        per = big["seconds"] / n ** 3 * 1e9
        ref = t64 / n0 ** 3 * 1e9
        print()
        print("| n | float32 in place on a memmap, s | child CPU s | ns per n^3 | vs float64 at "
              f"{n0} | peak RSS GB | matrix GB | load at start / end |")
        print("| --- | --- | --- | --- | --- | --- | --- | --- |")
        print(f"| {n} | {big['seconds']:.1f} | {big['cpu']:.1f} | {per:.4f} | {per / ref:.2f} | "
              f"{big['peak_gb']:.2f} | {n * n * 4 / 1e9:.2f} | {big['load']:.1f} / {big['load_after']:.1f} |")


if __name__ == "__main__":
    main()
