"""Pairs exactly at (and one count short of) the limit of each distance correction.

A correction ``d = sum_k c_k L(x_k)`` is undefined once a log (or, in the gamma forms, power)
argument ``x_k`` reaches 0. With integer counts the limit can be hit exactly (K80: 10
transitions and 10 transversions in 30 columns give 1 - 2P - Q = 0), and floating point may
then leave a tiny positive remainder and a huge finite distance. These tests build alignments
that sit exactly on each limit, check with exact rational arithmetic (the test's own
evaluation of the published formulas, below) that they do, and require a missing entry named
in the one warning; one mismatch fewer must stay defined.

Formulas (each check names its source again):

* Jukes & Cantor 1969: d = -3/4 ln(1 - 4p/3).
* Kimura 1980: d = -1/2 ln(1 - 2P - Q) - 1/4 ln(1 - 2Q).
* Felsenstein 1981 model, distance form of Tajima & Nei 1984: d = -B ln(1 - p/B), B = 1 - sum pi^2.
* Tajima & Nei 1984: b = [1 - sum g^2 + p^2/h]/2, h = sum_{i<j} x_ij^2 / (2 g_i g_j); d = -b ln(1 - p/b).
* Tamura 1992: d = -h ln(1 - P/h - Q) - (1 - h)/2 ln(1 - 2Q).
* Tamura & Nei 1993, eq. 7 (three log terms in P1, P2, Q).
* Lake 1994; Lockhart et al. 1994: LogDet, undefined when det F <= 0.
* Zuckerkandl & Pauling 1965 / Nei & Kumar 2000 (Poisson, -ln(1 - p)); Kimura 1983 (protein,
  -ln(1 - p - 0.2 p^2)); from memory.
* Gamma forms (Jin & Nei 1990; Tamura & Nei 1993): a (x^(-1/a) - 1), the same x.
"""

from __future__ import annotations

import math
import os
import warnings
from fractions import Fraction

import numpy as np
import pytest

from seqdist.core.errors import DataWarning
from seqdist.io.alignment import Alignment
from seqdist.models.distances import distances_from_counts, pairwise_distances

from conftest import open_text

BASES = "ACGT"


# ----------------------------------------------------------------- the test's own exact evaluation
def _counts(a: str, b: str):
    N = [[0] * 4 for _ in range(4)]
    for x, y in zip(a.upper(), b.upper()):
        if x in BASES and y in BASES:
            N[BASES.index(x)][BASES.index(y)] += 1
    return N


def _det(M):
    if len(M) == 1:
        return M[0][0]
    return sum((-1) ** j * M[0][j] * _det([r[:j] + r[j + 1:] for r in M[1:]]) for j in range(len(M)))


