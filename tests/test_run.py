"""The whole job: ``seqdist run`` end to end, determinism, and the Snakemake workflow."""

from __future__ import annotations

import json
import os

import pytest

from conftest import EXAMPLES, open_text

ALIGNMENTS = ["dna_clean.fasta", "protein.fasta", "dna_trouble.fasta", "protein_small.sto"]
EXPECTED = ["distances.tsv", "sites.tsv", "variance.tsv", "distances.json", "audit.json", "audit.txt",
            "repaired.tsv", "repair.json", "changes.tsv", "tree_before.nwk", "tree_after.nwk", "impact.json",
            "report.html", "manifest.json"]


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """One ``seqdist run`` per demo alignment (shared by the tests below)."""
    from conftest import run_cli

    out = {}
    for name in ALIGNMENTS:
        d = tmp_path_factory.mktemp(name.split(".")[0])
        p = run_cli("run", os.path.join(EXAMPLES, name), "--outdir", d / "out")
        out[name] = (p, d / "out")
    return out


@pytest.mark.parametrize("name", ALIGNMENTS)
def test_run_end_to_end(runs, name):
    p, out = runs[name]
    assert p.returncode == 0, p.stderr
    audit = json.loads(open_text(out / "audit.json"))
    # the default objective (shrink) does not depend on weights, so none are written; with
    # suspects, the tree of the other choice is written too
    extra = ["tree_with_suspects.nwk"] if audit["suspect_taxa"] else []
    assert sorted(os.listdir(out)) == sorted(EXPECTED + extra)
    rep = json.loads(open_text(out / "repair.json"))
    assert rep["violated_after"] == 0 and rep["objective"] == "shrink" and rep["weights"] != "given"
    if not rep["left_out_taxa"]:
        # the audit's bound is proven, so a fewest repair of the same matrix can never beat it
        assert audit["violated_triangles"] == 0 or rep["changed_entries"] >= audit["min_changes_lower_bound"]
    page = (out / "report.html").read_text()
    assert page.startswith("<!DOCTYPE html>") and "altered data" in page and "<script" not in page
    man = json.loads(open_text(out / "manifest.json"))
    assert man["seqdist_version"] and man["options"]["objective"] == "shrink"
    import hashlib

    for fname, digest in man["outputs"].items():
        assert hashlib.sha256((out / fname).read_bytes()).hexdigest() == digest, fname


def test_planted_trouble_repair_does_not_hurt_the_tree(runs):
    # The true tree is known (simulated data); Robinson-Foulds as in the contract.
    p, out = runs["dna_trouble.fasta"]
    imp = json.loads(open_text(out / "impact.json"))
    assert imp["rf_to_truth_after"] <= imp["rf_to_truth_before"]
    audit = json.loads(open_text(out / "audit.json"))
    assert audit["violated_triangles"] > 0 and audit["missing_entries"] > 0


def test_run_is_deterministic(runs, tmp_path):
    from conftest import run_cli

    p, first = runs["dna_trouble.fasta"]
    p2 = run_cli("run", os.path.join(EXAMPLES, "dna_trouble.fasta"), "--outdir", tmp_path / "again", "--quiet")
    assert p2.returncode == 0 and p2.stderr == ""
    assert sorted(os.listdir(first)) == sorted(os.listdir(tmp_path / "again"))
    for fname in os.listdir(first):
        a, b = (first / fname).read_bytes(), (tmp_path / "again" / fname).read_bytes()
        if fname == "manifest.json":
            ja, jb = json.loads(a), json.loads(b)
            ja.pop("seconds"), jb.pop("seconds"), ja.pop("step_times"), jb.pop("step_times")
            ja["options"].pop("alignment"), jb["options"].pop("alignment")
            assert ja == jb
        else:
            assert a == b, fname


def test_run_bad_input(tmp_path):
    from conftest import run_cli

    bad = tmp_path / "bad.fasta"
    bad.write_text(">a\nACGT\n>b\nACG\n>c\nACGT\n")
    p = run_cli("run", bad, "--outdir", tmp_path / "out")
    assert p.returncode == 2 and p.stderr.startswith("seqdist: error:") and "bad.fasta" in p.stderr
    assert not (tmp_path / "out").exists() or os.listdir(tmp_path / "out") == []
    p = run_cli("run", os.path.join(EXAMPLES, "dna_clean.fasta"), "--outdir", tmp_path / "o2", "--objective", "nope")
    assert p.returncode == 2 and "nope" in p.stderr


def test_run_bootstrap_writes_the_consensus_of_the_replicates(tmp_path):
    """--bootstrap: the majority-rule consensus trees (Margush & McMorris 1981, "Consensus n-trees")
    hold exactly the replicates' splits above one half, with their support in percent; each split
    also named in impact.json carries the same support there (as a fraction)."""
    from seqdist.io.newick import read_newick_file

    from conftest import run_cli

    out = tmp_path / "bs"
    p = run_cli("run", os.path.join(EXAMPLES, "protein_small.sto"), "--outdir", out, "--bootstrap", 5, "--quiet")
    assert p.returncode == 0, p.stderr
    imp = json.loads(open_text(out / "impact.json"))
    taxa = set(imp["taxa"]) if "taxa" in imp else None
    for which in ("before", "after"):
        tree = read_newick_file(str(out / f"consensus_{which}.nwk"))
        every = set(tree.labels())
        taxa = taxa or every
        assert every == taxa
        in_json = {frozenset(s["taxa"]): s[f"support_{which}"] for s in imp["support"]["splits"]}
        checked = 0
        for node in tree.preorder():
            if node.is_leaf or node is tree.root:
                continue
            below = frozenset(leaf.name for leaf in _leaves(node))
            assert node.support is not None and 50 < node.support <= 100
            side = below if below in in_json else frozenset(every - below)
            if side in in_json:
                assert node.support == pytest.approx(100 * in_json[side])
                checked += 1
        assert checked >= 3
    manifest = json.loads(open_text(out / "manifest.json"))
    assert "consensus_after.nwk" in manifest["outputs"]


def _leaves(node):
    stack, found = [node], []
    while stack:
        n = stack.pop()
        if n.is_leaf:
            found.append(n)
        else:
            stack.extend(n.children)
    return found
