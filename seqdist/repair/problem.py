"""The data every repair objective receives and returns, its options and its work budget.

The engine (:mod:`seqdist.repair.engine`) turns user input (a matrix,
weights, locks, a tolerance, a time limit) into a :class:`RepairProblem`,
calls the objective's ``solve(problem) -> Solution``, then fills missing
entries, verifies the result is a metric and builds the report. Objective
modules (``shrink``, ``grow``, ``fewest``, ``l1``, ``l2``) only solve.

Each objective module declares the options it reads in a module-level
``OPTIONS`` dict of :class:`Option`; :func:`validate_options` checks what a
caller gave against it. Every stopping decision of a solver follows a
:class:`Budget` of work counted in *reference seconds* (see
:data:`REFERENCE_MACHINE`), never the clock, so the same input and options
give the same answer on any machine and under any load.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

__all__ = ["RepairProblem", "Solution", "Budget", "scale_exponent", "rescaled", "Option", "validate_options",
           "objective_options"]

#: Where the work rates of the solvers were measured (once; they are constants,
#: never measured at run time). A budget of ``t`` reference seconds is about the
#: work this machine does in ``t`` seconds, alone on it; elsewhere a run takes
#: longer or shorter, but its answer depends only on the input and the options.
REFERENCE_MACHINE = "2-core x86-64 virtual machine of the seqdist development setup (2025), one idle process"


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
        A work budget in reference seconds (:class:`Budget`): when it is
        spent, the objective returns the best verified answer found with
        ``optimal=False``. Not a clock limit.
    progress : callable or None
        ``progress(fraction_or_None, note)`` for long runs (standard error).
    seed : int
        Seed for any randomised step.
    options : dict
        Objective-specific options (checked against the objective's
        ``OPTIONS`` by :func:`validate_options`).
    labels : tuple of str
        Taxon labels (for messages; empty when the caller gave none).
    deadline : float or None
        Unused by the solvers (kept so that callers that still set it work):
        decisions follow :attr:`time_limit` as a work budget, not the clock.
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

    def budget(self) -> "Budget":
        """A fresh :class:`Budget` of :attr:`time_limit` reference seconds (unlimited without one)."""
        return Budget(self.time_limit)

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
        Extra report entries (iterations, cuts, gap, method used...). Wall
        times go under the key ``seconds`` only, so that callers can keep
        them out of data files.
    """

    X: np.ndarray
    objective_value: float
    lower_bound: float
    optimal: bool
    details: dict = field(default_factory=dict)


# ------------------------------------------------------------------ work budget
class Budget:
    """Work allowance in reference seconds, spent by counted work, never by the clock.

    A solver charges each step by a fixed model of its cost (items of work
    times a per-item cost measured once on :data:`REFERENCE_MACHINE`, e.g.
    triangles scanned, constraint updates, simplex iterations, branch-and-bound
    nodes) and stops when the budget is spent. The same input and options
    therefore give the same steps, hence byte-identical results, on any
    machine and under any load; ``limit`` seconds of budget take about
    ``limit`` seconds on the reference machine.

    Parameters
    ----------
    limit : float or None
        Reference seconds (None: unlimited).
    parent : Budget, optional
        A budget this one also draws on (a stage inside a whole run).

    Examples
    --------
    >>> b = Budget(2.0)
    >>> b.charge(1.5); b.exhausted(), b.left()
    (False, 0.5)
    >>> stage = b.stage(10.0)   # capped by what the parent has left
    >>> stage.charge(0.7); stage.exhausted(), b.exhausted()
    (True, True)
    """

    def __init__(self, limit: float | None = None, parent: "Budget | None" = None):
        self.limit = None if limit is None else float(limit)
        self.parent = parent
        self.spent = 0.0

    def charge(self, cost: float) -> None:
        """Add ``cost`` reference seconds of counted work (here and in every parent)."""
        cost = float(cost)
        self.spent += cost
        if self.parent is not None:
            self.parent.charge(cost)

    def left(self) -> float | None:
        """Reference seconds left (None when neither this budget nor a parent has a limit)."""
        mine = None if self.limit is None else max(0.0, self.limit - self.spent)
        up = None if self.parent is None else self.parent.left()
        if mine is None:
            return up
        return mine if up is None else min(mine, up)

    def exhausted(self) -> bool:
        """True when no work is left."""
        left = self.left()
        return left is not None and left <= 0.0

    def stage(self, limit: float | None) -> "Budget":
        """A child budget of at most ``limit`` more reference seconds (None: only the parent's)."""
        return Budget(limit, parent=self)

    def count(self, cost_per_unit: float, cap: int | None = None) -> int | None:
        """How many units of ``cost_per_unit`` fit in what is left (None: unlimited), at most ``cap``.

        Used for limits handed to a solver in advance (simplex iterations,
        branch-and-bound nodes).
        """
        left = self.left()
        if left is None:
            return cap
        k = int(math.floor(left / max(cost_per_unit, 1e-300)))
        return k if cap is None else min(k, cap)


