"""Distance trees: building, Newick text, comparison and the impact report.

Public API
----------
:class:`Tree`, :class:`Node`
    Our small tree type (``Tree.to_phylo()`` gives a Biopython tree).
:func:`build_tree`, :func:`neighbor_joining`, :func:`bionj`, :func:`upgma`
    Builders on a :class:`~seqdist.core.matrix.DistanceMatrix`.
:func:`write_newick`, :func:`read_newick`, :func:`read_newick_file`
    Newick text.
:func:`read_tree_file`, :func:`write_nexus_trees`, :func:`read_nexus_trees`
    NEXUS TREES blocks (see :mod:`seqdist.io.nexus_trees`); ``read_newick_file``
    and ``read_tree_file`` read either format.
:func:`compare_trees`, :func:`splits`, :func:`robinson_foulds`,
:func:`branch_score`, :func:`cophenetic_correlation`
    Comparison measures (see :mod:`seqdist.trees.compare`).
:func:`majority_consensus`, :func:`set_support`
    Majority-rule consensus with split frequencies as support (see
    :mod:`seqdist.trees.consensus`).

Examples
--------
>>> from seqdist import DistanceMatrix
>>> dm = DistanceMatrix.from_array([[0, 3, 4], [3, 0, 5], [4, 5, 0]], list("abc"))
>>> build_tree(dm, "nj").to_newick()
'(a:1.0,b:2.0,c:3.0);\\n'
"""

from seqdist.core.tree import Node, Tree, rooted_for_drawing  # noqa: F401
from seqdist.io.newick import quote_label, read_newick, read_newick_file, write_newick  # noqa: F401
from seqdist.io.nexus_trees import read_nexus_trees, read_tree_file, write_nexus_trees  # noqa: F401
from seqdist.trees.build import METHODS, bionj, build_tree, check_matrix, neighbor_joining, upgma  # noqa: F401
from seqdist.trees.compare import branch_score, compare_trees, cophenetic_correlation, robinson_foulds, splits  # noqa: F401
from seqdist.trees.consensus import majority_consensus, set_support  # noqa: F401

__all__ = ["Tree", "Node", "rooted_for_drawing", "build_tree", "neighbor_joining", "bionj", "upgma", "METHODS",
           "check_matrix", "write_newick", "read_newick", "read_newick_file", "quote_label", "compare_trees",
           "splits", "robinson_foulds", "branch_score", "cophenetic_correlation", "read_tree_file",
           "read_nexus_trees", "write_nexus_trees", "majority_consensus", "set_support"]
