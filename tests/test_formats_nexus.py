"""NEXUS DISTANCES blocks read and written, and square layouts with names in a fixed-width field.

The DISTANCES block as the NEXUS standard defines it: Maddison, Swofford & Maddison 1997,
"NEXUS: an extensible file format for systematic information", Syst. Biol. 46:590-621
(FORMAT TRIANGLE=LOWER|UPPER|BOTH, [NO]DIAGONAL, [NO]LABELS, MISSING=, INTERLEAVE;
defaults LOWER, DIAGONAL, LABELS, MISSING=?). The examples below are written by hand after the
standard's description and examples of that block (from memory: the five-taxon matrix with
entries 1..10 follows the paper's illustration).
"""

from __future__ import annotations

import numpy as np
import pytest

from seqdist import DistanceMatrix, InputError
from seqdist.cli import main
from seqdist.io.matrices import REGISTRY, format_matrix, matrix_format, read_matrix, write_matrix

LABELS5 = ["taxon_1", "taxon_2", "taxon_3", "taxon_4", "taxon_5"]
# d(1,2)=1, d(1,3)=2, d(2,3)=3, d(1,4)=4, d(2,4)=5, d(3,4)=6, d(1,5)=7, ... d(4,5)=10
D5 = np.array([[0, 1, 2, 4, 7],
               [1, 0, 3, 5, 8],
               [2, 3, 0, 6, 9],
               [4, 5, 6, 0, 10],
               [7, 8, 9, 10, 0]], float)

TAXA5 = "BEGIN TAXA;\n  DIMENSIONS NTAX=5;\n  TAXLABELS taxon_1 taxon_2 taxon_3 taxon_4 taxon_5;\nEND;\n"

# (name, DISTANCES block text, whether a TAXA block goes before it)
STANDARD_LAYOUTS = [
    ("lower, diagonal (the defaults)", """BEGIN DISTANCES;
  MATRIX
    taxon_1 0
    taxon_2 1 0
    taxon_3 2 3 0
    taxon_4 4 5 6 0
    taxon_5 7 8 9 10 0;
END;""", True),
    ("upper, new taxa from the rows", """BEGIN DISTANCES;
  DIMENSIONS NEWTAXA NTAX=5;
  FORMAT TRIANGLE=UPPER;
  MATRIX
    taxon_1 0 1 2 4 7
    taxon_2 0 3 5 8
    taxon_3 0 6 9
    taxon_4 0 10
    taxon_5 0;
END;""", False),
    ("both triangles", """BEGIN DISTANCES;
  FORMAT TRIANGLE=BOTH;
  MATRIX
    taxon_1 0 1 2 4 7
    taxon_2 1 0 3 5 8
    taxon_3 2 3 0 6 9
    taxon_4 4 5 6 0 10
    taxon_5 7 8 9 10 0;
END;""", True),
    ("lower, no diagonal", """BEGIN DISTANCES;
  FORMAT TRIANGLE=LOWER NODIAGONAL;
  MATRIX
    taxon_1
    taxon_2 1
    taxon_3 2 3
    taxon_4 4 5 6
    taxon_5 7 8 9 10;
END;""", True),
    ("upper, no diagonal, no labels", """BEGIN DISTANCES;
  FORMAT TRIANGLE=UPPER NODIAGONAL NOLABELS;
  MATRIX
    1 2 4 7
    3 5 8
    6 9
    10
    ;
END;""", True),
    ("lower interleaved in two blocks", """BEGIN DISTANCES;
  FORMAT INTERLEAVE;
  MATRIX
    taxon_1 0
    taxon_2 1 0
    taxon_3 2 3 0
    taxon_4 4 5 6
    taxon_5 7 8 9

    taxon_4 0
    taxon_5 10 0
  ;
END;""", True),
    ("rows in another order, wrapped over lines, comments, lower-case commands", """begin distances;
  format triangle=lower diagonal labels;  [ a comment [nested] ]
  matrix
    taxon_3 2 3
            0
    taxon_1 0
    taxon_5 7 8 9 10 0
    taxon_2 1 0
    taxon_4 4 5 6 0;
end;""", True),
]


@pytest.mark.parametrize("name,block,taxa", STANDARD_LAYOUTS, ids=[x[0] for x in STANDARD_LAYOUTS])
def test_the_standard_layouts_read_the_same_matrix(name, block, taxa, tmp_path):
    path = tmp_path / "d.nex"
    path.write_text("#NEXUS\n" + (TAXA5 if taxa else "") + block + "\n")
    dm = read_matrix(str(path))
    assert list(dm.labels) == LABELS5
    assert np.array_equal(dm.values, D5)


