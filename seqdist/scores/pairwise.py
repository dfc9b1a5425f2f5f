"""Distances between unaligned sequences from pairwise alignment scores.

Every pair is aligned with Biopython's ``PairwiseAligner`` (global or local,
a substitution matrix, affine gaps) and the score is turned into a distance
with one of two formulas:

``fd`` (default)
    Feng & Doolittle (1996), "Progressive alignment of amino acid sequences
    and construction of phylogenetic trees from them", Methods in
    Enzymology 266:368-382: the normalised score

        S_eff = (S_ab - S_rand) / (S_max - S_rand),  S_max = (S_aa + S_bb) / 2,
        D = -100 ln S_eff,

    with the score expected for unrelated sequences of the same composition
    estimated from the optimal alignment (formula as we recall it from that
    paper, from memory):

        S_rand = (1/L) sum_ij s(i,j) N_a(i) N_b(j) + (gap score of the alignment),

    L the alignment's length in columns, N_a(i) the count of letter i in
    sequence a (global: the whole sequence; local: the aligned segment).
    This needs the alignment path, so it costs a traceback per pair.
``cosine``
    D = 1 - S_ab / sqrt(S_aa S_bb) (common practice); score only, fastest.

Identical sequences get 0. Undefined values (S_eff <= 0, S_max <= S_rand,
a non-positive self-score, an empty local alignment) become missing entries
named in a warning; negative values (S_ab above S_max) are set to 0, also
with a warning.

The substitution matrix must suit the sequences: the alphabet is detected as
for alignments (:func:`seqdist.io.alignment.guess_alphabet`: DNA when at least
90% of the letters are A C G T U N), and without a matrix given, DNA is
aligned under ``NUC.4.4`` (+5 match, -4 mismatch, IUPAC codes scored) and
protein under ``BLOSUM62``. A given matrix must hold every letter of the
sequences (else an error names the file, record and first letter it lacks);
a protein matrix given for DNA sequences (or the reverse) gives a warning.

Pairs are spread over worker processes in chunks; results are put back by
pair index, so the output does not depend on the number of processes.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from typing import TYPE_CHECKING, Sequence

import numpy as np

from seqdist.core.errors import InputError
from seqdist.core.params import POSITIVE_INT

if TYPE_CHECKING:  # only for the annotations: the score matrices are imported where they are used
    from seqdist.scores.matrices import ScoreMatrix


@dataclass(frozen=True)
class ScoreFormula:
    """One way of turning pairwise alignment scores into a distance (``formula`` / ``--formula``).

    Attributes
    ----------
    name : str
    formula : str
        The distance, in words and symbols (help texts and docs).
    source : str
        Where it comes from.
    needs_path : bool
        Whether it needs the alignment itself (a traceback per pair), not only the score.
    """

    name: str
    formula: str
    source: str
    needs_path: bool = False


#: The score formulas, read by :func:`score_distances`, the ``--formula`` choices and help, the
#: table in docs/scores.md and the tests. The arithmetic is in :func:`distances_from_scores`.
REGISTRY = {f.name: f for f in (
    ScoreFormula("fd", "S_eff = (S_ab - S_rand) / (S_max - S_rand); S_max = (S_aa + S_bb)/2; D = -100 ln S_eff; "
                 "S_rand: the score expected for unrelated sequences of the same composition, estimated from "
                 "the alignment (as we recall it from the paper: from memory)",
                 "Feng & Doolittle 1996, Methods Enzymol 266:368-382", needs_path=True),
    ScoreFormula("cosine", "D = 1 - S_ab / sqrt(S_aa S_bb)", "common practice"),
)}
FORMULAS = tuple(REGISTRY)
DEFAULT_FORMULA = "fd"
MODES = ("global", "local")
ALPHABETS = ("auto", "dna", "protein")
# Default matrix by alphabet: both ship with Biopython (NUC.4.4: +5/-4 with the IUPAC codes).
DEFAULT_MATRIX = {"dna": "NUC.4.4", "protein": "BLOSUM62"}

#: The gap-cost convention, stated once for --help, docs/scores.md and the JSON
#: summary. It is Biopython's: PairwiseAligner gives the first column of a gap
#: the open gap score and each further column the extend gap score (Biopython
#: Tutorial and Cookbook, chapter "Pairwise sequence alignment", its table of
#: the score each column of an example alignment gets).
GAP_COST_CONVENTION = "a gap of k residues costs open + (k - 1) x extend"


def gap_cost(k: int, gap_open: float, gap_extend: float) -> float:
    """What one gap of ``k`` residues costs (subtracted from the alignment score): ``open + (k - 1) extend``.

    Examples
    --------
    >>> gap_cost(3, 11, 1)   # the defaults: 11 + 2 x 1
    13.0
    >>> gap_cost(0, 11, 1)
    0.0
    """
    k = int(k)
    return 0.0 if k <= 0 else float(gap_open) + (k - 1) * float(gap_extend)


def gap_cost_summary(gap_open: float, gap_extend: float, free_end_gaps: bool = False) -> dict:
    """The gap costs and their convention, as written in ``pairscores --json`` under ``gap_cost``.

    Examples
    --------
    >>> gap_cost_summary(11, 1)["formula"]
    'a gap of k residues costs open + (k - 1) x extend'
    """
    return {"open": float(gap_open), "extend": float(gap_extend), "formula": GAP_COST_CONVENTION,
            "end_gaps": "free" if free_end_gaps else "same as internal gaps"}


# ----------------------------------------------------------------- input
def read_fasta(path: str) -> tuple[list[str], list[str], list[int]]:
    """Read a FASTA file: (ids, sequences, header line numbers).

    The id is the first word of the header. Sequence lines are joined, white
    space, gaps (``-``) and dots (``.``) removed and letters upper-cased (the
    sequences are unaligned; an alignment's gaps are simply dropped).

    Examples
    --------
    >>> import tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "s.fasta")
    >>> from pathlib import Path
    >>> _ = Path(p).write_text(">a first\\nMK-V\\nL\\n>b\\nmkv\\n")
    >>> read_fasta(p)[:2]
    (['a', 'b'], ['MKVL', 'MKV'])
    """
    from seqdist.io.matrices import read_text

    text = read_text(path, "sequence file")
    name = "<stdin>" if path == "-" else path
    ids: list[str] = []
    seqs: list[list[str]] = []
    lines: list[int] = []
    seen: dict[str, int] = {}
    drop = str.maketrans("", "", "-. \t\r")
    for ln, line in enumerate(text.split("\n"), start=1):
        if line.startswith(">"):
            words = line[1:].split()
            if not words:
                raise InputError(f"{name}: line {ln}: a FASTA header without a name")
            rid = words[0]
            if rid in seen:
                raise InputError(f"{name}: line {ln}: duplicate record id '{rid}' (first at line {seen[rid]})")
            seen[rid] = ln
            ids.append(rid)
            seqs.append([])
            lines.append(ln)
        elif line.strip():
            if not ids:
                raise InputError(f"{name}: line {ln}: sequence data before the first '>' header "
                                 "(is this a FASTA file?)")
            seqs[-1].append(line.translate(drop).upper())
    if not ids:
        raise InputError(f"{name}: no FASTA records")
    return ids, ["".join(s) for s in seqs], lines


# ----------------------------------------------------------------- workers
_W: dict = {}


def _init_worker(letters: str, values: np.ndarray, mode: str, gap_open: float, gap_extend: float,
                 seqs: Sequence[str], formula: str, free_end_gaps: bool = False) -> None:
    from Bio.Align import PairwiseAligner, substitution_matrices

    m = substitution_matrices.Array(alphabet=letters, dims=2, data=np.array(values, dtype=np.float64))
    al = PairwiseAligner(mode=mode, substitution_matrix=m, open_gap_score=-float(gap_open),
                         extend_gap_score=-float(gap_extend))
    if free_end_gaps:
        al.end_gap_score = 0.0  # overhangs at either end cost nothing (global mode)
    code = np.full(256, -1, dtype=np.intp)
    for i, a in enumerate(letters):
        code[ord(a)] = i
    _W.clear()
    _W.update(aligner=al, values=np.asarray(values, dtype=np.float64), seqs=list(seqs), formula=formula,
              mode=mode, codes=[code[np.frombuffer(s.encode("latin-1"), dtype=np.uint8)] for s in seqs],
              k=len(letters))
    _W["comp"] = [np.bincount(c, minlength=len(letters)).astype(np.float64) for c in _W["codes"]]


def _random_score(aln, i: int, j: int, s_ab: float) -> float:
    """Feng & Doolittle's S_rand from one optimal alignment (see the module docs).

    Everything comes from the alignment's coordinate path (one numpy pass; Biopython's
    ``aligned`` and ``length`` properties cost more than the formula itself).
    """
    S, k = _W["values"], _W["k"]
    ca, cb = _W["codes"][i], _W["codes"][j]
    c = np.asarray(aln.coordinates)
    da, db = np.diff(c[0]), np.diff(c[1])
    length = int(np.maximum(da, db).sum())  # a step is either aligned (da = db) or a gap
    if length <= 0:
        return math.nan
    m = (da > 0) & (db > 0)
    runs = da[m]
    total = int(runs.sum())
    if total:
        offs = np.arange(total) - np.repeat(np.cumsum(runs) - runs, runs)
        ia = np.repeat(c[0, :-1][m], runs) + offs
        ib = np.repeat(c[1, :-1][m], runs) + offs
        subst = float(S[ca[ia], cb[ib]].sum())
    else:
        subst = 0.0
    gap_part = s_ab - subst  # what the gaps scored (<= 0)
    if _W["mode"] == "local":
        na = np.bincount(ca[int(c[0, 0]):int(c[0, -1])], minlength=k).astype(np.float64)
        nb = np.bincount(cb[int(c[1, 0]):int(c[1, -1])], minlength=k).astype(np.float64)
    else:
        na, nb = _W["comp"][i], _W["comp"][j]
    return float(na @ S @ nb) / length + gap_part


def _score_chunk(pairs: np.ndarray) -> np.ndarray:
    """(S_ab, S_rand) for each pair of sequence indices (S_rand NaN when not needed/undefined)."""
    al, seqs = _W["aligner"], _W["seqs"]
    out = np.full((len(pairs), 2), np.nan)
    path = REGISTRY[_W["formula"]].needs_path
    for r, (i, j) in enumerate(pairs):
        a, b = seqs[i], seqs[j]
        if not a or not b:
            continue
        if path and a != b:
            alns = al.align(a, b)
            s_ab = float(alns.score)
            try:
                aln = alns[0]
            except IndexError:  # local mode with nothing scoring above 0
                out[r] = (s_ab, math.nan)
                continue
            out[r] = (s_ab, _random_score(aln, i, j, s_ab))
        else:
            out[r, 0] = float(al.score(a, b))
    return out


# ----------------------------------------------------------------- API
@dataclass
class ScoreDistances:
    """Result of :func:`score_distances`."""

    dm: object                  # DistanceMatrix over the record ids
    scores: np.ndarray          # (n, n) raw alignment scores (diagonal: self-scores)
    random_scores: np.ndarray   # (n, n) S_rand for formula fd (NaN otherwise)
    missing: list               # [(id_a, id_b, reason)]
    clipped: list               # [(id_a, id_b, value)]
    matrix: str = ""            # name of the substitution matrix used
    alphabet: str = ""          # "dna" or "protein" (detected or forced)


def formula_guide(indent: str = "  ", width: int = 80) -> str:
    """The score formulas, one block each (name and source, then the formula), for ``--help`` texts.

    The formula is broken after its semicolons first, so short equations stay whole.

    Examples
    --------
    >>> print(formula_guide().splitlines()[-2])
      cosine  common practice
    """
    import textwrap

    pad = max(len(n) for n in REGISTRY) + 2
    body = indent + " " * (pad + 2)
    lines = []
    for f in REGISTRY.values():
        lines.append(f"{indent}{f.name:<{pad}}{f.source}{'   (default)' if f.name == DEFAULT_FORMULA else ''}")
        line = ""
        for clause in f.formula.split("; "):
            if line and len(body) + len(line) + 2 + len(clause) > width:
                lines += textwrap.wrap(line, width, initial_indent=body, subsequent_indent=body + "  ")
                line = ""
            line += ("; " if line else "") + clause
        lines += textwrap.wrap(line, width, initial_indent=body, subsequent_indent=body + "  ")
    return "\n".join(lines)


def formula_table() -> str:
    """The formula table of docs/scores.md (markdown), made from :data:`REGISTRY`.

    Examples
    --------
    >>> print(formula_table().splitlines()[-1])
    | `cosine` | D = 1 - S_ab / sqrt(S_aa S_bb) | common practice | score only |
    """
    lines = ["| name | formula | source | needs |", "| --- | --- | --- | --- |"]
    for f in REGISTRY.values():
        name = f"`{f.name}`" + (" (default)" if f.name == DEFAULT_FORMULA else "")
        needs = "the alignment (a traceback per pair)" if f.needs_path else "score only"
        lines.append(f"| {name} | {f.formula} | {f.source} | {needs} |")
    return "\n".join(lines) + "\n"


def distances_from_scores(scores: np.ndarray, random_scores: np.ndarray | None, formula: str,
                          identical: np.ndarray | None = None
                          ) -> tuple[np.ndarray, dict[tuple[int, int], str], dict[tuple[int, int], float]]:
    """Turn a square array of alignment scores into distances.

    Parameters
    ----------
    scores : (n, n) array
        Pairwise scores; the diagonal holds the self-scores S_aa.
    random_scores : (n, n) array or None
        S_rand for ``fd`` (ignored for ``cosine``).
    formula : {"fd", "cosine"}
    identical : (n, n) bool array, optional
        Pairs of identical sequences (distance 0 by definition).

    Returns
    -------
    D : (n, n) array with NaN for undefined entries
    reasons : dict (i, j) -> reason for each undefined pair (i < j)
    clipped : dict (i, j) -> negative value set to 0

    Examples
    --------
    >>> S = np.array([[6., 2.], [2., 4.]])
    >>> D, _, _ = distances_from_scores(S, np.array([[0, -1.], [-1, 0]]), "fd")
    >>> round(float(D[0, 1]), 4)   # -100 ln((2 + 1) / (5 + 1))
    69.3147
    """
    S = np.asarray(scores, dtype=np.float64)
    n = S.shape[0]
    self_s = np.diagonal(S).copy()
    iu = np.triu_indices(n, 1)
    s_ab = S[iu]
    sa, sb = self_s[iu[0]], self_s[iu[1]]
    reasons: dict = {}
    with np.errstate(divide="ignore", invalid="ignore"):
        if formula == "fd":
            r = np.asarray(random_scores, dtype=np.float64)[iu]
            smax = 0.5 * (sa + sb)
            eff = (s_ab - r) / (smax - r)
            d = -100.0 * np.log(eff)
            bad = ~np.isfinite(d) | ~(smax > r) | ~(eff > 0)
            why = np.where(~np.isfinite(r), "no alignment to estimate the random score",
                           np.where(~(smax > r), "S_max <= S_rand", "S_ab <= S_rand"))
        elif formula == "cosine":
            prod = sa * sb
            d = 1.0 - s_ab / np.sqrt(prod)
            bad = ~np.isfinite(d) | ~(sa > 0) | ~(sb > 0)
            why = np.full(d.shape, "a self-score is not positive", dtype=object)
        else:
            raise InputError(f"unknown formula '{formula}' (choose from {', '.join(FORMULAS)})")
    d = np.where(bad, np.nan, d)
    if identical is not None:
        same = np.asarray(identical)[iu]
        d = np.where(same, 0.0, d)
        bad = bad & ~same
    for k in np.flatnonzero(bad):
        reasons[(int(iu[0][k]), int(iu[1][k]))] = str(why[k])
    neg = d < 0
    clipped = {(int(iu[0][k]), int(iu[1][k])): float(d[k]) for k in np.flatnonzero(neg)}
    d = np.where(neg, 0.0, d) + 0.0  # + 0.0: no negative zeros
    D = np.zeros((n, n))
    D[iu] = d
    D[(iu[1], iu[0])] = d
    return D, reasons, clipped


def default_processes() -> int:
    """The CPUs this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def _matrix_kind(letters) -> str | None:
    """"protein" when the matrix scores all 20 amino acids, "dna" when it holds only nucleotide codes."""
    from seqdist.io.alignment import DNA_AMBIGUITY, PROTEIN_STATES

    have = {a.upper() for a in letters}
    if set(PROTEIN_STATES) <= have:
        return "protein"
    if set("ACGT") <= have and have <= set("ACGTUN") | set(DNA_AMBIGUITY) | set("X*-"):
        return "dna"
    return None


