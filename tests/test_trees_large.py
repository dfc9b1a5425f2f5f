"""Neighbor joining and BIONJ for large matrices: float32 and memory-mapped input, the
packed working triangle and the sorted rows' float32 bounds, and their memory.

The reference for every tree here is the same join on the same values in float64,
scanning every pair (``search="full"``): the full scan is the plain method
(Saitou & Nei 1987; Studier & Keppler 1988 form), checked against published
examples, Biopython and exact arithmetic in tests/test_trees.py. The sorted-row
search bound is the one of Simonsen, Mailund & Pedersen 2008 ("Rapid
neighbour-joining", WABI 2008); the tie rule is the one documented in
seqdist.trees.build (smallest Q, then smallest (min key, max key), a key being
the smallest input position of a cluster's leaves).
"""

from __future__ import annotations

import tracemalloc

import numpy as np
import pytest

from seqdist import DistanceMatrix
from seqdist.kernels.tree_building import nj_kernel, packed_lower
from seqdist.trees.build import neighbor_joining


def labels_for(n):
    return [f"t{k}" for k in range(n)]


def tree_like(n, seed, noise=0.05):
    """Path lengths on a random binary tree (random joins of clusters, exponential
    branch lengths) times symmetric log-normal noise; common practice for test data."""
    rng = np.random.default_rng(seed)
    D = np.zeros((n, n))
    depth = np.zeros(n)
    clusters = [[i] for i in range(n)]
    while len(clusters) > 1:
        a, b = rng.choice(len(clusters), 2, replace=False)
        ia, ib = np.array(clusters[a]), np.array(clusters[b])
        la, lb = rng.exponential(0.05, 2)
        depth[ia] += la
        depth[ib] += lb
        D[np.ix_(ia, ib)] = depth[ia][:, None] + depth[ib][None, :]
        D[np.ix_(ib, ia)] = D[np.ix_(ia, ib)].T
        clusters[a] = clusters[a] + clusters[b]
        clusters.pop(b)
    E = np.exp(rng.normal(0, noise, (n, n)))
    D *= np.sqrt(E * E.T)
    np.fill_diagonal(D, 0)
    return D


def tied(n, seed, levels):
    """A tree-like matrix rounded to a few levels: many exactly equal distances and Q values."""
    D = tree_like(n, seed)
    D = np.round(D / D.max() * levels)
    np.fill_diagonal(D, 0)
    return D


def same_result(r1, r2):
    """The kernel's joins, lengths and last three equal to the last bit."""
    return all(a.dtype == b.dtype and np.array_equal(a.view(np.uint8), b.view(np.uint8)) for a, b in zip(r1, r2))


CASES = [(50, 1, None), (120, 2, None), (300, 3, None), (90, 4, 4), (200, 5, 12), (64, 6, 2)]


@pytest.mark.parametrize("n, seed, levels", CASES)
@pytest.mark.parametrize("bionj", [False, True])
def test_float32_input_joins_as_its_float64_values(n, seed, levels, bionj):
    # float32 values are exact float64 numbers; the join's arithmetic is float64, so
    # the tree must be the one of the converted matrix, sorted search and full scan alike
    D = tree_like(n, seed) if levels is None else tied(n, seed, levels)
    D32 = D.astype(np.float32)
    D64 = D32.astype(np.float64)
    full = nj_kernel(D64, bionj, False)
    for sorted_rows in (False, True):
        assert same_result(nj_kernel(D32, bionj, sorted_rows), full)
        assert same_result(nj_kernel(D64, bionj, sorted_rows), full)


@pytest.mark.parametrize("n, seed, levels", CASES)
@pytest.mark.parametrize("bionj", [False, True])
def test_sorted_search_equals_full_scan_newick(n, seed, levels, bionj):
    # the float32 bounds of the sorted rows lose no pair: same Newick text as the full scan
    D = tree_like(n, seed) if levels is None else tied(n, seed, levels)
    dm = DistanceMatrix.from_array(D, labels_for(n))
    a = neighbor_joining(dm, bionj=bionj, search="sorted").to_newick()
    b = neighbor_joining(dm, bionj=bionj, search="full").to_newick()
    assert a == b


