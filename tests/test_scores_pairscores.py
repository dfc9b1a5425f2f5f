"""Alignment-score distances between unaligned sequences (``seqdist pairscores``)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from Bio.Align import PairwiseAligner, substitution_matrices

from seqdist.core.errors import InputError
from seqdist.scores.matrices import ScoreMatrix
from seqdist.scores.pairwise import distances_from_scores, read_fasta, score_distances

from conftest import open_text

# A tiny matrix for hand computation: match +2, mismatch -1 over {A, C}.
TINY = ScoreMatrix.from_array([[2, -1], [-1, 2]], "AC", name="tiny")

PROTEINS = {
    "p1": "MKVLAAGIVALLLAAGCSSHKDEWRT",
    "p2": "MKVLAAGIVALLLTAGCSSHKDEWRT",
    "p3": "MKILAAGLVALLLAAGCSHKDEWR",
    "p4": "MRVLSAGIVALLIAAGCSSHKDEYRTPP",
    "p5": "WWHPYFGNQDERKLMCC",
}


def write_fasta(path, records):
    with open(path, "w") as f:
        for rid, s in records.items():
            f.write(f">{rid} some description\n")
            for k in range(0, len(s), 10):
                f.write(s[k:k + 10] + "\n")


def test_worked_example_global_by_hand():
    # a = AAC, b = AC; +2 match, -1 mismatch, linear gaps of 2 per position (G = E = 2).
    # Best global alignments: AAC/-AC or AAC/A-C: 2 + 2 - 2 = 2 (AAC/AC- scores 2 - 1 - 2 = -1).
    # S_aa = 6, S_bb = 4, S_max = 5. Alignment length L = 3, one gap (score -2),
    # N_a = {A: 2, C: 1}, N_b = {A: 1, C: 1}: sum s N_a N_b = 2*2 - 2 - 1 + 2 = 3,
    # S_rand = 3/3 - 2 = -1 (Feng & Doolittle 1996). S_eff = (2 + 1)/(5 + 1) = 1/2,
    # D = -100 ln(1/2) = 69.3147...; cosine: 1 - 2/sqrt(24). (Hand computation.)
    r = score_distances(["a", "b"], ["AAC", "AC"], TINY, gap_open=2, gap_extend=2, progress=False)
    assert r.scores[0, 1] == 2 and r.scores[0, 0] == 6 and r.scores[1, 1] == 4
    assert r.random_scores[0, 1] == pytest.approx(-1.0)
    assert r.dm["a", "b"] == pytest.approx(100 * math.log(2), rel=1e-12)
    r = score_distances(["a", "b"], ["AAC", "AC"], TINY, gap_open=2, gap_extend=2, formula="cosine",
                        progress=False)
    assert r.dm["a", "b"] == pytest.approx(1 - 2 / math.sqrt(24), rel=1e-12)


def test_worked_example_local_by_hand():
    # Local: best segment pair AC/AC = 4; self-scores 6 and 4 (S_max = 5). The segment pair
    # has L = 2, no gaps, N = {A: 1, C: 1} on both sides: S_rand = (2 - 1 - 1 + 2)/2 = 1.
    # S_eff = (4 - 1)/(5 - 1) = 3/4, D = -100 ln(3/4) = 28.768...; cosine 1 - 4/sqrt(24).
    r = score_distances(["a", "b"], ["AAC", "AC"], TINY, mode="local", gap_open=2, gap_extend=2,
                        progress=False)
    assert r.dm["a", "b"] == pytest.approx(-100 * math.log(0.75), rel=1e-12)
    r = score_distances(["a", "b"], ["AAC", "AC"], TINY, mode="local", gap_open=2, gap_extend=2,
                        formula="cosine", progress=False)
    assert r.dm["a", "b"] == pytest.approx(1 - 4 / math.sqrt(24), rel=1e-12)


def test_formula_on_plain_arrays():
    D, reasons, clipped = distances_from_scores(np.array([[6.0, 2.0], [2.0, 4.0]]),
                                                np.array([[np.nan, -1.0], [-1.0, np.nan]]), "fd")
    assert D[0, 1] == pytest.approx(100 * math.log(2)) and not reasons and not clipped


@pytest.mark.parametrize("mode", ["global", "local"])
@pytest.mark.parametrize("formula", ["fd", "cosine"])
def test_identical_sequences_give_zero_and_matrix_is_symmetric(mode, formula):
    ids = list(PROTEINS) + ["p1_copy"]
    seqs = list(PROTEINS.values()) + [PROTEINS["p1"]]
    r = score_distances(ids, seqs, "BLOSUM62", mode=mode, formula=formula, progress=False)
    v = r.dm.values
    assert r.dm["p1", "p1_copy"] == 0.0
    assert np.array_equal(v, v.T) and (np.diagonal(v) == 0).all()
    off = v[~np.eye(len(ids), dtype=bool)]
    assert (off[np.isfinite(off)] >= 0).all()
    # Order of the pair does not matter: reversing the input permutes the matrix.
    rr = score_distances(ids[::-1], seqs[::-1], "BLOSUM62", mode=mode, formula=formula, progress=False)
    np.testing.assert_array_equal(rr.dm.values, v[::-1, ::-1])


def test_scores_equal_biopython_aligner():
    # Reference: Biopython's PairwiseAligner used directly.
    m = substitution_matrices.load("BLOSUM62")
    for mode in ("global", "local"):
        al = PairwiseAligner(mode=mode, substitution_matrix=m, open_gap_score=-11, extend_gap_score=-1)
        ids, seqs = list(PROTEINS), list(PROTEINS.values())
        r = score_distances(ids, seqs, "BLOSUM62", mode=mode, progress=False)
        for i in range(len(ids)):
            for j in range(len(ids)):
                assert r.scores[i, j] == al.score(seqs[i], seqs[j])


def test_more_divergent_pairs_are_further():
    r = score_distances(list(PROTEINS), list(PROTEINS.values()), "BLOSUM62", progress=False)
    assert r.dm["p1", "p2"] < r.dm["p1", "p3"] < r.dm["p1", "p5"]


def test_parallel_equals_serial_byte_for_byte(tmp_path, cli):
    rng = np.random.default_rng(3)
    aa = np.array(list("ARNDCQEGHILKMFPSTWYV"))
    root = rng.choice(aa, 60)
    recs = {}
    for k in range(9):
        s = root.copy()
        hit = rng.random(60) < 0.1 * (k % 4)
        s[hit] = rng.choice(aa, int(hit.sum()))
        recs[f"s{k}"] = "".join(s)
    ids, seqs = list(recs), list(recs.values())
    one = score_distances(ids, seqs, "BLOSUM62", processes=1, progress=False)
    two = score_distances(ids, seqs, "BLOSUM62", processes=2, chunk_size=4, progress=False)
    assert one.dm.equals(two.dm)
    fa = tmp_path / "s.fasta"
    write_fasta(fa, recs)
    a, b = tmp_path / "a.tsv", tmp_path / "b.tsv"
    assert cli("pairscores", fa, "-o", a, "--processes", "1").returncode == 0
    assert cli("pairscores", fa, "-o", b, "--processes", "2").returncode == 0
    assert a.read_bytes() == b.read_bytes()


def test_undefined_distance_is_missing_with_a_warning(tmp_path, cli):
    # AAAA vs CCCC under TINY: S_ab = -4 (four mismatches), S_rand = (16 * -1)/4 = -4, so
    # S_ab - S_rand = 0 and -ln 0 is undefined (hand computation).
    mat = tmp_path / "tiny.txt"
    mat.write_text("   A  C\nA  2 -1\nC -1  2\n")
    fa = tmp_path / "s.fasta"
    fa.write_text(">x\nAAAA\n>y\nCCCC\n>z\nAACA\n")
    out, js = tmp_path / "d.tsv", tmp_path / "d.json"
    r = cli("pairscores", fa, "-o", out, "--matrix", mat, "--gap-open", "2", "--gap-extend", "2",
            "--json", js)
    assert r.returncode == 0, r.stderr
    assert "warning" in r.stderr and "x-y" in r.stderr and "S_ab <= S_rand" in r.stderr
    rows = [line.split("\t") for line in out.read_text().splitlines()]
    assert rows[1][2] == "NA" and rows[2][1] == "NA"
    assert json.loads(open_text(js))["missing_pairs"][0][:2] == ["x", "y"]


def test_read_fasta(tmp_path):
    p = tmp_path / "s.fasta"
    p.write_text(">a desc\nMK-V\nl.\n\n>b\nMKV\n")
    ids, seqs, lines = read_fasta(str(p))
    assert ids == ["a", "b"] and seqs == ["MKVL", "MKV"] and lines == [1, 5]


@pytest.mark.parametrize("text,msg", [
    (">a\nMKV\n>a\nMKV\n", r"s\.fasta: line 3: duplicate record id 'a'"),
    ("MKV\n>a\nMKV\n", r"s\.fasta: line 1: sequence data before the first '>'"),
    ("", r"s\.fasta: no FASTA records"),
    (">a\nMKV\n>b\nMK1V\n", r"s\.fasta: record 'b' \(line 3\): letter '1' \(position 3\) is not in score matrix BLOSUM62"),  # noqa: E501 (the exact message)
])
def test_bad_sequences_exit_2(tmp_path, cli, text, msg):
    import re

    p = tmp_path / "s.fasta"
    p.write_text(text)
    r = cli("pairscores", p, "-o", tmp_path / "d.tsv")
    assert r.returncode == 2, r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and re.search(msg, lines[0]) and lines[0].startswith("seqdist: error:")
    assert not (tmp_path / "d.tsv").exists()


def test_asymmetric_matrix_refused(tmp_path):
    sm = ScoreMatrix.from_array([[2, -1], [-2, 2]], "AC", name="asym")
    with pytest.raises(InputError, match="not symmetric"):
        score_distances(["a", "b"], ["AC", "CA"], sm, progress=False)


def test_cli_stdout_and_options(tmp_path, cli):
    fa = tmp_path / "p.fasta"
    write_fasta(fa, PROTEINS)
    r = cli("pairscores", fa, "-o", "-", "--mode", "local", "--formula", "cosine", "--gap-open", "10",
            "--gap-extend", "0.5", "--matrix", "blosum45", "--processes", "1")
    assert r.returncode == 0, r.stderr
    lines = r.stdout.splitlines()
    assert lines[0].split("\t")[1:] == list(PROTEINS) and len(lines) == 6
    assert cli("pairscores", fa, "-o", "-", "--mode", "semi").returncode == 2


@pytest.mark.parametrize("mode", ["global", "local"])
def test_random_score_against_a_plain_loop(mode):
    # Plain reference for the vectorised S_rand: Biopython's own `aligned` blocks and
    # `length`, summed in Python loops (Feng & Doolittle 1996 formula as in the module docs).
    m = substitution_matrices.load("BLOSUM62")
    al = PairwiseAligner(mode=mode, substitution_matrix=m, open_gap_score=-11, extend_gap_score=-1)
    ids, seqs = list(PROTEINS), list(PROTEINS.values())
    r = score_distances(ids, seqs, "BLOSUM62", mode=mode, progress=False)
    for i in range(len(seqs)):
        for j in range(i + 1, len(seqs)):
            a, b = seqs[i], seqs[j]
            aln = al.align(a, b)[0]
            subst = sum(m[a[x], b[y]] for (s0, e0), (s1, _) in zip(*aln.aligned) for x, y in
                        zip(range(s0, e0), range(s1, s1 + e0 - s0)))
            c = aln.coordinates
            sa, sb = (a, b) if mode == "global" else (a[c[0, 0]:c[0, -1]], b[c[1, 0]:c[1, -1]])
            comp = sum(m[x, y] for x in sa for y in sb)
            want = comp / aln.length + (aln.score - subst)
            assert r.random_scores[i, j] == pytest.approx(want, rel=1e-12, abs=1e-9)


def test_free_end_gaps():
    # MKV vs MKVL under BLOSUM62, gaps 11/1: with the overhang charged, S_ab = 5 + 5 + 4 - 11 = 3;
    # free end gaps give S_ab = 14 (s(M,M) = 5, s(K,K) = 5, s(V,V) = 4; Henikoff & Henikoff 1992).
    r = score_distances(["a", "b"], ["MKV", "MKVL"], "BLOSUM62", formula="cosine", progress=False)
    assert r.scores[0, 1] == 3
    r = score_distances(["a", "b"], ["MKV", "MKVL"], "BLOSUM62", formula="cosine", free_end_gaps=True,
                        progress=False)
    assert r.scores[0, 1] == 14 and r.scores[1, 1] == 18
    assert r.dm["a", "b"] == pytest.approx(1 - 14 / math.sqrt(14 * 18))


# ----------------------------------------------------------------- alphabet and default matrix
DNA = {"d1": "ACGTACGTTAGCCGATAGCT", "d2": "ACGTACGTTAGCCGTTAGCT", "d3": "ACGAACGTTAGGCGATAGC", "d4": "TTGTACCTTAGCCGA"}


def test_dna_gets_a_nucleotide_matrix_by_default():
    # DNA is detected as for alignments (>= 90% A C G T U N, common practice) and aligned under
    # NUC.4.4 (+5/-4, shipped with Biopython); reference: Biopython's PairwiseAligner with that matrix.
    m = substitution_matrices.load("NUC.4.4")
    ids, seqs = list(DNA), list(DNA.values())
    r = score_distances(ids, seqs, progress=False)
    assert r.matrix == "NUC.4.4" and r.alphabet == "dna"
    al = PairwiseAligner(mode="global", substitution_matrix=m, open_gap_score=-11, extend_gap_score=-1)
    for i in range(len(ids)):
        for j in range(len(ids)):
            assert r.scores[i, j] == al.score(seqs[i], seqs[j])
    # Proteins keep BLOSUM62; RNA reads U as T under the nucleotide matrix.
    assert score_distances(list(PROTEINS), list(PROTEINS.values()), progress=False).matrix == "BLOSUM62"
    rna = score_distances(["a", "b"], ["ACGUACGU", "ACGUACGA"], progress=False)
    dna = score_distances(["a", "b"], ["ACGTACGT", "ACGTACGA"], progress=False)
    assert rna.matrix == "NUC.4.4" and rna.dm.equals(dna.dm)
    # Forcing the alphabet picks the other default.
    assert score_distances(ids, seqs, alphabet="protein", progress=False).matrix == "BLOSUM62"


def test_protein_matrix_for_dna_warns():
    from seqdist.core.errors import DataWarning

    with pytest.warns(DataWarning, match=r"s\.fa: the sequences are DNA .*BLOSUM62 is a protein matrix.*NUC\.4\.4"):
        r = score_distances(list(DNA), list(DNA.values()), "BLOSUM62", source="s.fa", progress=False)
    assert r.matrix == "BLOSUM62"


def test_matrix_must_cover_every_letter_and_processes_must_be_positive():
    with pytest.raises(InputError, match=r"s\.fa: record 'b' \(line 3\): letter 'G' \(position 3\) is not in "
                                         r"score matrix tiny .*--matrix"):
        score_distances(["a", "b"], ["ACCA", "ACGA"], TINY, source="s.fa", record_lines=[1, 3], progress=False)
    for bad in (0, -1, 1.5):
        with pytest.raises(InputError, match="parameter 'processes' must be an integer >= 1, got "):
            score_distances(["a", "b"], ["MKV", "MKL"], processes=bad, progress=False)


def test_cli_dna_default_matrix_json_and_help(tmp_path, cli):
    fa = tmp_path / "d.fasta"
    write_fasta(fa, DNA)
    out, js = tmp_path / "d.tsv", tmp_path / "d.json"
    r = cli("pairscores", fa, "-o", out, "--json", js, "--processes", "1")
    assert r.returncode == 0, r.stderr
    info = json.loads(open_text(js))
    assert info["matrix"] == "NUC.4.4" and info["alphabet"] == "dna" and "warning" not in r.stderr
    first = (out.read_bytes(), js.read_bytes())
    assert cli("pairscores", fa, "-o", out, "--json", js, "--processes", "1").returncode == 0
    assert (out.read_bytes(), js.read_bytes()) == first  # byte-identical, JSON included (no run time in it)
    r = cli("pairscores", fa, "-o", out, "--matrix", "BLOSUM62")
    assert r.returncode == 0 and [ln for ln in r.stderr.splitlines() if "warning" in ln] == [
        f"seqdist: warning: {fa}: the sequences are DNA (detected), but BLOSUM62 is a protein matrix; "
        "the default for DNA is NUC.4.4"]
    h = cli("pairscores", "--help").stdout
    assert "NUC.4.4" in h and "--alphabet" in h


@pytest.mark.parametrize("value", ["0", "-1", "two"])
def test_cli_processes_must_be_positive(tmp_path, cli, value):
    fa = tmp_path / "p.fasta"
    write_fasta(fa, PROTEINS)
    r = cli("pairscores", fa, "-o", tmp_path / "d.tsv", "--processes", value)
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("seqdist: error: --processes must be ")
    assert not (tmp_path / "d.tsv").exists()


def test_cli_letter_not_covered_names_file_and_letter(tmp_path, cli):
    fa = tmp_path / "x.fasta"
    fa.write_text(">a\nACGTACGTAC\n>b\nACGTAXGTAC\n")
    r = cli("pairscores", fa, "-o", tmp_path / "d.tsv")
    assert r.returncode == 2
    line = r.stderr.strip()
    assert line.startswith(f"seqdist: error: {fa}: record 'b' (line 3): letter 'X' (position 6) is not in "
                           "score matrix NUC.4.4") and "--matrix" in line
