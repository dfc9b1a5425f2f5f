"""The binary matrix format (numpy's .npz) and write -> read being the identity for every format.

The .npz layout is numpy's own (a zip archive of .npy files; the .npy format is numpy's
documented "NEP 1 - A simple file format for NumPy arrays"); numpy itself is the outside reader
and writer the files are checked against.
"""

from __future__ import annotations

import io
import os
import string
import subprocess
import sys

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from seqdist import DistanceMatrix
from seqdist.cli import main
from seqdist.io import matrices as mio
from seqdist.io.matrices import REGISTRY, format_matrix, matrix_format, read_matrix, write_matrix

from conftest import ROOT, euclidean, write_tsv

LABELS = ["a", "b c", "it's", "é"]


def _dm(n=4, seed=0, labels=None):
    D = euclidean(n, seed=seed)
    if n > 2:
        D[0, 2] = D[2, 0] = np.nan
    return DistanceMatrix.from_array(D, labels or [f"s{i}" for i in range(n)])


def test_npz_is_numpys_own_layout_read_by_numpy_alone(tmp_path):
    dm = _dm(4, labels=LABELS)
    path = tmp_path / "d.npz"
    write_matrix(str(path), dm)
    assert matrix_format(str(path)) == "npz"
    with np.load(path, allow_pickle=False) as z:
        assert sorted(z.files) == ["labels", "values"]
        assert z["values"].dtype == np.float64 and z["labels"].dtype.kind == "U"
        assert z["labels"].tolist() == LABELS
        assert np.array_equal(z["values"], dm.values, equal_nan=True)
    back = read_matrix(str(path))
    assert back.labels == dm.labels and np.array_equal(back.values, dm.values, equal_nan=True)
    write_matrix(str(tmp_path / "again.npz"), dm)
    assert (tmp_path / "again.npz").read_bytes() == path.read_bytes()  # no time stamps in the zip


@pytest.mark.parametrize("saver", [np.savez, np.savez_compressed])
def test_npz_written_by_numpy_is_read_float32_kept(saver, tmp_path):
    D = euclidean(5, seed=2)
    path = tmp_path / "user.npz"
    saver(path, values=D.astype(np.float32), labels=np.array(["p", "q", "r", "s", "t"]))
    dm = read_matrix(str(path))
    assert dm.values.dtype == np.float32  # single precision stays single (half the memory)
    assert np.array_equal(dm.values, D.astype(np.float32))
    path64 = tmp_path / "user64.npz"
    saver(path64, values=D, labels=np.array([b"p", b"q", b"r", b"s", b"t"]))  # byte-string labels too
    assert np.array_equal(read_matrix(str(path64)).values, D) and read_matrix(str(path64)).labels[0] == "p"


def test_npz_through_the_commands(tmp_path, capsys):
    aln = tmp_path / "aln.fasta"
    aln.write_text(">a\nACGTACGTAC\n>b\nACGTTCGTAC\n>c\nACCTTCGAAC\n>d\nTCCTTGGAAC\n")
    assert main(["distances", str(aln), "-o", str(tmp_path / "d.npz"), "--quiet"]) == 0
    assert main(["distances", str(aln), "-o", str(tmp_path / "d.tsv"), "--quiet"]) == 0
    assert read_matrix(str(tmp_path / "d.npz")).equals(read_matrix(str(tmp_path / "d.tsv")))
    assert main(["repair", str(tmp_path / "d.npz"), "-o", str(tmp_path / "r.npz"), "--objective", "l1",
                 "--quiet"]) == 0
    assert main(["tree", str(tmp_path / "r.npz"), "-o", str(tmp_path / "t.nwk"), "--quiet"]) == 0
    assert main(["audit", str(tmp_path / "d.npz"), "--quiet"]) == 0
    assert main(["convert", str(tmp_path / "d.npz"), "-o", str(tmp_path / "back.tsv")]) == 0
    assert (tmp_path / "back.tsv").read_bytes() == (tmp_path / "d.tsv").read_bytes()
    # recognised by its first bytes without the extension; a misnamed one gets a hint
    (tmp_path / "noext").write_bytes((tmp_path / "d.npz").read_bytes())
    assert read_matrix(str(tmp_path / "noext")).n == 4
    (tmp_path / "wrong.tsv").write_bytes((tmp_path / "d.npz").read_bytes())
    assert main(["audit", str(tmp_path / "wrong.tsv")]) == 2
    assert "binary data, not a text matrix file (an npz archive? give --in-format npz" in capsys.readouterr().err


