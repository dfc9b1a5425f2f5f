"""``seqdist run`` with suspect sequences, as a user meets them (issue 15).

The data are simulated with planted trouble (``seqdist simulate``: a chimera
whose second half is copied from a distant taxon, and a contaminant), so the
bad sequences and the true tree are known. Robinson-Foulds distances are
checked against dendropy (Sukumaran & Holder 2010, "DendroPy: a Python
library for phylogenetic computing", Bioinformatics 26:1569), on unrooted
trees pruned to the common taxa.

Which remedy is the default is justified by the simulation study
(docs/remedies.md, tests/benchmarks/bench_remedies.py); these tests check
that ``run`` applies it and reports it, not the study's figures.
"""

from __future__ import annotations

import json
import os

import pytest

from conftest import EXAMPLES, run_cli

DEMO = os.path.join(EXAMPLES, "dna_trouble.fasta")


def load(d, name):
    with open(d / name) as f:
        return json.load(f)


def dendropy_rf(path_a, path_b, taxa):
    """RF between two Newick files, both pruned to ``taxa`` (dendropy, unrooted)."""
    import dendropy
    from dendropy.calculate.treecompare import symmetric_difference

    tns = dendropy.TaxonNamespace()
    trees = []
    for p in (path_a, path_b):
        t = dendropy.Tree.get(path=str(p), schema="newick", taxon_namespace=tns, preserve_underscores=True)
        t.prune_taxa_with_labels([lab for lab in (x.taxon.label for x in t.leaf_nodes()) if lab not in taxa])
        t.suppress_unifurcations()
        t.is_rooted = False
        t.encode_bipartitions()
        trees.append(t)
    return symmetric_difference(*trees)


def planted_labels(sim):
    """The spoiled rows (a chimera's donor is untouched)."""
    return [x.get("label") or x["labels"][0] for x in sim["planted"]]


@pytest.fixture(scope="module")
def planted(tmp_path_factory):
    """A 24-taxon alignment with a planted chimera and a contaminant, and the default run on it."""
    d = tmp_path_factory.mktemp("planted")
    p = run_cli("simulate", "-o", d / "aln.fasta", "--tree-out", d / "aln.true.nwk", "--taxa", 24, "--columns",
                1000, "--seed", 1, "--chimera", "auto", "--contaminant", "auto", "--summary-out", d / "sim.json",
                "--quiet")
    assert p.returncode == 0, p.stderr
    runs = {}
    for name, extra in (("default", []), ("kept", ["--keep-suspects"])):
        runs[name] = (run_cli("run", d / "aln.fasta", "--outdir", d / name, *extra), d / name)
    return load(d, "sim.json"), runs


def test_default_leaves_the_planted_sequences_out_and_says_so(planted):
    sim, runs = planted
    p, out = runs["default"]
    assert p.returncode == 0, p.stderr
    bad = sorted(planted_labels(sim))  # the chimera and the contaminant
    audit = load(out, "audit.json")
    listed = [x["label"] for x in audit["suspect_taxa"]]
    assert sorted(listed[:len(bad)]) == bad
    assert all(x["reasons"] and x["score"] >= audit["suspects"]["threshold"] for x in audit["suspect_taxa"])
    rep = load(out, "repair.json")
    assert set(bad) <= set(rep["left_out_taxa"])
    assert all(rep["left_out_reasons"][lab].startswith("suspect sequence: ") for lab in bad)
    assert rep["objective"] == "shrink"
    # one warning names them and how to keep them
    lines = [ln for ln in p.stderr.splitlines() if ln.startswith("seqdist: warning:") and "suspect" in ln]
    assert len(lines) == 1 and "left out" in lines[0] and "--keep-suspects" in lines[0]
    assert all(lab in lines[0] for lab in bad)
    # the repaired matrix and its tree hold none of them
    header = (out / "repaired.tsv").read_text().splitlines()[0].split("\t")
    assert not set(bad) & set(header)
    assert not any(lab + ":" in (out / "tree_after.nwk").read_text() for lab in bad)


def test_both_choices_built_and_compared_on_the_common_taxa(planted):
    sim, runs = planted
    _, out = runs["default"]
    imp = load(out, "impact.json")
    table = imp["remedies"]
    assert [r["name"] for r in table["rows"]] == ["measured", "repaired, suspects left out",
                                                  "repaired, suspects kept"]
    assert table["chosen"] == "repaired, suspects left out"
    assert (out / "tree_with_suspects.nwk").exists() and not (out / "tree_without_suspects.nwk").exists()
    taxa = set(table["taxa"])
    assert table["n_compared"] == len(taxa) == 22
    rf = dendropy_rf(out / "tree_after.nwk", out / "tree_with_suspects.nwk", taxa)
    assert table["rf_with_without_suspects"] == rf == table["rf_between"][1][2] == table["rf_between"][2][1]
    assert rf > 0  # here keeping the chimera and the contaminant moves other taxa too
    truth = out.parent / "aln.true.nwk"
    for row, tree in zip(table["rows"][1:], ("tree_after.nwk", "tree_with_suspects.nwk")):
        assert row["rf_to_truth"] == dendropy_rf(out / tree, truth, taxa)
    # leaving them out brings the tree closer to the truth on the same taxa
    assert table["rows"][1]["rf_to_truth"] < table["rows"][2]["rf_to_truth"]


