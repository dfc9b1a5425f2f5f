"""seqdist.audit.report against plain references: brute-force triple and quartet loops,
known facts about metrics, tree metrics and ultrametrics, and independent
solvers for the lower bound."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from seqdist.audit.report import HIST_EDGES, audit, sample_quartets
from seqdist.core.matrix import DistanceMatrix

from conftest import euclidean

# ---------------------------------------------------------------- references

# Dyadic values keep every sum exact, so the kernel and the reference agree to the bit;
# zeros and repeated values make ties and degenerate triangles common.
VALUES = [0.0, 0.25, 0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 8.0]


def brute_triangles(D, tol, hard):
    """The contract's definition, one triangle at a time (a plain triple loop)."""
    n = len(D)
    out = dict(checked=0, violated=0, max=0.0, forcing=0, umax=0.0, ucount=0,
               cnt=np.zeros((n, n), int), exc=np.zeros((n, n)), lng=np.zeros((n, n), int), tris=[],
               taxon_checked=np.zeros(n, int))
    largest = np.nanmax(D) if n else 0.0
    hist = np.zeros(len(HIST_EDGES) - 1, int)
    Dl = D.tolist()  # plain floats: the same arithmetic, much faster loops
    for i, j, k in itertools.combinations(range(n), 3):
        sides = [((i, j), Dl[i][j]), ((i, k), Dl[i][k]), ((j, k), Dl[j][k])]
        if any(v != v for _, v in sides):
            continue
        out["checked"] += 1
        for t in (i, j, k):
            out["taxon_checked"][t] += 1
        vals = sorted(v for _, v in sides)
        L = vals[2]
        # three-point condition: the two longest sides equal
        u = vals[2] - vals[1]
        out["umax"] = max(out["umax"], u)
        if u > tol:
            out["ucount"] += 1
        e = L - (vals[0] + vals[1])
        if e > tol:
            out["violated"] += 1
            out["max"] = max(out["max"], e)
            if e > hard:
                out["forcing"] += 1
            longest = next(p for p, v in sides if v == L)
            for p, _ in sides:
                out["cnt"][p] += 1
                out["exc"][p] += e
            out["lng"][longest] += 1
            out["tris"].append((-e, i, j, k))
            r = e / largest
            b = max(q for q in range(len(HIST_EDGES) - 1) if HIST_EDGES[q] <= r)
            hist[b] += 1
    out["hist"] = hist
    for M in ("cnt", "exc", "lng"):
        out[M] = out[M] + out[M].T
    out["tris"].sort()
    return out


def brute_quartets(D, tol):
    n = len(D)
    res = dict(examined=0, missing=0, violated=0, rel=[], delta=[], star=0,
               tsum=np.zeros(n), tn=np.zeros(n, int))
    for i, j, k, l in itertools.combinations(range(n), 4):
        sums = [D[i, j] + D[k, l], D[i, k] + D[j, l], D[i, l] + D[j, k]]
        if any(np.isnan(s) for s in sums):
            res["missing"] += 1
            continue
        S, M, L = sorted(sums)
        res["examined"] += 1
        res["violated"] += (L - M) > tol
        res["rel"].append((L - M) / L if L > 0 else 0.0)
        if L - S > tol:
            # Holland, Huber, Dress & Moulton (2002) Mol Biol Evol 19:2051, delta of a quartet
            dq = (L - M) / (L - S)
            res["delta"].append(dq)
            for t in (i, j, k, l):
                res["tsum"][t] += dq
                res["tn"][t] += 1
        else:
            res["star"] += 1
    return res


@st.composite
def matrices(draw, max_n=40, nan=True):
    n = draw(st.integers(1, max_n))
    vals = draw(st.lists(st.sampled_from(VALUES), min_size=n * n, max_size=n * n))
    A = np.triu(np.array(vals).reshape(n, n), 1)
    if nan and n > 2 and draw(st.booleans()):
        miss = draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=n))
        for i, j in miss:
            if i != j:
                A[min(i, j), max(i, j)] = np.nan
    A = A + A.T
    np.fill_diagonal(A, 0.0)
    return A


def hard_of(tol, D):
    finite = D[~np.isnan(D)]
    return 4 * tol + 16 * np.finfo(float).eps * (finite.max() if finite.size else 0.0)


