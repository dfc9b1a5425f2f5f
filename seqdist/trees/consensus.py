"""Majority-rule consensus of trees on the same taxa, and support on a tree.

Majority-rule consensus (Margush & McMorris 1981, "Consensus n-trees",
Bull. Math. Biol. 43:239-244)
    The tree of the splits found in more than half of the trees (more than
    ``threshold`` of them, ``threshold`` in [0.5, 1]; with 1, the splits
    found in every tree: the strict consensus). Any two such splits share
    a tree, so they are compatible and make one tree. Trees are compared
    unrooted, as in :mod:`seqdist.trees.compare` (a split is the bitset of
    the side without the first taxon in sorted order); the consensus is
    unrooted, drawn from a multifurcation.
Extended majority rule (``extended=True``; common practice)
    After the majority splits, the other splits are added one at a time,
    most frequent first, when compatible with every split already taken
    (ties: fewer taxa on the bitset side first, then the smaller bitset), so
    the tree is as resolved as the trees allow.
Support and lengths
    Every internal node's ``support`` is its split's frequency among the
    trees, in percent (0-100; common practice for bootstrap consensus). A
    branch's length is the mean of that split's lengths in the trees that
    hold it (``None`` when no tree gives lengths); leaf branches likewise.
"""

from __future__ import annotations

from typing import Sequence

from seqdist.core.errors import InputError
from seqdist.core.tree import Node, Tree, order_children
from seqdist.trees.compare import splits

__all__ = ["split_counts", "majority_consensus", "consensus_from_counts", "compatible", "set_support"]


def compatible(a: int, b: int) -> bool:
    """Whether two splits (bitsets of the side without the first taxon) can sit in one tree.

    Both sides leave out taxon 0, so they are compatible exactly when one
    holds the other or they are disjoint.

    Examples
    --------
    >>> compatible(0b0110, 0b0010), compatible(0b0110, 0b1000), compatible(0b0110, 0b1100)
    (True, True, False)
    """
    c = a & b
    return c == 0 or c == a or c == b


def split_counts(trees: Sequence[Tree], taxa: Sequence[str] | None = None
                 ) -> tuple[dict[int, int], dict[int, float], dict[int, int], list[str]]:
    """How many trees hold each split, and the sum of its lengths.

    Parameters
    ----------
    trees : sequence of Tree
        Trees on the same leaf labels.
    taxa : sequence of str, optional
        Bit order (default: the labels sorted).

    Returns
    -------
    (counts, length_sums, length_counts, taxa)
        Every split (trivial ones included) -> number of trees holding it;
        -> sum of its lengths over the trees that give one; -> how many gave one.

    Examples
    --------
    >>> from seqdist.io.newick import read_newick
    >>> ts = [read_newick(t) for t in ("((a,b),c,(d,e));", "((a,b),d,(c,e));", "((a,c),b,(d,e));")]
    >>> counts, _, _, taxa = split_counts(ts)
    >>> counts[0b11000], counts[0b11100]  # {d, e}, {c, d, e}
    (2, 2)
    """
    trees = list(trees)
    if not trees:
        raise InputError("no trees to count splits in")
    first = trees[0].check_labels()
    taxa = sorted(first) if taxa is None else list(taxa)
    want = set(taxa)
    counts: dict[int, int] = {}
    sums: dict[int, float] = {}
    given: dict[int, int] = {}
    for k, t in enumerate(trees):
        labs = set(t.check_labels(f"tree {k + 1}"))
        if labs != want:
            extra, missing = sorted(labs - want), sorted(want - labs)
            raise InputError(f"tree {k + 1} has other leaves than the first ("
                             + "; ".join(([f"not in the first: {', '.join(extra[:5])}"] if extra else [])
                                         + ([f"missing: {', '.join(missing[:5])}"] if missing else [])) + ")")
        has_lengths = any(node.length is not None for node in t.branches())
        for m, length in splits(t, taxa).items():
            counts[m] = counts.get(m, 0) + 1
            if has_lengths:  # a tree without lengths does not pull the means to 0
                sums[m] = sums.get(m, 0.0) + length
                given[m] = given.get(m, 0) + 1
    return counts, sums, given, taxa


def majority_consensus(trees: Sequence[Tree], threshold: float = 0.5, *, extended: bool = False) -> Tree:
    """The majority-rule consensus tree (Margush & McMorris 1981; see module docs).

    Parameters
    ----------
    trees : sequence of Tree
        Trees on the same leaf labels (rooted or not; compared unrooted).
    threshold : float
        Keep the splits in more than this fraction of the trees; in [0.5, 1]
        (1: the splits in every tree).
    extended : bool
        Then add the compatible less frequent splits, most frequent first.

    Returns
    -------
    Tree
        Unrooted; internal nodes carry the split frequency in percent as
        ``support``, branches the mean length.

    Examples
    --------
    >>> from seqdist.io.newick import read_newick
    >>> ts = [read_newick(t) for t in ("((a,b),c,(d,e));", "((a,b),d,(c,e));", "((a,c),b,(d,e));")]
    >>> majority_consensus(ts).to_newick()
    '(a,b,(c,(d,e)66.6667)66.6667);\\n'
    """
    counts, sums, given, taxa = split_counts(trees)
    lengths = {m: sums[m] / given[m] for m in sums}
    return consensus_from_counts(counts, len(list(trees)), taxa, threshold, extended=extended,
                                 lengths=lengths or None)