def exact_arguments(model: str, a: str, b: str, composition=None):
    """The log arguments x_k of the published formula for the pair (a, b), as exact fractions.

    ``composition``: residue counts A C G T behind whole-alignment base frequencies, or None for the
    pair's own frequencies over its compared columns. None when the model is undefined for the pair
    (no compared column, a zero frequency, LogDet with a residue absent from one sequence).
    """
    N = _counts(a, b)
    S = sum(map(sum, N))
    if S == 0:
        return None
    rows = [sum(N[i]) for i in range(4)]
    cols = [sum(N[i][j] for i in range(4)) for j in range(4)]
    p = 1 - Fraction(sum(N[i][i] for i in range(4)), S)
    P1, P2 = Fraction(N[0][2] + N[2][0], S), Fraction(N[1][3] + N[3][1], S)
    P = P1 + P2
    Q = p - P
    c = composition if composition is not None else [rows[i] + cols[i] for i in range(4)]
    pi = [Fraction(x, sum(c)) for x in c]
    if model == "jc69":  # Jukes & Cantor 1969
        return [1 - Fraction(4, 3) * p]
    if model == "k80":  # Kimura 1980
        return [1 - 2 * P - Q, 1 - 2 * Q]
    if model == "f81":  # Tajima & Nei 1984 form of the F81 distance
        B = 1 - sum(x * x for x in pi)
        return None if B <= 0 else [1 - p / B]
    if model == "tn84":  # Tajima & Nei 1984
        h = Fraction(0)
        for i in range(4):
            for j in range(i + 1, 4):
                x = Fraction(N[i][j] + N[j][i], S)
                if x:
                    if pi[i] * pi[j] == 0:
                        return None
                    h += x * x / (2 * pi[i] * pi[j])
        b = (1 - sum(g * g for g in pi) + (p * p / h if h else 0)) / 2
        return None if b <= 0 else [1 - p / b]
    if model == "t92":  # Tamura 1992
        if composition is None:
            t1, t2 = Fraction(rows[1] + rows[2], S), Fraction(cols[1] + cols[2], S)
            h = t1 + t2 - 2 * t1 * t2
        else:
            theta = pi[1] + pi[2]
            h = 2 * theta * (1 - theta)
        return None if h <= 0 else [1 - P / h - Q, 1 - 2 * Q]
    if model == "tn93":  # Tamura & Nei 1993, eq. 7
        if min(pi) <= 0:
            return None
        pA, pC, pG, pT = pi
        pR, pY = pA + pG, pC + pT
        return [1 - pR * P1 / (2 * pA * pG) - Q / (2 * pR), 1 - pY * P2 / (2 * pC * pT) - Q / (2 * pY),
                1 - Q / (2 * pR * pY)]
    if model == "logdet":  # Lake 1994; Lockhart et al. 1994
        if min(rows) == 0 or min(cols) == 0:
            return None
        return [Fraction(_det(N), S ** 4)]
    raise AssertionError(model)


def exact_distance(model, a, b, composition=None, gamma=None):
    """The published distance evaluated at the exact arguments (float), None when undefined."""
    xs = exact_arguments(model, a, b, composition)
    if xs is None or min(xs) <= 0:
        return None
    N = _counts(a, b)
    S = sum(map(sum, N))
    c = composition if composition is not None else [sum(N[i]) + sum(r[i] for r in N) for i in range(4)]
    pi = [Fraction(x, sum(c)) for x in c]

    def L(x):
        return -math.log(x) if gamma is None else gamma * (float(x) ** (-1 / gamma) - 1)

    if model == "jc69":
        return 0.75 * L(xs[0])
    if model == "k80":
        return 0.5 * L(xs[0]) + 0.25 * L(xs[1])
    if model == "f81":
        return float(1 - sum(x * x for x in pi)) * L(xs[0])
    if model == "logdet":
        rows = [sum(N[i]) for i in range(4)]
        cols = [sum(r[j] for r in N) for j in range(4)]
        return -0.25 * (math.log(xs[0]) - 0.5 * sum(math.log(Fraction(v, S)) for v in rows + cols))
    return None  # other models: only definedness is checked here (values: tests/test_distances.py)


