#!/usr/bin/env python
"""Calibration of :func:`seqdist.suspects.find_suspects` on seeded simulations with planted trouble.

Each replicate simulates 32 taxa x 1,000 columns under K80 (seqdist.simulate,
default tree scale), computes K80 distances (pairwise gap deletion), and runs
``find_suspects`` with the alignment. Scenarios, as in issue 15's study:

* ``clean``: nothing planted;
* ``chimera``: two chimeras (second half copied from the farthest free taxon);
* ``gappy``: two rows with 70% gaps;
* ``misread``: two rows with three misread stretches of 50 columns;
* ``contaminant``: one row replaced by the consensus mutated 0.5 substitutions per site;
* ``saturated``: one pair pushed past saturation (50 extra substitutions per site).

Printed per scenario: the share of planted taxa ranked in the top 3, the share of
replicates with every planted taxon in the top 3, the mean rank of the planted
taxa, and the share of replicates whose suspect list is empty (clean: the
share with no false suspect is the figure to read) or holds a taxon that was not
planted. ``--scores`` prints the distribution of the top clean score (for the
threshold), ``--threshold`` tries another threshold, ``--replicates`` sets the
count (default 50), ``--bootstrap B`` adds the placement statistic.

Run: ``python tests/benchmarks/bench_suspects.py [--replicates 50] [--scores]``.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(HERE))
sys.path.insert(0, ROOT)

SCENARIOS = ("clean", "chimera", "gappy", "misread", "contaminant", "saturated")
TARGETS = {"chimera": 0.8, "gappy": 0.8, "contaminant": 0.8}


def make(scenario: str, rep: int, n: int = 32, length: int = 1000):
    """One seeded simulation of a scenario: (alignment, planted labels)."""
    from seqdist import simulate as S
    from seqdist.alignment import Alignment

    seed = 1000 * (SCENARIOS.index(scenario) + 1) + rep
    sim = S.simulate(n, length, seed=seed, model="k80")
    rng = np.random.default_rng(seed + 7)
    if scenario == "chimera":
        sim = S.plant_chimera(sim, rng=rng)
        sim = S.plant_chimera(sim, rng=rng)
    elif scenario == "gappy":
        sim = S.plant_gappy(sim, fraction=0.7, rng=rng)
        sim = S.plant_gappy(sim, fraction=0.7, rng=rng)
    elif scenario == "misread":
        sim = S.plant_misread(sim, stretches=3, stretch_length=50, rng=rng)
        sim = S.plant_misread(sim, stretches=3, stretch_length=50, rng=rng)
    elif scenario == "contaminant":
        sim = S.plant_contaminant(sim, distance=0.5, rng=rng)
    elif scenario == "saturated":
        sim = S.plant_saturated_pair(sim, rng=rng)
    planted = []
    for note in sim.planted:
        # a chimera's donor is untouched: only the chimera itself is bad data
        planted += [note["label"]] if note["kind"] == "chimera" else list(note["labels"])
    aln = Alignment.from_sequences(sim.labels, [s for _, s in sim.records], "dna")
    return aln, planted


def run(scenario: str, rep: int, threshold, bootstrap: int):
    from seqdist.distances import pairwise_distances
    from seqdist.suspects import find_suspects

    aln, planted = make(scenario, rep)
    dm = pairwise_distances(aln, "k80", warn=False, progress=False).matrix
    t0 = time.perf_counter()
    rep_ = find_suspects(dm, alignment=aln, model="k80", replicates=bootstrap, seed=rep, threshold=threshold)
    secs = time.perf_counter() - t0
    order = [s.label for s in rep_.ranking]
    ranks = [order.index(p) + 1 for p in planted]
    return {"planted": planted, "ranks": ranks, "suspects": rep_.labels, "top_score": rep_.ranking[0].score,
            "seconds": secs, "top": rep_.ranking[0], "ranking": rep_.ranking}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--replicates", type=int, default=50)
    ap.add_argument("--threshold", type=float, default=None)
    ap.add_argument("--bootstrap", type=int, default=0)
    ap.add_argument("--scenarios", default=",".join(SCENARIOS))
    ap.add_argument("--scores", action="store_true", help="print the top scores of clean replicates")
    ap.add_argument("--why", action="store_true", help="print the statistics behind false suspects on clean data")
    a = ap.parse_args(argv)
    from seqdist.suspects import THRESHOLD

    thr = THRESHOLD if a.threshold is None else a.threshold
    print(f"find_suspects calibration: 32 taxa x 1000 columns, K80, {a.replicates} replicates per scenario, "
          f"threshold {thr:g}, bootstrap {a.bootstrap}")
    print(f"{'scenario':<12} {'in top 3':>9} {'all in top 3':>13} {'mean rank':>10} {'empty list':>11} "
          f"{'unplanted suspect':>18} {'seconds/run':>12}")
    for sc in a.scenarios.split(","):
        hits = tot = allin = empty = fp = 0
        rank_sum = 0.0
        secs = []
        tops = []
        for r in range(a.replicates):
            res = run(sc, r, a.threshold, a.bootstrap)
            secs.append(res["seconds"])
            tops.append(res["top_score"])
            empty += not res["suspects"]
            fp += any(s not in res["planted"] for s in res["suspects"])
            if a.why and sc == "clean" and res["suspects"]:
                s = res["top"]
                zs = {k: v["z"] for k, v in s.evidence.items() if v["z"] and v["z"] >= thr}
                print(f"    clean rep {r}: {s.label} score {s.score:.3g} {zs}")
            if res["planted"]:
                tot += len(res["ranks"])
                hits += sum(k <= 3 for k in res["ranks"])
                allin += all(k <= 3 for k in res["ranks"])
                rank_sum += sum(res["ranks"])
        R = a.replicates
        if tot:
            line = (f"{sc:<12} {hits / tot:>9.2f} {allin / R:>13.2f} {rank_sum / tot:>10.2f} ")
        else:
            line = f"{sc:<12} {'-':>9} {'-':>13} {'-':>10} "
        line += f"{empty / R:>11.2f} {fp / R:>18.2f} {np.median(secs):>12.3f}"
        if sc in TARGETS and tot:
            line += f"   target: >= {TARGETS[sc]:.2f} in top 3"
        if sc == "clean":
            line += "   target: empty >= 0.90"
        print(line, flush=True)
        if a.scores:
            q = np.quantile(tops, [0.5, 0.8, 0.9, 0.95, 1.0])
            print(f"    top score quantiles 50/80/90/95/100%: " + " ".join(f"{x:.2f}" for x in q))


if __name__ == "__main__":
    main()
