"""The bottom layer: the labelled matrix type, the tree type, errors and the console.

Nothing here imports any other part of seqdist.
"""

from seqdist.core.errors import DataWarning, InfeasibleError, InputError, SeqdistError, SeqdistWarning
from seqdist.core.matrix import DistanceMatrix, default_tol
from seqdist.core.tree import Node, Tree

__all__ = ["DistanceMatrix", "default_tol", "Tree", "Node", "SeqdistError", "InputError", "InfeasibleError",
           "SeqdistWarning", "DataWarning"]
