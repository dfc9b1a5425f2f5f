"""seqdist: distance matrices from sequence alignments and score matrices.

The package is layered, each layer importing only those below it
(DEVELOPERS.md has the picture):

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
(``from seqdist.repair import repair``). :func:`set_progress` chooses when
progress bars are drawn (by default only on a terminal); conversions to and
from numpy, pandas, scipy, Biopython and dendropy are in
:mod:`seqdist.io.interop` and docs/python.md. The package ships ``py.typed``:
its public functions are annotated.

Examples
--------
>>> import seqdist
>>> seqdist.DistanceMatrix.from_array([[0, 1], [1, 0]], ["a", "b"]).n
2
"""

__version__ = "0.1.0"

from seqdist.core.console import set_progress
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
    "read_tree_file": "seqdist.io.nexus_trees",
    "majority_consensus": "seqdist.trees.consensus",
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
           "DataWarning", "set_progress", *_LAZY]


def __getattr__(name: str) -> object:
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'seqdist' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))
