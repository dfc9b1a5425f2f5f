"""Majority-rule consensus (seqdist.trees.consensus) and support on trees."""

from __future__ import annotations

import numpy as np
import pytest

from seqdist import DistanceMatrix, InputError
from seqdist.trees import build_tree, read_newick
from seqdist.trees.compare import splits
from seqdist.trees.consensus import compatible, consensus_from_counts, majority_consensus, set_support

TAXA = [f"t{k}" for k in range(9)]


def noisy_nj_trees(seed: int, count: int, noise: float) -> list:
    """NJ trees of one random additive matrix plus independent noise (seeded).

    The trees share their well-separated splits and differ on the short
    branches: a realistic mix of frequent and rare splits.
    """
    rng = np.random.default_rng(seed)
    n = len(TAXA)
    X = rng.normal(size=(n, 3))
    D = np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1))
    out = []
    for _ in range(count):
        E = rng.normal(scale=noise, size=(n, n))
        E = np.abs(D + (E + E.T) / 2)
        np.fill_diagonal(E, 0.0)
        out.append(build_tree(DistanceMatrix.from_array(E, TAXA), "nj"))
    return out


def leaf_sides(tree, taxa):
    """{frozenset of the side without taxa[0]: node} for the non-trivial splits of our tree."""
    out = {}
    for node in tree.preorder():
        if node is tree.root or node.is_leaf:
            continue
        side = frozenset(leaf.name for leaf in _leaves(node))
        if taxa[0] in side:
            side = frozenset(taxa) - side
        if 2 <= len(side) <= len(taxa) - 2:
            out[side] = node
    return out


def _leaves(node):
    stack, out = [node], []
    while stack:
        x = stack.pop()
        if not x.children:
            out.append(x)
        stack.extend(x.children)
    return out


def dendropy_consensus(trees, min_freq):
    """dendropy's majority-rule consensus: {side without taxa[0]: (support fraction, mean length)}."""
    import dendropy

    tns = dendropy.TaxonNamespace()
    tl = dendropy.TreeList(taxon_namespace=tns)
    for t in trees:
        tl.append(dendropy.Tree.get(data="[&U] " + t.to_newick(), schema="newick", taxon_namespace=tns,
                                    preserve_underscores=True, rooting="force-unrooted"))
    con = tl.consensus(min_freq=min_freq, set_edge_lengths="mean-length")
    out = {}
    for nd in con.postorder_node_iter():
        if nd.parent_node is None or nd.is_leaf():
            continue
        side = frozenset(leaf.taxon.label for leaf in nd.leaf_iter())
        if TAXA[0] in side:
            side = frozenset(TAXA) - side
        if 2 <= len(side) <= len(TAXA) - 2:
            out[side] = (nd.support, nd.edge.length)
    return out


@pytest.mark.parametrize("seed, noise", [(1, 0.05), (2, 0.15), (3, 0.3), (4, 0.6)])
def test_majority_consensus_matches_dendropy(seed, noise):
    # Outside reference: dendropy's TreeList.consensus (min_freq=0.5), the majority-rule
    # consensus of Margush & McMorris 1981 ("Consensus n-trees", Bull. Math. Biol. 43:239-244).
    # An odd number of trees, so no split sits at exactly one half (dendropy keeps freq >= min_freq).
    trees = noisy_nj_trees(seed, 15, noise)
    ours = majority_consensus(trees)
    mine = leaf_sides(ours, TAXA)
    ref = dendropy_consensus(trees, 0.5)
    assert set(mine) == set(ref)
    for side, node in mine.items():
        assert node.support == pytest.approx(100 * ref[side][0], abs=1e-9)
        assert node.length == pytest.approx(ref[side][1], rel=1e-9, abs=1e-12)
    assert 0 < len(mine)
    assert sorted(ours.labels()) == TAXA and not ours.rooted


