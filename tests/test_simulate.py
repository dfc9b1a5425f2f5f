"""The seeded simulator, its command and the demo data in example_sequences/.

Outside references used here:
* Jukes & Cantor (1969), "Evolution of protein molecules", in Mammalian Protein
  Metabolism: P(different) = 3/4 (1 - exp(-4d/3)) for a path of d expected
  substitutions per site.
* Kimura (1980), "A simple method for estimating evolutionary rates of base
  substitutions...", J. Mol. Evol. 16:111-120: transition and transversion
  proportions P = 1/4 + 1/4 e^{-4bt} - 1/2 e^{-2(a+b)t}, Q = 1/2 - 1/2 e^{-4bt}
  (a the transition rate, 2b the transversion rate, d = (a + 2b) t).
* Jin & Nei (1990), Mol. Biol. Evol. 7:82-102: the JC69 distance with gamma
  rates, d = 3/4 alpha [(1 - 4p/3)^(-1/alpha) - 1]; inverted here to
  p = 3/4 [1 - (1 + 4d/(3 alpha))^(-alpha)] (the gamma moment generating function).
* Yang (1994), J. Mol. Evol. 39:306-314: discrete gamma category means.
* Biopython (Bio.Phylo, Bio.AlignIO) and dendropy as independent readers of the
  Newick and Stockholm files; scipy.linalg.expm and scipy.integrate.quad as
  plain references.
"""

from __future__ import annotations

import filecmp
import json
import os
import re
import subprocess
import sys

import numpy as np
import pytest

from seqdist.core.errors import InputError
from seqdist.simulate import (
    format_fasta,
    format_stockholm,
    gamma_rates,
    hky85,
    k80,
    make_model,
    plant_chimera,
    plant_contaminant,
    plant_gappy,
    plant_misread,
    plant_saturated_pair,
    protein_poisson,
    random_tree,
    simulate,
    summary,
)

from conftest import EXAMPLES, ROOT, open_text, run_cli

DATA_FILES = ["dna_clean.fasta", "dna_clean.true.nwk", "dna_clean.sim.json",
              "protein.fasta", "protein.true.nwk", "protein.sim.json", "protein_small.sto",
              "dna_trouble.fasta", "dna_trouble.true.nwk", "dna_trouble.sim.json"]
LABEL_RE = re.compile(r"^[A-Za-z0-9_]+$")


# -------------------------------------------------------------- helpers (our own, independent of seqdist)
def read_fasta(path):
    recs, name, parts = [], None, []
    with open(path) as fh:
        for line in fh:
            line = line.strip()
            if line.startswith(">"):
                if name is not None:
                    recs.append((name, "".join(parts)))
                name, parts = line[1:].split()[0], []
            elif line:
                parts.append(line)
    if name is not None:
        recs.append((name, "".join(parts)))
    return recs


def p_and_compared(a: str, b: str):
    """Mismatches / compared columns over columns where both rows hold a residue (common practice)."""
    both = [(x, y) for x, y in zip(a, b) if x != "-" and y != "-"]
    return sum(x != y for x, y in both) / len(both), len(both)


def ts_tv(a: str, b: str):
    """Transition and transversion proportions (A<->G, C<->T are transitions; Kimura 1980)."""
    purine = set("AG")
    pairs = [(x, y) for x, y in zip(a, b) if x != "-" and y != "-"]
    ts = sum(x != y and ((x in purine) == (y in purine)) for x, y in pairs)
    tv = sum((x in purine) != (y in purine) for x, y in pairs)
    return ts / len(pairs), tv / len(pairs), len(pairs)


def as_matrix(records):
    return np.array([np.frombuffer(s.encode(), dtype=np.uint8) for _, s in records])


def biopython_leaves(newick_text):
    import io

    from Bio import Phylo

    tree = Phylo.read(io.StringIO(newick_text), "newick")
    return tree, [c.name for c in tree.get_terminals()]


def dendropy_tree(path):
    import dendropy

    return dendropy.Tree.get(path=str(path), schema="newick", preserve_underscores=True)


# -------------------------------------------------------------- determinism
def test_same_seed_same_result_api():
    kw = dict(gamma=0.5, indel_rate=0.02, kappa=3.0)
    a, b = simulate(12, 300, "dna", seed=5, **kw), simulate(12, 300, "dna", seed=5, **kw)
    assert a.records == b.records and a.tree.newick() == b.tree.newick()
    assert format_fasta(a.records) == format_fasta(b.records)
    c = simulate(12, 300, "dna", seed=6, **kw)
    assert c.records != a.records and c.tree.newick() != a.tree.newick()


