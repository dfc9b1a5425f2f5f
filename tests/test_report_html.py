"""The html report's figures: one scale for all trees, the grid that puts them
side by side, print CSS, and a save-as-SVG link per figure.

The browser check (the layout as Chromium draws it) is tests/test_report_browser.py;
these read the page's text and are fast.
"""

from __future__ import annotations

import base64
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from seqdist import DistanceMatrix
from seqdist.core.tree import Node, Tree
from seqdist.impact.compare import impact
from seqdist.report.html import draw_heatmap, draw_trees, render_html

SVG_NS = "{http://www.w3.org/2000/svg}"


def tree_svgs(page: str) -> list:
    return re.findall(r'<svg[^>]*class="tree".*?</svg>', page, flags=re.S)


def branch_px(svg: str, label: str) -> float:
    """Drawn length in pixels of the branch above leaf ``label``."""
    m = re.search(r'<line x1="([-\d.]+)" y1="[-\d.]+" x2="([-\d.]+)"[^>]*><title>' + re.escape(label) + " length",
                  svg)
    return float(m.group(2)) - float(m.group(1))


def scale_bar(svg: str) -> tuple:
    m = re.search(r'class="scale-bar" x1="([-\d.]+)" y1="[-\d.]+" x2="([-\d.]+)"', svg)
    label = re.search(r'class="scale-label"[^>]*>([^<]*)<', svg).group(1)
    return round(float(m.group(2)) - float(m.group(1)), 2), label


def pair(scale_after: float = 2.0):
    # additive (tree) distances of ((a,b),(c,d),e)-like shape; after = a multiple of before:
    # the same tree with every branch scale_after times as long (common practice)
    D = np.array([[0, 3, 6, 7, 5], [3, 0, 7, 8, 6], [6, 7, 0, 3, 5], [7, 8, 3, 0, 6], [5, 6, 5, 6, 0.]])
    lab = ["a", "b", "c", "d", "e"]
    return DistanceMatrix.from_array(D, lab), DistanceMatrix.from_array(scale_after * D, lab)


def test_trees_drawn_on_one_scale():
    # Fault measured in issue 18: each tree had its own scale (bars 0.1 and 0.2), so a branch twice
    # as long could be drawn as long. Now a branch of the doubled tree is drawn twice as long.
    before, after = pair(2.0)
    page = render_html(impact(before, after))
    svg_b, svg_a = tree_svgs(page)[:2]
    for leaf in "abcde":
        assert branch_px(svg_a, leaf) == pytest.approx(2 * branch_px(svg_b, leaf), rel=1e-3, abs=0.03)
    assert scale_bar(svg_b) == scale_bar(svg_a)  # one bar: same value, same length
    width = {re.search(r'width="(\d+)"', s).group(1) for s in (svg_b, svg_a)}
    assert len(width) == 1  # same width: shown at the same size they keep the same scale


def test_extra_trees_share_the_scale_and_a_third_column():
    before, after = pair(1.5)
    t3 = Tree(Node(children=[Node("a", 4.0), Node("b", 4.0), Node("c", 1.0), Node("d", 1.0), Node("e", 1.0)]))
    page = render_html(impact(before, after), extra_trees=[("other choice", t3)])
    svgs = tree_svgs(page)
    assert len(svgs) == 3 and len({scale_bar(s) for s in svgs}) == 1
    assert '<div class="trees k3">' in page
    # a 4-unit branch in t3 is 4 times a 1-unit one: nothing squashed to fit its own width
    assert branch_px(svgs[2], "b") == pytest.approx(4 * branch_px(svgs[2], "c"), rel=1e-3)


def test_shortened_branch_cap_is_shared():
    # one very long branch in one tree: drawn shortened (break mark) in that tree, and the cap is the
    # same for both trees, so the other branches keep one scale
    lab = list("abcdefgh")
    kids = [Node(x, 1.0) for x in lab[:-1]] + [Node("h", 1.0)]
    t1 = Tree(Node(children=kids))
    kids2 = [Node(x, 1.0) for x in lab[:-1]] + [Node("h", 40.0)]
    t2 = Tree(Node(children=kids2))
    (s1, _), (s2, _) = draw_trees([t1, t2], lab)
    assert branch_px(s1, "b") == pytest.approx(branch_px(s2, "b"), abs=0.02)
    assert ">40<" in s2 and ">40<" not in s1  # the true length written on the shortened branch


