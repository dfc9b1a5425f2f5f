"""seqdist: distance matrices from sequence alignments and score matrices.

The package is layered, each layer importing only those below it
(docs/contributing.md has the picture):

* :mod:`seqdist.core` - the labelled matrix and tree types, errors, the console;
* :mod:`seqdist.io` - matrix files and output staging, alignments, Newick;
* :mod:`seqdist.kernels` - compiled functions on arrays, each beside a plain reference;
* the families - :mod:`seqdist.models` (distance models), :mod:`seqdist.scores`,
  :mod:`seqdist.audit` (with the suspect taxa), :mod:`seqdist.repair`,
  :mod:`seqdist.trees`, :mod:`seqdist.impact`, :mod:`seqdist.report`, :mod:`seqdist.simulate`;
* :mod:`seqdist.pipeline` (``seqdist run``) and :mod:`seqdist.cli` on top.

The main functions and types are re-exported here (loaded on first use, so
that ``import seqdist`` stays cheap). ``audit``, ``repair`` and ``impact`` are
the names of their subpackages: import those functions from them
(``from seqdist.repair import repair``).

Examples
--------
>>> import seqdist
>>> seqdist.DistanceMatrix.from_array([[0, 1], [1, 0]], ["a", "b"]).n
2
"""

__version__ = "0.1.0"

from seqdist.core.errors import DataWarning, InfeasibleError, InputError, SeqdistError, SeqdistWarning
from seqdist.core.matrix import DistanceMatrix

#: name -> module it is re-exported from (imported on first use)
_LAZY = {
    "Tree": "seqdist.core.tree",
    "Alignment": "seqdist.io.alignment",
    "read_alignment": "seqdist.io.alignment",
    "read_matrix": "seqdist.io.matrices",
    "write_matrix": "seqdist.io.matrices",
    "read_newick": "seqdist.io.newick",
    "pairwise_distances": "seqdist.models.distances",
    "find_suspects": "seqdist.audit.suspects",
    "AuditReport": "seqdist.audit.report",
    "RepairResult": "seqdist.repair.engine",
    "RepairReport": "seqdist.repair.result",
    "build_tree": "seqdist.trees.build",
    "ImpactResult": "seqdist.impact.compare",
    "ImpactReport": "seqdist.impact.result",
    "run_job": "seqdist.pipeline",
}

__all__ = ["__version__", "DistanceMatrix", "SeqdistError", "InputError", "InfeasibleError", "SeqdistWarning",
           "DataWarning", *_LAZY]


def __getattr__(name: str):
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'seqdist' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