# ---------------------------------------------------------------- triangle counts
@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(matrices(), st.sampled_from([0.0, 0.25, 1e-9]))
def test_counts_match_brute_force(D, tol):
    """Every count of the fused pass against the plain triple loop (n up to 40
    crosses the 32-row tiles)."""
    r = audit(D, tol=tol, top=7)
    b = brute_triangles(D, tol, hard_of(tol, D))
    n = len(D)
    assert r.triangles == math.comb(n, 3)
    assert r.checked_triangles == b["checked"]
    assert r.violated == b["violated"]
    assert r.max_violation == b["max"]
    assert r.lower_bound["forcing_triangles"] == b["forcing"]
    assert (r.entry_counts == b["cnt"]).all()
    assert (r.entry_longest == b["lng"]).all()
    assert np.allclose(r.entry_excess, b["exc"], rtol=0, atol=1e-9 * max(1.0, np.nanmax(D)) * n)
    assert (r.taxon_counts == b["cnt"].sum(1) // 2).all()
    assert np.allclose(r.taxon_excess, b["exc"].sum(1) / 2, atol=1e-9 * n * n * 8)
    assert (r.taxon_checked == b["taxon_checked"]).all()
    assert (r.histogram == b["hist"]).all()
    # worst triangles: the K largest excesses, ties by position
    assert [(-e, a, bb, c) for a, bb, c, e in r.worst_triangles] == b["tris"][:7]
    # three-point (ultrametric) condition
    assert r.ultrametric["max_deviation"] == b["umax"]
    assert r.ultrametric["violated_triangles"] == b["ucount"]


@settings(max_examples=15, deadline=None)
@given(st.integers(3, 70), st.integers(0, 10_000), st.floats(0.0, 0.5))
def test_counts_random_floats(n, seed, frac_nan):
    """General floats (rounding everywhere), across tile boundaries, with missing entries."""
    rng = np.random.default_rng(seed)
    D = np.triu(rng.uniform(0, 10, (n, n)), 1)
    D[np.triu(rng.random((n, n)) < frac_nan * 0.3, 1)] = np.nan
    D = D + D.T
    np.fill_diagonal(D, 0)
    tol = 1e-12
    r = audit(D, tol=tol, top=3, lp_max=0)  # dense violations: the LP is tested elsewhere
    b = brute_triangles(D, tol, hard_of(tol, D))
    assert (r.checked_triangles, r.violated) == (b["checked"], b["violated"])
    assert (r.entry_counts == b["cnt"]).all()
    assert math.isclose(r.max_violation, b["max"], rel_tol=1e-12, abs_tol=1e-12)


def test_euclidean_points_have_no_violation():
    # distances between points in Euclidean space are a metric (common practice)
    for dim, n in [(1, 30), (2, 45), (5, 60)]:
        r = audit(euclidean(n, dim=dim, seed=dim))
        assert r.violated == 0 and r.max_violation == 0.0 and r.min_changes_lower_bound == 0
        assert r.is_metric and r.verdict()[0]
        assert r.to_dict()["fit_for_tree_methods"] is True


def test_tolerance_is_strict_excess():
    # sides 2, 1, 0.5: excess exactly 0.5; "violated when the longest side exceeds the
    # sum of the other two by more than tol" (CONTRACT.md)
    D = np.array([[0, 2, 1], [2, 0, 0.5], [1, 0.5, 0]])
    assert audit(D, tol=0.5).violated == 0
    assert audit(D, tol=0.25).violated == 1
    assert audit(D, tol=0.25).max_violation == 0.5


def test_default_tolerance_and_ties_not_violated():
    # degenerate triangles (collinear points, identical sequences) are not violations
    D = np.array([[0, 1, 2, 0], [1, 0, 1, 1], [2, 1, 0, 2], [0, 1, 2, 0.]])
    r = audit(D)
    assert r.violated == 0 and r.tol == pytest.approx(2e-9)


def test_ranking_points_at_the_planted_entry_and_taxon():
    D = euclidean(25, seed=3)
    D[4, 17] = D[17, 4] = D[4, 17] * 6  # one entry far too large
    r = audit(D)
    top = r.ranked_entries(1)[0]
    assert sorted(top["pair"]) == ["t17", "t4"]
    assert top["as_longest_side"] == top["violated_triangles"]
    assert {t["taxon"] for t in r.ranked_taxa(2)} == {"t4", "t17"}
    assert r.min_changes_lower_bound == 1


def test_bad_sequence_tops_the_taxa():
    D = euclidean(30, seed=5)
    D[7, :] *= 3.0  # a contaminated sequence: every distance from it inflated
    D[:, 7] = D[7, :]
    D[7, 7] = 0
    r = audit(D)
    assert r.ranked_taxa(1)[0]["taxon"] == "t7"


# ---------------------------------------------------------------- lower bound
def min_hitting_set(tris, nent):
    """Smallest set of entries meeting every triangle (exhaustive, tiny instances)."""
    masks = [(1 << a) | (1 << b) | (1 << c) for a, b, c in tris]
    best = nent
    for m in range(1 << nent):
        pc = bin(m).count("1")
        if pc < best and all(m & t for t in masks):
            best = pc
    return best


def forcing_triangles(D, hard):
    n = len(D)
    pid = {p: k for k, p in enumerate(itertools.combinations(range(n), 2))}
    tris = []
    for i, j, k in itertools.combinations(range(n), 3):
        s = sorted([D[i, j], D[i, k], D[j, k]])
        if s[2] - s[0] - s[1] > hard:
            tris.append((pid[(i, j)], pid[(i, k)], pid[(j, k)]))
    return tris, len(pid)


@settings(max_examples=25, deadline=None)
@given(matrices(max_n=6, nan=False))
def test_lower_bound_below_exact_minimum(D):
    """packing <= bound <= the fewest entries meeting every forcing triangle, which
    is at most the number of entries any repair changes (docs/audit.md)."""
    r = audit(D, tol=0.0)
    lb = r.lower_bound
    tris, nent = forcing_triangles(D, lb["forcing_threshold"])
    exact = min_hitting_set(tris, nent) if tris else 0
    assert lb["packing"] <= r.min_changes_lower_bound <= exact
    if tris:
        assert r.min_changes_lower_bound >= 1


def test_lp_value_matches_an_independent_solver():
    """The certified LP bound equals the LP optimum found by another solver
    (cvxpy with Clarabel, an interior-point method; not HiGHS)."""
    cp = pytest.importorskip("cvxpy")
    rng = np.random.default_rng(11)
    D = np.triu(rng.uniform(1, 10, (9, 9)), 1)
    D = D + D.T
    r = audit(D, tol=0.0)
    tris, nent = forcing_triangles(D, r.lower_bound["forcing_threshold"])
    assert r.lower_bound["lp_status"] == "optimal" and len(tris) > 10
    used = sorted({e for t in tris for e in t})
    pos = {e: k for k, e in enumerate(used)}
    x = cp.Variable(len(used))
    cons = [x >= 0] + [x[pos[a]] + x[pos[b]] + x[pos[c]] >= 1 for a, b, c in tris]
    opt = cp.Problem(cp.Minimize(cp.sum(x)), cons).solve(solver="CLARABEL")
    assert r.lower_bound["lp_value"] == pytest.approx(opt, abs=1e-6)
    assert r.min_changes_lower_bound == max(r.lower_bound["packing"], math.ceil(opt - 1e-6))


@settings(max_examples=25, deadline=None)
@given(st.integers(6, 40), st.integers(1, 12), st.integers(0, 10_000), st.booleans())
def test_lower_bound_never_exceeds_planted_corruption(n, k, seed, lp):
    """Start from a metric, corrupt k entries: changing those k back is a repair, so
    every proven bound is at most k."""
    rng = np.random.default_rng(seed)
    D = euclidean(n, dim=3, seed=seed)
    pairs = list(itertools.combinations(range(n), 2))
    k = min(k, len(pairs))
    for p in rng.choice(len(pairs), k, replace=False):
        i, j = pairs[p]
        f = rng.choice([rng.uniform(2.5, 6), rng.uniform(0.0, 0.2)])
        D[i, j] = D[j, i] = D[i, j] * f
    r = audit(D, lp_max=20_000 if lp else 0)
    assert r.min_changes_lower_bound <= k
    assert r.lower_bound["packing"] <= r.min_changes_lower_bound


def test_lower_bound_with_capped_collection_is_still_valid():
    D = euclidean(40, dim=2, seed=2)
    bad = [(0, 1), (2, 3), (5, 9), (10, 30), (11, 12), (20, 21)]
    for i, j in bad:
        D[i, j] = D[j, i] = D[i, j] * 8 + 5
    full = audit(D)
    capped = audit(D, collect_max=10)
    assert not capped.lower_bound["complete"]
    assert 1 <= capped.min_changes_lower_bound <= full.min_changes_lower_bound <= len(bad)


# ---------------------------------------------------------------- tree-likeness
def random_tree_distances(m, seed):
    """Path lengths between the leaves of a random binary tree with positive edges.

    Built here: start from three leaves on a centre, then repeatedly split a random
    edge with a new internal node and hang a new leaf from it.
    """
    rng = np.random.default_rng(seed)
    edges = {(0, 1): rng.uniform(0.1, 1), (0, 2): rng.uniform(0.1, 1), (0, 3): rng.uniform(0.1, 1)}
    leaves = [1, 2, 3]
    nxt = 4
    while len(leaves) < m:
        (u, v), w = list(edges.items())[rng.integers(len(edges))]
        del edges[(u, v)]
        mid, leaf = nxt, nxt + 1
        nxt += 2
        t = rng.uniform(0.2, 0.8)
        edges[(u, mid)] = w * t
        edges[(mid, v)] = w * (1 - t)
        edges[(mid, leaf)] = rng.uniform(0.1, 1)
        leaves.append(leaf)
    adj = {}
    for (u, v), w in edges.items():
        adj.setdefault(u, []).append((v, w))
        adj.setdefault(v, []).append((u, w))
    D = np.zeros((m, m))
    for a, la in enumerate(leaves):
        dist = {la: 0.0}
        stack = [la]
        while stack:
            x = stack.pop()
            for y, w in adj[x]:
                if y not in dist:
                    dist[y] = dist[x] + w
                    stack.append(y)
        D[a] = [dist[lb] for lb in leaves]
    return D


@pytest.mark.parametrize("m,seed", [(8, 1), (25, 2), (60, 3)])
def test_additive_tree_matrix(m, seed):
    """A tree metric satisfies the four-point condition (Buneman 1974, 'A note on
    the metric properties of trees', J Comb Theory B 17:48) and has delta 0
    (Holland et al. 2002); it is a metric; it is not ultrametric."""
    D = random_tree_distances(m, seed)
    r = audit(D)
    fp = r.four_point
    assert fp["exact"] and fp["examined"] == math.comb(m, 4)
    assert fp["violated"] == 0
    assert fp["delta_mean"] <= 1e-9 and np.nanmax(r.taxon_delta) <= 1e-9
    assert fp["relative_deviation_max"] <= 1e-12
    assert r.violated == 0
    assert not r.ultrametric["ultrametric"]


def test_perturbed_tree_has_four_point_violations():
    D = random_tree_distances(20, 4)
    rng = np.random.default_rng(0)
    E = np.triu(rng.normal(0, 0.05, D.shape), 1)
    D = np.abs(D + E + E.T)
    np.fill_diagonal(D, 0)
    r = audit(D)
    assert r.four_point["violated"] > 0 and r.four_point["delta_mean"] > 0.01


def test_ultrametric_from_average_linkage_is_recognised():
    """Cophenetic distances of a UPGMA ('average') hierarchy are an ultrametric
    (scipy.cluster.hierarchy.linkage / cophenet)."""
    from scipy.cluster.hierarchy import cophenet, linkage
    from scipy.spatial.distance import squareform

    X = np.random.default_rng(4).uniform(0, 10, (40, 3))
    C = squareform(cophenet(linkage(X, "average")))
    r = audit(C)
    assert r.ultrametric["ultrametric"] and r.ultrametric["violated_triangles"] == 0
    assert r.ultrametric["max_deviation"] <= 1e-12
    # one entry moved: no longer ultrametric, and the triangle is named
    C[0, 1] = C[1, 0] = C[0, 1] * 0.5
    r = audit(C)
    assert not r.ultrametric["ultrametric"]
    assert r.ultrametric["max_deviation"] == pytest.approx(C[0, 1], rel=1e-12)  # longest - middle
    assert {"t0", "t1"} <= set(r.ultrametric["worst_triangle"])


@settings(max_examples=30, deadline=None)
@given(matrices(max_n=9), st.sampled_from([0.0, 0.25]))
def test_quartets_match_brute_force(D, tol):
    r = audit(D, tol=tol)
    b = brute_quartets(D, tol)
    fp = r.four_point
    assert fp["exact"]
    assert (fp["examined"], fp["skipped_missing"], fp["violated"], fp["delta_undefined"]) == (
        b["examined"], b["missing"], b["violated"], b["star"])
    if b["examined"]:
        assert fp["relative_deviation_mean"] == pytest.approx(np.mean(b["rel"]), rel=1e-11, abs=1e-12)
        assert fp["relative_deviation_max"] == pytest.approx(max(b["rel"]), rel=1e-11, abs=1e-12)
    if b["delta"]:
        assert fp["delta_mean"] == pytest.approx(np.mean(b["delta"]), rel=1e-11)
        with np.errstate(invalid="ignore"):
            want = np.where(b["tn"] > 0, b["tsum"] / np.maximum(b["tn"], 1), np.nan)
        assert np.allclose(r.taxon_delta, want, equal_nan=True)
        assert sum(fp["delta_histogram"]["counts"]) == len(b["delta"])


def test_delta_of_one_quartet_by_hand():
    # sums 3+3, 4+4, 5+5: delta = (10 - 8) / (10 - 6) = 0.5 (Holland et al. 2002 definition)
    D = np.array([[0, 3, 4, 5], [3, 0, 5, 4], [4, 5, 0, 3], [5, 4, 3, 0.]])
    fp = audit(D).four_point
    assert fp["delta_mean"] == 0.5 and fp["violated"] == 1
    assert fp["relative_deviation_max"] == pytest.approx(0.2)


def test_sampled_quartets_are_reported_and_seeded():
    D = euclidean(30, seed=1)
    a = audit(D, exact_quartets_max=0, quartet_samples=5000, seed=3).four_point
    b = audit(D, exact_quartets_max=0, quartet_samples=5000, seed=3).four_point
    c = audit(D, exact_quartets_max=0, quartet_samples=5000, seed=4).four_point
    assert a["sampled"] and a["sample_size"] == 5000 and a["examined"] == 5000 and a["seed"] == 3
    assert a == b and a["delta_mean"] != c["delta_mean"]
    exact = audit(D).four_point
    assert exact["exact"] and exact["sample_size"] is None
    # a uniform sample estimates the exact mean (5000 quartets: standard error ~0.003)
    assert abs(a["delta_mean"] - exact["delta_mean"]) < 0.03


def test_quartet_sample_is_uniform_over_taxa():
    q = sample_quartets(12, 60_000, seed=0)
    assert (np.diff(q, axis=1) > 0).all()
    freq = np.bincount(q.ravel(), minlength=12) / q.size
    assert np.allclose(freq, 1 / 12, atol=0.005)


# ---------------------------------------------------------------- missing entries
def test_missing_entries_are_skipped_and_counted():
    D = euclidean(12, seed=8)
    D[0, 5] = D[5, 0] = np.nan
    D[3, 4] = D[4, 3] = np.nan
    D[1, 2] = D[2, 1] = D[1, 2] * 10
    r = audit(D)
    b = brute_triangles(D, r.tol, hard_of(r.tol, D))
    assert r.missing_entries == 2
    assert r.triangles - r.checked_triangles == 2 * 10  # each missing entry removes n - 2 triangles
    assert r.checked_triangles == b["checked"] and r.violated == b["violated"] > 0
    assert (r.taxon_checked == b["taxon_checked"]).all()
    fit, line, reasons = r.verdict()
    assert not fit and any("missing" in x for x in reasons)
    assert not r.ultrametric["ultrametric"]
    assert r.four_point["skipped_missing"] == brute_quartets(D, r.tol)["missing"]


def test_all_missing_and_tiny_matrices():
    for n in (1, 2, 3):
        r = audit(np.zeros((n, n)))
        assert r.violated == 0 and r.four_point["examined"] == 0
        assert r.to_dict()["triangles"] == math.comb(n, 3)
    D = np.full((4, 4), np.nan)
    np.fill_diagonal(D, 0)
    r = audit(D)
    assert r.checked_triangles == 0 and r.triangles == 4 and r.missing_entries == 6


def test_json_document_is_deterministic_and_complete():
    import json

    from seqdist.io.matrices import to_jsonable

    D = euclidean(20, seed=9)
    D[2, 3] = D[3, 2] = 40.0
    a = json.dumps(to_jsonable(audit(D, top=5).to_dict()), allow_nan=False)
    b = json.dumps(to_jsonable(audit(D, top=5).to_dict()), allow_nan=False)
    assert a == b
    doc = json.loads(a)
    for key in ["n", "triangles", "violated_triangles", "max_violation", "min_changes_lower_bound",
                "violation_histogram", "worst_triangles", "worst_entries", "taxa", "four_point",
                "ultrametric", "lower_bound", "unchecked_triangles", "fit_for_tree_methods"]:
        assert key in doc
    assert len(doc["worst_triangles"]) == 5 and len(doc["taxa"]) == 20
    assert doc["worst_entries"][0]["pair"] == ["t2", "t3"]


def test_verdict_levels():
    D = euclidean(30, seed=12)
    assert audit(D).level == "fit"
    # one entry slightly too long: few, small violations (the seqdist "minor" convention)
    i, j = np.unravel_index(np.argmax(D), D.shape)
    E = D.copy()
    E[i, j] = E[j, i] = D[i, j] * 1.02
    r = audit(E)
    assert 0 < r.violated <= 0.01 * r.checked_triangles and r.level == "minor" and r.verdict()[0]
    E[i, j] = E[j, i] = D[i, j] * 3
    assert audit(E).level == "not_fit"
    F = D.copy()
    F[0, 1] = F[1, 0] = np.nan
    r = audit(F)
    assert r.level == "not_fit" and "1 missing entry (per taxon: t0 1, t1 1; none elsewhere)" in r.verdict()[1]


# ------------------------------------------------------------- the text summary (issue 14)
def _section(text: str, head: str) -> list[str]:
    """The indented rows under the line starting with ``head``."""
    lines = text.splitlines()
    k = next(i for i, ln in enumerate(lines) if ln.startswith(head))
    out = []
    for ln in lines[k + 2:]:
        if not ln.startswith("  "):
            break
        out.append(ln)
    return out


def test_summary_never_cuts_labels():
    """Labels longer than the old 28/36-character columns were cut to 'taxon_wit~', so two could
    read the same; every label is now printed whole and the columns widen to fit."""
    labels = [f"taxon_with_a_rather_long_name_{i:02d}" for i in range(9)]
    D = euclidean(9, seed=3)
    D[0, 1] = D[1, 0] = D[0, 1] * 6
    D[2, 3] = D[3, 2] = D[2, 3] * 0.02
    text = audit(DistanceMatrix.from_array(D, labels)).summary(top=9)
    assert "~" not in text
    taxa_rows = _section(text, "Worst taxa")
    shown = [row.split()[0] for row in taxa_rows]
    assert set(shown) <= set(labels) and len(shown) == len(set(shown)) >= 4
    entry_rows = _section(text, "Worst entries")
    assert any(row.split()[:3] == [labels[0], "-", labels[1]] for row in entry_rows)
    # the columns line up: every value column starts at the same place
    starts = {len(row) - len(row.lstrip()[len(row.split()[0]):].lstrip()) for row in taxa_rows}
    assert len(starts) == 1


def test_summary_names_only_taxa_above_the_common_missing_level():
    """A saturated pair leaves every other taxon 2 missing entries: naming one of them
    ('x01 (2)') singled it out for nothing."""
    D = euclidean(8, seed=5)
    D[0, :] = D[:, 0] = D[3, :] = D[:, 3] = np.nan
    np.fill_diagonal(D, 0.0)
    r = audit(DistanceMatrix.from_array(D, [f"x{i:02d}" for i in range(8)]))
    line = r.verdict()[1]
    assert "13 missing entries (per taxon: x00 7, x03 7; every other taxon 2)" in line, line
    E = euclidean(8, seed=5)
    E[0, 1:4] = E[1:4, 0] = np.nan
    E[5, 6] = E[6, 5] = np.nan
    line = audit(E).verdict()[1]
    assert "4 missing entries (per taxon: t0 3; the others 0 to 1)" in line, line


def test_summary_counts_share_one_denominator():
    """Each count is given out of what was examined: quartets with a missing side are
    skipped (not counted as 'all of N'), triangles with one are not checked."""
    import json
    import re

    from seqdist.io.matrices import to_jsonable

    D = euclidean(10, seed=6)
    D[1, 2] = D[2, 1] = D[1, 2] * 8
    D[0, 4] = D[4, 0] = np.nan
    r = audit(D)
    doc = json.loads(json.dumps(to_jsonable(r.to_dict())))
    text = r.summary()
    fp = doc["four_point"]
    assert fp["examined"] + fp["skipped_missing"] == fp["quartets"] == math.comb(10, 4)
    assert (f"all {fp['quartets']} quartets; {fp['examined']} examined, {fp['skipped_missing']} skipped: "
            "a side is missing") in text
    assert f"the four-point condition: {fp['violated']} of {fp['examined']} examined" in text
    chk, tri = doc["checked_triangles"], doc["triangles"]
    note = f"{tri - chk} of {tri} not checked: a side is missing"
    assert f"{tri} triangles ({chk} checked; {note})" in text
    assert f"{doc['violated_triangles']} of {chk} checked triangles" in text and note in doc["verdict"]
    um = doc["ultrametric"]
    assert f"{um['violated_triangles']} of {chk} checked triangles beyond tol" in text
    # every "K of M" in the text names a denominator that is one of the totals above
    totals = {fp["quartets"], fp["examined"], chk, tri, doc["violated_triangles"],
              doc["entries_in_violated_triangles"], int(sum(t["violated_triangles"] > 0 for t in doc["taxa"]))}
    for k, m in re.findall(r"(\d+) of (\d+)", text):
        assert int(m) in totals and int(k) <= int(m), (k, m)
    assert "all of" not in text


# ---------------------------------------------------------------- the audit kernels alone
# Plain loops over the same definitions (common practice); each value is computed with the
# same float operations in the same order, so the kernels must agree to the bit.
def _broken(n, seed, k=25, nan=0):
    rng = np.random.default_rng(seed)
    D = euclidean(n, dim=3, seed=seed)
    iu = list(itertools.combinations(range(n), 2))
    for p in rng.choice(len(iu), k, replace=False):
        i, j = iu[p]
        D[i, j] = D[j, i] = D[i, j] * rng.choice([rng.uniform(2.5, 6), rng.uniform(0.0, 0.2)])
    for p in rng.choice(len(iu), nan, replace=False):
        i, j = iu[p]
        D[i, j] = D[j, i] = np.nan
    return np.ascontiguousarray(D)


def _scan(D, tol, top=5):
    from seqdist.kernels.audit_scans import scan_triangles
    from seqdist.kernels.triangles import TILE, tile_starts

    largest = float(np.nanmax(D))
    return scan_triangles(D, tol, hard_of(tol, D), largest, np.array(HIST_EDGES), top, tile_starts(len(D)), TILE)


@pytest.mark.parametrize("cap", [10**9, 0, 1, 7, 40, -1])
def test_collect_triangles_matches_a_plain_listing(cap):
    """All forcing triangles in lexicographic order when they fit under the cap; under a
    smaller cap, the first q of each first index's list, q the largest quota whose total
    fits (at least 1)."""
    from seqdist.kernels.audit_scans import collect_triangles

    D = _broken(45, seed=5, nan=20)
    tol = 0.0
    hard = hard_of(tol, D)
    rows = {}
    Dl = D.tolist()
    for i, j, k in itertools.combinations(range(len(D)), 3):
        x, y, z = Dl[i][k], Dl[j][k], Dl[i][j]
        e = 2.0 * max(x, y, z) - (x + y + z)
        if e > hard:  # NaN never is
            rows.setdefault(i, []).append(((i, j, k), e))
    total = sum(len(v) for v in rows.values())
    assert total > 100
    cap = total - 1 if cap == -1 else cap
    q = max(v for v in range(total + 1) if sum(min(len(r), v) for r in rows.values()) <= cap) if cap < total else total
    q = max(q, 1)
    want = [t for i in sorted(rows) for t in rows[i][:q]]
    abc, e = collect_triangles(D, hard, _scan(D, tol)["pair_hard"], cap)
    assert [tuple(t) for t in abc.tolist()] == [t for t, _ in want]
    assert e.tolist() == [v for _, v in want]


def test_greedy_packing_matches_a_plain_loop():
    from seqdist.kernels.audit_scans import greedy_packing

    rng = np.random.default_rng(3)
    for nent, m in [(5, 4), (120, 300), (40, 500)]:
        ids = np.array([rng.choice(nent, 3, replace=False) for _ in range(m)], dtype=np.int64)
        deg = np.bincount(ids.ravel(), minlength=nent).tolist()
        order = sorted(range(m), key=lambda t: (sum(deg[x] for x in ids[t]), t))
        used, want = set(), [False] * m
        for t in order:
            if not used & set(ids[t].tolist()):
                used |= set(ids[t].tolist())
                want[t] = True
        got = greedy_packing(ids, nent)
        assert got.dtype == bool and got.tolist() == want


@pytest.mark.parametrize("tol", [0.0, 0.5])
def test_quartet_stats_on_a_given_list_match_a_plain_loop(tol):
    """The sampled path: every statistic over the listed quartets (repeats included), in order."""
    from seqdist.kernels.audit_scans import quartet_stats

    D = _broken(14, seed=8, k=10, nan=6)
    D[np.arange(14), np.arange(14)] = 0.0
    Q = sample_quartets(14, 3000, seed=2)
    r = quartet_stats(D, tol, Q, 10)
    n = len(D)
    ex = miss = viol = star = dn = 0
    rel_sum = rel_max = dsum = 0.0
    worst = ()
    tsum, tn, hist = [0.0] * n, [0] * n, [0] * 10
    Dl = D.tolist()
    for i, j, k, l in Q.tolist():
        s = [Dl[i][j] + Dl[k][l], Dl[i][k] + Dl[j][l], Dl[i][l] + Dl[j][k]]
        if any(v != v for v in s):
            miss += 1
            continue
        S, M, L = sorted(s)
        ex += 1
        viol += (L - M) > tol
        rel = (L - M) / L if L > 0 else 0.0
        rel_sum += rel
        if rel > rel_max:
            rel_max, worst = rel, (i, j, k, l)
        if L - S > tol:
            dq = (L - M) / (L - S)  # Holland et al. (2002) delta of a quartet
            dsum += dq
            dn += 1
            for t in (i, j, k, l):
                tsum[t] += dq
                tn[t] += 1
            hist[min(int(dq * 10), 9)] += 1
        else:
            star += 1
    assert (r["examined"], r["missing"], r["violated"], r["star"], r["delta_n"]) == (ex, miss, viol, star, dn)
    assert ex > 1000 and miss > 0 and dn > 0
    assert (r["rel_sum"], r["rel_max"], r["worst"], r["delta_sum"]) == (rel_sum, rel_max, worst, dsum)
    assert r["taxon_delta_sum"].tolist() == tsum and r["taxon_delta_n"].tolist() == tn
    assert r["delta_hist"].tolist() == hist


def test_scan_does_not_depend_on_the_thread_count(tmp_path):
    """The fused scan run with 1 and 3 threads (OpenMP, a fresh process each) gives the
    same arrays as in this process: tiles may finish in any order, but every merged
    tally is an integer and every per-row output belongs to one tile."""
    import os
    import subprocess
    import sys

    D = _broken(100, seed=4, k=60, nan=150)
    np.save(tmp_path / "d.npy", D)
    here = _scan(D, 1e-9)
    # the same call as _scan, importing only the kernels
    code = ("import sys, numpy as np; from seqdist.kernels.audit_scans import scan_triangles; "
            "from seqdist.kernels.triangles import TILE, tile_starts; d = np.load(sys.argv[1]); "
            "r = scan_triangles(d, 1e-9, float(sys.argv[3]), float(np.nanmax(d)), np.array(eval(sys.argv[4])), 5, "
            "tile_starts(len(d)), TILE); np.savez(sys.argv[2], **{k: np.asarray(v) for k, v in r.items()})")
    assert here["row_viol"].sum() > 1000
    for threads in (1, 3):
        out = tmp_path / f"t{threads}.npz"
        env = dict(os.environ, OMP_NUM_THREADS=str(threads))
        subprocess.run([sys.executable, "-c", code, str(tmp_path / "d.npy"), str(out), repr(float(hard_of(1e-9, D))),
                        repr(list(HIST_EDGES))], check=True, env=env)
        with np.load(out) as got:
            for key, value in here.items():
                assert np.array_equal(got[key], np.asarray(value), equal_nan=True), (threads, key)
