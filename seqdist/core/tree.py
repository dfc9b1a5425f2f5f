"""A small tree type: nodes with children, branch lengths and leaf labels.

Trees built here are plain Python objects so that every other part of
seqdist (comparison, drawing, Newick) works without a third-party tree
library; :meth:`Tree.to_phylo` converts to a Biopython ``Bio.Phylo`` tree
for users who want one.

All traversals are iterative (no recursion), so trees of many thousands of
leaves with deep, caterpillar-like shapes are fine.
"""

from __future__ import annotations

from typing import Any, Callable, Iterator, Sequence

import numpy as np

from seqdist.core.errors import InputError

__all__ = ["Node", "Tree", "rooted_for_drawing", "order_children", "quote_label", "format_length", "format_support",
           "write_newick"]


class Node:
    """One node: a name (leaf label, or ``None``), the length of the branch
    to its parent (``None`` when not given), its children, and the support
    of the branch to its parent (``None`` when not given).

    ``support`` is the number written after an internal node's closing
    parenthesis in Newick (``(a,b)95:0.1``). seqdist writes bootstrap and
    consensus support in percent (0-100); a value read from a file is kept
    as written (percent or fraction, whatever that file used).

    Examples
    --------
    >>> a, b = Node("a", 1.0), Node("b", 2.0)
    >>> root = Node(children=[a, b])
    >>> a.parent is root, root.is_leaf
    (True, False)
    """

    __slots__ = ("name", "length", "children", "parent", "support")

    def __init__(self, name: str | None = None, length: float | None = None,
                 children: Sequence["Node"] | None = None, support: float | None = None):
        self.name = name
        self.length = length
        self.support = support
        self.children: list[Node] = []
        self.parent: Node | None = None
        for c in children or ():
            self.add_child(c)

    def add_child(self, child: "Node") -> "Node":
        child.parent = self
        self.children.append(child)
        return child

    @property
    def is_leaf(self) -> bool:
        return not self.children

    def __repr__(self) -> str:
        kind = "leaf" if self.is_leaf else f"{len(self.children)} children"
        return f"Node({self.name!r}, length={self.length!r}, {kind})"


