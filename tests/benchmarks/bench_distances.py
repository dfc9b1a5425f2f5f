"""Benchmark: ``seqdist distances`` against a plain numpy route and Biopython.

Prints a table (no assertions). Every figure is a whole process run as a
subprocess, timed by wall clock, with peak memory (maximum resident set) from
/usr/bin/time; medians of ``--reps`` runs (Biopython once). Input alignments
are simulated here with numpy: cluster centres drawn from a random root,
members mutated from their centre with transitions twice as likely as
transversions, plus scattered gaps and gap blocks.

References measured in the same run:

* "numpy": a short script doing the same counts the obvious way: Biopython
  reads the FASTA, one-hot float32 matrices, nine matrix products for
  compared columns, identities and transitions, the K80 formula, np.savetxt;
* "Biopython": ``Bio.Phylo.TreeConstruction.DistanceCalculator('identity')``
  on a gap-free alignment at n = 600 (identity = p-distance there), against
  ``seqdist distances --model p``; start-up is a 3-sequence run on each side,
  subtracted to compare the work.

Targets (issue 3): within 1.3x of the numpy route at n = 1000 including file
reading and writing; >= 50x faster than Biopython's identity calculator on
the work above start-up at n = 600; n = 4000 under 2 GB peak memory.

Usage: python tests/benchmarks/bench_distances.py [--sizes 500,1000,2000,4000] [--reps 3] [--no-bio]
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import textwrap

import numpy as np

L = 1500
PY = sys.executable

NUMPY_ROUTE = textwrap.dedent("""\
    import sys
    import numpy as np
    from Bio import SeqIO
    recs = list(SeqIO.parse(sys.argv[1], "fasta"))
    names = [r.id for r in recs]
    A = np.frombuffer("".join(str(r.seq) for r in recs).upper().encode(), np.uint8).reshape(len(recs), -1)
    X = [(A == ord(c)).astype(np.float32) for c in "ACGT"]
    M = X[0] + X[1] + X[2] + X[3]
    S = M @ M.T
    same = X[0] @ X[0].T + X[1] @ X[1].T + X[2] @ X[2].T + X[3] @ X[3].T
    ts = X[0] @ X[2].T + X[2] @ X[0].T + X[1] @ X[3].T + X[3] @ X[1].T
    S = S.astype(np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        P = ts / S
        Q = (S - same - ts) / S
        d = -0.5 * np.log(1 - 2 * P - Q) - 0.25 * np.log(1 - 2 * Q)
    np.fill_diagonal(d, 0)
    np.savetxt(sys.argv[2], d, delimiter="\\t")
""")

BIO_ROUTE = textwrap.dedent("""\
    import sys
    from Bio import AlignIO
    from Bio.Phylo.TreeConstruction import DistanceCalculator
    aln = AlignIO.read(sys.argv[1], "fasta")
    dm = DistanceCalculator("identity").get_distance(aln)
    with open(sys.argv[2], "w") as fh:
        for name, row in zip(dm.names, dm.matrix):
            fh.write(name + "\\t" + "\\t".join(repr(v) for v in row) + "\\n")
""")


def simulate(n: int, length: int, seed: int, gaps: bool = True) -> list[str]:
    """Random DNA with cluster structure (demo data, not a test reference)."""
    rng = np.random.default_rng(seed)
    bases = np.frombuffer(b"ACGT", np.uint8)
    # Transition partner of A C G T is G T A C; transversions the other two.
    ts_of = np.array([2, 3, 0, 1])
    tv_of = np.array([[1, 3], [0, 2], [1, 3], [0, 2]])

    def mutate(seq, rate):
        s = seq.copy()
        hit = rng.random(s.size) < rate
        k = int(hit.sum())
        kind = rng.random(k) < 2 / 3
        old = s[hit]
        new = np.where(kind, ts_of[old], tv_of[old, rng.integers(0, 2, k)])
        s[hit] = new
        return s

    root = rng.integers(0, 4, length)
    n_clusters = max(1, n // 25)
    centres = [mutate(root, 0.15) for _ in range(n_clusters)]
    rows = np.empty((n, length), np.uint8)
    for i in range(n):
        rows[i] = bases[mutate(centres[i % n_clusters], 0.05)]
    if gaps:
        rows[rng.random((n, length)) < 0.02] = ord("-")
        for i in rng.choice(n, size=max(1, n // 10), replace=False):
            a = int(rng.integers(0, length - 60))
            rows[i, a:a + int(rng.integers(10, 60))] = ord("-")
    return [r.tobytes().decode() for r in rows]


def write_fasta(path: str, seqs: list[str]) -> None:
    with open(path, "w") as fh:
        for i, s in enumerate(seqs):
            fh.write(f">seq{i:05d}\n")
            for k in range(0, len(s), 60):
                fh.write(s[k:k + 60] + "\n")


def measure(cmd: list[str], reps: int) -> tuple[float, float]:
    """Median wall seconds and max peak MB of ``reps`` runs of a whole process."""
    secs, mems = [], []
    for _ in range(reps):
        p = subprocess.run(["/usr/bin/time", "-f", "%e %M", *cmd], capture_output=True, text=True)
        if p.returncode != 0:
            raise RuntimeError(f"{' '.join(cmd)} failed:\n{p.stderr}")
        e, m = p.stderr.strip().splitlines()[-1].split()
        secs.append(float(e))
        mems.append(float(m) / 1024)
    return statistics.median(secs), max(mems)


def blas_info() -> str:
    try:
        from threadpoolctl import threadpool_info

        return "; ".join(f"{d.get('internal_api')} {d.get('version')} {d.get('architecture')} "
                         f"threads={d.get('num_threads')}" for d in threadpool_info() if d.get("user_api") == "blas")
    except Exception as exc:  # informative only
        return f"unknown ({exc})"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", default="500,1000,2000,4000")
    ap.add_argument("--reps", type=int, default=3)
    ap.add_argument("--no-bio", action="store_true", help="skip the Biopython comparison")
    args = ap.parse_args()
    sizes = [int(x) for x in args.sizes.split(",")]
    env_note = {k: os.environ[k] for k in ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE", "OMP_NUM_THREADS")
                if k in os.environ}
    print(f"BLAS: {blas_info()}; env: {env_note or 'none set'}; cores: {os.cpu_count()}")
    with tempfile.TemporaryDirectory() as t:
        np_script = os.path.join(t, "numpy_route.py")
        bio_script = os.path.join(t, "bio_route.py")
        open(np_script, "w").write(NUMPY_ROUTE)
        open(bio_script, "w").write(BIO_ROUTE)
        # Warm the numba cache of the byte kernel once (compilation is not what we measure).
        warm = os.path.join(t, "warm.fasta")
        write_fasta(warm, simulate(5, 200, 1))
        subprocess.run(["seqdist", "--quiet", "distances", warm, "-o", os.path.join(t, "w.tsv"), "--kernel", "bytes"],
                       check=True)
        print(f"\nk80, pairwise deletion, L = {L} columns (median of {args.reps}; peak = max RSS)")
        print(f"{'n':>6} {'seqdist s':>10} {'peak MB':>8} {'bytes-kernel s':>14} {'numpy s':>8} {'peak MB':>8} "
              f"{'seqdist/numpy':>13}")
        for n in sizes:
            aln = os.path.join(t, f"sim{n}.fasta")
            write_fasta(aln, simulate(n, L, n))
            out = os.path.join(t, f"d{n}.tsv")
            reps = args.reps if n <= 2000 else 1
            s_ours, m_ours = measure(["seqdist", "--quiet", "distances", aln, "-o", out, "--model", "k80"], reps)
            s_byte, _ = measure(["seqdist", "--quiet", "distances", aln, "-o", out, "--model", "k80",
                                 "--kernel", "bytes"], reps)
            s_np, m_np = measure([PY, np_script, aln, os.path.join(t, f"np{n}.tsv")], reps)
            print(f"{n:>6} {s_ours:>10.2f} {m_ours:>8.0f} {s_byte:>14.2f} {s_np:>8.2f} {m_np:>8.0f} "
                  f"{s_ours / s_np:>13.2f}")
        if args.no_bio:
            return
        print("\np-distance vs Biopython DistanceCalculator('identity'), gap-free, L = 1500")
        res = {}
        for n in (3, 600):
            aln = os.path.join(t, f"nogap{n}.fasta")
            write_fasta(aln, simulate(n, L, 7 + n, gaps=False))
            res["ours", n] = measure(["seqdist", "--quiet", "distances", aln, "-o", os.path.join(t, "o.tsv"),
                                      "--model", "p"], args.reps)
            res["bio", n] = measure([PY, bio_script, aln, os.path.join(t, "b.tsv")], 1 if n > 3 else args.reps)
        print(f"{'':>10} {'n=3 s':>8} {'n=600 s':>8} {'work s':>8} {'peak MB':>8}")
        for side in ("ours", "bio"):
            a, b = res[side, 3][0], res[side, 600][0]
            print(f"{side:>10} {a:>8.2f} {b:>8.2f} {b - a:>8.2f} {res[side, 600][1]:>8.0f}")
        work_ours = max(res["ours", 600][0] - res["ours", 3][0], 0.01)
        work_bio = res["bio", 600][0] - res["bio", 3][0]
        print(f"speed-up on the work above start-up: {work_bio / work_ours:.0f}x; "
              f"whole process: {res['bio', 600][0] / res['ours', 600][0]:.0f}x")


if __name__ == "__main__":
    main()