# ----------------------------------------------------------------- pairs on each limit
# (model, term, at the limit, one mismatch fewer[, base frequency sources]): found by a search over
# short random pairs with the exact evaluation above; each is re-checked in the test. For two gap-free
# sequences whole-alignment and pair frequencies agree, except in T92, whose pair form uses
# h = theta1 + theta2 - 2 theta1 theta2 (Tamura 1992), so its first log has one example for each.
LIMITS = [
    ("jc69", 0, ("AAAA", "ACGT"), "AAGT"),                          # p = 3/4 (Jukes & Cantor 1969)
    ("jc69", 0, ("ACGTACGTACGT", "ACGCGATGCATA"), "ACGCGATGCATT"),  # p = 9/12, transitions and transversions
    ("k80", 0, ("A" * 30, "G" * 10 + "C" * 10 + "A" * 10), "G" * 9 + "A" + "C" * 10 + "A" * 10),  # Kimura 1980
    ("k80", 1, ("AAAA", "CCAA"), "CAAA"),                           # 1 - 2Q = 0 (Kimura 1980)
    ("f81", 0, ("GTTAGA", "TGTAAG"), "GGTAAG"),                     # Tajima & Nei 1984 form
    ("tn84", 0, ("CCGC", "CGGG"), "CCGG"),                          # Tajima & Nei 1984
    ("t92", 0, ("ACCTGC", "ATGAAC"), "ACGAAC", ("alignment",)),     # Tamura 1992, first log
    ("t92", 0, ("ACGTTG", "AGATCC"), "ACATCC", ("pair",)),
    ("t92", 1, ("AGCT", "ACAT"), "AGAT"),                           # Tamura 1992, second log
    ("tn93", 0, ("CTGAAT", "CTCGAG"), "CTGGAG"),                    # Tamura & Nei 1993, purine term
    ("tn93", 1, ("GTCGATC", "GTTTCCC"), "GTCTCCC"),                 # pyrimidine term
    ("tn93", 2, ("AGCT", "ACAT"), "AGAT"),                          # transversion term
    ("logdet", 0, ("GGGTCAGGCAAGT", "TCGCCACCGAGTT"), "TGGCCACCGAGTT"),  # det F = 0 (Lake 1994)
]
GAMMA = {"jc69", "k80", "f81", "t92", "tn93"}


def _composition(seqs, complete):
    ok = [[ch in BASES for ch in s] for s in seqs]
    keep = [all(col) for col in zip(*ok)] if complete else None
    c = [0] * 4
    for s in seqs:
        for k, ch in enumerate(s):
            if ch in BASES and (keep is None or keep[k]):
                c[BASES.index(ch)] += 1
    return c


def _layouts(a, b):
    """(gaps, sequences) at the same limit: the plain pair under both gap rules, and a gap column
    that complete deletion drops (so whole-alignment frequencies stay those of the pair)."""
    return [("pairwise", [a, b]), ("complete", [a, b]), ("complete", [a + "A", b + "-"]),
            ("complete", ["-" + a, "C" + b])]


@pytest.mark.parametrize("case", LIMITS, ids=[f"{c[0]}-{c[1]}-{len(c[2][0])}" for c in LIMITS])
def test_exact_limit_is_missing_and_one_fewer_is_defined(case):
    model, term, (a, b), below = case[:4]
    assert sum(x != y for x, y in zip(a, below)) == sum(x != y for x, y in zip(a, b)) - 1
    for freqs in (case[4] if len(case) > 4 else ("alignment", "pair")):
        for gaps, seqs in _layouts(a, b):
            comp = _composition(seqs, gaps == "complete") if freqs == "alignment" else None
            x = exact_arguments(model, a, b, comp)
            # The data really sits on the limit of that term, and only there.
            assert x is not None and x[term] == 0 and all(v > 0 for k, v in enumerate(x) if k != term)
            for gam in (None, 0.5) if model in GAMMA else (None,):
                aln = Alignment.from_sequences(["a", "b"], seqs)
                with warnings.catch_warnings(record=True) as seen:
                    warnings.simplefilter("always")
                    res = pairwise_distances(aln, model, gamma=gam, gaps=gaps, freqs=freqs)
                msgs = [str(w.message) for w in seen]
                assert np.isnan(res.matrix["a", "b"]), (model, gaps, freqs, gam, res.matrix["a", "b"])
                assert res.undefined == (("a", "b", "saturated"),)
                assert len(msgs) == 1 and "a-b (saturated)" in msgs[0] and msgs[0].startswith("1 pair undefined")
                assert not [w for w in seen if issubclass(w.category, RuntimeWarning)]
                # One mismatch fewer: defined, finite, and (where the test evaluates it) the formula's value.
                seqs2 = [seqs[0], seqs[1].replace(b, below)]
                aln2 = Alignment.from_sequences(["a", "b"], seqs2)
                comp2 = _composition(seqs2, gaps == "complete") if freqs == "alignment" else None
                x2 = exact_arguments(model, a, below, comp2)
                assert x2 is not None and min(x2) > 0
                r2 = pairwise_distances(aln2, model, gamma=gam, gaps=gaps, freqs=freqs, warn=False)
                assert r2.undefined == () and np.isfinite(r2.matrix["a", "b"])
                want = exact_distance(model, a, below, comp2, gam)
                if want is not None:
                    assert r2.matrix["a", "b"] == pytest.approx(want, rel=1e-12)