def test_npz_to_standard_output(tmp_path):
    src = tmp_path / "m.tsv"
    write_tsv(src, ["x", "y", "z"], euclidean(3))
    p = subprocess.run([sys.executable, "-m", "seqdist.cli", "convert", str(src), "-o", "-", "--out-format", "npz"],
                       capture_output=True, cwd=ROOT, timeout=300)
    assert p.returncode == 0, p.stderr
    with np.load(io.BytesIO(p.stdout), allow_pickle=False) as z:
        assert z["labels"].tolist() == ["x", "y", "z"]


# ----------------------------------------------------------------- bad npz: one line, exit 2, no output
class _Trap:
    """Unpickling this calls os.mkdir(path): a folder appears if anything unpickles it."""

    def __init__(self, path):
        self.path = path

    def __reduce__(self):
        return (os.mkdir, (self.path,))


def _npz(path, **arrays):
    np.savez(path, **arrays)
    return path


def _bad_cases(tmp_path):
    D = euclidean(3)
    trap = str(tmp_path / "unpickled")
    objects = np.empty(3, dtype=object)
    objects[:] = [_Trap(trap), "b", "c"]
    good = (tmp_path / "good.npz")
    write_matrix(str(good), _dm(3))
    return [
        ("no labels", _npz(tmp_path / "a.npz", values=D), "holds no 'labels' array (it holds: values)"),
        ("no values", _npz(tmp_path / "b.npz", labels=np.array(["a", "b", "c"])), "holds no 'values' array"),
        ("pickled labels", _npz(tmp_path / "c.npz", values=D, labels=objects),
         "the 'labels' array holds Python objects, which seqdist never unpickles"),
        ("fewer labels", _npz(tmp_path / "d.npz", values=D, labels=np.array(["a", "b"])),
         "'values' has shape (3, 3), but 'labels' names 2 taxa"),
        ("not square", _npz(tmp_path / "e.npz", values=D[:, :2], labels=np.array(["a", "b", "c"])),
         "'values' has shape (3, 2)"),
        ("numeric labels", _npz(tmp_path / "f.npz", values=D, labels=np.arange(3)), "'labels' must be a 1-d array"),
        ("complex values", _npz(tmp_path / "g.npz", values=D + 1j, labels=np.array(["a", "b", "c"])),
         "'values' must hold real numbers"),
        ("truncated", _write(tmp_path / "h.npz", good.read_bytes()[:300]), "not a readable npz archive"),
        ("not a zip", _write(tmp_path / "i.npz", b"PK\x03\x04" + b"\x01" * 60), "not a readable npz archive"),
        ("negative distance", _npz(tmp_path / "j.npz", values=-D, labels=np.array(["a", "b", "c"])), "negative"),
    ], trap


def _write(path, data):
    path.write_bytes(data)
    return path


def test_bad_npz_is_one_error_line_and_nothing_is_unpickled(tmp_path, capsys):
    cases, trap = _bad_cases(tmp_path)
    out = tmp_path / "out.tsv"
    for name, src, msg in cases:
        assert main(["convert", str(src), "-o", str(out)]) == 2, name
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and err[0].startswith(f"seqdist: error: {src}") and msg in err[0], (name, err)
        assert not out.exists()
    assert not os.path.exists(trap)
    with np.load(tmp_path / "c.npz", allow_pickle=True) as z:  # the trap is real: numpy allowed to springs it
        z["labels"]
    assert os.path.isdir(trap)