def test_same_seed_identical_files_cli(tmp_path):
    def go(folder, seed):
        folder.mkdir()
        p = run_cli("simulate", "-o", folder / "a.fasta", "--tree-out", folder / "t.nwk", "--taxa", 12,
                    "--columns", 200, "--seed", seed, "--gamma", 0.7, "--indels", 0.02, "--gappy", "auto",
                    "--chimera", "auto", "--saturate", "auto", "--stockholm-out", folder / "s.sto",
                    "--summary-out", folder / "s.json")
        assert p.returncode == 0, p.stderr
        return folder

    one, two, other = go(tmp_path / "one", 9), go(tmp_path / "two", 9), go(tmp_path / "other", 10)
    names = ["a.fasta", "t.nwk", "s.sto", "s.json"]
    for name in names:
        assert (one / name).read_bytes() == (two / name).read_bytes(), name
    assert (one / "a.fasta").read_bytes() != (other / "a.fasta").read_bytes()
    # The command is a thin wrapper: the API with the same seed and steps gives the same bytes.
    rng = np.random.default_rng(9)
    sim = simulate(12, 200, "dna", rng, gamma=0.7, indel_rate=0.02)
    sim = plant_saturated_pair(plant_chimera(plant_gappy(sim, None, 0.7, rng=rng), rng=rng), None, 50.0, rng=rng)
    assert format_fasta(sim.records) == (one / "a.fasta").read_text()
    assert sim.tree.newick() == (one / "t.nwk").read_text()


# -------------------------------------------------------------- tree and alignment shape
@pytest.mark.parametrize("clock", [False, True])
def test_tree_leaves_equal_ids_two_readers(tmp_path, clock):
    sim = simulate(17, 150, "protein", seed=3, ultrametric=clock, indel_rate=0.01, label_prefix="taxon_")
    ids = [lab for lab, _ in sim.records]
    path = tmp_path / "t.nwk"
    path.write_text(sim.tree.newick())
    _, bio = biopython_leaves(path.read_text())
    assert sorted(bio) == sorted(ids) and len(set(bio)) == len(ids)
    tree = dendropy_tree(path)
    assert sorted(nd.taxon.label for nd in tree.leaf_node_iter()) == sorted(ids)
    assert all(LABEL_RE.match(x) for x in ids)


def test_path_lengths_agree_with_biopython_and_dendropy(tmp_path):
    sim = simulate(15, 10, seed=8)
    path = tmp_path / "t.nwk"
    path.write_text(sim.tree.newick())
    bio, _ = biopython_leaves(path.read_text())
    D = sim.tree.path_lengths()
    labels = sim.tree.labels
    tree = dendropy_tree(path)
    pdm = tree.phylogenetic_distance_matrix()
    taxa = {t.label: t for t in tree.taxon_namespace}
    for i in range(len(labels)):
        for j in range(i + 1, len(labels)):
            assert D[i, j] == pytest.approx(bio.distance(labels[i], labels[j]), abs=1e-9)
            assert D[i, j] == pytest.approx(pdm.patristic_distance(taxa[labels[i]], taxa[labels[j]]), abs=1e-9)
    assert bio.total_branch_length() == pytest.approx(sim.tree.total_length(), abs=1e-9)


def test_clock_tree_is_ultrametric_and_scaled():
    tr = random_tree(40, np.random.default_rng(1), branch_mean=0.03, ultrametric=True)
    depth = np.zeros(len(tr.parent))
    for node in range(len(tr.parent) - 2, -1, -1):
        depth[node] = depth[tr.parent[node]] + tr.length[node]
    leaf_depth = depth[:40]
    assert leaf_depth.max() - leaf_depth.min() < 1e-4          # rounding to 6 decimals only
    assert tr.length[:-1].mean() == pytest.approx(0.03, abs=1e-5)
    assert tr.length[:-1].min() > 0


@pytest.mark.parametrize("alphabet", ["dna", "protein"])
def test_rows_same_length_gaps_as_runs(alphabet):
    L = 800
    sim = simulate(20, L, alphabet, seed=4, indel_rate=0.03, indel_length=4, gamma=1.0)
    assert {len(s) for _, s in sim.records} == {L}
    X = as_matrix(sim.records)
    gap = X == ord("-")
    assert gap.any() and not gap.all(axis=0).any()        # gaps exist; no column is gaps only
    letters = set(("ACGT" if alphabet == "dna" else "ACDEFGHIKLMNPQRSTVWY") + "-")
    assert set("".join(s for _, s in sim.records)) <= letters
    # gaps come in runs: mean run length clearly above 1
    runs = sum(int(np.sum(np.diff(np.concatenate([[0], g.astype(int), [0]])) == 1)) for g in gap)
    assert gap.sum() / runs > 1.5
    assert sim.site_rates.shape == (L,)


