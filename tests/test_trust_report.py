"""No value invented in silence, and a report whose numbers agree with the files beside it.

The demo set ``dna_trouble`` has two sequences (x04, x12) saturated under K80
against every other sequence: no measured distance joins them to the rest.
These tests check that such taxa are left out and named (or kept only on
request, marked as made up), that every comparison is made on one stated set
of taxa, and that the html page says what the JSON files say. Tree figures
are checked against dendropy (Sukumaran & Holder 2010, "DendroPy: a Python
library for phylogenetic computing"), an outside library.
"""

from __future__ import annotations

import csv
import json
import os
import re
import warnings

import numpy as np
import pytest

from conftest import EXAMPLES, run_cli, write_tsv

TROUBLE = os.path.join(EXAMPLES, "dna_trouble.fasta")
TRUTH = os.path.join(EXAMPLES, "dna_trouble.true.nwk")


@pytest.fixture(scope="module")
def jobs(tmp_path_factory):
    # The suspects (x18, x19) are kept and the repair is the one these figures were first
    # measured with, so that the checks below isolate the unmeasured taxa x04 and x12.
    out = {}
    same = ["--keep-suspects", "--objective", "fewest", "--unweighted"]
    for name, args in (("default", same), ("keep", same + ["--keep-unmeasured"])):
        d = tmp_path_factory.mktemp(name) / "out"
        p = run_cli("run", TROUBLE, "--outdir", d, *args)
        assert p.returncode == 0, p.stderr
        out[name] = (p, d)
    d = tmp_path_factory.mktemp("protein") / "out"
    p = run_cli("run", os.path.join(EXAMPLES, "protein.fasta"), "--outdir", d)
    assert p.returncode == 0, p.stderr
    out["metric"] = (p, d)
    return out


def load(d, name):
    with open(d / name) as fh:
        return json.load(fh) if name.endswith(".json") else fh.read()


def html_text(d) -> str:
    """The report's visible text, tags removed and white space collapsed."""
    page = load(d, "report.html")
    page = re.sub(r"<svg.*?</svg>", " ", page, flags=re.S)
    text = re.sub(r"<[^>]+>", " ", page)
    import html

    return re.sub(r"\s+", " ", html.unescape(text))


def dendropy_tree(path, taxa):
    import dendropy

    return dendropy.Tree.get(path=str(path), schema="newick", taxon_namespace=taxa, preserve_underscores=True)


# ------------------------------------------------ 1. no value invented in silence
def test_unmeasured_taxa_are_left_out_and_named(jobs):
    p, d = jobs["default"]
    rep, imp = load(d, "repair.json"), load(d, "impact.json")
    assert rep["left_out_taxa"] == ["x04", "x12"] and imp["left_out_taxa"] == ["x04", "x12"]
    assert rep["unmeasured_taxa"] == {"x04": "saturated against all 29 others",
                                      "x12": "saturated against all 29 others"}
    assert rep["filled_without_evidence"] == 0 and rep["n"] == 28 and rep["n_input"] == 30
    assert imp["n_compared"] == 28
    with open(d / "repaired.tsv") as fh:
        header = fh.readline().rstrip("\n").split("\t")[1:]
    assert len(header) == 28 and "x04" not in header and "x12" not in header
    for tree in ("tree_before.nwk", "tree_after.nwk"):
        text = load(d, tree)
        assert "x04" not in text and "x12" not in text
    warn = [ln for ln in p.stderr.splitlines() if ln.startswith("seqdist: warning:") and "left out" in ln]
    assert len(warn) == 1 and "x04 (saturated against all 29 others)" in warn[0] and "x12" in warn[0]
    page = html_text(d)
    assert "Left out: x04, x12." in page and "to the other 28 taxa" in page and "nor in the trees" in page


