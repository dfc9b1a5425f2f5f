"""Substitution score matrices: reading, statistics, and dissimilarities over letters.

A score matrix is NOT a distance matrix: negative entries and non-zero
diagonals are normal, so it has its own type, :class:`ScoreMatrix`, and its
own reader. This module

* loads a standard matrix by name (every matrix Biopython's
  ``Bio.Align.substitution_matrices`` ships) or reads a file (the common
  whitespace grid with ``#`` comments, or a labelled tsv/csv);
* computes the check report: symmetry, whether each row's maximum sits on
  the diagonal, expected score, Karlin-Altschul lambda, relative entropy
  under background frequencies, and whether the derived dissimilarity is a
  metric (violated triangles and the letters most involved);
* turns scores into dissimilarities with one of :data:`TRANSFORMS`.

Formulas and sources are in ``docs/scores.md``. Heavy modules (scipy,
Biopython, the compiled kernels) are imported inside the functions that need them.
"""

from __future__ import annotations

import csv
import math
import os
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Callable, Sequence

import numpy as np

from seqdist.core.errors import InputError

if TYPE_CHECKING:  # only for the annotations: Biopython and the matrix type are imported where they are used
    from Bio.Align.substitution_matrices import Array
    from numpy.typing import ArrayLike

    from seqdist.core.matrix import DistanceMatrix

# The 20 standard amino acids in the order of the BLOSUM and PAM files.
AMINO20 = "ARNDCQEGHILKMFPSTWYV"
# Ambiguity and non-standard protein letters: dropped from the output by default.
PROTEIN_AMBIGUOUS = ("B", "Z", "X", "J", "U", "O", "*")
_NT_STANDARD = set("ACGTU")
_NT_IUPAC = set("ACGTURYSWKMBDHVNX*")

# Robinson & Robinson (1991), "Distribution of glutamine and asparagine residues and
# their near neighbors in peptides and proteins", PNAS 88:8880-8884: amino-acid
# frequencies (per 1000 residues), in AMINO20 order. FROM MEMORY (could not be checked
# against the paper here); two checks support them: they sum to exactly 1000.00, and
# with them BLOSUM62 gives lambda = 0.3176 nats and relative entropy 0.401 nats, the
# ungapped BLOSUM62 figures commonly quoted for protein database searches (also from
# memory). See tests/test_scores.py.
ROBINSON_1991 = (78.05, 51.29, 44.87, 53.64, 19.25, 42.64, 62.95, 73.77, 21.99, 51.42,
                 90.19, 57.44, 22.43, 38.56, 52.03, 71.20, 58.41, 13.30, 32.16, 64.41)

BACKGROUND_CHOICES = ("auto", "implied", "uniform", "robinson1991")


