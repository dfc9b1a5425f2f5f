"""Which taxa look bad, and the evidence: per-taxon statistics, robust z-scores, one score.

:func:`find_suspects` computes, for every taxon, standard or published
statistics oriented so that larger means more suspicious, turns each into a
robust z-score against all taxa (the modified z-score of Iglewicz & Hoaglin
1993: median and median absolute deviation, with a floor under the spread),
takes the largest z within each group of statistics that measure the same
thing, and combines the groups' z-scores (cut at 0) into one score, the root
of their sum of squares. A taxon is a *suspect* only when its score reaches
:data:`THRESHOLD`, calibrated on seeded simulations in
``tests/benchmarks/bench_suspects.py``, so clean data gives an empty list.
Statistics, sources, groups, the combination and the calibration are in
docs/suspects.md.

From the matrix alone (through :func:`seqdist.audit.report.audit`):

* ``violation_excess`` - summed excess of the taxon's violated triangles per
  checked triangle, relative to the largest entry (``violated_fraction``, the
  share of its checked triangles violated, is shown but not scored: taxa with
  a near-identical partner break many triangles by rounding-sized amounts);
* ``missing_fraction`` - share of the taxon's pairs with no distance;
* ``delta`` - the mean delta score of the quartets holding the taxon
  (Holland et al. 2002);
* ``terminal_branch`` - the length of its own branch in a neighbor-joining
  tree, relative to the typical one, on the cube-root scale (common practice:
  a sequence that fits nowhere sits at the end of a long branch).

From the alignment (``alignment=``):

* ``gap_fraction`` - share of columns without an unambiguous residue;
  ``compared_columns`` - the median number of columns it shares with each
  other sequence (fewer is more suspicious); one group;
* ``block_incongruence`` - at each cut of the alignment between contiguous
  blocks, how much farther its nearest relatives on one side are on the
  other side, in standard errors (a chimera's nearest relatives change along
  the alignment); ``block_rank_correlation``, the Spearman correlation of
  its two distance profiles at that cut, is shown beside it, not scored;
* ``placement_instability`` (``replicates > 0``) - one minus the leaf
  stability of Thorley & Wilkinson (1999) over bootstrap replicates of the
  columns (Felsenstein 1985), neighbor-joining trees of the model distances.
  Shown, not scored (it did not separate planted from clean taxa).

Work, for n taxa and L columns: the audit without its bounds (one compiled
pass over the C(n, 3) triangles; quartets all up to 2 million, else 200,000
drawn), one neighbor-joining tree, and for the alignment (K + 1) products of
n x L by L x n 32-bit matrices (K states) split over the blocks, sorting of
n rows per cut and one rank correlation per taxon. Each bootstrap replicate
costs one distance matrix, one tree and the quartet tally (all quartets up
to :data:`QUARTETS_MAX`, else that many drawn).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from seqdist.core.errors import InputError
from seqdist.core.matrix import DistanceMatrix

if TYPE_CHECKING:  # only for the annotations: the audit and the alignment are imported where they are used
    from numpy.typing import ArrayLike

    from seqdist.audit.report import AuditReport
    from seqdist.io.alignment import Alignment

__all__ = ["REASON_PREFIX", "combine", "Suspect", "SuspectReport", "robust_z", "spearman_rows", "complete_core",
           "group_counts", "nearest_shift", "find_suspects"]

#: Default threshold on the combined score (the largest robust z-score of a
#: taxon); calibrated in tests/benchmarks/bench_suspects.py (docs/suspects.md).
THRESHOLD = 4.75

#: A statistic is named among a taxon's reasons from this robust z on.
REASON_Z = 3.0

#: How the groups' z-scores make one score: "rss" (root of the sum of squares) or "max".
COMBINATION = "rss"


def combine(G: np.ndarray) -> np.ndarray:
    """One score per row of group z-scores (already cut at 0): see :data:`COMBINATION`.

    Examples
    --------
    >>> combine(np.array([[3.0, 4.0], [0.0, 0.0]])).tolist()
    [5.0, 0.0]
    """
    G = np.asarray(G, dtype=np.float64)
    if G.shape[1] == 0:
        return np.zeros(G.shape[0])
    if COMBINATION == "max":
        return G.max(axis=1)
    return np.sqrt((G * G).sum(axis=1))


#: Iglewicz & Hoaglin (1993): MAD x 1.4826 estimates the standard deviation of normal data.
MAD_SCALE = 1.4826

#: Contiguous blocks of columns for ``block_incongruence``: the cuts between them are tried.
BLOCKS = 4

#: Quartets tallied per bootstrap replicate for ``placement_instability`` (all when fewer).
QUARTETS_MAX = 100_000

# Each statistic: orientation (+1 larger is worse, -1 smaller is worse); the
# smallest spread that counts as typical variation (a floor under the MAD, so
# that a statistic constant across most taxa - no gaps, no missing entry -
# does not turn a trifle into a huge z); the group it scores in (None: shown
# as evidence, not scored; statistics of one group measure the same thing and
# count once, by their largest z); a description; the reason line.
_STATS = {
    "violated_fraction": (+1, 0.02, None, "share of its checked triangles violated",
                          "{pct} of its triangles break the triangle inequality (typical {tpct})"),
    "violation_excess": (+1, 0.002, "triangles", "summed excess of its violated triangles per checked "
                                                 "triangle, relative to the largest entry",
                         "its broken triangles are broken by much (excess {v} of the largest entry per "
                         "triangle; typical {t})"),
    "missing_fraction": (+1, 0.05, "missing", "share of its pairs with no distance",
                         "{pct} of its distances are missing (typical {tpct})"),
    "delta": (+1, 0.02, "delta", "mean delta score of its quartets (Holland et al. 2002)",
              "its quartets fit a tree poorly (mean delta {v}; typical {t})"),
    "terminal_branch": (+1, 0.1, "branch", "its terminal branch length in a neighbor-joining tree "
                                            "(scored on the log scale)",
                        "it sits at the end of a long branch ({v} substitutions per site; typical {t})"),
    "gap_fraction": (+1, 0.05, "gaps", "share of alignment columns without an unambiguous residue",
                     "{pct} of its columns are gaps or ambiguous (typical {tpct})"),
    "compared_columns": (-1, 0.05, "gaps", "median number of columns shared with each other sequence "
                                           "(scored relative to the typical count)",
                         "it shares few columns with the others (median {v}; typical {t})"),
    "block_incongruence": (+1, 0.5, "blocks", "how much farther its nearest relatives on one side of a cut "
                                              "of the alignment are on the other side, in standard errors",
                           "its nearest relatives differ between {where} (they are {v} standard errors "
                           "farther on the other side; typical {t})"),
    "block_rank_correlation": (-1, 0.03, None, "Spearman correlation of its distances on the two sides of "
                                               "the cut above",
                               "its nearest relatives differ between {where} (rank correlation {v}; "
                               "typical {t})"),
    "placement_instability": (+1, 0.03, None, "one minus its leaf stability under bootstrap of "
                                                     "columns (Thorley & Wilkinson 1999)",
                              "its place in the tree changes between bootstrap replicates (leaf "
                              "instability {v}; typical {t})"),
}

STATISTICS = tuple(_STATS)


#: How a suspect's reason for being left out begins (``SuspectReport.reasons``); the report
#: tells suspects from other taxa left out by it.
REASON_PREFIX = "suspect sequence: "

@dataclass(frozen=True)
class Suspect:
    """One taxon: its combined score, the evidence and the reasons in plain words.

    ``evidence`` maps a statistic name to ``{"value", "typical", "z"}``:
    the taxon's value, the median over all taxa, and the robust z-score
    (oriented so that larger is more suspicious).
    """

    label: str
    score: float
    evidence: dict
    reasons: tuple

    def __repr__(self) -> str:
        return f"Suspect({self.label!r}, score={self.score:.3g}, reasons={list(self.reasons)})"

    def to_dict(self) -> dict:
        return {"label": self.label, "score": self.score, "evidence": self.evidence,
                "reasons": list(self.reasons)}


@dataclass
class SuspectReport:
    """What :func:`find_suspects` found.

    ``suspects`` are the taxa whose score reaches ``threshold``, most
    suspicious first; ``ranking`` holds every taxon in the same order;
    ``statistics`` names the statistics that were computed.
    """

    def __repr__(self) -> str:
        return (f"SuspectReport(suspects={[s.label for s in self.suspects]}, threshold={self.threshold}, "
                f"ranked={len(self.ranking)})")

    suspects: list
    ranking: list
    threshold: float
    statistics: list

    def to_dict(self) -> dict:
        """JSON-ready: ``{"suspect_taxa", "threshold", "statistics", "ranking"}``.

        Examples
        --------
        >>> r = find_suspects(DistanceMatrix.from_array([[0, 1, 2], [1, 0, 2], [2, 2, 0]]))
        >>> r.to_dict()["suspect_taxa"]
        []
        """
        return {"suspect_taxa": [s.to_dict() for s in self.suspects], "threshold": self.threshold,
                "statistics": list(self.statistics), "ranking": [s.to_dict() for s in self.ranking]}

    @property
    def labels(self) -> list:
        """The suspects' labels, most suspicious first."""
        return [s.label for s in self.suspects]

    def reasons(self) -> dict:
        """``{label: "suspect sequence: <its first reason>"}``, most suspicious first: why each
        suspect is left out when it is (``repair(..., leave_out=...)``, ``seqdist run``).

        Examples
        --------
        >>> find_suspects(DistanceMatrix.from_array([[0, 1, 2], [1, 0, 2], [2, 2, 0]])).reasons()
        {}
        """
        return {s.label: REASON_PREFIX + (s.reasons[0] if s.reasons else f"score {s.score:.3g}")
                for s in self.suspects}


