"""Shared machinery of the convex repair objectives :mod:`.l1` and :mod:`.l2`.

* :class:`Setup` - the optimisation graph ``G`` (observed entries with a
  positive weight, locked entries included; entries of weight 0 and missing
  entries are left out, see below), the weights and the box ``[0, M]``.
* :class:`Pool` - the stored constraints and their duals: triangle keys and
  cycle constraints (only needed when ``G`` is not complete), with
  "forgetting" of constraints whose dual is 0 and which are satisfied.
* :func:`find_violations` - the separation oracle: a full scan of the
  triangles of ``G`` (at most :func:`scan_cap` new keys, the most violated
  first), plus shortest paths over ``G`` for violated cycles through
  left-out entries.
* :func:`feasible_point` - turns any iterate into a complete metric that
  keeps the locks (shortest-path closure over ``G``, then a blend with a
  lock-keeping metric if a locked entry ended up too long, then entries of
  weight 0 moved as close to their input as the rest allows); :func:`descend`
  - one pass of coordinate descent over the metrics on it, and
  :class:`Descent`, when the solvers make that pass.
* :func:`bound_l2` / :func:`bound_l1` - Lagrangian lower bounds at any
  non-negative duals (derivations in docs/repair_convex.md).

Why entries of weight 0 and missing entries are left out of ``G``: they have
no cost, so a vector on ``G`` is part of an optimal metric exactly when it
can be completed to a metric, i.e. when no entry of ``G`` is longer than a
path of ``G`` between its ends (the cycle inequalities of ``G``). Shortest
paths over ``G`` give the completion. For a complete ``G`` the cycle
inequalities reduce to the triangle inequalities.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from seqdist.kernels import convex as K

if TYPE_CHECKING:  # annotations only
    from seqdist.repair.problem import Budget, RepairProblem, Solution


@dataclass
class Setup:
    n: int
    D: np.ndarray          # input, NaN where missing
    d: np.ndarray          # input on G (upper triangle), 0 elsewhere
    w: np.ndarray          # weights on G (upper triangle; inf locked), 0 elsewhere
    winv: np.ndarray       # 1 / w on G (0 locked and off G)
    G: np.ndarray          # symmetric bool: in the optimisation graph
    full: bool             # G is the complete graph
    locked: np.ndarray     # symmetric bool
    observed: np.ndarray
    M: float               # an optimal solution exists with every entry in [0, M]
    gi: np.ndarray         # upper-triangle indices of G
    gj: np.ndarray
    free_i: np.ndarray     # observed entries of weight 0 (upper), moved last
    free_j: np.ndarray
    thr: float             # violations below this are numerical noise


def rescale_solution(sol: Solution, a: int, b: int, power: int) -> Solution:
    """The :class:`~.problem.Solution` of a problem rescaled by :func:`.problem.rescaled`, scaled back.

    Distances were multiplied by ``2**a`` and weights by ``2**b``; the
    objective is homogeneous of degree ``power`` in the distances (1 for l1,
    2 for l2) and 1 in the weights. Powers of two make this exact.
    """
    if a == 0 and b == 0:
        return sol
    k = -(b + power * a)
    sol.X = np.ldexp(sol.X, -a)
    sol.objective_value = float(np.ldexp(sol.objective_value, k))
    sol.lower_bound = float(np.ldexp(sol.lower_bound, k))
    for key in ("gap", "certified_lower_bound"):
        if key in sol.details:
            sol.details[key] = float(np.ldexp(sol.details[key], k))
    sol.details["scaled_by"] = {"distances": float(np.ldexp(1.0, a)), "weights": float(np.ldexp(1.0, b))}
    return sol


def setup(problem: RepairProblem) -> Setup:
    """Build the optimisation graph and arrays from a :class:`RepairProblem`."""
    D = np.asarray(problem.D, dtype=np.float64)
    n = D.shape[0]
    if n >= K.MAX_N:
        raise ValueError(f"n = {n} is too large for the convex objectives")
    W = np.asarray(problem.weights, dtype=np.float64)
    # a weight below 1e-290 times the largest cannot move any sum in floating
    # point that involves the others (and 1 / w would overflow): it counts as 0
    fw = W[np.isfinite(W) & (W > 0)]
    if fw.size:
        W = np.where(np.isfinite(W) & (W < 1e-290 * float(fw.max())), 0.0, W)
    obs = np.asarray(problem.observed, dtype=bool).copy()
    np.fill_diagonal(obs, False)
    locked = np.asarray(problem.locked, dtype=bool) & obs
    G = obs & ((W > 0) | locked)
    up = np.triu(np.ones((n, n), dtype=bool), 1)
    d = np.where(G & up, np.nan_to_num(D, nan=0.0), 0.0)
    d = np.maximum(d, 0.0)
    w = np.where(G & up, np.where(locked, np.inf, W), 0.0)
    winv = np.where(G & up & ~locked, 1.0 / np.where(w > 0, w, 1.0), 0.0)
    gi, gj = np.nonzero(G & up)
    fi, fj = np.nonzero(obs & ~G & up)
    M = float(d[gi, gj].max()) if gi.size else 0.0
    full = bool(gi.size == n * (n - 1) // 2)
    thr = 1e-13 * max(M, 1e-300)
    return Setup(n=n, D=D, d=d, w=w, winv=winv, G=G, full=full, locked=locked, observed=obs, M=M,
                 gi=gi, gj=gj, free_i=fi, free_j=fj, thr=thr)


# work of one triangle in a full scan against one constraint in a sweep
# (measured: about 7 ns against 10-13 ns per item on these machines)
SCAN_PER_SWEEP = 0.5

# ------------------------------------------------------------ work model
# Cost of each counted step in reference seconds (problem.REFERENCE_MACHINE),
# measured once there and fixed: budgets are spent by these counts, never by
# the clock, so the same input and options give the same iterates and the
# same answer on any machine and under any load.
SCAN_PER_TRIANGLE = 1.5e-8     # full triangle scan (two threads), per triangle C(n, 3)
L2_PER_CONSTRAINT = 1e-8       # one Hildreth update (sweep_l2_tri), per triangle constraint
L1_PER_CONSTRAINT = 9e-8       # one exact line maximisation (sweep_l1_tri), per triangle constraint
ASCENT_PER_CONSTRAINT = 2e-8   # one coordinate step on the l1 bound (ascend_l1_bound), per constraint
PER_CYCLE_EDGE = 5e-9          # cycle constraints, per edge of the cycle (either sweep)
CERTIFICATE_PER_N3 = 8e-10     # feasible point + bound (a shortest-path closure), per n^3
CLAMP_PER_N3 = 5e-10           # the feasible point's pass of coordinate descent, per n^3
CG_PER_CONSTRAINT = 2e-8       # one conjugate-gradient product (polish), per constraint
COUNT_PER_TRIANGLE = 5e-9     # a count-only pass of the scan (no keys written), per triangle
PDHG_PER_ROW = 5e-9            # one primal-dual iteration (pdhg_tri), per triangle row
PDHG_PER_ENTRY = 2e-9          # one primal-dual iteration, per entry of G
OMEGA_RANGE = (1e-2, 1e4)      # the primal-dual method's primal weight, times its start
# The primal-dual method takes over only while the pool holds at most this many rows per entry.
# An iteration touches every row (about 5 ns each); l1 needed 50,000 iterations at n = 500 on
# noisy matrices (pool 1.7 rows per entry), where it beat the projection method 3-5x; on random
# matrices the pool holds 7-14 rows per entry, each iteration costs that much more, and the
# projection method (which closes those in a tenth of the rounds) is faster.
PDHG_MAX_ROWS = 4.0
KEEP_MARGIN = 1e-3             # primal-dual: rows within this share of the mean entry of their bound stay pooled
ROUND = 2e-3                   # fixed part of one round (Python, small arrays)
SCAN_CALL = 5e-3               # fixed part of one scan (starting the threads, merging the pool)
# the l1 LP's HiGHS calls are counted as those of fewest and grow

# most new constraints one scan adds, per n^2 (the most violated first; the
# pool's positive duals settle near 0.36 n^2 on the benchmark's matrices)
SCAN_CAP_PER_N2 = 1.0
SCAN_CAP_MIN = 1_000_000

__all__ = ["Setup", "rescale_solution", "setup", "scan_cap", "count_cost", "scan_cost", "certificate_cost",
           "sweep_cost", "sweeps_per_round", "run_context", "Pool", "find_violations", "feasible_point", "descend",
           "descend_cost", "Descent", "PrimalDual", "hand_over", "primal_dual_phase", "objective_l2", "objective_l1",
           "bound_l2", "bound_l1", "relative_gap", "output_matrix"]


def scan_cap(n: int) -> int:
    """Most new triangle constraints one scan hands to the pool.

    >>> scan_cap(100), scan_cap(2000)
    (1000000, 4000000)
    """
    return int(max(SCAN_CAP_MIN, SCAN_CAP_PER_N2 * n * n))


def count_cost(S: Setup) -> float:
    """Counted work of one count-only pass over the triangles (see :func:`find_violations`)."""
    n = float(S.n)
    return COUNT_PER_TRIANGLE * n * (n - 1) * (n - 2) / 6.0


def scan_cost(S: Setup) -> float:
    """Counted work of one separation: the triangle scan, plus shortest paths when G is not complete."""
    n = float(S.n)
    c = SCAN_CALL + SCAN_PER_TRIANGLE * n * (n - 1) * (n - 2) / 6.0
    if not S.full:
        c += CERTIFICATE_PER_N3 * n ** 3
    return c


def certificate_cost(S: Setup) -> float:
    """Counted work of one certificate (feasible point and bound) and the round around it."""
    return ROUND + CERTIFICATE_PER_N3 * float(S.n) ** 3


def descend_cost(S: Setup) -> float:
    """Counted work of one pass of :func:`descend`."""
    return CLAMP_PER_N3 * float(S.n) ** 3


def sweep_cost(pool: Pool, per_constraint: float) -> float:
    """Counted work of one sweep over the pool."""
    return per_constraint * pool.keys.size + PER_CYCLE_EDGE * pool.edges.size


def sweeps_per_round(n: int, pool_size: int, max_sweeps: int = 256) -> int:
    """Sweeps over the pool between two scans: about one scan's work.

    A pure function of sizes (no clock), so runs are reproducible.

    >>> sweeps_per_round(500, 8_000_000), sweeps_per_round(500, 100_000)
    (2, 104)
    """
    triangles = n * (n - 1) * (n - 2) / 6.0
    return int(min(max_sweeps, max(2, round(SCAN_PER_SWEEP * triangles / max(pool_size, 1)))))


def run_context(problem: RepairProblem, name: str, declared: dict
                ) -> tuple[float, dict, Budget, Callable[[str], None]]:
    """Start-up shared by the convex solvers: ``(t0, options, budget, log)``.

    ``options`` are the validated options (:func:`.problem.validate_options`
    against ``declared``); ``budget`` is the work budget of ``time_limit``
    (reference seconds; never the clock); ``log`` prints a timed line on
    standard error when the ``verbose`` option is set (the time is shown,
    never used for a decision). ``t0`` is for the report's ``seconds`` only.
    """
    import sys
    import time

    from seqdist.repair.problem import validate_options

    t0 = time.perf_counter()
    opts = validate_options(name, declared, problem.options)
    budget = problem.budget()
    verbose = opts.get("verbose", False)

    def log(msg):
        if verbose:
            print(f"[{name} {time.perf_counter() - t0:7.2f}s] {msg}", file=sys.stderr, flush=True)

    return t0, opts, budget, log


# ------------------------------------------------------------ constraints and duals
@dataclass
class Pool:
    """Stored constraints with their duals (triangles as keys, cycles in CSR form)."""

    n: int
    keys: np.ndarray = field(default_factory=lambda: np.empty(0, np.int64))
    lam: np.ndarray = field(default_factory=lambda: np.empty(0))
    ptr: np.ndarray = field(default_factory=lambda: np.zeros(1, np.int64))
    edges: np.ndarray = field(default_factory=lambda: np.empty(0, np.int64))
    clam: np.ndarray = field(default_factory=lambda: np.empty(0))
    _seen: set = field(default_factory=set)

    @property
    def size(self) -> int:
        return int(self.keys.size + self.clam.size)

    @property
    def nonzero(self) -> int:
        return int((self.lam > 0).sum() + (self.clam > 0).sum())

    @property
    def cycles(self) -> int:
        return int(self.clam.size)

    def copy(self) -> "Pool":
        return Pool(self.n, self.keys.copy(), self.lam.copy(), self.ptr.copy(), self.edges.copy(),
                    self.clam.copy(), set(self._seen))

    def add(self, new_keys: np.ndarray, new_cycles: tuple[np.ndarray, np.ndarray] | None = None) -> int:
        """Merge new violated constraints in; forget satisfied ones with dual 0.

        Returns how many constraints were not in the pool before."""
        self.keys, self.lam, added = K.merge_active(self.keys, self.lam, new_keys)
        if new_cycles is not None or self.clam.size:
            before = self.clam.size
            self._merge_cycles(new_cycles)
            added += max(0, self.clam.size - before)
        return int(added)

    def _merge_cycles(self, new_cycles) -> None:
        ptr, edges, lam = self.ptr, self.edges, self.clam
        keep = [t for t in range(lam.size) if lam[t] > 0]
        segs = [edges[ptr[t]:ptr[t + 1]] for t in keep]
        lams = [lam[t] for t in keep]
        seen = {tuple(s.tolist()) for s in segs}
        if new_cycles is not None:
            nptr, nedges = new_cycles
            for t in range(nptr.size - 1):
                seg = nedges[nptr[t]:nptr[t + 1]]
                key = tuple(seg.tolist())
                if key not in seen:
                    seen.add(key)
                    segs.append(seg)
                    lams.append(0.0)
        self.ptr = np.zeros(len(segs) + 1, np.int64)
        if segs:
            self.ptr[1:] = np.cumsum([s.size for s in segs])
            self.edges = np.concatenate(segs).astype(np.int64)
        else:
            self.edges = np.empty(0, np.int64)
        self.clam = np.array(lams, dtype=np.float64)
        self._seen = seen

    def positive(self) -> "Pool":
        """The constraints with a positive dual."""
        out = Pool(self.n)
        m = self.lam > 0
        out.keys, out.lam = self.keys[m].copy(), self.lam[m].copy()
        if self.clam.size:
            out.ptr, out.edges, out.clam = self.ptr.copy(), self.edges.copy(), self.clam.copy()
            out._merge_cycles(None)
        return out

    def accumulate(self, lam: np.ndarray | None = None, clam: np.ndarray | None = None) -> np.ndarray:
        """``A^T lam`` as an upper-triangular (n, n) array."""
        c = np.zeros((self.n, self.n))
        K.accumulate_tri(self.keys, self.lam if lam is None else lam, c)
        if self.clam.size:
            K.accumulate_cyc(self.ptr, self.edges, self.clam if clam is None else clam, c.reshape(-1))
        return c

    def apply(self, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``A y`` split into the triangle and the cycle parts."""
        r1 = K.apply_tri(self.keys, y)
        r2 = K.apply_cyc(self.ptr, self.edges, y.reshape(-1)) if self.clam.size else np.empty(0)
        return r1, r2

    def denominators(self, winv: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``a^T W^-1 a`` per constraint."""
        r1 = K.denominators_tri(self.keys, winv)
        if self.clam.size:
            wf = winv.reshape(-1)[self.edges]
            r2 = np.add.reduceat(wf, self.ptr[:-1]) if self.edges.size else np.empty(0)
        else:
            r2 = np.empty(0)
        return r1, r2


def find_violations(x: np.ndarray, S: Setup, pool: Pool | None = None, max_cycles: int | None = None,
                    info: dict | None = None) -> tuple[np.ndarray, tuple[np.ndarray, np.ndarray] | None]:
    """Violated constraints of the iterate ``x``: triangle keys and cycles (or None).

    At most :func:`scan_cap` triangle keys, the most violated first
    (:func:`seqdist.kernels.convex.violated_triangles_capped`): far from a
    metric, storing every violated triangle would cost memory and sweeps
    for constraints that the worst ones' projections satisfy anyway. When
    ``info`` is a dict it receives ``capped`` (whether the cap applied),
    ``threshold`` (the violation above which keys were taken) and
    ``counts`` (extra count-only passes, for the work budget).

    Cycles are searched only when ``G`` is not complete: shortest paths over
    ``G`` (:func:`seqdist.kernels.shortest_paths.apsp`) find every entry longer than a path
    between its ends; a Dijkstra per source reads the paths, and those with
    three or more edges (through left-out entries) become cycle constraints.
    """
    keys, t, counts = K.violated_triangles_capped(x, S.G, S.full, S.thr, scan_cap(S.n))
    if info is not None:
        info.update(capped=bool(t > S.thr), threshold=float(t), counts=int(counts))
    if S.full:
        return keys, None
    from seqdist.kernels.shortest_paths import apsp

    Wg = np.where(S.G, _sym(x), np.inf)
    np.fill_diagonal(Wg, 0.0)
    A = apsp(Wg)
    xv = _sym(x)
    viol = np.triu(S.G, 1) & (xv - A > S.thr)
    si, sj = np.nonzero(viol)
    if si.size == 0:
        return keys, None
    if max_cycles is None:
        max_cycles = 4 * S.n + 100
    if si.size > max_cycles:
        amount = (xv - A)[si, sj]
        top = np.sort(np.argsort(-amount, kind="stable")[:max_cycles])
        si, sj = si[top], sj[top]
    ptr, edges = K.violated_cycles(Wg, si.astype(np.int64), sj.astype(np.int64), 3)
    if ptr.size <= 1:
        return keys, None
    return keys, (ptr, edges)


def _sym(x: np.ndarray) -> np.ndarray:
    u = np.triu(x, 1)
    return u + u.T


# ------------------------------------------------------------ a feasible point
def feasible_point(x: np.ndarray, S: Setup, descent: bool = True) -> tuple[np.ndarray, dict]:
    """A complete metric near the iterate ``x`` that keeps every lock exactly.

    1. Shortest paths over ``G`` with the iterate's values (locked entries at
       their input): every unlocked entry then lies on a shortest path, and
       pairs of different connected groups get the largest finite distance
       (which keeps the matrix a metric).
    2. Locked entries are set back to their input. If one is now longer than
       a path between its ends (the iterate was not exactly feasible), the
       matrix is blended with a metric ``Z`` that keeps the locks (shortest
       paths over the locked entries, a large constant elsewhere) by the
       smallest step that restores every triangle.
    3. Observed entries of weight 0 move, one at a time, as close to their
       input as the triangle inequalities with all other entries allow.
    4. Then (unless ``descent`` is false; :func:`descend` alone) every
       costed entry (unlocked, of ``G``) does the same, in key order: one
       pass of coordinate descent over the metrics. Moving one
       entry to the point of ``[max_k |Y_ik - Y_jk|, min_k Y_ik + Y_kj]``
       nearest its input minimises that entry's cost, for l1 and l2 alike,
       with the others fixed, and keeps ``Y`` a metric; so the cost never
       rises. The closure puts the whole correction of a violated triangle
       on its long side; this gives back what the short sides did not need
       (measured: it halves the distance between the feasible value and the
       bound on noisy Euclidean matrices).
    """
    from seqdist.kernels.shortest_paths import apsp

    info = {"blend": 0.0}
    W = np.where(S.G, _sym(x), np.inf)
    W[S.locked] = S.D[S.locked]
    np.fill_diagonal(W, 0.0)
    Y = apsp(W)
    fin = np.isfinite(Y)
    C = float(Y[fin].max()) if fin.any() else 0.0
    if not fin.all():
        Y[~fin] = C
    if S.locked.any():
        short = float((S.D[S.locked] - Y[S.locked]).max())
        Y[S.locked] = S.D[S.locked]
        if short > 0.0:
            H = max(C, float(S.D[S.locked].max()))
            WZ = np.where(S.locked, S.D, H)
            np.fill_diagonal(WZ, 0.0)
            Z = apsp(WZ)
            Z[S.locked] = S.D[S.locked]
            t = K.blend_step(Y, Z)
            if t > 0.0:
                # a hair more than the exact step, against rounding
                t = min(1.0, t * (1 + 1e-9) + 1e-15)
                Y = (1.0 - t) * Y + t * Z
                Y[S.locked] = S.D[S.locked]
            info["blend"] = t
    np.fill_diagonal(Y, 0.0)
    if S.free_i.size:
        K.clamp_free(Y, S.free_i.astype(np.int64), S.free_j.astype(np.int64), S.D[S.free_i, S.free_j])
    Y = 0.5 * (Y + Y.T)
    if descent:
        Y = descend(Y, S)
    return Y, info


def descend(Y: np.ndarray, S: Setup) -> np.ndarray:
    """Step 4 of :func:`feasible_point`: one pass of coordinate descent over the metrics.

    Each costed entry (unlocked, of ``G``), in key order, moves to the point of
    ``[max_k |Y_ik - Y_jk|, min_k Y_ik + Y_kj]`` nearest its input; ``Y`` (a
    metric) stays a metric and its l1 and l2 costs never rise. Returns a new
    array.

    Examples
    --------
    >>> import numpy as np
    >>> from seqdist.repair.problem import RepairProblem
    >>> D = np.array([[0, 5, 1], [5, 0, 1], [1, 1, 0.]]); obs = ~np.eye(3, dtype=bool)
    >>> S = setup(RepairProblem(D, obs * 1.0, np.zeros((3, 3), bool), obs, 1e-9))
    >>> Y = np.array([[0, 1, 1], [1, 0, 1], [1, 1, 0.]])  # the closure put all of 3 on 0-1
    >>> float(descend(Y, S)[0, 1])  # 0-1 goes back up as far as 0-2-1 allows
    2.0
    """
    Y = np.array(Y, dtype=np.float64)
    if S.gi.size:
        mv = ~S.locked[S.gi, S.gj]
        K.clamp_free(Y, S.gi[mv].astype(np.int64), S.gj[mv].astype(np.int64), S.d[S.gi[mv], S.gj[mv]])
    return Y


class Descent:
    """When the solvers run :func:`descend` on their feasible point (about a third
    of a round's work at n = 1000, so not every round).

    A pass is made when the relative gap, times the share of the gap that the
    last pass left, is within ``gap_tol`` (so it should close the gap), and
    at least every ``every`` rounds (which keeps the share up to date). The
    decision reads computed values only, so runs are reproducible.
    """

    def __init__(self, objective: Callable[[np.ndarray, Setup], float], gap_tol: float, every: int = 8):
        self.objective = objective
        self.gap_tol = gap_tol
        self.every = every
        self.share = 0.5
        self.last = None
        self.passes = 0

    def __call__(self, Y: np.ndarray, p: float, g: float, S: Setup, rounds: int,
                 budget: Budget) -> tuple[np.ndarray, float]:
        """``(Y, p)``: the feasible point after a pass when one is due, else as given."""
        if not p > g:
            return Y, p
        due = self.last is None or rounds - self.last >= self.every
        if not due and relative_gap(p, g) * self.share > self.gap_tol:
            return Y, p
        Y2 = descend(Y, S)
        p2 = self.objective(Y2, S)
        budget.charge(descend_cost(S))
        self.share = max(0.0, p2 - g) / (p - g)
        self.last = rounds
        self.passes += 1
        return (Y2, p2) if p2 <= p else (Y, p)


# ------------------------------------------------------------ restarted primal-dual hybrid gradient
class PrimalDual:
    """Restarted, reflected Halpern primal-dual hybrid gradient over the pool's triangle rows.

    Solves ``min_{0 <= x <= M} sum_e f_e(x_e)`` subject to the pool's
    triangle constraints ``A x <= 0`` (``f_e = w_e |x_e - d_e|``, or
    ``w_e (x_e - d_e)^2`` with ``quad``) through the saddle problem
    ``min_x max_{y >= 0} f(x) + y^T A x``; the pool's duals (``pool.lam``,
    the same array) are the iterate's ``y``, which the Halpern form lets go
    below 0 between steps (the certificates read :meth:`duals`, the duals of
    one plain step, which are >= 0). Only for a complete ``G`` (every entry
    is a variable; locked entries stay at their input). Sources:

    * the step: Chambolle and Pock 2011, "A first-order primal-dual algorithm
      for convex problems with applications to imaging", J. Math. Imaging
      Vis. 40(1); with the diagonal steps of Pock and Chambolle 2011,
      "Diagonal preconditioning for first order primal-dual algorithms in
      convex optimization", ICCV (``tau_e = 1 / (omega * rows of e)``,
      ``sigma = omega / 3``: each row has three entries of size 1);
    * the anchored, reflected iteration and its restarts: Lu and Yang 2024,
      "Restarted Halpern PDHG for linear programming" (arXiv:2407.16144):
      ``z+ = a (2 T(z) - z) + (1 - a) z0``, ``a = (k + 1) / (k + 2)``,
      restarted at ``T(z)`` when the fixed-point residual ``|z - T(z)|``
      fell to 0.2 of its value at the last restart, or to 0.8 and stopped
      falling, or after 0.36 of all iterations;
    * the primal weight ``omega``: Applegate, Diaz, Hinder, Lu, Lubin,
      O'Donoghue and Schudy 2021, "Practical large-scale linear programming
      using primal-dual hybrid gradient", NeurIPS (at a restart it moves
      halfway, in logarithm, to ``|dy| / |dx|`` since the last restart).

    Measured on the benchmark's noisy matrices (n = 200, 500) it needed about
    0.7 times the iterations of the same method without the Halpern form
    (averages as restart candidates). Every decision reads computed values
    only (never the clock), and the iterations run on one thread in a fixed
    order, so runs are reproducible.
    """

    CHECK = 64  # iterations between two restart checks

    def __init__(self, S: Setup, pool: Pool, quad: bool, x: np.ndarray | None = None):
        self.S, self.pool, self.quad = S, pool, quad
        self.n = S.n
        self.d = np.ascontiguousarray(S.d[S.gi, S.gj], dtype=np.float64)
        w = S.w[S.gi, S.gj]
        self.locked = ~np.isfinite(w)
        self.w = np.where(self.locked, 0.0, w)
        self.ne = self.d.size
        self.M = float(S.M)
        self.x = self.d.copy()
        if x is not None:  # a start (locked entries stay at their input)
            self.x = np.where(self.locked, self.d, np.clip(x, 0.0, self.M))
        self.xbar = np.empty(self.ne)
        # the primal weight starts at the ratio of the scales of y (a weight) and x (a distance)
        wf = self.w[~self.locked]
        dpos = self.d[self.d > 0]
        self.omega = float(np.mean(wf) / np.mean(dpos)) if wf.size and dpos.size and np.mean(wf) > 0 else 1.0
        # the weight's range: on small problems, where few duals move, |dy| / |dx| once drove it to 1e-10
        # (steps on y of nothing: the method stalled); on the benchmark's matrices it moved within 1e3 of the start
        self.omega_range = (self.omega * OMEGA_RANGE[0], self.omega * OMEGA_RANGE[1])
        self.iterations = 0
        self.restarts = 0
        self.set_rows()

    def set_rows(self, old_keys: np.ndarray | None = None) -> None:
        """Take the pool's rows (again, after it changed: ``old_keys`` are the keys before).

        The method goes on where it was: kept rows keep their dual and their
        anchor, new rows start at 0. (Restarting at every change of the pool
        was measured to stall the method: the pool changes at most scans
        while the iterates settle.)
        """
        keys = self.pool.keys
        self.rows = K.entry_rows(keys, self.n)
        self.y = self.pool.lam
        cnt = np.bincount(self.rows.reshape(-1), minlength=self.ne).astype(np.float64)
        self.tau0 = np.where(self.locked, 0.0, 1.0 / np.maximum(cnt, 1.0))
        self._steps()
        self.c = self._cof(self.y)
        self.xT, self.yT = self.x, np.maximum(self.y, 0.0)
        if old_keys is None:
            self._anchor()
            self.r_last = self._residual()[0]
            return
        ys = np.zeros(keys.size)
        if keys.size and old_keys.size:
            pos = np.minimum(np.searchsorted(keys, old_keys), keys.size - 1)
            kept = keys[pos] == old_keys
            ys[pos[kept]] = self.ys[kept]
        self.ys = ys

    def relink(self) -> None:
        """The pool's duals were copied (same rows): follow them."""
        self.y = self.pool.lam

    def _steps(self) -> None:
        self.tau = self.tau0 / self.omega
        self.sigma = self.omega / 3.0
        self.tw = self.tau * self.w * (2.0 if self.quad else 1.0)

    def _cof(self, y: np.ndarray) -> np.ndarray:
        c = np.zeros(self.ne)
        K.accumulate_rows(self.rows, y, c)
        return c

    def _anchor(self) -> None:
        self.xs, self.ys = self.x.copy(), self.y.copy()
        self.since = 0
        self.r_prev = np.inf

    def _residual(self) -> tuple[float, np.ndarray, np.ndarray, np.ndarray]:
        # one plain step T(z) from the iterate, and |z - T(z)| in the steps' metric
        xT, yT, cT = self.x.copy(), self.y.copy(), self.c.copy()
        K.pdhg_tri(self.rows, yT, xT, np.empty(self.ne), cT, self.d, self.tau, self.tw, self.sigma, self.M, 1,
                   self.quad)
        free = self.tau > 0  # locked entries never move
        dx, dy = xT - self.x, yT - self.y
        r = float(np.sqrt((dx[free] ** 2 / self.tau[free]).sum() + (dy ** 2).sum() / self.sigma))
        return r, xT, yT, cT

    def iteration_cost(self) -> float:
        """Counted work of one iteration."""
        return PDHG_PER_ROW * self.y.size + PDHG_PER_ENTRY * self.ne

    def run(self, iters: int, budget: Budget) -> None:
        """About ``iters`` iterations (whole checks of :attr:`CHECK`), with restarts."""
        for _ in range(max(1, -(-iters // self.CHECK))):
            K.pdhg_halpern(self.rows, self.y, self.ys, self.x, self.xs, self.xbar, self.c, self.d, self.tau, self.tw,
                           self.sigma, self.M, self.since, self.CHECK, 1.0, self.quad)
            self.iterations += self.CHECK
            self.since += self.CHECK
            r, xT, yT, cT = self._residual()
            self.xT, self.yT = xT, yT
            budget.charge((self.CHECK + 1) * self.iteration_cost())
            if r <= 0.2 * self.r_last or (r <= 0.8 * self.r_last and r > self.r_prev) or \
                    self.since >= 0.36 * self.iterations:
                dx = float(np.linalg.norm(xT - self.xs))
                dy = float(np.linalg.norm(yT - self.ys))
                if dx > 0.0 and dy > 0.0 and np.isfinite(dy / dx):
                    self.omega = float(np.clip(np.exp(0.5 * np.log(dy / dx) + 0.5 * np.log(self.omega)),
                                               *self.omega_range))
                    self._steps()
                self.x, self.c = xT, cT
                self.y[:] = yT  # pool.lam is self.y: the pool keeps the duals
                self.restarts += 1
                self._anchor()
                self.r_last = r
            else:
                self.r_prev = r

    def duals(self) -> np.ndarray:
        """Duals (>= 0) of one plain step from the iterate: what the bound is taken at."""
        return self.yT

    def x_matrix(self) -> np.ndarray:
        """The primal point of one plain step from the iterate, as an upper-triangular (n, n) array."""
        X = np.zeros((self.n, self.n))
        X[self.S.gi, self.S.gj] = self.xT
        return X


def hand_over(S: Setup, pool: Pool, rel: float, last_rel: float | None, from_gap: float) -> bool:
    """Whether the earlier method (projection, Hildreth) hands over to :class:`PrimalDual` after a round.

    When every entry is a variable, the relative gap is at most ``from_gap``,
    the pool holds at most :data:`PDHG_MAX_ROWS` rows per entry, and the
    last round lowered the gap by less than a factor of 10 (the earlier
    method is in its slow tail: on random matrices Hildreth's method goes from
    1e-3 to 1e-11 in two rounds, and handing over there cost l2 at n = 1000 half
    again its time). A function of computed values only.
    """
    if not S.full or rel > from_gap or pool.size > PDHG_MAX_ROWS * S.gi.size:
        return False
    return last_rel is not None and rel > 0.1 * last_rel


def primal_dual_phase(problem: RepairProblem, S: Setup, pd: PrimalDual, best: tuple, budget: Budget,
                      gap_tol: float, max_rounds: int, log: Callable[[str], None],
                      objective: Callable[[np.ndarray, Setup], float], bound: Callable[[np.ndarray], float],
                      descent: Descent, rounds: int, scans: int) -> dict:
    """Rounds of :class:`PrimalDual` with scans and certificates, until the gap closes or the budget ends.

    ``best`` is ``(value, metric, bound)`` so far; ``bound(y)`` is the
    objective's certified bound at non-negative duals ``y`` of ``pd``'s rows.
    A round: a scan when due (new violated rows join with dual 0; rows with
    dual 0 that are satisfied by more than :data:`KEEP_MARGIN` times the mean
    entry are forgotten), iterations worth about a scan (work counts, never
    the clock), then a certificate: the shortest-path closure of the primal
    point (and the descent pass when due) and the bound at the duals.
    Returns the fields the solvers report.
    """
    import time

    pool = pd.pool
    best_p, best_Y, best_g = best
    t_scan = t_iter = t_cert = 0.0
    status = "running"
    gap0 = None
    scan_every, since_scan = 1, 0
    margin = KEEP_MARGIN * (float(np.mean(S.d[S.gi, S.gj])) if S.gi.size else 0.0)
    while True:
        if since_scan + 1 >= scan_every:
            x = pd.x_matrix()
            ta = time.perf_counter()
            sinfo = {}
            newk, _ = find_violations(x, S, pool, info=sinfo)
            budget.charge(scan_cost(S) + sinfo["counts"] * count_cost(S))
            t_scan += time.perf_counter() - ta
            scans += 1
            since_scan = 0
            before = pool.keys
            if pool.keys.size:
                # rows near their bound are kept even with dual 0: the iterates move around the boundary,
                # and rows dropped and added again at every scan stalled the method (measured)
                near = pool.keys[(K.apply_tri(pool.keys, x) > -margin) | (pool.lam != 0)]
                newk, _, _ = K.merge_active(near, np.ones(near.size), newk)  # the union, in linear time
            added = pool.add(newk)
            if np.array_equal(pool.keys, before):
                pd.relink()  # the same rows (the merge made new arrays)
            else:
                pd.set_rows(before)  # new rows (dual 0), forgotten ones (dual 0): the method goes on
            if sinfo["capped"]:
                scan_every = 1
            elif added <= max(50, 0.002 * pool.size):
                scan_every = min(2 * scan_every, 16)
            else:
                scan_every = max(1, scan_every // 2)
        else:
            since_scan += 1
        # iterations per round: about a scan's work, and at least four certificates' (work counts: reproducible)
        tb = time.perf_counter()
        per = max(scan_cost(S), 4.0 * certificate_cost(S)) / pd.iteration_cost()
        pd.run(int(min(max(per, 2 * pd.CHECK), 64 * pd.CHECK)), budget)
        t_iter += time.perf_counter() - tb
        rounds += 1
        tc = time.perf_counter()
        Y, _ = feasible_point(pd.x_matrix(), S, descent=False)
        p = objective(Y, S)
        g = bound(pd.duals())
        budget.charge(certificate_cost(S))
        best_g = max(best_g, g)
        Y, p = descent(Y, p, best_g, S, rounds, budget)
        t_cert += time.perf_counter() - tc
        if p < best_p:
            best_p, best_Y = p, Y
        rel = relative_gap(best_p, best_g)
        gap0 = rel if gap0 is None else gap0
        log(f"round {rounds}: {pd.iterations} iterations, {pd.restarts} restarts, omega {pd.omega:.3g}, pool "
            f"{pool.size} ({pool.nonzero} positive), feasible {best_p:.12g}, bound {best_g:.12g}, gap {rel:.3e}")
        if problem.progress is not None and rel > 0 and gap0 and gap0 > gap_tol:
            frac = np.log(gap0 / rel) / np.log(gap0 / gap_tol)
            problem.report(float(np.clip(frac, 0.0, 0.99)), f"gap {rel:.1e}")
        if rel <= gap_tol:
            status = "gap closed"
            break
        if budget.exhausted():
            status = "time limit"
            break
        if rounds >= max_rounds:
            status = "round limit"
            break
    if status != "gap closed":
        Y2 = descend(best_Y, S)  # a last descent pass on the best point (it never raises the cost)
        p2 = objective(Y2, S)
        if p2 < best_p:
            best_p, best_Y = p2, Y2
    return {"p": best_p, "Y": best_Y, "g": best_g, "rounds": rounds, "scans": scans, "status": status,
            "active": pool.nonzero, "pool": pool.size, "iterations": pd.iterations, "restarts": pd.restarts,
            "descent_passes": descent.passes,
            "seconds": {"scan": round(t_scan, 3), "iterations": round(t_iter, 3), "certificate": round(t_cert, 3)}}


# ------------------------------------------------------------ objectives and bounds
def objective_l2(Y: np.ndarray, S: Setup) -> float:
    """``sum w (Y - D)^2`` over the costed entries (upper triangle; locks excluded)."""
    m = np.isfinite(S.w[S.gi, S.gj])
    dd = Y[S.gi, S.gj][m] - S.d[S.gi, S.gj][m]
    return float((S.w[S.gi, S.gj][m] * dd * dd).sum())


def objective_l1(Y: np.ndarray, S: Setup) -> float:
    """``sum w |Y - D|`` over the costed entries (upper triangle; locks excluded)."""
    m = np.isfinite(S.w[S.gi, S.gj])
    dd = Y[S.gi, S.gj][m] - S.d[S.gi, S.gj][m]
    return float((S.w[S.gi, S.gj][m] * np.abs(dd)).sum())


def _safe(terms: np.ndarray) -> float:
    # the sum, lowered by a bound on its rounding error (pairwise summation)
    return float(terms.sum() - 1e-13 * np.abs(terms).sum())


def bound_l2(c: np.ndarray, S: Setup) -> float:
    """Lagrangian lower bound on ``min sum w (x - d)^2`` at duals with ``A^T lam = c / 2``.

    ``c`` is ``A^T lam`` for the problem ``min 1/2 sum w (x - d)^2`` (Hildreth's
    scaling); for the reported objective (without the 1/2) the bound is
    ``sum_e min_{0 <= x <= M} [w (x - d)^2 + 2 c x]`` (locked entries: ``2 c d``).
    """
    cc = c[S.gi, S.gj]
    dd = S.d[S.gi, S.gj]
    ww = S.w[S.gi, S.gj]
    lk = ~np.isfinite(ww)
    wf = np.where(lk, 1.0, ww)
    with np.errstate(over="ignore"):  # c / w for a tiny weight: +-inf, clipped to the box
        xs = np.clip(dd - cc / wf, 0.0, S.M)
    terms = np.where(lk, 2.0 * cc * dd, wf * (xs - dd) ** 2 + 2.0 * cc * xs)
    return _safe(terms)


def bound_l1(c: np.ndarray, S: Setup, off_graph: bool = False) -> float:
    """Lagrangian lower bound on ``min sum w |x - d|`` at duals with ``A^T lam = c``:
    ``sum_e min_{0 <= x <= M} [w |x - d| + c x]`` (locked entries: ``c d``).

    With ``off_graph`` the duals may also touch entries outside ``G`` (free
    variables of a complete-graph LP): each adds ``min(0, c M)``.
    """
    cc = c[S.gi, S.gj]
    dd = S.d[S.gi, S.gj]
    ww = S.w[S.gi, S.gj]
    lk = ~np.isfinite(ww)
    wf = np.where(lk, 0.0, ww)
    low = np.minimum(0.0, np.minimum((wf + cc) * (S.M - dd), (wf - cc) * dd))
    terms = cc * dd + np.where(lk, 0.0, low)
    if off_graph:
        off = np.triu(~S.G, 1)
        terms = np.concatenate([terms, np.minimum(0.0, c[off]) * S.M])
    return _safe(terms)


def relative_gap(p: float, g: float) -> float:
    """``(p - g) / p`` (0 when ``p - g <= 0``)."""
    gap = p - g
    if gap <= 0:
        return 0.0
    # below 1e-300 values are at the end of floating point (subnormal from
    # 2.2e-308): an absolute gap under gap_tol * 1e-300 counts as closed
    return float(gap / max(abs(p), 1e-300))


def output_matrix(Y: np.ndarray, S: Setup) -> np.ndarray:
    """The solution handed to the engine: observed entries of ``Y``, NaN where missing."""
    X = np.array(Y, dtype=np.float64)
    miss = ~S.observed
    np.fill_diagonal(miss, False)
    X[miss] = np.nan
    np.fill_diagonal(X, 0.0)
    return X
