"""Reading and encoding alignments (seqdist.io.alignment).

The reference for every format is Biopython's own AlignIO reader (Cock et al.
2009, Biopython: freely available Python tools for computational molecular
biology): our records, ids and residues must be what it reads. Alphabet and
code conventions (IUPAC codes, U read as T, case ignored) are the IUPAC-IUB
nomenclature (Cornish-Bowden 1985) and the outside contract.
"""

from __future__ import annotations

import io

import numpy as np
import pytest
from Bio import AlignIO, SeqIO
from Bio.Align import MultipleSeqAlignment
from Bio.Seq import Seq
from Bio.SeqRecord import SeqRecord

from seqdist.core.errors import DataWarning, InputError
from seqdist.io.alignment import MISSING, Alignment, alignment_formats, read_alignment

IDS = ["alpha", "beta_long_name", "c"]
SEQS = ["ACGT-ACGTA", "ACGTTACG-A", "acgunACGTA"]


def _msa():
    return MultipleSeqAlignment([SeqRecord(Seq(s), id=i, description="") for i, s in zip(IDS, SEQS)])


def _write(tmp_path, name, text):
    p = tmp_path / name
    p.write_text(text)
    return str(p)


def _expected_codes(seqs):
    # Plain re-encoding by the contract's rule (A C G T = 0..3, U as T, case ignored, rest missing).
    table = {"A": 0, "C": 1, "G": 2, "T": 3, "U": 3}
    return [[table.get(ch.upper(), MISSING) for ch in s] for s in seqs]


@pytest.mark.parametrize("fmt,ext", [("clustal", ".aln"), ("stockholm", ".sto"), ("phylip-relaxed", ".phy"),
                                     ("fasta", ".fasta")])
def test_formats_match_biopython(tmp_path, fmt, ext):
    buf = io.StringIO()
    AlignIO.write(_msa(), buf, fmt)
    path = _write(tmp_path, "a" + ext, buf.getvalue())
    aln = read_alignment(path)
    ref = AlignIO.read(path, fmt)  # the outside reference reader
    assert list(aln.labels) == [r.id for r in ref]
    assert aln.codes.tolist() == _expected_codes([str(r.seq) for r in ref])
    assert aln.alphabet == "dna"


def test_strict_phylip_names_with_spaces(tmp_path):
    # Strict PHYLIP: 10-character names that may hold spaces (Felsenstein's PHYLIP documentation, from memory).
    text = " 2 6\nmy seq    ACGTAC\nother     ACGTTT\n"
    path = _write(tmp_path, "s.phy", text)
    aln = read_alignment(path)
    assert list(aln.labels) == [r.id for r in AlignIO.read(path, "phylip")] == ["my seq", "other"]
    assert aln.codes.shape == (2, 6)


def test_nexus(tmp_path):
    text = ("#NEXUS\nbegin data;\ndimensions ntax=3 nchar=8;\nformat datatype=dna missing=? gap=-;\nmatrix\n"
            "one ACGTACGT\ntwo ACGTACGA\nthree ACG-ACGA\n;\nend;\n")
    path = _write(tmp_path, "x.nex", text)
    aln = read_alignment(path)
    ref = AlignIO.read(path, "nexus")
    assert list(aln.labels) == [r.id for r in ref]
    assert aln.codes.tolist() == _expected_codes([str(r.seq) for r in ref])


def test_stockholm_insert_columns(tmp_path):
    # Stockholm (Sonnhammer et al. 1998, Pfam): '.' marks insert-column gaps, lower case inserted residues.
    text = ("# STOCKHOLM 1.0\n#=GF ID test\nseq1  ACDEF..GHIKlmn\nseq2  ACDEFqrGHIK...\n"
            "#=GC RF xxxxx..xxxxxxx\n//\n")
    path = _write(tmp_path, "p.sto", text)
    aln = read_alignment(path)
    ref = AlignIO.read(path, "stockholm")
    assert aln.alphabet == "protein"
    assert list(aln.labels) == [r.id for r in ref] == ["seq1", "seq2"]
    states = "ACDEFGHIKLMNPQRSTVWY"
    for row, r in zip(aln.codes, ref):
        want = [states.index(ch.upper()) if ch.upper() in states else MISSING for ch in str(r.seq)]
        assert row.tolist() == want


