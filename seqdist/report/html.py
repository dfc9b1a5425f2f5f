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
import struct
import zlib

import numpy as np

from seqdist.core.tree import Tree, rooted_for_drawing
from seqdist.impact.compare import CAUTION, ImpactResult, summary_lines
from seqdist.trees.compare import nontrivial, splits

__all__ = ["png_bytes", "draw_tree", "draw_heatmap", "render_html"]

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
MAX_HEATMAP_PIXELS = 800

CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',Helvetica,Arial,sans-serif;margin:24px;color:#222;
max-width:1400px;line-height:1.45}
h1{font-size:1.6em;margin:0 0 4px} h2{font-size:1.2em;margin:28px 0 8px;border-bottom:1px solid #ddd;
padding-bottom:3px} .files{color:#555;margin:0 0 14px;font-size:.95em}
.summary{background:#f3f6fa;border-left:4px solid #2166ac;padding:10px 14px;font-size:1.05em}
.summary p{margin:4px 0}
.caution{background:#fff7e0;border-left:4px solid #e0a100;padding:8px 14px;margin-top:10px}
.pair{display:flex;gap:18px;flex-wrap:wrap;align-items:flex-start}
.panel{border:1px solid #e2e2e2;padding:8px;background:#fff}
.panel h3{margin:0 0 4px;font-size:1em}
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
def _ladderised(tree: Tree, rank: dict) -> None:
    first: dict[int, int] = {}
    for node in tree.postorder():
        if node.is_leaf:
            first[id(node)] = rank[node.name]
        else:
            node.children.sort(key=lambda c: first[id(c)])
            first[id(node)] = first[id(node.children[0])]


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
    """
    t = rooted_for_drawing(tree, outgroup if outgroup is not None else taxa[0])
    # taxa left out of the comparison sort after the compared ones
    rank = {lab: k for k, lab in enumerate(taxa)}
    for k, lab in enumerate(sorted(x for x in t.labels() if x not in rank)):
        rank[lab] = len(taxa) + k
    _ladderised(t, rank)
    n_all = len(rank)
    n = len(taxa)
    full = (1 << n) - 1
    pos = {lab: k for k, lab in enumerate(taxa)}
    labelled = n_all <= MAX_LABELLED_LEAVES
    dy = max(2.0, min(18.0, 900.0 / n_all)) if labelled else max(0.6, 900.0 / n_all)
    font = max(6.0, min(12.0, dy * 0.8))
    longest = max(len(lab) + (2 if lab not in pos else 0) for lab in rank)
    label_w = min(260.0, 0.62 * font * longest + 12) if labelled else 6.0
    top, bottom, left = 10.0, 40.0, 12.0
    # depth (x) and row (y) of every node
    # Display lengths: a branch far longer than the rest (e.g. a saturated
    # taxon) would squash the drawing, so it is drawn shortened with a break
    # mark and its true length written beside it.
    lengths = np.array([abs(float(b.length or 0.0)) for b in t.branches()])
    cap = 3.0 * float(np.quantile(lengths, 0.95)) if lengths.size else 0.0
    broken: set[int] = set()
    depth: dict[int, float] = {id(t.root): 0.0}
    for node in t.preorder():
        for c in node.children:
            ln = float(c.length or 0.0)
            if cap > 0 and ln > cap:
                broken.add(id(c))
                ln = cap
            depth[id(c)] = depth[id(node)] + ln
    leaves = t.leaves()
    ys: dict[int, float] = {}
    masks: dict[int, int] = {}
    for k, leaf in enumerate(leaves):
        ys[id(leaf)] = top + (k + 0.5) * dy
    for node in t.postorder():
        if node.is_leaf:
            masks[id(node)] = 1 << pos[node.name] if node.name in pos else 0
        else:
            ys[id(node)] = 0.5 * (ys[id(node.children[0])] + ys[id(node.children[-1])])
            m = 0
            for c in node.children:
                m |= masks[id(c)]
            masks[id(node)] = m
    xs = list(depth.values())
    lo, hi = min(0.0, min(xs)), max(xs)
    span = hi - lo if hi > lo else 1.0
    plot_w = width - left - label_w - 8
    sx = plot_w / span

    def X(v: float) -> float:
        return left + (v - lo) * sx

    height = top + n_all * dy + bottom
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height:.0f}" '
             f'viewBox="0 0 {width} {height:.0f}" font-family="Helvetica,Arial,sans-serif">']
    lw = 1.6 if dy >= 4 else 1.0
    for node in t.preorder():
        if node is t.root:
            pass
        if node.children:
            y0, y1 = ys[id(node.children[0])], ys[id(node.children[-1])]
            parts.append(f'<line x1="{X(depth[id(node)]):.2f}" y1="{y0:.2f}" x2="{X(depth[id(node)]):.2f}" '
                         f'y2="{y1:.2f}" stroke="{PLAIN}" stroke-width="{lw}"/>')
        if node is t.root:
            continue
        m = masks[id(node)]
        if m & 1:
            m ^= full
        hl = m in highlight
        colour = HIGHLIGHT if hl else PLAIN
        w = lw * 2 if hl else lw
        dash = ' stroke-dasharray="4,2"' if (node.length or 0.0) < 0 else ""
        x0, x1, y = X(depth[id(node.parent)]), X(depth[id(node)]), ys[id(node)]
        parts.append(f'<line x1="{x0:.2f}" y1="{y:.2f}" x2="{x1:.2f}" y2="{y:.2f}" stroke="{colour}" '
                     f'stroke-width="{w}"{dash}><title>{_esc(node.name) if node.is_leaf else "branch"} '
                     f'length {_num(node.length, 6)}</title></line>')
        if hl:
            parts.append(f'<circle cx="{x1:.2f}" cy="{y:.2f}" r="3.5" fill="{HIGHLIGHT}"/>')
        if id(node) in broken:
            xm = 0.5 * (x0 + x1)
            for dx in (-3.0, 3.0):
                parts.append(f'<line x1="{xm + dx - 2:.2f}" y1="{y + 4:.2f}" x2="{xm + dx + 2:.2f}" '
                             f'y2="{y - 4:.2f}" stroke="#000" stroke-width="1"/>')
            parts.append(f'<text x="{xm:.2f}" y="{y - 3:.2f}" font-size="{max(6.0, font - 2):.1f}" '
                         f'text-anchor="middle" fill="#555">{_num(node.length)}</text>')
        if support is not None and not node.is_leaf and 2 <= m.bit_count() <= n - 2 and m in support and labelled:
            pct = int(round(100 * support[m]))
            parts.append(f'<text x="{x1 - 2:.2f}" y="{y - 2:.2f}" font-size="{max(6.0, font - 2):.1f}" '
                         f'text-anchor="end" fill="#1b7837">{pct}</text>')
        if node.is_leaf and labelled:
            odd = node.name not in pos  # not compared (left out of the other tree)
            style = ' fill="#888" font-style="italic"' if odd else f' fill="{PLAIN}"'
            parts.append(f'<text x="{x1 + 4:.2f}" y="{y + font * 0.35:.2f}" font-size="{font:.1f}"{style}>'
                         f'{_esc(node.name)}{" *" if odd else ""}</text>')
    # scale bar
    step = _nice_step(span)
    yb = top + n_all * dy + 22
    parts.append(f'<line x1="{left:.2f}" y1="{yb:.2f}" x2="{left + step * sx:.2f}" y2="{yb:.2f}" '
                 f'stroke="#000" stroke-width="1.5"/>')
    parts.append(f'<text x="{left + step * sx + 6:.2f}" y="{yb + 4:.2f}" font-size="11">{_num(step)}</text>')
    parts.append("</svg>")
    return "".join(parts), [leaf.name for leaf in leaves]


# ------------------------------------------------------------------ heatmap
def draw_heatmap(change: np.ndarray, labels: list, size: int = 560, made_up: np.ndarray | None = None) -> str:
    """SVG heatmap of ``after - before`` with a diverging legend.

    NaN cells are missing before and filled after: grey when filled from
    evidence, black where ``made_up`` is true (filled without evidence).
    """
    n = change.shape[0]
    filled = np.isnan(change)
    np.fill_diagonal(filled, False)
    made_up = np.zeros_like(filled) if made_up is None else (np.asarray(made_up, dtype=bool) & filled)
    filled_ev = filled & ~made_up
    change = np.where(np.isnan(change), 0.0, change)
    vmax = float(np.abs(change).max()) if change.size else 0.0
    labelled = n <= MAX_RECT_HEATMAP
    font = max(5.0, min(11.0, size / n * 0.8)) if labelled else 0.0
    margin = (min(160.0, 0.6 * font * max(len(x) for x in labels) + 8)) if labelled else 10.0
    cell = size / n
    legend_h = 70 + 22 * (int(filled_ev.any()) + int(made_up.any()))
    W = margin + size + 20
    H = margin + size + legend_h
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{W:.0f}" height="{H:.0f}" '
             f'viewBox="0 0 {W:.0f} {H:.0f}" font-family="Helvetica,Arial,sans-serif">']
    if labelled:
        cols = _colour(change, vmax)
        cols[filled] = FILLED_RGB
        cols[made_up] = MADE_UP_RGB
        for i in range(n):
            for j in range(n):
                title = (labels[i] if i == j else f"{labels[i]} - {labels[j]}: missing before, filled without evidence"
                         if made_up[i, j] else f"{labels[i]} - {labels[j]}: missing before, filled by a path"
                         if filled[i, j] else f"{labels[i]} - {labels[j]}: {change[i, j]:+.6g}")
                parts.append(f'<rect x="{margin + j * cell:.2f}" y="{margin + i * cell:.2f}" width="{cell:.2f}" '
                             f'height="{cell:.2f}" fill="{_hex(cols[i, j])}"><title>{_esc(title)}</title></rect>')
        for i, lab in enumerate(labels):
            yc = margin + (i + 0.5) * cell + font * 0.35
            parts.append(f'<text x="{margin - 3:.2f}" y="{yc:.2f}" font-size="{font:.1f}" '
                         f'text-anchor="end">{_esc(lab)}</text>')
            xc = margin + (i + 0.5) * cell + font * 0.35
            parts.append(f'<text x="{xc:.2f}" y="{margin - 3:.2f}" font-size="{font:.1f}" '
                         f'transform="rotate(-90 {xc:.2f} {margin - 3:.2f})">{_esc(lab)}</text>')
    else:
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
                command: str | None = None, made_up_pairs=None, lead: str | None = None,
                extra_trees=None) -> str:
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
                 "reference taxon, the same for both).")
    out.append(f'<p class="note">{root_note}<span class="key" style="border-color:{HIGHLIGHT}"></span>split '
               f'found only in this tree<span class="key dash" style="border-color:{PLAIN}"></span>negative '
               "branch length &middot; // a very long branch drawn shortened (true length written on it)"
               + (" &middot; green numbers: % of bootstrap replicates with the split" if sup else "")
               + "</p>")
    if n <= MAX_TREE_LEAVES:
        svg_b, order_b = draw_tree(res.tree_before, taxa, nb - na, sup_b, outgroup=outgroup)
        svg_a, order_a = draw_tree(res.tree_after, taxa, na - nb, sup_a, outgroup=outgroup)
        order = order_b if len(order_b) >= len(order_a) else order_a
        out.append('<div class="pair">')
        for name, tree, svg, only in ((names[0], res.tree_before, svg_b, len(nb - na)),
                                      (names[1], res.tree_after, svg_a, len(na - nb))):
            leaves = tree.labels()
            own = len(nontrivial(splits(tree, sorted(leaves)), len(leaves)))
            cmp = "" if len(leaves) == n else f" on the {n:,} compared taxa"
            out.append(f'<div class="panel"><h3>{_esc(name)}: {len(leaves):,} taxa, {own:,} splits; '
                       f'{only} of its splits{cmp} not in the other tree</h3>{svg}</div>')
        for name, tree in extra_trees or []:
            leaves = tree.labels()
            own = len(nontrivial(splits(tree, sorted(leaves)), len(leaves)))
            svg_x, _ = draw_tree(tree, taxa, set(), None, outgroup=outgroup)
            out.append(f'<div class="panel"><h3>{_esc(name)}: {len(leaves):,} taxa, {own:,} splits '
                       f"(for comparison)</h3>{svg_x}</div>")
        out.append("</div>")
        if n > MAX_LABELLED_LEAVES:
            out.append(f'<p class="note">Leaf labels are left out above {MAX_LABELLED_LEAVES} taxa.</p>')
        odd = sorted((set(res.tree_before.labels()) | set(res.tree_after.labels())) - set(taxa))
        if odd:
            reasons = r.left_out_reasons
            out.append('<p class="note">* in one tree only, so not compared: '
                       + _esc("; ".join(f"{lab}" + (f" ({reasons[lab]})" if reasons.get(lab) else "") for lab in odd))
                       + ".</p>")
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
    out.append(f'<p class="note">after - before on the {len(order):,} taxa of both matrices, rows and columns '
               f'in the leaf order of the tree drawn above. Of {_num(r.entries_measured)} '
               f'measured entries, {_num(r.entries_increased)} increased and {_num(r.entries_decreased)} '
               f'decreased (by more than the tolerance); {filled_note}; total absolute change '
               f'{_num(r.l1_change)}, largest {_num(r.max_change)}.</p>')
    out.append(f'<div class="panel" style="display:inline-block">{draw_heatmap(change, order, made_up=made_up)}</div>')

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