def test_keep_suspects_keeps_them_and_builds_the_other_choice(planted):
    sim, runs = planted
    p, out = runs["kept"]
    assert p.returncode == 0, p.stderr
    bad = set(planted_labels(sim))
    rep = load(out, "repair.json")
    assert not bad & set(rep["left_out_taxa"])
    assert "suspect sequences left out" not in p.stderr
    table = load(out, "impact.json")["remedies"]
    assert table["chosen"] == "repaired, suspects kept"
    assert (out / "tree_without_suspects.nwk").exists() and not (out / "tree_with_suspects.nwk").exists()
    # the same two trees as the default run, in the other roles
    default = runs["default"][1]
    assert (out / "tree_without_suspects.nwk").read_text() == (default / "tree_after.nwk").read_text()
    assert (out / "tree_after.nwk").read_text() == (default / "tree_with_suspects.nwk").read_text()
    man = load(out, "manifest.json")
    assert man["options"]["keep_suspects"] is True and man["command_line"].endswith("--keep-suspects")


def test_report_leads_with_the_suspects_then_the_remedies(planted):
    _, runs = planted
    _, out = runs["default"]
    page = (out / "report.html").read_text()
    order = [page.index(s) for s in ("Suspect sequences", "What each remedy did to the tree", "altered data",
                                     "From alignment to metric")]
    assert order == sorted(order)
    assert "repaired, suspects left out" in page and "repaired, suspects kept" in page
    assert "With and without the suspects the repaired trees" in page


def test_bootstrap_with_the_suspects_left_out(tmp_path):
    # regression: the support step once asked the alignment for labels of the shared matrix only
    p = run_cli("run", DEMO, "--outdir", tmp_path / "b", "--bootstrap", 3, "--workers", 1, "--objective", "l2",
                "--quiet")
    assert p.returncode == 0, p.stderr
    sup = load(tmp_path / "b", "impact.json")["support"]
    assert sup["replicates"] == 3 and sup["replicates_with_after_tree"] == 3
    assert sup["left_out_after"] == ["x18", "x19"]  # in the measured tree, not the repaired one
    assert sup["weighted"] is True and sup["objective"] == "l2"  # the replicates repaired like the repair
    # the suspects' evidence gains the placement instability (leaf stability) from the same resamples
    audit = load(tmp_path / "b", "audit.json")
    assert "placement_instability" in audit["suspects"]["statistics"]
    x19 = next(x for x in audit["suspect_taxa"] if x["label"] == "x19")["evidence"]["placement_instability"]
    assert 0.0 <= x19["value"] <= 1.0


def test_weights_only_where_they_change_the_result(tmp_path):
    # shrink's closure is the same for every weighting, so run writes no weights for it
    p = run_cli("run", DEMO, "--outdir", tmp_path / "s", "--quiet")
    assert p.returncode == 0 and not (tmp_path / "s" / "weights.tsv").exists()
    assert load(tmp_path / "s", "repair.json")["weights"] != "given"
    p = run_cli("run", DEMO, "--outdir", tmp_path / "l", "--objective", "l2", "--quiet")
    assert p.returncode == 0 and (tmp_path / "l" / "weights.tsv").exists()
    assert load(tmp_path / "l", "repair.json")["weights"] == "given"
    p = run_cli("run", DEMO, "--outdir", tmp_path / "u", "--objective", "l2", "--unweighted", "--quiet")
    assert p.returncode == 0 and not (tmp_path / "u" / "weights.tsv").exists()


def test_help_says_what_each_objective_is_good_for_and_when_it_hurts():
    from seqdist.repair import OBJECTIVE_GUIDE, OBJECTIVES

    assert set(OBJECTIVE_GUIDE) == set(OBJECTIVES)
    text = " ".join(run_cli("repair", "--help").stdout.split())
    for name in OBJECTIVES:
        does, good, hurts = OBJECTIVE_GUIDE[name]
        assert f"{name} {does}" in text and f"good for: {good}" in text and f"hurts: {hurts}" in text
    # the two harms the study found most clearly
    assert "saturation" in OBJECTIVE_GUIDE["grow"][2] and "gappy" in OBJECTIVE_GUIDE["fewest"][2]
    run_help = " ".join(run_cli("run", "--help").stdout.split())
    assert "default: shrink" in run_help and "--keep-suspects" in run_help and "docs/remedies.md" in run_help


def test_suspects_to_leave_out_rules():
    import numpy as np

    from seqdist import DistanceMatrix
    from seqdist.audit.suspects import SuspectReport
    from seqdist.pipeline import suspects_to_leave_out

    class S:  # the two fields the rule reads
        def __init__(self, label, reasons):
            self.label, self.reasons, self.score = label, reasons, 9.0

    D = np.full((6, 6), 1.0) - np.eye(6)
    D[0, 1:] = D[1:, 0] = np.nan  # taxon a: no measured distance (left out anyway)
    dm = DistanceMatrix.from_array(D, list("abcdef"))
    rep = SuspectReport.__new__(SuspectReport)
    rep.suspects = [S("a", ["gappy"]), S("b", ["chimera"])]
    assert suspects_to_leave_out(dm, rep) == {"b": "suspect sequence: chimera"}
    assert suspects_to_leave_out(dm, rep, keep_unmeasured=True) == {"a": "suspect sequence: gappy",
                                                                   "b": "suspect sequence: chimera"}
    rep.suspects = [S(x, ["bad"]) for x in "bcd"]  # 6 - 1 - 3 = 2 would be left: none is left out
    assert suspects_to_leave_out(dm, rep) == {}
