"""Every bad-matrix kind of the contract: exit 2, one error line naming the problem,
and an existing output file left untouched (checked through ``seqdist convert``)."""

from __future__ import annotations

import pytest

BAD = {
    "ragged": ("\ta\tb\tc\na\t0\t1\t2\nb\t1\t0\nc\t2\t3\t0\n", "line 3: ragged row 'b'"),
    "non_numeric": ("\ta\tb\na\t0\tfoo\nb\t1\t0\n", "line 2: non-numeric value 'foo' in row 'a', column 'b'"),
    "asymmetric": ("\ta\tb\na\t0\t1\nb\t2\t0\n", "asymmetric: (a, b) = 1.0 but (b, a) = 2.0"),
    "negative": ("\ta\tb\na\t0\t-1\nb\t-1\t0\n", "negative entry -1.0 at (a, b)"),
    "diagonal": ("\ta\tb\na\t0.5\t1\nb\t1\t0\n", "non-zero diagonal entry 0.5 for 'a'"),
    "labels_differ": ("\ta\tb\na\t0\t1\nc\t1\t0\n", "row and column labels differ at position 2: row 'c', column 'b'"),
    "duplicate": ("\ta\ta\na\t0\t1\na\t1\t0\n", "duplicate label 'a'"),
    "empty": ("", "empty file"),
}


@pytest.mark.parametrize("kind", sorted(BAD))
def test_bad_matrix(tmp_path, cli, kind):
    text, needle = BAD[kind]
    src = tmp_path / "bad.tsv"
    src.write_text(text)
    out = tmp_path / "out.tsv"
    out.write_text("precious\n")
    p = cli("convert", src, "-o", out)
    assert p.returncode == 2
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("seqdist: error: ")
    assert str(src) in lines[0] and needle in lines[0], lines[0]
    assert out.read_text() == "precious\n"
    assert sorted(x.name for x in tmp_path.iterdir()) == ["bad.tsv", "out.tsv"]


def test_missing_file(tmp_path, cli):
    p = cli("convert", tmp_path / "absent.tsv", "-o", tmp_path / "o.tsv")
    assert p.returncode == 2 and p.stderr.startswith("seqdist: error: ") and "absent.tsv: no such" in p.stderr
    assert not (tmp_path / "o.tsv").exists()


def test_binary_junk(tmp_path, cli):
    src = tmp_path / "junk.tsv"
    src.write_bytes(bytes(range(256)) * 4)
    p = cli("convert", src, "-o", tmp_path / "o.tsv")
    assert p.returncode == 2 and "binary data" in p.stderr and "Traceback" not in p.stderr


def test_square_errors(tmp_path, cli):
    src = tmp_path / "bad.phy"
    src.write_text("3\na 0 1 2\nb 1 0\nc 2 3 0\n")
    p = cli("convert", src, "-o", "-", "--in-format", "square")
    assert p.returncode == 2 and "line 3" in p.stderr and "'b'" in p.stderr


def test_usage_error_one_line(cli):
    p = cli("convert")
    assert p.returncode == 2 and p.stderr.startswith("seqdist: error: ") and len(p.stderr.splitlines()) == 1


def test_version_and_flags_anywhere(tmp_path, cli):
    assert cli("--version").stdout.startswith("seqdist ")
    src = tmp_path / "m.tsv"
    src.write_text("\ta\tb\na\t0\t1\nb\t1\t0\n")
    for args in (["--quiet", "convert", src, "-o", "-"], ["convert", src, "-o", "-", "--quiet", "--debug"]):
        p = cli(*args)
        assert p.returncode == 0 and p.stdout.splitlines()[1] == "a\t0.0\t1.0"


def test_stdin_to_stdout(cli):
    p = cli("convert", "-", "-o", "-", "--out-format", "lower", input="\ta\tb\na\t0\t1\nb\t1\t0\n")
    assert p.returncode == 0 and p.stdout == "2\na\nb 1.0\n"
