#!/usr/bin/env python
"""Start-up and first use: whole commands against named references, in one run.

Three ratios, each against a reference measured in the same run (minimum of
``--reps`` processes each, interleaved):

1. A warm small command, ``seqdist audit`` of a 4x4 matrix, against
   ``python -c "import numpy, scipy.sparse, pandas"`` (target: at most 1.5).
2. The first run after install against a warm run: before the first run the
   package's own ``__pycache__`` folders are emptied (for a JIT version, that
   empties its kernel cache) and its byte-code is written again, which is the
   state right after ``pip install`` (pip byte-compiles what it installs; this
   package's build does the same for an editable install). The warm run reuses
   what the first wrote.
   Measured for the 4x4 audit and for ``seqdist run`` of the demo alignment
   (target: at most 1.5).
3. ``seqdist repair --objective shrink`` at n = 1500, the whole command,
   against a script that reads with pandas, runs scipy's ``floyd_warshall``
   and writes with pandas (target: at most 0.7).

With ``--old REV`` each figure is also measured for the package at an earlier
commit (unpacked with ``git archive``; it needs its own dependencies here).

Usage: python tests/benchmarks/bench_startup.py [--reps 5] [--old REV] [--n 1500]
"""

from __future__ import annotations

import argparse
import compileall
import os
import shutil
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(HERE))
DEMO = os.path.join(ROOT, "example_sequences", "dna_trouble.fasta")

IMPORTS = [sys.executable, "-c", "import numpy, scipy.sparse, pandas"]

REFERENCE_SCRIPT = r'''
import sys, numpy as np, pandas as pd
from scipy.sparse.csgraph import floyd_warshall
f = pd.read_csv(sys.argv[1], sep="\t", index_col=0)
D = np.ascontiguousarray(f.to_numpy(dtype=np.float64))
X = floyd_warshall(D, directed=False)
pd.DataFrame(X, index=f.index, columns=f.columns).to_csv(sys.argv[2], sep="\t", float_format="%.17g")
'''


#: Byte-code is written, as on a normal install (some sandboxes set PYTHONDONTWRITEBYTECODE,
#: which would make every run compile every module and hide what a user sees).
BASE_ENV = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}


#: Every child runs in a neutral folder: ``python -m seqdist`` puts the working directory first on
#: ``sys.path``, so run from a checkout it would import that checkout's package whatever
#: ``PYTHONPATH`` says (an earlier version of this script measured the new package as the old).
NEUTRAL = tempfile.mkdtemp(prefix="seqdist-bench-cwd-")


def wall(cmd: list[str], env: dict | None = None) -> float:
    env = BASE_ENV if env is None else env
    t = time.perf_counter()
    p = subprocess.run(cmd, capture_output=True, text=True, env=env, cwd=NEUTRAL)
    took = time.perf_counter() - t
    if p.returncode != 0:
        raise SystemExit(f"failed: {' '.join(cmd)}\n{p.stderr[-2000:]}")
    return took


def seqdist_cmd(root: str, *args: str) -> tuple[list[str], dict]:
    env = {**BASE_ENV, "PYTHONPATH": root, "PYTHONWARNINGS": "ignore"}
    return [sys.executable, "-m", "seqdist", *args], env


def fresh_caches(env: dict, root: str) -> dict:
    """The state right after install: the package's byte-code written (as ``pip install .`` does,
    and as this package's build does for ``pip install -e .``), and no other cache of its own
    (for a JIT version, the kernels' cache, also kept in ``__pycache__`` folders, is emptied)."""
    for folder, subdirs, _ in os.walk(os.path.join(root, "seqdist")):
        if "__pycache__" in subdirs:
            shutil.rmtree(os.path.join(folder, "__pycache__"))
    compileall.compile_dir(os.path.join(root, "seqdist"), quiet=1)
    return {k: v for k, v in env.items() if k != "NUMBA_CACHE_DIR"}


def write_matrix(path: str, n: int, seed: int = 2) -> None:
    import numpy as np

    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 10, (n, 2))
    d = np.sqrt(((x[:, None] - x[None]) ** 2).sum(-1)) * np.exp(rng.normal(0, 0.3, (n, n)))
    d = (d + d.T) / 2
    np.fill_diagonal(d, 0)
    names = [f"s{i}" for i in range(n)]
    with open(path, "w") as fh:
        fh.write("\t" + "\t".join(names) + "\n")
        for i in range(n):
            fh.write(names[i] + "\t" + "\t".join(repr(float(v)) for v in d[i]) + "\n")