def test_missing_symbol_quoted_labels_and_a_custom_missing(tmp_path):
    path = tmp_path / "m.nexus"
    path.write_text("#NEXUS\nBEGIN TAXA; DIMENSIONS NTAX=3; TAXLABELS 'it''s' 'a b' c_d; END;\n"
                    "BEGIN DISTANCES; FORMAT MISSING=x;\n MATRIX\n 'it''s' 0\n 'a b' x 0\n c_d 1.5e-3 2 0;\nEND;\n")
    dm = read_matrix(str(path))
    # quoted labels keep their blanks and quotes; a bare underscore is kept as written (as our Newick reader does)
    assert dm.labels == ("it's", "a b", "c_d")
    assert np.isnan(dm["it's", "a b"]) and dm["c_d", "it's"] == 1.5e-3 and dm["a b", "c_d"] == 2
    path.write_text(path.read_text().replace("MISSING=x", "").replace(" x 0", " ? 0"))
    assert np.isnan(read_matrix(str(path))["it's", "a b"])  # '?' is the default missing symbol


def _tricky():
    labels = ["a", "b_x", "c d", "it's", "12", "[x]", "semi;colon", "é"]
    rng = np.random.default_rng(1)
    n = len(labels)
    A = np.triu(rng.uniform(0, 5, (n, n)), 1)
    A = A + A.T
    A[0, 3] = A[3, 0] = np.nan
    A[1, 2] = A[2, 1] = 1 / 3
    return DistanceMatrix.from_array(A, labels)


def test_written_nexus_reads_back_exactly_and_by_extension(tmp_path):
    dm = _tricky()
    for ext in (".nex", ".nexus", ".NEX"):
        assert matrix_format("d" + ext) == "nexus"
        path = tmp_path / ("d" + ext)
        write_matrix(str(path), dm)
        text = path.read_text()
        assert text.startswith("#NEXUS\n") and "BEGIN DISTANCES;" in text
        back = read_matrix(str(path))
        assert back.labels == dm.labels and np.array_equal(back.values, dm.values, equal_nan=True)
    plain = tmp_path / "noext"
    write_matrix(str(plain), dm, "nexus")
    assert read_matrix(str(plain)).labels == dm.labels  # recognised from the content
    assert format_matrix(dm, "nexus") == format_matrix(dm, "nexus")  # deterministic


def test_written_nexus_is_read_by_outside_nexus_readers():
    # Neither dendropy nor Biopython reads a DISTANCES block's numbers; what they can check:
    # dendropy (a strict reader) reads the whole file, takes the TAXA block's labels exactly
    # (quoted underscores, blanks, quotes) and skips the DISTANCES block; Biopython's Nexus
    # reader splits our DISTANCES block into its FORMAT and MATRIX commands.
    import dendropy
    from Bio.Nexus import Nexus

    dm = _tricky()
    text = format_matrix(dm, "nexus")
    ds = dendropy.DataSet.get(data=text, schema="nexus")
    assert [t.label for t in ds.taxon_namespaces[0]] == list(dm.labels)
    nx = Nexus.Nexus(text)
    assert nx.ntax == dm.n
    block = [b for b in nx.unknown_blocks if b.title.lower() == "distances"][0]
    lines = block.commandlines[0]  # Biopython 1.8x keeps the block's commands in one list
    assert [c.split(None, 1)[0].upper() for c in lines] == ["FORMAT", "MATRIX"]
    rows = lines[1].split("\n")[1:]
    assert len(rows) == dm.n and rows[-1].split()[-1] == "0.0"  # lower triangle with its diagonal


def test_cli_writes_nexus_by_extension_and_reads_it_everywhere(tmp_path, capsys):
    src = tmp_path / "d.tsv"
    write_matrix(str(src), DistanceMatrix.from_array(D5, LABELS5))
    assert main(["convert", str(src), "-o", str(tmp_path / "d.nex")]) == 0
    assert "BEGIN DISTANCES;" in (tmp_path / "d.nex").read_text()
    assert main(["tree", str(tmp_path / "d.nex"), "-o", str(tmp_path / "t.nwk")]) == 0
    assert main(["convert", str(tmp_path / "d.nex"), "-o", str(tmp_path / "back.tsv")]) == 0
    assert (tmp_path / "back.tsv").read_text() == src.read_text()
    capsys.readouterr()


