"""Split support by column resampling (impact --bootstrap)."""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import small_alignment


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    from seqdist.io.matrices import read_matrix, write_matrix
    from seqdist.repair import repair

    t = tmp_path_factory.mktemp("support")
    aln = t / "aln.fasta"
    small_alignment(aln)
    from conftest import run_cli

    before = t / "before.tsv"
    assert run_cli("distances", aln, "-o", before, "--model", "jc69").returncode == 0
    dm = read_matrix(str(before))
    # plant one gross error so that the repair changes something
    D = np.array(dm.values)
    D[0, 1] = D[1, 0] = D[0, 1] * 4
    write_matrix(str(before), dm.with_values(D))
    after = t / "after.tsv"
    write_matrix(str(after), repair(read_matrix(str(before)), "shrink", progress=False).matrix)
    return t, aln, before, after


def run_support(cli, inputs, workers, seed=3, b=6):
    t, aln, before, after = inputs
    js = t / f"s{workers}-{seed}.json"
    page = t / f"s{workers}-{seed}.html"
    p = cli("impact", before, after, "--alignment", aln, "--bootstrap", b, "--model", "jc69",
            "--objective", "shrink", "--seed", seed, "--workers", workers, "--json", js, "--html", page,
            "--quiet")
    assert p.returncode == 0, p.stderr
    return json.loads(js.read_text()), page.read_text()


def test_support_values_and_worker_independence(cli, inputs):
    r1, h1 = run_support(cli, inputs, 1)
    r2, h2 = run_support(cli, inputs, 2)
    assert r1 == r2 and h1 == h2  # per-replicate seeds: the pool size does not matter
    s = r1["support"]
    assert s["replicates"] == 6 and s["model"] == "jc69" and s["objective"] == "shrink"
    listed = {tuple(x["taxa"]) for x in s["splits"]}
    before_splits = {tuple(x["taxa"]) for x in s["splits"] if x["in_before_tree"]}
    assert len(before_splits) == r1["splits_before"]
    for x in r1["splits_only_before"] + r1["splits_only_after"]:
        assert tuple(x) in listed
    for x in s["splits"]:
        for k in ("support_before", "support_after"):
            assert 0.0 <= x[k] <= 1.0
        assert abs(x["support_after"] * 6 - round(x["support_after"] * 6)) < 1e-9
    assert "support before" in h1 and "Bootstrap (6 replicates" in r1["support_summary"]


def test_support_depends_on_seed(cli, inputs):
    a, _ = run_support(cli, inputs, 1, seed=3)
    b, _ = run_support(cli, inputs, 1, seed=4)
    assert a["support"]["seed"] != b["support"]["seed"]
    def values(r, key):
        return [x[key] for x in r["support"]["splits"]]

    assert values(a, "support_before") != values(b, "support_before") \
        or values(a, "support_after") != values(b, "support_after")


def test_support_option_errors(cli, inputs):
    t, aln, before, after = inputs
    p = cli("impact", before, after, "--bootstrap", "5")
    assert p.returncode == 2 and "--alignment" in p.stderr
    p = cli("impact", before, after, "--alignment", aln, "--bootstrap", "5", "--model", "jc69")
    assert p.returncode == 2 and "--objective" in p.stderr
    p = cli("impact", before, after, "--alignment", aln, "--bootstrap", "2", "--model", "jc69",
            "--objective", "nonsense")
    assert p.returncode == 2 and "unknown repair objective 'nonsense'" in p.stderr
    other = t / "other.fasta"
    other.write_text(">zz\nACGT\n>t01\nACGT\n>t02\nACGA\n")
    p = cli("impact", before, after, "--alignment", other, "--bootstrap", "2", "--model", "jc69",
            "--objective", "shrink")
    assert p.returncode == 2 and "record ids differ" in p.stderr