def test_fasta_parser_matches_biopython(tmp_path):
    rng = np.random.default_rng(3)
    lines = []
    seqs = []
    for i in range(7):
        s = "".join(rng.choice(list("ACGTacgt-NRY"), 131))
        seqs.append(s)
        lines.append(f">rec{i} some description {i}")
        lines.extend(s[k:k + 50] for k in range(0, len(s), 50))
    path = _write(tmp_path, "r.fa", "\n".join(lines) + "\n\n")
    aln = read_alignment(path, alphabet="dna")
    with open(path) as handle:
        ref = list(SeqIO.parse(handle, "fasta"))
    assert list(aln.labels) == [r.id for r in ref]
    assert [len(r.seq) for r in ref] == [aln.length] * 7
    # Case-folded residues, U as T; R and Y are partial ambiguity codes 4 and 5 (IUPAC).
    table = {"A": 0, "C": 1, "G": 2, "T": 3, "R": 4, "Y": 5}
    assert aln.codes.tolist() == [[table.get(ch.upper(), MISSING) for ch in str(r.seq)] for r in ref]


def test_format_by_content_and_option(tmp_path):
    buf = io.StringIO()
    AlignIO.write(_msa(), buf, "clustal")
    path = _write(tmp_path, "noext", buf.getvalue())
    assert read_alignment(path).labels == tuple(IDS)
    path2 = _write(tmp_path, "wrong.txt", buf.getvalue())
    assert read_alignment(path2, fmt="clustal").labels == tuple(IDS)
    assert "nexus" in alignment_formats() and "fasta" in alignment_formats()


def test_alphabet_detection_and_forcing():
    assert Alignment.from_sequences(["a", "b"], ["ACGU", "ACGN"]).alphabet == "dna"
    prot = Alignment.from_sequences(["a", "b"], ["MKVLW", "MKVAW"])
    assert prot.alphabet == "protein"
    # A protein made only of A, C, G, T letters can be forced.
    forced = Alignment.from_sequences(["a", "b"], ["ACGTAC", "ACGTAA"], alphabet="protein")
    assert forced.alphabet == "protein" and forced.n_states == 20
    with pytest.raises(InputError, match="alphabet"):
        Alignment.from_sequences(["a"], ["ACGT"], alphabet="rna")


def test_codes_and_tables():
    with pytest.warns(DataWarning, match="forced to DNA, but 60% of the letters are not nucleotides"):
        aln = Alignment.from_sequences(["a", "b"], ["AcGtU-.N?", "RYKMSWBDH"], alphabet="dna")
    assert aln.codes[0].tolist() == [0, 1, 2, 3, 3] + [MISSING] * 4
    assert aln.codes[1].tolist() == list(range(4, 13))
    t = aln.state_table(partial=True)
    # IUPAC: B = C, G or T; D = A, G or T.
    assert np.allclose(t[10], [0, 1 / 3, 1 / 3, 1 / 3]) and np.allclose(t[11], [1 / 3, 0, 1 / 3, 1 / 3])
    assert not aln.state_table()[4:].any()
    assert aln.residue_counts().tolist() == [1, 1, 1, 2]
    assert aln.complete_columns().tolist() == [False] * 9
    assert aln.codes.flags.writeable is False


def test_take_columns_and_subset():
    aln = Alignment.from_sequences(["x", "y", "z"], ["ACGT", "AGGT", "TTTT"])
    boot = aln.take_columns([3, 3, 0, 1])
    assert boot.codes.tolist() == [[3, 3, 0, 1], [3, 3, 0, 2], [3, 3, 3, 3]]
    assert aln.take_columns(np.array([True, False, True, False])).length == 2
    assert aln.subset(["z", "x"]).codes.tolist() == [[3, 3, 3, 3], [0, 1, 2, 3]]
    with pytest.raises(InputError):
        aln.take_columns([4])
    with pytest.raises(InputError, match="unknown record id 'w'"):
        aln.subset(["w"])


# ----------------------------------------------------------------- bad input
BAD = [
    ("unequal.fasta", ">a\nACGT\n>b\nACG\n", r"record 'b' \(line 3\) has 3 columns .*'a' \(line 1\) has 4"),
    ("dup.fasta", ">a\nACGT\n>b\nACGT\n>a\nACGA\n", r"duplicate record id 'a' \(records 1 and 3, lines 1 and 5\)"),
    ("empty.fasta", "", "empty file"),
    ("blank.fasta", "\n\n  \n", "empty file"),
    ("noheader.fasta", "ACGT\nACGT\n", r"line 1: not a FASTA alignment"),
    ("char.fasta", ">a\nACGT\nAC\n>b\nACGT\nA1\n", r"record 'b' \(line 6\): column 6: character '1'"),
    ("noid.fasta", ">\nACGT\n", "line 1: record without an id"),
    ("gaps.fasta", ">a\n----\n>b\n-..-\n", "no residues"),
    ("zero.fasta", ">a\n>b\n", "empty"),
    ("matrix.tsv", "\ta\tb\na\t0\t1\nb\t1\t0\n", "not a recognisable alignment"),
    ("junk.aln", "hello world\n", "not a readable clustal alignment"),
    ("two.sto", "# STOCKHOLM 1.0\na AC\n//\n# STOCKHOLM 1.0\na AC\n//\n", "not a readable stockholm"),
]


