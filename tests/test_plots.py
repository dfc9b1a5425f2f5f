"""The optional matplotlib figures (seqdist.report.plots), drawn with the Agg backend."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest

matplotlib = pytest.importorskip("matplotlib", reason="matplotlib is the optional plot extra")
matplotlib.use("Agg")

from matplotlib.figure import Figure  # noqa: E402

from seqdist import DistanceMatrix  # noqa: E402
from seqdist.report import plots  # noqa: E402
from seqdist.report.html import HIGHLIGHT  # noqa: E402
from seqdist.trees import read_newick  # noqa: E402

# one nearest-neighbour interchange apart: {a,b} | {c,d,e} against {a,c} | {b,d,e} (common practice)
A = "((a:1,b:1):1,c:1,(d:1,e:1):1);"
B = "((a:2,c:2):2,b:2,(d:2,e:2):2);"


def horizontal(ax) -> dict:
    """Drawn length of each horizontal segment ending at a leaf, by leaf label."""
    ends = {}
    for coll in ax.collections:
        for seg in coll.get_segments():
            (x0, y0), (x1, y1) = seg
            if y0 == y1:
                ends[(round(x1, 9), y1)] = x1 - x0
    out = {}
    for t in ax.texts:
        x, y = t.get_position()
        out[t.get_text().strip()] = ends[(round(x, 9), y)]
    return out


def test_branches_drawn_at_their_true_length():
    ax = plots.plot_tree(read_newick(A), ax=Figure().subplots())
    seg = horizontal(ax)
    # leaf branches of length 1 (the root is placed mid-way on the branch to a: half of it shown)
    assert seg["b"] == pytest.approx(1.0) and seg["c"] == pytest.approx(1.0) and seg["a"] == pytest.approx(0.5)
    assert ax.get_ylim()[0] > ax.get_ylim()[1]  # first leaf at the top


def test_two_trees_on_one_scale_or_not():
    ta, tb = read_newick(A), read_newick(B)
    ax1, ax2 = plots.plot_trees(ta, tb, axes=Figure().subplots(1, 2))
    assert ax1.get_xlim() == ax2.get_xlim()
    assert horizontal(ax2)["d"] == pytest.approx(2 * horizontal(ax1)["d"])
    bx1, bx2 = plots.plot_trees(ta, tb, axes=Figure().subplots(1, 2), same_scale=False)
    assert bx1.get_xlim()[1] < bx2.get_xlim()[1]


def test_splits_in_one_tree_only_are_coloured():
    ax1, ax2 = plots.plot_trees(read_newick(A), read_newick(B), axes=Figure().subplots(1, 2))
    for ax in (ax1, ax2):
        coloured = [c for c in ax.collections if matplotlib.colors.to_hex(c.get_colors()[0]) == HIGHLIGHT]
        assert len(coloured) == 1 and len(coloured[0].get_segments()) == 1  # the one differing split
    same = plots.plot_trees(read_newick(A), read_newick(A), axes=Figure().subplots(1, 2))
    assert all(len(ax.collections) == 1 for ax in same)


def test_change_heatmap_matches_labels_and_shows_missing():
    D = np.array([[0, 3, 4, 5], [3, 0, 5, 6], [4, 5, 0, 7], [5, 6, 7, 0.]])
    before = D.copy()
    before[0, 3] = before[3, 0] = np.nan  # missing before: filled after
    lab = list("wxyz")
    after = D.copy()
    after[1, 2] = after[2, 1] = 5.5
    a = DistanceMatrix.from_array(before, lab)
    perm = [3, 1, 0, 2]  # after in another label order: matched by label, not position
    b = DistanceMatrix.from_array(after[np.ix_(perm, perm)], [lab[k] for k in perm])
    ax = plots.plot_change_heatmap(a, b, ax=Figure().subplots())
    img = ax.images[0].get_array()
    assert img[1, 2] == pytest.approx(0.5) and img[2, 1] == pytest.approx(0.5)
    assert bool(np.ma.getmaskarray(img)[0, 3]) and float(np.ma.filled(img, 0).sum()) == pytest.approx(1.0)
    assert len(ax.figure.axes) == 2  # the colour bar
    # the colour scale is symmetric about zero: unchanged cells are the middle colour
    assert ax.images[0].norm(0.0) == pytest.approx(0.5)
    assert plots.plot_change_heatmap(D, after, ax=Figure().subplots(), colorbar=False).images


def test_default_axes_make_a_figure():
    import matplotlib.pyplot as plt

    ax = plots.plot_tree(read_newick(A))
    axes = plots.plot_trees(read_newick(A), read_newick(B))
    try:
        assert ax.figure is not None and axes[0].figure is axes[1].figure
    finally:
        plt.close("all")


def test_clear_message_without_matplotlib(monkeypatch):
    monkeypatch.setitem(sys.modules, "matplotlib", None)  # import matplotlib now raises ImportError
    with pytest.raises(ImportError, match=r'pip install "seqdist\[plot\]"'):
        plots.plot_tree(read_newick(A))


def test_importing_the_module_does_not_import_matplotlib():
    code = "import sys, seqdist.report.plots, seqdist.report; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "False"
