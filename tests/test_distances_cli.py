"""``seqdist distances`` on the command line: outputs, formats, bad input (exit 2, no file)."""

from __future__ import annotations

import json
import math
import os

import numpy as np
import pytest

from seqdist.core.matrix import DistanceMatrix
from seqdist.io.matrices import format_matrix, read_matrix, read_pairs

from conftest import open_text

BASE = "ACGTACGTTAGCCGATAGCTAGGCTTAACGGATCCGATCGATGCTAGCTAGGATCGATCG"
FAR = "".join({"A": "C", "C": "A", "G": "T", "T": "G"}[c] for c in BASE)


def _fasta(path, names, seqs):
    with open(path, "w") as f:
        f.writelines(f">{n}\n{s}\n" for n, s in zip(names, seqs))
    return str(path)


@pytest.fixture
def aln(tmp_path):
    seqs = [BASE, BASE[:10] + "T" + BASE[11:], BASE[:30] + "--" + BASE[32:], FAR,
            "-" * 30 + BASE[30:], BASE[:30] + "-" * 30]
    return _fasta(tmp_path / "a.fasta", ["one", "two", "three", "far", "right", "left"], seqs)


def test_outputs(cli, aln, tmp_path):
    out, sites, var, und, js = (str(tmp_path / x) for x in ("d.tsv", "s.tsv", "v.tsv", "u.txt", "r.json"))
    p = cli("distances", aln, "-o", out, "--model", "jc69", "--sites", sites, "--variance", var,
            "--undefined", und, "--json", js)
    assert p.returncode == 0, p.stderr
    warn = [ln for ln in p.stderr.splitlines() if "warning" in ln]
    assert len(warn) == 1 and "one-far (saturated)" in warn[0] and "right-left (no shared column)" in warn[0]
    D, S, V = read_matrix(out), read_matrix(sites), read_matrix(var)
    assert D.labels == ("one", "two", "three", "far", "right", "left")
    p1 = 1 / 60
    assert D["one", "two"] == pytest.approx(-0.75 * math.log(1 - 4 * p1 / 3))  # Jukes & Cantor 1969
    assert S["one", "three"] == 58 and S["right", "left"] == 0
    # Kimura & Ohta 1972 variance of the JC69 distance.
    assert V["one", "two"] == pytest.approx(p1 * (1 - p1) / (60 * (1 - 4 * p1 / 3) ** 2))
    assert np.isnan(D["one", "far"]) and np.isnan(V["one", "far"]) and np.isnan(D["right", "left"])
    pairs = read_pairs(und, D)  # the undefined list is a pair file the other commands read
    assert {tuple(sorted((D.labels[a], D.labels[b]))) for a, b in pairs} >= {("far", "one"), ("left", "right")}
    r = json.loads(open_text(js))
    assert r["model"] == "jc69" and r["n"] == 6 and r["undefined_pairs"] == len(pairs)


def test_formats_stdout_and_determinism(cli, aln, tmp_path):
    p = cli("distances", aln, "-o", "-", "--model", "k80", "--quiet")
    assert p.returncode == 0 and p.stderr == ""
    first = p.stdout
    assert cli("distances", aln, "-o", "-", "--model", "k80", "--quiet").stdout == first  # byte-identical
    for fmt in ("csv", "square", "lower"):
        out = str(tmp_path / f"d.{fmt}")
        assert cli("distances", aln, "-o", out, "--out-format", fmt, "--quiet").returncode == 0
        assert read_matrix(out, fmt).equals(read_matrix(str(tmp_path / "d.csv"), "csv"))
    p = cli("distances", "-", "-o", "-", "--model", "p", "--quiet", input=open_text(aln))
    assert p.returncode == 0 and p.stdout.count("\n") == 7


def test_protein_and_gamma(cli, tmp_path):
    prot = _fasta(tmp_path / "p.fasta", ["a", "b", "c"], ["MKVLWQERTYHHKLP", "MKVLWQDRTYHHKLA", "MRVLWNERTYHHKLP"])
    out = str(tmp_path / "p.tsv")
    p = cli("distances", prot, "-o", out, "--model", "poisson", "--gamma", "2")
    assert p.returncode == 0, p.stderr
    p2 = 2 / 15
    # Gamma Poisson distance a[(1 - p)^(-1/a) - 1] (Nei & Kumar 2000, from memory).
    assert read_matrix(out)["a", "b"] == pytest.approx(2 * ((1 - p2) ** -0.5 - 1))
    assert cli("distances", prot, "-o", out, "--model", "kimura", "--kernel", "bytes").returncode == 0