# ----------------------------------------------------------------- the type
@dataclass(frozen=True, eq=False)
class ScoreMatrix:
    """Letters plus a square float64 array of scores (read-only).

    Scores may be negative, the diagonal need not be zero and the matrix need
    not be symmetric; only squareness, unique letters and finite values are
    required.

    Examples
    --------
    >>> sm = ScoreMatrix.from_array([[1, -1], [-1, 1]], "AC", name="toy")
    >>> sm["A", "C"]
    -1.0
    """

    letters: tuple
    values: np.ndarray
    name: str = "matrix"
    origin: str = "file"

    @classmethod
    def from_array(cls, values: ArrayLike, letters: Sequence[str], *, name: str = "matrix",
                   origin: str = "array") -> "ScoreMatrix":
        """Validate an array and letters (square, unique letters, finite values).

        Examples
        --------
        >>> ScoreMatrix.from_array([[2.0]], ["A"]).n
        1
        """
        try:
            arr = np.array(values, dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise InputError(f"{name}: scores are not numeric ({exc})") from None
        letters = tuple(str(x) for x in letters)
        if arr.ndim != 2 or arr.shape[0] != arr.shape[1]:
            raise InputError(f"{name}: score matrix is not square (shape {arr.shape})")
        if arr.shape[0] != len(letters):
            raise InputError(f"{name}: {len(letters)} letters for a {arr.shape[0]} x {arr.shape[0]} matrix")
        if arr.shape[0] == 0:
            raise InputError(f"{name}: empty score matrix")
        seen: dict[str, int] = {}
        for i, a in enumerate(letters):
            if a in seen:
                raise InputError(f"{name}: duplicate letter '{a}' (positions {seen[a] + 1} and {i + 1})")
            seen[a] = i
        if not np.isfinite(arr).all():
            i, j = np.argwhere(~np.isfinite(arr))[0]
            raise InputError(f"{name}: score ({letters[i]}, {letters[j]}) is not a finite number")
        arr.setflags(write=False)
        return cls(letters, arr, name, origin)

    @property
    def n(self) -> int:
        return len(self.letters)

    def index(self, letter: str) -> int:
        try:
            return self.letters.index(letter)
        except ValueError:
            raise InputError(f"{self.name}: no letter '{letter}'") from None

    def __getitem__(self, pair) -> float:
        a, b = pair
        return float(self.values[self.index(a), self.index(b)])

    def subset(self, letters: Sequence[str]) -> "ScoreMatrix":
        """The sub-matrix over the given letters, in that order."""
        idx = [self.index(a) for a in letters]
        return ScoreMatrix.from_array(self.values[np.ix_(idx, idx)], letters, name=self.name, origin=self.origin)

    def symmetric_part(self) -> np.ndarray:
        """(S + S^T) / 2 as a new writable array."""
        return 0.5 * (self.values + self.values.T)

    def to_biopython(self) -> Array:
        """The matrix as a ``Bio.Align.substitution_matrices.Array`` (one-character letters)."""
        from Bio.Align import substitution_matrices

        if any(len(a) != 1 for a in self.letters):
            raise InputError(f"{self.name}: letters must be single characters for sequence alignment")
        return substitution_matrices.Array(alphabet="".join(self.letters), dims=2,
                                           data=np.array(self.values, dtype=np.float64))


# ----------------------------------------------------------------- loading
def standard_names() -> list[str]:
    """Names of the matrices Biopython ships (``substitution_matrices.load()``).

    Examples
    --------
    >>> "BLOSUM62" in standard_names()
    True
    """
    from Bio.Align import substitution_matrices

    return list(substitution_matrices.load())


def load_score_matrix(spec: str, fmt: str | None = None) -> ScoreMatrix:
    """Load a standard matrix by name, or read a score matrix file.

    Parameters
    ----------
    spec : str
        A file path (``-`` for standard input), or the name of a matrix that
        Biopython ships (case ignored), e.g. ``BLOSUM62``. An existing file
        wins over a name.
    fmt : {"grid", "tsv", "csv"}, optional
        File format; by default ``.tsv`` / ``.csv`` by extension, else the
        whitespace grid.

    Raises
    ------
    InputError
        Neither a file nor a standard name; or a malformed file (the message
        names the file and line).

    Examples
    --------
    >>> load_score_matrix("blosum62")["W", "W"]
    11.0
    """
    if spec == "-" or os.path.exists(spec):
        from seqdist.io.matrices import read_text

        text = read_text(spec, "score matrix file")
        name = "<stdin>" if spec == "-" else spec
        return parse_score_matrix(text, name, score_format(spec, fmt))
    names = standard_names()
    by_upper = {n.upper(): n for n in names}
    if spec.upper() in by_upper:
        from Bio.Align import substitution_matrices

        real = by_upper[spec.upper()]
        # read through our own handle: substitution_matrices.load leaves its file for the collector
        path = os.path.join(os.path.dirname(substitution_matrices.__file__), "data", real)
        with open(path) as handle:
            m = substitution_matrices.read(handle)
        letters = list(m.alphabet)
        return ScoreMatrix.from_array(np.array(m, dtype=np.float64), letters, name=real, origin="biopython")
    raise InputError(f"{spec}: no such file, and not a standard matrix name "
                     f"(standard: {', '.join(names)})")


def score_format(path: str, explicit: str | None = None) -> str:
    """The score-matrix file format: explicit, else by extension, else ``grid``."""
    if explicit and explicit != "auto":
        if explicit not in ("grid", "tsv", "csv"):
            raise InputError(f"unknown score matrix format '{explicit}' (choose from grid, tsv, csv)")
        return explicit
    ext = os.path.splitext(path)[1].lower()
    return {".tsv": "tsv", ".csv": "csv"}.get(ext, "grid")


def _is_comment_or_blank(line: str) -> bool:
    s = line.strip()
    return not s or s.startswith("#")


def parse_score_matrix(text: str, name: str, fmt: str = "grid") -> ScoreMatrix:
    """Parse the text of a score matrix file.

    ``grid``: letters along the top, then one line per letter: the letter
    and its scores, separated by white space (tabs or spaces); the header
    may start with a corner name when the rows have as many tokens as it.
    ``tsv`` / ``csv``: a header row whose first cell is empty or a name,
    then the letters; then one row per letter. In every format, blank lines
    and lines starting with ``#`` are skipped. Rows may come in any order;
    they are put in the order of the letters along the top.

    Examples
    --------
    >>> parse_score_matrix("# toy\\n  A  C\\nA 1 -1\\nC -1 1\\n", "toy").values.tolist()
    [[1.0, -1.0], [-1.0, 1.0]]
    """
    rows: list[tuple[int, list[str]]] = []
    if fmt == "csv":
        lines = [(ln, line) for ln, line in enumerate(text.split("\n"), start=1) if not _is_comment_or_blank(line)]
        for ln, line in lines:
            try:
                cells = next(csv.reader([line.rstrip("\r")]))
            except csv.Error as exc:
                raise InputError(f"{name}: line {ln}: {exc}") from None
            rows.append((ln, [c.strip() for c in cells]))
    else:
        for ln, line in enumerate(text.split("\n"), start=1):
            if _is_comment_or_blank(line):
                continue
            line = line.rstrip("\r")
            cells = [c.strip() for c in line.split("\t")] if fmt == "tsv" else line.split()
            rows.append((ln, cells))
    if not rows:
        raise InputError(f"{name}: empty score matrix file")
    head_ln, header = rows[0]
    body = rows[1:]
    if fmt in ("tsv", "csv"):
        letters = header[1:]  # the first cell is a corner (empty or a name)
        row_len = len(letters) + 1
    else:
        # A grid header is only letters, unless its rows are as long as it (then it has a corner name).
        row_letters = {cells[0] for _, cells in body}
        if (body and len(header) > 1 and header[0] not in row_letters
                and all(len(cells) == len(header) for _, cells in body)):
            letters = header[1:]
        else:
            letters = header
        row_len = len(letters) + 1
    n = len(letters)
    if n == 0:
        raise InputError(f"{name}: line {head_ln}: the header holds no letters")
    seen: dict[str, int] = {}
    for pos, a in enumerate(letters):
        if a == "":
            raise InputError(f"{name}: line {head_ln}: empty letter at position {pos + 1} of the header")
        if a in seen:
            raise InputError(f"{name}: line {head_ln}: letter '{a}' appears twice along the top "
                             f"(positions {seen[a] + 1} and {pos + 1})")
        seen[a] = pos
    values = np.empty((n, n))
    row_at: dict[str, int] = {}
    filled = np.zeros(n, dtype=bool)
    for ln, cells in body:
        lab = cells[0]
        if _is_number(lab) and len(cells) == n:
            raise InputError(f"{name}: line {ln}: the row starts with a number, not a letter "
                             "(each row needs its letter first)")
        if len(cells) != row_len:
            raise InputError(f"{name}: line {ln}: row '{lab}' has {len(cells) - 1} scores, expected {n} "
                             f"(one for each letter along the top)")
        if lab not in seen:
            raise InputError(f"{name}: line {ln}: row letter '{lab}' is not among the letters along the top")
        if lab in row_at:
            raise InputError(f"{name}: line {ln}: row '{lab}' appears twice (lines {row_at[lab]} and {ln})")
        row_at[lab] = ln
        i = seen[lab]
        for j in range(n):
            cell = cells[j + 1]
            try:
                v = float(cell)
            except ValueError:
                raise InputError(f"{name}: line {ln}: row '{lab}', column '{letters[j]}': "
                                 f"'{cell}' is not a number") from None
            if not math.isfinite(v):
                raise InputError(f"{name}: line {ln}: row '{lab}', column '{letters[j]}': "
                                 f"'{cell}' is not a finite number (score matrices have no missing entries)")
            values[i, j] = v
        filled[i] = True
    if not filled.all():
        missing = [letters[i] for i in np.flatnonzero(~filled)]
        raise InputError(f"{name}: line {head_ln}: {n} letters along the top but {int(filled.sum())} rows; "
                         f"no row for {', '.join(repr(a) for a in missing[:8])}"
                         f"{' ...' if len(missing) > 8 else ''} (a score matrix must be square)")
    return ScoreMatrix.from_array(values, letters, name=name, origin="file")


def _is_number(tok: str) -> bool:
    try:
        float(tok)
        return True
    except ValueError:
        return False


# ----------------------------------------------------------------- letters
def ambiguity_letters(letters: Sequence[str]) -> tuple:
    """The ambiguity and non-standard letters of an alphabet, in its order.

    Nucleotide alphabets (IUPAC codes with A, C, G and T or U): every letter
    but A, C, G, T, U. Otherwise (protein): B, Z, X, J, U, O and ``*``.
    Multi-character letters (codons) are never ambiguous here. Case ignored.

    Examples
    --------
    >>> ambiguity_letters("ARNDBZX*")
    ('B', 'Z', 'X', '*')
    >>> ambiguity_letters("ATGCN")
    ('N',)
    """
    letters = tuple(letters)
    if any(len(a) != 1 for a in letters):
        return ()
    up = [a.upper() for a in letters]
    is_nt = set(up) <= _NT_IUPAC and {"A", "C", "G"} <= set(up) and bool({"T", "U"} & set(up))
    if is_nt:
        return tuple(a for a, u in zip(letters, up) if u not in _NT_STANDARD)
    return tuple(a for a, u in zip(letters, up) if u in PROTEIN_AMBIGUOUS)


# ----------------------------------------------------------------- statistics
class NoLambda(Exception):
    """No positive Karlin-Altschul lambda exists (with the reason as message)."""


def karlin_altschul_lambda(scores: np.ndarray, p: np.ndarray, q: np.ndarray | None = None) -> float:
    """The positive root of ``sum_ij p_i q_j exp(lambda s_ij) = 1``, in nats.

    Karlin & Altschul (1990), PNAS 87:2264-2268. ``g(lambda) = sum - 1`` is
    convex with ``g(0) = 0`` and ``g'(0)`` the expected score, so a positive
    root exists exactly when the expected score is negative and some score
    with positive weight is positive. The root is bracketed by doubling and
    halving, then found with :func:`scipy.optimize.brentq` on the log of the
    sum (no overflow).

    Parameters
    ----------
    scores : (n, n) array
    p, q : (n,) arrays
        Letter frequencies of the two sequences (``q`` defaults to ``p``).

    Raises
    ------
    NoLambda
        The expected score is not negative, or no score is positive.

    Examples
    --------
    >>> s = np.where(np.eye(4, dtype=bool), 1.0, -1.0)   # +1/-1 DNA scores: lambda = ln 3
    >>> round(karlin_altschul_lambda(s, np.full(4, .25)), 6)
    1.098612
    """
    from scipy.optimize import brentq
    from scipy.special import logsumexp

    s_all = np.asarray(scores, dtype=np.float64)
    p = np.asarray(p, dtype=np.float64)
    q = p if q is None else np.asarray(q, dtype=np.float64)
    w = np.outer(p, q)
    mask = w > 0
    s = s_all[mask]
    lw = np.log(w[mask])
    expected = float(np.sum(w[mask] * s))
    if expected >= 0:
        raise NoLambda(f"expected score {expected:.6g} is not negative, so no positive lambda exists "
                       "(random alignments would score positively)")
    top = float(s.max())
    if top <= 0:
        raise NoLambda("no score is positive, so no positive lambda exists")

    def h(lam):
        return float(logsumexp(lam * s + lw))

    hi = 1.0 / top
    for _ in range(200):
        if h(hi) > 0:
            break
        hi *= 2.0
    else:  # pragma: no cover - cannot happen when a positive score has positive weight
        raise NoLambda("could not bracket lambda")
    lo = hi
    for _ in range(1100):
        lo *= 0.5
        if h(lo) < 0:
            break
    else:
        raise NoLambda(f"expected score {expected:.6g} is too close to 0 to find lambda")
    return float(brentq(h, lo, hi, xtol=1e-15, rtol=1e-14, maxiter=500))


def implied_background(scores: np.ndarray) -> tuple[float, np.ndarray] | None:
    """Background frequencies and lambda implied by a log-odds matrix, if any.

    For a log-odds matrix ``s_ij = ln(q_ij / (p_i p_j)) / lambda`` the target
    frequencies ``q_ij = p_i p_j exp(lambda s_ij)`` have ``p`` as marginals,
    so ``sum_j p_j exp(lambda s_ij) = 1`` for every ``i``: ``p`` solves
    ``M(lambda) p = 1`` with ``M_ij = exp(lambda s_ij)``, and ``lambda`` is
    where that solution sums to 1. (The construction is described by Yu,
    Wootton & Altschul 2003, PNAS 100:15688, citation from memory.) Lambda
    is scanned on a log grid, sign changes are refined with brentq, and the
    smallest root whose frequencies are all positive is returned; None when
    there is none (e.g. PAM250 as Biopython ships it).

    Examples
    --------
    >>> lam, p = implied_background(np.where(np.eye(4, dtype=bool), 1.0, -1.0))
    >>> round(lam, 6), p.round(6).tolist()
    (1.098612, [0.25, 0.25, 0.25, 0.25])
    """
    from scipy.optimize import brentq

    S = 0.5 * (np.asarray(scores, dtype=np.float64) + np.asarray(scores, dtype=np.float64).T)
    n = S.shape[0]
    top = float(np.abs(S).max())
    if n < 2 or top == 0 or S.max() <= 0:
        return None
    ones = np.ones(n)

    def solve(lam):
        try:
            x = np.linalg.solve(np.exp(lam * S), ones)
        except np.linalg.LinAlgError:
            return None
        return x if np.isfinite(x).all() else None

    def f(lam):
        x = solve(lam)
        return np.nan if x is None else float(x.sum() - 1.0)

    grid = np.geomspace(1e-4, 1e2, 1200) / top
    vals = np.array([f(g) for g in grid])
    for k in range(len(grid) - 1):
        a, b = vals[k], vals[k + 1]
        if not (np.isfinite(a) and np.isfinite(b)) or np.sign(a) == np.sign(b):
            continue
        try:
            lam = float(brentq(f, grid[k], grid[k + 1], xtol=1e-15, rtol=1e-14, maxiter=500))
        except (ValueError, RuntimeError):
            continue
        x = solve(lam)
        # A sign change across a pole of M(lambda)^-1 is no root: require the sum to be 1.
        if x is None or abs(x.sum() - 1.0) > 1e-8 or x.min() <= 0:
            continue
        return lam, x / x.sum()
    return None


@dataclass
class Background:
    """Background letter frequencies and how they were chosen."""

    freqs: np.ndarray          # over the matrix's letters (0 for letters without weight)
    method: str                # implied | uniform | robinson1991 | file
    description: str
    implied_lambda: float | None = None


def read_background(path: str, letters: Sequence[str], weighted: Sequence[str]) -> np.ndarray:
    """Read background frequencies: one ``letter value`` per line.

    Separators: white space, tab or comma; ``#`` comments and blank lines are
    skipped. Every letter in ``weighted`` must be given; letters outside the
    matrix are an error. Frequencies are scaled to sum to 1 (a warning when
    they summed to something else than 1 within 1e-3).

    Examples
    --------
    >>> import tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "bg.txt")
    >>> from pathlib import Path
    >>> _ = Path(p).write_text("A 0.5\\nC 0.5\\n")
    >>> read_background(p, "AC", "AC").tolist()
    [0.5, 0.5]
    """
    from seqdist.core.console import warn
    from seqdist.io.matrices import read_text

    text = read_text(path, "background frequency file")
    name = "<stdin>" if path == "-" else path
    pos = {a: i for i, a in enumerate(letters)}
    freqs = np.zeros(len(letters))
    given: dict[str, int] = {}
    for ln, line in enumerate(text.split("\n"), start=1):
        if _is_comment_or_blank(line):
            continue
        parts = line.replace(",", " ").split()
        if len(parts) != 2:
            raise InputError(f"{name}: line {ln}: expected 'letter frequency', found {line.strip()!r}")
        a, v = parts
        if a not in pos:
            raise InputError(f"{name}: line {ln}: letter '{a}' is not in the score matrix")
        if a in given:
            raise InputError(f"{name}: line {ln}: letter '{a}' given twice (lines {given[a]} and {ln})")
        try:
            x = float(v)
        except ValueError:
            raise InputError(f"{name}: line {ln}: frequency '{v}' of '{a}' is not a number") from None
        if not math.isfinite(x) or x < 0:
            raise InputError(f"{name}: line {ln}: frequency of '{a}' must be finite and non-negative, got {v}")
        given[a] = ln
        freqs[pos[a]] = x
    missing = [a for a in weighted if a not in given]
    if missing:
        raise InputError(f"{name}: no frequency for letter(s) {', '.join(missing)}")
    total = freqs.sum()
    if total <= 0:
        raise InputError(f"{name}: the frequencies sum to 0")
    if abs(total - 1.0) > 1e-3:
        warn(f"{name}: background frequencies sum to {total:.6g}; scaled to sum to 1")
    return freqs / total


def choose_background(sm: ScoreMatrix, spec: str = "auto", weighted: Sequence[str] | None = None) -> Background:
    """Background frequencies for the report.

    ``weighted`` are the letters that may carry frequency (by default all but
    :func:`ambiguity_letters`); the others get 0. ``spec`` is one of

    * ``implied``: the frequencies implied by the matrix itself
      (:func:`implied_background`), an error when there are none;
    * ``uniform``: 1/k for each weighted letter;
    * ``robinson1991``: Robinson & Robinson (1991) amino-acid frequencies
      (the weighted letters must be the 20 standard amino acids);
    * ``auto`` (default): implied, else robinson1991 for the 20 amino
      acids, else uniform;
    * a file path (:func:`read_background`).

    Examples
    --------
    >>> choose_background(load_score_matrix("BLOSUM62"), "uniform").freqs[:2].tolist()
    [0.05, 0.05]
    """
    letters = sm.letters
    if weighted is None:
        amb = set(ambiguity_letters(letters))
        weighted = [a for a in letters if a not in amb]
    weighted = list(weighted)
    if not weighted:
        raise InputError(f"{sm.name}: no letters left to weight with background frequencies")
    widx = [sm.index(a) for a in weighted]
    if spec not in BACKGROUND_CHOICES or os.path.isfile(spec):  # an existing file wins over a keyword
        freqs = read_background(spec, letters, weighted)
        return Background(freqs, "file", f"read from {spec}")

    def full(sub: np.ndarray) -> np.ndarray:
        out = np.zeros(sm.n)
        out[widx] = sub
        return out

    is_aa20 = sorted(a.upper() for a in weighted) == sorted(AMINO20)
    if spec in ("auto", "implied"):
        sub = sm.values[np.ix_(widx, widx)]
        got = implied_background(sub)
        if got is not None:
            lam, p = got
            return Background(full(p), "implied",
                              "the positive solution of sum_j p_j exp(lambda s_ij) = 1 for every letter i "
                              "(the marginals of the matrix's own target frequencies)", lam)
        if spec == "implied":
            raise InputError(f"{sm.name}: the matrix implies no positive background frequencies; "
                             "give --background uniform, robinson1991 or a file")
    if spec == "robinson1991" or (spec == "auto" and is_aa20):
        if not is_aa20:
            raise InputError(f"{sm.name}: robinson1991 frequencies need exactly the 20 standard amino acids "
                             f"as letters (have {''.join(weighted)})")
        rr = dict(zip(AMINO20, ROBINSON_1991))
        sub = np.array([rr[a.upper()] for a in weighted]) / 1000.0
        why = "" if spec == "robinson1991" else " (the matrix implies no positive frequencies)"
        return Background(full(sub / sub.sum()), "robinson1991",
                          f"Robinson & Robinson 1991 amino-acid frequencies{why}")
    why = "" if spec == "uniform" else " (the matrix implies no positive frequencies)"
    return Background(full(np.full(len(weighted), 1.0 / len(weighted))), "uniform",
                      f"uniform over {len(weighted)} letters{why}")


@dataclass
class ScoreStats:
    """Expected score, lambda and relative entropy under a background."""

    expected_score: float
    lam: float | None
    lambda_message: str | None
    relative_entropy_nats: float | None

    @property
    def relative_entropy_bits(self) -> float | None:
        return None if self.relative_entropy_nats is None else self.relative_entropy_nats / math.log(2)

    @property
    def expected_score_bits(self) -> float | None:
        return None if self.lam is None else self.expected_score * self.lam / math.log(2)


def score_statistics(scores: np.ndarray, p: np.ndarray) -> ScoreStats:
    """Expected score, Karlin-Altschul lambda and relative entropy.

    ``E = sum_ij p_i p_j s_ij`` (score units); ``lambda`` from
    :func:`karlin_altschul_lambda`; the target frequencies
    ``q_ij = p_i p_j exp(lambda s_ij)`` (they sum to 1) give the relative
    entropy ``H = sum_ij q_ij ln(q_ij / (p_i p_j)) = lambda sum_ij q_ij s_ij``
    nats (Altschul 1991, J Mol Biol 219:555-565).

    Examples
    --------
    >>> st = score_statistics(np.where(np.eye(4, dtype=bool), 1.0, -1.0), np.full(4, .25))
    >>> st.expected_score, round(st.lam, 4)
    (-0.5, 1.0986)
    """
    S = np.asarray(scores, dtype=np.float64)
    p = np.asarray(p, dtype=np.float64)
    w = np.outer(p, p)
    expected = float(np.sum(w * S))
    try:
        lam = karlin_altschul_lambda(S, p)
    except NoLambda as exc:
        return ScoreStats(expected, None, str(exc), None)
    q = w * np.exp(lam * S)
    q = q / q.sum()  # already 1 at the root, up to rounding
    return ScoreStats(expected, lam, None, float(lam * np.sum(q * S)))


# ----------------------------------------------------------------- transforms
@dataclass(frozen=True)
class Transform:
    """A way of turning scores into a dissimilarity: one entry of :data:`TRANSFORMS`.

    Attributes
    ----------
    name : str
        Its name for ``transform`` / ``--transform``.
    formula, source : str
        The dissimilarity and where it comes from (also written in the check
        report as ``transform_formula`` and ``transform_source``).
    func : callable
        ``func(S, ctx)`` on the symmetric part of the scores.
    needs_lambda : bool
        Whether it needs the Karlin-Altschul lambda and background frequencies.
    notes : str
        What else a user should know (the docs table and ``--help``).
    """

    name: str
    formula: str
    source: str
    func: Callable = field(repr=False)
    needs_lambda: bool = False
    notes: str = ""


def _diag_mean(S, ctx):
    d = np.diagonal(S)
    return 0.5 * (d[:, None] + d[None, :]) - S


def _euclid(S, ctx):
    d = np.diagonal(S)
    sq = d[:, None] + d[None, :] - 2.0 * S
    # Negative squares (an off-diagonal score above the mean of the two self-scores) clip to 0.
    return np.sqrt(np.maximum(sq, 0.0)), sq < 0


def _cosine(S, ctx):
    d = np.diagonal(S)
    bad = [ctx["letters"][i] for i in np.flatnonzero(d <= 0)]
    if bad:
        raise InputError(f"{ctx['name']}: transform 'cosine' needs positive self-scores; "
                         f"{', '.join(repr(a) for a in bad[:8])} {'has' if len(bad) == 1 else 'have'} "
                         "s(a,a) <= 0 (drop them, or choose another --transform)")
    return 1.0 - S / np.sqrt(np.outer(d, d))


def _range(S, ctx):
    top, low = float(S.max()), float(S.min())
    if top == low:
        raise InputError(f"{ctx['name']}: transform 'range' needs at least two different scores")
    return (top - S) / (top - low)


def _logodds(S, ctx):
    lam, p = ctx["lambda"], ctx["freqs"]
    # Target frequencies, then conditional substitution probabilities P(b|a) = q_ab / q_a.
    q = np.outer(p, p) * np.exp(lam * (S - S.max()))  # shift: same ratios, no overflow
    rows = q.sum(axis=1, keepdims=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        cond = np.where(rows > 0, q / rows, 0.0)
        logc = np.log(cond)
    d = -0.5 * (logc + logc.T)
    return np.where(np.isfinite(d), d, np.nan)


#: The transforms, read by :func:`transform_scores`, :func:`check_score_matrix`, the ``--transform``
#: choices and help, the table in docs/scores.md (:func:`transform_table`) and the tests.
TRANSFORMS: dict[str, Transform] = {t.name: t for t in (
    Transform("diag-mean", "d(a,b) = (s(a,a) + s(b,b))/2 - s(a,b)",
              "common practice (half the squared Euclidean distance when s is read as an inner product)",
              _diag_mean,
              notes="`s(a,a) + s(b,b) - 2 s(a,b)` is exactly twice this (same triangles up to scale), so it is "
                    "not a separate transform"),
    Transform("euclid", "d(a,b) = sqrt(s(a,a) + s(b,b) - 2 s(a,b))",
              "common practice (the Euclidean distance of a Gram matrix, as in classical scaling: "
              "Torgerson 1952, Psychometrika 17:401)", _euclid),
    Transform("cosine", "d(a,b) = 1 - s(a,b) / sqrt(s(a,a) s(b,b))  (needs s(a,a) > 0)",
              "common practice (cosine normalisation of similarity scores)", _cosine,
              notes="needs every s(a,a) > 0; otherwise an error naming the letters"),
    Transform("range", "d(a,b) = (max s - s(a,b)) / (max s - min s), d(a,a) = 0",
              "common practice (min-max rescaling of a similarity)", _range,
              notes="max and min over the kept letters, diagonal included"),
    Transform("logodds", "P(b|a) = q(a,b)/sum_c q(a,c), q(a,b) = p_a p_b exp(lambda s(a,b)); "
              "d(a,b) = -(ln P(b|a) + ln P(a|b))/2, d(a,a) = 0",
              "log-odds definition s = ln(q/(p p))/lambda (Altschul 1991, J Mol Biol 219:555); "
              "the -log of the symmetrised substitution probability is common practice", _logodds,
              needs_lambda=True,
              notes="the log-odds definition read backwards to substitution probabilities P(b|a); the "
                    "geometric-mean symmetrisation is common practice. Needs lambda and uses the report's "
                    "background frequencies; pairs with a letter of zero frequency (ambiguity letters under "
                    "`--keep-ambiguous`) are written as missing"),
)}
DEFAULT_TRANSFORM = "diag-mean"


def transform_guide(indent: str = "  ", width: int = 80) -> str:
    """The transforms, one block each (name, formula, notes), for ``--help`` texts.

    Examples
    --------
    >>> print(transform_guide().splitlines()[0])
      diag-mean  d(a,b) = (s(a,a) + s(b,b))/2 - s(a,b)   (default)
    """
    import textwrap

    pad = max(len(n) for n in TRANSFORMS) + 2
    lines = []
    for t in TRANSFORMS.values():
        text = (t.formula + ("  (needs lambda)" if t.needs_lambda else "")
                + ("   (default)" if t.name == DEFAULT_TRANSFORM else ""))
        lines += textwrap.wrap(text, width, initial_indent=f"{indent}{t.name:<{pad}}",
                               subsequent_indent=indent + " " * (pad + 2))
    return "\n".join(lines)


def transform_table() -> str:
    """The transform table of docs/scores.md (markdown), made from :data:`TRANSFORMS`.

    Examples
    --------
    >>> print(transform_table().splitlines()[0])
    | name | formula | source | notes |
    """
    def cell(text):
        return text.replace("|", "\\|") or "-"

    lines = ["| name | formula | source | notes |", "| --- | --- | --- | --- |"]
    for t in TRANSFORMS.values():
        name = f"`{t.name}`" + (" (default)" if t.name == DEFAULT_TRANSFORM else "")
        lines.append(f"| {name} | {cell(t.formula)} | {cell(t.source)} | {cell(t.notes)} |")
    return "\n".join(lines) + "\n"


def transform_scores(sm: ScoreMatrix, transform: str = DEFAULT_TRANSFORM, *, lam: float | None = None,
                     freqs: np.ndarray | None = None
                     ) -> tuple[DistanceMatrix, list[tuple[str, str, float]], list[tuple[str, str]]]:
    """Turn a score matrix into a dissimilarity (see :data:`TRANSFORMS`).

    An asymmetric matrix is replaced by its symmetric part first. Negative
    results are clipped to 0 and undefined ones (``logodds`` for letters
    without background frequency) become missing; both are returned so that
    callers can say so.

    Returns
    -------
    dm : DistanceMatrix over ``sm.letters``
    clipped : list of (a, b, value) for the pairs clipped to 0
    missing : list of (a, b) for the pairs left missing

    Examples
    --------
    >>> sm = ScoreMatrix.from_array([[4, -1], [-1, 5]], "AR")
    >>> transform_scores(sm, "diag-mean")[0]["A", "R"]
    5.5
    """
    from seqdist.core.matrix import DistanceMatrix

    if transform not in TRANSFORMS:
        raise InputError(f"unknown transform '{transform}' (choose from {', '.join(TRANSFORMS)})")
    t = TRANSFORMS[transform]
    if t.needs_lambda and (lam is None or freqs is None):
        raise InputError(f"{sm.name}: transform '{transform}' needs a positive lambda and background "
                         "frequencies, which this matrix does not have under the chosen background")
    S = sm.symmetric_part()
    ctx = {"letters": sm.letters, "name": sm.name, "lambda": lam,
           "freqs": None if freqs is None else np.asarray(freqs, dtype=np.float64)}
    out = t.func(S, ctx)
    clipped_mask = None
    if isinstance(out, tuple):
        D, clipped_mask = out
    else:
        D = out
    D = np.array(D, dtype=np.float64)
    np.fill_diagonal(D, 0.0)
    D = 0.5 * (D + D.T)
    neg = (D < 0) & ~np.isnan(D)
    if clipped_mask is not None:
        neg |= clipped_mask
    np.fill_diagonal(neg, False)
    iu = np.triu_indices(sm.n, 1)
    clipped = [(sm.letters[i], sm.letters[j], float(_raw_value(t, S, D, i, j)))
               for i, j in zip(*iu) if neg[i, j]]
    D[D < 0] = 0.0
    D = D + 0.0  # no negative zeros in the output
    missing = [(sm.letters[i], sm.letters[j]) for i, j in zip(*iu) if np.isnan(D[i, j])]
    dm = DistanceMatrix.from_array(D, sm.letters, source=f"{sm.name} ({transform})")
    return dm, clipped, missing


def _raw_value(t: Transform, S, D, i, j) -> float:
    if t.name == "euclid":  # report the negative square that was clipped
        return S[i, i] + S[j, j] - 2.0 * S[i, j]
    return D[i, j]


# ----------------------------------------------------------------- metric check
def triangle_details(values: np.ndarray, labels: Sequence[str], tol: float | None = None,
                     top: int = 10) -> dict:
    """Violated triangles of a small dissimilarity, per letter and worst first.

    The total comes from :func:`seqdist.kernels.triangles.count_violations` (the shared
    routine); the per-letter counts (how many violated triangles each letter
    belongs to) come from a vectorised pass, one letter at a time, and are
    checked against the total (each triangle has three letters).

    Examples
    --------
    >>> r = triangle_details(np.array([[0, 1, 10], [1, 0, 1], [10, 1, 0.]]), "ABC")
    >>> r["violated_triangles"], r["per_letter"]
    (1, {'A': 1, 'B': 1, 'C': 1})
    """
    from seqdist.core.matrix import default_tol
    from seqdist.kernels.triangles import count_violations

    d = np.ascontiguousarray(values, dtype=np.float64)
    n = d.shape[0]
    if tol is None:
        tol = default_tol(d)
    total, worst = count_violations(d, tol)
    per = np.zeros(n, dtype=np.int64)
    if total:
        off = ~np.eye(n, dtype=bool)
        for i in range(n):
            di = d[i]
            # Triangle {i, j, k} is violated when one of its sides exceeds the other two by > tol.
            a = di[:, None] > di[None, :] + d + tol      # side (i, j) longer than via k
            b = d > di[:, None] + di[None, :] + tol       # side (j, k) longer than via i
            t = a | a.T | b
            keep = off.copy()
            keep[i, :] = False
            keep[:, i] = False
            per[i] = int(np.count_nonzero(t & keep)) // 2
        if int(per.sum()) != 3 * total:  # pragma: no cover - a bug guard
            raise AssertionError(f"per-letter triangle counts {per.sum()} disagree with 3 x {total}")
    worst_list = []
    if total and n <= 200:
        from itertools import combinations

        tri = np.array(list(combinations(range(n), 3)), dtype=np.intp)
        i, j, k = tri.T
        sides = np.stack([d[i, j], d[i, k], d[j, k]], axis=1)
        excess = 2 * sides.max(axis=1) - sides.sum(axis=1)
        excess = np.where(np.isnan(excess), -np.inf, excess)
        order = np.lexsort((np.arange(len(tri)), -excess))[:top]
        worst_list = [{"letters": [labels[x] for x in tri[o]], "excess": float(excess[o])}
                      for o in order if excess[o] > tol]
    most = sorted(((int(c), x) for x, c in enumerate(per) if c > 0), key=lambda t: (-t[0], t[1]))
    return {"triangles": n * (n - 1) * (n - 2) // 6, "violated_triangles": int(total), "max_violation": worst,
            "tol": float(tol), "per_letter": {labels[x]: c for c, x in most},
            "worst_triangles": worst_list}


# ----------------------------------------------------------------- the report
@dataclass
class ScoreReport:
    """The check report of a score matrix and its derived dissimilarity."""

    matrix: ScoreMatrix
    dissimilarity: object   # DistanceMatrix over the kept letters
    data: dict              # the JSON document


def check_score_matrix(sm: ScoreMatrix, transform: str = DEFAULT_TRANSFORM, background: str = "auto",
                       keep_ambiguous: bool = False) -> ScoreReport:
    """Derive a dissimilarity from a score matrix and build its check report.

    The statistics (expected score, lambda, relative entropy) weight only
    letters that are not ambiguity letters; ``keep_ambiguous`` keeps those
    letters in the dissimilarity and the row-maximum and metric checks.

    Examples
    --------
    >>> r = check_score_matrix(load_score_matrix("BLOSUM62"))
    >>> r.data["symmetric"], r.dissimilarity.n, round(r.data["lambda"], 4)
    (True, 20, 0.324)
    """
    from seqdist.core.console import warn

    if transform not in TRANSFORMS:
        raise InputError(f"unknown transform '{transform}' (choose from {', '.join(TRANSFORMS)})")
    amb = ambiguity_letters(sm.letters)
    weighted = [a for a in sm.letters if a not in amb]
    if not weighted:
        weighted = list(sm.letters)
    kept = list(sm.letters) if keep_ambiguous else weighted
    dropped = [a for a in sm.letters if a not in kept]

    # Symmetry (on the full matrix as given).
    S = sm.values
    asym = np.abs(S - S.T)
    sym_tol = 1e-9 * float(np.abs(S).max(initial=0.0))
    symmetric = bool((asym <= sym_tol).all())
    iu = np.triu_indices(sm.n, 1)
    asym_pairs = [[sm.letters[i], sm.letters[j], float(S[i, j]), float(S[j, i])]
                  for i, j in zip(*iu) if asym[i, j] > sym_tol]
    if not symmetric:
        a, b, x, y = asym_pairs[0]
        warn(f"{sm.name}: the score matrix is not symmetric ({len(asym_pairs)} pair(s), e.g. s({a},{b}) = {x:g} "
             f"but s({b},{a}) = {y:g}); statistics and transforms use its symmetric part")

    # Row maxima over the kept letters.
    sub = sm.subset(kept)
    K = sub.values
    not_on_diag, tied = [], []
    for i, a in enumerate(kept):
        others = np.delete(K[i], i)
        if others.size == 0:
            continue
        m = float(others.max())
        at = [kept[j] for j in range(len(kept)) if j != i and K[i, j] == m]
        if m > K[i, i]:
            not_on_diag.append({"letter": a, "diagonal": float(K[i, i]), "row_max": m, "at": at})
        elif m == K[i, i]:
            tied.append({"letter": a, "diagonal": float(K[i, i]), "at": at})

    # Background and statistics over the weighted letters (symmetric part).
    bg = choose_background(sm, background, weighted)
    widx = [sm.index(a) for a in weighted]
    Ssym = sm.symmetric_part()
    stats = score_statistics(Ssym[np.ix_(widx, widx)], bg.freqs[widx])

    # The dissimilarity over the kept letters.
    kidx = [sm.index(a) for a in kept]
    dm, clipped, missing = transform_scores(sub, transform, lam=stats.lam, freqs=bg.freqs[kidx])
    if clipped:
        a, b, v = clipped[0]
        warn(f"{sm.name}: {len(clipped)} pair(s) came out negative under '{transform}' and were set to 0 "
             f"(e.g. {a}-{b}: {v:.6g}); those letters score higher with each other than with themselves")
    if missing:
        warn(f"{sm.name}: {len(missing)} pair(s) are undefined under '{transform}' and written as missing "
             f"(e.g. {missing[0][0]}-{missing[0][1]}: no background frequency)")
    tri = triangle_details(dm.values, kept)
    t = TRANSFORMS[transform]
    data = {
        "matrix": sm.name,
        "origin": "Biopython's shipped copy" if sm.origin == "biopython" else sm.origin,
        "letters": kept,
        "n": len(kept),
        "dropped_letters": dropped,
        "transform": transform,
        "transform_formula": t.formula,
        "transform_source": t.source,
        "symmetric": symmetric,
        "max_asymmetry": float(asym.max(initial=0.0)),
        "asymmetric_pairs": asym_pairs[:20],
        "diagonal_is_row_max": not not_on_diag,
        "rows_max_off_diagonal": not_on_diag,
        "rows_tied_with_diagonal": tied,
        "background": {"method": bg.method, "description": bg.description,
                       "frequencies": {a: float(bg.freqs[sm.index(a)]) for a in weighted}},
        "expected_score": stats.expected_score,
        "expected_score_bits": stats.expected_score_bits,
        "lambda": stats.lam,
        "lambda_message": stats.lambda_message,
        "implied_lambda": bg.implied_lambda,
        "relative_entropy_bits": stats.relative_entropy_bits,
        "relative_entropy_nats": stats.relative_entropy_nats,
        "triangles": tri["triangles"],
        "violated_triangles": tri["violated_triangles"],
        "max_violation": tri["max_violation"],
        "tol": tri["tol"],
        "is_metric": tri["violated_triangles"] == 0 and not missing,
        "letters_most_involved": [{"letter": a, "violated_triangles": c} for a, c in tri["per_letter"].items()],
        "worst_triangles": tri["worst_triangles"],
        "clipped_pairs": [{"pair": [a, b], "value": v} for a, b, v in clipped],
        "missing_pairs": [list(p) for p in missing],
    }
    return ScoreReport(sm, dm, data)


def format_report(data: dict) -> str:
    """A readable table of a check report (the dict of :class:`ScoreReport`).

    Examples
    --------
    >>> print(format_report(check_score_matrix(load_score_matrix("BLOSUM62")).data).splitlines()[0])
    score matrix         BLOSUM62 (Biopython's shipped copy), 20 letters; dropped: B Z X *
    """
    def g(x, digits=4):
        return "n/a" if x is None else f"{x:.{digits}f}"

    rows = []
    dropped = f"; dropped: {' '.join(data['dropped_letters'])}" if data["dropped_letters"] else ""
    rows.append(("score matrix", f"{data['matrix']} ({data['origin']}), {data['n']} letters{dropped}"))
    if data["symmetric"]:
        rows.append(("symmetric", "yes"))
    else:
        a, b, x, y = data["asymmetric_pairs"][0]
        rows.append(("symmetric", f"NO: {len(data['asymmetric_pairs'])} pair(s), largest gap "
                                  f"{data['max_asymmetry']:g} (e.g. s({a},{b}) = {x:g}, s({b},{a}) = {y:g})"))
    if data["diagonal_is_row_max"]:
        ties = data["rows_tied_with_diagonal"]
        extra = f" (tied in rows {' '.join(r['letter'] for r in ties)})" if ties else ""
        rows.append(("row max on diagonal", "yes" + extra))
    else:
        ties = data["rows_tied_with_diagonal"]
        extra = f"; tied in rows {' '.join(r['letter'] for r in ties)}" if ties else ""
        rows.append(("row max on diagonal", "NO for " + ", ".join(
            f"{r['letter']} ({r['diagonal']:g} < {r['row_max']:g} at {','.join(r['at'])})"
            for r in data["rows_max_off_diagonal"]) + extra))
    bg = data["background"]
    rows.append(("background", f"{bg['method']}: {bg['description']}"))
    eb = data["expected_score_bits"]
    rows.append(("expected score", f"{data['expected_score']:.4f} score units"
                 + (f" = {eb:.4f} bits" if eb is not None else "")))
    if data["lambda"] is not None:
        rows.append(("lambda", f"{data['lambda']:.6f} nats per score unit "
                               f"(1 unit = {data['lambda'] / math.log(2):.4f} bits)"))
        rows.append(("relative entropy", f"{g(data['relative_entropy_bits'])} bits "
                                         f"({g(data['relative_entropy_nats'])} nats) per aligned pair"))
    else:
        rows.append(("lambda", f"none: {data['lambda_message']}"))
        rows.append(("relative entropy", "n/a (needs lambda)"))
    rows.append(("transform", f"{data['transform']}: {data['transform_formula']}"))
    v = data["violated_triangles"]
    if v == 0:
        if data["missing_pairs"]:
            rows.append(("metric", f"no violated triangle among those with three sides, but "
                                   f"{len(data['missing_pairs'])} pairs are missing"))
        else:
            rows.append(("metric", f"yes: none of {data['triangles']} triangles violated"))
    else:
        rows.append(("metric", f"NO: {v} of {data['triangles']} triangles violated "
                               f"(largest excess {data['max_violation']:.6g})"))
        most = data["letters_most_involved"][:8]
        rows.append(("letters most involved", ", ".join(f"{m['letter']} {m['violated_triangles']}" for m in most)))
        w = data["worst_triangles"][:3]
        if w:
            rows.append(("worst triangles", "; ".join(f"{'-'.join(t['letters'])} ({t['excess']:.4g})" for t in w)))
    if data["clipped_pairs"]:
        rows.append(("clipped to 0", f"{len(data['clipped_pairs'])} pair(s)"))
    width = max(len(k) for k, _ in rows) + 2
    return "".join(f"{k.ljust(width)}{v}\n" for k, v in rows)


__all__ = ["ScoreMatrix", "load_score_matrix", "parse_score_matrix", "standard_names", "ambiguity_letters",
           "karlin_altschul_lambda", "implied_background", "choose_background", "read_background",
           "score_statistics", "Transform", "TRANSFORMS", "DEFAULT_TRANSFORM", "transform_guide",
           "transform_table", "transform_scores", "triangle_details",
           "check_score_matrix", "format_report", "NoLambda", "ROBINSON_1991", "AMINO20"]
