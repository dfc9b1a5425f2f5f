"""The labelled matrix type and matrix files (foundation)."""

from __future__ import annotations

import os
import string

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from seqdist import DistanceMatrix, InputError
from seqdist.io.matrices import OutputSet, format_matrix, read_matrix, read_pairs, write_matrix

# Labels with spaces and punctuation (tsv/csv can hold them); square/lower need no white space.
LABEL_CHARS = string.ascii_letters + string.digits + " _-.,;:'\"()[]|/+*&%$#@!?"
label_st = st.text(LABEL_CHARS, min_size=1, max_size=12).map(str.strip).filter(bool)
plain_label_st = st.text(string.ascii_letters + string.digits + "_-.|/()", min_size=1, max_size=10)


@st.composite
def matrices(draw, labels=label_st, allow_missing=True):
    n = draw(st.integers(1, 8))
    labs = draw(st.lists(labels, min_size=n, max_size=n, unique=True))
    vals = draw(st.lists(st.floats(0, 1e6, allow_nan=False, allow_subnormal=False), min_size=n * n,
                         max_size=n * n))
    a = np.array(vals).reshape(n, n)
    a = np.triu(a, 1)
    a = a + a.T
    if allow_missing and n > 1:
        holes = draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=3))
        for i, j in holes:
            if i != j:
                a[i, j] = a[j, i] = np.nan
    return DistanceMatrix.from_array(a, labs)


@settings(max_examples=60, suppress_health_check=[HealthCheck.function_scoped_fixture], deadline=None)
@given(dm=matrices(), fmt=st.sampled_from(["tsv", "csv"]))
def test_round_trip_delimited(tmp_path, dm, fmt):
    p = os.path.join(tmp_path, f"m.{fmt}")
    write_matrix(p, dm)
    back = read_matrix(p)
    assert back.labels == dm.labels
    # repr is exact, so the values survive bit for bit (beyond the required 12 digits)
    assert np.array_equal(back.values, dm.values, equal_nan=True)


@settings(max_examples=60, suppress_health_check=[HealthCheck.function_scoped_fixture], deadline=None)
@given(dm=matrices(labels=plain_label_st), fmt=st.sampled_from(["square", "lower"]))
def test_round_trip_square(tmp_path, dm, fmt):
    p = os.path.join(tmp_path, "m.txt")
    write_matrix(p, dm, fmt)
    assert np.array_equal(read_matrix(p, fmt).values, dm.values, equal_nan=True)
    back = read_matrix(p)  # recognised from its shape
    assert back.labels == dm.labels
    assert np.array_equal(back.values, dm.values, equal_nan=True)


def test_twelve_significant_digits(tmp_path):
    x = 0.123456789012345678
    dm = DistanceMatrix.from_array([[0, x], [x, 0]], ["a", "b"])
    for fmt in ["tsv", "csv", "square", "lower"]:
        text = format_matrix(dm, fmt)
        assert "0.12345678901234" in text


def test_frame_and_condensed_conversions():
    D = np.array([[0, 1, 2], [1, 0, 3], [2, 3, 0.0]])
    dm = DistanceMatrix.from_array(D, ["a", "b", "c"])
    f = dm.to_frame()
    assert list(f.index) == ["a", "b", "c"] and f.loc["b", "c"] == 3
    assert DistanceMatrix.from_frame(f).equals(dm)
    # scipy's condensed layout is the reference for the vector form
    from scipy.spatial.distance import squareform

    assert np.array_equal(dm.condensed(), squareform(D))
    assert DistanceMatrix.from_condensed(squareform(D), dm.labels).equals(dm)


def test_zero_distance_is_real_and_missing_is_nan():
    dm = DistanceMatrix.from_array([[0, 0, np.nan], [0, 0, 1], [np.nan, 1, 0]], ["a", "b", "c"])
    assert dm["a", "b"] == 0.0
    assert dm.missing_count() == 1 and dm.has_missing


def test_values_read_only():
    dm = DistanceMatrix.from_array([[0, 1], [1, 0]], ["a", "b"])
    with pytest.raises(ValueError):
        dm.values[0, 1] = 5