# -------------------------------------------------------------- models against published formulas
def test_models_are_normalised_and_reversible():
    from scipy.linalg import expm

    for m in (hky85(4.0, [0.1, 0.2, 0.3, 0.4]), k80(2.5), protein_poisson(), make_model("protein", "poisson-f")):
        pi, Q = m.freqs, m.Q
        assert -(pi * np.diag(Q)).sum() == pytest.approx(1.0, abs=1e-12)   # one substitution per unit time
        assert np.allclose(Q.sum(axis=1), 0, atol=1e-12)
        assert np.allclose(pi[:, None] * Q, (pi[:, None] * Q).T, atol=1e-12)  # detailed balance
        P = expm(Q * 0.7)
        assert np.allclose(pi @ P, pi, atol=1e-12)


def test_eigen_rows_match_expm():
    # The per-site route (eigendecomposition) against scipy.linalg.expm, a plain reference.
    from scipy.linalg import expm

    m = hky85(3.0, [0.35, 0.15, 0.2, 0.3])
    rng = np.random.default_rng(0)
    rates = rng.gamma(0.5, 2.0, size=50)
    parents = rng.integers(4, size=50)
    rows = m.transition_rows(0.4, rates, parents)
    ref = np.array([expm(m.Q * r * 0.4)[a] for r, a in zip(rates, parents)])
    assert np.allclose(rows, ref, atol=1e-12)
    cats = m.transition_matrices(0.4, rates[:3])
    assert np.allclose(cats[1], expm(m.Q * rates[1] * 0.4), atol=1e-14)


def test_k80_jump_probabilities_match_kimura_1980():
    from scipy.linalg import expm

    kappa, d = 3.0, 0.37
    m = k80(kappa)
    P = expm(m.Q * d)
    b = d / (kappa + 2)       # transversion rate x time (each of two transversions); a = kappa b
    a = kappa * b
    # From A: A->G is the transition; A->C and A->T the transversions (Kimura 1980).
    assert P[0, 2] == pytest.approx(0.25 + 0.25 * np.exp(-4 * b) - 0.5 * np.exp(-2 * (a + b)), abs=1e-12)
    assert P[0, 1] + P[0, 3] == pytest.approx(0.5 - 0.5 * np.exp(-4 * b), abs=1e-12)


def test_gamma_category_rates():
    # From memory: Yang (1994) table values for alpha = 0.5, four categories.
    assert np.allclose(gamma_rates(0.5, 4), [0.0334, 0.2519, 0.8203, 2.8944], atol=6e-5)
    # Plain reference: the category means by numerical integration of the gamma density.
    from scipy import integrate, stats

    for alpha, k in [(0.3, 5), (2.0, 4), (1.0, 8)]:
        dist = stats.gamma(alpha, scale=1 / alpha)
        cuts = np.concatenate([[0], dist.ppf(np.arange(1, k) / k), [np.inf]])
        ref = [k * integrate.quad(lambda r: r * dist.pdf(r), lo, hi)[0] for lo, hi in zip(cuts[:-1], cuts[1:])]
        assert np.allclose(gamma_rates(alpha, k), ref, rtol=1e-6)
        assert gamma_rates(alpha, k).mean() == pytest.approx(1.0)


def _observed_vs_path(sim):
    D = sim.tree.path_lengths()
    pos = {lab: i for i, lab in enumerate(sim.tree.labels)}
    recs = dict(sim.records)
    labs = sorted(recs)
    for i, x in enumerate(labs):
        for y in labs[i + 1:]:
            yield recs[x], recs[y], D[pos[x], pos[y]]


def test_p_distance_matches_jc69_for_true_path_length():
    # JC69 (Jukes & Cantor 1969): P(different) = 3/4 (1 - exp(-4d/3)); K80 with kappa = 1 is JC69.
    sim = simulate(5, 60000, "dna", seed=12, kappa=1.0, branch_mean=0.15)
    checked = 0
    for a, b, d in _observed_vs_path(sim):
        p, n = p_and_compared(a, b)
        expect = 0.75 * (1 - np.exp(-4 * d / 3))
        se = np.sqrt(expect * (1 - expect) / n)
        assert abs(p - expect) < 4 * se, (p, expect, se)
        checked += 1
    assert checked == 10