def test_shared_writer_matches_plain_formatting():
    # the table-assembly writer (n >= 50) against an obvious per-cell repr loop

    rng = np.random.default_rng(0)
    n = 260
    A = np.round(rng.random((n, n)), 3)
    A = (A + A.T) / 2
    np.fill_diagonal(A, 0)
    A[3, 7] = A[7, 3] = np.nan
    A[5, 9] = A[9, 5] = 1e-300
    labels = [f"s{i}" for i in range(n)]
    dm = DistanceMatrix._trusted(A, labels)

    def cell(v):
        return "NA" if np.isnan(v) else repr(float(v))

    plain = "\t" + "\t".join(labels) + "\n" + "".join(
        lab + "".join("\t" + cell(v) for v in row) + "\n" for lab, row in zip(labels, A))
    assert format_matrix(dm, "tsv") == plain
    lower = f"{n}\n" + "".join(" ".join([lab] + [cell(v) for v in row[:i]]) + "\n"
                               for i, (lab, row) in enumerate(zip(labels, A)))
    assert format_matrix(dm, "lower") == lower


BAD = [
    ("unequal.fasta", ">a\nACGT\n>b\nACG\n", [], "record 'b' (line 3) has 3 columns"),
    ("dup.fasta", ">a\nACGT\n>a\nACGA\n", [], "duplicate record id 'a'"),
    ("empty.fasta", "", [], "empty file"),
    ("notaln.fasta", "just some words\n", [], "not a FASTA alignment"),
    ("matrix.tsv", "\ta\tb\na\t0\t1\nb\t1\t0\n", [], "not a recognisable alignment"),
    ("junk.aln", "garbage here\n", [], "not a readable clustal alignment"),
    ("prot.fasta", ">a\nMKVLWQ\n>b\nMKVLWE\n", ["--model", "k80"], "model 'k80' is for DNA"),
    ("prot2.fasta", ">a\nMKVLWQ\n>b\nMKVLWE\n", ["--model", "logdet"], "model 'logdet' is for DNA"),
    ("dna.fasta", ">a\nACGT\n>b\nACGA\n", ["--model", "kimura"], "model 'kimura' is for protein"),
    ("dna2.fasta", ">a\nACGT\n>b\nACGA\n", ["--model", "logdet", "--gamma", "1"], "no gamma form"),
    ("dna3.fasta", ">a\nACGT\n>b\nACGA\n", ["--gamma", "-2"], "positive"),
    ("dna4.fasta", ">a\nA-G-\n>b\n-C-A\n", ["--gaps", "complete"], "no column"),
    ("dna5.fasta", ">a\nACGT\n>b\nACGA\n", ["--in-format", "nonsense"], "unknown alignment format"),
    ("dna6.fasta", ">a\nACGT\n>b\nAC#A\n", [], "character '#'"),
]


@pytest.mark.parametrize("name,text,extra,msg", BAD, ids=[b[0] for b in BAD])
def test_bad_input_exits_2_without_output(cli, tmp_path, name, text, extra, msg):
    path = tmp_path / name
    path.write_text(text)
    out = tmp_path / "out.tsv"
    keep = tmp_path / "keep.tsv"
    keep.write_text("precious\n")
    for target in (out, keep):
        p = cli("distances", str(path), "-o", str(target), "--sites", str(tmp_path / "s.tsv"), *extra)
        assert p.returncode == 2, p.stderr
        lines = p.stderr.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("seqdist: error: "), p.stderr
        assert msg in lines[0] and "Traceback" not in p.stderr
        if "--in-format" not in extra and "--gamma" not in extra:
            assert str(path) in lines[0]  # names the file
    assert not out.exists() and not (tmp_path / "s.tsv").exists()
    assert keep.read_text() == "precious\n"
    assert not [f for f in os.listdir(tmp_path) if f.startswith(".seqdist-")]


def test_binary_and_missing_files(cli, tmp_path):
    junk = tmp_path / "junk.fasta"
    junk.write_bytes(bytes(range(256)) * 4)
    for path, msg in ((junk, "binary data"), (tmp_path / "absent.fasta", "no such alignment file")):
        p = cli("distances", str(path), "-o", str(tmp_path / "o.tsv"))
        assert p.returncode == 2 and p.stderr.startswith("seqdist: error: ") and msg in p.stderr
        assert len(p.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "o.tsv").exists()


