#!/usr/bin/env python
"""Calibration of :func:`seqdist.audit.suspects.find_suspects` on seeded simulations with planted trouble.

Each replicate simulates 32 taxa x 1,000 columns under K80 (seqdist.simulate,
default tree scale), computes K80 distances (pairwise gap deletion), and runs
``find_suspects`` with the alignment. Scenarios, as in issue 15's study:

* ``clean``: nothing planted;
* ``chimera``: two chimeras (second half copied from the farthest free taxon);
* ``gappy``: two rows with 70% gaps;
* ``misread``: two rows with three misread stretches of 50 columns;
* ``contaminant``: one row replaced by the consensus mutated 0.5 substitutions per site;
* ``saturated``: one pair pushed past saturation (50 extra substitutions per site).

Printed per scenario: the share of planted taxa among the first three suspects
(taxa whose score reaches the threshold; the issue's target is >= 0.80 for
chimeras, gappy rows and the contaminant), the share of replicates with every
planted taxon there, the mean rank of the planted taxa in the full ranking,
the share of replicates whose suspect list is empty (clean: the issue's target
is >= 0.90) and the share with a suspect that was not planted (a chimera's
donor is untouched and counts as not planted). ``--sweep`` adds the figures
over a range of thresholds, ``--threshold`` tries another threshold,
``--replicates`` sets the count (default 50), ``--first`` the first replicate
index (so a threshold set on some seeds can be checked on others),
``--bootstrap B`` adds the placement statistic. Results for the docs:
``--replicates 250 --sweep`` (docs/suspects.md).

Run: ``python tests/benchmarks/bench_suspects.py [--replicates 50] [--sweep]``.
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
    from seqdist.io.alignment import Alignment

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
    from seqdist.audit.suspects import find_suspects
    from seqdist.models.distances import pairwise_distances

    aln, planted = make(scenario, rep)
    dm = pairwise_distances(aln, "k80", warn=False, progress=False).matrix
    t0 = time.perf_counter()
    rep_ = find_suspects(dm, alignment=aln, model="k80", replicates=bootstrap, seed=rep, threshold=threshold)
    secs = time.perf_counter() - t0
    order = [s.label for s in rep_.ranking]
    ranks = [order.index(p) + 1 for p in planted]
    return {"planted": planted, "ranks": ranks, "suspects": rep_.labels, "top_score": rep_.ranking[0].score,
            "seconds": secs, "top": rep_.ranking[0], "ranking": rep_.ranking}


def rates(results, thr):
    """Figures of one scenario at threshold ``thr`` from the stored rankings."""
    hits = tot = allin = empty = fp = 0
    rank_sum = 0.0
    for res in results:
        sus = [lab for lab, sc in res["scores"] if sc >= thr]
        empty += not sus
        fp += any(s not in res["planted"] for s in sus)
        top3 = sus[:3]
        order = [lab for lab, _ in res["scores"]]
        tot += len(res["planted"])
        hits += sum(p in top3 for p in res["planted"])
        allin += bool(res["planted"]) and all(p in top3 for p in res["planted"])
        rank_sum += sum(order.index(p) + 1 for p in res["planted"])
    R = len(results)
    return {"hit": hits / tot if tot else None, "all": allin / R if tot else None,
            "rank": rank_sum / tot if tot else None, "empty": empty / R, "unplanted": fp / R}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--replicates", type=int, default=50)
    ap.add_argument("--first", type=int, default=0, help="index of the first replicate (seeds differ by index)")
    ap.add_argument("--threshold", type=float, default=None)
    ap.add_argument("--bootstrap", type=int, default=0)
    ap.add_argument("--scenarios", default=",".join(SCENARIOS))
    ap.add_argument("--sweep", action="store_true", help="also print the figures over a range of thresholds")
    a = ap.parse_args(argv)
    from seqdist.audit.suspects import THRESHOLD

    thr = THRESHOLD if a.threshold is None else a.threshold
    print(f"find_suspects calibration: 32 taxa x 1000 columns, K80, {a.replicates} replicates per scenario, "
          f"replicates {a.first}..{a.first + a.replicates - 1}, threshold {thr:g}, bootstrap replicates {a.bootstrap}")
    print("in top 3: share of planted taxa among the first 3 suspects (above the threshold); all: share of "
          "replicates with every planted taxon there; rank: mean rank of the planted taxa in the full ranking")
    print(f"{'scenario':<12} {'in top 3':>9} {'all':>6} {'rank':>6} {'empty list':>11} "
          f"{'unplanted suspect':>18} {'median s':>9}")
    store = {}
    for sc in a.scenarios.split(","):
        results, secs = [], []
        for r in range(a.first, a.first + a.replicates):
            res = run(sc, r, a.threshold, a.bootstrap)
            secs.append(res["seconds"])
            results.append({"planted": res["planted"], "scores": [(s.label, s.score) for s in res["ranking"]]})
        store[sc] = results
        f = rates(results, thr)
        if f["hit"] is not None:
            line = f"{sc:<12} {f['hit']:>9.2f} {f['all']:>6.2f} {f['rank']:>6.2f} "
        else:
            line = f"{sc:<12} {'-':>9} {'-':>6} {'-':>6} "
        line += f"{f['empty']:>11.2f} {f['unplanted']:>18.2f} {np.median(secs):>9.3f}"
        if sc in TARGETS:
            line += f"   target: in top 3 >= {TARGETS[sc]:.2f}"
        if sc == "clean":
            line += "   target: empty >= 0.90"
        print(line, flush=True)
    if a.sweep:
        print()
        print("threshold sweep (clean: share of empty lists; others: share of planted taxa in the top 3 suspects)")
        print(f"{'threshold':>9} " + " ".join(f"{sc:>11}" for sc in store))
        for t in np.arange(3.0, 8.01, 0.25):
            row = []
            for sc, results in store.items():
                f = rates(results, t)
                row.append(f["empty"] if sc == "clean" else (f["hit"] if f["hit"] is not None else float("nan")))
            print(f"{t:>9.2f} " + " ".join(f"{x:>11.2f}" for x in row))


if __name__ == "__main__":
    main()