def test_protein_limits():
    # Poisson correction -ln(1 - p) (Zuckerkandl & Pauling 1965; Nei & Kumar 2000, from memory) is
    # undefined at p = 1 exactly; Kimura 1983's -ln(1 - p - 0.2 p^2) at p = (sqrt(1.8) - 1)/0.4, an
    # irrational number no count ratio hits, so there: 6 of 7 differ (p = 0.857 > 0.854) against 5 of 6.
    aln = Alignment.from_sequences(["a", "b", "c", "d"], ["MKVLWQE", "KMLVQWE", "MKVLWQD", "KMLVQWA"])
    res = pairwise_distances(aln, "poisson", warn=False)
    assert ("a", "d", "saturated") in res.undefined and np.isnan(res.matrix["a", "d"])
    assert res.matrix["a", "b"] == pytest.approx(-math.log(1 / 7))  # 6 of 7 differ: one fewer, defined
    g = pairwise_distances(aln, "poisson", gamma=0.5, warn=False)
    assert np.isnan(g.matrix["a", "d"]) and g.matrix["a", "b"] == pytest.approx(0.5 * ((1 / 7) ** -2 - 1))
    k = pairwise_distances(aln, "kimura", warn=False)
    assert np.isnan(k.matrix["a", "b"]) and ("a", "b", "saturated") in k.undefined
    k6 = pairwise_distances(Alignment.from_sequences(["a", "b"], ["MKVLWQ", "KMLVQQ"]), "kimura", warn=False)
    p = 5 / 6
    assert k6.matrix["a", "b"] == pytest.approx(-math.log(1 - p - 0.2 * p * p))


def test_counts_near_the_limit_are_exact_at_any_length():
    # K80 (Kimura 1980) with S = 10^9 columns: 2P + Q = S exactly is saturated, S - 1 is defined
    # (x = 1e-9, within the window where the sign is recomputed from the integer counts).
    S = 10 ** 9
    for short, expect_nan in ((0, True), (1, False)):
        N = np.zeros((4, 4))
        N[0, 2] = 3 * 10 ** 8           # transitions: 2P = 6e8
        N[0, 1] = 4 * 10 ** 8 - short   # transversions: 1 - 2Q = 0.2
        N[0, 0] = S - N.sum()
        d, v, r = distances_from_counts(N, "k80")
        assert bool(np.isnan(d)) is expect_nan and int(r) == (2 if expect_nan else 0)
        if not expect_nan:
            P, Q = Fraction(3 * 10 ** 8, S), Fraction(4 * 10 ** 8 - 1, S)
            want = -0.5 * math.log(1 - 2 * P - Q) - 0.25 * math.log(1 - 2 * Q)
            assert float(d) == pytest.approx(want, rel=1e-12)


def test_frequencies_use_the_documented_margin():
    # Frequencies (not counts) cannot be decided exactly: x <= 1e-12 (1 + sum |a_j p_j|) is saturated
    # (docs/distances.md). K80 with 1 - 2Q = 1e-14 is missing, with 1 - 2Q = 1e-9 defined.
    for rest, expect_nan in ((1e-14, True), (1e-9, False)):
        N = np.zeros((4, 4))
        N[0, 1] = (1 - rest) / 2  # transversions Q, so 1 - 2Q = rest
        N[0, 0] = 1 - N[0, 1]
        d, _, r = distances_from_counts(N, "k80", variance=False)
        assert bool(np.isnan(d)) is expect_nan


