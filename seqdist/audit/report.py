"""Audit of a distance matrix: broken triangles, where they are, how many
entries a repair must change at least, and how tree-like the matrix is.

The main entry point is :func:`audit`; it returns an :class:`AuditReport`
whose :meth:`~AuditReport.to_dict` is the JSON document of ``seqdist audit``
and whose :meth:`~AuditReport.summary` is the text report. Definitions,
sources and the proofs of the lower bounds are in docs/audit.md.

Work, for n taxa:

* one fused pass over the C(n, 3) triangles (:func:`seqdist.kernels.audit_scans.scan_triangles`)
  and one more for the three-point (ultrametric) condition, both compiled,
  tiled and parallel over row blocks; memory O(n^2);
* the forcing violated triangles (up to ``collect_max``) for the packing and
  linear-programming bounds; the LP only up to ``lp_max`` triangles;
* four-point and delta statistics over all C(n, 4) quartets when that is at
  most ``exact_quartets_max``, else over ``quartet_samples`` quartets drawn
  uniformly (with replacement) with the seed.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from seqdist.core.errors import InputError
from seqdist.core.matrix import DistanceMatrix, default_tol
from seqdist.core.params import Number

if TYPE_CHECKING:  # only for the annotations
    from numpy.typing import ArrayLike

__all__ = ["AuditReport", "sample_quartets", "audit"]

#: Histogram edges of violation sizes, relative to the largest entry. A
#: violated triangle with excess e falls in bin k when
#: edges[k] <= e / largest < edges[k+1] (the last bin includes 1; e never
#: exceeds the largest entry).
HIST_EDGES = (0.0, 1e-6, 1e-4, 1e-3, 1e-2, 0.05, 0.1, 0.2, 0.5, 1.0)

#: Thresholds of the "minor violations" verdict (a convention of seqdist, not
#: from a published source): at most this fraction of the checked triangles
#: violated, and no excess above this fraction of the largest entry.
MINOR_FRACTION = 0.01
MINOR_EXCESS = 0.05

#: Bins of the delta histogram (the delta plot of Holland et al. 2002): ten of width 0.1.
DELTA_BINS = 10

_EPS = np.finfo(np.float64).eps


#: How many worst triangles, entries and taxa a report lists (one range for the library and ``--top``).
TOP = Number(int, 0, 1000)

def _comb(n: int, k: int) -> int:
    return math.comb(n, k) if n >= k else 0


@dataclass
class AuditReport:
    """Everything :func:`audit` found. Arrays are indexed by taxon position.

    Attributes of note: ``pair_counts`` / ``pair_excess`` / ``pair_longest``
    (packed upper triangle, row by row, as scipy's condensed form) and the
    (n, n) views ``entry_counts`` / ``entry_excess`` / ``entry_longest`` - per
    entry, the violated triangles it is a side of, their summed excess, and in
    how many of them it is the longest side;
    ``taxon_counts`` / ``taxon_excess`` / ``taxon_checked`` (n,);
    ``taxon_delta`` (n,) - mean delta over the examined quartets holding the
    taxon (NaN when none).
    """

    def __repr__(self) -> str:
        bound = self.lower_bound.get("value") if isinstance(self.lower_bound, dict) else None
        suspects = [s.label for s in self.suspects.suspects] if self.suspects is not None else None
        return (f"AuditReport(n={self.n}, violated={self.violated} of {self.checked_triangles} checked, "
                f"max_violation={self.max_violation:.4g}, min_changes_lower_bound={bound}, "
                f"suspects={suspects})")

    labels: tuple
    tol: float
    largest: float
    n: int
    missing_entries: int
    triangles: int
    checked_triangles: int
    violated: int
    max_violation: float
    worst_triangles: list
    histogram: np.ndarray
    pair_counts: np.ndarray
    pair_excess: np.ndarray
    pair_longest: np.ndarray
    taxon_counts: np.ndarray
    taxon_excess: np.ndarray
    taxon_checked: np.ndarray
    taxon_missing: np.ndarray
    lower_bound: dict
    four_point: dict
    taxon_delta: np.ndarray
    ultrametric: dict
    values: np.ndarray = field(repr=False, default=None)
    seconds: dict = field(default_factory=dict)
    suspects: object = field(repr=False, default=None)  # a seqdist.audit.suspects.SuspectReport

    # -------------------------------------------------------------- views
    @property
    def min_changes_lower_bound(self) -> int:
        return int(self.lower_bound["value"])

    @property
    def is_metric(self) -> bool:
        """No violated triangle and no missing entry."""
        return self.violated == 0 and self.missing_entries == 0

    def _square(self, packed, dtype):
        M = np.zeros((self.n, self.n), dtype)
        iu = np.triu_indices(self.n, 1)
        M[iu] = packed
        M.T[iu] = packed
        return M

    @property
    def entry_counts(self) -> np.ndarray:
        """(n, n) violated triangles each entry is a side of."""
        return self._square(self.pair_counts, np.int64)

    @property
    def entry_excess(self) -> np.ndarray:
        """(n, n) summed excess of the violated triangles each entry is a side of."""
        return self._square(self.pair_excess, np.float64)

    @property
    def entry_longest(self) -> np.ndarray:
        """(n, n) violated triangles in which each entry is the longest side."""
        return self._square(self.pair_longest, np.int64)

    def ranked_entries(self, limit: int | None = None) -> list[dict]:
        """Entries in violated triangles, most often first (then summed excess, then position)."""
        c = self.pair_counts
        nz = np.flatnonzero(c)
        if nz.size == 0:
            return []
        if limit is not None and limit < nz.size:
            if limit == 0:
                return []
            # only entries at least as frequent as the limit-th need sorting
            kth = np.partition(c[nz], nz.size - limit)[nz.size - limit]
            nz = nz[c[nz] >= kth]
        ex = self.pair_excess[nz]
        order = nz[np.lexsort((nz, -ex, -c[nz]))]
        if limit is not None:
            order = order[:limit]
        ii, jj = _unpack_pairs(order, self.n)
        out = []
        for p, i, j in zip(order, ii, jj):
            out.append({"pair": [self.labels[i], self.labels[j]], "value": float(self.values[i, j]),
                        "violated_triangles": int(c[p]), "as_longest_side": int(self.pair_longest[p]),
                        "summed_excess": _r12(self.pair_excess[p])})
        return out

    def ranked_taxa(self, limit: int | None = None) -> list[dict]:
        """All taxa, most violated triangles first (then summed excess, then position)."""
        order = self._taxon_order()
        if limit is not None:
            order = order[:limit]
        out = []
        for t in order:
            chk = int(self.taxon_checked[t])
            dl = self.taxon_delta[t]
            out.append({"taxon": self.labels[t], "violated_triangles": int(self.taxon_counts[t]),
                        "checked_triangles": chk, "missing_entries": int(self.taxon_missing[t]),
                        "fraction": (int(self.taxon_counts[t]) / chk) if chk else 0.0,
                        "summed_excess": _r12(self.taxon_excess[t]),
                        "delta": None if dl != dl else _r12(dl)})
        return out

    def taxa_most_involved(self, limit: int = 5) -> list[str]:
        """Labels of the first ``limit`` taxa of :meth:`ranked_taxa` that are in a violated triangle.

        Examples
        --------
        >>> r = audit(DistanceMatrix.from_array([[0, 1, 5, 1], [1, 0, 1, 1], [5, 1, 0, 1], [1, 1, 1, 0]], list("abcd")))
        >>> r.taxa_most_involved(2)
        ['a', 'c']
        """
        return [self.labels[t] for t in self._taxon_order()[:limit] if self.taxon_counts[t]]

    def _taxon_order(self) -> np.ndarray:
        """Taxon positions, most violated triangles first (then summed excess, then position)."""
        return np.lexsort((np.arange(self.n), -self.taxon_excess, -self.taxon_counts))

    @property
    def level(self) -> str:
        """``fit`` (a complete metric), ``minor`` (complete; few, small violations:
        at most MINOR_FRACTION of the triangles, none above MINOR_EXCESS of the
        largest entry) or ``not_fit``."""
        if self.missing_entries:
            return "not_fit"
        if self.violated == 0:
            return "fit"
        frac = self.violated / max(self.checked_triangles, 1)
        if frac <= MINOR_FRACTION and self.max_violation <= MINOR_EXCESS * self.largest:
            return "minor"
        return "not_fit"

    def verdict(self) -> tuple[bool, str, list[str]]:
        """(fit for distance tree methods, one line, the reasons)."""
        reasons = []
        if self.missing_entries:
            reasons.append(f"{self.missing_entries} missing entr{'y' if self.missing_entries == 1 else 'ies'} "
                           f"({_per_taxon(self.labels, self.taxon_missing)}): distance tree methods need every pair")
        if self.violated:
            pct = 100.0 * self.violated / max(self.checked_triangles, 1)
            reasons.append(f"{self.violated} of {self.checked_triangles} checked triangles ({pct:.3g}%"
                           f"{self._unchecked_note('; ')}) break the triangle inequality (largest excess "
                           f"{_g(self.max_violation)}, {_pct(self.max_violation, self.largest)} of the largest entry)")
        level = self.level
        if level == "fit":
            line = "FIT for distance tree methods: the matrix is a metric (complete, no broken triangle)"
        elif level == "minor":
            line = ("FIT for distance tree methods, with minor violations: " + "; ".join(reasons)
                    + f" (few and small: at most {100 * MINOR_FRACTION:g}% of the triangles, no excess above "
                    f"{100 * MINOR_EXCESS:g}% of the largest entry)")
        else:
            line = "NOT FIT for distance tree methods as it is: " + "; ".join(reasons)
        return level != "not_fit", line, reasons

    def _unchecked_note(self, sep: str = ", ") -> str:
        """``sep`` + "M of T not checked: a side is missing", or "" when every triangle was checked."""
        unchecked = self.triangles - self.checked_triangles
        if not unchecked:
            return ""
        return f"{sep}{unchecked} of {self.triangles} not checked: a side is missing"

    # -------------------------------------------------------------- output
    def to_dict(self, list_max: int = 200) -> dict:
        """The JSON document (contract keys first). ``list_max`` caps the entry list."""
        fit, line, reasons = self.verdict()
        lab = self.labels
        hist = {"relative_edges": list(HIST_EDGES),
                "edges": [_r12(e * self.largest) for e in HIST_EDGES],
                "counts": [int(x) for x in self.histogram],
                "definition": "violated triangles by excess / largest entry; bin k holds "
                              "edges[k] <= ratio < edges[k+1], the last bin includes 1"}
        worst = []
        for (a, b, c, e) in self.worst_triangles:
            worst.append(_triangle_json(self.values, lab, a, b, c, e))
        fp = dict(self.four_point)
        fp.pop("worst_idx", None)
        um = dict(self.ultrametric)
        um.pop("worst_idx", None)
        return {
            "n": self.n,
            "triangles": self.triangles,
            "violated_triangles": self.violated,
            "max_violation": _r12(self.max_violation),
            "min_changes_lower_bound": self.min_changes_lower_bound,
            **self._suspects_json(list_max),
            "tol": self.tol,
            "largest_entry": self.largest,
            "missing_entries": self.missing_entries,
            "checked_triangles": self.checked_triangles,
            "unchecked_triangles": self.triangles - self.checked_triangles,
            "violated_fraction": (self.violated / self.checked_triangles) if self.checked_triangles else 0.0,
            "max_violation_relative": (_r12(self.max_violation / self.largest) if self.largest > 0 else 0.0),
            "is_metric": self.is_metric,
            "fit_for_tree_methods": fit,
            "verdict_level": self.level,
            "verdict": line,
            "reasons": reasons,
            "violation_histogram": hist,
            "worst_triangles": worst,
            "entries_in_violated_triangles": int(np.count_nonzero(self.pair_counts)),
            "worst_entries": self.ranked_entries(list_max),
            "taxa": self.ranked_taxa(),
            "lower_bound": self.lower_bound,
            "four_point": fp,
            "ultrametric": um,
        }

    def _suspects_json(self, list_max: int) -> dict:
        if self.suspects is None:
            return {"suspect_taxa": []}
        d = self.suspects.to_dict()
        ranking = d.pop("ranking")
        return {"suspect_taxa": d.pop("suspect_taxa"),
                "suspects": {**d, "ranking": ranking[:list_max], "ranking_listed": min(len(ranking), list_max),
                             "definition": "robust z-scores of per-taxon statistics combined into one score; "
                                           "a suspect scores at least the threshold (docs/suspects.md)"}}

    def _suspects_lines(self, top: int) -> list[str]:
        if self.suspects is None:
            return []
        s = self.suspects
        if not s.suspects:
            best = s.ranking[0].score if s.ranking else 0.0
            return ["", f"Suspect taxa: none (no score reaches the threshold {s.threshold:g}; the highest is "
                        f"{best:.3g})."]
        L = ["", f"Suspect taxa ({len(s.suspects)} of {len(s.ranking)} reach the threshold {s.threshold:g}; "
                 "most suspicious first):"]
        for sus in s.suspects[:top]:
            L.append(f"  {sus.label}  score {sus.score:.3g}")
            for why in sus.reasons:
                L.append(f"      {why}")
        if len(s.suspects) > top:
            L.append(f"  ... and {len(s.suspects) - top} more (see --json)")
        return L

    def summary(self, top: int = 10, source: str | None = None) -> str:
        """A readable report for standard output.

        Every count is given with what it counts out of (checked triangles of
        all, examined quartets of all, listed of how many), and labels are
        never cut: columns widen to the longest label shown.
        """
        L = []
        lab = self.labels
        fit, line, _ = self.verdict()
        L.append(f"audit of {source}" if source else "audit")
        miss = f"{self.missing_entries} missing" if self.missing_entries else "none missing"
        chk = ("all checked" if self.checked_triangles == self.triangles
               else f"{self.checked_triangles} checked{self._unchecked_note('; ')}")
        L.append(f"  {self.n} taxa, {_comb(self.n, 2)} entries ({miss}), {self.triangles} triangles ({chk})")
        L.append(f"  tolerance {_g(self.tol)}; largest entry {_g(self.largest)}")
        L.append("")
        L.append(line + ".")
        L.extend(self._suspects_lines(top))
        if self.violated:
            v = self.violated
            L.append("")
            L.append(f"Violation sizes of the {v} violated triangle{'s' if v != 1 else ''} (excess relative to "
                     f"the largest entry {_g(self.largest)}):")
            for k in range(len(HIST_EDGES) - 1):
                lo, hi = HIST_EDGES[k], HIST_EDGES[k + 1]
                lo_s = "tol" if k == 0 else f"{lo:g}"
                L.append(f"  {lo_s:>6} .. {hi:<6g} {int(self.histogram[k]):>12}")
            shown = self.worst_triangles[:top]
            if shown:
                L.append("")
                L.append(f"Worst triangles ({_listed(len(shown), v, 'violated')}; longest side minus the sum of "
                         "the other two):")
                for (a, b, c, e) in shown:
                    L.append("  " + _triangle_text(self.values, lab, a, b, c, e))
            entries = self.ranked_entries(top)
            if entries:
                n_ent = int(np.count_nonzero(self.pair_counts))
                pairs = [f"{r['pair'][0]} - {r['pair'][1]}" for r in entries]
                w = max([len("pair")] + [len(x) for x in pairs])
                L.append("")
                L.append(f"Worst entries ({_listed(len(entries), n_ent, 'entries in violated triangles')}; "
                         "the first place to look for a bad value):")
                L.append(f"  {'pair':<{w}} {'value':>12} {'violated':>9} {'longest':>8} {'summed excess':>14}")
                for pair, r in zip(pairs, entries):
                    L.append(f"  {pair:<{w}} {_g(r['value']):>12} {r['violated_triangles']:>9} "
                             f"{r['as_longest_side']:>8} {_g(r['summed_excess']):>14}")
            taxa = [r for r in self.ranked_taxa(top) if r["violated_triangles"] > 0]
            if taxa:
                n_tax = int(np.count_nonzero(self.taxon_counts))
                w = max([len("taxon")] + [len(r["taxon"]) for r in taxa])
                L.append("")
                L.append(f"Worst taxa ({_listed(len(taxa), n_tax, 'taxa in violated triangles')}; "
                         "the first place to look for a bad sequence):")
                L.append(f"  {'taxon':<{w}} {'violated':>10} {'of checked':>11} {'fraction':>9} {'summed excess':>14}")
                for r in taxa:
                    L.append(f"  {r['taxon']:<{w}} {r['violated_triangles']:>10} {r['checked_triangles']:>11} "
                             f"{r['fraction']:>9.3g} {_g(r['summed_excess']):>14}")
            L.append("")
            lb = self.lower_bound
            how = f"packing of {lb['packing']} entry-disjoint violated triangles"
            if lb.get("lp_value") is not None:
                how += f"; linear-programming bound {lb['lp_value']:.6g} over {lb['lp_triangles']} triangles"
            if not lb.get("complete", True):
                how += f"; from {lb['triangles_used']} of {lb['forcing_triangles']} forcing triangles"
            L.append(f"Lower bound: any repair must change at least {lb['value']} "
                     f"entr{'y' if lb['value'] == 1 else 'ies'} ({how}).")
        L.append("")
        fp = self.four_point
        ex = fp["examined"]
        if ex:
            drawn = fp["quartets"] if fp["exact"] else fp["sample_size"]
            skipped = fp["skipped_missing"]
            if fp["exact"]:
                how = f"all {fp['quartets']} quartets"
            else:
                how = f"a sample of {fp['sample_size']} of {fp['quartets']} quartets (seed {fp['seed']})"
            if skipped or ex != drawn:
                how += f"; {ex} examined, {skipped} skipped: a side is missing"
            L.append(f"Tree-likeness (four-point condition, {how}):")
            L.append(f"  quartets violating the four-point condition: {fp['violated']} of {ex} examined "
                     f"({_pct4(fp['violated'] / ex)}); relative deviation (L-M)/L mean "
                     f"{fp['relative_deviation_mean']:.3g}, max {fp['relative_deviation_max']:.3g}")
            dm = fp["delta_mean"]
            undefined = fp["delta_undefined"]
            over = ""
            if dm is not None and fp["delta_quartets"] != ex:
                over = f" over {fp['delta_quartets']} of {ex} examined quartets"
            if undefined:
                over += f" ({undefined} undefined: L - S <= tol)"
            L.append(f"  delta score (Holland et al. 2002; 0 = tree-like): mean "
                     f"{'n/a' if dm is None else format(dm, '.3g')}{over}")
            td = [(self.taxon_delta[t], t) for t in range(self.n) if self.taxon_delta[t] == self.taxon_delta[t]]
            td.sort(key=lambda x: (-x[0], x[1]))
            if td:
                L.append("  highest per-taxon delta: " + ", ".join(f"{lab[t]} {v:.3g}" for v, t in td[:min(top, 5)]))
        elif self.n >= 4:
            L.append(f"Tree-likeness: none of the {fp['quartets']} quartets could be examined (a side is missing).")
        um = self.ultrametric
        if self.checked_triangles:
            of = f"{um['violated_triangles']} of {self.checked_triangles} checked triangles"
            if um["ultrametric"]:
                L.append(f"Ultrametric: yes within tol (largest deviation {_g(um['max_deviation'])}): "
                         "UPGMA's equal-rates assumption fits.")
            elif um["violated_triangles"] == 0:
                L.append(f"Ultrametric: cannot tell ({of} beyond tol{self._unchecked_note('; ')}).")
            else:
                w = um.get("worst_triangle")
                where = f" in ({', '.join(w)})" if w else ""
                L.append(f"Ultrametric: no (largest three-point deviation {_g(um['max_deviation'])}{where}, "
                         f"{_pct(um['max_deviation'], self.largest)} of the largest entry; "
                         f"{of} beyond tol{self._unchecked_note('; ')}).")
        return "\n".join(L) + "\n"


# ------------------------------------------------------------------ helpers
def _r12(x: float) -> float:
    """Round to 12 significant digits: sums of many terms stay byte-stable."""
    x = float(x)
    if x == 0 or x != x or math.isinf(x):
        return x
    return float(f"{x:.12g}")


def _g(x) -> str:
    return "n/a" if x is None else f"{float(x):.6g}"


def _pct(x: float, top: float) -> str:
    return f"{100 * x / top:.3g}%" if top > 0 else "n/a"


def _pct4(f: float) -> str:
    s = f"{100 * f:.4g}%"
    return "<0.01%" if 0 < f < 1e-4 else (">99.99%" if 0.9999 < f < 1 else s)


def _listed(shown: int, total: int, what: str) -> str:
    """'the top 10 of 12 violated' / 'all 3 violated'."""
    return f"all {total} {what}" if shown >= total else f"the top {shown} of {total} {what}"


def _per_taxon(labels, counts: np.ndarray, most: int = 5) -> str:
    """Missing entries per taxon: the taxa above the common level, then that level.

    The common level is the count most taxa share (a saturated pair gives
    every other taxon 2); naming one taxon at that level would single it out
    for nothing.

    Examples
    --------
    >>> _per_taxon(["a", "b", "c", "d"], np.array([3, 3, 2, 2]))
    'per taxon: a 3, b 3; every other taxon 2'
    >>> _per_taxon(["a", "b", "c", "d"], np.array([1, 1, 0, 0]))
    'per taxon: a 1, b 1; none elsewhere'
    >>> _per_taxon(["a", "b", "c"], np.array([2, 2, 2]))
    'per taxon: every taxon 2'
    """
    counts = np.asarray(counts, dtype=np.int64)
    values, freq = np.unique(counts, return_counts=True)
    common = int(values[np.argmax(freq)])       # ties: the smaller count (np.unique sorts)
    above = [t for t in np.argsort(-counts, kind="stable") if counts[t] > common]
    parts = [f"{labels[t]} {int(counts[t])}" for t in above[:most]]
    if len(above) > most:
        parts.append(f"{len(above) - most} more above {common}")
    rest = counts[counts <= common]
    if not above:
        tail = f"every taxon {common}" if rest.min() == common else f"{int(freq.max())} taxa {common}, the others fewer"
    elif rest.size == 0:
        tail = ""
    elif rest.min() == common:
        tail = "none elsewhere" if common == 0 else f"every other taxon {common}"
    else:
        tail = f"the others {int(rest.min())} to {common}"
    return "per taxon: " + ", ".join(parts) + ("; " if parts and tail else "") + tail


def _longest(values, a, b, c):
    sides = [((a, b), values[a, b]), ((a, c), values[a, c]), ((b, c), values[b, c])]
    k = max(range(3), key=lambda t: (sides[t][1], -t))
    return sides[k], [sides[t] for t in range(3) if t != k]


def _triangle_json(values, lab, a, b, c, e):
    (lp, lv), others = _longest(values, a, b, c)
    return {"taxa": [lab[a], lab[b], lab[c]], "excess": _r12(e),
            "longest": {"pair": [lab[lp[0]], lab[lp[1]]], "value": float(lv)},
            "others": [{"pair": [lab[p[0]], lab[p[1]]], "value": float(v)} for p, v in others]}


def _triangle_text(values, lab, a, b, c, e):
    (lp, lv), others = _longest(values, a, b, c)
    (p1, v1), (p2, v2) = others
    return (f"excess {_g(e)}: d({lab[lp[0]]}, {lab[lp[1]]}) = {_g(lv)} > "
            f"d({lab[p1[0]]}, {lab[p1[1]]}) + d({lab[p2[0]]}, {lab[p2[1]]}) = {_g(v1)} + {_g(v2)}")


def _row_sums(packed: np.ndarray, n: int) -> np.ndarray:
    """Row sums of the symmetric matrix whose upper triangle is ``packed`` (row by row)."""
    out = np.zeros(n, dtype=packed.dtype)
    start = 0
    for i in range(n - 1):
        seg = packed[start:start + n - i - 1]
        out[i] += seg.sum()
        out[i + 1:] += seg
        start += n - i - 1
    return out


def _unpack_pairs(p: np.ndarray, n: int):
    """Row and column of packed upper-triangle positions (inverse of i*(2n-i-1)/2 + j-i-1)."""
    p = np.asarray(p, dtype=np.int64)
    start = np.arange(n, dtype=np.int64) * (2 * n - np.arange(n, dtype=np.int64) - 1) // 2
    i = np.searchsorted(start, p, side="right") - 1
    j = p - start[i] + i + 1
    return i.tolist(), j.tolist()


def sample_quartets(n: int, size: int, seed: int) -> np.ndarray:
    """``size`` quartets of distinct taxa drawn uniformly with replacement.

    Each row is sorted, and the rows are sorted (for memory locality); the
    result depends only on ``(n, size, seed)``.

    Examples
    --------
    >>> q = sample_quartets(10, 5, seed=1)
    >>> q.shape, bool((np.diff(q, axis=1) > 0).all())
    ((5, 4), True)
    """
    rng = np.random.default_rng(seed)
    parts = []
    have = 0
    while have < size:
        want = size - have
        q = rng.integers(0, n, size=(int(want * 1.2) + 64, 4))
        q.sort(axis=1)
        ok = (np.diff(q, axis=1) > 0).all(axis=1)
        q = q[ok][:want]
        parts.append(q)
        have += len(q)
    q = np.concatenate(parts)
    order = np.lexsort(q.T[::-1])
    return np.ascontiguousarray(q[order], dtype=np.int64)


def _lp_bound(ids: np.ndarray, nent: int, max_iter: int | None):
    """LP relaxation of the hitting set; returns (certified bound, status).

    The solver stops at an iteration count, never at a clock time, so the
    bound is the same on any machine and under any load; a stopped solve
    still gives a certified bound (the scaled duals below).
    """
    from scipy.optimize import linprog
    from scipy.sparse import csr_matrix

    m = len(ids)
    A = csr_matrix((np.full(3 * m, -1.0), ids.ravel(), np.arange(0, 3 * m + 1, 3)), shape=(m, nent))
    if max_iter is None:
        max_iter = max(10_000, 50 * (m + nent))
    opts = {"presolve": True, "maxiter": int(max_iter)}
    res = linprog(np.ones(nent), A_ub=A, b_ub=-np.ones(m), bounds=(0, None), method="highs", options=opts)
    marg = getattr(getattr(res, "ineqlin", None), "marginals", None)
    if marg is None or len(marg) != m:
        return None, str(res.message)
    # y >= 0 is a fractional packing; scale it so that no entry carries more
    # than 1; then sum(y) is a lower bound (weak duality) whatever the solver's
    # accuracy was.
    y = np.maximum(-np.asarray(marg, dtype=np.float64), 0.0)
    load = np.bincount(ids.ravel(), weights=np.repeat(y, 3), minlength=nent)
    s = max(1.0, float(load.max()) if load.size else 1.0)
    return float(y.sum() / s), ("optimal" if res.status == 0 else str(res.message))


def _lower_bound(d, n, hard, scan, collect_max, lp_max, lp_max_iter) -> dict:
    from seqdist.kernels.audit_scans import collect_triangles, greedy_packing

    forcing = int(scan["row_hard"].sum())
    out = {"value": 0, "method": "none", "forcing_triangles": forcing, "forcing_threshold": hard,
           "triangles_used": 0, "complete": True, "packing": 0, "lp_value": None, "lp_triangles": 0,
           "lp_status": None}
    if forcing == 0:
        return out
    abc, _e = collect_triangles(d, hard, scan["pair_hard"], collect_max)
    a, b, c = (abc[:, k].astype(np.int64) for k in range(3))
    pid = np.stack([a * (2 * n - a - 1) // 2 + (b - a - 1), a * (2 * n - a - 1) // 2 + (c - a - 1),
                    b * (2 * n - b - 1) // 2 + (c - b - 1)], axis=1)
    uniq, inv = np.unique(pid, return_inverse=True)
    ids = inv.reshape(-1, 3).astype(np.int64)
    nent = len(uniq)
    chosen = greedy_packing(ids, nent)
    pack = int(chosen.sum())
    out.update(value=pack, method="packing", triangles_used=len(ids), complete=len(ids) == forcing, packing=pack)
    if not lp_max:
        out["lp_status"] = "off"
    elif len(ids) != forcing or len(ids) > lp_max:
        # the LP is only worth its time over the complete set of forcing triangles
        out["lp_status"] = f"skipped: {forcing} forcing triangles, more than the LP limit {min(lp_max, collect_max)}"
    elif pack < nent:
        val, status = _lp_bound(ids, nent, lp_max_iter)
        out.update(lp_triangles=len(ids), lp_status=status)
        if val is not None:
            out["lp_value"] = _r12(val)
            lp_int = int(math.ceil(val - 1e-6))
            if lp_int > pack:
                out.update(value=lp_int, method="lp")
    return out


# ------------------------------------------------------------------ the API
def audit(dm: DistanceMatrix | ArrayLike, tol: float | None = None, top: int = 10, seed: int = 0, *,
          exact_quartets_max: int = 2_000_000, quartet_samples: int = 200_000,
          collect_max: int = 300_000, lp_max: int = 20_000, lp_max_iter: int | None = None,
          bounds: bool = True, suspects: bool = True) -> AuditReport:
    """Audit a distance matrix.

    Parameters
    ----------
    dm : DistanceMatrix or array_like (n, n)
        The matrix (an array is validated and labelled ``t0 .. t{n-1}``).
    tol : float, optional
        Tolerance (default: 1e-9 times the largest entry). A triangle is
        violated when its longest side exceeds the sum of the other two by
        more than ``tol``.
    top : int
        Worst triangles kept.
    seed : int
        Seed of the quartet sample.
    exact_quartets_max : int
        All quartets are examined when there are at most this many.
    quartet_samples : int
        Quartets drawn beyond that.
    collect_max, lp_max : int
        Caps on the forcing triangles collected for the packing bound and on
        the triangles given to the linear program (0 turns the LP off).
    lp_max_iter : int or None
        Simplex iterations for the LP solver (default 50 per row and column,
        at least 10,000): a count, not a clock time, so that the bound is
        the same on every machine.
    bounds : bool
        Compute ``min_changes_lower_bound`` (else it is 0, method "none").
    suspects : bool
        Rank the taxa by how bad they look from the matrix alone
        (:func:`seqdist.audit.suspects.find_suspects`; ``suspect_taxa`` in the
        JSON). ``seqdist run`` adds what the alignment shows.

    Returns
    -------
    AuditReport

    Examples
    --------
    >>> r = audit([[0, 5, 1], [5, 0, 1], [1, 1, 0]])
    >>> r.violated, r.max_violation, r.min_changes_lower_bound
    (1, 3.0, 1)
    >>> r.ranked_taxa(1)[0]["taxon"]
    't0'
    """
    from seqdist.kernels.audit_scans import quartet_stats, scan_triangles
    from seqdist.kernels.triangles import TILE, tile_starts

    if not isinstance(dm, DistanceMatrix):
        dm = DistanceMatrix.from_array(dm)
    top = TOP.check("top", top)
    d = np.ascontiguousarray(dm.values, dtype=np.float64)
    n = dm.n
    finite = d[~np.isnan(d)]
    largest = float(finite.max()) if finite.size else 0.0
    if tol is None:
        tol = default_tol(d)
    tol = float(tol)
    if not (tol >= 0) or math.isinf(tol):
        raise InputError(f"tolerance must be a finite non-negative number (got {tol})")
    secs = {}
    t0 = time.perf_counter()
    missing = dm.missing_count()
    starts = tile_starts(n, TILE)
    # A violated triangle whose excess is above 4 tol (plus a rounding guard)
    # stays violated unless one of its entries moves by more than tol: see docs.
    hard = 4.0 * tol + 16.0 * _EPS * largest
    scan = scan_triangles(d, tol, hard, largest, np.array(HIST_EDGES), top, starts, TILE)
    secs["triangles"] = time.perf_counter() - t0

    violated = int(scan["row_viol"].sum())
    cntp = scan["cnt"]
    exp = scan["qex"].astype(np.float64) * (largest / 2.0 ** 40) if largest > 0 else np.zeros(len(cntp))
    lngp = scan["lng"]
    if violated:
        taxon_counts = _row_sums(cntp, n) // 2
        taxon_excess = _row_sums(exp, n) / 2.0
    else:
        taxon_counts = np.zeros(n, np.int64)
        taxon_excess = np.zeros(n)
    # checked triangles per taxon: sum over b < c of O[t,b] O[t,c] O[b,c] (O = observed)
    if missing:
        O = (~np.isnan(d)).astype(np.float32)
        np.fill_diagonal(O, 0.0)
        taxon_checked = np.rint(((O @ O) * O).sum(axis=1, dtype=np.float64) / 2.0).astype(np.int64)
        checked = int(taxon_checked.sum() // 3)
    else:
        taxon_checked = np.full(n, _comb(n - 1, 2), np.int64)
        checked = _comb(n, 3)
    # the worst triangles: the per-row top lists hold the global top
    tv, tb, tc = scan["topv"], scan["topb"], scan["topc"]
    rows = np.repeat(np.arange(n), tv.shape[1])
    keep = tv.ravel() > 0
    cand = np.stack([rows[keep], tb.ravel()[keep], tc.ravel()[keep]], axis=1)
    cv = tv.ravel()[keep]
    order = np.lexsort((cand[:, 2], cand[:, 1], cand[:, 0], -cv))[:top]
    worst = [(int(cand[k, 0]), int(cand[k, 1]), int(cand[k, 2]), float(cv[k])) for k in order]
    maxv = float(scan["row_max"].max()) if n else 0.0
    secs["ranking"] = time.perf_counter() - t0 - secs["triangles"]

    t1 = time.perf_counter()
    if bounds:
        lb = _lower_bound(d, n, hard, scan, collect_max, lp_max, lp_max_iter)
    else:
        lb = {"value": 0, "method": "none", "forcing_triangles": int(scan["row_hard"].sum()),
              "forcing_threshold": hard, "triangles_used": 0, "complete": False, "packing": 0,
              "lp_value": None, "lp_triangles": 0, "lp_status": None}
    secs["lower_bound"] = time.perf_counter() - t1

    t1 = time.perf_counter()
    nq = _comb(n, 4)
    exact = nq <= exact_quartets_max
    if exact:
        qs = quartet_stats(d, tol, None, DELTA_BINS)
    else:
        qs = quartet_stats(d, tol, sample_quartets(n, quartet_samples, seed), DELTA_BINS)
    ex = qs["examined"]
    dn = qs["taxon_delta_n"]
    with np.errstate(invalid="ignore", divide="ignore"):
        taxon_delta = np.where(dn > 0, qs["taxon_delta_sum"] / np.maximum(dn, 1), np.nan)
    lab = dm.labels
    four = {
        "quartets": nq, "exact": exact, "examined": ex, "sampled": not exact,
        "sample_size": None if exact else quartet_samples, "seed": None if exact else seed,
        "skipped_missing": qs["missing"],
        "violated": qs["violated"], "violated_fraction": qs["violated"] / ex if ex else 0.0,
        "relative_deviation_mean": _r12(qs["rel_sum"] / ex) if ex else 0.0,
        "relative_deviation_max": _r12(qs["rel_max"]),
        "worst_quartet": [lab[i] for i in qs["worst"]] if qs["worst"] and qs["rel_max"] > 0 else None,
        "delta_mean": _r12(qs["delta_sum"] / qs["delta_n"]) if qs["delta_n"] else None,
        "delta_quartets": qs["delta_n"], "delta_undefined": qs["star"],
        "delta_histogram": {"edges": [round(k / DELTA_BINS, 10) for k in range(DELTA_BINS + 1)],
                            "counts": [int(x) for x in qs["delta_hist"]]},
        "definition": "sums S <= M <= L of the three pairings of a quartet; violated when L - M > tol; "
                      "relative deviation (L - M) / L; delta (L - M) / (L - S), undefined when L - S <= tol",
    }
    secs["quartets"] = time.perf_counter() - t1

    umax, ucount, uw = scan["umax"], scan["ucount"], scan["uworst"]
    ultra = {"ultrametric": bool(checked) and ucount == 0 and violated == 0 and missing == 0,
             "max_deviation": umax, "max_deviation_relative": (umax / largest) if largest > 0 else 0.0,
             "violated_triangles": ucount,
             "worst_triangle": [lab[i] for i in uw] if uw else None,
             "definition": "three-point condition: in every triangle the two longest sides are equal; "
                           "deviation = longest - middle; ultrametric when no deviation exceeds tol"}
    secs["total"] = time.perf_counter() - t0

    rep = AuditReport(labels=dm.labels, tol=tol, largest=largest, n=n, missing_entries=missing,
                       triangles=_comb(n, 3), checked_triangles=checked, violated=violated,
                       max_violation=maxv, worst_triangles=worst, histogram=scan["hist"],
                       pair_counts=cntp, pair_excess=exp, pair_longest=lngp,
                       taxon_counts=taxon_counts, taxon_excess=taxon_excess, taxon_checked=taxon_checked,
                       taxon_missing=np.isnan(d).sum(axis=1).astype(np.int64),
                       lower_bound=lb, four_point=four, taxon_delta=taxon_delta, ultrametric=ultra,
                       values=d, seconds=secs)
    if suspects:
        from seqdist.audit.suspects import find_suspects

        t = time.perf_counter()
        rep.suspects = find_suspects(dm, audit_report=rep, seed=seed)
        secs["suspects"] = time.perf_counter() - t
    return rep
