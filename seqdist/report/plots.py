"""Figures for papers, drawn with matplotlib on axes you pass in.

The same drawings as the html report (:mod:`seqdist.report.html`): trees as
rectangular phylograms rooted for drawing on one reference taxon, two trees
on one scale with the splits found in only one of them in colour, and the
change of a matrix as a diverging heatmap on a square-root colour scale.

matplotlib is optional (``pip install "seqdist[plot]"``) and imported only
when a function here is called, so ``import seqdist`` never needs it.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Sequence

import numpy as np

from seqdist.core.matrix import DistanceMatrix
from seqdist.core.tree import Tree
from seqdist.report.html import HIGHLIGHT, MID_RGB, NEG_RGB, PLAIN, POS_RGB, layout_trees
from seqdist.trees.compare import nontrivial, splits

if TYPE_CHECKING:  # matplotlib is optional: only for the annotations
    from matplotlib.axes import Axes

__all__ = ["plot_tree", "plot_trees", "plot_change_heatmap", "INSTALL_HINT"]

INSTALL_HINT = 'pip install "seqdist[plot]"'
MAX_TICK_LABELS = 80


def _matplotlib():
    """matplotlib, or an ImportError that says how to get it."""
    try:
        import matplotlib
    except ImportError as exc:
        raise ImportError(f"seqdist.report.plots needs matplotlib, which is not installed: {INSTALL_HINT}") from exc
    return matplotlib


def _axes(ax, ncols: int = 1, figsize=None):
    if ax is not None:
        return ax
    _matplotlib()
    import matplotlib.pyplot as plt

    _, axes = plt.subplots(1, ncols, figsize=figsize or (5.0 * ncols, 5.0), squeeze=False)
    return axes[0, 0] if ncols == 1 else list(axes[0])


def _draw(lay, ax, highlight: set, color: str, linewidth: float, fontsize: float | None) -> None:
    from matplotlib.collections import LineCollection

    plain, marked = [], []
    children = lay.children
    for k, kids in enumerate(children):
        if kids:
            plain.append([(lay.x[k], lay.y[kids[0]]), (lay.x[k], lay.y[kids[-1]])])
        p = lay.parent[k]
        if p >= 0:
            (marked if lay.split[k] in highlight else plain).append([(lay.x[p], lay.y[k]), (lay.x[k], lay.y[k])])
    ax.add_collection(LineCollection(plain, colors=color, linewidths=linewidth))
    if marked:
        ax.add_collection(LineCollection(marked, colors=HIGHLIGHT, linewidths=2 * linewidth))
    n = len(lay.leaves)
    size = fontsize if fontsize is not None else max(4.0, min(10.0, 400.0 / max(n, 1)))
    for k, name in enumerate(lay.names):
        if name is not None:
            ax.text(lay.x[k], lay.y[k], f" {name}", va="center", ha="left", fontsize=size, color=color)
    ax.set_ylim(n - 0.5, -0.5)  # the first leaf at the top, as in the html report
    ax.set_yticks([])
    for side in ("left", "right", "top"):
        ax.spines[side].set_visible(False)
    ax.set_xlabel("branch length")


def plot_tree(tree: Tree, ax: "Axes | None" = None, *, outgroup: str | None = None, color: str = PLAIN,
              linewidth: float = 1.2, fontsize: float | None = None) -> "Axes":
    """Draw one tree as a rectangular phylogram; the x axis is the branch length.

    Unrooted trees are rooted for drawing at the middle of the branch to
    ``outgroup`` (default: the first label in sorted order); children are
    ordered by their first taxon in sorted order.

    Parameters
    ----------
    tree : Tree
    ax : matplotlib Axes, optional
        Where to draw (default: a new figure).
    outgroup : str, optional
    color : str
    linewidth : float
    fontsize : float, optional
        Leaf label size (default: from the number of leaves).

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> from matplotlib.figure import Figure
    >>> from seqdist.core.tree import Node, Tree
    >>> t = Tree(Node(children=[Node("a", 1.0), Node("b", 2.0), Node("c", 0.5)]))
    >>> ax = plot_tree(t, ax=Figure().subplots())
    >>> [x.get_text().strip() for x in ax.texts]
    ['a', 'b', 'c']
    """
    _matplotlib()
    ax = _axes(ax)
    lay, = layout_trees([tree], outgroup=outgroup, shorten=False)
    _draw(lay, ax, set(), color, linewidth, fontsize)
    ax.set_xlim(min(0.0, min(lay.x)), max(lay.x) * 1.25 if max(lay.x) > 0 else 1.0)
    return ax


def plot_trees(tree_a: Tree, tree_b: Tree, axes: "Sequence[Axes] | None" = None, same_scale: bool = True, *,
               names: tuple[str, str] = ("before", "after"), outgroup: str | None = None,
               highlight: bool = True, linewidth: float = 1.2, fontsize: float | None = None) -> "list[Axes]":
    """Draw two trees side by side, on one scale, with the splits found in only one of them in colour.

    Both trees are rooted for drawing on the same reference taxon (``outgroup``,
    default the first shared label in sorted order) and their leaves ordered by
    the same rule, so equal shapes look equal.

    Parameters
    ----------
    tree_a, tree_b : Tree
    axes : pair of matplotlib Axes, optional
        Where to draw (default: a new figure with two panels).
    same_scale : bool
        The same x range on both axes, so equal branch lengths are drawn
        equally long (default); False fits each tree to its own axes.
    names : (str, str)
        Panel titles.
    outgroup : str, optional
    highlight : bool
        Colour the branches of splits (over the shared taxa) found in one
        tree only; needs both trees on the same taxa.
    linewidth : float
    fontsize : float, optional

    Returns
    -------
    list of two matplotlib Axes

    Examples
    --------
    >>> from matplotlib.figure import Figure
    >>> from seqdist.trees import read_newick
    >>> a = read_newick("((a:1,b:1):1,c:1,(d:1,e:1):1);")
    >>> b = read_newick("((a:2,c:2):2,b:2,(d:2,e:2):2);")
    >>> ax1, ax2 = plot_trees(a, b, axes=Figure().subplots(1, 2))
    >>> ax1.get_xlim() == ax2.get_xlim()
    True
    """
    _matplotlib()
    if axes is None:
        axes = _axes(None, 2, (10.0, 5.0))
    ax_a, ax_b = axes
    taxa = sorted(set(tree_a.labels()) & set(tree_b.labels()))
    lays = layout_trees([tree_a, tree_b], taxa, outgroup=outgroup, shorten=False)
    marks: list = [set(), set()]
    if highlight and set(tree_a.labels()) == set(tree_b.labels()):
        sa, sb = (nontrivial(splits(t, taxa), len(taxa)) for t in (tree_a, tree_b))
        marks = [sa - sb, sb - sa]
    hi = max(max(lay.x) for lay in lays)
    lo = min(0.0, min(min(lay.x) for lay in lays))
    for lay, ax, mark, name in zip(lays, (ax_a, ax_b), marks, names):
        _draw(lay, ax, mark, PLAIN, linewidth, fontsize)
        top = hi if same_scale else max(lay.x)
        ax.set_xlim(lo if same_scale else min(0.0, min(lay.x)), top * 1.25 if top > 0 else 1.0)
        ax.set_title(name)
    return [ax_a, ax_b]


def _aligned(before, after, order):
    """``(labels, before array, after array)`` on shared labels in ``order``."""
    if hasattr(before, "labels"):
        ref_after = after if hasattr(after, "labels") else before  # an array follows before's labels
        shared = set(ref_after.labels)
        labels = [x for x in (order if order is not None else before.labels) if x in shared]

        def pick(m, ref) -> np.ndarray:
            idx = [ref.index(x) for x in labels]
            return np.asarray(getattr(m, "values", m), float)[np.ix_(idx, idx)]

        return labels, pick(before, before), pick(after, ref_after)
    b, a = np.asarray(before, float), np.asarray(after, float)
    if b.shape != a.shape or b.ndim != 2 or b.shape[0] != b.shape[1]:
        raise ValueError(f"before and after must be square arrays of one shape, got {b.shape} and {a.shape}")
    idx = list(range(b.shape[0])) if order is None else [int(k) for k in order]
    return [str(k) for k in idx], b[np.ix_(idx, idx)], a[np.ix_(idx, idx)]


def plot_change_heatmap(before: DistanceMatrix, after: DistanceMatrix, ax: "Axes | None" = None,
                        order: Sequence[str] | None = None, *, colorbar: bool = True,
                        missing_color: str = "#787878") -> "Axes":
    """Draw ``after - before`` as a heatmap: blue decreased, white unchanged, red increased.

    The colour scale is symmetric about zero and square-root (small changes
    stay visible beside one large change), as in the html report; entries
    missing before (or after) are drawn in ``missing_color``.

    Parameters
    ----------
    before, after : DistanceMatrix or square array
        Matrices are matched by label (the labels both hold).
    ax : matplotlib Axes, optional
        Where to draw (default: a new figure).
    order : list, optional
        Labels (or indices for arrays) in row order, e.g. a tree's leaf order.
    colorbar : bool
        Add a colour bar beside the axes.
    missing_color : str

    Returns
    -------
    matplotlib Axes (the image is ``ax.images[0]``)

    Examples
    --------
    >>> from matplotlib.figure import Figure
    >>> from seqdist import DistanceMatrix
    >>> D = np.array([[0, 3, 4], [3, 0, 5], [4, 5, 0.]])
    >>> a, b = DistanceMatrix.from_array(D, list("xyz")), DistanceMatrix.from_array(D + 1 - np.eye(3), list("xyz"))
    >>> ax = plot_change_heatmap(a, b, ax=Figure().subplots(), order=["z", "y", "x"])
    >>> float(ax.images[0].get_array()[0, 1]), [t.get_text() for t in ax.get_xticklabels()]
    (1.0, ['z', 'y', 'x'])
    """
    _matplotlib()
    from matplotlib.colors import FuncNorm, LinearSegmentedColormap

    labels, b, a = _aligned(before, after, order)
    with np.errstate(invalid="ignore"):
        change = a - b  # nan where either is missing: drawn in missing_color
    finite = change[np.isfinite(change)]
    vmax = float(np.abs(finite).max()) if finite.size else 0.0
    vmax = vmax if vmax > 0 else 1.0
    cmap = LinearSegmentedColormap.from_list("seqdist_change", [NEG_RGB / 255, MID_RGB / 255, POS_RGB / 255]
                                             ).with_extremes(bad=missing_color)

    def forward(x):
        return np.sign(x) * np.sqrt(np.abs(x))

    def inverse(y):
        return np.sign(y) * y * y

    ax = _axes(ax)
    norm = FuncNorm((forward, inverse), vmin=-vmax, vmax=vmax)
    image = ax.imshow(np.ma.masked_invalid(change), cmap=cmap, norm=norm, interpolation="nearest")
    n = len(labels)
    if n <= MAX_TICK_LABELS:
        size = max(4.0, min(9.0, 500.0 / max(n, 1)))
        ax.set_xticks(range(n), labels, rotation=90, fontsize=size)
        ax.set_yticks(range(n), labels, fontsize=size)
    else:
        ax.set_xticks([])
        ax.set_yticks([])
    if colorbar:
        bar = ax.figure.colorbar(image, ax=ax, shrink=0.8)
        bar.set_label("after - before (square-root scale)")
    return ax
