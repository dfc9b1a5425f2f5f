"""Shared compiled kernels against plain references (scipy, obvious loops)."""

from __future__ import annotations

import itertools

import numpy as np
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.sparse.csgraph import floyd_warshall

from seqdist.kernels.shortest_paths import apsp
from seqdist.kernels.triangles import count_violations, is_metric, max_violation

from conftest import euclidean


def scipy_graph(D):
    i, j = np.nonzero(~np.eye(len(D), dtype=bool) & ~np.isnan(D))
    return sp.csr_matrix((D[i, j], (i, j)), shape=D.shape)


def brute_count(D, tol):
    c, w = 0, 0.0
    for i, j, k in itertools.combinations(range(len(D)), 3):
        s = [D[i, j], D[i, k], D[j, k]]
        if any(np.isnan(s)):
            continue
        e = max(s) - (sum(s) - max(s))
        if e > tol:
            c += 1
            w = max(w, e)
    return c, w


@st.composite
def sym(draw, zeros=True, nan=False):
    n = draw(st.integers(1, 9))
    vals = draw(st.lists(st.sampled_from([0.0, 0.5, 1.0, 2.0, 3.0, 7.5]) if zeros
                         else st.floats(0.01, 10), min_size=n * n, max_size=n * n))
    a = np.triu(np.array(vals).reshape(n, n), 1)
    a = a + a.T
    if nan and n > 2:
        a[0, n - 1] = a[n - 1, 0] = np.nan
    return a


@settings(max_examples=80, deadline=None)
@given(sym(nan=True))
def test_count_matches_brute_force(D):
    assert count_violations(D, 1e-12) == brute_count(D, 1e-12)


@settings(max_examples=80, deadline=None)
@given(sym())
def test_apsp_matches_scipy_with_zeros(D):
    # scipy's dense input reads an off-diagonal 0 as "no edge"; a sparse graph with
    # explicit zeros keeps them as edges (scipy.sparse.csgraph docs)
    ref = floyd_warshall(scipy_graph(D), directed=False)
    assert np.allclose(apsp(D), ref, atol=1e-12)


@settings(max_examples=60, deadline=None)
@given(sym())
def test_max_violation_and_is_metric(D):
    c, w = brute_count(D, 0.0)
    assert np.isclose(max_violation(D), w)
    assert is_metric(D, 1e-12) == (c == 0 or w <= 1e-12)
    assert is_metric(apsp(D))


def test_euclidean_is_metric():
    D = euclidean(60)
    assert count_violations(D)[0] == 0 and is_metric(D)


@settings(max_examples=25, deadline=None)
@given(st.integers(3, 75), st.integers(0, 10_000), st.sampled_from([0.0, 0.1, 0.3]))
def test_count_across_tiles_with_missing(n, seed, frac_nan):
    """The tiled kernel (32-row tiles, dynamic scheduling) against the plain loop,
    on general floats with missing entries, for n on both sides of tile edges."""
    rng = np.random.default_rng(seed)
    D = np.triu(rng.uniform(0, 10, (n, n)), 1)
    D[np.triu(rng.random((n, n)) < frac_nan, 1)] = np.nan
    D = D + D.T
    np.fill_diagonal(D, 0)
    c, w = count_violations(D, 1e-12)
    rc, rw = brute_count(D, 1e-12)
    assert c == rc and np.isclose(w, rw, rtol=1e-12, atol=1e-12)
    assert np.isclose(max_violation(D), brute_count(D, 0.0)[1], rtol=1e-12, atol=1e-12)


def test_tile_order_covers_every_row_once():
    from seqdist.kernels.triangles import TILE, tile_starts

    for n in (0, 1, 31, 32, 33, 100, 1000):
        s = tile_starts(n)
        rows = sorted(r for a0 in s for r in range(a0, min(a0 + TILE, n)))
        assert rows == list(range(n))


def test_count_input_untouched_and_fortran_order():
    D = euclidean(50, seed=4)
    D[3, 7] = D[7, 3] = 40.0
    F = np.asfortranarray(D)
    before = F.copy()
    assert count_violations(F) == count_violations(D)
    assert np.array_equal(F, before)