def consensus_from_counts(counts: dict[int, int], n_trees: int, taxa: Sequence[str], threshold: float = 0.5, *,
                          extended: bool = False, lengths: dict[int, float] | None = None) -> Tree:
    """The majority-rule consensus from split counts (see :func:`majority_consensus`).

    Parameters
    ----------
    counts : dict
        Split bitset (bit k = ``taxa[k]``, side without ``taxa[0]``) -> the
        number of trees holding it; trivial splits may be present or not.
    n_trees : int
        The number of trees counted.
    taxa : sequence of str
    threshold, extended
        As for :func:`majority_consensus`.
    lengths : dict, optional
        Split bitset -> branch length (trivial splits give the leaf branches).

    Examples
    --------
    >>> consensus_from_counts({0b1100: 3, 0b0110: 1}, 4, list("abcd")).to_newick()
    '(a,b,(c,d)75);\\n'
    """
    taxa = list(taxa)
    n = len(taxa)
    if n < 3:
        raise InputError(f"a consensus tree needs at least 3 taxa, got {n}")
    if not 0.5 <= threshold <= 1.0:
        raise InputError(f"the consensus threshold must be in [0.5, 1], got {threshold!r}")
    if n_trees < 1:
        raise InputError("no trees to build a consensus from")
    full = (1 << n) - 1

    def nontrivial(m):
        return not m & 1 and 2 <= m.bit_count() <= n - 2 and m & full == m

    cands = sorted((m for m, c in counts.items() if c > 0 and nontrivial(m)),
                   key=lambda m: (-counts[m], m.bit_count(), m))
    if threshold >= 1.0:
        chosen = [m for m in cands if counts[m] >= n_trees]
    else:
        chosen = [m for m in cands if counts[m] > threshold * n_trees]
    if extended:
        taken = set(chosen)
        for m in cands:
            if m not in taken and all(compatible(m, c) for c in chosen):
                chosen.append(m)
                taken.add(m)
    lengths = lengths or {}

    # Build the hierarchy: larger sides first; all leaves of a side hang below
    # one node so far (the sides are nested or disjoint), which becomes its parent.
    root = Node()
    leaf_nodes = [Node(lab, lengths.get(full ^ 1 if k == 0 else 1 << k)) for k, lab in enumerate(taxa)]
    where = [root] * n
    for m in sorted(chosen, key=lambda m: (-m.bit_count(), m)):
        bits = [k for k in range(1, n) if m >> k & 1]
        node = where[bits[0]].add_child(Node(length=lengths.get(m), support=100.0 * counts[m] / n_trees))
        for k in bits:
            where[k] = node
    for k in range(n):
        where[k].add_child(leaf_nodes[k])
    tree = Tree(root, rooted=False, method="majority-rule consensus")
    order_children(tree, {lab: k for k, lab in enumerate(taxa)})  # deterministic text
    return tree


def set_support(tree: Tree, frequency: dict[int, float], taxa: Sequence[str]) -> int:
    """Write split frequencies on a tree's internal nodes (in place), in percent.

    Parameters
    ----------
    tree : Tree
        Its leaves may include taxa not in ``taxa`` (they are ignored).
    frequency : dict
        Split bitset over ``taxa`` (side without ``taxa[0]``) -> fraction of
        trees holding it; a split absent from it gets 0.
    taxa : sequence of str

    Returns
    -------
    int
        The number of nodes given a support; a node whose split is trivial
        on ``taxa`` gets none (``None``).

    Examples
    --------
    >>> from seqdist.io.newick import read_newick
    >>> t = read_newick("((a,b),c,(d,e));")
    >>> set_support(t, {0b11000: 0.9}, list("abcde")), t.to_newick()
    (2, '((a,b)0,c,(d,e)90);\\n')
    """
    taxa = list(taxa)
    pos = {lab: k for k, lab in enumerate(taxa)}
    n = len(taxa)
    full = (1 << n) - 1
    below: dict[int, int] = {}
    done = 0
    for node in tree.postorder():
        if node.is_leaf:
            m = 1 << pos[node.name] if node.name in pos else 0
        else:
            m = 0
            for c in node.children:
                m |= below.pop(id(c))
        below[id(node)] = m
        if node.is_leaf:
            continue
        side = m ^ full if m & 1 else m
        if node is not tree.root and 2 <= side.bit_count() <= n - 2:
            node.support = 100.0 * frequency.get(side, 0.0)
            done += 1
        else:
            node.support = None
    return done
