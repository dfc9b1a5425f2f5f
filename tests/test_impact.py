"""seqdist impact: contract keys, values against independent references,
bad input, atomic and deterministic output, the html page."""

from __future__ import annotations

import json
import re
from itertools import combinations

import numpy as np
import pytest

from seqdist import DistanceMatrix
from seqdist.impact.compare import impact
from seqdist.trees import read_newick

from conftest import write_tsv

CONTRACT_KEYS = ["rf", "rf_normalized", "branch_score", "splits_only_before", "splits_only_after",
                 "negative_branches_before", "negative_branches_after"]


def tree_matrix(newick, labels):
    return read_newick(newick).path_lengths(labels)


LABELS = ["a", "b", "c", "d", "e", "f"]
# ((a,b),c,(d,(e,f))) and its NNI neighbour ((a,c),b,(d,(e,f))): RF 2 (Robinson & Foulds 1981)
T1 = "((a:1,b:2):1.5,c:1,(d:1,(e:0.5,f:0.7):0.8):1.2);"
T2 = "((a:1,c:1):1.5,b:2,(d:1,(e:0.5,f:0.7):0.8):1.2);"


@pytest.fixture
def pair(tmp_path):
    before = tmp_path / "before.tsv"
    after = tmp_path / "after.tsv"
    write_tsv(before, LABELS, tree_matrix(T1, LABELS))
    write_tsv(after, LABELS, tree_matrix(T2, LABELS))
    return before, after


def test_contract_keys_and_values(tmp_path, cli, pair):
    before, after = pair
    truth = tmp_path / "truth.nwk"
    truth.write_text(T1 + "\n")
    js = tmp_path / "i.json"
    p = cli("impact", before, after, "--json", js, "--truth", truth)
    assert p.returncode == 0, p.stderr
    r = json.loads(js.read_text())
    for k in CONTRACT_KEYS + ["rf_to_truth_before", "rf_to_truth_after"]:
        assert k in r
    assert r["rf"] == 2 and r["rf_normalized"] == pytest.approx(2 / 6)
    assert r["splits_only_before"] == [["c", "d", "e", "f"]]
    assert r["splits_only_after"] == [["b", "d", "e", "f"]]
    assert r["rf_to_truth_before"] == 0 and r["rf_to_truth_after"] == 2
    assert r["negative_branches_before"] == 0
    # entries changed: exactly the pairs whose path lengths differ (by hand: those
    # crossing the swapped b/c positions)
    D1, D2 = tree_matrix(T1, LABELS), tree_matrix(T2, LABELS)
    iu = np.triu_indices(6, 1)
    assert r["entries_changed"] == int((np.abs(D1 - D2)[iu] > r["tol"]).sum()) and r["entries"] == 15
    assert "2 splits differ" not in p.stdout and "1 split differs" in p.stdout


def test_branch_score_and_rf_match_dendropy(tmp_path):
    import dendropy
    from dendropy.calculate.treecompare import euclidean_distance, symmetric_difference

    rng = np.random.default_rng(5)
    X = rng.uniform(0, 1, (15, 3))
    D = np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1))
    E = D * (1 + rng.uniform(-0.3, 0.3, D.shape))
    E = (E + E.T) / 2
    np.fill_diagonal(E, 0)
    lab = [f"t{k}" for k in range(15)]
    res = impact(DistanceMatrix.from_array(D, lab), DistanceMatrix.from_array(E, lab), "bionj")
    tns = dendropy.TaxonNamespace()
    a = dendropy.Tree.get(data=res.tree_before.to_newick(), schema="newick", taxon_namespace=tns)
    b = dendropy.Tree.get(data=res.tree_after.to_newick(), schema="newick", taxon_namespace=tns)
    assert res.report.rf == symmetric_difference(a, b)
    assert res.report.branch_score == pytest.approx(euclidean_distance(a, b), rel=1e-9)


def test_violated_triangles_match_plain_loop():
    # the contract's definition, written out: longest side > sum of the others + tol
    rng = np.random.default_rng(8)
    D = rng.uniform(1, 10, (9, 9))
    D = (D + D.T) / 2
    np.fill_diagonal(D, 0)
    lab = [f"t{k}" for k in range(9)]
    dm = DistanceMatrix.from_array(D, lab)
    r = impact(dm, dm).report
    count = 0
    for i, j, k in combinations(range(9), 3):
        s = sorted([D[i, j], D[i, k], D[j, k]])
        count += s[2] > s[0] + s[1] + r.tol
    assert r.violated_triangles_before == count == r.violated_triangles_after
    assert r.rf == 0 and r.entries_changed == 0 and r.branch_score == 0