def test_transitions_and_transversions_match_k80():
    kappa = 4.0
    sim = simulate(4, 80000, "dna", seed=13, kappa=kappa, branch_mean=0.2)
    for a, b, d in _observed_vs_path(sim):
        P, Q, n = ts_tv(a, b)
        bt = d / (kappa + 2)
        at = kappa * bt
        eP = 0.25 + 0.25 * np.exp(-4 * bt) - 0.5 * np.exp(-2 * (at + bt))   # Kimura 1980
        eQ = 0.5 - 0.5 * np.exp(-4 * bt)
        assert abs(P - eP) < 4 * np.sqrt(eP * (1 - eP) / n)
        assert abs(Q - eQ) < 4 * np.sqrt(eQ * (1 - eQ) / n)


@pytest.mark.parametrize("categories", [0, 4])
def test_gamma_rates_lower_p_as_predicted(categories):
    alpha = 0.4
    sim = simulate(4, 60000, "dna", seed=14, kappa=1.0, branch_mean=0.5, gamma=alpha, gamma_categories=categories)
    flat = simulate(4, 60000, "dna", seed=14, kappa=1.0, branch_mean=0.5)
    assert sim.tree.newick() == flat.tree.newick()      # same tree: the tree is drawn first
    rates = gamma_rates(alpha, 4)
    for (a, b, d), (fa, fb, _) in zip(_observed_vs_path(sim), _observed_vs_path(flat)):
        p, n = p_and_compared(a, b)
        if categories == 0:
            expect = 0.75 * (1 - (1 + 4 * d / (3 * alpha)) ** (-alpha))        # Jin & Nei 1990
        else:
            expect = 0.75 * (1 - np.mean(np.exp(-4 * d * rates / 3)))           # Yang 1994 categories
        assert abs(p - expect) < 4 * np.sqrt(expect * (1 - expect) / n), (p, expect)
        if d > 0.3:
            # sanity: rate variation leaves more sites unchanged than equal rates do
            assert p < p_and_compared(fa, fb)[0]


# -------------------------------------------------------------- planted trouble
def test_plants_do_what_they_say():
    sim = simulate(12, 600, "dna", seed=21, indel_rate=0.01, gamma=1.0)
    rng = np.random.default_rng(0)
    sim = plant_gappy(sim, None, 0.7, rng=rng)
    g = sim.planted[-1]["labels"][0]
    assert sim.sequence(g).count("-") == round(0.7 * 600)
    sim = plant_chimera(sim, rng=rng)
    c, donor = sim.planted[-1]["label"], sim.planted[-1]["donor"]
    assert g not in (c, donor)
    D = sim.tree.path_lengths()
    pos = {lab: i for i, lab in enumerate(sim.tree.labels)}
    others = [x for x in sim.labels if x not in (g, c)]
    assert D[pos[c], pos[donor]] == max(D[pos[c], pos[x]] for x in others)
    assert sim.sequence(c)[300:] == sim.sequence(donor)[300:]
    before = sim.tree.length.copy()
    sim = plant_saturated_pair(sim, rng=rng, extra=50.0)
    pair = sim.planted[-1]["labels"]
    assert not set(pair) & {g, c, donor}
    for lab in pair:
        assert sim.tree.length[pos[lab]] == pytest.approx(before[pos[lab]] + 50.0)
    p, _ = p_and_compared(sim.sequence(pair[0]), sim.sequence(pair[1]))
    assert p == pytest.approx(sim.planted[-1]["p_distance"], abs=1e-6)
    assert abs(p - 0.75) < 0.08       # random draws from equal frequencies: p near 3/4


def _changed_rows(before, after):
    return [a[0] for a, b in zip(before.records, after.records) if a != b]


def test_misread_random_changes_only_its_stretches():
    """Issue 15: base-calling errors in a few stretches of one row, seeded and recorded."""
    sim = simulate(10, 800, "dna", seed=31, indel_rate=0.01, gamma=1.0)
    out = plant_misread(sim, None, stretches=3, stretch_length=60, rng=5)
    note = out.planted[-1]
    lab, = note["labels"]
    assert note["kind"] == "misread" and note["how"] == "random" and _changed_rows(sim, out) == [lab]
    spans = note["stretches"]
    assert len(spans) == 3 and all(b - a + 1 == 60 for a, b in spans)
    assert all(spans[i][1] < spans[i + 1][0] for i in range(2))            # in order, not overlapping
    inside = np.zeros(800, bool)
    for a, b in spans:
        inside[a - 1:b] = True
    old = np.frombuffer(sim.sequence(lab).encode(), np.uint8)
    new = np.frombuffer(out.sequence(lab).encode(), np.uint8)
    assert np.array_equal(old[~inside], new[~inside])                       # nothing outside the stretches
    assert np.array_equal(old == ord("-"), new == ord("-"))                 # a misread base is still a base
    res = inside & (old != ord("-"))
    diff = int((old[res] != new[res]).sum())
    assert diff == note["changed_columns"]
    # Draws from equal frequencies match the old base with probability 1/4 (common practice): about 3/4 differ.
    n = int(res.sum())
    assert abs(diff / n - 0.75) < 4 * np.sqrt(0.75 * 0.25 / n)
    assert summary(out, 31)["planted"] == [note]
    again = plant_misread(sim, None, stretches=3, stretch_length=60, rng=5)
    other = plant_misread(sim, lab, stretches=3, stretch_length=60, rng=6)
    assert again.records == out.records and again.planted == out.planted
    assert other.sequence(lab) != out.sequence(lab)


