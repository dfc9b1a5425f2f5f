"""Benchmark of ``seqdist pairscores`` and the side-by-side report of three standard matrices.

Run from the project root:

    /work/venv/bin/python tests/benchmarks/bench_scores.py            # 200 sequences of ~300
    /work/venv/bin/python tests/benchmarks/bench_scores.py --n 60     # a quick run

Part 1 times all pairs of simulated protein sequences. The reference, measured in the
same run, is Biopython's PairwiseAligner alone in one process doing the same alignment
work: ``aligner.score`` for the score-only formula (cosine), and ``aligner.align(...)[0]``
(the traceback that Feng & Doolittle's random score needs) for ``fd``. Target: all pairs of
200 sequences of length ~300 in under a minute on 2 cores.

Part 2 prints, for BLOSUM45, BLOSUM62 and PAM250, lambda, relative entropy and expected
score (under the default background and under Robinson & Robinson 1991 frequencies, for a
common basis), and the violated triangles of the dissimilarity under every transform.
Simulated sequences are demo data only.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__)))))

from seqdist.scores.matrices import (  # noqa: E402
    AMINO20,
    ROBINSON_1991,
    TRANSFORMS,
    check_score_matrix,
    load_score_matrix,
    score_statistics,
)
from seqdist.scores.pairwise import score_distances  # noqa: E402


def simulate(n: int, length: int, seed: int) -> list[str]:
    """Families of related proteins: substitutions and short indels from a few roots (demo data)."""
    rng = np.random.default_rng(seed)
    freqs = np.array(ROBINSON_1991) / 1000.0
    aa = np.array(list(AMINO20))
    roots = [rng.choice(aa, length, p=freqs) for _ in range(max(1, n // 25))]
    out = []
    for k in range(n):
        s = list(roots[k % len(roots)])
        rate = rng.uniform(0.05, 0.6)
        hit = rng.random(len(s)) < rate
        for i in np.flatnonzero(hit):
            s[i] = rng.choice(aa, p=freqs)
        for _ in range(rng.poisson(4)):  # short insertions and deletions
            pos = int(rng.integers(0, len(s)))
            size = int(rng.integers(1, 6))
            if rng.random() < 0.5:
                del s[pos:pos + size]
            else:
                s[pos:pos] = list(rng.choice(aa, size, p=freqs))
        out.append("".join(s))
    return out


def cpu_seconds() -> float:
    """CPU time of this process plus its finished children (load from other jobs does not count)."""
    import resource

    me = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return me.ru_utime + me.ru_stime + kids.ru_utime + kids.ru_stime


def timed(fn):
    w, c = time.perf_counter(), cpu_seconds()
    out = fn()
    return time.perf_counter() - w, cpu_seconds() - c, out


def reference(seqs, mode, traceback):
    from Bio.Align import PairwiseAligner, substitution_matrices

    al = PairwiseAligner(mode=mode, substitution_matrix=substitution_matrices.load("BLOSUM62"),
                         open_gap_score=-11, extend_gap_score=-1)
    n = len(seqs)
    for s in seqs:
        al.score(s, s)
    for i in range(n):
        for j in range(i + 1, n):
            if traceback:
                al.align(seqs[i], seqs[j])[0]
            else:
                al.score(seqs[i], seqs[j])


def part1(n, length, seed):
    from threadpoolctl import threadpool_info

    seqs = simulate(n, length, seed)
    ids = [f"s{k}" for k in range(n)]
    pairs = n * (n - 1) // 2
    mean_len = np.mean([len(s) for s in seqs])
    load = os.getloadavg()[0]
    print(f"## pairscores: {n} sequences, mean length {mean_len:.0f}, {pairs} pairs, BLOSUM62, gaps 11/1, "
          f"global; {os.cpu_count()} CPUs, load average {load:.1f} at the start\n")
    blas = ", ".join(sorted({f"{i.get('internal_api')} {i.get('architecture', '')}".strip()
                             for i in threadpool_info()})) or "none loaded"
    rows = []

    def ours(formula, procs):
        return lambda: score_distances(ids, seqs, "BLOSUM62", formula=formula, processes=procs, progress=False)

    w, c, _ = timed(lambda: reference(seqs, "global", False))
    rows.append(("Biopython aligner.score, 1 process (reference for cosine)", w, c, w))
    ref = w
    for procs in (1, 2):
        w, c, _ = timed(ours("cosine", procs))
        rows.append((f"seqdist pairscores --formula cosine, {procs} process(es)", w, c, ref))
    w, c, _ = timed(lambda: reference(seqs, "global", True))
    rows.append(("Biopython aligner.align()[0], 1 process (reference for fd)", w, c, w))
    ref = w
    results = {}
    for procs in (1, 2):
        w, c, r = timed(ours("fd", procs))
        rows.append((f"seqdist pairscores --formula fd, {procs} process(es)", w, c, ref))
        results[procs] = r.dm
    assert results[1].equals(results[2]), "1 and 2 processes disagree"
    print("| route | wall s | CPU s | pairs/s (wall) | wall / reference |")
    print("| --- | ---: | ---: | ---: | ---: |")
    for name, sec, cpu, ref in rows:
        print(f"| {name} | {sec:.2f} | {cpu:.2f} | {pairs / sec:,.0f} | {sec / ref:.2f} |")
    missing = int(np.isnan(results[2].values).sum() // 2)
    print(f"\nfd with 2 processes: {rows[-1][1]:.1f} s wall ({'under' if rows[-1][1] < 60 else 'OVER'} a minute); "
          f"output identical for 1 and 2 processes; {missing} missing pairs; "
          f"load average {os.getloadavg()[0]:.1f} at the end; BLAS: {blas} (no matrix products here)\n")


def part2():
    print("## Three standard matrices side by side (Biopython's copies; ambiguity letters dropped)\n")
    names = ["BLOSUM45", "BLOSUM62", "PAM250"]
    head = ["quantity"] + names
    rows = []
    reps = {m: {t: check_score_matrix(load_score_matrix(m), t) for t in TRANSFORMS} for m in names}
    base = {m: reps[m]["diag-mean"].data for m in names}
    rr = {}
    for m in names:
        sm = load_score_matrix(m).subset(list(AMINO20))
        rr[m] = score_statistics(sm.values, np.array(ROBINSON_1991) / 1000.0)

    def fmt(x, d=4):
        return "n/a" if x is None else f"{x:.{d}f}"

    rows.append(["default background"] + [base[m]["background"]["method"] for m in names])
    rows.append(["lambda (nats), default background"] + [fmt(base[m]["lambda"]) for m in names])
    rows.append(["relative entropy (bits), default"] + [fmt(base[m]["relative_entropy_bits"]) for m in names])
    rows.append(["expected score (units), default"] + [fmt(base[m]["expected_score"]) for m in names])
    rows.append(["expected score (bits), default"] + [fmt(base[m]["expected_score_bits"]) for m in names])
    rows.append(["lambda (nats), Robinson 1991"] + [fmt(rr[m].lam) for m in names])
    rows.append(["relative entropy (bits), Robinson 1991"] + [fmt(rr[m].relative_entropy_bits) for m in names])
    rows.append(["expected score (units), Robinson 1991"] + [fmt(rr[m].expected_score) for m in names])
    rows.append(["row max on diagonal"] + ["yes" if base[m]["diagonal_is_row_max"] else "no" for m in names])
    for t in TRANSFORMS:
        cells = []
        for m in names:
            d = reps[m][t].data
            top = ", ".join(f"{x['letter']} {x['violated_triangles']}" for x in d["letters_most_involved"][:3])
            cells.append(f"{d['violated_triangles']} / {d['triangles']}" + (f" ({top})" if top else ""))
        rows.append([f"violated triangles, {t}"] + cells)
    print("| " + " | ".join(head) + " |")
    print("| " + " | ".join("---" for _ in head) + " |")
    for r in rows:
        print("| " + " | ".join(r) + " |")
    print()


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=200)
    ap.add_argument("--length", type=int, default=300)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--skip-speed", action="store_true")
    a = ap.parse_args()
    part2()
    if not a.skip_speed:
        part1(a.n, a.length, a.seed)


if __name__ == "__main__":
    sys.stdout.reconfigure(line_buffering=True)
    main()