@pytest.mark.parametrize("name,text,msg", BAD, ids=[b[0] for b in BAD])
def test_bad_alignments(tmp_path, name, text, msg):
    path = _write(tmp_path, name, text)
    with pytest.raises(InputError, match=msg) as exc:
        read_alignment(path)
    assert str(exc.value).startswith(path)


def test_binary_and_missing(tmp_path):
    p = tmp_path / "bin.fasta"
    p.write_bytes(b">a\nAC\x00\x01GT\n")
    with pytest.raises(InputError, match="binary"):
        read_alignment(str(p))
    p2 = tmp_path / "latin.fasta"
    p2.write_bytes(b">a\nAC\xe9GT\n")
    with pytest.raises(InputError, match="not UTF-8"):
        read_alignment(str(p2))
    with pytest.raises(InputError, match="no such alignment file"):
        read_alignment(str(tmp_path / "absent.fasta"))
    with pytest.raises(InputError, match="unknown alignment format"):
        read_alignment(str(p), fmt="genbank-ish")


def test_unicode_residue(tmp_path):
    path = _write(tmp_path, "u.fasta", ">a\nACGT\n>b\nACGé\n")
    with pytest.raises(InputError, match=r"record 'b' \(line 3\): column 4: character 'é'"):
        read_alignment(path)


def test_forced_dna_warns():
    from seqdist.core.errors import DataWarning

    with pytest.warns(DataWarning, match="not nucleotides"):
        Alignment.from_sequences(["a", "b"], ["MKVLWQ", "MKVLWE"], alphabet="dna")


# ----------------------------------------------------------------- header-only, truncated, junk
# A small valid file of each format (layouts from Biopython's AlignIO writers and the format
# descriptions: Clustal, Stockholm (Sonnhammer et al. 1998), NEXUS (Maddison, Swofford & Maddison
# 1997), PHYLIP, MSF, MAF; from memory).
GOOD = {
    "clustal": "CLUSTAL W (1.83) multiple sequence alignment\n\na      ACGTAC\nb      ACGTAA\nc      ACCTAA\n"
               "       ***  *\n",
    "stockholm": "# STOCKHOLM 1.0\na ACGTAC\nb ACGTAA\nc ACCTAA\n//\n",
    "nexus": "#NEXUS\nbegin data;\ndimensions ntax=3 nchar=6;\nformat datatype=dna missing=? gap=-;\nmatrix\n"
             "a ACGTAC\nb ACGTAA\nc ACCTAA\n;\nend;\n",
    "phylip": " 3 6\na         ACGTAC\nb         ACGTAA\nc         ACCTAA\n",
    "phylip-relaxed": " 3 6\na ACGTAC\nb ACGTAA\nc ACCTAA\n",
    "msf": "!!NA_MULTIPLE_ALIGNMENT 1.0\n\n x.msf  MSF: 6  Type: N  Check: 0 ..\n\n"
           " Name: a  Len: 6  Check: 0  Weight: 1.00\n Name: b  Len: 6  Check: 0  Weight: 1.00\n"
           " Name: c  Len: 6  Check: 0  Weight: 1.00\n\n//\n\na ACGTAC\nb ACGTAA\nc ACCTAA\n",
    "maf": "##maf version=1\n\na score=0\ns a 0 6 + 6 ACGTAC\ns b 0 6 + 6 ACGTAA\ns c 0 6 + 6 ACCTAA\n\n",
}
# Formats that say where the alignment ends or how long a row is, so any cut inside the data shows.
SAYS_ITS_LENGTH = ("stockholm", "nexus", "phylip", "phylip-relaxed", "msf", "maf")


@pytest.mark.parametrize("fmt", sorted(GOOD))
def test_good_example_files_read(tmp_path, fmt):
    aln = read_alignment(_write(tmp_path, "g.dat", GOOD[fmt]), fmt=fmt)
    assert aln.labels == ("a", "b", "c") and aln.codes.shape == (3, 6)


@pytest.mark.parametrize("fmt", sorted(set(GOOD) - {"clustal"}))  # Clustal: through the CLI with a timeout
def test_header_only_files_are_input_errors(tmp_path, fmt):
    first = GOOD[fmt].split("\n", 1)[0] + "\n"
    for text in (first, first + "\n\n"):
        path = _write(tmp_path, "h.dat", text)
        with pytest.raises(InputError) as exc:
            read_alignment(path, fmt=fmt)
        assert str(exc.value).startswith(path + ": ")