def test_misread_shift_slides_the_stretch():
    sim = simulate(6, 300, "dna", seed=32, indel_rate=0.02)
    out = plant_misread(sim, "t02", stretches=2, stretch_length=40, how="shift", shift=3, rng=1)
    note = out.planted[-1]
    assert note["how"] == "shift" and note["shift"] == 3 and _changed_rows(sim, out) == ["t02"]
    old, new = sim.sequence("t02"), out.sequence("t02")
    for a, b in note["stretches"]:
        block = old[a - 1:b]
        assert new[a - 1:b] == block[3:] + block[:3]
    assert sorted(new) == sorted(old)                                        # same residues, moved
    with pytest.raises(InputError, match="more than half of the 300 columns"):
        plant_misread(sim, "t02", stretches=4, stretch_length=40, rng=1)
    with pytest.raises(InputError, match="unknown misread kind"):
        plant_misread(sim, "t02", how="garble", rng=1)


def _k80_p(d, kappa):
    """Expected p-distance at path length d under K80 (Kimura 1980): P + Q, with bt = d / (kappa + 2)."""
    bt = d / (kappa + 2)
    at = kappa * bt
    P = 0.25 + 0.25 * np.exp(-4 * bt) - 0.5 * np.exp(-2 * (at + bt))
    Q = 0.5 - 0.5 * np.exp(-4 * bt)
    return P + Q


def test_contaminant_is_a_mutated_consensus():
    """Issue 15: one row replaced by the column-wise consensus evolved along `distance`; tree unchanged."""
    sim = simulate(16, 3000, "dna", seed=33, kappa=3.0, indel_rate=0.005)
    out = plant_contaminant(sim, None, distance=0.4, rng=2)
    note = out.planted[-1]
    lab, = note["labels"]
    assert note["kind"] == "contaminant" and _changed_rows(sim, out) == [lab]
    assert out.tree.newick() == sim.tree.newick()                            # wrong data, not a new history
    old, new = sim.sequence(lab), out.sequence(lab)
    assert [c == "-" for c in old] == [c == "-" for c in new]                 # keeps the row's gap pattern
    # Our own consensus (majority of non-gap residues); ties are rare with 16 rows and do not move p much.
    X = as_matrix(sim.records)
    counts = np.stack([(X == ord(c)).sum(axis=0) for c in "ACGT"])
    cons = "".join("ACGT"[i] for i in counts.argmax(axis=0))
    p, n = p_and_compared(new, cons)
    assert abs(p - _k80_p(0.4, 3.0)) < 4 * np.sqrt(0.3 * 0.7 / n) + 0.01, p
    assert p == pytest.approx(note["p_to_consensus"], abs=0.01)
    assert p_and_compared(new, old)[0] == pytest.approx(note["p_to_original"], abs=1e-6)
    assert summary(out, 33)["planted"] == [note]
    assert plant_contaminant(sim, None, distance=0.4, rng=2).records == out.records
    assert plant_contaminant(sim, lab, distance=0.4, rng=3).sequence(lab) != new
    with pytest.raises(InputError, match="contaminant distance must be above 0"):
        plant_contaminant(sim, lab, distance=0, rng=1)