# ----------------------------------------------------------------- bad NEXUS: one line, exit 2, no output
GOOD = "#NEXUS\n" + TAXA5 + STANDARD_LAYOUTS[0][1] + "\n"
BAD = [
    ("truncated in the matrix", GOOD[:GOOD.index("taxon_4 4")], "line 10: the MATRIX command"),
    ("truncated before END", GOOD[:GOOD.index("END;", GOOD.index("DISTANCES"))], "has no 'END;'"),
    ("wrong ntax", GOOD.replace("NTAX=5", "NTAX=4"), "line 3: the TAXA block gives NTAX=4 but TAXLABELS"),
    ("unknown label in a row", GOOD.replace("    taxon_3 2 3 0", "    taxon_9 2 3 0"),
     "line 10: unknown label 'taxon_9'"),
    ("a row too short", GOOD.replace("taxon_5 7 8 9 10 0;", "taxon_5 7 8 9 10;"), "row 'taxon_5' holds 4 values"),
    ("a non-numeric value", GOOD.replace("4 5 6 0", "4 five 6 0"), "line 11: non-numeric value 'five'"),
    ("an unknown FORMAT option", GOOD.replace("BEGIN DISTANCES;", "BEGIN DISTANCES;\n FORMAT TRIANGLE=SIDEWAYS;"),
     "line 7: unknown FORMAT option 'TRIANGLE=SIDEWAYS'"),
    ("an unclosed comment", GOOD.replace("taxon_2 1 0", "taxon_2 1 0 [oops"), "line 9: a comment opened"),
    ("no DISTANCES block", "#NEXUS\n" + TAXA5, "no DISTANCES block"),
    ("a row twice", GOOD.replace("taxon_3 2 3 0", "taxon_2 2 3"), "row 'taxon_2' appears twice"),
    ("DISTANCES ntax disagrees", GOOD.replace("BEGIN DISTANCES;", "BEGIN DISTANCES; DIMENSIONS NTAX=6;"),
     "the DISTANCES block gives NTAX=6"),
]


@pytest.mark.parametrize("name,text,msg", BAD, ids=[b[0] for b in BAD])
def test_bad_nexus_is_one_error_line_naming_the_file(name, text, msg, tmp_path, capsys):
    src = tmp_path / "bad.nex"
    src.write_text(text)
    out = tmp_path / "out.tsv"
    assert main(["convert", str(src), "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith(f"seqdist: error: {src}: ") and msg in err[0], err
    assert not out.exists()


def test_a_nexus_alignment_is_not_taken_for_a_matrix(tmp_path):
    src = tmp_path / "aln.nex"
    src.write_text("#NEXUS\nbegin data;\ndimensions ntax=2 nchar=4;\nformat datatype=dna;\nmatrix\n"
                   "a ACGT\nb ACGA\n;\nend;\n")
    with pytest.raises(InputError, match=r"no DISTANCES block in this NEXUS file \(it holds DATA\)"):
        read_matrix(str(src))


# ----------------------------------------------------------------- square layouts, names in a fixed field
# Names padded to 10 characters, possibly holding spaces, possibly running straight into the
# first number (common practice for the square layout distance-tree programs exchange).
FIXED_SQUARE = """3
alpha one 0.0 1.5 2.0
beta      1.5 0.0 2.5
gammadelta2.0 2.5 0.0
"""
FIXED_LOWER = """3
alpha one
beta      1.5
gammadelta2.0 2.5
"""


@pytest.mark.parametrize("text,fmt", [(FIXED_SQUARE, "square"), (FIXED_LOWER, "lower")])
def test_names_in_a_fixed_field_read(text, fmt, tmp_path):
    path = tmp_path / "fixed.txt"
    path.write_text(text)
    want = np.array([[0, 1.5, 2.0], [1.5, 0, 2.5], [2.0, 2.5, 0]])
    for given in (fmt, None):  # explicit, and recognised from the shape
        dm = read_matrix(str(path), given)
        assert dm.labels == ("alpha one", "beta", "gammadelta")
        assert np.array_equal(dm.values, want)
    assert REGISTRY[fmt].recognise(text)


def test_fixed_field_rows_may_wrap_and_plain_errors_are_unchanged(tmp_path):
    path = tmp_path / "wrap.txt"
    path.write_text("2\nname with 0.0\n  1.0\nother     1.0 0.0\n")
    assert read_matrix(str(path), "square").labels == ("name with", "other")
    # a file that fits neither reading keeps the white-space reader's message
    path.write_text("3\na 0 1 2\nb 1 0\nc 2 3 0\n")
    with pytest.raises(InputError, match="line 3: row 'b' has 2 values, expected 3"):
        read_matrix(str(path), "square")