# ------------------------------------------------------------------ scaling
#: Magnitudes the solvers take as they are; outside this range an objective
#: rescales by a power of two (exact in floating point) before solving.
SAFE_RANGE = (2.0 ** -20, 2.0 ** 40)


def scale_exponent(largest: float, safe: tuple = SAFE_RANGE) -> int:
    """``k`` such that ``largest * 2**k`` lies in [1, 2), or 0 when ``largest`` is in ``safe`` (or not positive).

    Multiplying by ``2**k`` is exact in floating point (barring underflow), so
    a problem solved on rescaled data and scaled back gives exactly the answer
    for the data; HiGHS's absolute tolerances (1e-7) and infinite-cost
    threshold (1e20) then meet values near 1.

    >>> scale_exponent(3.0), scale_exponent(1e-100), scale_exponent(1e250)
    (0, 333, -830)
    """
    if not (largest > 0 and math.isfinite(largest)) or safe[0] <= largest <= safe[1]:
        return 0
    return -math.frexp(largest)[1] + 1


def rescaled(problem: "RepairProblem", distances: bool = True) -> tuple["RepairProblem", int, int]:
    """``(problem with D * 2**a and weights * 2**b, a, b)``; exponents from :func:`scale_exponent`.

    ``a`` brings the largest observed distance, ``b`` the largest finite weight
    near 1 when they are far from it (0 otherwise, and ``a`` = 0 unless
    ``distances``). ``tol`` scales with the distances. Returns ``problem``
    itself when both exponents are 0.
    """
    import dataclasses

    fin = problem.D[problem.observed]
    a = scale_exponent(float(np.abs(fin).max()) if fin.size and distances else 0.0)
    wf = problem.weights[problem.observed & np.isfinite(problem.weights)]
    b = scale_exponent(float(wf.max()) if wf.size else 0.0)
    if a == 0 and b == 0:
        return problem, 0, 0
    return dataclasses.replace(problem, D=np.ldexp(problem.D, a), weights=np.ldexp(problem.weights, b),
                               tol=math.ldexp(problem.tol, a)), a, b


# ------------------------------------------------------------------ options
@dataclass(frozen=True)
class Option:
    """One option of a repair objective: type, default, allowed values.

    Parameters
    ----------
    default : bool, int, float or str
        The value used when the caller gives none; its type is the option's
        type unless ``kind`` says otherwise.
    help : str
        One line for the documentation.
    choices : tuple of str, optional
        The allowed values of a string option (compared case-insensitively).
    low, high : float, optional
        Range of a number option (inclusive unless ``low_open`` /
        ``high_open``).
    kind : type, optional
        ``bool``, ``int``, ``float`` or ``str`` (default: the type of ``default``).

    Examples
    --------
    >>> Option(1e-6, "relative gap that counts as optimal", low=0.0, low_open=True).describe()
    'a number > 0'
    """

    default: Any
    help: str = ""
    choices: tuple | None = None
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    kind: type | None = None

    @property
    def type(self) -> type:
        return self.kind if self.kind is not None else type(self.default)

    def describe(self) -> str:
        """What a valid value is, in words (used in error messages)."""
        t = self.type
        if t is bool:
            return "true or false"
        if self.choices:
            return "one of " + ", ".join(self.choices)
        what = "an integer" if t is int else "a number" if t is float else "text"
        parts = []
        if self.low is not None:
            parts.append(f"{'>' if self.low_open else '>='} {_num(self.low)}")
        if self.high is not None:
            parts.append(f"{'<' if self.high_open else '<='} {_num(self.high)}")
        return what + (" " + " and ".join(parts) if parts else "")


