"""The repair objectives: one frozen entry each, read by the engine, the CLI, the docs and the tests.

A new objective is one module in :mod:`seqdist.repair` (with ``solve(problem)``
and an ``OPTIONS`` declaration) plus one entry here. The entry names its
module; the module is imported only when the objective is used, so the
command line starts without the solvers' imports.

"Good for" and "hurts" summarise the simulation study in docs/remedies.md
(NJ and BIONJ, 100 replicates per scenario, sign tests against no repair).
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass
from typing import TYPE_CHECKING, Callable

from seqdist.core.errors import InputError

if TYPE_CHECKING:  # only for the annotations: the objectives' modules are imported by name
    from seqdist.repair.problem import RepairProblem, Solution

__all__ = ["Objective", "REGISTRY", "OBJECTIVES", "WEIGHTED_OBJECTIVES", "OBJECTIVE_GUIDE", "get", "objective_guide"]


@dataclass(frozen=True)
class Objective:
    """One repair objective.

    Attributes
    ----------
    name : str
        Its name on the command line and in Python.
    module : str
        The module holding ``solve(problem)`` and ``OPTIONS``.
    does, good_for, hurts : str
        What it changes; where it helped the tree in the study; where it hurt.
    uses_weights : bool
        Whether the weights change its result (the shortest-path closure is
        the least-change decrease-only repair for every weighting, so
        ``shrink``'s does not).
    """

    name: str
    module: str
    does: str
    good_for: str
    hurts: str
    uses_weights: bool = True

    def solver(self) -> Callable[[RepairProblem], Solution]:
        """The objective's ``solve(problem) -> Solution``."""
        return importlib.import_module(self.module).solve

    def options(self) -> dict:
        """The objective's option declarations (``name -> Option``)."""
        return getattr(importlib.import_module(self.module), "OPTIONS", {})


REGISTRY = {o.name: o for o in (
    Objective("shrink", "seqdist.repair.shrink",
              "only decrease entries: the shortest-path closure (exact)",
              "run's default, after the suspects are left out; pulls down noisy over-long "
              "(saturated) distances; needs no variances",
              "with chimeras kept in, the placement of the other taxa (NJ); otherwise never "
              "significantly worse than no repair in the study",
              uses_weights=False),
    Objective("grow", "seqdist.repair.grow",
              "only increase entries: fewest increased entries, then least increase",
              "a matrix whose entries can only be too short (not tested in the study)",
              "trees on clean, gappy, misread and contaminated data, and under saturation (it "
              "lengthens distances that are already too long)"),
    Objective("fewest", "seqdist.repair.fewest",
              "change as few entries as possible, in either direction",
              "finding a few entries to inspect; with inverse-variance weights, saturation",
              "unweighted, trees on clean, gappy, misread and contaminated data (it moves a few "
              "entries far, and tree methods believe them); weighted, still on clean data"),
    Objective("l1", "seqdist.repair.l1",
              "least total absolute change",
              "a repair that moves few entries, each by no more than needed",
              "unweighted, trees on clean, gappy, misread and contaminated data, like fewest"),
    Objective("l2", "seqdist.repair.l2",
              "least sum of squared changes (the nearest metric)",
              "with inverse-variance weights, saturation (NJ); weighted, it was never significantly worse "
              "than no repair in the study",
              "unweighted, trees on clean, gappy and saturated data"),
)}

#: The objectives' names, in the order help texts list them.
OBJECTIVES = tuple(REGISTRY)
#: Objectives whose result depends on the weights.
WEIGHTED_OBJECTIVES = tuple(n for n, o in REGISTRY.items() if o.uses_weights)
#: ``name -> (does, good for, hurts)`` (a view of the registry for help texts).
OBJECTIVE_GUIDE = {n: (o.does, o.good_for, o.hurts) for n, o in REGISTRY.items()}


def get(name: str) -> Objective:
    """The registry entry of objective ``name``.

    Examples
    --------
    >>> get("shrink").uses_weights
    False
    >>> get("nope")
    Traceback (most recent call last):
    ...
    seqdist.core.errors.InputError: unknown objective 'nope' (choose from shrink, grow, fewest, l1, l2)
    """
    try:
        return REGISTRY[name]
    except (KeyError, TypeError):
        raise InputError(f"unknown objective '{name}' (choose from {', '.join(OBJECTIVES)})") from None


def objective_guide(indent: str = "  ", width: int = 88) -> str:
    """The objectives, one block each, for ``--help`` texts.

    Examples
    --------
    >>> print(objective_guide().splitlines()[0])
      shrink   only decrease entries: the shortest-path closure (exact)
    """
    import textwrap

    lines = []
    pad = indent + " " * 11
    for o in REGISTRY.values():
        lines.append(f"{indent}{o.name:<8} {o.does}")
        for label, text in (("good for", o.good_for), ("hurts", o.hurts)):
            lines += textwrap.wrap(f"{label}: {text}", width, initial_indent=pad, subsequent_indent=pad + "  ")
    return "\n".join(lines)