class Tree:
    """A tree: its root node and whether the root means anything.

    Parameters
    ----------
    root : Node
    rooted : bool
        False for neighbor joining and BIONJ trees (their root is a
        trifurcation placed where the algorithm stopped, common practice);
        True for UPGMA trees.
    method : str, optional
        How the tree was built (kept for reports).

    Examples
    --------
    >>> t = Tree(Node(children=[Node("a", 1.0), Node("b", 2.0), Node("c", 0.5)]))
    >>> t.labels(), t.total_length()
    (['a', 'b', 'c'], 3.5)
    """

    def __init__(self, root: Node, rooted: bool = False, method: str | None = None):
        self.root = root
        self.rooted = rooted
        self.method = method
        self.clamped = 0  # negative branches set to zero by clamp_negative

    # -- traversal ------------------------------------------------------
    def preorder(self) -> Iterator[Node]:
        stack = [self.root]
        while stack:
            node = stack.pop()
            yield node
            stack.extend(reversed(node.children))

    def postorder(self) -> list[Node]:
        """Nodes with every child before its parent (a list)."""
        out = list(self.preorder())
        out.reverse()
        return out

    def leaves(self) -> list[Node]:
        """Leaves in drawing (preorder) order."""
        return [n for n in self.preorder() if n.is_leaf]

    def labels(self) -> list[str]:
        return [n.name for n in self.leaves()]

    @property
    def n_leaves(self) -> int:
        return sum(1 for n in self.preorder() if n.is_leaf)

    def branches(self) -> list[Node]:
        """Every non-root node (each stands for the branch above it)."""
        return [n for n in self.preorder() if n is not self.root]

    # -- lengths --------------------------------------------------------
    def total_length(self) -> float:
        """Sum of all branch lengths (missing lengths count as 0)."""
        return float(sum(n.length or 0.0 for n in self.branches()))

    def negative_branches(self) -> int:
        """Number of branches with a negative length."""
        return sum(1 for n in self.branches() if n.length is not None and n.length < 0)

    def clamp_negative(self) -> int:
        """Set negative branch lengths to zero in place; returns how many.

        The count is also kept in :attr:`clamped` for reports.
        """
        k = 0
        for n in self.branches():
            if n.length is not None and n.length < 0:
                n.length = 0.0
                k += 1
        self.clamped += k
        return k

    def copy(self) -> "Tree":
        """A deep copy (iterative)."""
        new_root = Node(self.root.name, self.root.length, support=self.root.support)
        stack = [(self.root, new_root)]
        while stack:
            old, new = stack.pop()
            for c in old.children:
                nc = new.add_child(Node(c.name, c.length, support=c.support))
                stack.append((c, nc))
        t = Tree(new_root, self.rooted, self.method)
        t.clamped = self.clamped
        return t

    # -- checks ---------------------------------------------------------
    def check_labels(self, source: str | None = None) -> list[str]:
        """Leaf labels, raising :class:`InputError` for an unnamed or repeated leaf."""
        where = f"{source}: " if source else ""
        seen = set()
        out = []
        for leaf in self.leaves():
            if leaf.name is None or leaf.name == "":
                raise InputError(f"{where}a leaf of the tree has no label")
            if leaf.name in seen:
                raise InputError(f"{where}leaf label '{leaf.name}' occurs twice in the tree")
            seen.add(leaf.name)
            out.append(leaf.name)
        return out

    # -- distances between leaves ----------------------------------------
    def path_lengths(self, taxa: Sequence[str] | None = None) -> np.ndarray:
        """Patristic (path-length) distances between leaves, shape (n, n).

        Parameters
        ----------
        taxa : sequence of str, optional
            Row/column order (default: :meth:`labels`).

        Examples
        --------
        >>> t = Tree(Node(children=[Node("a", 1.0), Node("b", 2.0), Node("c", 0.5)]))
        >>> float(t.path_lengths(["a", "b", "c"])[0, 1])
        3.0
        """
        labels = self.check_labels()
        taxa = list(labels if taxa is None else taxa)
        pos = {lab: i for i, lab in enumerate(taxa)}
        if len(pos) != len(labels) or any(lab not in pos for lab in labels):
            raise InputError("tree leaves and the requested taxa differ")
        n = len(taxa)
        P = np.zeros((n, n))
        # For each node: indices of the leaves below it and their depth below it.
        below: dict[int, tuple[np.ndarray, np.ndarray]] = {}
        for node in self.postorder():
            if node.is_leaf:
                idx, dep = np.array([pos[node.name]], dtype=np.intp), np.zeros(1)
            else:
                parts = []
                for c in node.children:
                    ci, cd = below.pop(id(c))
                    cd = cd + (c.length or 0.0)
                    for pi, pd in parts:
                        block = pd[:, None] + cd[None, :]
                        P[np.ix_(pi, ci)] = block
                        P[np.ix_(ci, pi)] = block.T
                    parts.append((ci, cd))
                idx = np.concatenate([p[0] for p in parts])
                dep = np.concatenate([p[1] for p in parts])
            below[id(node)] = (idx, dep)
        return P

    # -- conversion -----------------------------------------------------
    def to_newick(self, **kwargs: Any) -> str:
        """Newick text (see :func:`write_newick`)."""
        return write_newick(self, **kwargs)

    def to_phylo(self) -> Any:
        """The same tree as a Biopython ``Bio.Phylo.BaseTree.Tree``.

        Examples
        --------
        >>> t = Tree(Node(children=[Node("a", 1.0), Node("b", 2.0), Node("c", 0.5)]))
        >>> sorted(c.name for c in t.to_phylo().get_terminals())
        ['a', 'b', 'c']
        """
        from Bio.Phylo.BaseTree import Clade
        from Bio.Phylo.BaseTree import Tree as PhyloTree

        top = Clade(branch_length=self.root.length, name=self.root.name, confidence=self.root.support)
        stack = [(self.root, top)]
        while stack:
            old, new = stack.pop()
            for c in old.children:
                nc = Clade(branch_length=c.length, name=c.name, confidence=c.support)
                new.clades.append(nc)
                stack.append((c, nc))
        return PhyloTree(root=top, rooted=self.rooted)

    @classmethod
    def from_phylo(cls, phylo_tree: Any) -> "Tree":
        """Build from a Biopython ``Bio.Phylo`` tree (a clade's ``confidence`` becomes the support)."""
        root = Node(phylo_tree.root.name, phylo_tree.root.branch_length, support=phylo_tree.root.confidence)
        stack = [(phylo_tree.root, root)]
        while stack:
            old, new = stack.pop()
            for c in old.clades:
                nc = new.add_child(Node(c.name, c.branch_length, support=c.confidence))
                stack.append((c, nc))
        return cls(root, rooted=bool(phylo_tree.rooted))

    def __repr__(self) -> str:
        return f"Tree(n_leaves={self.n_leaves}, rooted={self.rooted}, method={self.method!r})"


