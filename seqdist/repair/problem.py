"""The data every repair objective receives and returns.

The engine (:mod:`seqdist.repair.engine`) turns user input (a matrix,
weights, locks, a tolerance, a time limit) into a :class:`RepairProblem`,
calls the objective's ``solve(problem) -> Solution``, then fills missing
entries, verifies the result is a metric and builds the report. Objective
modules (``shrink``, ``grow``, ``fewest``, ``l1``, ``l2``) only solve.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np


@dataclass
class RepairProblem:
    """Input of an objective's ``solve``.

    Attributes
    ----------
    D : ndarray (n, n)
        The input distances, symmetric, zero diagonal; NaN where missing.
    weights : ndarray (n, n)
        Non-negative weight on the change of each entry (1 by default);
        0 means the entry is free; ``inf`` for locked entries.
    locked : ndarray (n, n) of bool
        Entries that must not change (symmetric; False on missing entries).
    observed : ndarray (n, n) of bool
        ``~isnan(D)`` off the diagonal. Missing entries are free in the
        optimisation and filled by the engine afterwards.
    tol : float
        Metric tolerance of the contract (an entry counts as changed when it
        moves by more than ``tol``).
    time_limit : float or None
        Seconds the objective may use; when reached, return the best
        feasible answer found with ``optimal=False``.
    progress : callable or None
        ``progress(fraction_or_None, note)`` for long runs (standard error).
    seed : int
        Seed for any randomised step.
    options : dict
        Objective-specific options (e.g. ``{"stage2": "l1"}`` for fewest).
    labels : tuple of str
        Taxon labels (for messages; empty when the caller gave none).
    deadline : float or None
        ``time.perf_counter()`` value at which the time limit runs out
        (set by the engine together with ``time_limit``).
    """

    D: np.ndarray
    weights: np.ndarray
    locked: np.ndarray
    observed: np.ndarray
    tol: float
    time_limit: float | None = None
    progress: Callable | None = None
    seed: int = 0
    options: dict = field(default_factory=dict)
    labels: tuple = ()
    deadline: float | None = None

    @property
    def n(self) -> int:
        return self.D.shape[0]

    def label(self, i: int) -> str:
        """The label of taxon ``i`` (``t{i}`` when no labels were given)."""
        return self.labels[i] if self.labels else f"t{i}"

    def remaining(self) -> float | None:
        """Seconds left before the deadline (None without a time limit)."""
        if self.deadline is None:
            return None
        import time

        return max(0.0, self.deadline - time.perf_counter())

    def report(self, fraction: float | None, note: str | None = None) -> None:
        """Send progress to the engine's bar, if any."""
        if self.progress is not None:
            self.progress(fraction, note)


@dataclass
class Solution:
    """Output of an objective's ``solve``.

    Attributes
    ----------
    X : ndarray (n, n)
        Repaired values on the observed entries (missing entries may be NaN:
        the engine fills them by shortest paths over the repaired observed
        entries). Must be a metric on the observed entries within ``tol``.
    objective_value : float
        What the objective measures: entries changed (fewest, grow), the
        weighted L1 or squared-L2 change (l1, l2), the L1 change (shrink).
    lower_bound : float
        A proven lower bound on the optimal objective value.
    optimal : bool
        True when optimality is proven.
    details : dict
        Extra report entries (iterations, cuts, gap, method used...).
    """

    X: np.ndarray
    objective_value: float
    lower_bound: float
    optimal: bool
    details: dict = field(default_factory=dict)