def test_a_huge_declared_member_is_refused_before_reading(tmp_path, monkeypatch):
    path = tmp_path / "big.npz"
    write_matrix(str(path), _dm(40))
    monkeypatch.setattr(mio, "MAX_DECOMPRESSED", 4096)  # the 40 x 40 values take 12,800 bytes
    with pytest.raises(mio.InputError, match="the 'values' array would take .* more than the 4 KiB limit"):
        read_matrix(str(path))


# ----------------------------------------------------------------- write -> read is the identity, every format
# Every format promises the exact float64 value back (repr text is exact; npz stores the bits)
# and the labels back as given (square and lower cannot hold white space in a label; tsv/csv
# strip a label's outer blanks).
_PRINTABLE = string.ascii_letters + string.digits + " _-.,;:'\"()[]{}|/+*&%$#@!?=<>é"
_labels_any = st.text(_PRINTABLE, min_size=1, max_size=10).map(str.strip).filter(bool)
_labels_plain = st.text(string.ascii_letters + string.digits + "_-.|/()", min_size=1, max_size=10)


@st.composite
def _cases(draw):
    fmt = draw(st.sampled_from(list(REGISTRY)))
    n = draw(st.integers(1, 7))
    labels = draw(st.lists(_labels_plain if fmt in ("square", "lower") else _labels_any, min_size=n, max_size=n,
                           unique=True))
    vals = draw(st.lists(st.floats(0, 1e9, allow_nan=False, allow_subnormal=False), min_size=n * n, max_size=n * n))
    a = np.triu(np.array(vals).reshape(n, n), 1)
    a = a + a.T
    for i, j in draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=2)):
        if i != j:
            a[i, j] = a[j, i] = np.nan
    packing = draw(st.sampled_from(["", ".gz", ".bz2"]))
    return fmt, DistanceMatrix.from_array(a, labels), packing


@settings(max_examples=80, suppress_health_check=[HealthCheck.function_scoped_fixture], deadline=None)
@given(case=_cases())
def test_write_then_read_is_the_identity_for_every_format(tmp_path, case):
    fmt, dm, packing = case
    path = os.path.join(tmp_path, "m.out" + packing)
    write_matrix(path, dm, fmt)
    for given_fmt in (fmt, None if fmt != "csv" else fmt):  # and recognised without a name (csv is not)
        back = read_matrix(path, given_fmt)
        assert back.labels == dm.labels
        assert np.array_equal(back.values, dm.values, equal_nan=True)
    assert format_matrix(dm, fmt) == format_matrix(dm, fmt)  # deterministic


def test_float32_npz_memory_mapped_copy_on_write(tmp_path, monkeypatch):
    """A large stored 'values' member is memory-mapped copy-on-write: the matrix holds the file's
    float32 values, and the file is not written even where the reader sets the diagonal."""
    import seqdist.io.matrices as matrices
    from seqdist.core.matrix import DistanceMatrix

    D = euclidean(30, seed=5).astype(np.float32)
    D[np.diag_indices(30)] = 1e-12  # within the symmetry tolerance: the reader writes exact zeros
    path = tmp_path / "big.npz"
    np.savez(path, values=D, labels=np.array([f"t{i}" for i in range(30)]))
    before = path.read_bytes()
    monkeypatch.setattr(matrices, "MMAP_MIN_BYTES", 0)
    dm = read_matrix(str(path))
    base = dm.values
    while getattr(base, "base", None) is not None:
        base = base.base
    import mmap

    assert isinstance(base, mmap.mmap)  # mapped, not read
    assert dm.values.dtype == np.float32 and float(np.abs(np.diagonal(dm.values)).max()) == 0.0
    off = ~np.eye(30, dtype=bool)
    assert np.array_equal(dm.values[off], D[off])
    assert path.read_bytes() == before
    # the same matrix read without mapping
    monkeypatch.setattr(matrices, "MMAP_MIN_BYTES", 1 << 60)
    assert read_matrix(str(path)).equals(dm)
    assert isinstance(dm.with_values(np.array(dm.values)), DistanceMatrix)
    assert dm.with_values(np.array(dm.values)).values.dtype == np.float32


