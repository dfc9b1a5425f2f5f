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
    from seqdist.io.matrices import read_matrix

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
    assert "1 missing" in p.stdout and "(50 checked; 6 of 56 not checked: a side is missing)" in p.stdout
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


# ------------------------------------------------------------ issue 14: boundaries
@pytest.mark.parametrize("args, needle", [
    (["--seed", "-1", "--exact-quartets", "0"], "--seed must be an integer from 0 to 4294967295"),
    (["--seed", "x"], "--seed must be an integer from 0 to 4294967295, got x"),
    (["--top", "-2"], "--top must be an integer from 0 to 1000"),
    (["--top", "1000000000"], "--top must be an integer from 0 to 1000"),
    (["--quartets", "0"], "--quartets must be an integer from 1 to 10000000"),
    (["--quartets", "99999999999"], "--quartets must be an integer from 1 to 10000000"),
    (["--exact-quartets", "-1"], "--exact-quartets must be an integer >= 0"),
    (["--lp-max", "1.5"], "--lp-max must be an integer >= 0, got 1.5"),
    (["--list-max", "-3"], "--list-max must be an integer >= 0"),
    (["--tol", "inf"], "--tol must be a finite number >= 0"),
])
def test_numeric_options_checked_where_read(tmp_path, capsys, planted, args, needle):
    """Before issue 14, --seed -1 with sampled quartets ended in an internal error (exit 1)."""
    from seqdist.cli import main

    path, _, _ = planted
    try:
        code = main(["audit", str(path), "--json", str(tmp_path / "a.json"), *args])
    except SystemExit as exc:  # argparse's usage errors leave through the parser's error()
        code = exc.code
    assert code == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("seqdist: error: ") and needle in lines[0], lines
    assert not (tmp_path / "a.json").exists()


def test_two_outputs_to_one_file_refused(tmp_path, cli, planted):
    """--json X --entry-counts X kept only one of the two (issue 14): now refused before any work."""
    path, _, _ = planted
    x = tmp_path / "x.out"
    p = cli("audit", path, "--json", x, "--entry-counts", x)
    assert p.returncode == 2 and p.stdout == ""
    assert p.stderr == f"seqdist: error: --json and --entry-counts both write to {x}: give each output its own file\n"
    assert not x.exists()
    p = cli("audit", path, "--json", "-", "--entry-counts", "-")
    assert p.returncode == 2 and "both write to standard output" in p.stderr and p.stdout == ""


def test_entry_counts_to_stdout_holds_the_matrix_alone(tmp_path, cli, planted):
    path, labels, _ = planted
    p = cli("audit", path, "--entry-counts", "-", "--out-format", "csv")
    assert p.returncode == 0, p.stderr
    from seqdist.io.matrices import _read_delimited

    m = _read_delimited(p.stdout, "stdout", ",")
    assert list(m.labels) == labels and m["s0", "s1"] > 0


def test_demo_summary_counts_and_missing_taxa(tmp_path, cli):
    """The brief's reproduction on the demo (planted saturated pair x04, x12): the summary said
    'most in x04 (29), x12 (29), x01 (2)' and 'all of 27405 quartets' then '20475 (100%)'."""
    import os

    from conftest import EXAMPLES

    d = tmp_path / "d.tsv"
    assert cli("distances", os.path.join(EXAMPLES, "dna_trouble.fasta"), "-o", d, "--quiet").returncode == 0
    js = tmp_path / "a.json"
    p = cli("audit", d, "--json", js)
    assert p.returncode == 0, p.stderr
    r = json.loads(js.read_text())
    fp = r["four_point"]
    assert "(per taxon: x04 29, x12 29; every other taxon 2)" in p.stdout
    assert "x01 2" not in p.stdout and "x01 (2)" not in p.stdout
    assert (f"all {fp['quartets']} quartets; {fp['examined']} examined, {fp['skipped_missing']} skipped: "
            "a side is missing") in p.stdout
    assert f"{fp['violated']} of {fp['examined']} examined" in p.stdout
    assert fp["examined"] < fp["quartets"] and "all of" not in p.stdout