def rooted_for_drawing(tree: Tree, outgroup: str | None = None) -> Tree:
    """A copy rooted for drawing: on the branch above ``outgroup``.

    Rooted trees (UPGMA) are returned as they are. For unrooted trees the
    new root sits at the middle of the branch leading to the outgroup
    leaf (default: the first label in sorted order), so two trees on the
    same taxa are drawn from the same side. Branch lengths are kept (the
    outgroup branch is split into two halves).
    """
    t = tree.copy()
    if tree.rooted:
        return t
    leaves = {n.name: n for n in t.leaves()}
    name = outgroup if outgroup is not None else sorted(leaves)[0]
    if name not in leaves:
        raise InputError(f"outgroup '{name}' is not a leaf of the tree")
    leaf = leaves[name]
    parent = leaf.parent
    if parent is None:
        return t
    # Reverse the parent links from the leaf's parent up to the old root;
    # each branch keeps its length, now stored on the other end.
    path = []
    node = parent
    while node is not None:
        path.append(node)
        node = node.parent
    # the support belongs to the branch, so it moves with the length
    lengths = [n.length for n in path]
    supports = [n.support for n in path]
    for k in range(len(path) - 1):
        child, up = path[k], path[k + 1]
        up.children.remove(child)
        child.children.append(up)
        up.parent = child
        up.length = lengths[k]
        up.support = supports[k]
    half = (leaf.length or 0.0) / 2.0
    parent.children.remove(leaf)
    parent.length = half
    parent.support = None  # half of the outgroup's own branch: a trivial split
    leaf.length = half
    new_root = Node(children=[leaf, parent])
    # The old root may now have one child; splice it out to keep the tree clean.
    old = path[-1]
    if old is not parent and len(old.children) == 1:
        only = old.children[0]
        up = old.parent
        up.children[up.children.index(old)] = only
        only.parent = up
        only.length = (only.length or 0.0) + (old.length or 0.0)
        if only.support is None:  # the two halves are one unrooted branch
            only.support = old.support
    return Tree(new_root, rooted=True, method=tree.method)


# ------------------------------------------------------------------ Newick text (the writer; the reader is
# seqdist.io.newick). Labels are bare when the standard allows, else single-quoted with inner quotes
# doubled; underscores are quoted too (strict readers turn a bare underscore into a blank); lengths
# are written with repr (the shortest text that reads back to the same float), -0.0 as 0.0.

def order_children(tree: Tree, rank: dict[str, int]) -> None:
    """Sort every node's children by the smallest rank of a leaf below them (in place).

    Gives a deterministic text and drawing whatever order the children were made in.

    Examples
    --------
    >>> a, b, c = Node("a"), Node("b"), Node("c")
    >>> t = Tree(Node(children=[c, Node(children=[b, a])]))
    >>> order_children(t, {"a": 0, "b": 1, "c": 2}); t.to_newick(lengths=False)
    '((a,b),c);\\n'
    """
    first: dict[int, int] = {}
    for node in tree.postorder():
        if node.is_leaf:
            first[id(node)] = rank[node.name]
        else:
            node.children.sort(key=lambda c: first[id(c)])
            first[id(node)] = first[id(node.children[0])]