def test_grid_side_by_side_and_stacked_only_when_narrow():
    page = render_html(impact(*pair()))
    css = re.search(r"<style>(.*?)</style>", page, flags=re.S).group(1)
    assert re.search(r"\.trees\{display:grid;[^}]*grid-template-columns:repeat\(2,minmax\(0,1fr\)\)", css)
    narrow = re.search(r"@media \(max-width:(\d+)px\)\{\.trees,\.trees\.k3\{grid-template-columns:minmax\(0,1fr\)\}",
                       css)
    assert narrow and int(narrow.group(1)) <= 900  # stacked only below about 900 px
    three = re.search(r"@media \(max-width:(\d+)px\)\{\.trees\.k3\{grid-template-columns:repeat\(2", css)
    assert three and int(three.group(1)) < 1280  # three across at 1280-1440 px windows


def print_block(css: str) -> str:
    start = css.index("@media print{") + len("@media print{")
    depth, k = 1, start
    while depth:
        depth += {"{": 1, "}": -1}.get(css[k], 0)
        k += 1
    return css[start:k - 1]


def luminance(hexcol: str) -> float:
    h = hexcol.lstrip("#")
    if len(h) == 3:
        h = "".join(c * 2 for c in h)
    r, g, b = (int(h[i:i + 2], 16) / 255 for i in (0, 2, 4))
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def test_print_css_keeps_headings_with_figures_and_no_dark_backgrounds():
    page = render_html(impact(*pair()))
    css = re.search(r"<style>(.*?)</style>", page, flags=re.S).group(1)
    pr = print_block(css)
    assert re.search(r"h1,h2,h3\{break-after:avoid", pr)
    assert re.search(r"figure[^{]*\{break-inside:avoid", pr)
    assert "@page{margin:" in pr
    # each figure's heading is followed by the figure itself (its note inside it), so the
    # heading cannot be left alone at the foot of a page
    for head in ("Trees", "Matrix change"):
        assert re.search(rf"<h2>{head}</h2>\s*<figure class=\"fig\">", page), head
    # no dark background anywhere (common practice for print: light grounds only)
    for col in re.findall(r"background:(#[0-9a-fA-F]{3,6})", css):
        if col != "#b2182b":  # the small bar chart of violated triangles is data, not a ground
            assert luminance(col) > 0.85, col


def downloads(page: str) -> dict:
    return {name: base64.b64decode(data).decode("utf-8") for name, data in
            re.findall(r'<a class="svg-file" download="([^"]+)" href="data:image/svg\+xml;base64,([^"]+)"', page)}


def test_every_figure_has_a_standalone_svg_file():
    before, after = pair()
    E = after.values.copy()
    page = render_html(impact(before, DistanceMatrix.from_array(E, after.labels)))
    files = downloads(page)
    assert sorted(files) == ["matrix_change.svg", "tree_after.svg", "tree_before.svg"]
    for name, text in files.items():
        assert text.startswith('<?xml version="1.0" encoding="UTF-8"?>')
        root = ET.fromstring(text.split("\n", 1)[1])  # well-formed XML
        assert root.tag == SVG_NS + "svg" and root.get("width") and root.get("viewBox"), name
    # the saved tree is the drawn one
    assert files["tree_before.svg"].split("\n")[1] == tree_svgs(page)[0]
    assert "<script" not in page.lower()
    assert page == render_html(impact(before, DistanceMatrix.from_array(E, after.labels)))  # deterministic


def test_saved_heatmap_is_vector_where_the_page_shows_an_image():
    rng = np.random.default_rng(3)
    n = 120
    X = rng.uniform(0, 1, (n, 2))
    D = np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1))
    E = D.copy()
    E[0, 1] = E[1, 0] = D[0, 1] + 0.5
    lab = [f"t{k}" for k in range(n)]
    page = render_html(impact(DistanceMatrix.from_array(D, lab), DistanceMatrix.from_array(E, lab)))
    saved = downloads(page)["matrix_change.svg"]
    assert "data:image/png" not in saved and "<path" in saved
    root = ET.fromstring(saved.split("\n", 1)[1])
    paths = root.findall(f".//{SVG_NS}path")
    # the one increased pair: two cells (i, j) and (j, i) in the darkest red, every other cell
    # unchanged (the neutral ground)
    assert [p.get("fill") for p in paths] == ["#b2182b"]
    assert paths[0].get("d").count("z") == 2
    assert len(saved) < 20_000


def test_saved_heatmap_size_stays_sensible_when_everything_changes():
    # worst case for the vector form: every entry changed by a different amount
    rng = np.random.default_rng(4)
    n = 200
    C = rng.normal(size=(n, n))
    C = C + C.T
    np.fill_diagonal(C, 0)
    svg = draw_heatmap(C, [f"t{k}" for k in range(n)], tooltips=False)
    assert "<image" not in svg and svg.count("z") >= n * (n - 1) // 2
    assert len(svg) < 2_000_000
    svg_big = draw_heatmap(np.zeros((201, 201)), [f"t{k}" for k in range(201)], tooltips=False)
    assert "<image" in svg_big  # above 200 taxa: an image inside the SVG