def test_apsp_same_bits_for_any_tiling_rows_and_threads():
    """The blocked kernel forms each candidate sum once and compares them in the order of the
    pivots for every entry, so the column tiles, the form of the update (AVX-512 register blocks
    where the CPU has it, else the portable loops over four rows and one row) and the number of
    threads must not change a single bit (row counts on both sides of multiples of 4, 8 and the
    block, column tails; missing entries and zeros). The values are also checked against the
    plain numpy reference."""
    from seqdist.kernels._shortest_paths import fw_blocked
    from seqdist.kernels.shortest_paths import apsp_reference

    def portable(D, block, tile):
        d = np.array(D, dtype=np.float64)
        d[np.isnan(d)] = np.inf
        np.fill_diagonal(d, 0.0)
        b = min(block, len(d))
        fw_blocked(d, np.empty((b, len(d))), np.empty((len(d), b)), tile, 1, wide=False)
        return d

    rng = np.random.default_rng(17)
    for n, missing in ((2, 0.3), (5, 0.3), (13, 0.3), (64, 0.3), (67, 0.9), (150, 0.3), (150, 0.97)):
        D = np.triu(rng.uniform(0, 10, (n, n)), 1)
        D[np.triu(rng.random((n, n)) < 0.05, 1)] = 0.0
        D[np.triu(rng.random((n, n)) < missing, 1)] = np.nan  # sparse: many rows without a path yet
        D = D + D.T
        np.fill_diagonal(D, 0)
        for block in (16, 64):
            base = apsp(D, block=block, tile=512, threads=1)
            for tile in (3, 512):
                assert portable(D, block, tile).tobytes() == base.tobytes(), (n, block, tile)
            for tile, threads in ((1, 1), (3, 1), (8, 2), (16, 0), (512, 2)):
                assert apsp(D, block=block, tile=tile, threads=threads).tobytes() == base.tobytes(), (n, block, tile)
        ref = apsp_reference(D)
        assert np.array_equal(np.isinf(base), np.isinf(ref))
        fin = np.isfinite(ref)
        assert np.allclose(base[fin], ref[fin], rtol=1e-13, atol=1e-13)


@settings(max_examples=25, deadline=None)
@given(st.integers(3, 75), st.integers(0, 10_000), st.sampled_from([0.0, 0.1]),
       st.sampled_from([0, 1, 3, 17, 4096]))
def test_count_column_chunks_and_float32(n, seed, frac_nan, chunk):
    """Column chunks of any width give the plain loop's count and largest excess, and a
    float32 matrix is counted exactly: the same answer as its values widened to float64
    (the brute-force loop here runs in float64 on the widened values)."""
    from seqdist.kernels._triangles import count_tiles, count_tiles_f32
    from seqdist.kernels.triangles import tile_starts

    rng = np.random.default_rng(seed)
    D = np.triu(rng.uniform(0, 10, (n, n)), 1)
    D[np.triu(rng.random((n, n)) < frac_nan, 1)] = np.nan
    D = D + D.T
    np.fill_diagonal(D, 0)
    F = D.astype(np.float32)
    wide = F.astype(np.float64)
    ref = brute_count(wide, 1e-12)
    for rows in (1, 7, 32):
        starts = tile_starts(n, rows)
        for kernel, M in ((count_tiles, wide), (count_tiles_f32, F)):
            c, w = np.zeros(len(starts), np.int64), np.zeros(len(starts))
            kernel(M, 1e-12, starts, rows, c, w, chunk)
            assert (int(c.sum()), float(w.max())) == (ref[0], ref[1])
    assert count_violations(F, 1e-12) == ref


def test_count_float32_memmap_not_widened(tmp_path):
    """A read-only float32 memory map is counted where it lies (no float64 copy of it)."""
    D = euclidean(40, seed=2)
    D[1, 5] = D[5, 1] = 30.0
    mm = np.lib.format.open_memmap(tmp_path / "d.npy", mode="w+", dtype=np.float32, shape=D.shape)
    mm[:] = D
    mm.flush()
    ro = np.load(tmp_path / "d.npy", mmap_mode="r")
    from seqdist.kernels.triangles import _as_c

    assert _as_c(ro).dtype == np.float32 and np.shares_memory(_as_c(ro), ro)
    assert count_violations(ro, 1e-9 * 30) == count_violations(ro.astype(np.float64), 1e-9 * 30)