@pytest.mark.parametrize("fmt", SAYS_ITS_LENGTH)
def test_truncated_files_are_input_errors(tmp_path, fmt):
    text = GOOD[fmt]
    body = text.index("ACGTAC")
    # Every cut from the first residue on, short of the complete data: NEXUS up to its closing 'end;'
    # (a file cut inside that last word still holds every row); MAF inside its 's' lines (a block
    # cut between whole lines is a smaller valid block).
    last = text.index("end;") if fmt == "nexus" else len(text.rstrip("\n"))
    for cut in range(body, last):
        if fmt == "maf" and "\n" in (text[cut - 1], text[cut]):
            continue
        path = _write(tmp_path, "t.dat", text[:cut])
        try:
            aln = read_alignment(path, fmt=fmt)
        except InputError as exc:
            assert str(exc).startswith(path + ": ")
            continue
        pytest.fail(f"{fmt} cut at {cut} read as {aln.n} x {aln.length}: {text[:cut]!r}")


@pytest.mark.parametrize("fmt", sorted(GOOD))
def test_junk_is_an_input_error(tmp_path, fmt):
    p = tmp_path / "junk.dat"
    p.write_bytes(bytes(range(256)) * 4)
    with pytest.raises(InputError, match="binary"):
        read_alignment(str(p), fmt=fmt)
    rng = np.random.default_rng(7)
    first = GOOD[fmt].split("\n", 1)[0]
    for k in range(20):  # the right first line, then text junk: an error or a clean read, never a fault
        junk = "".join(rng.choice(list("ACGT- \n;=#/[]'abcxyz0123456789"), 120))
        path = _write(tmp_path, f"j{k}.dat", first + "\n" + junk)
        try:
            read_alignment(path, fmt=fmt)
        except InputError as exc:
            assert str(exc).startswith(path + ": ")


# ----------------------------------------------------------------- malformed NEXUS
NEXUS_HEAD = "#NEXUS\nbegin data;\ndimensions ntax={ntax} nchar={nchar};\nformat datatype=dna missing=? gap=-;\n"
NEXUS_ROWS = "matrix\na ACGTAC\nb ACGTAA\nc ACCTAA\n;\nend;\n"
BAD_NEXUS = [
    # (name, text, message naming the line); NEXUS commands and their arguments: Maddison, Swofford &
    # Maddison 1997 (from memory).
    ("unknown_command", NEXUS_HEAD.format(ntax=3, nchar=6) + "foo bar=1;\n" + NEXUS_ROWS,
     r"line 5: unknown command 'foo'"),
    ("ntax_too_big", NEXUS_HEAD.format(ntax=4, nchar=6) + NEXUS_ROWS, r"line 3: the dimensions give ntax=4, but the matrix has 3 rows"),  # noqa: E501 (the exact message)
    ("ntax_too_small", NEXUS_HEAD.format(ntax=2, nchar=6) + NEXUS_ROWS, r"line 3: the dimensions give ntax=2, but the matrix has 3 rows"),  # noqa: E501 (the exact message)
    ("nchar_too_big", NEXUS_HEAD.format(ntax=3, nchar=7) + NEXUS_ROWS,
     r"line 6: taxon 'a' has 6 characters, but the dimensions \(line 3\) give nchar=7"),
    ("nchar_too_small", NEXUS_HEAD.format(ntax=3, nchar=5) + NEXUS_ROWS,
     r"line 6: taxon 'a' has 6 characters, but the dimensions \(line 3\) give nchar=5"),
    ("short_row", NEXUS_HEAD.format(ntax=3, nchar=6) + NEXUS_ROWS.replace("ACCTAA", "ACCTA"),
     r"line 8: taxon 'c' has 5 characters"),
    ("open_comment", "#NEXUS\n[a comment\nbegin data;\n", r"line 2: a comment opened with '\[' is never closed"),
    ("duplicate_taxon", NEXUS_HEAD.format(ntax=3, nchar=6) + NEXUS_ROWS.replace("b ACGTAA", "a ACGTAA"),
     r"duplicate taxon 'a' in the NEXUS matrix \(lines 6 and 7\)"),
    ("no_end", NEXUS_HEAD.format(ntax=3, nchar=6) + NEXUS_ROWS.replace("end;\n", ""), "not a readable nexus"),
]


@pytest.mark.parametrize("name,text,msg", BAD_NEXUS, ids=[b[0] for b in BAD_NEXUS])
def test_malformed_nexus(tmp_path, name, text, msg):
    path = _write(tmp_path, name + ".nex", text)
    with pytest.raises(InputError, match=msg) as exc:
        read_alignment(path)
    assert str(exc.value).startswith(path + ": ")