# ------------------------------------------------------------------ helpers
def robust_z(x: np.ndarray, floor: float, sign: int = 1) -> tuple[np.ndarray, float, float]:
    """Modified z-scores (Iglewicz & Hoaglin 1993) with a floor under the spread.

    ``z = sign * (x - median) / max(1.4826 * MAD, floor)``; NaN values are
    ignored in the median and the MAD and get z = 0.

    Returns
    -------
    z, median, scale

    Examples
    --------
    >>> z, med, s = robust_z(np.array([1.0, 2.0, 3.0, 4.0, 100.0]), 0.1)
    >>> med, round(s, 4), round(float(z[-1]), 2)
    (3.0, 1.4826, 65.43)
    """
    x = np.asarray(x, dtype=np.float64)
    ok = np.isfinite(x)
    if ok.sum() == 0:
        return np.zeros_like(x), math.nan, math.nan
    med = float(np.median(x[ok]))
    mad = float(np.median(np.abs(x[ok] - med))) * MAD_SCALE
    scale = max(mad, float(floor))
    z = np.zeros_like(x)
    z[ok] = sign * (x[ok] - med) / scale
    return z, med, scale


def spearman_rows(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """Spearman rank correlation of each row of ``A`` with the same row of ``B``.

    Ranks are mid-ranks (ties share their mean rank); a pair of positions is
    used only where both rows are finite; NaN where fewer than 3 remain or a
    row is constant.

    Examples
    --------
    >>> spearman_rows(np.array([[1.0, 2, 3, 4]]), np.array([[2.0, 1, 4, 3]])).round(3).tolist()
    [0.6]
    """
    from scipy.stats import rankdata

    A = np.asarray(A, dtype=np.float64)
    B = np.asarray(B, dtype=np.float64)
    out = np.full(A.shape[0], np.nan)
    ok = np.isfinite(A) & np.isfinite(B)
    full = ok.all(axis=1)

    def corr(ra, rb):
        ra = ra - ra.mean(axis=-1, keepdims=True)
        rb = rb - rb.mean(axis=-1, keepdims=True)
        den = np.sqrt((ra * ra).sum(axis=-1) * (rb * rb).sum(axis=-1))
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(den > 0, (ra * rb).sum(axis=-1) / np.where(den > 0, den, 1.0), np.nan)

    if full.any() and A.shape[1] >= 3:
        out[full] = corr(rankdata(A[full], axis=1), rankdata(B[full], axis=1))
    for i in np.flatnonzero(~full):        # rows with gaps in the profile: one by one (rare)
        m = ok[i]
        if m.sum() >= 3:
            out[i] = corr(rankdata(A[i, m]), rankdata(B[i, m]))
    return out


def _off_diagonal(M: np.ndarray) -> np.ndarray:
    """(n, n) -> (n, n - 1): each row without its diagonal element."""
    n = M.shape[0]
    return M[~np.eye(n, dtype=bool)].reshape(n, n - 1)


def complete_core(values: np.ndarray) -> np.ndarray:
    """Positions of a set of taxa whose distances to each other are all present.

    Greedy: drop the taxon with the most missing entries (ties: the later
    position) until none is missing.

    Examples
    --------
    >>> D = np.array([[0, 1, np.nan], [1, 0, 2], [np.nan, 2, 0.0]])
    >>> complete_core(D).tolist()
    [0, 1]
    """
    miss = np.isnan(np.asarray(values, dtype=np.float64))
    keep = np.ones(miss.shape[0], dtype=bool)
    counts = miss.sum(axis=1)
    while True:
        c = np.where(keep, counts, -1)
        worst = int(np.flatnonzero(c == c.max())[-1]) if keep.any() else -1
        if worst < 0 or c[worst] <= 0:
            break
        keep[worst] = False
        counts = counts - miss[:, worst]
    return np.flatnonzero(keep)


def _terminal_branches(dm: DistanceMatrix) -> np.ndarray:
    """Terminal branch length of each taxon in a neighbor-joining tree of the complete core (NaN outside it)."""
    from seqdist.trees.build import neighbor_joining

    n = dm.n
    out = np.full(n, np.nan)
    core = complete_core(dm.values)
    if core.size < 4:
        return out
    sub = DistanceMatrix._trusted(np.asarray(dm.values)[np.ix_(core, core)], [dm.labels[i] for i in core])
    tree = neighbor_joining(sub)
    pos = {lab: i for i, lab in enumerate(dm.labels)}
    for leaf in tree.leaves():
        out[pos[leaf.name]] = float(leaf.length or 0.0)
    return out


def group_counts(aln: Alignment, groups: np.ndarray, n_groups: int) -> tuple[np.ndarray, np.ndarray]:
    """Per group of columns: shared columns and identical residues of every pair.

    Parameters
    ----------
    aln : Alignment
    groups : ndarray (L,) of int
        The group of each column (-1: column not used).
    n_groups : int

    Returns
    -------
    both, same : ndarray (n_groups, n, n) float64
        Columns where both sequences hold an unambiguous residue, and those where the residues agree.

    Examples
    --------
    >>> from seqdist.io.alignment import Alignment
    >>> aln = Alignment.from_sequences(["a", "b"], ["ACGT", "AC-A"])
    >>> both, same = group_counts(aln, np.array([0, 0, 1, 1]), 2)
    >>> both[:, 0, 1].tolist(), same[:, 0, 1].tolist()
    ([2.0, 1.0], [2.0, 0.0])
    """
    n = aln.n
    K = aln.n_states
    both = np.zeros((n_groups, n, n))
    same = np.zeros((n_groups, n, n))
    for g in range(n_groups):
        c = aln.codes[:, groups == g]
        if c.shape[1] == 0:
            continue
        # 32-bit floats hold counts exactly up to 2^24 columns; BLAS products do the counting
        R = (c < K).astype(np.float32)
        both[g] = R @ R.T
        for k in range(K):
            X = (c == k).astype(np.float32)
            same[g] += X @ X.T
    return both, same


def _p(both: np.ndarray, same: np.ndarray) -> np.ndarray:
    """p-distances from counts (NaN where no column is shared)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(both > 0, (both - same) / np.where(both > 0, both, 1.0), np.nan)


#: Nearest relatives compared on the two sides of a cut (``block_incongruence``).
NEAREST = 5


def _smallest(a: np.ndarray, k: int) -> np.ndarray:
    """Column positions of the k smallest values of each row, in increasing order (ties: lower position first).

    The same as ``np.argsort(a, axis=1, kind="stable")[:, :k]``, but partitions
    first (linear per row) and orders only the k kept; rows where a tie
    straddles the k-th place fall back to the full stable sort.

    Examples
    --------
    >>> _smallest(np.array([[3.0, 1.0, 2.0, 1.0]]), 2).tolist()
    [[1, 3]]
    """
    m = a.shape[1]
    if k >= m:
        return np.argsort(a, axis=1, kind="stable")[:, :k]
    part = np.argpartition(a, k - 1, axis=1)[:, :k]
    vals = np.take_along_axis(a, part, 1)
    kth = vals.max(axis=1, keepdims=True)
    out = np.take_along_axis(part, np.lexsort((part, vals), axis=-1), 1)
    amb = (a == kth).sum(axis=1) != (vals == kth).sum(axis=1)
    if amb.any():
        out[amb] = np.argsort(a[amb], axis=1, kind="stable")[:, :k]
    return out


def nearest_shift(order_from: np.ndarray, p: np.ndarray, n: np.ndarray, k: int = NEAREST) -> np.ndarray:
    """Median over the ``k`` nearest relatives of one side of how much farther they are on the other side.

    For each row, the relatives ranked 1..k by ``order_from`` (the distances
    on one side) are looked up in ``p`` (the distances on the other side)
    and compared, rank by rank, with the k smallest values of ``p``; each
    difference is divided by its standard error (binomial variances of the
    two p-distances over ``n`` columns, each p floored at one difference in
    its columns). The row's value is the median of the k standardised
    differences (NaN entries are skipped).

    Examples
    --------
    >>> left = np.array([[0.1, 0.2, 0.3]])
    >>> nearest_shift(left, left, np.full((1, 3), 100.0), k=2).tolist()
    [0.0]
    """
    k = min(int(k), p.shape[1])
    big = np.where(np.isfinite(order_from), order_from, np.inf)
    pp = np.where(np.isfinite(p), p, np.inf)
    o1, o2 = _smallest(big, k), _smallest(pp, k)
    b1, b2 = np.take_along_axis(pp, o1, 1), np.take_along_axis(pp, o2, 1)
    n1, n2 = np.take_along_axis(n, o1, 1), np.take_along_axis(n, o2, 1)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        q1 = np.clip(b1, 1.0 / np.maximum(n1, 1), 1.0)
        q2 = np.clip(b2, 1.0 / np.maximum(n2, 1), 1.0)
        se = np.sqrt(q1 * (1 - q1) / n1 + q2 * (1 - q2) / n2)
        x = (b1 - b2) / se
    x = np.where(np.isfinite(x), x, np.nan)
    out = np.full(p.shape[0], np.nan)
    ok = np.isfinite(x).any(axis=1)
    out[ok] = np.nanmedian(x[ok], axis=1)
    return out


def _incongruence(aln, blocks: int, columns: np.ndarray | None, floor: float):
    """Block incongruence per taxon (see :func:`find_suspects`).

    The columns (all, or ``columns``) are cut into ``blocks`` contiguous
    blocks. At each cut between blocks the taxon's p-distances to the others
    are computed on the columns before the cut and on those after it. Its
    :data:`NEAREST` nearest relatives on the left are looked up on the right
    and compared, rank by rank, with its nearest there (:func:`nearest_shift`),
    and the same from right to left; the statistic at the cut is the smaller
    of the two (both must show the change: the untouched source of a
    chimera's second part sees the chimera as a new close relative on one
    side only). It is scored as a robust z against the other taxa at the
    same cut; a taxon's statistic is its worst cut. The Spearman rank
    correlation between its two distance profiles at that cut is reported
    beside it.

    Returns a dict of per-taxon arrays and the cut positions.
    """
    L = aln.length
    pos = np.arange(L) if columns is None else np.flatnonzero(columns)
    m = pos.size
    edges = np.linspace(0, m, blocks + 1).round().astype(np.int64)
    groups = np.full(L, -1, dtype=np.int64)
    groups[pos] = np.searchsorted(edges, np.arange(m), side="right") - 1
    both, same = group_counts(aln, groups, blocks)
    cb, cs = np.cumsum(both, axis=0), np.cumsum(same, axis=0)
    n = aln.n
    zs, vals, meds, lefts, rights = [], [], [], [], []
    for c in range(1, blocks):
        nl, sl = cb[c - 1], cs[c - 1]
        nr, sr = cb[-1] - nl, cs[-1] - sl
        pl, pr = _off_diagonal(_p(nl, sl)), _off_diagonal(_p(nr, sr))
        nlo, nro = _off_diagonal(nl), _off_diagonal(nr)
        v = np.fmin(nearest_shift(pl, pr, nro), nearest_shift(pr, pl, nlo))
        z, med, _ = robust_z(v, floor, +1)
        zs.append(z)
        vals.append(v)
        meds.append(med)
        lefts.append(pl)
        rights.append(pr)
    Z = np.array(zs)
    worst = np.argmax(Z, axis=0)
    idx = np.arange(n)
    rho = np.full(n, np.nan)
    rho_typ = np.full(n, np.nan)
    for c in np.unique(worst):
        r = spearman_rows(lefts[c], rights[c])
        rho[worst == c] = r[worst == c]
        rho_typ[worst == c] = float(np.nanmedian(r)) if np.isfinite(r).any() else math.nan
    return {"change": np.array(vals)[worst, idx], "typical": np.array(meds)[worst], "z": Z[worst, idx],
            "rho": rho, "rho_typical": rho_typ, "cut": worst + 1, "edges": edges, "positions": pos,
            "shared": both.sum(axis=0)}


def _leaf_instability(aln, labels, model, gamma, gaps, replicates: int, seed: int) -> np.ndarray:
    """One minus the leaf stability (Thorley & Wilkinson 1999), difference form, over bootstrap NJ trees.

    For every quartet (or :data:`QUARTETS_MAX` drawn with the seed) the
    frequencies of its three resolutions among the replicate trees are
    tallied; the quartet's stability is the highest frequency minus the
    second; a taxon's leaf stability is the mean over the quartets holding
    it. A replicate whose tree lacks a taxon of a quartet (a distance
    undefined in that resample) does not count for that quartet.
    """
    from seqdist.audit.report import sample_quartets
    from seqdist.models.distances import pairwise_distances
    from seqdist.trees.build import neighbor_joining

    n = len(labels)
    out = np.full(n, np.nan)
    if n < 4 or replicates <= 0:
        return out
    nq = math.comb(n, 4)
    if nq <= QUARTETS_MAX:
        from itertools import combinations

        Q = np.array(list(combinations(range(n), 4)), dtype=np.int64)
    else:
        Q = sample_quartets(n, QUARTETS_MAX, seed)
    a, b, c, d = Q.T
    tally = np.zeros((len(Q), 3))
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    for _ in range(int(replicates)):
        cols = np.sort(rng.integers(0, aln.length, aln.length))
        dm = pairwise_distances(aln.take_columns(cols), model, gamma=gamma, gaps=gaps, variance=False,
                                progress=False, warn=False).matrix
        core = complete_core(dm.values)
        if core.size < 4:
            continue
        sub = DistanceMatrix._trusted(np.asarray(dm.values)[np.ix_(core, core)], [labels[i] for i in core])
        tree = neighbor_joining(sub)
        for node in tree.preorder():         # topology only: every branch counts 1
            if node is not tree.root:
                node.length = 1.0
        T = np.full((n, n), np.nan)
        T[np.ix_(core, core)] = tree.path_lengths([labels[i] for i in core])
        s = np.stack([T[a, b] + T[c, d], T[a, c] + T[b, d], T[a, d] + T[b, c]], axis=1)
        ok = np.isfinite(s).all(axis=1)
        best = np.argmin(np.where(ok[:, None], s, np.inf), axis=1)
        tally[np.flatnonzero(ok), best[ok]] += 1.0
    tot = tally.sum(axis=1)
    srt = np.sort(tally, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        stab = np.where(tot > 0, (srt[:, 2] - srt[:, 1]) / np.where(tot > 0, tot, 1), np.nan)
    use = np.isfinite(stab)
    ssum = np.zeros(n)
    scnt = np.zeros(n)
    for col in (a, b, c, d):
        ssum += np.bincount(col[use], weights=stab[use], minlength=n)
        scnt += np.bincount(col[use], minlength=n)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(scnt > 0, 1.0 - ssum / np.where(scnt > 0, scnt, 1), np.nan)
    return out


def _fmt(x) -> str:
    if x is None or not np.isfinite(x):
        return "n/a"
    return f"{x:.3g}"


def _pct(x) -> str:
    if x is None or not np.isfinite(x):
        return "n/a"
    return f"{100 * x:.3g}%"


def _r(x) -> float | None:
    """JSON-ready float: rounded to 12 significant digits, None for NaN."""
    x = float(x)
    if not math.isfinite(x):
        return None
    return float(f"{x:.12g}")


# ------------------------------------------------------------------ the API
def find_suspects(dm: DistanceMatrix | ArrayLike, *, audit_report: AuditReport | None = None,
                  alignment: Alignment | None = None, model: str | None = None, gamma: float | None = None,
                  gaps: str = "pairwise", replicates: int = 0, seed: int = 0, threshold: float | None = None,
                  blocks: int = BLOCKS) -> SuspectReport:
    """Rank the taxa by how bad they look, and name those above the threshold.

    Parameters
    ----------
    dm : DistanceMatrix or array_like (n, n)
        The distances (NaN = missing).
    audit_report : AuditReport, optional
        An audit of ``dm`` to reuse (else :func:`seqdist.audit.report.audit` runs, without its bounds).
    alignment : Alignment, optional
        The alignment ``dm`` was computed from; adds the column statistics.
        Every label of ``dm`` must be one of its record ids.
    model, gamma, gaps
        Distance options for the bootstrap replicates (as :func:`seqdist.models.distances.pairwise_distances`);
        ``gaps="complete"`` also restricts the block statistics to complete columns.
    replicates : int
        Bootstrap replicates for ``placement_instability`` (0: not computed; it needs ``alignment``).
    seed : int
        Seed of the quartet sample and the bootstrap; the result depends only on the inputs and the seed.
    threshold : float, optional
        Score at or above which a taxon is a suspect (default :data:`THRESHOLD`).
    blocks : int
        Contiguous blocks of columns for ``block_incongruence`` (the B - 1 cuts between them are tried).

    Returns
    -------
    SuspectReport

    Examples
    --------
    >>> from seqdist.simulate import simulate, plant_chimera
    >>> from seqdist.io.alignment import Alignment
    >>> from seqdist.models.distances import pairwise_distances
    >>> sim = plant_chimera(simulate(16, 600, seed=3), "t05")
    >>> aln = Alignment.from_sequences(sim.labels, [s for _, s in sim.records])
    >>> dm = pairwise_distances(aln, "k80", warn=False, progress=False).matrix
    >>> find_suspects(dm, alignment=aln).suspects[0].label
    't05'
    """
    from seqdist.audit.report import audit

    if not isinstance(dm, DistanceMatrix):
        dm = DistanceMatrix.from_array(dm)
    thr = THRESHOLD if threshold is None else float(threshold)
    if not math.isfinite(thr):
        raise InputError(f"suspect threshold must be a finite number (got {threshold})")
    replicates = int(replicates)
    if replicates < 0:
        raise InputError(f"replicates must be non-negative (got {replicates})")
    blocks = int(blocks)
    if blocks < 2:
        raise InputError(f"blocks must be at least 2 (got {blocks})")
    if gaps not in ("pairwise", "complete"):
        raise InputError(f"unknown gap treatment '{gaps}' (choose from pairwise, complete)")
    n = dm.n
    labels = dm.labels
    values: dict = {}
    typical: dict = {}
    zs: dict = {}
    where: dict = {}

    def put(name, x, floor=None):
        sign, fl = _STATS[name][0], _STATS[name][1]
        z, med, _ = robust_z(x, fl if floor is None else floor, sign)
        values[name], typical[name], zs[name] = np.asarray(x, dtype=np.float64), med, z

    if n >= 4:
        rep = audit_report if audit_report is not None else audit(dm, seed=seed, bounds=False)
        if tuple(rep.labels) != tuple(labels):
            raise InputError("the audit report is of another matrix (its labels differ)")
        checked = rep.taxon_checked.astype(np.float64)
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.where(checked > 0, rep.taxon_counts / np.where(checked > 0, checked, 1), np.nan)
            rel = rep.taxon_excess / rep.largest if rep.largest > 0 else np.zeros(n)
            exc = np.where(checked > 0, rel / np.where(checked > 0, checked, 1), np.nan)
        put("violated_fraction", frac)
        put("violation_excess", exc)
        put("missing_fraction", rep.taxon_missing / (n - 1.0))
        put("delta", np.asarray(rep.taxon_delta, dtype=np.float64))
        term = _terminal_branches(dm)
        fin = term[np.isfinite(term)]
        med_t = float(np.median(fin)) if fin.size else math.nan
        # cube root of the length relative to the typical one: the Wilson & Hilferty (1931) transform
        # that makes gamma (and exponential) variables nearly normal; negative NJ lengths count as 0
        with np.errstate(invalid="ignore", divide="ignore"):
            rel_t = np.cbrt(np.maximum(term, 0.0) / med_t) if med_t > 0 else np.zeros(n)
        put("terminal_branch", rel_t)
        values["terminal_branch"] = term          # shown as a length, scored relative and on the cube-root scale
        typical["terminal_branch"] = med_t

        if alignment is not None:
            aln = _aligned(alignment, labels)
            K = aln.n_states
            R = aln.codes < K
            put("gap_fraction", 1.0 - R.mean(axis=1))
            cols = aln.complete_columns() if gaps == "complete" else None
            used = aln.length if cols is None else int(cols.sum())
            if used < 2 * blocks:
                # too few columns to cut into blocks: the column statistics that need them are left out
                both, _ = group_counts(aln, np.zeros(aln.length, dtype=np.int64) if cols is None
                                       else np.where(cols, 0, -1), 1)
                inc = {"shared": both[0]}
            else:
                inc = _incongruence(aln, blocks, cols, _STATS["block_incongruence"][1])
            med_shared = np.median(_off_diagonal(inc["shared"]), axis=1)
            # scored relative to the typical count, so the floor is a share of the columns
            typ = float(np.median(med_shared)) if med_shared.size else 0.0
            put("compared_columns", med_shared / typ if typ > 0 else np.zeros(n))
            values["compared_columns"] = med_shared
            typical["compared_columns"] = typ
            if "z" in inc:
                values["block_incongruence"], zs["block_incongruence"] = inc["change"], inc["z"]
                typical["block_incongruence"] = inc["typical"]   # per taxon: the typical value at its worst cut
                put("block_rank_correlation", inc["rho"])
                typical["block_rank_correlation"] = inc["rho_typical"]
                col = (inc["positions"] + 1).tolist()
                e = inc["edges"]
                where["block_incongruence"] = where["block_rank_correlation"] = [
                    f"columns {col[0]}-{col[int(e[c]) - 1]} and {col[int(e[c])]}-{col[int(e[-1]) - 1]}"
                    for c in inc["cut"]]
            if replicates > 0:
                put("placement_instability",
                    _leaf_instability(aln, list(labels), model, gamma, gaps, replicates, seed))

    names = list(values)
    groups: dict = {}
    for name in names:
        g = _STATS[name][2]
        if g is not None:
            groups.setdefault(g, []).append(name)
    # (n, groups): each group's largest z, negative parts cut at 0 (typical or better counts as nothing)
    G = np.zeros((n, len(groups)))
    for k, members in enumerate(groups.values()):
        G[:, k] = np.max(np.stack([np.nan_to_num(zs[m], nan=0.0) for m in members]), axis=0)
    G = np.maximum(G, 0.0)
    score = combine(G)
    ranking = []
    for i in range(n):
        ev = {}
        for name in names:
            v = float(values[name][i])
            t = typical[name]
            t = float(t[i]) if isinstance(t, np.ndarray) else float(t)
            z = float(zs[name][i])
            ev[name] = {"value": _r(v), "typical": _r(t), "z": (_r(z) if math.isfinite(z) else 0.0)}
        reasons = []
        # the statistics that carry the score: scored ones at or above REASON_Z, largest first
        for name in sorted(names, key=lambda nm: (-float(zs[nm][i]), names.index(nm))):
            z = float(zs[name][i])
            if not z >= REASON_Z:
                break
            if _STATS[name][2] is None and not (name == "block_rank_correlation"
                                                 and float(zs["block_incongruence"][i]) >= REASON_Z):
                continue
            e = ev[name]
            v, t = e["value"], e["typical"]
            reasons.append(_STATS[name][4].format(
                v=_fmt(v), t=_fmt(t), pct=_pct(v), tpct=_pct(t), where=where.get(name, ["two parts"] * n)[i]))
        ranking.append(Suspect(label=labels[i], score=_r(score[i]) or 0.0, evidence=ev, reasons=tuple(reasons)))
    # most suspicious first; ties by label so the order of the input does not matter
    ranking.sort(key=lambda s: (-s.score, s.label))
    suspects = [s for s in ranking if s.score >= thr]
    return SuspectReport(suspects=suspects, ranking=ranking, threshold=thr, statistics=names)


def _aligned(alignment, labels):
    """The alignment's rows in the matrix's label order (every label must be a record id)."""
    have = set(alignment.labels)
    for lab in labels:
        if lab not in have:
            raise InputError(f"{alignment.source}: taxon '{lab}' of the matrix is not in the alignment")
    if tuple(alignment.labels) == tuple(labels):
        return alignment
    return alignment.subset(list(labels))
