"""gzip and bz2 input, recognised by the first bytes; compressed names looked through; compressed output.

Magic numbers: gzip 1f 8b (Deutsch 1996, RFC 1952 "GZIP file format specification version 4.3",
section 2.3.1); bzip2 "BZh" plus the block size digit and the block magic 0x314159265359 (common
practice: the bzip2 format as its reference implementation writes it).
"""

from __future__ import annotations

import bz2
import gzip
import json
import os
import subprocess
import sys

import numpy as np
import pytest

from seqdist import DistanceMatrix, InputError
from seqdist.cli import main
from seqdist.io import matrices as mio
from seqdist.io.alignment import guess_path_format, read_alignment
from seqdist.io.matrices import matrix_format, read_matrix, read_text, write_matrix

from conftest import ROOT, euclidean, write_tsv

ALN = ">a\nACGTACGTAC\n>b\nACGTTCGTAC\n>c\nACCTTCGAAC\n>d\nTCCTTGGAAC\n"


def _labels(n):
    return [f"s{i}" for i in range(n)]


def _gz(data: bytes) -> bytes:
    return gzip.compress(data, mtime=0)


@pytest.mark.parametrize("pack", [_gz, bz2.compress], ids=["gzip", "bz2"])
def test_every_reader_takes_compressed_input_by_its_bytes(pack, tmp_path):
    # the name says nothing about the compression: the first bytes do
    src = tmp_path / "plain.tsv"
    write_tsv(src, _labels(5), euclidean(5))
    packed = tmp_path / "m.tsv"
    packed.write_bytes(pack(src.read_bytes()))
    assert read_matrix(str(packed)).equals(read_matrix(str(src)))
    aln = tmp_path / "aln.fasta"
    aln.write_bytes(pack(ALN.encode()))
    assert read_alignment(str(aln)).labels == ("a", "b", "c", "d")
    tree = tmp_path / "t.nwk"
    tree.write_bytes(pack(b"((a:1,b:2):0.5,c:1,d:3);\n"))
    from seqdist.io.newick import read_newick_file

    assert sorted(read_newick_file(str(tree)).labels()) == ["a", "b", "c", "d"]


def test_compressed_names_are_looked_through_for_the_format(tmp_path):
    assert guess_path_format("aln.fasta.gz") == "fasta" and guess_path_format("x.sto.bz2") == "stockholm"
    assert matrix_format("m.csv.gz") == "csv" and matrix_format("m.nex.bz2") == "nexus"
    dm = DistanceMatrix.from_array(euclidean(4), _labels(4))
    csv = tmp_path / "m.csv.gz"
    csv.write_bytes(_gz(mio.format_matrix(dm, "csv").encode()))
    assert read_matrix(str(csv)).equals(dm)  # csv from '.csv' under '.gz' (read as tsv this would fail)
    # an alignment without a telling extension is sniffed after decompression
    odd = tmp_path / "aln.dat"
    odd.write_bytes(bz2.compress(ALN.encode()))
    assert read_alignment(str(odd)).n == 4


def test_distances_reads_a_gzipped_alignment_like_the_plain_one(tmp_path):
    plain, packed = tmp_path / "aln.fasta", tmp_path / "aln.fasta.gz"
    plain.write_text(ALN)
    packed.write_bytes(_gz(ALN.encode()))
    assert main(["distances", str(plain), "-o", str(tmp_path / "a.tsv"), "--model", "jc69", "--quiet"]) == 0
    assert main(["distances", str(packed), "-o", str(tmp_path / "b.tsv"), "--model", "jc69", "--quiet"]) == 0
    assert (tmp_path / "a.tsv").read_bytes() == (tmp_path / "b.tsv").read_bytes()


def test_audit_reads_a_bz2_matrix_like_the_plain_one(tmp_path, capsys):
    D = euclidean(8, seed=3)
    D[0, 5] = D[5, 0] = D[0, 5] * 3  # a violation to find
    src = tmp_path / "m.tsv"
    write_tsv(src, _labels(8), D)
    packed = tmp_path / "m.tsv.bz2"
    packed.write_bytes(bz2.compress(src.read_bytes()))
    docs = []
    for path in (src, packed):
        assert main(["audit", str(path), "--json", str(tmp_path / "a.json"), "--quiet"]) == 0
        docs.append(json.loads((tmp_path / "a.json").read_text()))
    capsys.readouterr()
    for key in ("n", "triangles", "violated_triangles", "max_violation", "min_changes_lower_bound"):
        assert docs[0][key] == docs[1][key], key
    assert docs[0]["violated_triangles"] > 0


def test_standard_input_may_be_gzipped(tmp_path):
    src = tmp_path / "m.tsv"
    write_tsv(src, _labels(4), euclidean(4))
    out = tmp_path / "o.csv"
    p = subprocess.run([sys.executable, "-m", "seqdist.cli", "convert", "-", "-o", str(out)],
                       input=_gz(src.read_bytes()), capture_output=True, cwd=ROOT, timeout=300)
    assert p.returncode == 0, p.stderr
    assert read_matrix(str(out)).equals(read_matrix(str(src)))


