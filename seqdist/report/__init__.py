"""The self-contained html report (no scripts, no external files)."""

from seqdist.report.html import render_html

__all__ = ["render_html"]