def test_symmetric_within_tolerance_is_averaged():
    dm = DistanceMatrix.from_array([[0, 1.0], [1.0 + 1e-13, 0]], ["a", "b"])
    assert dm.values[0, 1] == dm.values[1, 0]


@pytest.mark.parametrize("values,labels,needle", [
    ([[0, 1, 2], [1, 0, 3]], ["a", "b"], "not square"),
    ([[0, 1], [2, 0]], ["a", "b"], "asymmetric: (a, b)"),
    ([[0, -1], [-1, 0]], ["a", "b"], "negative entry -1.0 at (a, b)"),
    ([[1, 1], [1, 0]], ["a", "b"], "non-zero diagonal entry 1.0 for 'a'"),
    ([[0, 1], [1, 0]], ["a", "a"], "duplicate label 'a'"),
    ([[0, np.inf], [np.inf, 0]], ["a", "b"], "infinite"),
    ([[0, np.nan], [1, 0]], ["a", "b"], "is missing"),
])
def test_validation_names_the_problem(values, labels, needle):
    with pytest.raises(InputError) as e:
        DistanceMatrix.from_array(values, labels, source="f.tsv")
    assert needle in str(e.value) and str(e.value).startswith("f.tsv: ")


def test_column_order_may_differ(tmp_path):
    p = tmp_path / "m.tsv"
    p.write_text("\ta\tb\tc\nc\t2\t3\t0\na\t0\t1\t2\nb\t1\t0\t3\n")
    dm = read_matrix(str(p))
    assert dm.labels == ("c", "a", "b") and dm["a", "c"] == 2 and dm["b", "c"] == 3


def test_pandas_reads_our_tsv(tmp_path):
    # pandas is the independent reader here
    dm = DistanceMatrix.from_array([[0, 1.5], [1.5, 0]], ["x y", "z"])
    p = str(tmp_path / "m.tsv")
    write_matrix(p, dm)
    f = pd.read_csv(p, sep="\t", index_col=0)
    assert list(f.columns) == ["x y", "z"] and f.loc["z", "x y"] == 1.5


def test_read_pairs(tmp_path):
    dm = DistanceMatrix.from_array(np.zeros((3, 3)), ["a", "b", "c"])
    p = tmp_path / "lock.txt"
    p.write_text("# locked\na\tc\n\nb\ta\n")
    assert read_pairs(str(p), dm).tolist() == [[0, 2], [1, 0]]
    p.write_text("a\tzz\n")
    with pytest.raises(InputError, match="line 1: unknown label 'zz'"):
        read_pairs(str(p), dm)


def test_output_set_is_all_or_nothing(tmp_path):
    a, b = tmp_path / "a.txt", tmp_path / "b.txt"
    a.write_text("old")
    with pytest.raises(RuntimeError):
        with OutputSet() as out:
            out.add_text(str(a), "new")
            out.add_text(str(b), "new")
            raise RuntimeError("fail before commit")
    assert a.read_text() == "old" and not b.exists()
    assert [f for f in os.listdir(tmp_path) if f.startswith(".seqdist-")] == []


@pytest.mark.parametrize("fmt", ["tsv", "csv", "square", "lower"])
def test_large_matrix_fast_writer_round_trips(tmp_path, fmt):
    # n >= 50 takes the table-assembly path of the writer; repeated values, NaN and odd labels included
    rng = np.random.default_rng(3)
    n = 120
    a = np.round(rng.random((n, n)), 3) + rng.integers(0, 2, (n, n)) * rng.random((n, n))
    a = np.triu(a, 1)
    a = a + a.T
    a[4, 9] = a[9, 4] = np.nan
    labels = [f"t{i}" for i in range(n)]
    if fmt in ("tsv", "csv"):
        labels[7] = 'odd, "label"\twith tab'
    dm = DistanceMatrix.from_array(a, labels)
    p = str(tmp_path / f"m.{fmt}")
    write_matrix(p, dm, fmt)
    back = read_matrix(p, fmt)
    assert back.labels == dm.labels and np.array_equal(back.values, dm.values, equal_nan=True)


