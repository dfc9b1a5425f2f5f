"""Comparing trees on the same taxa, and a tree with its matrix.

Splits
    Every branch of a tree cuts the taxa into two sides: a split
    (bipartition). Trees are compared unrooted: a split is stored as the
    bitset (a Python int, bit ``k`` for taxon ``k`` of a shared order) of the
    side *not* containing the reference taxon (the first in the order, by
    default the first label in sorted order). The two branches below a
    bifurcating root give the same split; their lengths are added (the
    unrooted tree has one branch there). A split is trivial when one side
    holds a single taxon (a leaf's own branch).
Robinson-Foulds distance (Robinson & Foulds 1981, "Comparison of
phylogenetic trees", Math. Biosci. 53:131-147)
    The number of non-trivial splits found in one tree and not the other,
    summed over both trees (one nearest-neighbour interchange gives 2);
    normalised by its largest value for binary trees, ``2 (n - 3)``.
Branch score distance (Kuhner & Felsenstein 1994, "A simulation comparison
of phylogeny algorithms under equal and unequal evolutionary rates", Mol.
Biol. Evol. 11:459-468)
    ``sqrt(sum over all splits, trivial ones included, of (b1 - b2)^2)``,
    where a split missing from a tree has length 0 there. dendropy's
    ``euclidean_distance`` computes the same on unrooted trees.
Cophenetic correlation (Sokal & Rohlf 1962, "The comparison of dendrograms
by objective methods", Taxon 11:33-40)
    Pearson's correlation, over all pairs of taxa, between the tree's path
    lengths and the matrix entries.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Iterable, Sequence

import numpy as np

from seqdist.core.errors import InputError
from seqdist.core.tree import Tree

if TYPE_CHECKING:  # only for the annotations
    from seqdist.core.matrix import DistanceMatrix

__all__ = ["common_taxa", "splits", "nontrivial", "split_labels", "sorted_splits", "robinson_foulds", "branch_score",
           "branch_score_splits", "cophenetic_correlation", "compare_trees"]


def common_taxa(t1: Tree, t2: Tree, names: tuple[str, str] = ("first tree", "second tree")) -> list[str]:
    """The shared leaf labels in sorted order; :class:`InputError` when the sets differ."""
    a, b = set(t1.check_labels()), set(t2.check_labels())
    if a != b:
        only_a, only_b = sorted(a - b), sorted(b - a)
        parts = []
        if only_a:
            parts.append(f"only in the {names[0]}: {', '.join(only_a[:5])}{' ...' if len(only_a) > 5 else ''}")
        if only_b:
            parts.append(f"only in the {names[1]}: {', '.join(only_b[:5])}{' ...' if len(only_b) > 5 else ''}")
        raise InputError("the trees have different leaves (" + "; ".join(parts) + ")")
    return sorted(a)


def splits(tree: Tree, taxa: Sequence[str] | None = None) -> dict[int, float]:
    """Every split of ``tree`` as ``{bitset: branch length}``.

    Parameters
    ----------
    tree : Tree
    taxa : sequence of str, optional
        The bit order (default: the leaf labels sorted); ``taxa[0]`` is
        the reference taxon whose side is left out.

    Returns
    -------
    dict
        Bitset (bit k = taxa[k]) of the side without the reference taxon,
        mapped to the branch length (missing lengths count as 0). Trivial
        splits are included.

    Examples
    --------
    >>> from seqdist.trees import read_newick
    >>> s = splits(read_newick("((a:1,b:2):0.5,c:1,d:1);"))
    >>> s[0b1100]  # {c, d} | {a, b}
    0.5
    """
    labels = tree.check_labels()
    taxa = sorted(labels) if taxa is None else list(taxa)
    pos = {lab: k for k, lab in enumerate(taxa)}
    if set(pos) != set(labels):
        raise InputError("tree leaves and the requested taxa differ")
    full = (1 << len(taxa)) - 1
    below: dict[int, int] = {}
    out: dict[int, float] = {}
    for node in tree.postorder():
        if node.is_leaf:
            mask = 1 << pos[node.name]
        else:
            mask = 0
            for c in node.children:
                mask |= below.pop(id(c))
        below[id(node)] = mask
        if node is tree.root:
            continue
        if mask & 1:
            mask ^= full
        if mask == 0:
            continue  # a branch above all leaves (e.g. a unifurcating root)
        out[mask] = out.get(mask, 0.0) + float(node.length or 0.0)
    return out


def nontrivial(split_map: dict[int, float], n: int) -> set[int]:
    """The splits with at least two taxa on each side."""
    return {m for m in split_map if 2 <= m.bit_count() <= n - 2}


def split_labels(mask: int, taxa: Sequence[str]) -> list[str]:
    """The labels of a bitset, sorted.

    Examples
    --------
    >>> split_labels(0b110, ["a", "b", "c"])
    ['b', 'c']
    """
    bits = bin(mask)[:1:-1]
    return sorted(taxa[k] for k, c in enumerate(bits) if c == "1")


def sorted_splits(masks: Iterable[int], taxa: Sequence[str]) -> list[list[str]]:
    """Splits as label lists, sorted by size then labels (deterministic)."""
    return sorted((split_labels(m, taxa) for m in masks), key=lambda s: (len(s), s))


def robinson_foulds(t1: Tree, t2: Tree) -> int:
    """Robinson-Foulds distance on unrooted trees (see module docs).

    Examples
    --------
    >>> from seqdist.trees import read_newick
    >>> robinson_foulds(read_newick("((a,b),c,(d,e));"), read_newick("((a,c),b,(d,e));"))
    2
    """
    taxa = common_taxa(t1, t2)
    n = len(taxa)
    s1, s2 = nontrivial(splits(t1, taxa), n), nontrivial(splits(t2, taxa), n)
    return len(s1 ^ s2)


def branch_score(t1: Tree, t2: Tree) -> float:
    """Branch score distance of Kuhner & Felsenstein 1994 (see module docs).

    Examples
    --------
    >>> from seqdist.trees import read_newick
    >>> branch_score(read_newick("((a:1,b:1):1,c:1,d:1);"), read_newick("((a:1,b:1):2,c:1,d:1);"))
    1.0
    """
    taxa = common_taxa(t1, t2)
    return branch_score_splits(splits(t1, taxa), splits(t2, taxa))


def branch_score_splits(s1: dict[int, float], s2: dict[int, float]) -> float:
    keys = sorted(set(s1) | set(s2))
    diffs = np.array([s1.get(k, 0.0) - s2.get(k, 0.0) for k in keys])
    return float(math.sqrt(float(np.dot(diffs, diffs)))) if keys else 0.0


def cophenetic_correlation(tree: Tree, dm: DistanceMatrix) -> float | None:
    """Pearson correlation between the tree's path lengths and the matrix
    (over all pairs; Sokal & Rohlf 1962). ``None`` when either is constant.

    The pairs are visited where their two leaves meet in the tree, a block at a
    time, in two passes (sums, then centred sums): memory stays O(n) plus one
    block, where the whole path-length matrix and its pairs took several times
    the matrix at tens of thousands of taxa.

    Examples
    --------
    >>> from seqdist import DistanceMatrix
    >>> from seqdist.trees import build_tree
    >>> dm = DistanceMatrix.from_array([[0, 3, 4, 6], [3, 0, 5, 7], [4, 5, 0, 4], [6, 7, 4, 0]], list("abcd"))
    >>> round(cophenetic_correlation(build_tree(dm), dm), 6)
    1.0
    """
    labels = tree.check_labels()
    pos = {lab: i for i, lab in enumerate(dm.labels)}
    if len(pos) != len(labels) or any(lab not in pos for lab in labels):
        raise InputError("tree leaves and the requested taxa differ")
    n = dm.n
    if n < 3:  # fewer than two pairs
        return None
    D = dm.values
    limit = 1 << 22  # entries per block: memory stays O(n) plus one block, not several n x n arrays

    def blocks():
        # each pair's path length formed where its two leaves meet, a block of rows at a time
        below = {}
        for node in tree.postorder():
            if node.is_leaf:
                below[id(node)] = (np.array([pos[node.name]], dtype=np.intp), np.zeros(1))
                continue
            parts = []
            for c in node.children:
                ci, cd = below.pop(id(c))
                cd = cd + (c.length or 0.0)
                for pi, pd in parts:
                    step = max(1, limit // len(ci))
                    for r in range(0, len(pi), step):
                        yield (pd[r:r + step, None] + cd[None, :],
                               D[pi[r:r + step, None], ci[None, :]].astype(np.float64, copy=False))
                parts.append((ci, cd))
            below[id(node)] = (np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts]))

    pairs = n * (n - 1) / 2
    sx = sy = 0.0
    xmin = ymin = np.inf
    xmax = ymax = -np.inf
    for x, y in blocks():
        sx += float(x.sum())
        sy += float(y.sum())
        xmin, xmax = min(xmin, float(x.min())), max(xmax, float(x.max()))
        ymin, ymax = min(ymin, float(y.min())), max(ymax, float(y.max()))
    if xmax == xmin or ymax == ymin:
        return None
    mx, my = sx / pairs, sy / pairs
    sxx = syy = sxy = 0.0
    for x, y in blocks():  # centred sums in a second pass (no cancellation)
        x -= mx
        y = y - my
        sxx += float(np.einsum("ij,ij->", x, x))
        syy += float(np.einsum("ij,ij->", y, y))
        sxy += float(np.einsum("ij,ij->", x, y))
    return float(np.clip(sxy / np.sqrt(sxx * syy), -1.0, 1.0))


def compare_trees(t1: Tree, t2: Tree, names: tuple[str, str] = ("first tree", "second tree")) -> dict:
    """All comparison measures of two trees on the same taxa.

    Returns
    -------
    dict
        ``rf``, ``rf_normalized``, ``branch_score``, ``splits_only_1``,
        ``splits_only_2`` (label lists), ``shared_splits`` (count of
        non-trivial splits in both), ``n``.

    Examples
    --------
    >>> from seqdist.trees import read_newick
    >>> r = compare_trees(read_newick("((a,b),c,(d,e));"), read_newick("((a,c),b,(d,e));"))
    >>> r["rf"], r["splits_only_1"], r["splits_only_2"]
    (2, [['c', 'd', 'e']], [['b', 'd', 'e']])
    """
    taxa = common_taxa(t1, t2, names)
    n = len(taxa)
    m1, m2 = splits(t1, taxa), splits(t2, taxa)
    s1, s2 = nontrivial(m1, n), nontrivial(m2, n)
    rf = len(s1 ^ s2)
    return {
        "n": n,
        "rf": rf,
        "rf_normalized": rf / (2.0 * (n - 3)) if n > 3 else 0.0,
        "branch_score": branch_score_splits(m1, m2),
        "shared_splits": len(s1 & s2),
        "splits_only_1": sorted_splits(s1 - s2, taxa),
        "splits_only_2": sorted_splits(s2 - s1, taxa),
    }