# ----------------------------------------------------------------- through the command line
def _fasta(path, names, seqs):
    with open(path, "w") as f:
        f.writelines(f">{n}\n{s}\n" for n, s in zip(names, seqs))
    return str(path)


def _read_na(path):
    from seqdist.io.matrices import read_matrix

    return read_matrix(str(path))


CLI_CASES = [
    # model, extra options, sequences (a at the limit with b and c; d one mismatch short of a-b)
    ("k80", [], ["A" * 30, "G" * 10 + "C" * 10 + "A" * 10, "C" * 15 + "A" * 15, "G" * 9 + "A" + "C" * 10 + "A" * 10]),
    ("k80", ["--gaps", "complete"], ["A" * 30 + "A", "G" * 10 + "C" * 10 + "A" * 10 + "-",
                                     "C" * 15 + "A" * 15 + "T", "G" * 9 + "A" + "C" * 10 + "A" * 10 + "G"]),
    ("k80", ["--gamma", "0.5"], ["A" * 30, "G" * 10 + "C" * 10 + "A" * 10, "C" * 15 + "A" * 15,
                                 "G" * 9 + "A" + "C" * 10 + "A" * 10]),
    ("tn93", ["--freqs", "pair"], ["CTGAAT", "CTCGAG", "ACGTAC", "CTGGAG"]),
    ("logdet", [], ["GGGTCAGGCAAGT", "TCGCCACCGAGTT", "GGGTCAGGCAAGA", "TGGCCACCGAGTT"]),
]


@pytest.mark.parametrize("model,extra,seqs", CLI_CASES, ids=[f"{c[0]}{''.join(c[1])}" for c in CLI_CASES])
def test_cli_exact_limits(cli, tmp_path, model, extra, seqs):
    names = ["a", "b", "c", "d"]
    path = _fasta(tmp_path / "lim.fasta", names, seqs)
    out = tmp_path / "d.tsv"
    p = cli("distances", path, "-o", str(out), "--model", model, *extra)
    assert p.returncode == 0, p.stderr
    assert "RuntimeWarning" not in p.stderr and ".py:" not in p.stderr
    D = _read_na(out)
    complete = "complete" in extra
    gam = float(extra[extra.index("--gamma") + 1]) if "--gamma" in extra else None
    if complete:
        keep = [k for k in range(len(seqs[0])) if all(s[k] in BASES for s in seqs)]
        used = ["".join(s[k] for k in keep) for s in seqs]
    else:
        used = seqs
    comp = None if ("--freqs" in extra or model == "logdet") else _composition(used, False)
    expect_undefined = []
    for i in range(4):
        for j in range(i + 1, 4):
            x = exact_arguments(model, used[i], used[j], comp)
            if x is None or min(x) <= 0:
                expect_undefined.append(f"{names[i]}-{names[j]}")
            assert np.isnan(D[names[i], names[j]]) == (x is None or min(x) <= 0), (names[i], names[j], x)
    assert "a-b" in expect_undefined and "a-d" not in expect_undefined  # the case does what it says
    warn = [ln for ln in p.stderr.splitlines() if ln.startswith("seqdist: warning:")]
    assert len(warn) == 1 and warn[0].startswith(f"seqdist: warning: {len(expect_undefined)} pair")
    for pair in expect_undefined:
        assert pair in warn[0]
    want = exact_distance(model, used[0], used[3], comp, gam)
    if want is not None:
        assert D["a", "d"] == pytest.approx(want, rel=1e-12)