def measure(root: str, label: str, reps: int, n: int, tmp: str) -> dict:
    m4 = os.path.join(tmp, "m4.tsv")
    big = os.path.join(tmp, f"m{n}.tsv")
    audit, env = seqdist_cmd(root, "audit", m4, "--quiet")
    shrink, _ = seqdist_cmd(root, "repair", big, "--objective", "shrink", "-o", os.path.join(tmp, "o.tsv"),
                            "--quiet")
    run_out = os.path.join(tmp, "run")
    run, _ = seqdist_cmd(root, "run", DEMO, "--outdir", run_out, "--quiet")
    where = subprocess.run([sys.executable, "-c", "import seqdist; print(seqdist.__file__)"], env=env,
                           cwd=NEUTRAL, capture_output=True, text=True).stdout.strip()
    if not where.startswith(root):  # the package measured must be the one named
        raise SystemExit(f"{label}: imported {where}, not the package under {root}")
    ref = [sys.executable, os.path.join(tmp, "ref.py"), big, os.path.join(tmp, "r.tsv")]

    first_audit, first_run = [], []
    for _ in range(max(1, reps // 2)):
        first_audit.append(wall(audit, fresh_caches(env, root)))
        first_run.append(wall(run, fresh_caches(env, root)))
    wall(audit, env)
    wall(run, env)  # fill the caches for the warm runs
    imports, warm_audit, warm_run, cmd, script = [], [], [], [], []
    for _ in range(reps):  # interleaved, so a noisy neighbour slows every side alike
        imports.append(wall(IMPORTS))
        warm_audit.append(wall(audit, env))
        cmd.append(wall(shrink, env))
        script.append(wall(ref))
    for _ in range(max(1, reps // 2)):
        warm_run.append(wall(run, env))
    return {"imports": min(imports), "warm_audit": min(warm_audit), "first_audit": min(first_audit),
            "warm_run": min(warm_run), "first_run": min(first_run), "shrink_cmd": min(cmd),
            "shrink_script": min(script)}


def unpack(rev: str) -> str:
    dest = tempfile.mkdtemp(prefix="seqdist-old-")
    archive = subprocess.run(["git", "-C", ROOT, "archive", rev, "seqdist"], check=True, capture_output=True).stdout
    subprocess.run(["tar", "-x", "-C", dest], input=archive, check=True)
    return dest


def report(label: str, f: dict) -> None:
    print(f"\n## {label}\n")
    print("| measure | seconds | reference | seconds | ratio | target |")
    print("| --- | --- | --- | --- | --- | --- |")
    print(f"| warm `audit` 4x4 | {f['warm_audit']:.2f} | import numpy, scipy.sparse, pandas | {f['imports']:.2f} | "
          f"{f['warm_audit'] / f['imports']:.2f} | <= 1.5 |")
    print(f"| first `audit` 4x4 after install | {f['first_audit']:.2f} | warm `audit` 4x4 | {f['warm_audit']:.2f} | "
          f"{f['first_audit'] / f['warm_audit']:.2f} | <= 1.5 |")
    print(f"| first `run` of the demo after install | {f['first_run']:.2f} | warm `run` | {f['warm_run']:.2f} | "
          f"{f['first_run'] / f['warm_run']:.2f} | <= 1.5 |")
    print(f"| `repair --objective shrink` n={ARGS.n} | {f['shrink_cmd']:.2f} | read + scipy floyd_warshall + write | "
          f"{f['shrink_script']:.2f} | {f['shrink_cmd'] / f['shrink_script']:.2f} | <= 0.7 |")


def main() -> None:
    global ARGS
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--reps", type=int, default=5, help="processes per measure (default 5; minimum kept)")
    ap.add_argument("--n", type=int, default=1500, help="size of the shrink command (default 1500)")
    ap.add_argument("--old", default=None, help="also measure the package at this earlier commit")
    ARGS = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        with open(os.path.join(tmp, "m4.tsv"), "w") as fh:
            fh.write("\ta\tb\tc\td\na\t0\t1\t2\t2\nb\t1\t0\t2\t2\nc\t2\t2\t0\t1\nd\t2\t2\t1\t0\n")
        write_matrix(os.path.join(tmp, f"m{ARGS.n}.tsv"), ARGS.n)
        with open(os.path.join(tmp, "ref.py"), "w") as fh:
            fh.write(REFERENCE_SCRIPT)
        roots = [("this checkout", ROOT)]
        if ARGS.old:
            roots.append((f"commit {ARGS.old}", unpack(ARGS.old)))
        for label, root in roots:
            report(label, measure(root, label.replace(" ", "_"), ARGS.reps, ARGS.n, tmp))


if __name__ == "__main__":
    main()