def test_label_order_may_differ(tmp_path, cli, pair):
    before, after = pair
    D2 = tree_matrix(T2, LABELS)
    perm = [5, 2, 0, 4, 1, 3]
    shuffled = tmp_path / "shuffled.tsv"
    write_tsv(shuffled, [LABELS[k] for k in perm], D2[np.ix_(perm, perm)])
    a, b = tmp_path / "a.json", tmp_path / "b.json"
    for args in ((before, after, "--json", a), (before, shuffled, "--json", b)):
        p = cli("impact", *args)
        assert p.returncode == 0, p.stderr
    ra, rb = json.loads(a.read_text()), json.loads(b.read_text())
    ra.pop("after"), rb.pop("after")
    assert ra == rb


def test_different_labels_exit_2(tmp_path, cli, pair):
    before, _ = pair
    other = tmp_path / "other.tsv"
    lab = LABELS[:-1] + ["zz"]
    write_tsv(other, lab, tree_matrix(T1, LABELS))
    p = cli("impact", before, other)
    assert p.returncode == 2 and p.stderr.startswith("seqdist: error:")
    assert "only in" in p.stderr and "zz" in p.stderr and ": f" in p.stderr
    assert len(p.stderr.strip().splitlines()) == 1


def test_missing_entries_exit_2_with_hint(tmp_path, cli, pair):
    _, after = pair
    D = tree_matrix(T1, LABELS)
    D[0, 3] = D[3, 0] = np.nan
    gappy = tmp_path / "gappy.tsv"
    write_tsv(gappy, LABELS, D)
    for args in (("impact", gappy, after), ("tree", gappy, "-o", tmp_path / "t.nwk")):
        p = cli(*args)
        assert p.returncode == 2 and "seqdist repair" in p.stderr and "gappy.tsv" in p.stderr
        assert "(a, d)" in p.stderr or "a, d" in p.stderr
    assert not (tmp_path / "t.nwk").exists()


def test_fewer_than_three_taxa_exit_2(tmp_path, cli):
    two = tmp_path / "two.tsv"
    write_tsv(two, ["a", "b"], np.array([[0, 1.0], [1.0, 0]]))
    for args in (("impact", two, two), ("tree", two, "-o", tmp_path / "t.nwk")):
        p = cli(*args)
        assert p.returncode == 2 and "at least 3 taxa" in p.stderr


def test_failure_leaves_outputs_untouched(tmp_path, cli, pair):
    before, after = pair
    js, page = tmp_path / "i.json", tmp_path / "i.html"
    js.write_text("precious\n")
    bad_truth = tmp_path / "truth.nwk"
    bad_truth.write_text("((a,b),c,(d,x));\n")
    p = cli("impact", before, after, "--json", js, "--html", page, "--truth", bad_truth)
    assert p.returncode == 2 and "truth.nwk" in p.stderr and "x" in p.stderr
    assert js.read_text() == "precious\n" and not page.exists()
    assert sorted(x.name for x in tmp_path.iterdir()) == ["after.tsv", "before.tsv", "i.json", "truth.nwk"]


def test_html_self_contained_and_deterministic(tmp_path, cli, pair):
    before, after = pair
    a, b = tmp_path / "a.html", tmp_path / "b.html"
    for page in (a, b):
        p = cli("impact", before, after, "--html", page)
        assert p.returncode == 0, p.stderr
    text = a.read_text()
    assert a.read_bytes() == b.read_bytes()
    assert "<script" not in text.lower()
    # no external resources: the only URL is the SVG namespace name
    urls = set(re.findall(r"https?://[^\s\"'<>]+", text))
    assert urls <= {"http://www.w3.org/2000/svg"}
    assert not re.search(r"""(src|href)=["'](?!data:|#)""", text)
    assert text.count("<svg") >= 3  # two trees and the heatmap
    assert "#d95f02" in text  # the differing split is coloured
    assert "altered data" in text and "1 split differs" in text


def test_large_heatmap_is_an_inline_png(tmp_path):
    from seqdist.report.html import render_html

    rng = np.random.default_rng(2)
    n = 120
    X = rng.uniform(0, 1, (n, 2))
    D = np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1))
    E = D.copy()
    E[0, 1] = E[1, 0] = 3.0
    lab = [f"t{k}" for k in range(n)]
    page = render_html(impact(DistanceMatrix.from_array(D, lab), DistanceMatrix.from_array(E, lab)))
    assert "data:image/png;base64," in page