# ------------------------------------------------------------------ issue 14
def _one_error_line(p, *needles):
    assert p.returncode == 2, (p.returncode, p.stderr)
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("seqdist: error: "), p.stderr
    for needle in needles:
        assert needle in lines[0], (needle, lines[0])
    assert "Traceback" not in p.stderr


@pytest.mark.parametrize("fmt, body", [("square", "a 0 1\nb 1 0\n"), ("lower", "a\nb 1\n")])
def test_square_count_beyond_the_file_is_refused_before_allocating(tmp_path, cli, fmt, body):
    """A first line claiming 99999999999 taxa asked numpy for 8e22 bytes (exit 1); now exit 2, line 1."""
    src = tmp_path / "m.phy"
    src.write_text("99999999999\n" + body)
    out = tmp_path / "o.tsv"
    for extra in (["--in-format", fmt], []):  # explicit, and recognised from the shape
        p = cli("convert", src, "-o", out, *extra)
        _one_error_line(p, f"{src}: line 1: 99999999999 taxa announced but only 2 lines follow")
    assert not out.exists()
    with pytest.raises(InputError, match="line 1: 3 taxa announced but only 2 lines follow"):
        read_matrix(_write(tmp_path / "t.phy", "3\n" + body), fmt)


def _write(path, text):
    path.write_text(text)
    return str(path)


@pytest.mark.parametrize("name, text, where, shown", [
    ("nl_header.csv", ',"a\nb",c\n"a\nb",0,1\nc,1,0\n', "line 1", "'a\\nb'"),
    ("nl_row.csv", ',a,c\n"a\nx",0,1\nc,1,0\n', "line 2", "'a\\nx'"),
    ("cr_row.csv", ',a,c\n"a\rx",0,1\nc,1,0\n', "line 2", "'a\\rx'"),
    ("vt.csv", ',"a\x0bb",c\n"a\x0bb",0,1\nc,1,0\n', "line 1", "'a\\x0bb'"),
    ("esc.tsv", "\ta\x1bb\tc\na\x1bb\t0\t1\nc\t1\t0\n", "line 1", "'a\\x1bb'"),
    ("sep.tsv", "\ta\u2028b\tc\na\u2028b\t0\t1\nc\t1\t0\n", "line 1", "'a\\u2028b'"),
    ("row_only.tsv", "\tab\tc\na\x07b\t0\t1\nc\t1\t0\n", "line 2", "'a\\x07b'"),
    ("ctl.phy", "2\na\x01b 0 1\nc 1 0\n", "line 2", "'a\\x01b'"),
])
def test_labels_with_control_characters_refused_in_one_line(tmp_path, cli, name, text, where, shown):
    """A label holding a line break (possible in a quoted csv cell) gave a two-line error, and
    other control characters went through to every output; now refused at input, one line
    naming the file, the line and the label (escaped)."""
    src = tmp_path / name
    src.write_bytes(text.encode("utf-8"))
    p = cli("convert", src, "-o", tmp_path / "o.tsv")
    _one_error_line(p, f"{src}: {where}: label {shown} holds a control character", "labels must be printable")
    assert not (tmp_path / "o.tsv").exists()


def test_tab_in_a_quoted_label_is_handled_consistently(tmp_path, cli):
    """The one control character allowed: tsv and csv quote it and read it back; square refuses it."""
    src = tmp_path / "tab.tsv"
    src.write_text('\t"a\tb"\tc\n"a\tb"\t0\t1\nc\t1\t0\n')
    assert read_matrix(str(src)).labels == ("a\tb", "c")
    p = cli("convert", src, "-o", tmp_path / "o.csv")
    assert p.returncode == 0 and read_matrix(str(tmp_path / "o.csv")).labels == ("a\tb", "c")
    p = cli("convert", src, "-o", "-", "--out-format", "square")
    _one_error_line(p, "label 'a\\tb' contains white space")


def test_labels_with_control_characters_refused_by_the_api():
    with pytest.raises(InputError, match=r"label 'a\\nb' at position 2 holds a control character"):
        DistanceMatrix.from_array([[0, 1], [1, 0]], ["x", "a\nb"], source="mine")
    # printable non-ASCII text is a fine label
    assert DistanceMatrix.from_array([[0, 1], [1, 0]], ["é", "α β"]).labels == ("é", "α β")


