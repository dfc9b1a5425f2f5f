"""Suspect taxa: planted trouble is found, clean data gives no suspect, evidence checked independently.

Simulations are small and seeded (seqdist.simulate); the calibration with the
issue's sizes is tests/benchmarks/bench_suspects.py.
"""

from __future__ import annotations

import itertools
import json
import math

import numpy as np
import pytest
from scipy.stats import spearmanr

from seqdist.audit.suspects import (
    THRESHOLD,
    Suspect,
    SuspectReport,
    complete_core,
    find_suspects,
    nearest_shift,
    robust_z,
    spearman_rows,
)
from seqdist.core.errors import InputError
from seqdist.core.matrix import DistanceMatrix
from seqdist.io.alignment import Alignment
from seqdist.models.distances import pairwise_distances
from seqdist.simulate import plant_chimera, plant_contaminant, plant_gappy, simulate


def _data(sim):
    aln = Alignment.from_sequences(sim.labels, [s for _, s in sim.records], "dna")
    dm = pairwise_distances(aln, "k80", warn=False, progress=False).matrix
    return aln, dm


# ------------------------------------------------------------ planted trouble
@pytest.mark.parametrize("seed", [0, 1])
def test_planted_chimera_ranked_first(seed):
    sim = plant_chimera(simulate(24, 800, seed=seed), "t05")
    aln, dm = _data(sim)
    rep = find_suspects(dm, alignment=aln)
    assert rep.ranking[0].label == "t05"
    assert rep.labels == ["t05"]                       # the donor is untouched and not called a suspect
    top = rep.suspects[0]
    assert top.evidence["block_incongruence"]["z"] >= THRESHOLD
    assert any("nearest relatives differ between columns 1-" in r for r in top.reasons)


def test_planted_gappy_row_ranked_first():
    sim = plant_gappy(simulate(24, 800, seed=2), "t11", 0.7, rng=2)
    aln, dm = _data(sim)
    rep = find_suspects(dm, alignment=aln)
    assert rep.ranking[0].label == "t11"
    ev = rep.ranking[0].evidence
    assert ev["gap_fraction"]["value"] == pytest.approx(0.7)
    assert ev["compared_columns"]["value"] == pytest.approx(240.0)   # 30% of 800 columns, no other gaps


def test_planted_contaminant_ranked_first():
    sim = plant_contaminant(simulate(24, 800, seed=0), "t05", rng=0)
    aln, dm = _data(sim)
    rep = find_suspects(dm, alignment=aln)
    assert rep.labels[:1] == ["t05"]
    # a contaminant shows in the matrix alone: its quartets fit a tree poorly (Holland et al. 2002)
    assert rep.suspects[0].evidence["delta"]["z"] > 3.0
    assert find_suspects(dm).ranking[0].label == "t05"


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_clean_simulation_gives_no_suspect(seed):
    aln, dm = _data(simulate(24, 800, seed=seed))
    rep = find_suspects(dm, alignment=aln)
    assert rep.suspects == []
    assert len(rep.ranking) == 24
    assert find_suspects(dm).suspects == []


# ------------------------------------------------------------ properties
def test_scores_do_not_depend_on_label_order():
    sim = plant_chimera(simulate(16, 600, seed=3), "t05")
    aln, dm = _data(sim)
    rep = find_suspects(dm, alignment=aln)
    perm = np.random.default_rng(1).permutation(dm.n)
    labels = [dm.labels[i] for i in perm]
    rep2 = find_suspects(dm.subset(labels), alignment=aln.subset(labels))
    a = {s.label: s.score for s in rep.ranking}
    b = {s.label: s.score for s in rep2.ranking}
    assert a.keys() == b.keys()
    for k in a:
        assert b[k] == pytest.approx(a[k], rel=1e-9, abs=1e-9)
    assert [s.label for s in rep.ranking] == [s.label for s in rep2.ranking]


def test_deterministic_for_a_seed_with_bootstrap():
    sim = plant_chimera(simulate(10, 300, seed=4), "t03")
    aln, dm = _data(sim)
    r1 = find_suspects(dm, alignment=aln, model="k80", replicates=4, seed=7).to_dict()
    r2 = find_suspects(dm, alignment=aln, model="k80", replicates=4, seed=7).to_dict()
    assert json.dumps(r1, sort_keys=True) == json.dumps(r2, sort_keys=True)
    assert "placement_instability" in r1["statistics"]
    vals = [t["evidence"]["placement_instability"]["value"] for t in r1["ranking"]]
    assert all(0.0 <= v <= 1.0 for v in vals)


