"""seqdist: distance matrices from sequence alignments and score matrices.

The package is layered: :mod:`seqdist.matrix` (the labelled matrix type) and
:mod:`seqdist.io` (matrix files) at the bottom, shared compiled kernels in
:mod:`seqdist.metric`, then the feature modules (distances, scores, audit,
repair, trees) and the command line on top.
"""

__version__ = "0.1.0"

from .errors import InfeasibleError, InputError, SeqdistError  # noqa: F401
from .matrix import DistanceMatrix  # noqa: F401