def test_keep_unmeasured_marks_the_made_up_fill(jobs):
    p, d = jobs["keep"]
    rep, imp = load(d, "repair.json"), load(d, "impact.json")
    assert rep["left_out_taxa"] == [] and rep["filled_without_evidence"] == 57 and rep["filled_by_path"] == 0
    with open(d / "changes.tsv") as fh:
        rows = list(csv.DictReader(fh, delimiter="\t"))
    made_up = [r for r in rows if r["how"] == "filled_without_evidence"]
    assert len(made_up) == 57 and all({r["label_a"], r["label_b"]} & {"x04", "x12"} for r in made_up)
    assert all(r["before"] == "NA" for r in made_up)
    assert {r["how"] for r in rows} == {"changed", "filled_without_evidence"}
    assert any("made-up value, not evidence" in ln for ln in p.stderr.splitlines())
    page = html_text(d)
    assert "Made-up values: x04, x12." in page and "filled without evidence" in page
    # The repaired tree holds all 30 taxa; it is compared on 28, and also scored on all of its own.
    assert imp["n_compared"] == 28 and imp["n_tree_after"] == 30 and imp["n_tree_after_scored"] == 30
    import dendropy

    taxa = dendropy.TaxonNamespace()
    truth = dendropy.Tree.get(path=TRUTH, schema="newick", taxon_namespace=taxa, preserve_underscores=True)
    after = dendropy_tree(d / "tree_after.nwk", taxa)
    truth.encode_bipartitions()
    after.encode_bipartitions()
    assert dendropy.calculate.treecompare.symmetric_difference(truth, after) == imp["rf_to_truth_after_own_taxa"]
    assert imp["rf_to_truth_after_own_taxa"] > imp["rf_to_truth_after"]
    own = imp["rf_to_truth_after_own_taxa"]
    assert f"on all of them its Robinson-Foulds distance to the reference tree is {own}" in page


def test_comparisons_are_on_one_taxon_set_dendropy(jobs):
    # RF, tree lengths and "same topology" must be computed on the same taxa:
    # prune the 30-taxon repaired tree to the 28 compared taxa with dendropy
    # and compare with what impact.json says.
    import dendropy

    _, d = jobs["keep"]
    imp = load(d, "impact.json")
    taxa = dendropy.TaxonNamespace()
    before = dendropy_tree(d / "tree_before.nwk", taxa)
    after = dendropy_tree(d / "tree_after.nwk", taxa)
    after.prune_taxa_with_labels(imp["left_out_taxa"])
    after.suppress_unifurcations()
    before.is_rooted = after.is_rooted = False
    assert len(after.leaf_nodes()) == len(before.leaf_nodes()) == imp["n_compared"]
    before.encode_bipartitions()
    after.encode_bipartitions()
    assert dendropy.calculate.treecompare.symmetric_difference(before, after) == imp["rf"]
    assert after.length() == pytest.approx(imp["tree_length_after"], rel=1e-12)
    assert before.length() == pytest.approx(imp["tree_length_before"], rel=1e-12)


def test_api_tells_filled_by_path_from_filled_without_evidence():
    from seqdist import DistanceMatrix
    from seqdist.core.errors import DataWarning
    from seqdist.repair import repair

    # a-b-c measured, a-c missing (a path gives it); d measured against nobody
    D = np.array([[0, 1, np.nan, np.nan], [1, 0, 2, np.nan], [np.nan, 2, 0, np.nan], [np.nan] * 3 + [0.0]])
    dm = DistanceMatrix.from_array(D, ["a", "b", "c", "d"])
    with pytest.warns(DataWarning, match=r"d \(no measured distance to any other taxon\)"):
        r = repair(dm, "fewest", progress=False)
    assert r.matrix.labels == ("a", "b", "c") and r.report.left_out_taxa == ["d"]
    assert r.changes == [("a", "c", float("nan"), 3.0, float("nan"), "filled_by_path")] or (
        r.changes[0][:2] == ("a", "c") and r.changes[0][3] == 3.0 and r.changes[0][5] == "filled_by_path")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataWarning)
        k = repair(dm, "fewest", progress=False, keep_unmeasured=True)
    hows = {(c[0], c[1]): c[5] for c in k.changes}
    assert hows[("a", "c")] == "filled_by_path"
    assert hows[("a", "d")] == hows[("b", "d")] == hows[("c", "d")] == "filled_without_evidence"
    assert k.report.filled_by_path == 1 and k.report.filled_without_evidence == 3


def test_repair_command_leaves_out_and_keeps(tmp_path):
    D = np.array([[0, 1, 2, np.nan], [1, 0, 1.5, np.nan], [2, 1.5, 0, np.nan], [np.nan] * 3 + [0.0]])
    m = tmp_path / "m.tsv"
    write_tsv(m, ["a", "b", "c", "d"], D)
    out, ch, js = tmp_path / "o.tsv", tmp_path / "c.tsv", tmp_path / "r.json"
    p = run_cli("repair", m, "-o", out, "--objective", "shrink", "--changes", ch, "--json", js)
    assert p.returncode == 0, p.stderr
    assert json.loads(js.read_text())["left_out_taxa"] == ["d"]
    assert out.read_text().splitlines()[0].split("\t") == ["", "a", "b", "c"]
    assert "1 taxa left out" in p.stderr and "d (no measured distance to any other taxon)" in p.stderr
    p = run_cli("repair", m, "-o", out, "--objective", "shrink", "--changes", ch, "--json", js, "--keep-unmeasured")
    assert p.returncode == 0, p.stderr
    rows = ch.read_text().splitlines()
    assert rows[0].split("\t")[-1] == "how" and all(r.endswith("\tfilled_without_evidence") for r in rows[1:])
    assert len(rows) == 4 and json.loads(js.read_text())["left_out_taxa"] == []