def test_json_to_stdout_moves_summary_to_stderr(tmp_path, cli, pair):
    before, after = pair
    p = cli("impact", before, after, "--json", "-")
    assert p.returncode == 0
    r = json.loads(p.stdout)
    assert r["rf"] == 2 and "split" in p.stderr


def test_clamp_negative_reported(tmp_path, cli):
    D = np.array([[0, 1, 9, 9], [1, 0, 9, 9], [9, 9, 0, 1], [9, 9, 1, 0.]])
    D[0, 2] = D[2, 0] = 0.5
    m = tmp_path / "m.tsv"
    write_tsv(m, list("abcd"), D)
    js = tmp_path / "i.json"
    p = cli("impact", m, m, "--json", js, "--clamp-negative")
    r = json.loads(js.read_text())
    assert r["negative_branches_before"] > 0 and r["clamped_branches_before"] == r["negative_branches_before"]
    assert "--clamp-negative" in p.stdout
    out = tmp_path / "t.nwk"
    p = cli("tree", m, "-o", out, "--clamp-negative")
    assert p.returncode == 0 and "set to zero" in p.stderr and ":-" not in out.read_text()
    p = cli("tree", m, "-o", out)
    assert "kept as computed" in p.stderr and ":-" in out.read_text()


def test_tree_command_output_read_by_biopython(tmp_path, cli):
    from Bio import Phylo

    lab = ["north 1", "it's", "x_y", "a(b)", "c:d"]
    rng = np.random.default_rng(0)
    X = rng.uniform(0, 1, (5, 2))
    m = tmp_path / "m.tsv"
    write_tsv(m, lab, np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1)))
    for method in ("nj", "bionj", "upgma"):
        out = tmp_path / f"{method}.nwk"
        assert cli("tree", m, "-o", out, "--method", method).returncode == 0
        assert sorted(c.name for c in Phylo.read(out, "newick").get_terminals()) == sorted(lab)


def test_drop_incomplete(tmp_path, cli, pair):
    # BEFORE with a missing entry: refused by default, with --drop-incomplete the
    # taxon with the most missing entries is left out of the BEFORE tree and
    # the trees are compared on the others
    _, after = pair
    D = tree_matrix(T1, LABELS)
    D[0, 3] = D[3, 0] = D[0, 4] = D[4, 0] = np.nan
    gappy = tmp_path / "gappy.tsv"
    write_tsv(gappy, LABELS, D)
    p = cli("impact", gappy, after)
    assert p.returncode == 2 and "--drop-incomplete" in p.stderr
    js = tmp_path / "i.json"
    p = cli("impact", gappy, after, "--drop-incomplete", "--json", js, "--html", tmp_path / "i.html")
    assert p.returncode == 0, p.stderr
    r = json.loads(js.read_text())
    assert r["dropped_taxa"] == ["a"] and r["n_compared"] == 5 and r["n"] == 6
    assert r["entries_filled"] == 2
    # on {b,c,d,e,f}: T1 pruned has split {b,c}|{d,e,f}, T2 pruned the same: RF 0
    assert r["rf"] == 0
    assert "a *" in (tmp_path / "i.html").read_text()


def test_incomplete_taxa_greedy():
    from seqdist.impact.compare import incomplete_taxa

    D = np.ones((5, 5)) - np.eye(5)
    for i, j in ((0, 1), (1, 2), (1, 3), (4, 3)):
        D[i, j] = D[j, i] = np.nan
    # b has 3 missing entries: drop it; then d-e remains: tie, first in label order (d)
    assert incomplete_taxa(DistanceMatrix.from_array(D, list("abcde"))) == ["b", "d"]


def test_prune_keeps_path_lengths():
    from seqdist.impact.compare import prune

    t = read_newick("((a:1,b:2):0.5,(c:1,x:3):0.25,(d:1,e:1):0.3);")
    p = prune(t, {"a", "b", "c", "d", "e"})
    full, kept = t.path_lengths(sorted(t.labels())), p.path_lengths(sorted(p.labels()))
    keep = [k for k, lab in enumerate(sorted(t.labels())) if lab != "x"]
    assert np.allclose(full[np.ix_(keep, keep)], kept)
    assert sorted(p.labels()) == list("abcde")