def test_new_plants_through_the_cli_match_the_api(tmp_path):
    """The command applies misread and contaminant after the older kinds, from the same generator."""
    p = run_cli("simulate", "-o", tmp_path / "a.fasta", "--tree-out", tmp_path / "t.nwk", "--taxa", 12,
                "--columns", 400, "--seed", 8, "--gappy", "auto", "--misread", "auto", "--misread-stretches", 2,
                "--misread-length", 30, "--contaminant", "auto", "--contaminant-distance", 0.6,
                "--summary-out", tmp_path / "s.json")
    assert p.returncode == 0, p.stderr
    assert "misread" in p.stderr and "contaminant" in p.stderr
    rng = np.random.default_rng(8)
    sim = plant_gappy(simulate(12, 400, "dna", rng), None, 0.7, rng=rng)
    sim = plant_misread(sim, None, 2, 30, rng=rng)
    sim = plant_contaminant(sim, None, 0.6, rng=rng)
    assert format_fasta(sim.records) == (tmp_path / "a.fasta").read_text()
    planted = json.loads((tmp_path / "s.json").read_text())["planted"]
    assert [x["kind"] for x in planted] == ["gappy", "misread", "contaminant"]
    assert len({x["labels"][0] for x in planted}) == 3                        # auto picks unused taxa
    assert planted == json.loads(json.dumps(sim.planted))


# -------------------------------------------------------------- the committed demo data
def test_demo_files_regenerate_byte_for_byte(tmp_path):
    env = dict(os.environ, SEQDIST=f"{sys.executable} -m seqdist.cli")
    p = subprocess.run(["sh", os.path.join(EXAMPLES, "regenerate.sh"), str(tmp_path)], env=env, cwd=ROOT,
                       capture_output=True, text=True, timeout=300)
    assert p.returncode == 0, p.stderr
    for name in DATA_FILES:
        assert filecmp.cmp(os.path.join(EXAMPLES, name), tmp_path / name, shallow=False), name
    total = sum(os.path.getsize(os.path.join(EXAMPLES, f)) for f in os.listdir(EXAMPLES))
    assert total < 1_000_000


@pytest.mark.parametrize("stem", ["dna_clean", "protein", "dna_trouble"])
def test_demo_sets_shape(stem):
    recs = read_fasta(os.path.join(EXAMPLES, stem + ".fasta"))
    ids = [r[0] for r in recs]
    assert all(LABEL_RE.match(x) for x in ids) and len(set(ids)) == len(ids)
    assert len({len(s) for _, s in recs}) == 1
    meta = json.loads(open_text(os.path.join(EXAMPLES, stem + ".sim.json")))
    assert (len(recs), len(recs[0][1])) == (meta["taxa"], meta["length"])
    text = open_text(os.path.join(EXAMPLES, stem + ".true.nwk"))
    _, bio = biopython_leaves(text)
    assert sorted(bio) == sorted(ids)
    tree = dendropy_tree(os.path.join(EXAMPLES, stem + ".true.nwk"))
    assert sorted(nd.taxon.label for nd in tree.leaf_node_iter()) == sorted(ids)


def test_clean_dna_set_is_clean():
    recs = read_fasta(os.path.join(EXAMPLES, "dna_clean.fasta"))
    assert (len(recs), len(recs[0][1])) == (30, 1200)
    worst = max(p_and_compared(a, b)[0] for i, (_, a) in enumerate(recs) for _, b in recs[i + 1:])
    assert worst < 0.5                                   # far from JC69 saturation (3/4)
    assert max(s.count("-") for _, s in recs) < 0.2 * 1200


def test_trouble_set_has_what_the_readme_says():
    recs = dict(read_fasta(os.path.join(EXAMPLES, "dna_trouble.fasta")))
    planted = {n["kind"]: n for n in json.loads(open_text(os.path.join(EXAMPLES, "dna_trouble.sim.json")))["planted"]}
    readme = open_text(os.path.join(EXAMPLES, "README.md"))
    g = planted["gappy"]["labels"][0]
    assert recs[g].count("-") >= 0.7 * 1200 and f"`{g}`" in readme
    c, donor = planted["chimera"]["label"], planted["chimera"]["donor"]
    assert recs[c][600:] == recs[donor][600:] and f"`{c}`" in readme and f"`{donor}`" in readme
    x, y = planted["saturated_pair"]["labels"]
    p, n = p_and_compared(recs[x], recs[y])
    # JC69 (Jukes & Cantor 1969) is undefined when 1 - 4p/3 <= 0, i.e. p >= 3/4.
    assert p >= 0.75 and n > 1000 and f"`{x}`" in readme and f"`{y}`" in readme
    assert 1 - 4 * p / 3 <= 0


