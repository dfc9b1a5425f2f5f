"""Distance models against published formulas, matrix exponentials and Biopython.

Sources (named again beside each check):

* Jukes & Cantor 1969, Evolution of protein molecules (JC69).
* Kimura 1980, J. Mol. Evol. 16:111-120 (K80 distance and its variance).
* Kimura & Ohta 1972, J. Mol. Evol. 2:87-90 (variance of the JC69 distance).
* Felsenstein 1981, J. Mol. Evol. 17:368-376 (F81 model).
* Tajima & Nei 1984, Mol. Biol. Evol. 1:269-285 (TN84 distance, its variance; F81 distance form).
* Tamura 1992, Mol. Biol. Evol. 9:678-687 (T92 distance).
* Tamura & Nei 1993, Mol. Biol. Evol. 10:512-526 (TN93 distance and its gamma form).
* Jin & Nei 1990, Mol. Biol. Evol. 7:82-102 (gamma forms of JC69 and K80 and their variances).
* Lake 1994, PNAS 91:1455-1459 (paralinear distance); Lockhart et al. 1994, Mol. Biol. Evol. 11:605-612 (LogDet).
* Kimura 1983, The Neutral Theory of Molecular Evolution, ch. 4 (protein approximation), formula from memory.
* Nei & Kumar 2000, Molecular Evolution and Phylogenetics, ch. 2-3 (Poisson correction, its variance and
  gamma form; delta-method variances), from memory.

The exact checks build the expected pair-frequency matrix of a model at a
known time t, F = diag(pi) expm(Q t) (scipy.linalg.expm), or its average over
gamma-distributed rates (scipy.integrate.quad_vec), and recover t.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.integrate import quad, quad_vec
from scipy.linalg import expm
from scipy.stats import gamma as gamma_dist

from seqdist.core.errors import DataWarning
from seqdist.io.alignment import Alignment
from seqdist.models.distances import (
    DNA_MODELS,
    GAMMA_MODELS,
    PROTEIN_MODELS,
    distances_from_counts,
    pairwise_distances,
    undefined_message,
)

# A C G T; transitions are A<->G and C<->T.
TRANSITION = np.array([[0, 0, 1, 0], [0, 0, 0, 1], [1, 0, 0, 0], [0, 1, 0, 0]], bool)
AG = np.zeros((4, 4), bool)
AG[0, 2] = AG[2, 0] = True
CT = TRANSITION & ~AG


def rate_matrix(pi, kappa1=1.0, kappa2=None, exch=None):
    """TN93-family rate matrix q_ij = pi_j * (kappa1 for A<->G, kappa2 for C<->T, 1 otherwise),
    or q_ij = exch_ij pi_j (GTR); scaled to one expected substitution per site."""
    pi = np.asarray(pi, float)
    kappa2 = kappa1 if kappa2 is None else kappa2
    if exch is None:
        exch = np.where(AG, kappa1, np.where(CT, kappa2, 1.0))
    Q = exch * pi[None, :]
    np.fill_diagonal(Q, 0)
    np.fill_diagonal(Q, -Q.sum(1))
    return Q / -(pi * np.diag(Q)).sum()


def pair_freqs(Q, pi, t, alpha=None):
    """Expected pair frequencies F = diag(pi) expm(Q t) (gamma-averaged when alpha is given)."""
    if alpha is None:
        return np.diag(pi) @ expm(Q * t)
    K = len(pi)
    # Rates r ~ Gamma(shape a, scale 1/a); with r = u^(1/a) the density times dr/du is the smooth
    # a^(a-1) / Gamma(a) exp(-a r), so the integrable singularity at r = 0 for a < 1 disappears.
    const = alpha ** (alpha - 1) / math.gamma(alpha)

    def f(u):
        r = u ** (1 / alpha)
        return (np.diag(pi) @ expm(Q * t * r)).ravel() * const * math.exp(-alpha * r)

    val, _ = quad_vec(f, 0, np.inf, epsabs=1e-15, epsrel=1e-13)
    return val.reshape(K, K)


PI = np.array([0.1, 0.2, 0.3, 0.4])
PI_T92 = np.array([0.35, 0.15, 0.15, 0.35])  # theta = GC = 0.3, pi_A = pi_T (Tamura 1992)
UNIFORM = np.full(4, 0.25)

# (model, rate matrix, stationary frequencies): the model is exact for data from that matrix.
EXACT = [
    ("jc69", rate_matrix(UNIFORM), UNIFORM),                       # Jukes & Cantor 1969
    ("k80", rate_matrix(UNIFORM, 3.0), UNIFORM),                   # Kimura 1980
    ("f81", rate_matrix(PI), PI),                                  # Felsenstein 1981
    ("tn84", rate_matrix(PI), PI),                                 # Tajima & Nei 1984 (exact under F81)
    ("t92", rate_matrix(PI_T92, 4.0), PI_T92),                     # Tamura 1992
    ("tn93", rate_matrix(PI, 5.0, 2.0), PI),                       # Tamura & Nei 1993
]


@pytest.mark.parametrize("model,Q,pi", EXACT, ids=[e[0] for e in EXACT])
@pytest.mark.parametrize("t", [0.01, 0.3, 1.2])
def test_recovers_time_from_matrix_exponential(model, Q, pi, t):
    F = pair_freqs(Q, pi, t)
    for freqs in (pi, None):  # whole-alignment frequencies, and per-pair ones from F itself
        d, _, reason = distances_from_counts(F, model, base_frequencies=freqs, variance=False)
        assert reason == 0
        assert d == pytest.approx(t, rel=1e-9)


@pytest.mark.parametrize("model,Q,pi", [e for e in EXACT if e[0] in GAMMA_MODELS], ids=lambda e: str(e)[:6])
@pytest.mark.parametrize("alpha", [0.5, 2.0])
def test_gamma_forms_recover_time(model, Q, pi, alpha):
    # Gamma forms: Jin & Nei 1990 (JC69, K80), Tamura & Nei 1993 (TN93); the same substitution of
    # -ln x by a (x^(-1/a) - 1) for F81 and T92 (Nei & Kumar 2000, from memory).
    t = 0.6
    F = pair_freqs(Q, pi, t, alpha)
    d, _, reason = distances_from_counts(F, model, gamma=alpha, base_frequencies=pi, variance=False)
    assert reason == 0
    assert d == pytest.approx(t, rel=1e-7)
    # Ignoring the rate variation underestimates (common practice).
    d0, _, _ = distances_from_counts(F, model, base_frequencies=pi, variance=False)
    assert d0 < t


def test_logdet_is_minus_quarter_trace_for_any_reversible_model():
    # Paralinear distance (Lake 1994): F = Pi expm(Qt) gives d = -1/4 ln det expm(Qt) = -t tr(Q) / 4
    # (det expm(A) = exp(tr A)); with equal frequencies that is t itself.
    rng = np.random.default_rng(5)
    ex = rng.uniform(0.5, 3.0, (4, 4))
    ex = ex + ex.T
    for pi in (PI, UNIFORM):
        Q = rate_matrix(pi, exch=ex)
        for t in (0.05, 0.4, 1.5):
            d, _, reason = distances_from_counts(pair_freqs(Q, pi, t), "logdet", variance=False)
            assert reason == 0
            assert d == pytest.approx(-t * np.trace(Q) / 4, rel=1e-9)
    d, _, _ = distances_from_counts(pair_freqs(rate_matrix(UNIFORM, exch=ex), UNIFORM, 0.7), "logdet")
    assert d == pytest.approx(0.7, rel=1e-9)


def test_logdet_against_slogdet():
    # Independent evaluation with numpy.linalg.slogdet (Lockhart et al. 1994 / Lake 1994 formula).
    rng = np.random.default_rng(2)
    N = rng.integers(0, 50, (200, 4, 4)).astype(float) + np.eye(4) * 200
    d, v, r = distances_from_counts(N, "logdet")
    F = N / N.sum(axis=(1, 2))[:, None, None]
    sign, ld = np.linalg.slogdet(F)
    ref = -0.25 * (ld - 0.5 * (np.log(F.sum(2)).sum(1) + np.log(F.sum(1)).sum(1)))
    ok = sign > 0
    assert np.allclose(d[ok], ref[ok], rtol=1e-10)
    assert (r[~ok] == 2).all()
    # A relabelled copy of a sequence (A<->C, G<->T) is at LogDet distance 0 (Lockhart et al. 1994).
    P = np.array([[0, 1, 0, 0], [1, 0, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]]) * [[30], [20], [25], [25]]
    assert distances_from_counts(P, "logdet")[0] == pytest.approx(0.0, abs=1e-12)


def test_poisson_and_kimura_protein_formulas():
    # Poisson correction d = -ln(1 - p), exact when p = 1 - exp(-t) (Nei & Kumar 2000, eq. 2.?, from memory).
    for t in (0.05, 0.5, 2.0):
        p = 1 - math.exp(-t)
        N = np.diag(np.full(20, (1 - p) / 20))
        N[0, 1] = p
        d, v, r = distances_from_counts(N, "poisson", variance=False)
        assert d == pytest.approx(t, rel=1e-12)
        # Gamma form a[(1 - p)^(-1/a) - 1], exact for p = 1 - E[exp(-r t)] with r ~ Gamma(a, 1/a).
        a = 0.8
        ex, _ = quad(lambda r: math.exp(-r * t) * gamma_dist.pdf(r, a, scale=1 / a), 0, np.inf,
                     epsabs=1e-15, epsrel=1e-13)
        Ng = np.diag(np.full(20, ex / 20))
        Ng[0, 1] = 1 - ex
        dg, _, _ = distances_from_counts(Ng, "poisson", gamma=a, variance=False)
        assert dg == pytest.approx(t, rel=1e-8)
    # Kimura 1983: d = -ln(1 - p - 0.2 p^2), written out here.
    for mism, total in ((30, 100), (5, 400), (70, 100)):
        N = np.diag(np.full(20, (total - mism) / 20))
        N[2, 5] = mism
        p = mism / total
        d, v, r = distances_from_counts(N, "kimura")
        assert d == pytest.approx(-math.log(1 - p - 0.2 * p * p), rel=1e-13)
        # Its delta-method variance: (dd/dp)^2 p (1 - p) / n.
        assert v == pytest.approx(((1 + 0.4 * p) / (1 - p - 0.2 * p * p)) ** 2 * p * (1 - p) / total, rel=1e-12)
    # Undefined once 1 - p - 0.2 p^2 <= 0, i.e. p >= (sqrt(1.8) - 1) / 0.4 = 0.854...
    N = np.diag(np.full(20, 0.14 / 20))
    N[0, 1] = 0.86
    assert distances_from_counts(N, "kimura")[2] == 2


def _dna_counts(same=(40, 30, 15, 5), ag=5, ct=3, tv=(2, 1, 1, 2)):
    N = np.diag(np.array(same, float))
    N[0, 2] = ag
    N[1, 3] = ct
    N[0, 1], N[0, 3], N[1, 2], N[2, 3] = tv
    return N


def test_published_formulas_and_variances():
    N = _dna_counts()
    n = N.sum()
    P = (N[0, 2] + N[1, 3]) / n
    Q = (N[0, 1] + N[0, 3] + N[1, 2] + N[2, 3]) / n
    p = P + Q
    # p-distance and its binomial variance (common practice).
    d, v, _ = distances_from_counts(N, "p")
    assert (d, v) == pytest.approx((p, p * (1 - p) / n), rel=1e-13)
    # JC69 (Jukes & Cantor 1969) and its variance (Kimura & Ohta 1972).
    d, v, _ = distances_from_counts(N, "jc69")
    assert d == pytest.approx(-0.75 * math.log(1 - 4 * p / 3), rel=1e-13)
    assert v == pytest.approx(p * (1 - p) / (n * (1 - 4 * p / 3) ** 2), rel=1e-12)
    # K80 and its variance (Kimura 1980): a = 1/(1-2P-Q), b = [1/(1-2P-Q) + 1/(1-2Q)]/2.
    d, v, _ = distances_from_counts(N, "k80")
    assert d == pytest.approx(-0.5 * math.log(1 - 2 * P - Q) - 0.25 * math.log(1 - 2 * Q), rel=1e-13)
    a = 1 / (1 - 2 * P - Q)
    b = 0.5 * (1 / (1 - 2 * P - Q) + 1 / (1 - 2 * Q))
    assert v == pytest.approx((a * a * P + b * b * Q - (a * P + b * Q) ** 2) / n, rel=1e-12)
    # Gamma forms and variances (Jin & Nei 1990).
    al = 0.7
    d, v, _ = distances_from_counts(N, "jc69", gamma=al)
    assert d == pytest.approx(0.75 * al * ((1 - 4 * p / 3) ** (-1 / al) - 1), rel=1e-13)
    assert v == pytest.approx(p * (1 - p) / n * (1 - 4 * p / 3) ** (-2 * (1 / al + 1)), rel=1e-12)
    d, v, _ = distances_from_counts(N, "k80", gamma=al)
    x1, x2 = 1 - 2 * P - Q, 1 - 2 * Q
    assert d == pytest.approx(0.5 * al * (x1 ** (-1 / al) + 0.5 * x2 ** (-1 / al) - 1.5), rel=1e-13)
    a = x1 ** (-(1 / al + 1))
    b = 0.5 * (x1 ** (-(1 / al + 1)) + x2 ** (-(1 / al + 1)))
    assert v == pytest.approx((a * a * P + b * b * Q - (a * P + b * Q) ** 2) / n, rel=1e-12)
    # F81 distance -B ln(1 - p/B), B = 1 - sum pi^2, variance B^2 p(1-p)/((B-p)^2 n) (Tajima & Nei 1984).
    pi = np.array([0.3, 0.2, 0.2, 0.3])
    B = 1 - (pi ** 2).sum()
    d, v, _ = distances_from_counts(N, "f81", base_frequencies=pi)
    assert d == pytest.approx(-B * math.log(1 - p / B), rel=1e-13)
    assert v == pytest.approx(B * B * p * (1 - p) / ((B - p) ** 2 * n), rel=1e-12)
    # TN84 (Tajima & Nei 1984): b = [1 - sum g^2 + p^2/h]/2, h = sum_{i<j} x_ij^2 / (2 g_i g_j).
    g = (N.sum(0) + N.sum(1)) / (2 * n)
    x = (N + N.T) / n
    h = sum(x[i, j] ** 2 / (2 * g[i] * g[j]) for i in range(4) for j in range(i + 1, 4))
    bb = 0.5 * (1 - (g ** 2).sum() + p * p / h)
    d, v, _ = distances_from_counts(N, "tn84")
    assert d == pytest.approx(-bb * math.log(1 - p / bb), rel=1e-13)
    assert v == pytest.approx(bb * bb * p * (1 - p) / ((bb - p) ** 2 * n), rel=1e-12)
    # T92 (Tamura 1992) with per-pair GC contents: h = t1 + t2 - 2 t1 t2.
    t1 = (N[1].sum() + N[2].sum()) / n
    t2 = (N[:, 1].sum() + N[:, 2].sum()) / n
    hh = t1 + t2 - 2 * t1 * t2
    d, _, _ = distances_from_counts(N, "t92")
    assert d == pytest.approx(-hh * math.log(1 - P / hh - Q) - 0.5 * (1 - hh) * math.log(1 - 2 * Q), rel=1e-13)
    # TN93 (Tamura & Nei 1993, eq. 7), written in the paper's arrangement.
    pA, pC, pG, pT = g
    pR, pY = pA + pG, pC + pT
    P1, P2 = N[0, 2] / n, N[1, 3] / n
    ref = (-2 * pA * pG / pR * math.log(1 - pR * P1 / (2 * pA * pG) - Q / (2 * pR))
           - 2 * pC * pT / pY * math.log(1 - pY * P2 / (2 * pC * pT) - Q / (2 * pY))
           - 2 * (pR * pY - pA * pG * pY / pR - pC * pT * pR / pY) * math.log(1 - Q / (2 * pR * pY)))
    assert distances_from_counts(N, "tn93")[0] == pytest.approx(ref, rel=1e-13)


@pytest.mark.parametrize("model,gam", [("tn93", None), ("tn93", 1.0), ("t92", None), ("logdet", None),
                                       ("tn84", None), ("k80", 0.5)])
def test_variances_match_simulation(model, gam):
    # Delta-method variance against the spread of estimates from multinomial samples of the expected
    # pair frequencies (common practice); 4000 samples give the sample variance to about 2%.
    Q = rate_matrix(PI, 4.0, 2.0)
    F = pair_freqs(Q, PI, 0.25)
    rng = np.random.default_rng(11)
    n = 2000
    Ns = rng.multinomial(n, F.ravel(), size=4000).reshape(-1, 4, 4).astype(float)
    d, v, r = distances_from_counts(Ns, model, gamma=gam, base_frequencies=PI if model == "tn93" else None)
    assert (r == 0).all()
    assert np.var(d, ddof=1) == pytest.approx(np.mean(v), rel=0.12)


# ----------------------------------------------------------------- against Biopython
@pytest.mark.parametrize("alphabet,letters", [("dna", "ACGT"), ("protein", "ACDEFGHIKLMNPQRSTVWY")])
def test_p_distance_equals_biopython_identity(alphabet, letters):
    # Biopython's DistanceCalculator('identity') is 1 - identical / length, counting gap-gap columns as
    # matches; on gap-free, unambiguous alignments it is the p-distance (Cock et al. 2009, Biopython).
    from Bio.Align import MultipleSeqAlignment
    from Bio.Phylo.TreeConstruction import DistanceCalculator
    from Bio.Seq import Seq
    from Bio.SeqRecord import SeqRecord

    rng = np.random.default_rng(4)
    base = rng.choice(list(letters), 300)
    seqs = []
    for i in range(9):
        s = base.copy()
        m = rng.random(300) < 0.05 * (i + 1)
        s[m] = rng.choice(list(letters), m.sum())
        seqs.append("".join(s))
    ids = [f"s{i}" for i in range(9)]
    bio = DistanceCalculator("identity").get_distance(
        MultipleSeqAlignment([SeqRecord(Seq(s), id=i) for i, s in zip(ids, seqs)]))
    aln = Alignment.from_sequences(ids, seqs, alphabet=alphabet)
    for kernel in ("gemm", "bytes"):
        ours = pairwise_distances(aln, "p", kernel=kernel, warn=False).matrix
        ref = np.array([[bio[a, b] for b in ids] for a in ids])
        assert np.allclose(ours.values, ref, rtol=0, atol=1e-12)


# ----------------------------------------------------------------- kernels vs plain references
def _random_alignment(rng, n, L, letters="ACGT-NRY", alphabet="dna"):
    base = rng.choice(list(letters[:4]), L)
    seqs = []
    for i in range(n):
        s = base.copy()
        m = rng.random(L) < rng.uniform(0.05, 0.6)
        s[m] = rng.choice(list(letters), m.sum())
        seqs.append("".join(s))
    return Alignment.from_sequences([f"t{i}" for i in range(n)], seqs, alphabet=alphabet)


def _reference_counts(aln, partial=False):
    # Slow obvious loop over pairs and columns (the plain reference for the compiled and BLAS kernels).
    W = aln.state_table(partial)
    present = W.sum(1) > 0
    n, K = aln.n, aln.n_states
    N = np.zeros((n, n, K, K))
    for i in range(n):
        for j in range(n):
            for k in range(aln.length):
                a, b = aln.codes[i, k], aln.codes[j, k]
                if present[a] and present[b]:
                    N[i, j] += np.outer(W[a], W[b])
    return N


def test_kernels_against_plain_loop():
    from seqdist.kernels import pair_counts as dk

    rng = np.random.default_rng(8)
    aln = _random_alignment(rng, 9, 57)
    N = _reference_counts(aln)
    tab = aln.state_table().T
    for i0, i1 in ((0, 9), (0, 4), (4, 7), (7, 9)):
        got = dk.onehot_cross(aln.codes, i0, i1, tab, chunk_budget=1)  # many column chunks
        assert np.array_equal(np.moveaxis(got, (0, 2), (2, 3)), N[i0:i1, i0:])
        prods = dk.feature_products(aln.codes, i0, i1, np.vstack([tab, tab.sum(0)]), [[4], [0, 1, 2, 3]],
                                    chunk_budget=1)
        assert np.array_equal(prods[0], N[i0:i1, i0:].sum((2, 3)))
        assert np.array_equal(prods[1], np.trace(N[i0:i1, i0:], axis1=2, axis2=3))
        a = np.where(aln.codes < 4, aln.codes, 254).astype(np.uint8)
        b = np.where(aln.codes < 4, aln.codes, 255).astype(np.uint8)
        eq = dk.equal_counts(a, b, i0, i1)
        assert np.array_equal(eq, np.trace(N[i0:i1, i0:], axis1=2, axis2=3))


def test_byte_kernel_against_plain_compare():
    # The compiled byte compare counts 32 columns per step in byte lanes, summed every 255 steps
    # (8160 columns), four rows of a at a time: lengths on both sides of those limits, row counts
    # that are not multiples of four, and tiles starting anywhere; plain reference: numpy ==.
    from seqdist.kernels.pair_bytes import eq_tile

    rng = np.random.default_rng(21)
    for n, L in ((1, 5), (6, 0), (5, 31), (7, 32), (9, 33), (6, 8160), (5, 8161), (7, 8160 + 8160 + 40)):
        a = rng.integers(0, 3, (n, L)).astype(np.uint8)
        a[rng.random((n, L)) < 0.1] = 254
        b = np.where(a == 254, 255, a).astype(np.uint8)
        if L >= 8160:
            a[0, :8170] = b[0, :8170] = 7  # a lane that reaches 255 before the sum
        full = (a[:, None, :] == b[None, :, :]).sum(axis=2)
        for i0, i1 in {(0, n), (0, min(n, 3)), (min(n, 2), n), (n, n)}:
            got = eq_tile(a, b, i0, i1)
            mask = np.arange(i0, i1)[:, None] <= np.arange(i0, n)[None, :]
            assert got.dtype == np.int32 and got.shape == (i1 - i0, n - i0)
            assert np.array_equal(got, np.where(mask, full[i0:i1, i0:], 0)), (n, L, i0, i1)


@pytest.mark.parametrize("partial", [False, True])
def test_pipeline_matches_reference_counts(partial):
    rng = np.random.default_rng(9)
    aln = _random_alignment(rng, 10, 80)
    N = _reference_counts(aln, partial)
    pi = aln.residue_counts(partial)
    pi = pi / pi.sum()
    for model in DNA_MODELS:
        for freqs in ("alignment", "pair"):
            for gam in (None, 0.9) if model in GAMMA_MODELS else (None,):
                res = pairwise_distances(aln, model, gamma=gam, freqs=freqs, warn=False,
                                         ambiguity="partial" if partial else "skip")
                d, v, r = distances_from_counts(N, model, gamma=gam,
                                                base_frequencies=pi if freqs == "alignment" else None)
                np.fill_diagonal(d, 0)
                np.fill_diagonal(v, 0)
                assert np.allclose(res.matrix.values, d, rtol=1e-12, atol=1e-15, equal_nan=True), model
                assert np.allclose(res.variance.values, v, rtol=1e-9, atol=1e-15, equal_nan=True), model
                S = N.sum((2, 3))
                np.fill_diagonal(S, 0)
                assert np.array_equal(res.sites.values, S)
                # Tiles (a tiny memory budget) and the byte kernel give the very same numbers.
                tiled = pairwise_distances(aln, model, gamma=gam, freqs=freqs, warn=False, memory=3000,
                                           ambiguity="partial" if partial else "skip")
                assert np.array_equal(tiled.matrix.values, res.matrix.values, equal_nan=True)
    for model in ("p", "jc69", "k80"):
        if not partial:
            a = pairwise_distances(aln, model, kernel="gemm", warn=False)
            b = pairwise_distances(aln, model, kernel="bytes", warn=False, memory=2000)
            assert np.array_equal(a.matrix.values, b.matrix.values, equal_nan=True)
            assert np.array_equal(a.variance.values, b.variance.values, equal_nan=True)


def test_protein_kernels_agree():
    rng = np.random.default_rng(10)
    aln = _random_alignment(rng, 12, 70, letters="ACDEFGHIKLMNPQRSTVWY-XBZ", alphabet="protein")
    N = _reference_counts(aln)
    for model in PROTEIN_MODELS:
        d, _, _ = distances_from_counts(N, model)
        np.fill_diagonal(d, 0)
        for kernel in ("gemm", "bytes"):
            res = pairwise_distances(aln, model, kernel=kernel, warn=False, memory=4000)
            assert np.allclose(res.matrix.values, d, rtol=1e-12, atol=1e-15, equal_nan=True)


def test_exact_counts_switch_to_float64_for_long_alignments():
    # float32 holds integers exactly only below 2**24 (IEEE 754); partial counts are scaled by 36.
    from seqdist.models.distances import _Engine

    L = 2 ** 24 // 36 + 10
    codes = np.zeros((2, L), np.uint8)
    codes[1, ::3] = 4  # R
    aln = Alignment(("a", "b"), codes, "dna")
    assert _Engine(aln, "ts", "gemm", True, False, 1 << 20).dtype == np.float64
    assert _Engine(aln, "ts", "gemm", False, False, 1 << 20).dtype == np.float32
    res = pairwise_distances(aln, "p", ambiguity="partial", warn=False)
    # One column in three compares A with R = half A, half G: p = (L/3 rounded up) * 1/2 / L.
    k = len(range(0, L, 3))
    assert res.matrix["a", "b"] == (0.5 * k) / L


# ----------------------------------------------------------------- undefined pairs
def test_saturated_and_no_overlap_pairs_are_missing_with_one_warning():
    base = "ACGTACGTTAGCCGATAGCTAGGCTTAACGGATCCGATCG"
    far = "".join({"A": "C", "C": "A", "G": "T", "T": "G"}[c] for c in base)
    seqs = [base, base[:20] + "-" * 20, "-" * 20 + base[20:], far, base[:5] + "T" + base[6:]]
    aln = Alignment.from_sequences(["a", "left", "right", "far", "e"], seqs)
    with pytest.warns(DataWarning) as seen:
        res = pairwise_distances(aln, "jc69")
    err = [str(w.message) for w in seen]
    assert len(err) == 1 and "\n" not in err[0]
    D = res.matrix
    assert np.isnan(D["left", "right"]) and np.isnan(D["a", "far"]) and np.isnan(D["far", "e"])
    assert not np.isinf(D.values).any()
    assert ("left", "right", "no shared column") in res.undefined
    assert ("a", "far", "saturated") in res.undefined
    for a, b, _ in res.undefined:
        assert f"{a}-{b}" in err[0]
    assert np.isnan(res.variance["a", "far"]) and res.sites["left", "right"] == 0
    assert D["a", "e"] == pytest.approx(-0.75 * math.log(1 - 4 / 3 / 40))  # Jukes & Cantor 1969
    # LogDet cannot tell a relabelled copy from the original (Lockhart et al. 1994): defined and 0.
    ld = pairwise_distances(aln, "logdet", warn=False).matrix
    assert ld["a", "far"] == pytest.approx(0.0, abs=1e-12)
    # The message is capped, the count is not.
    many = Alignment.from_sequences([f"s{i}" for i in range(12)], ["AC--" if i % 2 else "--GT" for i in range(12)])
    r = pairwise_distances(many, "p", warn=False)
    msg = undefined_message(r, limit=5, hint="(see file)")
    assert msg.startswith("36 pairs undefined") and "and 31 more (see file)" in msg


def test_undefined_message_stays_one_short_line_with_long_labels():
    # 16 pairs with 61-character labels: the line names what fits, then counts the rest (the full
    # list is in the result and in --undefined FILE).
    names = [f"{'x' * 60}{i}" for i in range(8)]
    many = Alignment.from_sequences(names, ["AC--" if i % 2 else "--GT" for i in range(8)])
    r = pairwise_distances(many, "p", warn=False)
    msg = undefined_message(r, hint="(all in u.txt)")
    assert len(r.undefined) == 16 and msg.startswith("16 pairs undefined") and len(msg) < 400
    shown = msg.count("(no shared column)")
    assert 1 <= shown < 16 and msg.endswith(f"and {16 - shown} more (all in u.txt)")


def test_gamma_saturation_never_inf():
    # a (x^(-1/a) - 1) overflows for tiny a near saturation: it must become missing, not inf.
    N = np.diag([1.0, 1, 1, 1]) + 0.0
    N[0, 1] = N[2, 3] = N[1, 0] = N[3, 2] = 20
    d, v, r = distances_from_counts(N, "jc69", gamma=1e-3)
    assert r == 2 and np.isnan(d) and np.isnan(v)


def test_complete_deletion():
    aln = Alignment.from_sequences(["a", "b", "c"], ["ACGTAC-T", "ACGAACGT", "AC-TACGT"])
    res = pairwise_distances(aln, "p", gaps="complete", warn=False)
    # Columns 3 and 7 hold a gap somewhere; 6 columns remain for every pair (the contract's rule).
    assert res.columns_used == 6 and res.sites["a", "b"] == 6
    assert res.matrix["a", "b"] == pytest.approx(1 / 6)
    pw = pairwise_distances(aln, "p", warn=False)
    assert pw.sites["a", "b"] == 7
    from seqdist.core.errors import InputError

    with pytest.raises(InputError, match="no column"):
        pairwise_distances(Alignment.from_sequences(["a", "b"], ["A-", "-C"]), "p", gaps="complete")


def test_partial_ambiguity_counts():
    # 'partial' spreads R over A and G: A against R is half a match (documented in docs/distances.md).
    aln = Alignment.from_sequences(["a", "b"], ["AAAA", "AARN"], alphabet="dna")
    skip = pairwise_distances(aln, "p", warn=False)
    part = pairwise_distances(aln, "p", ambiguity="partial", warn=False)
    assert skip.matrix["a", "b"] == 0 and skip.sites["a", "b"] == 2
    assert part.matrix["a", "b"] == pytest.approx(0.5 / 3) and part.sites["a", "b"] == 3


def test_option_errors():
    from seqdist.core.errors import InputError

    prot = Alignment.from_sequences(["a", "b"], ["MKVLW", "MKVAW"], source="prot.fasta")
    with pytest.raises(InputError, match="prot.fasta: .*protein.*'k80' is for DNA"):
        pairwise_distances(prot, "k80")
    dna = Alignment.from_sequences(["a", "b"], ["ACGT", "ACGA"])
    for kw, msg in (({"model": "kimura"}, "for protein"), ({"model": "nope"}, "unknown model"),
                    ({"model": "logdet", "gamma": 1.0}, "no gamma form"), ({"model": "k80", "gamma": -1.0}, "positive"),
                    ({"model": "k80", "gaps": "some"}, "gap"), ({"model": "tn93", "freqs": "x"}, "frequency"),
                    ({"model": "p", "ambiguity": "x"}, "ambiguity"), ({"model": "tn93", "kernel": "bytes"}, "byte")):
        with pytest.raises(InputError, match=msg):
            pairwise_distances(dna, **kw)


# ----------------------------------------------------------------- properties
# Every model that corrects p for multiple hits is >= p (-ln(1 - x) >= x; a(x^(-1/a) - 1) >= -ln x).
# LogDet is left out on purpose: it ignores how states are labelled, so a relabelled copy is at 0 while
# p = 1 (Lockhart et al. 1994; checked in test_saturated_and_no_overlap_pairs_are_missing_with_one_warning).
CORRECTED = [("jc69", None), ("k80", None), ("f81", None), ("tn84", None), ("t92", None), ("tn93", None),
             ("jc69", 0.5), ("k80", 2.0), ("tn93", 1.0)]


@st.composite
def alignments(draw, letters="ACGT-NR", alphabet="dna"):
    n = draw(st.integers(2, 6))
    L = draw(st.integers(1, 30))
    seqs = [draw(st.text(alphabet=letters, min_size=L, max_size=L)) for _ in range(n)]
    if not any(c in "ACGT" for s in seqs for c in s):  # no unambiguous residue at all is an input error
        seqs[0] = "A" + seqs[0][1:]
    with warnings.catch_warnings():
        # random letters are often mostly ambiguity codes; the "forced to DNA" warning is tested elsewhere
        warnings.simplefilter("ignore", DataWarning)
        return Alignment.from_sequences([f"r{i}" for i in range(n)], seqs, alphabet=alphabet)


SETTINGS = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@SETTINGS
@given(alignments(), st.sampled_from(DNA_MODELS), st.sampled_from(["alignment", "pair"]))
def test_symmetric_zero_diagonal(aln, model, freqs):
    D = pairwise_distances(aln, model, freqs=freqs, warn=False).matrix.values
    assert np.array_equal(D, D.T, equal_nan=True)
    assert (np.diag(D) == 0).all()
    assert not np.isinf(D).any() and not (D < 0).any()


@SETTINGS
@given(alignments(letters="ACGTT--"), st.sampled_from(CORRECTED))
def test_corrected_at_least_p(aln, mg):
    model, gam = mg
    p = pairwise_distances(aln, "p", warn=False).matrix.values
    d = pairwise_distances(aln, model, gamma=gam, warn=False).matrix.values
    ok = ~np.isnan(d)
    assert (d[ok] >= p[ok] - 1e-12).all()


@SETTINGS
@given(alignments(letters="ACDEFGHIKLMNPQRSTVWY-X", alphabet="protein"), st.sampled_from(["poisson", "kimura"]))
def test_protein_corrected_at_least_p(aln, model):
    p = pairwise_distances(aln, "p", warn=False).matrix.values
    d = pairwise_distances(aln, model, warn=False).matrix.values
    ok = ~np.isnan(d)
    assert (d[ok] >= p[ok] - 1e-12).all()


@SETTINGS
@given(alignments(), st.sampled_from(DNA_MODELS), st.randoms(use_true_random=False))
def test_invariant_to_record_order(aln, model, rnd):
    order = list(range(aln.n))
    rnd.shuffle(order)
    perm = aln.subset([aln.labels[i] for i in order])
    a = pairwise_distances(aln, model, warn=False).matrix
    b = pairwise_distances(perm, model, warn=False).matrix
    assert np.array_equal(b.values, a.values[np.ix_(order, order)], equal_nan=True)


@SETTINGS
@given(alignments(), st.sampled_from(DNA_MODELS), st.integers(0, 30), st.integers(1, 4))
def test_all_gap_columns_change_nothing(aln, model, where, k):
    where = min(where, aln.length)
    codes = np.insert(aln.codes, [where] * k, 255, axis=1)
    more = Alignment(aln.labels, codes, aln.alphabet)
    a = pairwise_distances(aln, model, warn=False).matrix.values
    b = pairwise_distances(more, model, warn=False).matrix.values
    assert np.array_equal(a, b, equal_nan=True)


@SETTINGS
@given(alignments(), st.sampled_from(["p", "jc69", "k80", "logdet", "f81", "tn84", "t92", "tn93"]),
       st.integers(0, 30), st.lists(st.sampled_from("ACGT"), min_size=1, max_size=6))
def test_columns_gapped_in_both_change_nothing_for_that_pair(aln, model, where, column_letters):
    # Pairwise deletion: a column where both i and j have a gap is never compared for (i, j). Models with
    # whole-alignment base frequencies see the new residues of other sequences, so they use per-pair ones.
    where = min(where, aln.length)
    states = "ACGT"
    col = np.array([states.index(column_letters[r % len(column_letters)]) for r in range(aln.n)], np.uint8)
    col[0] = col[1] = 255
    codes = np.insert(aln.codes, where, col, axis=1)
    more = Alignment(aln.labels, codes, aln.alphabet)
    a = pairwise_distances(aln, model, freqs="pair", warn=False)
    b = pairwise_distances(more, model, freqs="pair", warn=False)
    assert np.array_equal(a.matrix.values[0, 1], b.matrix.values[0, 1], equal_nan=True)
    assert a.sites.values[0, 1] == b.sites.values[0, 1]


def test_deterministic():
    rng = np.random.default_rng(12)
    aln = _random_alignment(rng, 30, 200)
    a = pairwise_distances(aln, "tn93", gamma=0.5, warn=False)
    b = pairwise_distances(aln, "tn93", gamma=0.5, warn=False, memory=5000)
    assert a.matrix.values.tobytes() == b.matrix.values.tobytes()


# ----------------------------------------------------------------- degenerate input: no numpy warnings
DEGENERATE = {
    "all-gap column": ["A-CGT", "A-CGA", "T-CGT"],
    "one sequence all gaps": ["ACGT", "----", "ACGA"],
    "one sequence all N": ["ACGT", "NNNN", "ACGA"],
    "constant sequences": ["AAAA", "AAAA", "AAAA"],
    "two constant bases": ["AAAA", "CCCC", "AAAA"],
    "single column": ["A", "C", "G"],
    "ambiguity only": ["RRRR", "YYYY", "ACGT"],
    "no residue at all": ["NNNN", "N-NN"],
    "no shared column": ["A---", "---C"],
    "saturated": ["ACGTACGTAC", "CATGCATGCA", "ACGTACGTAC"],
}


@pytest.mark.parametrize("case", sorted(DEGENERATE))
def test_degenerate_alignments_raise_no_numpy_warning(case):
    # Under warnings.simplefilter("error") a numpy RuntimeWarning becomes an exception; every outcome
    # must be an honest one: a result (missing entries named in a DataWarning) or an InputError.
    from seqdist.core.errors import InputError

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataWarning)  # "ambiguity only" is mostly not nucleotides
        aln = Alignment.from_sequences([f"s{i}" for i in range(len(DEGENERATE[case]))], DEGENERATE[case],
                                       alphabet="dna")
    outcomes = set()
    for model in DNA_MODELS:
        for gaps in ("pairwise", "complete"):
            for freqs in ("alignment", "pair"):
                for amb in ("skip", "partial"):
                    for gam in ((None, 0.5, 1e-3) if model in GAMMA_MODELS else (None,)):
                        with warnings.catch_warnings():
                            warnings.simplefilter("error")
                            warnings.simplefilter("ignore", DataWarning)
                            try:
                                r = pairwise_distances(aln, model, gamma=gam, gaps=gaps, freqs=freqs,
                                                       ambiguity=amb, progress=False)
                            except InputError as exc:
                                outcomes.add("error")
                                assert str(exc).startswith("<alignment>: ")
                                continue
                        D = r.matrix.values
                        assert not np.isinf(D).any() and not (D < 0).any()
                        iu = np.triu_indices(aln.n, 1)
                        assert int(np.isnan(D[iu]).sum()) == len(r.undefined)
                        outcomes.add("result")
    if case == "no residue at all":
        assert outcomes == {"error"}


def test_counts_raise_no_numpy_warning():
    # The same for distances_from_counts on degenerate count and frequency matrices, including gamma
    # shapes so small that a (x^(-1/a) - 1) overflows (Jin & Nei 1990 form): missing, never inf.
    near = np.diag([1.0, 1, 1, 1])
    near[0, 1] = near[2, 3] = 20
    cases = [np.zeros((4, 4)), np.diag([5.0, 0, 0, 0]), near, np.ones((4, 4)), np.ones((4, 4)) / 16]
    for N in cases:
        for model in DNA_MODELS:
            for gam in ((None, 0.5, 1e-3) if model in GAMMA_MODELS else (None,)):
                for bf in (None, [0.25] * 4, [1, 0, 0, 0], [0.5, 0.5, 0, 0]):
                    with warnings.catch_warnings():
                        warnings.simplefilter("error")
                        d, v, r = distances_from_counts(N, model, gamma=gam, base_frequencies=bf)
                    assert not np.isinf(d) and (np.isnan(d) == (r != 0))
    for N in (np.zeros((20, 20)), np.ones((20, 20)) - np.eye(20)):
        for model in PROTEIN_MODELS:
            for gam in ((None, 0.5, 1e-3) if model in GAMMA_MODELS else (None,)):
                with warnings.catch_warnings():
                    warnings.simplefilter("error")
                    d, v, r = distances_from_counts(N, model, gamma=gam)
                assert not np.isinf(d)