def test_to_dict_json_ready_with_contract_keys():
    sim = plant_gappy(simulate(12, 300, seed=5), "t02", 0.7, rng=1)
    aln, dm = _data(sim)
    d = find_suspects(dm, alignment=aln).to_dict()
    text = json.dumps(d, allow_nan=False)          # no NaN or numpy types anywhere
    back = json.loads(text)
    assert set(back) == {"suspect_taxa", "threshold", "statistics", "ranking"}
    assert back["suspect_taxa"][0]["label"] == "t02"
    for t in back["ranking"]:
        assert set(t) == {"label", "score", "evidence", "reasons"}
        for name, e in t["evidence"].items():
            assert name in back["statistics"]
            assert set(e) == {"value", "typical", "z"}


# ------------------------------------------------------------ evidence against plain computations
def _brute_delta(D):
    """Per-taxon mean delta score by a loop over quartets (Holland, Huber, Dress & Moulton 2002,
    "Delta plots: a tool for analyzing phylogenetic distance data", Mol Biol Evol 19:2051-2059:
    with the three pair sums S <= M <= L of a quartet, delta = (L - M) / (L - S))."""
    n = len(D)
    tot, cnt = np.zeros(n), np.zeros(n)
    for q in itertools.combinations(range(n), 4):
        a, b, c, d = q
        s = sorted([D[a, b] + D[c, d], D[a, c] + D[b, d], D[a, d] + D[b, c]])
        if s[2] - s[0] <= 0:
            continue
        delta = (s[2] - s[1]) / (s[2] - s[0])
        for t in q:
            tot[t] += delta
            cnt[t] += 1
    return tot / cnt


def test_delta_evidence_matches_a_quartet_loop():
    rng = np.random.default_rng(11)
    X = rng.random((9, 3))
    D = np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1))
    dm = DistanceMatrix.from_array(D)
    rep = find_suspects(dm)
    want = _brute_delta(D)
    got = {s.label: s.evidence["delta"]["value"] for s in rep.ranking}
    for i, lab in enumerate(dm.labels):
        assert got[lab] == pytest.approx(want[i], rel=1e-9)
        # typical is the median over taxa (Iglewicz & Hoaglin 1993)
    assert rep.ranking[0].evidence["delta"]["typical"] == pytest.approx(float(np.median(want)), rel=1e-9)


def test_rank_correlation_evidence_matches_scipy():
    sim = plant_chimera(simulate(14, 400, seed=6), "t04")
    aln, dm = _data(sim)
    rep = find_suspects(dm, alignment=aln, blocks=2)   # one cut: columns 1-200 and 201-400
    codes = aln.codes
    for s in rep.ranking:
        i = aln.labels.index(s.label)
        left, right = [], []
        for j in range(aln.n):
            if j == i:
                continue
            for part, out in ((slice(0, 200), left), (slice(200, 400), right)):
                x, y = codes[i, part], codes[j, part]
                both = (x < 4) & (y < 4)
                out.append(float((x[both] != y[both]).sum()) / both.sum())
        want = spearmanr(left, right).statistic                      # scipy as the outside reference
        assert s.evidence["block_rank_correlation"]["value"] == pytest.approx(want, abs=1e-9)
    assert rep.ranking[0].label == "t04"


def test_gap_fraction_and_missing_fraction_plain_counts():
    aln = Alignment.from_sequences(["a", "b", "c", "d", "e"],
                                   ["ACGTACGTAC", "ACGTAC--AC", "A-G-A-G-AC", "ACGTACGTAA", "ACGAACGTAC"], "dna")
    dm = pairwise_distances(aln, "p", warn=False, progress=False).matrix
    rep = find_suspects(dm, alignment=aln)
    ev = {s.label: s.evidence for s in rep.ranking}
    assert ev["b"]["gap_fraction"]["value"] == pytest.approx(0.2)
    assert ev["c"]["gap_fraction"]["value"] == pytest.approx(0.4)
    # c shares 6 columns with a, d, e and 4 with b: median 6
    assert ev["c"]["compared_columns"]["value"] == 6.0


def test_spearman_rows_matches_scipy_with_ties_and_gaps():
    rng = np.random.default_rng(3)
    A = rng.integers(0, 5, (6, 12)).astype(float)
    B = A + rng.normal(0, 2, A.shape)
    A[2, 3] = np.nan
    got = spearman_rows(A, B)
    for i in range(6):
        ok = np.isfinite(A[i]) & np.isfinite(B[i])
        assert got[i] == pytest.approx(spearmanr(A[i, ok], B[i, ok]).statistic, abs=1e-12)