# ----------------------------------------------------------------- no hang, no raw numpy warning
CLUSTAL_HEAD = "CLUSTAL W (1.83) multiple sequence alignment\n"
HEADER_ONLY = [
    # Biopython 1.8x's Clustal reader loops for ever on a header with no block (measured: 100% CPU,
    # never returns); the 20 s timeout only turns a hang into a test failure.
    ("head.aln", CLUSTAL_HEAD),
    ("head_blank.aln", CLUSTAL_HEAD + "\n\n\n"),
    ("head_sniffed", CLUSTAL_HEAD + "\n"),                     # no extension: recognised by content
    ("head.sto", "# STOCKHOLM 1.0\n"),
    ("head.nex", "#NEXUS\n"),
    ("head.phy", " 3 6\n"),
    ("head.msf", "!!NA_MULTIPLE_ALIGNMENT 1.0\n"),
    ("head.maf", "##maf version=1\n"),
]


@pytest.mark.parametrize("name,text", HEADER_ONLY, ids=[h[0] for h in HEADER_ONLY])
def test_header_only_files_exit_2(cli, tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text)
    out = tmp_path / "o.tsv"
    p = cli("distances", str(path), "-o", str(out), timeout=20)
    assert p.returncode == 2, p.stderr
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"seqdist: error: {path}: "), p.stderr
    assert not out.exists()


NEXUS_BAD = [
    # (name, what is wrong, the message part that names it); NEXUS layout: Maddison, Swofford &
    # Maddison 1997 (from memory).
    ("unknown.nex", "dimensions ntax=3 nchar=6;\nformat datatype=dna;\nfoo bar=1;\n", "line 5: unknown command 'foo'"),
    ("ntax.nex", "dimensions ntax=4 nchar=6;\nformat datatype=dna;\n", "line 3: the dimensions give ntax=4"),
    ("nchar.nex", "dimensions ntax=3 nchar=7;\nformat datatype=dna;\n", "give nchar=7"),
    ("nchar5.nex", "dimensions ntax=3 nchar=5;\nformat datatype=dna;\n", "line 6: taxon 'a' has 6 characters"),
]


@pytest.mark.parametrize("name,head,msg", NEXUS_BAD, ids=[b[0] for b in NEXUS_BAD])
def test_malformed_nexus_exits_2_naming_the_line(cli, tmp_path, name, head, msg):
    path = tmp_path / name
    path.write_text("#NEXUS\nbegin data;\n" + head + "matrix\na ACGTAC\nb ACGTAA\nc ACCTAA\n;\nend;\n")
    out = tmp_path / "o.tsv"
    p = cli("distances", str(path), "-o", str(out), timeout=60)
    assert p.returncode == 2, p.stderr
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"seqdist: error: {path}: ") and msg in lines[0], p.stderr
    assert "internal error" not in p.stderr and not out.exists()


@pytest.mark.parametrize("quiet", [[], ["--quiet"]])
def test_no_residue_at_all_is_an_error_not_a_numpy_warning(cli, tmp_path, quiet):
    # An alignment of N and gaps only: base frequencies would be 0/0 (numpy's 'invalid value' warning,
    # with a source path, even under --quiet). It is an input error naming the file.
    path = _fasta(tmp_path / "n.fasta", ["a", "b", "c"], ["NNNN", "N-NN", "----"])
    for model in ("f81", "tn93", "t92", "tn84", "k80", "logdet"):
        p = cli("distances", path, "-o", str(tmp_path / "o.tsv"), "--model", model, *quiet)
        assert p.returncode == 2, p.stderr
        assert "RuntimeWarning" not in p.stderr and ".py:" not in p.stderr
        assert p.stderr.startswith(f"seqdist: error: {path}: no sequence holds an unambiguous residue")
        assert len(p.stderr.strip().splitlines()) == 1


def test_gamma_overflow_is_a_missing_entry_not_a_numpy_warning(cli, tmp_path):
    # a (x^(-1/a) - 1) overflows for a tiny shape a near saturation (Jin & Nei 1990 form): the entry is
    # missing, named in the one warning, and numpy's overflow warning never reaches the user.
    path = _fasta(tmp_path / "g.fasta", ["a", "b", "c"], ["ACGTACGTAC", "ACGTACGTAC", "CAGTACGAGC"])
    p = cli("distances", path, "-o", str(tmp_path / "o.tsv"), "--model", "k80", "--gamma", "0.001")
    assert p.returncode == 0, p.stderr
    assert "RuntimeWarning" not in p.stderr and ".py:" not in p.stderr and "overflow" not in p.stderr
    warn = [ln for ln in p.stderr.splitlines() if "warning" in ln]
    assert len(warn) == 1 and "a-c (saturated)" in warn[0] and "b-c (saturated)" in warn[0]
    D = read_matrix(str(tmp_path / "o.tsv"))
    assert np.isnan(D["a", "c"]) and D["a", "b"] == 0
