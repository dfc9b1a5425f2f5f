"""Pairwise evolutionary distances from an alignment: models, gaps, variances.

The entry point is :func:`pairwise_distances`; :func:`distances_from_counts`
evaluates a model on given per-pair count (or frequency) matrices. The
formulas, their sources and how base frequencies are estimated are in
``docs/distances.md``; each model is one entry of :mod:`seqdist.models.registry`.

Every model is written as ``d = sum_k c_k L(x_k)`` with ``x_k = 1 - sum_j
a_kj p_j`` linear in the pair's proportions ``p_j`` (mismatches, or
transitions and transversions), and ``L(x) = -ln x``; the gamma form
replaces ``L`` by ``a (x^(-1/a) - 1)`` (Jin & Nei 1990; Tamura & Nei 1993).
The large-sample variance is the delta method for multinomial proportions,
``Var d = (sum_j g_j^2 p_j - (sum_j g_j p_j)^2) / S`` with ``g_j`` the
partial derivatives and ``S`` the compared columns; for JC69, K80, the
Poisson correction and the p-distance this is the published formula.

A pair with no compared column, or whose correction is undefined
(``x_k <= 0``: saturated; a zero base frequency or an absent residue for
LogDet: undefined) gets NaN, a missing entry, and is named in one warning.
Whether ``x_k > 0`` is decided exactly: counts are integers, so an argument
that floating point puts within ``_NEAR`` (relative) of zero is recomputed
in rational arithmetic from the integer counts (:func:`_exact_args`); a
pair exactly at its limit (K80 with ``S = 2 P + Q`` in counts) is
saturated, one count short of it is defined. Only counts that are not
integers (frequencies given to :func:`distances_from_counts`) fall back on
a relative margin, ``_MARGIN`` (docs/distances.md says why).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from fractions import Fraction
from typing import TYPE_CHECKING

import numpy as np

from seqdist.core.errors import InputError
from seqdist.core.matrix import DistanceMatrix
from seqdist.io.alignment import Alignment
from seqdist.models import registry

if TYPE_CHECKING:  # only for the annotations
    from numpy.typing import ArrayLike

__all__ = ["DistanceResult", "check_options", "pairwise_distances", "undefined_message", "distances_from_counts",
           "inverse_variance_weights"]

# The model names, derived from the registry (seqdist.models.registry), where every model is one entry.
DNA_MODELS = registry.DNA_MODELS
PROTEIN_MODELS = registry.PROTEIN_MODELS
GAMMA_MODELS = registry.GAMMA_MODELS
FREQ_MODELS = registry.FREQ_MODELS
GAPS = ("pairwise", "complete")
FREQS = ("alignment", "pair")
AMBIGUITY = ("skip", "partial")
KERNELS = ("auto", "gemm", "bytes")

# (alphabet, name) -> (formula, source), a view of the registry.
MODELS = {(a, m.name): (m.formula, m.source) for m in registry.REGISTRY.values() for a in m.alphabets}

NO_OVERLAP, SATURATED, UNDEFINED = 1, 2, 3
REASONS = {NO_OVERLAP: "no shared column", SATURATED: "saturated", UNDEFINED: "undefined"}

# Sub-chunks of pairs evaluated at once (bounded float64 temporaries).
_EVAL_PAIRS = 1 << 19

# Deciding whether a log (or power) argument x = 1 - sum_j a_j p_j is positive. Floating point gets
# x to within a few units of 1e-16 times m = 1 + sum_j |a_j p_j|; where |x| <= _NEAR * m the sign
# is recomputed exactly from the integer counts. Counts that are not integers (frequencies) cannot
# be, and x <= _MARGIN * m counts as saturated there (docs/distances.md, "Undefined entries").
_NEAR = 1e-8
_MARGIN = 1e-12


@dataclass(frozen=True, eq=False)
class DistanceResult:
    """The output of :func:`pairwise_distances`.

    Attributes
    ----------
    matrix : DistanceMatrix
        The distances; NaN where undefined.
    sites : DistanceMatrix
        Columns compared for each pair (the diagonal is written as 0 so the
        file reads back as a matrix file).
    variance : DistanceMatrix or None
        Large-sample variance of each distance (NaN where undefined).
    undefined : tuple of (label, label, reason)
        Every undefined pair, ``reason`` one of ``no shared column``,
        ``saturated``, ``undefined``.
    """

    def __repr__(self) -> str:
        return (f"DistanceResult(model={self.model!r}, gamma={self.gamma}, gaps={self.gaps!r}, "
                f"n={self.matrix.n}, undefined={len(self.undefined)})")

    matrix: DistanceMatrix
    sites: DistanceMatrix
    variance: DistanceMatrix | None
    undefined: tuple
    model: str
    alphabet: str
    gamma: float | None
    gaps: str
    freqs: str
    ambiguity: str
    columns: int
    columns_used: int
    base_frequencies: dict | None = None
    kernel: str = "gemm"
    extra: dict = field(default_factory=dict)

    def summary(self) -> dict:
        """A JSON-ready description of the run."""
        return {
            "n": self.matrix.n, "model": self.model, "alphabet": self.alphabet, "gamma": self.gamma,
            "gaps": self.gaps, "freqs": self.freqs if self.model in FREQ_MODELS else None,
            "ambiguity": self.ambiguity, "columns": self.columns, "columns_used": self.columns_used,
            "base_frequencies": self.base_frequencies, "kernel": self.kernel,
            "undefined_pairs": len(self.undefined),
            "undefined": [{"a": a, "b": b, "reason": r} for a, b, r in self.undefined],
        }


# ----------------------------------------------------------------- checks
def check_options(alphabet: str, model: str | None, gamma: float | None, gaps: str, freqs: str, ambiguity: str,
                  source: str = "alignment") -> str:
    """Validate the options against the alphabet; returns the model (default by alphabet).

    The default model is ``k80`` for DNA and ``poisson`` for protein.

    Examples
    --------
    >>> check_options("dna", None, None, "pairwise", "alignment", "skip")
    'k80'
    """
    if model is None:
        model = registry.DEFAULT_MODELS[alphabet]
    entry = registry.get(model.lower(), alphabet, source)
    model = entry.name
    if gamma is not None:
        if not entry.has_gamma:
            raise InputError(f"model '{model}' has no gamma form (gamma forms: {', '.join(sorted(GAMMA_MODELS))})")
        if not (isinstance(gamma, (int, float)) and math.isfinite(gamma) and gamma > 0):
            raise InputError(f"gamma shape must be a positive number, got {gamma!r}")
    if gaps not in GAPS:
        raise InputError(f"unknown gap treatment '{gaps}' (choose from {', '.join(GAPS)})")
    if freqs not in FREQS:
        raise InputError(f"unknown base frequency source '{freqs}' (choose from {', '.join(FREQS)})")
    if ambiguity not in AMBIGUITY:
        raise InputError(f"unknown ambiguity treatment '{ambiguity}' (choose from {', '.join(AMBIGUITY)})")
    return model


# ----------------------------------------------------------------- the API
def pairwise_distances(aln: Alignment, model: str | None = None, *, gamma: float | None = None,
                       gaps: str = "pairwise", freqs: str = "alignment", ambiguity: str = "skip",
                       variance: bool = True, kernel: str = "auto", memory: int = 512 << 20,
                       progress: bool = True, warn: bool = True) -> DistanceResult:
    """Distances between every pair of sequences of an alignment.

    Parameters
    ----------
    aln : Alignment
    model : str, optional
        DNA: ``p jc69 k80 f81 tn84 t92 tn93 logdet``; protein: ``p poisson
        kimura``. Default ``k80`` (DNA) or ``poisson`` (protein).
    gamma : float, optional
        Gamma shape ``a`` for rate variation among sites (jc69, k80, f81,
        t92, tn93, poisson).
    gaps : {"pairwise", "complete"}
        ``pairwise``: each pair is compared over the columns where both hold
        an unambiguous residue; ``complete``: only columns unambiguous in
        every sequence.
    freqs : {"alignment", "pair"}
        Base frequencies of f81, tn84, t92 (GC content) and tn93: from the
        whole alignment (default) or from the two sequences over their
        compared columns.
    ambiguity : {"skip", "partial"}
        ``skip`` leaves ambiguity codes out; ``partial`` spreads each partial
        code evenly over the residues it stands for (R = half A, half G), so
        pairs get fractional counts. N, X and gaps are always left out.
    variance : bool
        Also compute the large-sample variances.
    kernel : {"auto", "gemm", "bytes"}
        Count engine: feature matrix products, or the compiled byte-compare
        kernel (p-type counts only); ``auto`` takes the faster for the job.
    memory : int
        Byte budget for the count tiles.
    progress : bool
        Show a progress bar on standard error for long runs.
    warn : bool
        Name the undefined pairs in one warning on standard error.

    Returns
    -------
    DistanceResult

    Raises
    ------
    InputError
        A model for the other alphabet, a gamma form the model lacks, or no
        complete column under ``gaps="complete"``.

    Examples
    --------
    >>> aln = Alignment.from_sequences(["a", "b", "c"], ["ACGTACGTAC", "ACGTACGTAT", "ACGAACGT-C"])
    >>> r = pairwise_distances(aln, "p", warn=False)
    >>> r.matrix["a", "b"], r.matrix["a", "c"], r.sites["a", "c"]
    (0.1, 0.1111111111111111, 9.0)
    """
    model = check_options(aln.alphabet, model, gamma, gaps, freqs, ambiguity, aln.source)
    if kernel not in KERNELS:
        raise InputError(f"unknown count kernel '{kernel}' (choose from {', '.join(KERNELS)})")
    partial = ambiguity == "partial"
    used = aln
    complete = gaps == "complete"
    if complete:
        mask = aln.complete_columns()
        if not mask.any():
            raise InputError(f"{aln.source}: no column holds an unambiguous residue in every sequence, so "
                             "'--gaps complete' leaves nothing to compare (use --gaps pairwise)")
        used = aln.take_columns(mask)
        partial = False  # no ambiguity code survives complete deletion
    n, L = used.n, used.length
    K = used.n_states
    counts = used.residue_counts(partial)
    if not counts.sum() > 0:
        what = "a residue or partial ambiguity code" if partial else "an unambiguous residue"
        raise InputError(f"{aln.source}: no sequence holds {what} ({' '.join(used.states)}), so no pair "
                         "can be compared")

    pi = pi_counts = None
    if model in FREQ_MODELS and freqs == "alignment":
        pi = counts / counts.sum()
        # Partial weights are multiples of 1/6 (DNA) or 1/2 (protein): scaled, the counts are integers.
        pi_counts = _integer_counts(counts * ((6.0 if used.alphabet == "dna" else 2.0) if partial else 1.0))
    level = _level(model, freqs)
    kern = _choose_kernel(kernel, used, level, partial)

    D = np.zeros((n, n))
    S_all = np.zeros((n, n))
    V = np.zeros((n, n)) if variance else None
    bad_i: list[np.ndarray] = []
    bad_j: list[np.ndarray] = []
    bad_r: list[np.ndarray] = []

    engine = _Engine(used, level, kern, partial, complete, memory)
    ctx = _Context(model=model, gamma=gamma, pi=pi, K=K, need_var=variance, complete=complete, L=L,
                   scale=engine.scale ** 2, pi_counts=pi_counts)
    from seqdist.core.console import Progress

    with Progress(f"distances ({model}, {n} sequences)", total=engine.steps,
                  min_seconds=1.0 if progress else float("inf")) as bar:
        for i0, i1 in engine.tiles:
            stats_tile = engine.counts(i0, i1, on_chunk=lambda: bar.update(1))
            mI, mJ = i1 - i0, n - i0
            r_step = max(1, _EVAL_PAIRS // max(1, mJ) // (4 if level == "full" else 1))
            for r0 in range(0, mI, r_step):
                r1 = min(mI, r0 + r_step)
                st = engine.slice(stats_tile, r0, r1)
                d, var, reason = _evaluate(st, ctx)
                rows = slice(i0 + r0, i0 + r1)
                D[rows, i0:] = d
                S_all[rows, i0:] = st["S"]
                if variance:
                    V[rows, i0:] = var
                # Undefined pairs strictly above the diagonal (each unordered pair once).
                ii, jj = np.nonzero(reason)
                gi, gj = ii + i0 + r0, jj + i0
                keep = gj > gi
                bad_i.append(gi[keep])
                bad_j.append(gj[keep])
                bad_r.append(reason[ii[keep], jj[keep]])
            del stats_tile
    for arr in (D, S_all) + ((V,) if variance else ()):
        _mirror_upper(arr)
    labels = used.labels
    gi = np.concatenate(bad_i) if bad_i else np.zeros(0, int)
    gj = np.concatenate(bad_j) if bad_j else np.zeros(0, int)
    gr = np.concatenate(bad_r) if bad_r else np.zeros(0, int)
    order = np.lexsort((gj, gi))
    undefined = tuple((labels[a], labels[b], REASONS[int(r)]) for a, b, r in zip(gi[order], gj[order], gr[order]))
    base = None
    if pi is not None:
        base = {s: float(x) for s, x in zip(used.states, pi)}
    result = DistanceResult(
        matrix=DistanceMatrix._trusted(D, labels), sites=DistanceMatrix._trusted(S_all, labels),
        variance=DistanceMatrix._trusted(V, labels) if variance else None, undefined=undefined,
        model=model, alphabet=used.alphabet, gamma=gamma, gaps=gaps, freqs=freqs, ambiguity=ambiguity,
        columns=aln.length, columns_used=L, base_frequencies=base, kernel=kern)
    if warn and undefined:
        from seqdist.core.console import warn as _warn

        _warn(undefined_message(result))
    return result


def _mirror_upper(arr: np.ndarray, block: int = 512) -> None:
    """Copy the upper triangle onto the lower one in place, block by block (bounded temporaries)."""
    n = arr.shape[0]
    for b0 in range(0, n, block):
        b1 = min(n, b0 + block)
        arr[b0:b1, :b0] = arr[:b0, b0:b1].T
        blk = arr[b0:b1, b0:b1]
        il = np.tril_indices(b1 - b0, -1)
        blk[il] = blk.T[il]
    np.fill_diagonal(arr, 0.0)


def undefined_message(result: DistanceResult, limit: int = 25, hint: str = "", width: int = 240) -> str:
    """One line naming the undefined pairs (the first ``limit``, then a count).

    The named pairs also stop before their list passes ``width`` characters,
    so long labels never make a warning line run on for screens; the count is
    always the full one.

    Examples
    --------
    >>> aln = Alignment.from_sequences(["a", "b"], ["AC--", "--GT"])
    >>> r = pairwise_distances(aln, "jc69", warn=False)
    >>> undefined_message(r)
    '1 pair undefined under jc69, written as missing: a-b (no shared column)'
    """
    und = result.undefined
    k = len(und)
    name = result.model + (f"+gamma({result.gamma:g})" if result.gamma else "")
    parts: list[str] = []
    used = 0
    for a, b, r in und[:limit]:
        item = f"{a}-{b} ({r})"
        if parts and used + len(item) + 2 > width:
            break
        parts.append(item)
        used += len(item) + 2
    shown = ", ".join(parts)
    more = f", and {k - len(parts)} more" if k > len(parts) else ""
    return (f"{k} pair{'s' if k != 1 else ''} undefined under {name}, written as missing: {shown}{more}"
            + (f" {hint}" if hint and k > len(parts) else ""))


def distances_from_counts(N: ArrayLike, model: str, *, gamma: float | None = None,
                          base_frequencies: ArrayLike | None = None,
                          variance: bool = True) -> tuple[np.ndarray, np.ndarray | None, np.ndarray]:
    """Evaluate a model on per-pair count (or frequency) matrices.

    Parameters
    ----------
    N : array_like, shape (..., K, K)
        ``N[..., a, b]``: columns where the first sequence has residue ``a``
        and the second ``b`` (K = 4, order A C G T, for DNA models; K = 20
        for protein models). Frequencies work too, except for variances,
        which scale with the total.
    model : str
    gamma : float, optional
    base_frequencies : array_like of K, optional
        For f81, tn84, t92 and tn93: whole-alignment frequencies; by default
        they are taken from each pair's matrix.

    Returns
    -------
    d, var, reason : arrays of shape ``N.shape[:-2]``
        ``reason`` is 0 where defined, else 1 (no column), 2 (saturated),
        3 (undefined).

    Examples
    --------
    >>> N = [[40, 0, 5, 0], [0, 30, 0, 0], [5, 0, 15, 0], [0, 0, 0, 5]]
    >>> d, v, r = distances_from_counts(N, "jc69")
    >>> round(float(d), 6), int(r)
    (0.107326, 0)
    """
    N = np.asarray(N, dtype=np.float64)
    K = N.shape[-1]
    alphabet = "dna" if K == 4 else "protein"
    model = check_options(alphabet, model, gamma, "pairwise", "alignment", "skip", "counts")
    pi = None if base_frequencies is None else np.asarray(base_frequencies, dtype=np.float64)
    # Integer counts let the saturation limits be decided exactly; frequencies get the margin.
    whole = bool(np.all(np.isfinite(N)) and np.array_equal(N, np.rint(N)))
    ctx = _Context(model=model, gamma=gamma, pi=pi, K=K, need_var=variance, complete=False, L=0,
                   scale=1.0 if whole else None)
    st = _stats_from_N(N)
    return _evaluate(st, ctx)


def _integer_counts(x) -> np.ndarray | None:
    """``x`` as exact integers (int64) when every value is one, else None."""
    x = np.asarray(x, dtype=np.float64)
    r = np.rint(x)
    if not (np.all(np.isfinite(x)) and np.all(np.abs(x - r) <= 1e-6) and np.all(np.abs(r) < 2 ** 62)):
        return None
    return r.astype(np.int64)


# ----------------------------------------------------------------- count engine
def _level(model: str, freqs: str) -> str:
    # The counts the model needs (its registry entry); frequencies from the pair need its full counts.
    entry = registry.REGISTRY[model]
    if entry.needs_frequencies and freqs == "pair":
        return "full"
    return entry.counts  # "ts": p-type and transition/transversion counts (protein: mismatches)


def _choose_kernel(kernel: str, aln: Alignment, level: str, partial: bool) -> str:
    bytes_ok = level == "ts" and not partial
    if kernel == "bytes":
        if not bytes_ok:
            ts = ", ".join(n for n in DNA_MODELS if registry.REGISTRY[n].counts == "ts")
            raise InputError(f"the byte-compare kernel counts only mismatch-type data ({ts} "
                             "with alignment frequencies; protein models) without partial ambiguity")
        return "bytes"
    if kernel == "gemm" or not bytes_ok:
        return "gemm"
    # Measured (docs/distances.md): for DNA, four symmetric feature products beat the byte compare;
    # for protein the one-hot product needs 21 features a column, and the byte compare wins on large
    # inputs (the threshold was measured when the byte compare was a numba kernel with about a second
    # of start-up; it is kept so results and timings stay comparable - both kernels count exactly).
    if aln.alphabet == "dna":
        return "gemm"
    work = float(aln.n) ** 2 * aln.length
    return "bytes" if work > 4e9 else "gemm"


# Features of DNA residues: r = +1 purine / -1 pyrimidine, s = +1 for A, C / -1 for G, T.
# For two residues, (1 + r r' + s s' + rs r's') / 4 is 1 when they are equal, (1 + r r' - s s' - rs r's') / 4
# is 1 for a transition, (1 - r r') / 2 for a transversion (characters of the group Z2 x Z2).
_R = np.array([1.0, -1.0, 1.0, -1.0])
_S = np.array([1.0, 1.0, -1.0, -1.0])


class _Engine:
    def __init__(self, aln: Alignment, level: str, kernel: str, partial: bool, complete: bool, memory: int):
        self.aln, self.level, self.kernel, self.partial, self.complete = aln, level, kernel, partial, complete
        n, L = aln.n, aln.length
        K = aln.n_states
        W = aln.state_table(partial)  # (256, K)
        # Scale partial weights to integers (multiples of 1/6 for DNA, 1/2 for protein) so counts stay exact.
        self.scale = (6.0 if aln.alphabet == "dna" else 2.0) if partial else 1.0
        W = W * self.scale
        self.dtype = np.float32 if self.scale ** 2 * L < 2 ** 24 else np.float64
        present = W.sum(axis=1)  # scale for residues and partial codes, 0 for missing
        dna = aln.alphabet == "dna"
        if kernel == "bytes":
            self.specs_n = 3 if dna else 2
        elif level == "full":
            self.specs_n = K * K
        elif level == "tn93":
            rho = W @ np.array([1.0, 0, 1, 0])
            gam = W @ np.array([0.0, 1, 0, 1])
            self.tables = np.stack([present, rho, gam, W @ (_S * [1, 0, 1, 0]), W @ (_S * [0, 1, 0, 1])])
            self.specs = [[0], [1], [2], [3], [4]]
            if complete:
                self.specs = self.specs[1:]
            self.specs_n = len(self.specs)
        elif dna:
            u, v, w = W @ _R, W @ _S, W @ (_R * _S)
            self.tables = np.stack([present, u, v, w])
            self.specs = [[0], [1], [2, 3]]
            if complete:
                self.specs = self.specs[1:]
            self.specs_n = len(self.specs)
        else:
            self.tables = np.concatenate([present[None], W.T])
            self.specs = [[0], list(range(1, K + 1))]
            if complete:
                self.specs = self.specs[1:]
            self.specs_n = len(self.specs)
        self.W = W
        item = 4 if kernel == "bytes" else np.dtype(self.dtype).itemsize
        from seqdist.kernels.pair_counts import column_chunks, tile_plan

        self.tiles = tile_plan(n, self.specs_n * item, memory)

        nfeat = K if level == "full" else (self.tables.shape[0] if kernel == "gemm" else 1)
        self.steps = sum(len(column_chunks(L, n - i0, nfeat, item)) if kernel == "gemm" else 1
                         for i0, _ in self.tiles)
        if kernel == "bytes":
            self._prepare_bytes()

    def _prepare_bytes(self):
        from seqdist.kernels.pair_counts import recode

        K = self.aln.n_states
        codes = self.aln.codes
        lut_a = np.arange(256, dtype=np.uint8)
        lut_a[K:] = 254
        lut_b = np.arange(256, dtype=np.uint8)
        lut_b[K:] = 255
        # Missing residues re-coded differently on the two sides never match.
        self.ea, self.eb = recode(codes, lut_a), recode(codes, lut_b)
        va = np.zeros(256, np.uint8)
        va[:K] = 1
        vb = np.full(256, 2, np.uint8)
        vb[:K] = 1
        self.va, self.vb = recode(codes, va), recode(codes, vb)
        if self.aln.alphabet == "dna":
            ca = np.full(256, 254, np.uint8)
            cb = np.full(256, 255, np.uint8)
            ca[:K] = cb[:K] = np.arange(K) & 1  # 0 purine (A, G), 1 pyrimidine (C, T)
            self.ca, self.cb = recode(codes, ca), recode(codes, cb)

    def counts(self, i0: int, i1: int, on_chunk=None):
        from seqdist.kernels import pair_counts as dk

        codes = self.aln.codes
        if self.kernel == "bytes":
            E = dk.equal_counts(self.ea, self.eb, i0, i1)
            out = {"E": E}
            if self.complete:
                out["S"] = None
            else:
                out["S"] = dk.equal_counts(self.va, self.vb, i0, i1)
            if self.aln.alphabet == "dna":
                out["C"] = dk.equal_counts(self.ca, self.cb, i0, i1)
            if on_chunk:
                on_chunk()
            return out
        if self.level == "full":
            N = dk.onehot_cross(codes, i0, i1, self.W.T, self.dtype, on_chunk=on_chunk)
            return {"N": N}
        prods = dk.feature_products(codes, i0, i1, self.tables, self.specs, self.dtype, on_chunk=on_chunk)
        if self.complete:
            prods = [None] + prods
        return {"raw": prods}

    def slice(self, t, r0: int, r1: int) -> dict:
        """Per-pair statistics (float64) for rows r0:r1 of a tile."""
        sc2 = self.scale ** 2
        dna = self.aln.alphabet == "dna"
        L = self.aln.length
        if self.kernel == "bytes":
            E = t["E"][r0:r1].astype(np.float64)
            S = np.full(E.shape, float(L)) if t["S"] is None else t["S"][r0:r1].astype(np.float64)
            if dna:
                C = t["C"][r0:r1].astype(np.float64)
                return {"S": S, "P": C - E, "Q": S - C}
            return {"S": S, "mism": S - E}
        if self.level == "full":
            N = np.moveaxis(t["N"][:, r0:r1], (0, 2), (2, 3)).astype(np.float64) / sc2
            return _stats_from_N(N)
        raw = [None if x is None else x[r0:r1].astype(np.float64) / sc2 for x in t["raw"]]
        shape = next(x.shape for x in raw if x is not None)
        if raw[0] is None:
            raw[0] = np.full(shape, float(L))
        S = raw[0]
        if self.level == "tn93":
            _, RR, YY, RS, YS = raw
            P1, P2 = (RR - RS) / 2, (YY - YS) / 2
            return {"S": S, "P1": P1, "P2": P2, "P": P1 + P2, "Q": S - RR - YY}
        if dna:
            _, A1, A23 = raw
            return {"S": S, "P": (S + A1 - A23) / 4, "Q": (S - A1) / 2}
        return {"S": S, "mism": S - raw[1]}


def _stats_from_N(N: np.ndarray) -> dict:
    K = N.shape[-1]
    S = N.sum(axis=(-1, -2))
    diag = np.trace(N, axis1=-2, axis2=-1)
    st = {"S": S, "N": N}
    if K == 4:
        P1 = N[..., 0, 2] + N[..., 2, 0]
        P2 = N[..., 1, 3] + N[..., 3, 1]
        st.update(P1=P1, P2=P2, P=P1 + P2, Q=S - diag - P1 - P2)
    else:
        st["mism"] = S - diag
    return st


# ----------------------------------------------------------------- models
@dataclass
class _Context:
    model: str
    gamma: float | None
    pi: np.ndarray | None
    K: int
    need_var: bool
    complete: bool
    L: int
    scale: float | None = None  # counts times scale are integers (None: they are not)
    pi_counts: np.ndarray | None = None  # integer residue counts behind pi (alignment frequencies)


def _log_terms(terms, props, gamma, shape, decide):
    """d = sum_k c_k L(x_k), x_k = 1 - sum_j a_kj p_j; returns d, gradient dict, bad mask.

    ``decide(xs, ms)`` says where each x_k > 0 (``ms``: the size of its terms), and may replace
    near-zero values in ``xs`` by their exact values.
    """
    xs, ms = [], []
    for c, coef in terms:
        x = 1.0
        m = 1.0
        for k, a in coef.items():
            x = x - a * props[k]
            m = m + np.abs(a * props[k])
        xs.append(np.array(np.broadcast_to(x, shape), dtype=np.float64))
        ms.append(np.broadcast_to(m, shape))
    oks = decide(xs, ms)
    d = 0.0
    grad = {k: 0.0 for k in props}
    bad = np.zeros(shape, dtype=bool)
    # Near saturation x^(-1/a) overflows for small a; the result is then inf and the pair is marked
    # saturated below, so numpy's overflow warning would only be noise.
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        for (c, coef), x, ok in zip(terms, xs, oks):
            bad = bad | ~ok
            xv = np.where(ok, x, 1.0)
            if gamma is None:
                Lx = -np.log(xv)
                dL = 1.0 / xv
            else:
                Lx = gamma * (xv ** (-1.0 / gamma) - 1.0)
                dL = xv ** (-1.0 / gamma - 1.0)
            d = d + c * Lx
            for k, a in coef.items():
                grad[k] = grad[k] + c * a * dL
    return d, grad, bad


def _decider(st: dict, ctx: "_Context", shape):
    """``decide(xs, ms)`` for :func:`_log_terms`: where each argument x_k is > 0.

    Far from 0 the floating-point sign is right. Where some ``|x_k| <= _NEAR * m_k`` the pair's
    arguments are recomputed exactly from its integer counts (:func:`_exact_values`), and the
    exact values (rounded once to float) replace those in ``xs``; without integer counts,
    ``x_k <= _MARGIN * m_k`` counts as saturated.
    """
    def decide(xs, ms):
        near = np.zeros(shape, dtype=bool)
        for x, m in zip(xs, ms):
            near |= np.abs(x) <= _NEAR * m
        if not near.any():
            return [x > 0 for x in xs]
        nz = np.flatnonzero(near)
        exact = _exact_values(st, ctx, nz, len(xs))
        oks = []
        for k, (x, m) in enumerate(zip(xs, ms)):
            flat = x.reshape(-1)  # xs are fresh contiguous arrays: a view
            if exact is None:
                ok = flat > 0
                ok[nz] = flat[nz] > _MARGIN * np.asarray(m).reshape(-1)[nz]
            else:
                flat[nz] = exact[k]
                ok = flat > 0
            oks.append(ok.reshape(shape))
        return oks

    return decide


def _pair_counts(st: dict, ctx: "_Context", nz: np.ndarray):
    """Integer counts of the pairs at flat positions ``nz`` (dict of int64 arrays), or None."""
    if ctx.scale is None:
        return None
    out = {}
    for key in ("S", "P", "Q", "P1", "P2", "mism"):
        if key in st:
            v = _integer_counts(np.asarray(st[key]).reshape(-1)[nz] * ctx.scale)
            if v is None:
                return None
            out[key] = v
    if "N" in st:
        N = np.asarray(st["N"])
        v = _integer_counts(N.reshape(-1, N.shape[-2], N.shape[-1])[nz] * ctx.scale)
        if v is None:
            return None
        out["N"] = v
    return out


def _exact_values(st: dict, ctx: "_Context", nz: np.ndarray, nterms: int):
    """For the pairs at flat positions ``nz``: a list (one per log term) of float arrays, the exact
    x_k rounded once (so its sign is exact; 0.0 where the model is undefined for the pair).

    None when the counts are not integers (or the base frequencies are not from integer counts).
    """
    model = ctx.model
    if model in FREQ_MODELS and ctx.pi is not None and ctx.pi_counts is None:
        return None  # frequencies given as numbers: no exact limit to compare with
    c = _pair_counts(st, ctx, nz)
    if c is None:
        return None
    S = c["S"].astype(object)  # Python integers: no overflow, whatever the column count
    if "N" in c and model in ("jc69", "k80", "poisson", "kimura"):
        N = c["N"].astype(object)
        M = S - np.trace(N, axis1=-2, axis2=-1)
        if ctx.K == 4:
            P = N[:, 0, 2] + N[:, 2, 0] + N[:, 1, 3] + N[:, 3, 1]
            Q = M - P
    elif ctx.K == 4 and "P" in c:
        P, Q = c["P"].astype(object), c["Q"].astype(object)
        M = P + Q
    elif "mism" in c:
        M = c["mism"].astype(object)
    # The count-only models: x_k as integer numerator / positive integer denominator (Python ints
    # divide to the correctly rounded float, so the sign is exact).
    def ratio(num, den):
        return np.array([a / b if b else 0.0 for a, b in zip(num, den)], dtype=np.float64)

    if model == "jc69":           # 1 - 4p/3 = (3S - 4M) / 3S   (Jukes & Cantor 1969)
        return [ratio(3 * S - 4 * M, 3 * S)]
    if model == "poisson":        # 1 - p = (S - M) / S
        return [ratio(S - M, S)]
    if model == "kimura":         # 1 - p - p^2/5 = (5S^2 - 5SM - M^2) / 5S^2   (Kimura 1983)
        return [ratio(5 * S * S - 5 * S * M - M * M, 5 * S * S)]
    if model == "k80":            # 1 - 2P - Q = (S - 2P - Q) / S, 1 - 2Q = (S - 2Q) / S   (Kimura 1980)
        return [ratio(S - 2 * P - Q, S), ratio(S - 2 * Q, S)]
    # Models with base frequencies, and LogDet: rational arithmetic pair by pair (only near-limit pairs).
    pic = None if ctx.pi_counts is None else [int(v) for v in ctx.pi_counts]
    out = [np.zeros(len(nz)) for _ in range(nterms)]
    for r in range(len(nz)):
        one = {k: (v[r].tolist() if k == "N" else int(v[r])) for k, v in c.items()}
        if one["S"] == 0:  # no shared column (marked elsewhere)
            continue
        args = _exact_args(model, one, pic)
        if args is None:  # undefined for another reason (marked elsewhere): keep it out
            continue
        if model == "logdet":
            args = [Fraction(args[0], one["S"] ** 4)]  # det F = det N / S^4
        for k in range(nterms):
            out[k][r] = float(args[k])
    return out


def _exact_args(model: str, c: dict, pic):
    """The log (power) arguments of one pair as exact fractions, in the order of the float terms.

    ``c``: the pair's integer counts (``S`` and ``P``, ``Q``, ``P1``, ``P2`` or ``N``, a 4 x 4
    list); ``pic``: integer residue counts of the alignment (alignment frequencies), or None for
    frequencies from the pair itself. None when the model is undefined for the pair (a zero
    frequency). For LogDet the one "argument" is det N, whose sign decides.

    Examples
    --------
    >>> z = [0, 0, 0, 0]  # AAAA against ACGT, pair frequencies: B = 9/16, p = 3/4, 1 - p/B = -1/3
    >>> _exact_args("f81", {"S": 4, "N": [[1, 1, 1, 1], z, z, z]}, None)
    [Fraction(-1, 3)]
    """
    S = c["S"]
    N = c.get("N")
    if N is not None:
        P1 = N[0][2] + N[2][0]
        P2 = N[1][3] + N[3][1]
        M = S - sum(N[i][i] for i in range(4))
        Q = M - P1 - P2
        rows = [sum(N[i]) for i in range(4)]
        cols = [sum(N[i][j] for i in range(4)) for j in range(4)]
    else:
        P1, P2 = c.get("P1"), c.get("P2")
        P = c["P"] if "P" in c else P1 + P2
        Q = c["Q"]
        M = P + Q
    if model == "logdet":
        return [_det4(N)]
    if model == "t92" and pic is None:
        # Tamura 1992 with the pair's GC contents theta1, theta2: h = theta1 + theta2 - 2 theta1 theta2.
        t1 = Fraction(rows[1] + rows[2], S)
        t2 = Fraction(cols[1] + cols[2], S)
        h = t1 + t2 - 2 * t1 * t2
    else:
        if pic is not None:
            T = sum(pic)
            pi = [Fraction(v, T) for v in pic]
        else:
            pi = [Fraction(rows[i] + cols[i], 2 * S) for i in range(4)]
        if model == "t92":
            theta = pi[1] + pi[2]
            h = 2 * theta * (1 - theta)
    p = Fraction(M, S)
    if model == "f81":
        B = 1 - sum(x * x for x in pi)
        return None if B <= 0 else [1 - p / B]
    if model == "t92":
        if h <= 0:
            return None
        P = Fraction(P1 + P2 if N is not None or "P" not in c else c["P"], S)
        Qp = Fraction(Q, S)
        return [1 - P / h - Qp, 1 - 2 * Qp]
    if model == "tn84":
        h = Fraction(0)
        for i in range(4):
            for j in range(i + 1, 4):
                x = Fraction(N[i][j] + N[j][i], S)
                if x > 0:
                    if pi[i] * pi[j] == 0:
                        return None
                    h += x * x / (2 * pi[i] * pi[j])
        b = (1 - sum(g * g for g in pi) + (p * p / h if h > 0 else 0)) / 2
        return None if b <= 0 else [1 - p / b]
    if model == "tn93":
        pA, pC, pG, pT = pi
        if min(pi) <= 0:
            return None
        pR, pY = pA + pG, pC + pT
        Qp = Fraction(Q, S)
        return [1 - pR * Fraction(P1, S) / (2 * pA * pG) - Qp / (2 * pR),
                1 - pY * Fraction(P2, S) / (2 * pC * pT) - Qp / (2 * pY),
                1 - Qp / (2 * pR * pY)]
    raise AssertionError(model)  # pragma: no cover - the count-only models are handled by the caller


def _det4(N) -> int:
    """Exact determinant of a 4 x 4 integer matrix (Laplace expansion along the first row)."""
    def det3(m):
        return (m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1])
                - m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0])
                + m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0]))

    total = 0
    for j in range(4):
        minor = [[N[r][k] for k in range(4) if k != j] for r in range(1, 4)]
        total += (-1) ** j * N[0][j] * det3(minor)
    return total


def _delta_var(grad, props, S):
    # Delta method for multinomial proportions (e.g. Kimura 1980; Nei & Kumar 2000, ch. 3).
    s1 = 0.0
    s2 = 0.0
    for k, g in grad.items():
        s1 = s1 + g * g * props[k]
        s2 = s2 + g * props[k]
    return np.maximum(s1 - s2 * s2, 0.0) / S


def _pair_freqs(N, S):
    # Base frequencies of the two sequences together over their compared columns.
    return (N.sum(axis=-1) + N.sum(axis=-2)) / (2.0 * S[..., None])


def _evaluate(st: dict, ctx: _Context):
    S = st["S"]
    model, gamma = ctx.model, ctx.gamma
    shape = np.shape(S)
    reason = np.zeros(shape, dtype=np.int8)
    has = S > 0
    Sd = np.where(has, S, 1.0)
    extra_bad = np.zeros(shape, dtype=bool)  # undefined (not saturated)
    if ctx.K == 4:
        P = st["P"] / Sd
        Q = st["Q"] / Sd
        p = P + Q
    else:
        p = st["mism"] / Sd
    pi = ctx.pi
    if pi is None and model in FREQ_MODELS:
        pi = np.moveaxis(_pair_freqs(st["N"], Sd), -1, 0)  # (4, ...) per pair
    elif pi is not None:
        pi = [float(x) for x in pi]

    var = None
    if model == "p":
        d = p
        bad = np.zeros(shape, dtype=bool)
        if ctx.need_var:
            var = p * (1 - p) / Sd
    elif model == "logdet":
        d, var, sat, und = _logdet(st, Sd, ctx)
        bad = sat
        extra_bad = und
    elif model == "kimura":
        # Kimura 1983: d = -ln(1 - p - 0.2 p^2).
        x = np.array(np.broadcast_to(1 - p - 0.2 * p * p, shape), dtype=np.float64)
        ok = _decider(st, ctx, shape)([x], [np.broadcast_to(1 + p + 0.2 * p * p, shape)])[0]
        bad = ~ok
        xs = np.where(bad, 1.0, x)
        d = -np.log(xs)
        if ctx.need_var:
            g = (1 + 0.4 * p) / xs
            var = g * g * p * (1 - p) / Sd
    else:
        if model == "jc69":
            props = {"p": p}
            terms = [(0.75, {"p": 4.0 / 3.0})]
        elif model == "poisson":
            props = {"p": p}
            terms = [(1.0, {"p": 1.0})]
        elif model == "k80":
            props = {"P": P, "Q": Q}
            terms = [(0.5, {"P": 2.0, "Q": 1.0}), (0.25, {"Q": 2.0})]
        elif model == "f81":
            B = 1.0 - sum(x * x for x in pi)
            extra_bad = extra_bad | ~(np.asarray(B) > 0)
            Bs = np.where(np.asarray(B) > 0, B, 1.0)
            props = {"p": p}
            terms = [(Bs, {"p": 1.0 / Bs})]
        elif model == "tn84":
            b, und = _tn84_b(st["N"], Sd, p, pi)
            extra_bad = extra_bad | und
            props = {"p": p}
            terms = [(b, {"p": 1.0 / b})]
        elif model == "t92":
            if ctx.pi is not None:
                theta = pi[1] + pi[2]
                h = 2 * theta * (1 - theta)
            else:
                N = st["N"]
                th1 = (N[..., 1, :].sum(-1) + N[..., 2, :].sum(-1)) / Sd
                th2 = (N[..., :, 1].sum(-1) + N[..., :, 2].sum(-1)) / Sd
                h = th1 + th2 - 2 * th1 * th2
            h = np.asarray(h, dtype=np.float64)
            extra_bad = extra_bad | ~(h > 0)
            h = np.where(h > 0, h, 0.5)
            props = {"P": P, "Q": Q}
            terms = [(h, {"P": 1.0 / h, "Q": 1.0}), ((1 - h) / 2, {"Q": 2.0})]
        elif model == "tn93":
            props = {"P1": st["P1"] / Sd, "P2": st["P2"] / Sd, "Q": Q}
            terms, und = _tn93_terms(pi)
            extra_bad = extra_bad | und
        else:  # pragma: no cover - check_options guards this
            raise AssertionError(model)
        d, grad, bad = _log_terms(terms, props, gamma, shape, _decider(st, ctx, shape))
        d = np.broadcast_to(np.asarray(d, dtype=np.float64), shape)
        bad = np.broadcast_to(bad, shape)
        if ctx.need_var:
            with np.errstate(over="ignore", invalid="ignore"):  # inf where the derivative overflows: NaN below
                var = _delta_var(grad, props, Sd)
    d = np.array(d, dtype=np.float64)
    d += 0.0  # turns -0.0 (from -ln 1) into 0.0
    bad = bad | ~np.isfinite(d)
    reason[bad & ~extra_bad] = SATURATED
    reason[extra_bad] = UNDEFINED
    reason[~has] = NO_OVERLAP
    d[reason != 0] = np.nan
    if var is not None:
        var = np.array(np.broadcast_to(var, shape), dtype=np.float64)
        var += 0.0
        var[reason != 0] = np.nan
        var[~np.isfinite(var)] = np.nan
    return d, var, reason


def _tn84_b(N, Sd, p, pi):
    """Tajima & Nei 1984: b = (1 - sum g_i^2 + p^2 / h) / 2, h = sum_{i<j} x_ij^2 / (2 g_i g_j)."""
    h = 0.0
    und = np.zeros(np.shape(Sd), dtype=bool)
    for i in range(4):
        for j in range(i + 1, 4):
            x = (N[..., i, j] + N[..., j, i]) / Sd
            gg = 2.0 * pi[i] * pi[j]
            pos = np.asarray(gg) > 0
            und = und | ((x > 0) & ~pos)
            h = h + np.where(x > 0, x * x / np.where(pos, gg, 1.0), 0.0)
    g2 = sum(g * g for g in pi)
    safe_h = np.where(h > 0, h, 1.0)
    b = 0.5 * (1.0 - g2 + np.where(h > 0, p * p / safe_h, 0.0))
    und = und | ~(b > 0)
    return np.where(b > 0, b, 1.0), und


def _tn93_terms(pi):
    """Tamura & Nei 1993, eq. 7, written as three log terms."""
    pA, pC, pG, pT = pi
    pR, pY = pA + pG, pC + pT
    und = ~((np.asarray(pA) > 0) & (np.asarray(pC) > 0) & (np.asarray(pG) > 0) & (np.asarray(pT) > 0))

    def safe(x):
        x = np.asarray(x, dtype=np.float64)
        return np.where(und, 0.25, x)

    pA, pC, pG, pT, pR, pY = (safe(x) for x in (pA, pC, pG, pT, pR, pY))
    c1 = 2 * pA * pG / pR
    c2 = 2 * pC * pT / pY
    c3 = 2 * (pR * pY - pA * pG * pY / pR - pC * pT * pR / pY)
    terms = [(c1, {"P1": pR / (2 * pA * pG), "Q": 1 / (2 * pR)}),
             (c2, {"P2": pY / (2 * pC * pT), "Q": 1 / (2 * pY)}),
             (c3, {"Q": 1 / (2 * pR * pY)})]
    return terms, np.asarray(und)


def _det_inv4(A, need_inv=True):
    """Determinant (and inverse) of stacked 4 x 4 matrices by 2 x 2 minors (Laplace expansion)."""
    a = [[A[..., i, j] for j in range(4)] for i in range(4)]
    s0 = a[0][0] * a[1][1] - a[1][0] * a[0][1]
    s1 = a[0][0] * a[1][2] - a[1][0] * a[0][2]
    s2 = a[0][0] * a[1][3] - a[1][0] * a[0][3]
    s3 = a[0][1] * a[1][2] - a[1][1] * a[0][2]
    s4 = a[0][1] * a[1][3] - a[1][1] * a[0][3]
    s5 = a[0][2] * a[1][3] - a[1][2] * a[0][3]
    c5 = a[2][2] * a[3][3] - a[3][2] * a[2][3]
    c4 = a[2][1] * a[3][3] - a[3][1] * a[2][3]
    c3 = a[2][1] * a[3][2] - a[3][1] * a[2][2]
    c2 = a[2][0] * a[3][3] - a[3][0] * a[2][3]
    c1 = a[2][0] * a[3][2] - a[3][0] * a[2][2]
    c0 = a[2][0] * a[3][1] - a[3][0] * a[2][1]
    det = s0 * c5 - s1 * c4 + s2 * c3 + s3 * c2 - s4 * c1 + s5 * c0
    if not need_inv:
        return det, None
    adj = np.empty(A.shape)
    adj[..., 0, 0] = a[1][1] * c5 - a[1][2] * c4 + a[1][3] * c3
    adj[..., 0, 1] = -a[0][1] * c5 + a[0][2] * c4 - a[0][3] * c3
    adj[..., 0, 2] = a[3][1] * s5 - a[3][2] * s4 + a[3][3] * s3
    adj[..., 0, 3] = -a[2][1] * s5 + a[2][2] * s4 - a[2][3] * s3
    adj[..., 1, 0] = -a[1][0] * c5 + a[1][2] * c2 - a[1][3] * c1
    adj[..., 1, 1] = a[0][0] * c5 - a[0][2] * c2 + a[0][3] * c1
    adj[..., 1, 2] = -a[3][0] * s5 + a[3][2] * s2 - a[3][3] * s1
    adj[..., 1, 3] = a[2][0] * s5 - a[2][2] * s2 + a[2][3] * s1
    adj[..., 2, 0] = a[1][0] * c4 - a[1][1] * c2 + a[1][3] * c0
    adj[..., 2, 1] = -a[0][0] * c4 + a[0][1] * c2 - a[0][3] * c0
    adj[..., 2, 2] = a[3][0] * s4 - a[3][1] * s2 + a[3][3] * s0
    adj[..., 2, 3] = -a[2][0] * s4 + a[2][1] * s2 - a[2][3] * s0
    adj[..., 3, 0] = -a[1][0] * c3 + a[1][1] * c1 - a[1][2] * c0
    adj[..., 3, 1] = a[0][0] * c3 - a[0][1] * c1 + a[0][2] * c0
    adj[..., 3, 2] = -a[3][0] * s3 + a[3][1] * s1 - a[3][2] * s0
    adj[..., 3, 3] = a[2][0] * s3 - a[2][1] * s1 + a[2][2] * s0
    with np.errstate(divide="ignore", invalid="ignore"):
        inv = adj / det[..., None, None]
    return det, inv


def _logdet(st, Sd, ctx):
    """Paralinear / LogDet: d = -1/4 [ln det F - 1/2 (ln det Pi_x + ln det Pi_y)] (Lake 1994)."""
    N, need_var = st["N"], ctx.need_var
    F = N / Sd[..., None, None]
    fx = F.sum(axis=-1)
    fy = F.sum(axis=-2)
    und = ~((fx > 0).all(axis=-1) & (fy > 0).all(axis=-1))
    det, inv = _det_inv4(F, need_var)
    # |det F| <= prod of the row sums (Hadamard), the scale of the rounding in det: near 0 on that
    # scale, the sign comes from the exact integer determinant of the counts.
    scale = np.where(und, 1.0, np.prod(fx, axis=-1))
    det = np.array(np.broadcast_to(det, np.shape(Sd)), dtype=np.float64)
    ok = _decider(st, ctx, np.shape(Sd))([det], [scale])[0]
    sat = ~ok & ~und
    ok = ~(sat | und)
    with np.errstate(divide="ignore", invalid="ignore"):
        ldx = np.log(np.where(fx > 0, fx, 1.0)).sum(-1)
        ldy = np.log(np.where(fy > 0, fy, 1.0)).sum(-1)
        d = -0.25 * (np.log(np.where(ok & (det > 0), det, 1.0)) - 0.5 * (ldx + ldy))
    d = np.maximum(d, 0.0)  # exactly 0 in theory for identical sequences; clip rounding below it
    var = None
    if need_var:
        # Delta method over the 16 cell proportions: g_ab = -1/4 [(F^-1)_ba - (1/fx_a + 1/fy_b) / 2].
        with np.errstate(divide="ignore", invalid="ignore"):
            rx = 1.0 / np.where(fx > 0, fx, 1.0)
            ry = 1.0 / np.where(fy > 0, fy, 1.0)
            G = -0.25 * (np.swapaxes(inv, -1, -2) - 0.5 * (rx[..., :, None] + ry[..., None, :]))
            s1 = (G * G * F).sum(axis=(-1, -2))
            s2 = (G * F).sum(axis=(-1, -2))
            var = np.maximum(s1 - s2 * s2, 0.0) / Sd
    return d, var, sat, und


def inverse_variance_weights(variance: DistanceMatrix, matrix: DistanceMatrix) -> DistanceMatrix:
    """Repair weights 1/variance, scaled to mean 1 over the observed entries.

    Poorly supported entries (large variance: few compared columns, near
    saturation) get small weights, so the repair moves them first. Entries
    whose variance is undefined or zero get the largest finite weight.

    Examples
    --------
    >>> from seqdist import DistanceMatrix
    >>> v = DistanceMatrix.from_array([[0, .01, .04], [.01, 0, .01], [.04, .01, 0]], list("abc"))
    >>> w = inverse_variance_weights(v, v)
    >>> round(float(w.values[0, 1] / w.values[0, 2]), 6)
    4.0
    """
    var = np.array(variance.values, dtype=float)
    obs = ~np.isnan(matrix.values)
    np.fill_diagonal(obs, False)
    with np.errstate(divide="ignore", invalid="ignore"):
        w = 1.0 / var
    good = obs & np.isfinite(w) & (var > 0)
    top = float(w[good].max()) if good.any() else 1.0
    w = np.where(obs & ~good, top, w)
    w = np.where(obs, w, 0.0)
    mean = float(w[obs].mean()) if obs.any() else 1.0
    w = w / (mean if mean > 0 else 1.0)
    np.fill_diagonal(w, 0.0)
    return DistanceMatrix._trusted(0.5 * (w + w.T), matrix.labels)
