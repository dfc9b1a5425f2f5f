"""Compiled kernels: pure functions on arrays, each beside a plain reference.

* :mod:`~seqdist.kernels.triangles` - violated-triangle counts and the metric test;
* :mod:`~seqdist.kernels.audit_scans` - per-entry and per-taxon violation tallies, quartets;
* :mod:`~seqdist.kernels.shortest_paths` - all-pairs shortest paths (blocked min-plus);
* :mod:`~seqdist.kernels.pair_counts`, :mod:`~seqdist.kernels.pair_bytes` - site-pattern counts
  between sequences;
* :mod:`~seqdist.kernels.tree_building` - neighbor joining, BIONJ and UPGMA loops;
* :mod:`~seqdist.kernels.kept_graph` - paths and insertions over kept sets (shrink, fewest, grow);
* :mod:`~seqdist.kernels.convex` - cycle separation and projections for the l1 and l2 repairs.

They import nothing from seqdist but :mod:`seqdist.core`.
"""

__all__ = []