def test_convert_dtype_float32_and_back(tmp_path, capsys):
    D = euclidean(12, seed=3)
    src = tmp_path / "d.npz"
    np.savez(src, values=D, labels=np.array([f"s{i}" for i in range(12)]))
    assert main(["convert", str(src), "-o", str(tmp_path / "d32.npz"), "--dtype", "float32"]) == 0
    err = capsys.readouterr().err
    assert "warning" in err and "float32" in err and "rounded" in err
    d32 = read_matrix(str(tmp_path / "d32.npz"))
    assert d32.values.dtype == np.float32 and np.array_equal(d32.values, D.astype(np.float32))
    assert main(["convert", str(tmp_path / "d32.npz"), "-o", str(tmp_path / "d64.npz"), "--dtype", "float64"]) == 0
    d64 = read_matrix(str(tmp_path / "d64.npz"))
    assert d64.values.dtype == np.float64 and np.array_equal(d64.values, D.astype(np.float32).astype(np.float64))
    # a text output cannot hold a precision: refused in one line, nothing written
    assert main(["convert", str(src), "-o", str(tmp_path / "d.tsv"), "--dtype", "float32"]) == 2
    assert "--dtype needs the npz format" in capsys.readouterr().err
    assert not (tmp_path / "d.tsv").exists()


def test_float32_default_tolerance_keeps_a_rounded_metric_a_metric():
    """A tree metric stored in float32 breaks triangles by float32 rounding (about 6e-8 of the
    largest entry) at the float64 tolerance 1e-9, and by none at the float32 default, 2**-22."""
    from seqdist.core.matrix import FLOAT32_REL_TOL, default_tol
    from seqdist.kernels.triangles import count_violations

    rng = np.random.default_rng(0)
    n = 60  # taxa along one path of a tree (ancestors and descendants): every triangle is tight
    pos = np.cumsum(rng.uniform(0.1, 1.0, n))
    D = np.abs(pos[:, None] - pos[None, :])
    np.fill_diagonal(D, 0)
    F = D.astype(np.float32)
    assert default_tol(F) == FLOAT32_REL_TOL * float(F.max())
    assert count_violations(F, 1e-9 * float(F.max()))[0] > 0
    assert count_violations(F)[0] == 0 == count_violations(D)[0]


def test_float32_npz_through_the_commands(tmp_path, capsys):
    """A float32 npz goes through audit, tree and repair; the tree is the one built from the same
    values widened to float64 (the joins compute in float64)."""
    D = euclidean(25, seed=8)
    rng = np.random.default_rng(8)
    D = D * np.sqrt(np.outer(*(2 * [rng.uniform(0.8, 1.2, 25)])))  # break some triangles
    np.fill_diagonal(D, 0)
    labels = np.array([f"s{i}" for i in range(25)])
    np.savez(tmp_path / "d32.npz", values=D.astype(np.float32), labels=labels)
    np.savez(tmp_path / "d64.npz", values=D.astype(np.float32).astype(np.float64), labels=labels)
    for name in ("d32", "d64"):
        assert main(["tree", str(tmp_path / f"{name}.npz"), "-o", str(tmp_path / f"{name}.nwk"), "--quiet"]) == 0
        assert main(["audit", str(tmp_path / f"{name}.npz"), "--json", str(tmp_path / f"{name}.json"),
                     "--quiet"]) == 0
    assert (tmp_path / "d32.nwk").read_text() == (tmp_path / "d64.nwk").read_text()
    assert main(["repair", str(tmp_path / "d32.npz"), "-o", str(tmp_path / "r.npz"), "--objective", "shrink",
                 "--quiet"]) == 0
    assert read_matrix(str(tmp_path / "r.npz")).values.dtype == np.float64  # repairs compute in float64
