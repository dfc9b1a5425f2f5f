"""Distance tree builders: neighbor joining, BIONJ and UPGMA.

* Neighbor joining (Saitou & Nei 1987, "The neighbor-joining method: a new
  method for reconstructing phylogenetic trees", Mol. Biol. Evol. 4:406-425)
  in the form of Studier & Keppler 1988 ("A note on the neighbor-joining
  algorithm of Saitou and Nei", Mol. Biol. Evol. 5:729-731): with ``r``
  active clusters and row sums ``R_i``, join the pair minimising
  ``Q(i, j) = (r - 2) d(i, j) - R_i - R_j``; branch lengths
  ``l_i = d(i, j) / 2 + (R_i - R_j) / (2 (r - 2))``, ``l_j = d(i, j) - l_i``;
  new distances ``d(u, k) = (d(i, k) + d(j, k) - d(i, j)) / 2``.
* BIONJ (Gascuel 1997, "BIONJ: an improved version of the NJ algorithm
  based on a simple model of sequence data", Mol. Biol. Evol. 14:685-695):
  the same pair choice and branch lengths; the new distances are
  ``d(u, k) = lam (d(i, k) - l_i) + (1 - lam) (d(j, k) - l_j)`` with the
  variance matrix ``V`` (initially ``D``) updated as
  ``V(u, k) = lam V(i, k) + (1 - lam) V(j, k) - lam (1 - lam) V(i, j)``
  and ``lam = 1/2 + sum_k (V(j, k) - V(i, k)) / (2 (r - 2) V(i, j))``
  (clipped to [0, 1]; 1/2 when ``V(i, j) = 0``).
* UPGMA (Sokal & Michener 1958): join the closest pair; the new cluster's
  distance to ``k`` is the size-weighted mean
  ``(n_i d(i, k) + n_j d(j, k)) / (n_i + n_j)`` (scipy's ``average``
  linkage); the node sits at height ``d(i, j) / 2``.

Ties are broken deterministically: every cluster carries a key, the
smallest input position (label order of the matrix) among its leaves; among
pairs with exactly equal criterion the pair with the smallest
``(min key, max key)`` wins. ("Exactly equal" means equal as computed in floating point.)
One systematic tie is handled explicitly: with four clusters left,
``Q(i, j) = Q(k, l)`` for the complementary pair in exact arithmetic, and
both choices give the same split; the pair with the smaller keys is joined,
so rounding noise never decides (this matters for BIONJ, whose lengths
depend on which pair is joined first).

Implementation: one compiled kernel per method. Neighbor joining and BIONJ
read the matrix (float64 or float32, never written to) into a working copy
of its lower triangle, packed row after row in float64, and keep the active
clusters in the first ``r`` slots (the merged cluster takes the lower slot,
the last active slot moves into the freed one); UPGMA works in place on a
full copy and leaves clusters in their slots (a joined cluster's slot is
marked dead and the live ones are packed together when half are dead), so
each join writes one column instead of three; the joins are the same.
Neighbor joining keeps the row sums up to date incrementally (``O(r)`` per
join, refreshed exactly every 64 joins against rounding drift). To find the
best pair it keeps, for each row, lower bounds of its distances (float32,
rounded down) in increasing order (each pair once: two leaves in the row of
the later one, else in the row of the younger cluster; distances between
surviving clusters never change, so the order stays valid) and stops
scanning a row as soon as the bound ``c d - (R_a + max R)``, which never
exceeds ``Q`` for any later entry, passes the best value found so far; an
entry whose bound of ``Q`` does not pass it has its ``Q`` computed from the
exact distance. This row-sorting idea is the one of Simonsen, Mailund &
Pedersen 2008 ("Rapid neighbour-joining", WABI 2008, LNCS 5251:113-122).
Entries of joined clusters are skipped, and dropped whenever the number of
clusters has halved or their arena is full. The bounds are exact (IEEE
rounding is monotone), so the choice is the same as a scan of every pair
(``search="full"``, kept as a reference and tested to agree step for step).
Worst case ``O(n^3)`` time (a matrix where no row can be cut short); memory
beside the input: half a float64 ``n x n`` matrix for the packed distances,
half for the sorted rows (a float32 bound and a 32-bit id per pair, plus
1/32 room) and half more for BIONJ's variances.
UPGMA caches each row's nearest neighbour (a cached minimum only needs a
rescan when its partner was just merged), close to ``O(n^2)`` in practice.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from seqdist.core.errors import InputError
from seqdist.core.matrix import DistanceMatrix
from seqdist.core.tree import Node, Tree

__all__ = ["check_matrix", "nj_q_matrix", "neighbor_joining", "bionj", "upgma", "build_tree", "TreeMethod",
           "REGISTRY", "METHODS"]


def check_matrix(dm: DistanceMatrix, source: str | None = None, hint: str = "") -> None:
    """Raise :class:`InputError` when a matrix cannot give a tree.

    Missing entries (the builders need every distance) and fewer than 3
    taxa are refused, with a hint on what to do.
    """
    where = f"{source}: " if source else ""
    if dm.n < 3:
        raise InputError(f"{where}a tree needs at least 3 taxa; this matrix has {dm.n}")
    if dm.has_missing:
        i, j = np.argwhere(np.isnan(dm.values))[0]
        k = dm.missing_count()
        raise InputError(f"{where}{k} missing entr{'y' if k == 1 else 'ies'} (first: {dm.labels[i]}, "
                         f"{dm.labels[j]}); tree building needs every distance: fill them first with "
                         "'seqdist repair' (which fills missing entries; the result is altered data)" + hint)


def nj_q_matrix(dm: DistanceMatrix) -> np.ndarray:
    """The first-step neighbor-joining criterion
    ``Q(i, j) = (n - 2) d(i, j) - R_i - R_j`` (Studier & Keppler 1988), with
    NaN on the diagonal; useful for checking against worked examples.

    Examples
    --------
    >>> dm = DistanceMatrix.from_array([[0, 3, 4], [3, 0, 5], [4, 5, 0]], list("abc"))
    >>> float(nj_q_matrix(dm)[0, 1])
    -12.0
    """
    D = np.asarray(dm.values, dtype=np.float64)
    R = D.sum(axis=1)
    Q = (dm.n - 2) * D - R[:, None] - R[None, :]
    np.fill_diagonal(Q, np.nan)
    return Q


def _assemble(dm: DistanceMatrix, kids: np.ndarray, lens: np.ndarray, top: list, top_lens: list,
              rooted: bool, method: str) -> Tree:
    """Build the Node tree from the kernel's join list (children ordered by
    their smallest leaf position, so the text is canonical)."""
    n = dm.n
    nodes: list[Node] = [Node(lab) for lab in dm.labels]
    first = list(range(n))  # smallest leaf position below each node id
    for step in range(kids.shape[0]):
        a, b = int(kids[step, 0]), int(kids[step, 1])
        na, nb = nodes[a], nodes[b]
        na.length, nb.length = float(lens[step, 0]) + 0.0, float(lens[step, 1]) + 0.0
        pair = sorted([(first[a], na), (first[b], nb)], key=lambda t: t[0])
        nodes.append(Node(children=[p[1] for p in pair]))
        first.append(pair[0][0])
    root = Node()
    for f, node_id, length in sorted((first[t], t, ln) for t, ln in zip(top, top_lens)):
        child = nodes[node_id]
        if length is not None:
            child.length = float(length) + 0.0  # + 0.0 turns -0.0 into 0.0
        root.add_child(child)
    return Tree(root, rooted=rooted, method=method)


def neighbor_joining(dm: DistanceMatrix, *, bionj: bool = False, clamp_negative: bool = False,
                     search: str = "sorted") -> Tree:
    """Neighbor joining (Saitou & Nei 1987; Studier & Keppler 1988 form), or
    BIONJ (Gascuel 1997) with ``bionj=True``.

    Parameters
    ----------
    dm : DistanceMatrix
        Complete (no missing entries), at least 3 taxa.
    bionj : bool
        Use BIONJ's variance-weighted reduction.
    clamp_negative : bool
        Set negative branch lengths to zero afterwards (off by default;
        the count is kept in ``tree.clamped``).
    search : {"sorted", "full"}
        How the best pair is found (module docs): rows kept sorted with an
        early stop (default, much faster on most data) or a scan of every
        pair. Both pick the same pair at every step.

    Returns
    -------
    Tree
        Unrooted; the root is the trifurcation where the algorithm stopped.

    Examples
    --------
    >>> dm = DistanceMatrix.from_array([[0, 5, 9, 9, 8], [5, 0, 10, 10, 9], [9, 10, 0, 8, 7],
    ...                                 [9, 10, 8, 0, 3], [8, 9, 7, 3, 0]], list("abcde"))
    >>> neighbor_joining(dm).to_newick()
    '(((a:2.0,b:3.0):3.0,c:4.0):2.0,d:2.0,e:1.0);\\n'
    """
    check_matrix(dm)
    if search not in ("sorted", "full"):
        raise InputError(f"unknown search '{search}' (choose sorted or full)")
    from seqdist.kernels.tree_building import nj_kernel

    # the kernel reads the values (float64 or float32) without writing to them or copying them whole
    kids, lens, last3, len3 = nj_kernel(dm.values, bool(bionj), search == "sorted")
    method = "bionj" if bionj else "nj"
    t = _assemble(dm, kids, lens, [int(x) for x in last3], [float(x) for x in len3], False, method)
    if clamp_negative:
        t.clamp_negative()
    return t


def bionj(dm: DistanceMatrix, *, clamp_negative: bool = False) -> Tree:
    """BIONJ (Gascuel 1997); see :func:`neighbor_joining`.

    Examples
    --------
    >>> dm = DistanceMatrix.from_array([[0, 3, 4], [3, 0, 5], [4, 5, 0]], list("abc"))
    >>> bionj(dm).to_newick()
    '(a:1.0,b:2.0,c:3.0);\\n'
    """
    return neighbor_joining(dm, bionj=True, clamp_negative=clamp_negative)


def upgma(dm: DistanceMatrix) -> Tree:
    """UPGMA (unweighted average linkage; Sokal & Michener 1958), rooted.

    Node heights are half the joining distance; each branch is the height
    difference, never negative (average linkage is monotone). This is
    scipy's ``linkage(..., method='average')``; Biopython's ``upgma``
    computes the weighted variant (WPGMA).

    Examples
    --------
    >>> dm = DistanceMatrix.from_array([[0, 2, 6], [2, 0, 6], [6, 6, 0]], list("abc"))
    >>> upgma(dm).to_newick()
    '((a:1.0,b:1.0):2.0,c:3.0);\\n'
    """
    check_matrix(dm)
    from seqdist.kernels.tree_building import upgma_kernel

    D = np.array(dm.values, dtype=np.float64, order="C")
    kids, hts = upgma_kernel(D)
    n = dm.n
    height = np.zeros(2 * n - 1)
    height[n:] = hts
    lens = np.empty((n - 2, 2))
    for step in range(n - 2):
        for c in range(2):
            lens[step, c] = hts[step] - height[kids[step, c]]
    top = [int(kids[-1, 0]), int(kids[-1, 1])]
    top_lens = [float(hts[-1] - height[t]) for t in top]
    return _assemble(dm, kids[:-1], lens, top, top_lens, True, "upgma")


@dataclass(frozen=True)
class TreeMethod:
    """One tree-building method: its name, what it is, and its builder ``(dm, clamp_negative) -> Tree``."""

    name: str
    description: str
    build: Callable


def _upgma(dm: DistanceMatrix, clamp_negative: bool = False) -> Tree:
    t = upgma(dm)
    if clamp_negative:
        t.clamp_negative()
    return t


#: The tree methods, read by :func:`build_tree`, the command line's ``--method`` choices and the tests.
REGISTRY = {m.name: m for m in (
    TreeMethod("nj", "neighbor joining (Saitou & Nei 1987)",
               lambda dm, clamp_negative=False: neighbor_joining(dm, clamp_negative=clamp_negative)),
    TreeMethod("bionj", "BIONJ (Gascuel 1997)",
               lambda dm, clamp_negative=False: neighbor_joining(dm, bionj=True, clamp_negative=clamp_negative)),
    TreeMethod("upgma", "UPGMA (Sokal & Michener 1958)", _upgma),
)}
METHODS = tuple(REGISTRY)


def build_tree(dm: DistanceMatrix, method: str = "nj", *, clamp_negative: bool = False) -> Tree:
    """Build a tree with ``method``, one of :data:`METHODS` (``nj``, ``bionj``, ``upgma``).

    Examples
    --------
    >>> dm = DistanceMatrix.from_array([[0, 3, 4], [3, 0, 5], [4, 5, 0]], list("abc"))
    >>> build_tree(dm, "nj").labels()
    ['a', 'b', 'c']
    """
    entry = REGISTRY.get(method) if isinstance(method, str) else None
    if entry is None:
        raise InputError(f"unknown tree method '{method}' (choose from {', '.join(METHODS)})")
    return entry.build(dm, clamp_negative=clamp_negative)