def test_stockholm_copy_reads_back_with_biopython():
    from Bio import AlignIO

    aln = AlignIO.read(os.path.join(EXAMPLES, "protein_small.sto"), "stockholm")
    fasta = read_fasta(os.path.join(EXAMPLES, "protein.fasta"))[:len(aln)]
    assert [r.id for r in aln] == [r[0] for r in fasta]
    X = as_matrix(fasta)
    keep = ~(X == ord("-")).all(axis=0)
    expect = [bytes(row[keep]).decode() for row in X]
    got = [str(r.seq).replace(".", "-").upper() for r in aln]
    assert got == expect
    raw = open_text(os.path.join(EXAMPLES, "protein_small.sto"))
    body = "".join(line.split()[1] for line in raw.splitlines() if line and not line.startswith(("#", "//")))
    assert "." in body and any(ch.islower() for ch in body)      # insert columns are there


def test_format_stockholm_marks_insert_columns():
    text = format_stockholm([("a", "AC-DE"), ("b", "A--D-"), ("c", "A-GDE")], name="x")
    rows = {line.split()[0]: line.split()[1] for line in text.splitlines()[2:5]}
    assert rows == {"a": "Ac.DE", "b": "A..D-", "c": "A.gDE"}
    assert text.splitlines()[5] == "#=GC RF x..xx" and text.endswith("\n//\n")


# -------------------------------------------------------------- bad options
@pytest.mark.parametrize("args, needle", [
    (["--taxa", "2", "--columns", "10"], "--taxa must be an integer from 3 to 20000, got 2"),
    (["--taxa", "5", "--columns", "0"], "--columns must be an integer from 1 to 1000000, got 0"),
    (["--taxa", "5", "--columns", "10", "--kappa", "-1"], "--kappa must be a finite number above 0"),
    (["--taxa", "5", "--columns", "10", "--gappy", "t99"], "no taxon labelled 't99'"),
    (["--taxa", "4", "--columns", "10", "--gappy", "auto", "--chimera", "auto", "--saturate", "auto"],
     "needs at least 5 taxa"),
    (["--taxa", "5", "--columns", "10", "--alphabet", "protein", "--model", "k80"], "not a protein model"),
    (["--taxa", "five", "--columns", "10"], "--taxa must be an integer from 3 to 20000, got five"),
    # issue 14: every numeric option is checked where it is read, and sizes that would exhaust memory are refused
    (["--taxa", "5", "--columns", "10", "--seed", "-1"], "--seed must be an integer from 0"),
    (["--taxa", "1000000", "--columns", "1000000"], "--taxa must be an integer from 3 to 20000"),
    (["--taxa", "1000", "--columns", "1000000"], "--taxa 1000 x --columns 1000000 is 1000000000 cells, more than "
                                                "the limit of 20000000"),
    (["--taxa", "5", "--columns", "2000000"], "--columns must be an integer from 1 to 1000000"),
    (["--taxa", "5", "--columns", "60", "--indels", "1e6"], "indel events"),
    (["--taxa", "5", "--columns", "60", "--indels", "100/1000"], "lower --indels RATE or --indels MEAN_LENGTH"),
    (["--taxa", "5", "--columns", "10", "--indels", "-0.1"],
     "argument --indels: rate must be a finite number >= 0, got -0.1"),
    (["--taxa", "5", "--columns", "10", "--indels", "0.1/0.5"],
     "argument --indels: mean length must be a finite number >= 1, got 0.5"),
    (["--taxa", "5", "--columns", "10", "--branch-mean", "1e300"],
     "--branch-mean must be a finite number above 0 and at most 100"),
    (["--taxa", "5", "--columns", "10", "--branch-mean", "nan"], "--branch-mean must be"),
    (["--taxa", "5", "--columns", "10", "--saturate", "auto", "--saturate-length", "1e300"],
     "--saturate-length must be a finite number above 0 and at most 1000"),
    (["--taxa", "5", "--columns", "10", "--gamma", "0.5/100000"],
     "argument --gamma: categories must be an integer from 0 to 256 (or 'continuous'), got 100000"),
    (["--taxa", "5", "--columns", "10", "--gamma", "0"],
     "argument --gamma: shape must be a finite number above 0, got 0"),
    (["--taxa", "5", "--columns", "10", "--gappy-fraction", "1"], "--gappy-fraction must be a finite number above 0"),
    (["--taxa", "5", "--columns", "10", "--frequencies", "1,nan,1,1"],
     "argument --frequencies: expected comma-separated positive"),
    (["--taxa", "5", "--columns", "10", "--stockholm-taxa", "1"], "--stockholm-taxa must be an integer >= 2"),
    # issue 15: the misread and contaminant plants
    (["--taxa", "5", "--columns", "60", "--misread", "auto"], "would cover more than half of the 60 columns"),
    (["--taxa", "5", "--columns", "60", "--misread", "t09"], "no taxon labelled 't09'"),
    (["--taxa", "5", "--columns", "60", "--misread-how", "garble"], "argument --misread-how: invalid choice"),
    (["--taxa", "5", "--columns", "60", "--contaminant", "auto", "--contaminant-distance", "0"],
     "--contaminant-distance must be a finite number above 0"),
    (["--taxa", "5", "--columns", "60", "--gappy", "t01", "--contaminant", "t01"], "already used"),
    (["--taxa", "3", "--columns", "60", "--gappy", "auto", "--chimera", "auto", "--misread", "auto"],
     "needs at least 4 taxa"),
    # issue 18: the options of our own; an old name given with its new one is refused
    (["--taxa", "5"], "the following arguments are required: --columns"),
    (["--taxa", "5", "--columns", "10", "--length", "10"], "--length is the old name of --columns; give only"),
    (["--taxa", "5", "--columns", "10", "--gamma", "0.5", "--rate-categories", "8"],
     "--rate-categories is the old name of --gamma"),
    (["--taxa", "5", "--columns", "10", "--gamma", "0.5/"], "argument --gamma: nothing after '/'"),
    (["--taxa", "5", "--columns", "10", "--indels", "x/3"], "argument --indels: rate must be a finite number"),
])
def test_bad_options_exit_2_one_line(tmp_path, capsys, args, needle):
    # In-process through the CLI's one error path (fast); one case below runs as a real process.
    from seqdist.cli import main

    try:
        code = main(["simulate", "-o", str(tmp_path / "a.fasta"), "--tree-out", str(tmp_path / "t.nwk"), *args])
    except SystemExit as exc:  # argparse's own usage errors exit through our parser's error()
        code = exc.code
    assert code == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("seqdist: error: ") and needle in lines[0], lines
    assert list(tmp_path.iterdir()) == []