# Characters that force quoting: Newick punctuation, the quote itself,
# white space, and the underscore (see module docs).
_SPECIAL = set("()[]':;,_")


def quote_label(label: str, special: set[str] | frozenset[str] = _SPECIAL) -> str:
    """A label as Newick text: bare when safe, else single-quoted.

    ``special`` are the characters that force quotes besides white space (NEXUS
    files use a longer list: :func:`seqdist.io.nexus_trees.quote_nexus`).

    Examples
    --------
    >>> quote_label("human"), quote_label("it's"), quote_label("a b"), quote_label("x_1")
    ('human', "'it''s'", "'a b'", "'x_1'")
    """
    if label and not any(c in special or c.isspace() for c in label):
        return label
    return "'" + label.replace("'", "''") + "'"


def format_length(x: float) -> str:
    """A branch length with repr precision (``-0.0`` written as ``0.0``).

    Examples
    --------
    >>> format_length(0.1), format_length(-0.0), format_length(1/3)
    ('0.1', '0.0', '0.3333333333333333')
    """
    x = float(x)
    if x == 0.0:
        return "0.0"
    if x != x or x in (float("inf"), float("-inf")):
        raise InputError(f"branch length {x!r} cannot be written as Newick")
    return repr(x)


def format_support(x: float) -> str:
    """A support value as Newick text: 6 significant digits, no trailing zeros.

    Examples
    --------
    >>> format_support(95.0), format_support(200 / 3), format_support(0.95)
    ('95', '66.6667', '0.95')
    """
    x = float(x)
    if x != x or x in (float("inf"), float("-inf")):
        raise InputError(f"support value {x!r} cannot be written as Newick")
    return f"{x:.6g}" if x != 0.0 else "0"


def write_newick(tree: Tree, lengths: bool = True, support: bool = True,
                 quote: Callable[[str], str] | None = None) -> str:
    """Newick text of a tree, ending in ``;`` and a newline.

    Parameters
    ----------
    tree : Tree
    lengths : bool
        Write branch lengths (default True).
    support : bool
        Write the support of internal nodes that have one (default True),
        in place of their name (see :func:`format_support`).
    quote : callable, optional
        Label to text (default :func:`quote_label`; the NEXUS writer passes
        its stricter quoting).

    Examples
    --------
    >>> t = Tree(Node(children=[Node("a", 1.0), Node("b c", 2.5), Node("d", -0.25)]))
    >>> write_newick(t)
    "(a:1.0,'b c':2.5,d:-0.25);\\n"
    >>> t = Tree(Node(children=[Node(children=[Node("a"), Node("b")], support=95.0), Node("c"), Node("d")]))
    >>> write_newick(t)
    '((a,b)95,c,d);\\n'
    """
    quote = quote or quote_label
    out: list[str] = []
    # Iterative: ("open", node) emits the subtree, ("close", node) its tail.
    stack: list[tuple[int, Node]] = [(0, tree.root)]
    while stack:
        kind, node = stack.pop()
        if kind == 2:  # a comma between siblings
            out.append(",")
            continue
        if kind == 0 and node.children:
            out.append("(")
            stack.append((1, node))
            kids = node.children
            for k in range(len(kids) - 1, -1, -1):
                stack.append((0, kids[k]))
                if k:
                    stack.append((2, kids[k]))
            continue
        if kind == 1:
            out.append(")")
        if support and node.children and node.support is not None:
            out.append(format_support(node.support))
        elif node.name is not None and node.name != "":
            out.append(quote(str(node.name)))
        if lengths and node.length is not None and node is not tree.root:
            out.append(":" + format_length(node.length))
    out.append(";\n")
    return "".join(out)