@pytest.mark.parametrize("bionj", [False, True])
def test_float32_matrix_through_neighbor_joining(bionj):
    # A DistanceMatrix holding float32 values builds the tree of the same values in
    # float64, as Newick text, with either search.
    n = 150
    D32 = tree_like(n, 11).astype(np.float32)
    labels = labels_for(n)
    dm64 = DistanceMatrix.from_array(D32.astype(np.float64), labels)
    dm32 = DistanceMatrix.from_array(D32, labels, dtype=np.float32)
    assert dm32.values.dtype == np.float32
    want = neighbor_joining(dm64, bionj=bionj, search="full").to_newick()
    for search in ("sorted", "full"):
        assert neighbor_joining(dm32, bionj=bionj, search=search).to_newick() == want


def test_float32_npz_file_tree(tmp_path):
    # the binary format in float32, read back (memory-mapped when large) and joined: the
    # tree of the float64 values, for NJ and BIONJ
    from seqdist.io.matrices import read_matrix, write_matrix

    n = 120
    D32 = tree_like(n, 12).astype(np.float32)
    labels = labels_for(n)
    path = str(tmp_path / "m.npz")
    write_matrix(path, DistanceMatrix.from_array(D32, labels, dtype=np.float32))
    dm = read_matrix(path)
    assert dm.values.dtype == np.float32
    dm64 = DistanceMatrix.from_array(D32.astype(np.float64), labels)
    for bionj in (False, True):
        assert neighbor_joining(dm, bionj=bionj).to_newick() == neighbor_joining(dm64, bionj=bionj).to_newick()


def test_memory_mapped_read_only_float32(tmp_path):
    n = 200
    D32 = tree_like(n, 21).astype(np.float32)
    path = tmp_path / "d.f32"
    D32.tofile(path)
    mm = np.memmap(path, dtype=np.float32, mode="r", shape=(n, n))
    for bionj in (False, True):
        assert same_result(nj_kernel(mm, bionj, True), nj_kernel(D32.astype(np.float64), bionj, False))
    assert np.array_equal(np.fromfile(path, dtype=np.float32).reshape(n, n), D32)


def test_input_is_read_not_written():
    # the kernel keeps its own packed copy: the caller's array is left as it was
    D = tree_like(80, 31)
    keep = D.copy()
    nj_kernel(D, True, True)
    nj_kernel(D, False, False)
    assert np.array_equal(D, keep)
    # and only the lower triangle is read
    U = np.tril(D)
    assert same_result(nj_kernel(U, False, True), nj_kernel(D, False, True))


def test_ties_by_label_order_in_float32():
    # every distance equal: every Q ties, and the documented rule joins the pair with
    # the smallest (min key, max key) first: t0 and t1 (common practice: a stated rule)
    n = 7
    D32 = (np.ones((n, n)) - np.eye(n)).astype(np.float32)
    kids, lens, last3, len3 = nj_kernel(D32, False, True)
    assert kids[0].tolist() == [0, 1]
    assert same_result((kids, lens, last3, len3), nj_kernel(D32.astype(np.float64), False, False))


def test_packed_lower_layout():
    D = np.arange(16, dtype=np.float32).reshape(4, 4)
    # rows 1, 2, 3 left of the diagonal: (1,0), (2,0), (2,1), (3,0), (3,1), (3,2)
    assert packed_lower(D).tolist() == [4.0, 8.0, 9.0, 12.0, 13.0, 14.0]
    assert packed_lower(D).dtype == np.float64
    with pytest.raises(ValueError):
        packed_lower(np.zeros((3, 4)))


@pytest.mark.parametrize("bionj, bound", [(False, 1.2), (True, 1.7)])
def test_join_memory_beyond_the_input(bionj, bound):
    # What the join allocates beyond its input, as numpy reports it to tracemalloc: the
    # packed working triangle (0.5 of a float64 matrix), the sorted rows (float32 bound
    # and int32 id per pair: 0.5, plus 1/32 room) and BIONJ's packed variances (0.5).
    # The earlier kernel took a full copy, full sorted values and their indices (2.5;
    # 3.5 with BIONJ). Counted, not timed.
    n = 600
    dm = DistanceMatrix.from_array(tree_like(n, 41), labels_for(n))
    full = n * n * 8
    tracemalloc.start()
    try:
        tracemalloc.reset_peak()
        base = tracemalloc.get_traced_memory()[0]
        neighbor_joining(dm, bionj=bionj)
        peak = tracemalloc.get_traced_memory()[1] - base
    finally:
        tracemalloc.stop()
    assert peak < bound * full
