"""Tree comparison: Robinson-Foulds, branch score, splits, cophenetic
correlation, checked by hand and against dendropy and scipy."""

from __future__ import annotations

import numpy as np
import pytest
from test_trees import labels_for, noisy, path_matrix, random_tree

from seqdist import DistanceMatrix, InputError
from seqdist.trees import (
    branch_score,
    build_tree,
    compare_trees,
    cophenetic_correlation,
    read_newick,
    robinson_foulds,
    splits,
    upgma,
)


def dendropy_pair(a: str, b: str):
    import dendropy

    tns = dendropy.TaxonNamespace()
    t1 = dendropy.Tree.get(data=a, schema="newick", taxon_namespace=tns, rooting="force-unrooted")
    t2 = dendropy.Tree.get(data=b, schema="newick", taxon_namespace=tns, rooting="force-unrooted")
    return t1, t2


def random_newick(n, rng):
    edges, nn = random_tree(n, rng)
    D = path_matrix(edges, nn, n)
    return build_tree(DistanceMatrix.from_array(D, labels_for(n)), "nj")


# ------------------------------------------------------------------ by hand
def test_one_nni_gives_two():
    # ((a,b),c,(d,e)) and ((a,c),b,(d,e)) differ by one nearest-neighbour
    # interchange around the edge {a,b,c}|{d,e}: RF = 2 (Robinson & Foulds 1981).
    t1 = read_newick("((a,b),c,(d,e));")
    t2 = read_newick("((a,c),b,(d,e));")
    assert robinson_foulds(t1, t2) == 2
    r = compare_trees(t1, t2)
    assert r["rf_normalized"] == pytest.approx(2 / (2 * (5 - 3)))
    assert r["splits_only_1"] == [["c", "d", "e"]]  # the side without 'a' of {a,b}|{c,d,e}
    assert r["splits_only_2"] == [["b", "d", "e"]]
    assert r["shared_splits"] == 1


def test_identical_and_rerooted_trees_have_rf_zero():
    a = read_newick("((a:1,b:2):0.5,c:1,(d:1,e:1):0.3);")
    b = read_newick("(((d:1,e:1):0.3,c:1):0.5,b:2,a:1);")  # same unrooted tree, other root
    assert robinson_foulds(a, b) == 0
    assert branch_score(a, b) == pytest.approx(0.0, abs=1e-12)


def test_maximal_rf_on_six_taxa():
    # ((a,b),(c,d),(e,f)) vs ((a,c),(b,e),(d,f)): no shared non-trivial split,
    # RF = 2 (n - 3) = 6 (by hand).
    assert robinson_foulds(read_newick("((a,b),(c,d),(e,f));"), read_newick("((a,c),(b,e),(d,f));")) == 6


def test_branch_score_by_hand():
    # Kuhner & Felsenstein 1994: sqrt(sum of squared differences over all
    # splits, trivial ones included, 0 where a split is absent).
    t1 = read_newick("((a:1,b:2):0.5,c:1,(d:1,e:1):0.25);")
    t2 = read_newick("((a:1,c:1):0.75,b:2,(d:1,e:3):0.25);")
    # shared: leaves (d differs by 0, e by 2), {d,e} same; {c,d,e} (0.5) only in t1,
    # {b,d,e} (0.75) only in t2.
    assert branch_score(t1, t2) == pytest.approx(np.sqrt(2.0 ** 2 + 0.5 ** 2 + 0.75 ** 2))


def test_rooted_tree_root_edges_merge():
    s = splits(read_newick("((a:1,b:1):2,(c:1,d:1):3);"))
    assert s[0b1100] == pytest.approx(5.0)  # the two root branches are one unrooted branch


def test_different_leaves_refused():
    with pytest.raises(InputError, match="only in the first tree: c"):
        robinson_foulds(read_newick("(a,b,c);"), read_newick("(a,b,x);"))


# ------------------------------------------------------------ against dendropy
@pytest.mark.parametrize("seed", range(10))
def test_rf_matches_dendropy(seed):
    from dendropy.calculate.treecompare import symmetric_difference

    rng = np.random.default_rng(600 + seed)
    n = int(rng.integers(4, 30))
    a, b = random_newick(n, rng), random_newick(n, rng)
    t1, t2 = dendropy_pair(a.to_newick(), b.to_newick())
    assert robinson_foulds(a, b) == symmetric_difference(t1, t2)


@pytest.mark.parametrize("seed", range(10))
def test_branch_score_matches_dendropy(seed):
    # dendropy's euclidean_distance sums over all bipartitions, leaf edges
    # included, with 0 for a missing one: the same definition on unrooted trees.
    from dendropy.calculate.treecompare import euclidean_distance

    rng = np.random.default_rng(700 + seed)
    n = int(rng.integers(4, 30))
    edges, nn = random_tree(n, rng)
    D = path_matrix(edges, nn, n)
    dm = DistanceMatrix.from_array(D, labels_for(n))
    a = build_tree(dm, "nj")
    b = build_tree(DistanceMatrix.from_array(noisy(D, rng, 0.3), labels_for(n)), "bionj")
    t1, t2 = dendropy_pair(a.to_newick(), b.to_newick())
    assert branch_score(a, b) == pytest.approx(euclidean_distance(t1, t2), rel=1e-9, abs=1e-12)


@pytest.mark.parametrize("seed", range(5))
def test_path_lengths_match_dendropy(seed):
    import dendropy

    rng = np.random.default_rng(800 + seed)
    n = int(rng.integers(3, 25))
    t = random_newick(n, rng)
    dt = dendropy.Tree.get(data=t.to_newick(), schema="newick")
    pdm = dt.phylogenetic_distance_matrix()
    tax = {x.label: x for x in dt.taxon_namespace}
    P = t.path_lengths(labels_for(n))
    for i in range(n):
        for j in range(i + 1, n):
            assert P[i, j] == pytest.approx(pdm(tax[f"t{i}"], tax[f"t{j}"]), rel=1e-12)


# --------------------------------------------------------- cophenetic correlation
def test_cophenetic_correlation_matches_scipy():
    # scipy's cophenet(Z, Y) returns the cophenetic correlation coefficient
    # (Sokal & Rohlf 1962) of an average-linkage (UPGMA) hierarchy.
    from scipy.cluster.hierarchy import cophenet, linkage
    from scipy.spatial.distance import squareform

    rng = np.random.default_rng(3)
    X = rng.uniform(0, 1, (30, 2))
    D = np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1))
    dm = DistanceMatrix.from_array(D, labels_for(30))
    c, _ = cophenet(linkage(squareform(D, checks=False), "average"), squareform(D, checks=False))
    assert cophenetic_correlation(upgma(dm), dm) == pytest.approx(c, rel=1e-12)


def test_cophenetic_correlation_of_additive_matrix_is_one():
    rng = np.random.default_rng(4)
    edges, nn = random_tree(12, rng)
    dm = DistanceMatrix.from_array(path_matrix(edges, nn, 12), labels_for(12))
    assert cophenetic_correlation(build_tree(dm, "nj"), dm) == pytest.approx(1.0, abs=1e-12)


def test_split_sort_order_deterministic():
    t1 = read_newick("(((a,b),c),d,((e,f),g),h);")
    t2 = read_newick("(((a,h),c),d,((e,g),f),b);")
    r1, r2 = compare_trees(t1, t2), compare_trees(t1, t2)
    assert r1 == r2
    sizes = [len(s) for s in r1["splits_only_1"]]
    assert sizes == sorted(sizes)
    assert all(s == sorted(s) and "a" not in s for s in r1["splits_only_1"] + r1["splits_only_2"])
