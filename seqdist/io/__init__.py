"""Reading and writing: matrix files and output staging, alignments, Newick text.

Imports only :mod:`seqdist.core`.
"""

from seqdist.io.alignment import Alignment, read_alignment
from seqdist.io.matrices import OutputSet, format_matrix, read_matrix, write_matrix
from seqdist.io.newick import read_newick, read_newick_file, write_newick

__all__ = ["Alignment", "read_alignment", "read_matrix", "write_matrix", "format_matrix", "OutputSet",
           "read_newick", "read_newick_file", "write_newick"]