def test_bad_option_as_a_process(tmp_path):
    p = run_cli("simulate", "-o", tmp_path / "a.fasta", "--tree-out", tmp_path / "t.nwk", "--taxa", 2,
                "--columns", 10)
    assert p.returncode == 2
    assert p.stderr.strip() == ("seqdist: error: --taxa must be an integer from 3 to 20000, got 2 "
                                "(see 'seqdist simulate --help')")
    assert list(tmp_path.iterdir()) == []


def test_size_limits_in_the_api():
    """The limits hold for library callers too, before anything is allocated (issue 14)."""
    from seqdist.simulate import MAX_CELLS, check_size

    with pytest.raises(InputError, match="more than the limit of 20000000"):
        simulate(1000, 1_000_000, seed=1)
    with pytest.raises(InputError, match="parameter 'taxa' must be an integer from 3 to 20000, got 1000000"):
        simulate(1_000_000, 10, seed=1)
    check_size(20, MAX_CELLS // 20)        # the limits themselves are allowed
    with pytest.raises(InputError, match="saturation branch length must be above 0 and at most 1000"):
        plant_saturated_pair(simulate(5, 20, seed=1), ["t01", "t02"], extra=1e300, rng=0)


@pytest.mark.parametrize("model", [k80(2.0), hky85(4.0, [0.3, 0.2, 0.2, 0.3]), protein_poisson()])
def test_transition_rows_stay_finite_on_very_long_branches(model):
    """Far past saturation each row is the stationary distribution (common practice: P(t) -> 1 pi^T);
    before issue 14 a rounding-positive eigenvalue turned exp(t lambda) into inf and the rows into nan,
    and a planted saturated pair came out as two identical rows of 'A'."""
    k = len(model.letters)
    rows = model.transition_rows(1e300, np.ones(k), np.arange(k))
    assert np.isfinite(rows).all()
    assert np.allclose(rows, np.broadcast_to(model.freqs, (k, k)), atol=1e-9)


def test_duplicate_outputs_refused_before_work(tmp_path):
    """Two outputs naming one file would lose one (issue 14): refused, nothing written."""
    keep = tmp_path / "a.fasta"
    keep.write_text("old\n")
    for extra in (["--tree-out", keep], ["--tree-out", tmp_path / "t.nwk", "--summary-out", tmp_path / "t.nwk"],
                  ["--tree-out", tmp_path / "t.nwk", "--stockholm-out", tmp_path / "x" / ".." / "a.fasta"]):
        p = run_cli("simulate", "-o", keep, "--taxa", 5, "--columns", 20, *extra)
        assert p.returncode == 2, p.stderr
        line, = p.stderr.strip().splitlines()
        assert line.startswith("seqdist: error: --") and "both write to" in line
        assert keep.read_text() == "old\n" and sorted(x.name for x in tmp_path.iterdir()) == ["a.fasta"]