@pytest.mark.parametrize("out, args, note", [
    ("out.txt", [], True), ("out.dat", [], True), ("noext", [], True), ("out.phy", [], True),
    ("out.txt", ["--out-format", "tsv"], False), ("out.csv", [], False), ("out.TSV", [], False),
    ("out.txt", ["--quiet"], False),
])
def test_guessed_output_format_is_said(tmp_path, cli, out, args, note):
    """-o out.txt was written as tsv without a word; the contract asks the command to say
    which format it wrote when it had to guess."""
    src = tmp_path / "m.tsv"
    src.write_text("\ta\tb\na\t0\t1\nb\t1\t0\n")
    target = tmp_path / out
    p = cli("convert", src, "-o", target, *args)
    assert p.returncode == 0, p.stderr
    said = f"seqdist: {target}: no known matrix extension, wrote tsv (choose with --out-format)\n"
    assert p.stderr == (said if note else "")
    assert target.read_text().startswith("\ta\tb\n" if not out.endswith("csv") else ",a,b\n")


def test_guessed_format_is_said_by_every_matrix_writer(tmp_path, capsys):
    """The note comes from OutputSet itself, so every command that writes a matrix says it,
    and only once the file is really written."""
    from seqdist.core.console import set_quiet

    set_quiet(False)  # an in-process --quiet elsewhere must not hide the note here
    dm = DistanceMatrix.from_array([[0, 1], [1, 0]], ["a", "b"])
    with OutputSet() as out:
        out.add_matrix(str(tmp_path / "a.out"), dm)
        out.add_matrix(str(tmp_path / "b.out"), dm, "csv")
    err = capsys.readouterr().err
    assert err == f"seqdist: {tmp_path / 'a.out'}: no known matrix extension, wrote tsv (choose with --out-format)\n"
    with pytest.raises(RuntimeError):
        with OutputSet() as out:
            out.add_matrix(str(tmp_path / "c.out"), dm)
            raise RuntimeError("a later step failed")
    assert capsys.readouterr().err == "" and not (tmp_path / "c.out").exists()


def test_one_output_set_refuses_one_path_twice(tmp_path):
    with OutputSet() as out:
        out.add_text(str(tmp_path / "a.txt"), "1\n")
        with pytest.raises(InputError, match="two outputs of this command would write to this file"):
            out.add_text(str(tmp_path / "." / "a.txt"), "2\n")
    assert (tmp_path / "a.txt").read_text() == "1\n"


@settings(max_examples=60, deadline=None)
@given(st.integers(2, 7), st.integers(0, 2**32 - 1), st.sampled_from(["ok", "tiny", "asym", "neg", "diag"]))
def test_complete_matrices_checked_as_the_definition_says(n, seed, kind):
    """A matrix without missing entries (the fast path of from_array): symmetric within the
    contract's tolerance (1e-9 times the largest entry; common practice for the default) is
    averaged to exact symmetry with a zero diagonal; beyond it, or negative, it is refused."""
    rng = np.random.default_rng(seed)
    a = rng.uniform(0.1, 10, (n, n))
    a = (a + a.T) / 2
    np.fill_diagonal(a, 0)
    top = a.max()
    i, j = 0, n - 1
    if kind == "tiny":
        a[i, j] += 0.1e-9 * top
    elif kind == "asym":
        a[i, j] += 1e-6 * top
    elif kind == "neg":
        a[i, j] = a[j, i] = -1.0
    elif kind == "diag":
        a[i, i] = 1e-3 * top
    labels = [f"t{k}" for k in range(n)]
    if kind in ("ok", "tiny"):
        dm = DistanceMatrix.from_array(a, labels)
        want = 0.5 * (a + a.T)
        np.fill_diagonal(want, 0)
        assert np.array_equal(dm.values, want if kind == "tiny" else a)
        assert np.array_equal(dm.values, dm.values.T)
    else:
        word = {"asym": "asymmetric", "neg": "negative entry", "diag": "non-zero diagonal"}[kind]
        with pytest.raises(InputError, match=word):
            DistanceMatrix.from_array(a, labels)
