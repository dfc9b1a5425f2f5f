"""The self-contained html report (no scripts, no external files) and figures for papers.

:mod:`seqdist.report.html` writes the page (trees on one scale side by side,
the heatmap of the change, a save-as-SVG link per figure);
:mod:`seqdist.report.plots` draws the same figures with matplotlib, an
optional extra (``pip install "seqdist[plot]"``), imported only when used.
"""

from seqdist.report.html import draw_trees, layout_trees, render_html

__all__ = ["render_html", "draw_trees", "layout_trees"]