def _num(v: float) -> str:
    return str(int(v)) if float(v).is_integer() and abs(v) < 1e15 else repr(float(v))


_TRUE = ("true", "yes", "on", "1")
_FALSE = ("false", "no", "off", "0")


def _convert(opt: Option, value):
    """``value`` as the option's type, or raise ValueError."""
    t = opt.type
    if t is bool:
        if isinstance(value, (bool, np.bool_)):
            return bool(value)
        if isinstance(value, (int, np.integer)) and value in (0, 1):
            return bool(value)
        if isinstance(value, str) and value.strip().lower() in _TRUE + _FALSE:
            return value.strip().lower() in _TRUE
        raise ValueError
    if t is str:
        if not isinstance(value, str):
            raise ValueError
        v = value.strip()
        if opt.choices:
            low = v.lower()
            if low not in opt.choices:
                raise ValueError
            return low
        return v
    if isinstance(value, (bool, np.bool_)):
        raise ValueError
    if isinstance(value, str):
        value = value.strip()
        value = int(value) if t is int and value.lstrip("+-").isdigit() else float(value)
    if isinstance(value, (int, np.integer)):
        v = int(value) if t is int else float(value)
    elif isinstance(value, (float, np.floating)):
        if not math.isfinite(value):
            raise ValueError
        if t is int:
            if not float(value).is_integer():
                raise ValueError
            v = int(value)
        else:
            v = float(value)
    else:
        raise ValueError
    if opt.low is not None and (v < opt.low or (opt.low_open and v == opt.low)):
        raise ValueError
    if opt.high is not None and (v > opt.high or (opt.high_open and v == opt.high)):
        raise ValueError
    return v


def validate_options(objective: str, declared: dict, given: dict | None) -> dict:
    """Check ``given`` options against an objective's declaration; fill defaults.

    Parameters
    ----------
    objective : str
        The objective's name (for messages).
    declared : dict of str to Option
        The objective module's ``OPTIONS``.
    given : dict or None
        What the caller passed (``repair(..., **options)`` or ``--option
        KEY=VALUE`` / ``--method``). A value of None means "the default".

    Returns
    -------
    dict
        Every declared option, typed (bool, int, float, or a lower-case
        choice), with defaults for those not given. Validating the result
        again returns it unchanged.

    Raises
    ------
    InputError
        An option the objective does not have, or a value of the wrong type
        or out of range; one message form, naming the option as the Python
        keyword (the command line passes it as ``--option KEY=VALUE``).

    Examples
    --------
    >>> opts = {"method": Option("auto", choices=("auto", "exact", "heuristic"))}
    >>> validate_options("fewest", opts, {"method": "Exact"})
    {'method': 'exact'}
    >>> validate_options("shrink", {}, {"method": "exact"})
    Traceback (most recent call last):
    ...
    seqdist.core.errors.InputError: objective 'shrink' has no option 'method' (its options: none)
    >>> validate_options("fewest", opts, {"method": "fast"})
    Traceback (most recent call last):
    ...
    seqdist.core.errors.InputError: objective 'fewest' option 'method' must be one of auto, exact, heuristic, got 'fast'
    """
    from seqdist.core.errors import InputError

    given = dict(given or {})
    for key in given:
        if key not in declared:
            names = ", ".join(sorted(declared)) or "none"
            raise InputError(f"objective '{objective}' has no option '{key}' (its options: {names})")
    out = {}
    for key, opt in declared.items():
        value = given.get(key)
        if value is None:
            out[key] = opt.default
            continue
        try:
            out[key] = _convert(opt, value)
        except (ValueError, TypeError, OverflowError):
            raise InputError(f"objective '{objective}' option '{key}' must be {opt.describe()}, "
                             f"got {value!r}") from None
    return out


def objective_options(objective: str) -> dict:
    """The ``OPTIONS`` declaration of objective ``objective`` (see :mod:`seqdist.repair.registry`)."""
    from seqdist.repair.registry import get

    return get(objective).options()