def test_output_named_gz_or_bz2_is_compressed_and_the_same_every_time(tmp_path):
    dm = DistanceMatrix.from_array(euclidean(6), _labels(6))
    for name, unpack in (("m.tsv.gz", gzip.decompress), ("m.nex.bz2", bz2.decompress)):
        path = tmp_path / name
        write_matrix(str(path), dm)
        first = path.read_bytes()
        write_matrix(str(path), dm)
        assert path.read_bytes() == first  # no time stamp in the gzip header
        fmt = matrix_format(name)
        assert unpack(first).decode() == mio.format_matrix(dm, fmt)
        assert read_matrix(str(path)).equals(dm)


def test_a_text_that_begins_like_bzip2_stays_text(tmp_path):
    src = tmp_path / "m.tsv"
    src.write_text("BZh91AY\tx\ty\nx\t0\t1\ny\t1\t0\n")  # a header cell that spells the magic
    assert read_matrix(str(src))["x", "y"] == 1.0


# ----------------------------------------------------------------- corrupt, truncated, too large
def _good_gz(tmp_path) -> bytes:
    src = tmp_path / "good.tsv"
    write_tsv(src, _labels(30), euclidean(30))
    return _gz(src.read_bytes())


BAD = [
    ("corrupt gzip", lambda g: g[:20] + bytes(b ^ 0x5A for b in g[20:60]) + g[60:], "corrupt gzip data ("),
    ("truncated gzip", lambda g: g[: len(g) // 2], "corrupt gzip data (the file ends before"),
    ("gzip with a bad checksum", lambda g: g[:-8] + bytes(4) + g[-4:], "corrupt gzip data ("),
    ("truncated bz2", lambda g: bz2.compress(gzip.decompress(g))[:200], "corrupt bz2 data ("),
    ("corrupt bz2", lambda g: (lambda b: b[:10] + b"\0" * 40 + b[50:])(bz2.compress(gzip.decompress(g))),
     "corrupt bz2 data ("),
]


@pytest.mark.parametrize("name,spoil,msg", BAD, ids=[b[0] for b in BAD])
def test_corrupt_compressed_input_is_one_error_line(name, spoil, msg, tmp_path, capsys):
    src = tmp_path / "bad.tsv.gz"
    src.write_bytes(spoil(_good_gz(tmp_path)))
    out = tmp_path / "out.tsv"
    assert main(["convert", str(src), "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith(f"seqdist: error: {src}: {msg}"), err
    assert not out.exists()


def test_corrupt_gzip_alignment_through_distances(tmp_path, capsys):
    src = tmp_path / "aln.fasta.gz"
    src.write_bytes(_gz(ALN.encode())[:25])
    out = tmp_path / "d.tsv"
    assert main(["distances", str(src), "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.startswith(f"seqdist: error: {src}: corrupt gzip data") and not out.exists()


def test_an_expansion_beyond_the_limit_is_refused(tmp_path, monkeypatch, capsys):
    # a small "bomb": 4 MiB of zeros squeezed into a few kilobytes
    bomb = tmp_path / "bomb.tsv"
    bomb.write_bytes(_gz(b"0" * (4 << 20)))
    assert bomb.stat().st_size < 10_000
    monkeypatch.setattr(mio, "MAX_DECOMPRESSED", 1 << 20)
    with pytest.raises(InputError, match=r"bomb.tsv: the gzip data expands to more than 1 MiB, the limit"):
        read_text(str(bomb))
    monkeypatch.setenv("SEQDIST_MAX_DECOMPRESSED", "2M")
    with pytest.raises(InputError, match="more than 2 MiB"):
        read_text(str(bomb))
    monkeypatch.setenv("SEQDIST_MAX_DECOMPRESSED", "8M")
    assert len(read_text(str(bomb))) == 4 << 20  # within a raised limit it reads
    monkeypatch.setenv("SEQDIST_MAX_DECOMPRESSED", "lots")
    out = tmp_path / "o.tsv"
    assert main(["convert", str(bomb), "-o", str(out)]) == 2
    assert "SEQDIST_MAX_DECOMPRESSED must be a positive number of bytes" in capsys.readouterr().err
    assert not out.exists()


def test_plain_files_are_untouched_by_the_limit(tmp_path, monkeypatch):
    monkeypatch.setattr(mio, "MAX_DECOMPRESSED", 10)
    src = tmp_path / "m.tsv"
    write_tsv(src, _labels(3), euclidean(3))
    assert read_matrix(str(src)).n == 3
    assert os.path.getsize(src) > 10
    assert np.isfinite(read_matrix(str(src)).values).all()