def test_lock_on_a_left_out_taxon_is_an_input_error(tmp_path):
    D = np.array([[0, 1, 2, np.nan, np.nan], [1, 0, 1.5, np.nan, np.nan], [2, 1.5, 0, np.nan, np.nan],
                  [np.nan] * 3 + [0.0, 1.0], [np.nan] * 3 + [1.0, 0.0]])
    m, lock = tmp_path / "m.tsv", tmp_path / "lock.txt"
    write_tsv(m, ["a", "b", "c", "d", "e"], D)
    lock.write_text("d\te\n")
    p = run_cli("repair", m, "-o", tmp_path / "o.tsv", "--objective", "fewest", "--lock", lock)
    assert p.returncode == 2 and p.stderr.count("\n") == 1
    assert "locked pair (d, e)" in p.stderr and "left out" in p.stderr
    assert not (tmp_path / "o.tsv").exists()


# ------------------------------------ 3. the report agrees with the files beside it
def test_report_counts_agree_with_the_json(jobs):
    _, d = jobs["default"]
    rep, imp, aud = load(d, "repair.json"), load(d, "impact.json"), load(d, "audit.json")
    page = html_text(d)
    # one count, one denominator for the repair's changes (was "62 of 435 entries changed")
    assert f"{rep['changed_entries']} of {rep['observed_entries']} measured entries changed" in page
    assert f"{imp['entries_changed']} of {imp['entries_measured']} measured entries changed" in page
    assert rep["changed_entries"] == imp["entries_changed"] == 5 and rep["observed_entries"] == 378
    assert " 62 of " not in page
    # violated triangles: always "of the checked ones", never a share of the unchecked ones
    checked = aud["checked_triangles"]
    assert f"{aud['violated_triangles']} of {checked:,} checked triangles" in page
    assert f"({aud['triangles'] - checked:,} of {aud['triangles']:,} not checked: a side is missing)" in page
    assert f"of {aud['triangles']:,}" not in page.replace(f"of {aud['triangles']:,} not checked", "")
    assert imp["triangles"] == checked == 3276  # the compared 28 taxa are exactly the checked ones
    # the "taxa most involved" line is printed, with the audit's own ranking
    top = [t["taxon"] for t in aud["taxa"] if t["violated_triangles"]][:5]
    assert "Taxa most involved: " + ", ".join(top) + "." in page
    # the reference tree and the command are named
    assert "reference tree " + TRUTH in page or "reference tree example_sequences/dna_trouble.true.nwk" in page
    assert "made by seqdist run " in page and "--outdir DIR" in page
    # no docs path that looks like a file beside the report
    assert "definitions in docs/trees.md" not in page


def test_tree_headings_match_the_newick_files(jobs):
    import dendropy

    for name in ("default", "keep"):
        _, d = jobs[name]
        page = html_text(d)
        for which, fname in (("measured", "tree_before.nwk"), ("repaired", "tree_after.nwk")):
            t = dendropy.Tree.get(path=str(d / fname), schema="newick", preserve_underscores=True)
            leaves = len(t.leaf_nodes())
            t.is_rooted = False
            t.encode_bipartitions()
            internal = sum(1 for e in t.postorder_edge_iter()
                           if e.head_node is not t.seed_node and not e.head_node.is_leaf())
            internal = min(internal, leaves - 3)  # a basal trifurcation drawn as a root has one edge less
            assert f"{which}: {leaves} taxa, {leaves - 3} splits" in page, (name, which)
            assert internal == leaves - 3


def test_metric_input_says_no_repair_needed(jobs):
    _, d = jobs["metric"]
    page = html_text(d)
    aud = load(d, "audit.json")
    assert aud["violated_triangles"] == 0
    assert "the measured entries need no repair" in page
    assert "at least 0 entries" not in page
    assert "no measured entry changed" in load(d, "report.html")
    assert "POISSON" not in page and "model poisson" in page


def test_stderr_lines_are_short(jobs):
    for name in ("default", "keep"):
        p, _ = jobs[name]
        assert all(len(ln) <= 400 for ln in p.stderr.splitlines()), max(map(len, p.stderr.splitlines()))