def test_robust_z_is_the_modified_z_score():
    # Iglewicz & Hoaglin (1993), "How to Detect and Handle Outliers": M = 0.6745 (x - median) / MAD
    x = np.array([2.0, 3.0, 3.5, 4.0, 9.0, 3.2])
    z, med, scale = robust_z(x, floor=0.0)
    mad = np.median(np.abs(x - np.median(x)))
    assert z == pytest.approx(0.6745 * (x - np.median(x)) / mad, rel=1e-3)
    z2, _, s2 = robust_z(np.zeros(5), floor=0.5)            # no spread: the floor stands in
    assert s2 == 0.5 and not z2.any()


def test_nearest_shift_sees_a_swap_of_relatives():
    n = np.full((1, 6), 500.0)
    left = np.array([[0.05, 0.06, 0.07, 0.3, 0.31, 0.32]])
    same = nearest_shift(left, left, n, k=3)
    swapped = nearest_shift(left, left[:, ::-1].copy(), n, k=3)
    assert same[0] == 0.0
    # the three nearest on the left are 0.25 farther on the right: about 15 standard errors
    assert swapped[0] > 10


# ------------------------------------------------------------ edges
def test_missing_entries_handled():
    sim = simulate(12, 400, seed=8)
    aln, dm = _data(sim)
    D = np.array(dm.values)
    for j in range(1, 7):                                  # t01 loses half its distances
        D[0, j] = D[j, 0] = np.nan
    dmm = DistanceMatrix.from_array(D, dm.labels)
    rep = find_suspects(dmm, alignment=aln)
    top = rep.ranking[0]
    assert top.label == "t01"
    assert top.evidence["missing_fraction"]["value"] == pytest.approx(6 / 11)
    assert top.score >= THRESHOLD
    assert any("missing" in r for r in top.reasons)
    json.dumps(rep.to_dict(), allow_nan=False)


def test_complete_core_drops_the_most_missing():
    D = np.zeros((4, 4))
    D[0, 1] = D[1, 0] = D[0, 2] = D[2, 0] = np.nan
    assert complete_core(D).tolist() == [1, 2, 3]


@pytest.mark.parametrize("n", [1, 2, 3])
def test_fewer_than_four_taxa(n):
    D = np.arange(n * n, dtype=float).reshape(n, n)
    D = D + D.T
    np.fill_diagonal(D, 0)
    rep = find_suspects(DistanceMatrix.from_array(D))
    assert isinstance(rep, SuspectReport)
    assert rep.suspects == [] and len(rep.ranking) == n
    assert all(isinstance(s, Suspect) and s.score == 0.0 for s in rep.ranking)
    json.dumps(rep.to_dict(), allow_nan=False)


def test_alignment_without_a_matrix_label_is_refused():
    sim = simulate(6, 100, seed=1)
    aln, dm = _data(sim)
    other = aln.subset(list(aln.labels[:5]))
    with pytest.raises(InputError, match="taxon 't06' of the matrix is not in the alignment"):
        find_suspects(dm, alignment=other)


def test_bad_options_refused():
    _, dm = _data(simulate(6, 100, seed=1))
    with pytest.raises(InputError):
        find_suspects(dm, replicates=-1)
    with pytest.raises(InputError):
        find_suspects(dm, threshold=math.inf)
    with pytest.raises(InputError):
        find_suspects(dm, blocks=1)


def test_smallest_matches_a_stable_argsort():
    # the partial sort must pick and order exactly as a full stable sort (ties by position)
    from seqdist.audit.suspects import _smallest

    rng = np.random.default_rng(0)
    for _ in range(100):
        a = rng.integers(0, 6, (7, 15)).astype(float)
        a[rng.random(a.shape) < 0.1] = np.inf
        k = int(rng.integers(1, 16))
        assert (_smallest(a, k) == np.argsort(a, axis=1, kind="stable")[:, :k]).all()


def test_short_alignment_skips_the_block_statistics():
    aln = Alignment.from_sequences(["a", "b", "c", "d", "e"], ["ACGTAC", "ACGTAA", "ACGAAC", "TCGTAC", "ACCTAC"],
                                   "dna")
    dm = pairwise_distances(aln, "p", warn=False, progress=False).matrix
    rep = find_suspects(dm, alignment=aln, blocks=4)           # 6 columns cannot make 4 blocks of 2
    assert "block_incongruence" not in rep.statistics
    assert "gap_fraction" in rep.statistics
    with pytest.raises(InputError, match="gap treatment"):
        find_suspects(dm, alignment=aln, gaps="none")
