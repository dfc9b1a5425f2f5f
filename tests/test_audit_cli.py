"""``seqdist audit`` as a user runs it: exit codes, files, the summary."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from conftest import euclidean, write_tsv

BAD = {
    "ragged": ("\ta\tb\tc\na\t0\t1\t2\nb\t1\t0\nc\t2\t3\t0\n", "ragged row 'b'"),
    "non_numeric": ("\ta\tb\na\t0\tfoo\nb\t1\t0\n", "non-numeric value 'foo'"),
    "asymmetric": ("\ta\tb\na\t0\t1\nb\t2\t0\n", "asymmetric"),
    "negative": ("\ta\tb\na\t0\t-1\nb\t-1\t0\n", "negative entry"),
    "infinite": ("\ta\tb\na\t0\tinf\nb\tinf\t0\n", "infinite"),
    "empty": ("", "empty file"),
}


@pytest.fixture
def planted(tmp_path):
    D = euclidean(14, seed=7)
    D[0, 1] = D[1, 0] = D[0, 1] * 5
    D[2, 5] = D[5, 2] = D[2, 5] * 0.05
    labels = [f"taxon {i}" if i == 3 else f"s{i}" for i in range(14)]
    path = tmp_path / "m.tsv"
    write_tsv(path, labels, D)
    return path, labels, D


@pytest.mark.parametrize("kind", sorted(BAD))
def test_bad_matrix_exit_2(tmp_path, cli, kind):
    text, needle = BAD[kind]
    src = tmp_path / "bad.tsv"
    src.write_text(text)
    js = tmp_path / "a.json"
    js.write_text("precious\n")
    p = cli("audit", src, "--json", js)
    assert p.returncode == 2, p.stderr
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("seqdist: error: ") and str(src) in lines[0]
    assert needle in lines[0] and "Traceback" not in p.stderr
    assert js.read_text() == "precious\n" and p.stdout == ""


def test_bad_options_exit_2(tmp_path, cli, planted):
    path, _, _ = planted
    for args in (["--tol", "-1"], ["--top", "-2"], ["--tol", "nan"], ["--in-format", "xml"]):
        p = cli("audit", path, *args)
        assert p.returncode == 2 and p.stderr.startswith("seqdist: error:"), (args, p.stderr)
    p = cli("audit", tmp_path / "absent.tsv")
    assert p.returncode == 2 and "absent.tsv" in p.stderr


def test_report_json_and_summary(tmp_path, cli, planted):
    path, labels, D = planted
    js = tmp_path / "a.json"
    p = cli("audit", path, "--json", js, "--top", "3")
    assert p.returncode == 0, p.stderr
    r = json.loads(js.read_text())
    assert r["n"] == 14 and r["triangles"] == math.comb(14, 3)
    assert r["violated_triangles"] > 0 and r["max_violation"] > 0
    assert 2 >= r["min_changes_lower_bound"] >= 1  # two planted entries are a repair
    assert len(r["worst_triangles"]) == 3
    assert {tuple(sorted(e["pair"])) for e in r["worst_entries"][:2]} == {("s0", "s1"), ("s2", "s5")}
    assert r["fit_for_tree_methods"] is False
    out = p.stdout
    assert "NOT FIT for distance tree methods" in out
    assert "s0 - s1" in out and "Lower bound: any repair must change at least" in out
    assert "Worst taxa" in out and "four-point" in out and "Ultrametric" in out
    assert p.stderr == ""


def test_json_to_stdout_and_deterministic(tmp_path, cli, planted):
    path, _, _ = planted
    a = cli("audit", path, "--json", "-")
    b = cli("audit", path, "--json", "-")
    assert a.returncode == 0 and a.stdout == b.stdout
    assert json.loads(a.stdout)["n"] == 14


def test_strict_exit_4_after_writing(tmp_path, cli, planted):
    path, _, D = planted
    js = tmp_path / "a.json"
    p = cli("audit", path, "--strict", "--json", js, "--quiet")
    assert p.returncode == 4
    assert json.loads(js.read_text())["violated_triangles"] > 0
    assert p.stderr.startswith("seqdist: error:") and "violated triangle" in p.stderr
    good = tmp_path / "good.tsv"
    write_tsv(good, [f"g{i}" for i in range(10)], euclidean(10, seed=1))
    p = cli("audit", good, "--strict")
    assert p.returncode == 0 and "FIT for distance tree methods" in p.stdout


def test_tolerance_option_and_entry_counts(tmp_path, cli):
    D = np.array([[0, 2, 1], [2, 0, 0.5], [1, 0.5, 0]])  # excess exactly 0.5
    path = tmp_path / "t.tsv"
    write_tsv(path, ["a", "b", "c"], D)
    assert cli("audit", path, "--tol", "0.5", "--strict").returncode == 0
    ec = tmp_path / "counts.tsv"
    p = cli("audit", path, "--tol", "0.25", "--strict", "--entry-counts", ec)
    assert p.returncode == 4
    from seqdist.io import read_matrix

    m = read_matrix(str(ec))
    assert m.labels == ("a", "b", "c") and m["a", "b"] == 1.0 and m["b", "c"] == 1.0


def test_missing_entries_reported(tmp_path, cli):
    D = euclidean(8, seed=2)
    D[0, 3] = D[3, 0] = np.nan
    path = tmp_path / "miss.tsv"
    write_tsv(path, [f"m{i}" for i in range(8)], D)
    js = tmp_path / "a.json"
    p = cli("audit", path, "--json", js)
    assert p.returncode == 0
    r = json.loads(js.read_text())
    assert r["missing_entries"] == 1 and r["unchecked_triangles"] == 6
    assert r["checked_triangles"] == math.comb(8, 3) - 6
    assert "1 missing" in p.stdout and "not checked" in p.stdout
    assert r["fit_for_tree_methods"] is False


def test_square_format_input(tmp_path, cli):
    path = tmp_path / "m.phy"
    D = euclidean(5, seed=3)
    with open(path, "w") as f:
        f.write("5\n")
        for i in range(5):
            f.write(f"x{i} " + " ".join(repr(float(v)) for v in D[i]) + "\n")
    p = cli("audit", path, "--in-format", "square", "--json", "-")
    assert p.returncode == 0 and json.loads(p.stdout)["violated_triangles"] == 0
