"""The impact report as one self-contained html page.

Inline SVG and CSS only: no scripts, fonts, images or style sheets from
elsewhere (a large heatmap is an inline PNG, a ``data:`` address). The page
is deterministic: the same input gives the same bytes (no dates, no
random identifiers).

Drawing conventions
    Trees are rectangular phylograms. Unrooted trees (NJ, BIONJ) are rooted
    for drawing only, at the middle of the branch leading to a fixed
    reference taxon (the first label in sorted order, or ``outgroup``), so
    both trees are seen from the same side; UPGMA trees keep their root.
    Children are ordered by their first taxon in sorted label order. A
    branch whose split is found only in that tree is drawn in colour;
    negative branch lengths are dashed. With split support, each internal
    branch carries the percentage of replicates containing its split. A
    branch longer than 3 times the 95th percentile of the tree's branch
    lengths is drawn shortened to that length, with a break mark and its
    true length written on it.
"""

from __future__ import annotations

import base64
import html
import re
import struct
import zlib
from dataclasses import dataclass
from typing import Collection, Iterable

import numpy as np

from seqdist.core.tree import Tree, order_children, rooted_for_drawing
from seqdist.impact.compare import CAUTION, ImpactResult, summary_lines
from seqdist.trees.compare import nontrivial, splits

__all__ = ["png_bytes", "TreeLayout", "layout_trees", "draw_tree", "draw_trees", "draw_heatmap", "svg_download",
           "render_html"]

HIGHLIGHT = "#d95f02"
PLAIN = "#3a3a3a"
NEG_RGB = np.array([33, 102, 172], float)
MID_RGB = np.array([247, 247, 247], float)
POS_RGB = np.array([178, 24, 43], float)
FILLED_RGB = np.array([120, 120, 120], np.uint8)
MADE_UP_RGB = np.array([20, 20, 20], np.uint8)
MAX_TREE_LEAVES = 1000
MAX_LABELLED_LEAVES = 300
MAX_RECT_HEATMAP = 80
MAX_VECTOR_HEATMAP = 200
MAX_HEATMAP_PIXELS = 800

CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',Helvetica,Arial,sans-serif;margin:24px;color:#222;
max-width:1400px;line-height:1.45}
h1{font-size:1.6em;margin:0 0 4px} h2{font-size:1.2em;margin:28px 0 8px;border-bottom:1px solid #ddd;
padding-bottom:3px} .files{color:#555;margin:0 0 14px;font-size:.95em}
.summary{background:#f3f6fa;border-left:4px solid #2166ac;padding:10px 14px;font-size:1.05em}
.summary p{margin:4px 0}
.caution{background:#fff7e0;border-left:4px solid #e0a100;padding:8px 14px;margin-top:10px}
figure{margin:0}
.panel{border:1px solid #e2e2e2;padding:8px;background:#fff}
.panel h3{margin:0 0 4px;font-size:1em}
.panel svg{display:block;max-width:100%;height:auto}
.heat{display:inline-block;max-width:100%}
.dl{margin:4px 0 0;font-size:.85em}
.trees{display:grid;gap:18px;align-items:start;grid-template-columns:repeat(2,minmax(0,1fr))}
.trees.k3{grid-template-columns:repeat(3,minmax(0,1fr))}
.trees .panel{display:grid;grid-row:span 3;grid-template-rows:subgrid;row-gap:0}
@media (max-width:1180px){.trees.k3{grid-template-columns:repeat(2,minmax(0,1fr))}}
@media (max-width:900px){.trees,.trees.k3{grid-template-columns:minmax(0,1fr)}}
@media print{
@page{margin:16mm 14mm}
body{margin:0;max-width:none;font-size:10pt;color:#000}
h1,h2,h3{break-after:avoid;page-break-after:avoid}
figure,.panel,svg,tr,.summary,.caution{break-inside:avoid;page-break-inside:avoid}
.summary,.caution,th,.panel{background:none}
.trees,.trees.k3{grid-template-columns:repeat(2,minmax(0,1fr))}
.dl{display:none}
.bar{print-color-adjust:exact;-webkit-print-color-adjust:exact}
}
table{border-collapse:collapse;font-size:.92em} td,th{border:1px solid #ddd;padding:3px 8px;text-align:right}
th{background:#f5f5f5} td.l,th.l{text-align:left}
.note{color:#666;font-size:.9em} .key{display:inline-block;width:22px;height:0;border-top:3px solid;
vertical-align:middle;margin:0 4px 0 10px} .dash{border-top-style:dashed}
.bar{display:inline-block;height:10px;background:#b2182b;vertical-align:middle}
.splits td{max-width:900px;word-break:break-word}
"""


# ------------------------------------------------------------------ helpers
def _esc(x) -> str:
    return html.escape(str(x), quote=True)


def _num(x, digits: int = 4) -> str:
    if x is None:
        return "n/a"
    if isinstance(x, (int, np.integer)):
        return f"{int(x):,}"
    return f"{float(x):.{digits}g}"


def _nice_step(span: float) -> float:
    """A round scale-bar length of about a fifth of ``span``."""
    if span <= 0:
        return 1.0
    raw = span / 5
    mag = 10 ** np.floor(np.log10(raw))
    for m in (1, 2, 5, 10):
        if m * mag >= raw:
            return float(m * mag)
    return float(10 * mag)


def _colour(values: np.ndarray, vmax: float) -> np.ndarray:
    """Diverging colours (blue below 0, white at 0, red above), uint8 RGB;
    the intensity is the square root of ``|value| / vmax``."""
    # square-root scale: small changes stay visible beside one large change
    t = np.zeros_like(values) if vmax <= 0 else np.clip(values / vmax, -1.0, 1.0)
    t = (np.sign(t) * np.sqrt(np.abs(t)))[..., None]
    rgb = np.where(t < 0, MID_RGB + (NEG_RGB - MID_RGB) * (-t), MID_RGB + (POS_RGB - MID_RGB) * t)
    return np.rint(rgb).astype(np.uint8)


def _hex(rgb) -> str:
    return "#%02x%02x%02x" % tuple(int(v) for v in rgb)


def png_bytes(rgb: np.ndarray) -> bytes:
    """A minimal, deterministic PNG (8-bit RGB, no filter) of an (h, w, 3) array.

    Examples
    --------
    >>> png_bytes(np.zeros((1, 1, 3), np.uint8))[:8]
    b'\\x89PNG\\r\\n\\x1a\\n'
    """
    h, w, _ = rgb.shape
    raw = b"".join(b"\x00" + np.ascontiguousarray(rgb[r]).tobytes() for r in range(h))

    def chunk(tag: bytes, data: bytes) -> bytes:
        return struct.pack(">I", len(data)) + tag + data + struct.pack(">I", zlib.crc32(tag + data) & 0xFFFFFFFF)

    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 2, 0, 0, 0))
            + chunk(b"IDAT", zlib.compress(raw, 9)) + chunk(b"IEND", b""))


# --------------------------------------------------------------- tree panel
@dataclass(frozen=True)
class TreeLayout:
    """A tree laid out as a rectangular phylogram, in data units.

    Nodes are listed in preorder (the root first). ``x`` is the depth from
    the root along the drawn branches (a branch longer than ``cap`` counts
    as ``cap`` and is marked in ``shortened``); ``y`` is the row: leaves at
    0, 1, 2, ... top to bottom, an inner node midway between its first and
    last child. ``split`` is the bitset over the compared taxa of the side
    of the node's branch without ``taxa[0]`` (taxa not compared add no bit).

    Attributes
    ----------
    names : list of str or None
        Leaf labels (``None`` for inner nodes).
    x, y : list of float
    parent : list of int
        Index of each node's parent (-1 for the root).
    length : list of float or None
        True branch lengths (``None`` for the root or when not given).
    shortened : list of bool
    split : list of int
    leaves : list of str
        Leaf labels top to bottom.
    cap : float
        Longest branch drawn at full length (0: none shortened).
    """

    names: list
    x: list
    y: list
    parent: list
    length: list
    shortened: list
    split: list
    leaves: list
    cap: float

    @property
    def children(self) -> list:
        """Child indices of every node."""
        out: list = [[] for _ in self.names]
        for k, p in enumerate(self.parent):
            if p >= 0:
                out[p].append(k)
        return out


def _layout(t: Tree, taxa: list, cap: float) -> TreeLayout:
    """Lay out ``t`` (already rooted for drawing; ladderised in place)."""
    # taxa left out of the comparison sort after the compared ones
    rank = {lab: k for k, lab in enumerate(taxa)}
    for k, lab in enumerate(sorted(x for x in t.labels() if x not in rank)):
        rank[lab] = len(taxa) + k
    order_children(t, rank)
    nodes = list(t.preorder())
    index = {id(nd): k for k, nd in enumerate(nodes)}
    full = (1 << len(taxa)) - 1
    x = [0.0] * len(nodes)
    shortened = [False] * len(nodes)
    parent = [-1] * len(nodes)
    for k, node in enumerate(nodes):
        if node.parent is not None:
            parent[k] = index[id(node.parent)]
            ln = float(node.length or 0.0)
            if cap > 0 and ln > cap:
                shortened[k] = True
                ln = cap
            x[k] = x[parent[k]] + ln
    y = [0.0] * len(nodes)
    mask = [0] * len(nodes)
    leaves = []
    for k, node in enumerate(nodes):
        if node.is_leaf:
            y[k] = float(len(leaves))
            leaves.append(node.name)
            mask[k] = 1 << rank[node.name] if rank[node.name] < len(taxa) else 0
    for node in reversed(nodes):
        if not node.is_leaf:
            k = index[id(node)]
            kids = [index[id(c)] for c in node.children]
            y[k] = 0.5 * (y[kids[0]] + y[kids[-1]])
            m = 0
            for c in kids:
                m |= mask[c]
            mask[k] = m
    split = [m ^ full if m & 1 else m for m in mask]
    return TreeLayout(names=[nd.name if nd.is_leaf else None for nd in nodes], x=x, y=y, parent=parent,
                      length=[None if nd.parent is None else nd.length for nd in nodes], shortened=shortened,
                      split=split, leaves=leaves, cap=cap)


def layout_trees(trees: list, taxa: list | None = None, outgroup: str | None = None, shorten: bool = True) -> list:
    """Lay out trees to be drawn side by side on one scale.

    Every tree is rooted for drawing on the same reference taxon (unrooted
    trees: at the middle of the branch to ``outgroup``, default ``taxa[0]``;
    rooted trees keep their root), children are ordered by their first taxon
    in ``taxa`` order, and one length ``cap`` (3 times the 95th percentile
    of all the trees' branch lengths) decides which branches are drawn
    shortened, so equal drawn lengths mean equal branch lengths in every tree
    (``shorten=False``: none is, and ``x`` is the true depth).

    Parameters
    ----------
    trees : list of Tree
    taxa : list of str, optional
        The compared taxa in split-bit order (default: the labels all trees
        share, sorted).
    outgroup : str, optional
    shorten : bool
        Draw branches longer than the cap shortened.

    Returns
    -------
    list of TreeLayout

    Examples
    --------
    >>> from seqdist.core.tree import Node, Tree
    >>> t = Tree(Node(children=[Node("a", 1.0), Node("b", 2.0), Node("c", 0.5)]))
    >>> lay, = layout_trees([t])
    >>> lay.leaves, max(lay.x)
    (['a', 'b', 'c'], 2.5)
    """
    trees = list(trees)
    if taxa is None:
        taxa = sorted(set.intersection(*(set(t.labels()) for t in trees)))
    ref = outgroup if outgroup is not None else taxa[0]
    rooted = [rooted_for_drawing(t, ref) for t in trees]
    # one cap for all: a branch shortened in one tree is shortened in every tree
    lengths = np.array([abs(float(b.length or 0.0)) for t in rooted for b in t.branches()])
    cap = 3.0 * float(np.quantile(lengths, 0.95)) if lengths.size and shorten else 0.0
    return [_layout(t, list(taxa), cap) for t in rooted]


def _tree_svg(lay: TreeLayout, taxa: list, highlight: set, support: dict | None, g: dict) -> str:
    """One tree's SVG with the shared geometry ``g`` (scale, rows, fonts)."""
    width, dy, font, lo, sx = g["width"], g["dy"], g["font"], g["lo"], g["sx"]
    top, bottom, left, labelled = g["top"], g["bottom"], g["left"], g["labelled"]
    n = len(taxa)
    compared = set(taxa)

    def X(v: float) -> float:
        return left + (v - lo) * sx

    def Y(row: float) -> float:
        return top + (row + 0.5) * dy

    n_all = len(lay.leaves)
    height = top + n_all * dy + bottom
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" class="tree" width="{width}" height="{height:.0f}" '
             f'viewBox="0 0 {width} {height:.0f}" font-family="Helvetica,Arial,sans-serif">']
    lw = 1.6 if dy >= 4 else 1.0
    small = max(6.0, font - 2)
    children = lay.children
    for k, name in enumerate(lay.names):
        kids = children[k]
        if kids:
            xk = X(lay.x[k])
            parts.append(f'<line x1="{xk:.2f}" y1="{Y(lay.y[kids[0]]):.2f}" x2="{xk:.2f}" '
                         f'y2="{Y(lay.y[kids[-1]]):.2f}" stroke="{PLAIN}" stroke-width="{lw}"/>')
        p = lay.parent[k]
        if p < 0:
            continue
        m = lay.split[k]
        hl = m in highlight
        colour = HIGHLIGHT if hl else PLAIN
        w = lw * 2 if hl else lw
        length = lay.length[k]
        dash = ' stroke-dasharray="4,2"' if (length or 0.0) < 0 else ""
        x0, x1, y = X(lay.x[p]), X(lay.x[k]), Y(lay.y[k])
        parts.append(f'<line x1="{x0:.2f}" y1="{y:.2f}" x2="{x1:.2f}" y2="{y:.2f}" stroke="{colour}" '
                     f'stroke-width="{w}"{dash}><title>{_esc(name) if name is not None else "branch"} '
                     f'length {_num(length, 6)}</title></line>')
        if hl:
            parts.append(f'<circle cx="{x1:.2f}" cy="{y:.2f}" r="3.5" fill="{HIGHLIGHT}"/>')
        if lay.shortened[k]:
            xm = 0.5 * (x0 + x1)
            for d in (-3.0, 3.0):
                parts.append(f'<line x1="{xm + d - 2:.2f}" y1="{y + 4:.2f}" x2="{xm + d + 2:.2f}" '
                             f'y2="{y - 4:.2f}" stroke="#000" stroke-width="1"/>')
            parts.append(f'<text x="{xm:.2f}" y="{y - 3:.2f}" font-size="{small:.1f}" '
                         f'text-anchor="middle" fill="#555">{_num(length)}</text>')
        if support is not None and kids and 2 <= m.bit_count() <= n - 2 and m in support and labelled:
            pct = int(round(100 * support[m]))
            parts.append(f'<text x="{x1 - 2:.2f}" y="{y - 2:.2f}" font-size="{small:.1f}" '
                         f'text-anchor="end" fill="#1b7837">{pct}</text>')
        if not kids and labelled:
            odd = name not in compared  # not compared (left out of the other tree)
            style = ' fill="#888" font-style="italic"' if odd else f' fill="{PLAIN}"'
            parts.append(f'<text x="{x1 + 4:.2f}" y="{y + font * 0.35:.2f}" font-size="{font:.1f}"{style}>'
                         f'{_esc(name)}{" *" if odd else ""}</text>')
    # the scale bar: the same value and the same length in every tree drawn together
    step = g["step"]
    yb = top + n_all * dy + 22
    parts.append(f'<line class="scale-bar" x1="{left:.2f}" y1="{yb:.2f}" x2="{left + step * sx:.2f}" '
                 f'y2="{yb:.2f}" stroke="#000" stroke-width="1.5"/>')
    parts.append(f'<text class="scale-label" x="{left + step * sx + 6:.2f}" y="{yb + 4:.2f}" '
                 f'font-size="11">{_num(step)}</text>')
    parts.append("</svg>")
    return "".join(parts)


def draw_trees(trees: list, taxa: list, highlights: list | None = None, supports: list | None = None, *,
               width: int = 620, outgroup: str | None = None) -> list:
    """SVGs of trees drawn on one scale; a list of (svg text, leaf labels top to bottom).

    Every tree gets the same width, units per pixel, row height, font and
    scale bar (value and length), so branch lengths compare by eye across
    the figures when they are shown at the same size.

    Parameters
    ----------
    trees : list of Tree
    taxa : list of str
        Sorted compared labels (the split bit order; ``taxa[0]`` is the
        reference for rooting).
    highlights : list of set of int, optional
        Per tree, split bitsets to draw in colour.
    supports : list of dict or None, optional
        Per tree, split bitset -> fraction of replicates (printed as a percentage).
    width : int
        Width of every SVG in pixels.
    outgroup : str, optional

    Examples
    --------
    >>> from seqdist.core.tree import Node, Tree
    >>> a = Tree(Node(children=[Node("a", 1.0), Node("b", 1.0), Node("c", 1.0)]))
    >>> b = Tree(Node(children=[Node("a", 2.0), Node("b", 2.0), Node("c", 2.0)]))
    >>> (sa, _), (sb, _) = draw_trees([a, b], ["a", "b", "c"])
    >>> import re
    >>> [re.search(r'scale-label[^>]*>([^<]*)', s).group(1) for s in (sa, sb)]
    ['1', '1']
    """
    lays = layout_trees(trees, taxa, outgroup)
    k = len(lays)
    highlights = list(highlights) if highlights is not None else [set()] * k
    supports = list(supports) if supports is not None else [None] * k
    compared = set(taxa)
    n_all = max(len(lay.leaves) for lay in lays)
    labelled = n_all <= MAX_LABELLED_LEAVES
    dy = max(2.0, min(18.0, 900.0 / n_all)) if labelled else max(0.6, 900.0 / n_all)
    font = max(6.0, min(12.0, dy * 0.8))
    longest = max(len(lab) + (2 if lab not in compared else 0) for lay in lays for lab in lay.leaves)
    label_w = min(0.42 * width, 0.62 * font * longest + 12) if labelled else 6.0
    left = 12.0
    lo = min(0.0, min(min(lay.x) for lay in lays))
    hi = max(max(lay.x) for lay in lays)
    span = hi - lo if hi > lo else 1.0
    sx = (width - left - label_w - 8) / span
    g = dict(width=width, dy=dy, font=font, lo=lo, sx=sx, top=10.0, bottom=40.0, left=left,
             labelled=labelled, step=_nice_step(span))
    return [(_tree_svg(lay, list(taxa), hl, sup, g), lay.leaves)
            for lay, hl, sup in zip(lays, highlights, supports)]


def draw_tree(tree: Tree, taxa: list, highlight: set, support: dict | None = None, *, width: int = 620,
              outgroup: str | None = None) -> tuple[str, list]:
    """SVG of one tree; returns (svg text, leaf labels top to bottom).

    Parameters
    ----------
    tree : Tree
    taxa : list of str
        Sorted labels (the split bit order; ``taxa[0]`` is the reference).
    highlight : set of int
        Split bitsets to draw in colour.
    support : dict, optional
        Split bitset -> fraction of replicates, printed as a percentage.

    Examples
    --------
    >>> from seqdist.core.tree import Node, Tree
    >>> t = Tree(Node(children=[Node("a", 1.0), Node("b", 2.0), Node("c", 0.5)]))
    >>> svg, order = draw_tree(t, ["a", "b", "c"], set())
    >>> svg.startswith("<svg"), order
    (True, ['a', 'b', 'c'])
    """
    return draw_trees([tree], taxa, [highlight], [support], width=width, outgroup=outgroup)[0]


def svg_download(svg: str, filename: str, text: str = "SVG") -> str:
    """A link that saves ``svg`` as a standalone file (a ``data:`` address; no script).

    Examples
    --------
    >>> svg_download('<svg xmlns="http://www.w3.org/2000/svg"/>', "f.svg")[:46]
    '<a class="svg-file" download="f.svg" href="dat'
    """
    data = base64.b64encode(f'<?xml version="1.0" encoding="UTF-8"?>\n{svg}\n'.encode("utf-8")).decode("ascii")
    return (f'<a class="svg-file" download="{_esc(filename)}" href="data:image/svg+xml;base64,{data}" '
            f'title="save this figure as an SVG file">{_esc(text)}</a>')


def _file_stem(name: str) -> str:
    return re.sub(r"[^a-z0-9]+", "_", name.lower()).strip("_") or "figure"


# ------------------------------------------------------------------ heatmap
def _cell_paths(cols: np.ndarray, x0: float, y0: float, cell: float) -> str:
    """Cells as one path per colour, runs along a row merged, on a neutral ground
    (compact: an unchanged cell costs nothing)."""
    n = cols.shape[0]
    key = (cols[..., 0].astype(np.int64) << 16) | (cols[..., 1].astype(np.int64) << 8) | cols[..., 2]
    ground = int(MID_RGB[0]) << 16 | int(MID_RGB[1]) << 8 | int(MID_RGB[2])
    runs: dict[int, list] = {}
    for i in range(n):
        row = key[i]
        cuts = np.flatnonzero(np.diff(row)) + 1
        starts = np.concatenate(([0], cuts))
        ends = np.concatenate((cuts, [n]))
        for a, b in zip(starts.tolist(), ends.tolist()):
            c = int(row[a])
            if c != ground:
                runs.setdefault(c, []).append(f"M{x0 + a * cell:.2f} {y0 + i * cell:.2f}h{(b - a) * cell:.2f}"
                                              f"v{cell:.2f}h{-(b - a) * cell:.2f}z")
    parts = [f'<g shape-rendering="crispEdges"><rect x="{x0}" y="{y0}" width="{n * cell:.2f}" '
             f'height="{n * cell:.2f}" fill="{_hex(MID_RGB)}"/>']
    parts += [f'<path fill="#{c:06x}" d="{"".join(d)}"/>' for c, d in sorted(runs.items())]
    parts.append("</g>")
    return "".join(parts)


def draw_heatmap(change: np.ndarray, labels: list, size: int = 560, made_up: np.ndarray | None = None,
                 tooltips: bool = True) -> str:
    """SVG heatmap of ``after - before`` with a diverging legend.

    NaN cells are missing before and filled after: grey when filled from
    evidence, black where ``made_up`` is true (filled without evidence).
    With ``tooltips`` (the page) every cell is a rectangle with its pair and
    change as a tooltip up to ``MAX_RECT_HEATMAP`` taxa, an embedded image
    above; without (a file to save) the cells are vector shapes up to
    ``MAX_VECTOR_HEATMAP`` taxa, one path per colour.

    Examples
    --------
    >>> svg = draw_heatmap(np.array([[0, 0.5], [0.5, 0]]), ["a", "b"])
    >>> svg.count("<rect") >= 4 and "<title>a - b: +0.5</title>" in svg
    True
    """
    n = change.shape[0]
    filled = np.isnan(change)
    np.fill_diagonal(filled, False)
    made_up = np.zeros_like(filled) if made_up is None else (np.asarray(made_up, dtype=bool) & filled)
    filled_ev = filled & ~made_up
    change = np.where(np.isnan(change), 0.0, change)
    vmax = float(np.abs(change).max()) if change.size else 0.0
    labelled = n <= MAX_RECT_HEATMAP
    vector = labelled if tooltips else n <= MAX_VECTOR_HEATMAP
    font = max(5.0, min(11.0, size / n * 0.8)) if labelled else 0.0
    margin = (min(160.0, 0.6 * font * max(len(x) for x in labels) + 8)) if labelled else 10.0
    cell = size / n
    legend_h = 70 + 22 * (int(filled_ev.any()) + int(made_up.any()))
    W = margin + size + 20
    H = margin + size + legend_h
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" class="heatmap" width="{W:.0f}" height="{H:.0f}" '
             f'viewBox="0 0 {W:.0f} {H:.0f}" font-family="Helvetica,Arial,sans-serif">']
    if vector:
        cols = _colour(change, vmax)
        cols[filled] = FILLED_RGB
        cols[made_up] = MADE_UP_RGB
    if vector and not tooltips:
        parts.append(_cell_paths(cols, margin, margin, cell))
    elif vector:
        for i in range(n):
            for j in range(n):
                title = (labels[i] if i == j else f"{labels[i]} - {labels[j]}: missing before, filled without evidence"
                         if made_up[i, j] else f"{labels[i]} - {labels[j]}: missing before, filled by a path"
                         if filled[i, j] else f"{labels[i]} - {labels[j]}: {change[i, j]:+.6g}")
                parts.append(f'<rect x="{margin + j * cell:.2f}" y="{margin + i * cell:.2f}" width="{cell:.2f}" '
                             f'height="{cell:.2f}" fill="{_hex(cols[i, j])}"><title>{_esc(title)}</title></rect>')
    if labelled:
        for i, lab in enumerate(labels):
            yc = margin + (i + 0.5) * cell + font * 0.35
            parts.append(f'<text x="{margin - 3:.2f}" y="{yc:.2f}" font-size="{font:.1f}" '
                         f'text-anchor="end">{_esc(lab)}</text>')
            xc = margin + (i + 0.5) * cell + font * 0.35
            parts.append(f'<text x="{xc:.2f}" y="{margin - 3:.2f}" font-size="{font:.1f}" '
                         f'transform="rotate(-90 {xc:.2f} {margin - 3:.2f})">{_esc(lab)}</text>')
    if not vector:
        # Downsample to at most MAX_HEATMAP_PIXELS per side, keeping in each
        # block the change of largest magnitude so that single entries stay visible.
        k = int(np.ceil(n / MAX_HEATMAP_PIXELS))
        m = int(np.ceil(n / k))
        pad = np.zeros((m * k, m * k))
        pad[:n, :n] = change
        blocks = pad.reshape(m, k, m, k).transpose(0, 2, 1, 3).reshape(m, m, k * k)
        pick = np.take_along_axis(blocks, np.abs(blocks).argmax(axis=2)[..., None], axis=2)[..., 0]
        fpad = np.zeros((m * k, m * k), dtype=bool)
        fpad[:n, :n] = filled
        rgb = _colour(pick, vmax)
        rgb[fpad.reshape(m, k, m, k).any(axis=(1, 3))] = FILLED_RGB
        mpad = np.zeros((m * k, m * k), dtype=bool)
        mpad[:n, :n] = made_up
        rgb[mpad.reshape(m, k, m, k).any(axis=(1, 3))] = MADE_UP_RGB
        data = base64.b64encode(png_bytes(rgb)).decode("ascii")
        parts.append(f'<image x="{margin}" y="{margin}" width="{size}" height="{size}" '
                     f'style="image-rendering:pixelated" preserveAspectRatio="none" '
                     f'href="data:image/png;base64,{data}"/>')
    parts.append(f'<rect x="{margin}" y="{margin}" width="{size}" height="{size}" fill="none" stroke="#999"/>')
    # legend
    ly = margin + size + 22
    lx = margin + size / 2 - 150
    if vmax > 0:
        parts.append('<defs><linearGradient id="div" x1="0" x2="1" y1="0" y2="0">'
                     f'<stop offset="0" stop-color="{_hex(NEG_RGB)}"/><stop offset="0.5" stop-color="{_hex(MID_RGB)}"/>'
                     f'<stop offset="1" stop-color="{_hex(POS_RGB)}"/></linearGradient></defs>')
        parts.append(f'<rect x="{lx:.1f}" y="{ly:.1f}" width="300" height="12" fill="url(#div)" stroke="#999"/>')
        for frac, val in ((0.0, -vmax), (0.25, -vmax / 4), (0.5, 0.0), (0.75, vmax / 4), (1.0, vmax)):
            parts.append(f'<text x="{lx + 300 * frac:.1f}" y="{ly + 28:.1f}" font-size="11" '
                         f'text-anchor="middle">{_num(val) if val else "0"}</text>')
        parts.append(f'<text x="{lx:.1f}" y="{ly - 5:.1f}" font-size="11">decreased</text>')
        parts.append(f'<text x="{lx + 300:.1f}" y="{ly - 5:.1f}" font-size="11" text-anchor="end">increased</text>')
        parts.append(f'<text x="{lx + 150:.1f}" y="{ly + 44:.1f}" font-size="11" text-anchor="middle">'
                     'after - before (square-root colour scale)</text>')
    else:
        parts.append(f'<text x="{lx + 150:.1f}" y="{ly + 12:.1f}" font-size="12" text-anchor="middle">'
                     'no measured entry changed</text>')
    y = ly + 52
    for mask, rgb, text in ((filled_ev, FILLED_RGB, "missing before, filled by a path of measured entries"),
                            (made_up, MADE_UP_RGB, "missing before, filled without evidence (a made-up value)")):
        if mask.any():
            parts.append(f'<rect x="{lx:.1f}" y="{y:.1f}" width="12" height="12" fill="{_hex(rgb)}"/>'
                         f'<text x="{lx + 17:.1f}" y="{y + 10:.1f}" font-size="11">{text}</text>')
            y += 22
    parts.append("</svg>")
    return "".join(parts)


# --------------------------------------------------------------- the page
def _split_rows(split_list, support, taxa, limit=60) -> str:
    pos = {lab: k for k, lab in enumerate(taxa)}
    rows = []
    for labels in split_list[:limit]:
        shown = ", ".join(labels[:25]) + (f" ... (+{len(labels) - 25})" if len(labels) > 25 else "")
        cells = f'<td>{len(labels)}</td><td class="l">{_esc(shown)}</td>'
        if support is not None:
            mask = sum(1 << pos[x] for x in labels)
            sb, sa = support.get(mask, (0.0, 0.0))
            cells += f"<td>{100 * sb:.0f}%</td><td>{100 * sa:.0f}%</td>"
        rows.append(f"<tr>{cells}</tr>")
    if len(split_list) > limit:
        rows.append(f'<tr><td colspan="4" class="l note">... and {len(split_list) - limit} more '
                    '(see the JSON)</td></tr>')
    return "".join(rows)


def render_html(res: ImpactResult, names: tuple[str, str] = ("before", "after"), title: str | None = None,
                outgroup: str | None = None, preamble: str | None = None, reference: str | None = None,
                command: str | None = None, made_up_pairs: Collection[tuple[str, str]] | None = None,
                lead: str | None = None, extra_trees: Iterable[tuple[str, Tree]] | None = None) -> str:
    """The whole page as text (see module docs).

    ``preamble`` is trusted html placed after the summary and caution (the
    whole-job report of ``seqdist run`` puts its data, audit and repair
    section there); ``lead`` is trusted html placed before the summary.
    ``reference`` names the reference tree's file and ``command`` the
    command that made the page (both shown on it). ``made_up_pairs`` holds
    ``(label, label)`` pairs filled without evidence (drawn apart in the
    heatmap). ``extra_trees`` is a list of ``(name, Tree)`` drawn after the
    two compared trees (e.g. the other choice about suspect sequences).

    Examples
    --------
    >>> from seqdist import DistanceMatrix
    >>> from seqdist.impact.compare import impact
    >>> D = np.array([[0, 3, 4, 6], [3, 0, 5, 7], [4, 5, 0, 4], [6, 7, 4, 0.]])
    >>> a = DistanceMatrix.from_array(D, list("abcd"))
    >>> page = render_html(impact(a, a))
    >>> page.startswith("<!DOCTYPE html>") and "<script" not in page
    True
    """
    r = res.report
    taxa = res.taxa
    n = len(taxa)
    nb, na = res.splits_before, res.splits_after
    sup = res.support
    sup_b = {m: v[0] for m, v in sup.items()} if sup else None
    sup_a = {m: v[1] for m, v in sup.items()} if sup else None
    out = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
           f"<title>{_esc(title or 'seqdist tree impact report')}</title>", f"<style>{CSS}</style></head><body>"]
    out.append("<h1>How the matrix change affects the tree</h1>")
    ref = f" &middot; reference tree {_esc(reference)}" if reference and r.has_truth else ""
    of_all = f" (of {r.n:,})" if r.n != n else ""
    out.append(f'<p class="files">{_esc(names[0])} &rarr; {_esc(names[1])} &middot; method '
               f'{_esc(r.method.upper())} &middot; trees compared on {n:,} taxa{of_all}{ref} &middot; '
               f'tolerance {_num(r.tol, 3)}</p>')
    if lead:
        out.append(lead)
    out.append('<div class="summary">' + "".join(f"<p>{_esc(x)}</p>" for x in summary_lines(r, names)) + "</div>")
    out.append(f'<div class="caution"><b>Caution.</b> {_esc(CAUTION)}</div>')
    if preamble:
        out.append(preamble)

    # trees
    out.append("<h2>Trees</h2>")
    root_note = ("UPGMA trees are rooted." if res.tree_before.rooted else
                 f"Unrooted trees, drawn rooted on the branch to {_esc(outgroup or taxa[0])} (a fixed "
                 "reference taxon, the same for every tree).")
    if n <= MAX_TREE_LEAVES:
        extra = [(name, tree) for name, tree in extra_trees or []]
        drawn = [(names[0], res.tree_before), (names[1], res.tree_after)] + extra
        k = len(drawn)
        # one scale for all trees; a narrower drawing when three share a row
        svgs = draw_trees([tree for _, tree in drawn], taxa, [nb - na, na - nb] + [set()] * len(extra),
                          [sup_b, sup_a] + [None] * len(extra), width=620 if k <= 2 else 420, outgroup=outgroup)
        (svg_b, order_b), (_, order_a) = svgs[0], svgs[1]
        order = order_b if len(order_b) >= len(order_a) else order_a
        step = re.search(r'class="scale-label"[^>]*>([^<]*)<', svg_b).group(1)
        out.append('<figure class="fig">')
        out.append(f'<p class="note">{root_note}<span class="key" style="border-color:{HIGHLIGHT}"></span>split '
                   f'found only in this tree<span class="key dash" style="border-color:{PLAIN}"></span>negative '
                   "branch length &middot; // a very long branch drawn shortened (true length written on it)"
                   + (" &middot; green numbers: % of bootstrap replicates with the split" if sup else "")
                   + f" &middot; all trees on one scale (the bar is {step} in each).</p>")
        out.append(f'<div class="trees k{min(k, 3)}">')
        used: set = set()
        for j, ((name, tree), (svg, _)) in enumerate(zip(drawn, svgs)):
            leaves = tree.labels()
            own = len(nontrivial(splits(tree, sorted(leaves)), len(leaves)))
            if j < 2:
                only = len(nb - na) if j == 0 else len(na - nb)
                cmp = "" if len(leaves) == n else f" on the {n:,} compared taxa"
                head = (f"{_esc(name)}: {len(leaves):,} taxa, {own:,} splits; {only} of its splits{cmp} "
                        "not in the other tree")
            else:
                head = f"{_esc(name)}: {len(leaves):,} taxa, {own:,} splits (for comparison)"
            stem = "tree_" + _file_stem(name)
            while stem in used:
                stem += "_"
            used.add(stem)
            out.append(f'<div class="panel"><h3>{head}</h3>{svg}'
                       f'<p class="dl">{svg_download(svg, stem + ".svg", "save as SVG")}</p></div>')
        out.append("</div></figure>")
    else:
        order = []
        out.append(f'<p class="note">Trees with more than {MAX_TREE_LEAVES:,} taxa are not drawn; '
                   "the differing splits are listed below.</p>")

    # heatmap
    out.append("<h2>Matrix change</h2>")
    if n > MAX_TREE_LEAVES:
        order = res.tree_before.labels()
    order = [lab for lab in order if lab in set(res.before.labels)]
    order = order + [lab for lab in res.before.labels if lab not in set(order)]
    idx = [res.before.index(lab) for lab in order]
    change = (np.asarray(res.after.values) - np.asarray(res.before.values))[np.ix_(idx, idx)]
    made_up = None
    if made_up_pairs:
        pos_o = {lab: k for k, lab in enumerate(order)}
        made_up = np.zeros(change.shape, dtype=bool)
        for a, b in made_up_pairs:
            if a in pos_o and b in pos_o:
                made_up[pos_o[a], pos_o[b]] = made_up[pos_o[b], pos_o[a]] = True
    n_made_up = int(np.triu(made_up, 1).sum()) if made_up is not None else 0
    filled_note = (f'{_num(r.entries_filled)} missing entries filled'
                   + (f" ({n_made_up:,} of them filled without evidence)" if n_made_up else ""))
    out.append('<figure class="fig">')
    out.append(f'<p class="note">after - before on the {len(order):,} taxa of both matrices, rows and columns '
               f'in the leaf order of the tree drawn above. Of {_num(r.entries_measured)} '
               f'measured entries, {_num(r.entries_increased)} increased and {_num(r.entries_decreased)} '
               f'decreased (by more than the tolerance); {filled_note}; total absolute change '
               f'{_num(r.l1_change)}, largest {_num(r.max_change)}.</p>')
    saved = draw_heatmap(change, order, made_up=made_up, tooltips=False)
    out.append(f'<div class="panel heat">{draw_heatmap(change, order, made_up=made_up)}'
               f'<p class="dl">{svg_download(saved, "matrix_change.svg", "save as SVG")}</p></div></figure>')

    # triangles and measures
    out.append("<h2>Triangle inequality and measures</h2>")
    tri = max(1, r.triangles)

    def bar(count):
        return f' <span class="bar" style="width:{120 * count / tri:.1f}px"></span> {100 * count / tri:.2f}% of {tri:,}'

    measures = [
        ("violated triangles", r.violated_triangles_before, r.violated_triangles_after, 4),
        ("largest violation", r.max_violation_before, r.max_violation_after, 4),
        ("negative branches", r.negative_branches_before, r.negative_branches_after, 4),
        ("tree length", r.tree_length_before, r.tree_length_after, 6),
        ("cophenetic correlation (tree vs its matrix)", r.cophenetic_before, r.cophenetic_after, 6),
        ("non-trivial splits", r.splits_before, r.splits_after, 4),
    ]
    if r.has_truth:
        measures += [
            ("Robinson-Foulds to the reference tree", r.rf_to_truth_before, r.rf_to_truth_after, 4),
            ("branch score to the reference tree", r.branch_score_to_truth_before, r.branch_score_to_truth_after, 4),
        ]
    rows = []
    for k, (label, vb, va, digits) in enumerate(measures):
        extra_b, extra_a = (bar(vb), bar(va)) if k == 0 else ("", "")
        rows.append(f'<tr><td class="l">{label}</td><td class="l">{_num(vb, digits)}{extra_b}</td>'
                    f'<td class="l">{_num(va, digits)}{extra_a}</td></tr>')
    out.append(f'<p class="note">On the {n:,} taxa both trees hold ({r.triangles:,} triangles, every one '
               'checked); tree lengths and correlations of the trees restricted to them.</p>')
    out.append(f'<table><tr><th class="l"></th><th class="l">{_esc(names[0])}</th><th class="l">{_esc(names[1])}'
               f'</th></tr>{"".join(rows)}</table>')
    out.append(f'<p class="note">Robinson-Foulds distance between the trees: {r.rf} of at most {r.rf_max} '
               f'(normalised {r.rf_normalized:.4g}); branch score distance {r.branch_score:.6g} '
               "(Kuhner &amp; Felsenstein 1994). Triangle counts use the tolerance above.</p>")

    # splits
    out.append("<h2>Splits that differ</h2>")
    head = "<tr><th>taxa</th><th class=\"l\">one side of the split (the side without " \
           f"{_esc(taxa[0])})</th>" + ("<th>support before</th><th>support after</th>" if sup else "") + "</tr>"
    for name, lst in ((names[0], r.splits_only_before), (names[1], r.splits_only_after)):
        out.append(f"<h3>Only in the {_esc(name)} tree ({len(lst)})</h3>")
        if lst:
            out.append(f'<table class="splits">{head}{_split_rows(lst, sup, taxa)}</table>')
        else:
            out.append('<p class="note">none</p>')
    if sup and r.support is not None:
        s = r.support
        out.append(f'<p class="note">Support from {s.replicates} bootstrap replicates of the alignment '
                   f'(model {_esc(s.model)}, repair objective {_esc(s.objective)}, seed {s.seed}).</p>')

    # largest changes
    if r.largest_changes:
        out.append("<h2>Largest entry changes</h2>")
        rows = "".join(f'<tr><td class="l">{_esc(c.a)}</td><td class="l">{_esc(c.b)}</td>'
                       f'<td>{_num(c.before, 6)}</td><td>{_num(c.after, 6)}</td><td>{c.change:+.4g}</td></tr>'
                       for c in r.largest_changes)
        out.append(f'<table><tr><th class="l">taxon</th><th class="l">taxon</th><th>before</th><th>after</th>'
                   f"<th>change</th></tr>{rows}</table>")
    from seqdist import __version__

    made_by = f" &middot; made by <code>{_esc(command)}</code>" if command else ""
    out.append(f'<p class="note" style="margin-top:30px">seqdist {__version__}{made_by}. Definitions and '
               "sources: the seqdist documentation (docs/trees.md in its source repository).</p>")
    out.append("</body></html>\n")
    return "\n".join(out)