# ----------------------------------------------------------------- regression on simulated data
def _undefined_by_counts(aln, model, complete):
    """Pairs undefined by the exact evaluation above, over the columns the gap rule keeps."""
    letters = ["".join(BASES[c] if c < 4 else "-" for c in row) for row in aln.codes]
    if complete:
        keep = [k for k in range(aln.length) if all(s[k] != "-" for s in letters)]
        letters = ["".join(s[k] for k in keep) for s in letters]
    comp = _composition(letters, False) if model in ("f81", "t92", "tn93", "tn84") else None
    out = []
    for i in range(aln.n):
        for j in range(i + 1, aln.n):
            x = exact_arguments(model, letters[i], letters[j], comp)
            if x is None or min(x) <= 0:
                out.append((aln.labels[i], aln.labels[j]))
    return out


@pytest.mark.parametrize("gaps", ["complete", "pairwise"])
def test_simulated_missing_entries_equal_undefined_pairs(gaps):
    # Measured before the fix on this seeded simulation (8 taxa x 30 columns, complete deletion,
    # K80): 3 missing entries where 6 pairs are undefined by their integer counts (Kimura 1980).
    from seqdist.simulate import simulate

    sim = simulate(8, 30, seed=3, branch_mean=0.3, indel_rate=0.02)
    aln = Alignment.from_sequences(*zip(*sim.records))
    for model in ("jc69", "k80", "f81", "tn84", "t92", "tn93", "logdet"):
        want = _undefined_by_counts(aln, model, gaps == "complete")
        with warnings.catch_warnings(record=True) as seen:
            warnings.simplefilter("always")
            res = pairwise_distances(aln, model, gaps=gaps, progress=False)
        D = res.matrix.values
        iu = np.triu_indices(aln.n, 1)
        missing = [(aln.labels[i], aln.labels[j]) for i, j in zip(*iu) if np.isnan(D[i, j])]
        assert sorted(missing) == sorted(want), model
        assert sorted((a, b) for a, b, _ in res.undefined) == sorted(want)
        msgs = [str(w.message) for w in seen if issubclass(w.category, DataWarning)]
        assert not [w for w in seen if issubclass(w.category, RuntimeWarning)]
        if want:
            assert len(msgs) == 1 and msgs[0].startswith(f"{len(want)} pair")
            # The line names pairs until it would grow long, then counts the rest ("and K more").
            named = [(a, b) for a, b in want if f"{a}-{b} (" in msgs[0]]
            rest = len(want) - len(named)
            assert len(named) >= min(len(want), 6) and (rest == 0 or msgs[0].endswith(f"and {rest} more"))
        else:
            assert msgs == []


def test_simulated_regression_through_the_command_line(cli, tmp_path):
    fa = tmp_path / "sim.fasta"
    p = cli("simulate", "-o", str(fa), "--tree-out", str(tmp_path / "t.nwk"), "--taxa", "8", "--columns", "30",
            "--seed", "3", "--branch-mean", "0.3", "--indels", "0.02", "--quiet")
    assert p.returncode == 0, p.stderr
    from seqdist.io.alignment import read_alignment

    want = _undefined_by_counts(read_alignment(str(fa)), "k80", True)
    assert len(want) == 6  # by the integer counts (Kimura 1980); the old code wrote 3 of them as missing
    out, und = tmp_path / "d.tsv", tmp_path / "u.txt"
    p = cli("distances", str(fa), "-o", str(out), "--model", "k80", "--gaps", "complete", "--undefined", str(und))
    assert p.returncode == 0, p.stderr
    D = _read_na(out)
    n_missing = int(np.isnan(D.values[np.triu_indices(D.n, 1)]).sum())
    listed = [tuple(ln.split("\t")) for ln in open_text(und).splitlines() if ln and not ln.startswith("#")]
    assert n_missing == len(listed) == len(want)
    assert sorted(listed) == sorted(want)
    warn = [ln for ln in p.stderr.splitlines() if "warning" in ln]
    assert len(warn) == 1 and all(f"{a}-{b} (saturated)" in warn[0] for a, b in want)
    assert os.path.getsize(out) > 0