def test_majority_consensus_counts_by_hand():
    # Three trees on a..e (worked by hand, common practice): {a,b} is in 2 of 3, {d,e} in 2 of 3,
    # {c,d,e} = the other side of {a,b}; {a,c}, {c,e} once each (not kept).
    ts = [read_newick(t) for t in ("((a,b),c,(d,e));", "((a,b),d,(c,e));", "((a,c),b,(d,e));")]
    con = majority_consensus(ts)
    sides = {tuple(sorted(s)): n.support for s, n in leaf_sides(con, list("abcde")).items()}
    assert sides == {("d", "e"): pytest.approx(200 / 3), ("c", "d", "e"): pytest.approx(200 / 3)}
    assert con.to_newick() == "(a,b,(c,(d,e)66.6667)66.6667);\n"
    # strict consensus (threshold 1): nothing is in all three
    assert majority_consensus(ts, threshold=1.0).to_newick() == "(a,b,c,d,e);\n"


def test_extended_majority_is_a_maximal_compatible_superset():
    trees = noisy_nj_trees(5, 9, 0.5)
    n = len(TAXA)
    counts: dict = {}
    for t in trees:
        for m in splits(t, TAXA):
            if 2 <= m.bit_count() <= n - 2:
                counts[m] = counts.get(m, 0) + 1
    plain = set(splits(majority_consensus(trees), TAXA))
    ext_tree = majority_consensus(trees, extended=True)
    ext = {m for m in splits(ext_tree, TAXA) if 2 <= m.bit_count() <= n - 2}
    assert plain & ext == {m for m in plain if 2 <= m.bit_count() <= n - 2}  # majority splits kept
    assert all(compatible(a, b) for a in ext for b in ext)
    # maximal: every split left out conflicts with a taken one at least as frequent
    for m, c in counts.items():
        if m not in ext:
            assert any(not compatible(m, x) and counts[x] >= c for x in ext)
    assert len(ext) > len(plain & ext)  # the example does add splits (else the test shows nothing)
    # every taken split has its frequency as support
    for s, node in leaf_sides(ext_tree, TAXA).items():
        m = sum(1 << TAXA.index(x) for x in s)
        assert node.support == pytest.approx(100 * counts[m] / len(trees))


def test_consensus_is_deterministic_and_order_free():
    # common practice: a consensus does not depend on the order of the trees
    trees = noisy_nj_trees(6, 11, 0.3)
    a = majority_consensus(trees)
    b = majority_consensus(list(reversed(trees)))
    assert a.to_newick(lengths=False) == b.to_newick(lengths=False)  # same splits, supports, order
    assert a.to_newick() == majority_consensus(trees).to_newick()  # byte-identical reruns


def test_consensus_bad_input():
    t1, t2 = read_newick("((a,b),c,(d,e));"), read_newick("((a,b),c,(d,f));")
    with pytest.raises(InputError, match="tree 2 has other leaves"):
        majority_consensus([t1, t2])
    with pytest.raises(InputError, match="threshold must be in"):
        majority_consensus([t1], threshold=0.4)
    with pytest.raises(InputError, match="no trees"):
        majority_consensus([])
    with pytest.raises(InputError, match="at least 3 taxa"):
        consensus_from_counts({}, 1, ["a", "b"])


def test_set_support_ignores_other_taxa_and_trivial_splits():
    # common practice: a split is named by the compared taxa only
    t = read_newick("((a,b),(c,x),(d,e));")
    k = set_support(t, {0b11000: 0.75, 0b00100: 1.0}, list("abcde"))
    nodes = {tuple(sorted(leaf.name for leaf in _leaves(c))): c.support for c in t.root.children}
    assert nodes == {("a", "b"): 0.0, ("c", "x"): None, ("d", "e"): 75.0}
    assert k == 2


def test_support_follows_its_branch_when_rooted_for_drawing():
    # common practice: support belongs to a branch (a split), so re-rooting must move it with the branch
    from seqdist.trees import rooted_for_drawing

    t = read_newick("(a:1,(b:1,(c:1,(d:1,e:1)60:1)70:1)80:1,f:1);")
    before = {s: n.support for s, n in leaf_sides(t, list("abcdef")).items()}
    for out in "abcdef":
        r = rooted_for_drawing(t, out)
        after = {s: n.support for s, n in leaf_sides(r, list("abcdef")).items()}
        assert {s: v for s, v in after.items() if v is not None} == before, out