def score_distances(ids: Sequence[str], seqs: Sequence[str], matrix: str | ScoreMatrix | None = None, *,
                    mode: str = "global", gap_open: float = 11.0, gap_extend: float = 1.0, formula: str = "fd",
                    free_end_gaps: bool = False, alphabet: str = "auto",
                    processes: int | None = 1, chunk_size: int | None = None, progress: bool = True,
                    source: str | None = None, record_lines: Sequence[int] | None = None) -> ScoreDistances:
    """Alignment-score distances between all pairs of unaligned sequences.

    Parameters
    ----------
    ids, seqs : sequences of str
        Record ids (labels) and sequences (upper case, no gaps).
    matrix : str or ScoreMatrix, optional
        A standard matrix name, a score matrix file, or a loaded
        :class:`~seqdist.scores.matrices.ScoreMatrix`; must be symmetric with
        one-character letters and hold every letter of the sequences.
        Default: ``NUC.4.4`` for DNA, ``BLOSUM62`` for protein.
    alphabet : {"auto", "dna", "protein"}
        ``auto`` calls the sequences DNA when at least 90% of their letters
        are A C G T U N (as for alignments). For DNA, ``U`` is read as ``T``
        when the matrix has ``T`` but no ``U``.
    mode : {"global", "local"}
    gap_open, gap_extend : float
        Gap costs (non-negative numbers): a gap of k residues costs
        ``gap_open + (k - 1) * gap_extend`` (:data:`GAP_COST_CONVENTION`,
        :func:`gap_cost`; Biopython's convention). End gaps cost the same as
        internal gaps unless ``free_end_gaps``.
    free_end_gaps : bool
        Gaps at either end of a global alignment cost nothing (for fragments).
    formula : {"fd", "cosine"}
        See the module docs.
    processes : int or None
        Worker processes (None: all available CPUs; 1: in this process).
    chunk_size : int, optional
        Pairs per task (default: about 16 tasks per process).
    source, record_lines : optional
        File name and header line of each record, for error messages.

    Examples
    --------
    >>> r = score_distances(["a", "b"], ["MKVLA", "MKVLA"], progress=False)
    >>> r.dm["a", "b"], r.matrix
    (0.0, 'BLOSUM62')
    >>> score_distances(["a", "b"], ["ACGTAC", "ACGTTC"], progress=False).matrix
    'NUC.4.4'
    """
    from seqdist.core.console import Progress
    from seqdist.core.matrix import DistanceMatrix
    from seqdist.scores.matrices import ScoreMatrix, load_score_matrix

    if mode not in MODES:
        raise InputError(f"unknown mode '{mode}' (choose from {', '.join(MODES)})")
    if formula not in FORMULAS:
        raise InputError(f"unknown formula '{formula}' (choose from {', '.join(FORMULAS)})")
    for what, v in (("--gap-open", gap_open), ("--gap-extend", gap_extend)):
        if not math.isfinite(v) or v < 0:
            raise InputError(f"{what} must be a non-negative number of score units (got {v})")
    from seqdist.io.alignment import guess_alphabet

    if alphabet not in ALPHABETS:
        raise InputError(f"unknown alphabet '{alphabet}' (choose from {', '.join(ALPHABETS)})")
    if processes is not None:
        processes = POSITIVE_INT.check("processes", processes)
    where = f"{source}: " if source else ""
    kind = guess_alphabet(seqs) if alphabet == "auto" else alphabet
    if matrix is None:
        matrix = DEFAULT_MATRIX[kind]
    sm = matrix if isinstance(matrix, ScoreMatrix) else load_score_matrix(str(matrix))
    mkind = _matrix_kind(sm.letters)
    if mkind is not None and mkind != kind:
        from seqdist.core.console import warn

        how = "detected" if alphabet == "auto" else "forced with --alphabet"
        warn(f"{where}the sequences are {'DNA' if kind == 'dna' else 'protein'} ({how}), but {sm.name} is a "
             f"{'nucleotide' if mkind == 'dna' else 'protein'} matrix; the default for "
             f"{'DNA' if kind == 'dna' else 'protein'} is {DEFAULT_MATRIX[kind]}")
    if kind == "dna" and "T" in sm.letters and "U" not in sm.letters and any("U" in s for s in seqs):
        seqs = [s.replace("U", "T") for s in seqs]  # RNA read as DNA, as in alignments
    if any(len(a) != 1 for a in sm.letters):
        raise InputError(f"{sm.name}: sequence alignment needs one-character letters")
    S = sm.values
    if np.abs(S - S.T).max() > 1e-9 * np.abs(S).max():
        raise InputError(f"{sm.name}: the score matrix is not symmetric, so alignment scores would "
                         "depend on the order of the pair")
    letters = "".join(sm.letters)
    ok = set(letters)
    for k, (rid, s) in enumerate(zip(ids, seqs)):
        bad = set(s) - ok
        if bad:
            first = min(bad, key=s.index)
            at = f" (line {record_lines[k]})" if record_lines is not None else ""
            raise InputError(f"{where}record '{rid}'{at}: letter '{first}' (position {s.index(first) + 1}) "
                             f"is not in score matrix {sm.name} (letters: {letters}); the sequences read as "
                             f"{'DNA' if kind == 'dna' else 'protein'}: give a matrix that covers every letter "
                             "with --matrix")
        try:
            s.encode("latin-1")
        except UnicodeEncodeError:  # pragma: no cover - caught above as a letter not in the matrix
            raise InputError(f"{where}record '{rid}': non-Latin characters") from None
    n = len(seqs)
    init_args = (letters, np.array(S), mode, gap_open, gap_extend, list(seqs), formula, free_end_gaps)
    iu = np.triu_indices(n, 1)
    pairs = np.stack(iu, axis=1).astype(np.intp)
    selfp = np.stack([np.arange(n), np.arange(n)], axis=1).astype(np.intp)
    procs = default_processes() if processes is None else int(processes)
    npairs = len(pairs)
    auto_chunks = chunk_size is None
    if auto_chunks:
        chunk_size = max(1, min(2000, -(-npairs // (max(procs, 1) * 16))))
    chunks = [pairs[k:k + chunk_size] for k in range(0, npairs, chunk_size)]
    results: list = [None] * len(chunks)
    with Progress("aligning pairs", total=npairs) as bar:
        if not progress:
            bar.min_seconds = float("inf")
        # Starting workers costs more than a few dozen alignments: small jobs stay in this process.
        if procs == 1 or len(chunks) < 2 or (auto_chunks and npairs < 50):
            _init_worker(*init_args)
            self_res = _score_chunk(selfp)
            for c, chunk in enumerate(chunks):
                results[c] = _score_chunk(chunk)
                bar.update(len(chunk))
        else:
            from concurrent.futures import ProcessPoolExecutor, as_completed

            with ProcessPoolExecutor(max_workers=min(procs, len(chunks)), initializer=_init_worker,
                                     initargs=init_args) as pool:
                self_future = pool.submit(_score_chunk, selfp)
                futs = {pool.submit(_score_chunk, chunk): c for c, chunk in enumerate(chunks)}
                for f in as_completed(futs):
                    results[futs[f]] = f.result()
                    bar.update(len(chunks[futs[f]]))
                self_res = self_future.result()
    scores = np.zeros((n, n))
    rand = np.full((n, n), np.nan)
    scores[np.arange(n), np.arange(n)] = self_res[:, 0]
    if npairs:
        allr = np.concatenate(results)
        scores[iu] = allr[:, 0]
        scores[(iu[1], iu[0])] = allr[:, 0]
        rand[iu] = allr[:, 1]
        rand[(iu[1], iu[0])] = allr[:, 1]
    # Identical sequences: distance 0 by definition (S_ab = S_max; fd's ratio may be 0/0 for tiny ones).
    seq_arr = np.array(list(seqs), dtype=object)
    identical = (seq_arr[:, None] == seq_arr[None, :]) & (np.array([len(s) for s in seqs]) > 0)[:, None]
    D, reasons, clipped = distances_from_scores(scores, rand, formula, identical)
    empty = [i for i, s in enumerate(seqs) if not s]
    for (i, j) in list(reasons):
        if i in empty or j in empty:
            reasons[(i, j)] = "an empty sequence"
    missing = [(ids[i], ids[j], why) for (i, j), why in sorted(reasons.items())]
    clip = [(ids[i], ids[j], v) for (i, j), v in sorted(clipped.items())]
    dm = DistanceMatrix.from_array(D, list(ids), source=source)
    return ScoreDistances(dm, scores, rand, missing, clip, matrix=sm.name, alphabet=kind)


__all__ = ["read_fasta", "score_distances", "distances_from_scores", "ScoreDistances", "ScoreFormula", "REGISTRY",
           "FORMULAS", "DEFAULT_FORMULA", "formula_guide", "formula_table", "MODES",
           "ALPHABETS", "DEFAULT_MATRIX", "default_processes", "GAP_COST_CONVENTION", "gap_cost",
           "gap_cost_summary"]
