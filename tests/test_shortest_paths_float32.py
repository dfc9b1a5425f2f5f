"""The shrink closure (seqdist.kernels.shortest_paths.apsp) in float32, in place and on memory maps.

Sources: the Floyd-Warshall recurrence d[i, j] <- min(d[i, j], d[i, k] + d[k, j]) for
k = 0 .. n-1 (Floyd 1962, "Algorithm 97: Shortest path", CACM 5(6):345), written out plainly in
numpy (apsp_reference, float32 sums); the blocked form of the same recurrence (Venkataraman,
Sahni & Mukhopadhyaya 2003, "A blocked all-pairs shortest-paths algorithm", J. Exp. Algorithmics
8). The float32 kernel forms, for every entry, the recurrence's candidates in its order of
pivots, so the two must agree bit for bit (not merely within a tolerance).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import seqdist.kernels.shortest_paths as sp
from seqdist.kernels._shortest_paths import fw_blocked
from seqdist.kernels.shortest_paths import apsp, apsp_reference


def random_sym32(rng, n, zeros=0.05, missing=0.3):
    """Seeded symmetric float32 matrix with zero entries and NaN (missing) entries."""
    a = rng.uniform(0, 10, (n, n)).astype(np.float32)
    a[rng.random((n, n)) < zeros] = 0
    a[rng.random((n, n)) < missing] = np.nan
    a = np.triu(a, 1)
    a = a + a.T
    np.fill_diagonal(a, 0)
    return a


def bits(x):
    return np.ascontiguousarray(x).view(np.uint32)


CASES = ((2, 0.3), (7, 0.3), (13, 0.0), (67, 0.3), (67, 0.9), (150, 0.9), (150, 0.97))


def test_float32_equals_plain_float32_loop_bit_for_bit():
    # the recurrence in float32 (Floyd 1962): sparse graphs give long paths, where the order in
    # which a path's sums are formed shows in the last bit
    rng = np.random.default_rng(31)
    for n, missing in CASES:
        D = random_sym32(rng, n, missing=missing)
        ref = apsp_reference(D)
        assert ref.dtype == np.float32
        for block in (1, 4, 16, 64):  # 67, 150: n not a multiple of the block
            got = apsp(D, block=block)
            assert got.dtype == np.float32
            assert np.array_equal(bits(got), bits(ref)), (n, missing, block)


def test_float32_arithmetic_not_float64_rounded_at_the_end():
    # a kernel that closed a float64 copy and rounded once would differ here in the last bit of
    # many entries (sums rounded to float32 at every step: common practice for float32 arithmetic)
    D = random_sym32(np.random.default_rng(32), 150, missing=0.9)
    got = apsp(D)
    via64 = apsp_reference(D.astype(np.float64)).astype(np.float32)
    assert np.array_equal(bits(got), bits(apsp_reference(D)))
    assert (bits(got) != bits(via64)).sum() > 0


def test_every_form_tile_and_thread_count_gives_the_same_bits():
    # the portable loops (wide=False), the AVX-512 register blocks where the CPU has them, any
    # column tile and 1 or 2 threads compare the same candidates in the same order (common practice:
    # min is exact, so only the order of the sums could change a bit)
    rng = np.random.default_rng(33)
    for n, missing in ((5, 0.3), (13, 0.3), (67, 0.3), (150, 0.3), (150, 0.97)):
        D = random_sym32(rng, n, missing=missing)
        ref = apsp_reference(D)
        for block in (16, 64):
            b = min(block, n)
            for wide in (False, True):
                for tile, threads in ((3, 1), (512, 1), (8, 2), (512, 2)):
                    d = np.where(np.isnan(D), np.float32(np.inf), D)
                    fw_blocked(d, np.empty((b, n), np.float32), np.empty((n, b), np.float32), tile, threads,
                               wide=wide, S=np.empty((b, n), np.float32))
                    assert np.array_equal(bits(d), bits(ref)), (n, block, wide, tile, threads)
            assert np.array_equal(bits(apsp(D, block=block, threads=2)), bits(ref))


def test_in_place_on_a_memmap_file(tmp_path):
    # common practice: np.memmap opened r+ writes through to the file
    D = random_sym32(np.random.default_rng(34), 67, missing=0.5)
    n = len(D)
    want = apsp(D)
    path = tmp_path / "d.f32"
    D.tofile(path)
    mm = np.memmap(path, dtype=np.float32, mode="r+", shape=(n, n))
    got = apsp(mm, block=16, out=mm)
    assert got is mm
    assert np.array_equal(bits(np.asarray(got)), bits(want))
    mm.flush()
    del mm, got
    assert np.array_equal(bits(np.fromfile(path, dtype=np.float32).reshape(n, n)), bits(want))


def test_out_another_array_leaves_values_untouched(tmp_path):
    D = random_sym32(np.random.default_rng(35), 40, missing=0.4)
    before = D.copy()
    path = tmp_path / "in.f32"
    D.tofile(path)
    src = np.memmap(path, dtype=np.float32, mode="r", shape=D.shape)  # read-only input
    out = np.memmap(tmp_path / "out.f32", dtype=np.float32, mode="w+", shape=D.shape)
    got = apsp(src, out=out)
    assert got is out
    assert np.array_equal(bits(np.asarray(out)), bits(apsp(D)))
    assert np.array_equal(bits(np.asarray(src)), bits(before))
    # an in-memory out as well; the input keeps its NaN entries and diagonal
    out2 = np.full(D.shape, 7, dtype=np.float32)
    assert apsp(D, out=out2) is out2
    assert np.array_equal(bits(out2), bits(apsp(D)))
    assert np.array_equal(bits(D), bits(before))


def test_float64_with_out_keeps_todays_bits():
    rng = np.random.default_rng(36)
    D = np.triu(rng.uniform(0, 10, (90, 90)), 1)
    D[np.triu(rng.random((90, 90)) < 0.9, 1)] = np.nan
    D = D + D.T
    want = apsp(D)
    assert want.dtype == np.float64
    d = D.copy()
    assert apsp(d, out=d) is d
    assert d.tobytes() == want.tobytes()


def test_preparation_in_chunks_of_rows(monkeypatch):
    # NaN -> inf and the zero diagonal are done a few rows at a time: the same answer as one chunk
    D = random_sym32(np.random.default_rng(37), 67, missing=0.5)
    D[5, 5] = np.nan
    D[60, 60] = 3
    want = apsp(D)
    monkeypatch.setattr(sp, "_CHUNK", 67 * 4 + 5)  # 4 rows per chunk, the last chunk short
    d = D.copy()
    assert np.array_equal(bits(apsp(d, out=d)), bits(want))
    assert np.array_equal(bits(apsp(D)), bits(want))
    assert not np.isnan(want).any() and (np.diag(want) == 0).all()


def test_out_is_checked():
    D = random_sym32(np.random.default_rng(38), 10)
    with pytest.raises(ValueError, match="float32"):
        apsp(D, out=np.empty((10, 10)))  # float64 out for float32 work
    with pytest.raises(ValueError, match="C-contiguous"):
        apsp(D, out=np.empty((10, 10), np.float32, order="F"))
    ro = np.empty((10, 10), np.float32)
    ro.flags.writeable = False
    with pytest.raises(ValueError, match="writeable"):
        apsp(D, out=ro)
    flat = np.zeros(101, np.float32)  # two C-contiguous (10, 10) views one element apart
    with pytest.raises(ValueError, match="overlaps"):
        apsp(flat[:100].reshape(10, 10), out=flat[1:].reshape(10, 10))


@st.composite
def sym32(draw):
    n = draw(st.integers(3, 9))
    vals = draw(st.lists(st.floats(0, 100, width=32), min_size=n * n, max_size=n * n))
    a = np.triu(np.array(vals, dtype=np.float32).reshape(n, n), 1)
    if draw(st.booleans()):
        a[0, n - 1] = np.nan
    a = a + a.T
    np.fill_diagonal(a, 0)
    return a


@settings(max_examples=80, deadline=None, derandomize=True)
@given(sym32())
def test_float32_closure_is_a_metric_within_rounding(D):
    """d[i, j] <= d[i, k] + d[k, j] + 2**-22 max(d) for every triple, measured in float64.

    Why (from memory, standard rounding analysis): with u = 2**-24, each float32 entry is a sum of
    a path's lengths rounded at most once per pivot level, so it lies within a factor (1 +- u)^h of
    the exact shortest path (h the levels used). The triangle then holds up to
    ((1+u)^h - (1-u)^h) (d[i, k] + d[k, j]), about 4 h u max(d): exactly 2**-22 max(d) for one
    level; on these small matrices the observed slack stays below it (deterministic examples).
    The plain float32 loop must meet it too: it gives the same bits."""
    d = apsp(D, block=2, tile=3).astype(np.float64)
    assert np.array_equal(bits(apsp(D, block=2, tile=3)), bits(apsp_reference(D)))
    fin = d[np.isfinite(d)]
    tol = 2.0 ** -22 * fin.max()
    assert (d[:, None, :] <= d[:, :, None] + d[None, :, :] + tol).all()
