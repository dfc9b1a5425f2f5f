"""Seeded sequence simulator for demo and test data.

Draws a random rooted binary tree, evolves DNA or protein sequences down it
under a continuous-time Markov model with gamma rate variation across sites
and insertion/deletion events on the branches, and returns the alignment of
the leaves with its true tree. Functions ``plant_*`` then spoil an alignment
in documented ways (a very gappy sequence, a chimera, a saturated pair,
misread stretches, a contaminant) so
that later steps have trouble to find.

Everything random is drawn from one :class:`numpy.random.Generator` built
from the seed, in a fixed order, so the same seed and options give the same
alignment and tree; the writers use fixed float formatting and no
timestamps, so the files are byte-identical too. The models, parameters and
sources are described in ``docs/simulator.md``.

Examples
--------
>>> sim = simulate(5, 40, seed=1)
>>> [label for label, _ in sim.records]
['t01', 't02', 't03', 't04', 't05']
>>> len({len(seq) for _, seq in sim.records})
1
>>> sim.tree.newick().endswith(";\\n")
True
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np

from seqdist.core.errors import InputError, ParameterError, SeqdistWarning
from seqdist.core.params import NONNEG, POSITIVE, Number

DNA_LETTERS = "ACGT"
PROTEIN_LETTERS = "ACDEFGHIKLMNPQRSTVWY"
DNA_MODELS = ("k80", "hky85")
PROTEIN_MODELS = ("poisson", "poisson-f")

# An invented, uneven amino-acid composition (order of PROTEIN_LETTERS) for the
# "poisson-f" model: roughly the shape of natural compositions (L, A, G, S
# common; W, C, M, H rare) but not any published table.
_INVENTED_PROTEIN_WEIGHTS = (8, 2, 5, 6, 4, 7, 2, 6, 6, 9, 2, 4, 5, 4, 5, 7, 5, 7, 1, 3)

#: Size limits of :func:`simulate` (docs/simulator.md, "Limits"). The simulator
#: keeps every node's states and a few per-column arrays in memory, about 25
#: bytes per cell of the alignment (measured: 1,000 x 10,000 DNA with gamma
#: rates and gaps peaked at 256 MB, in 13 s), so MAX_CELLS caps memory near
#: 0.5 GB; MAX_LENGTH caps the per-branch arrays (k floats per column);
#: MAX_TAXA caps the per-branch loop.
MAX_TAXA = 20_000
MAX_LENGTH = 1_000_000
MAX_CELLS = 20_000_000
#: More discrete gamma categories than this add nothing but matrix exponentials.
MAX_RATE_CATEGORIES = 256
#: Largest mean branch length (--branch-mean) and added saturation length: far past
#: saturation already (p within 1e-40 of its limit), and longer branches push
#: the matrix exponential towards overflow.
MAX_SCALE = 100.0
MAX_SATURATE = 1000.0
#: Most indel work: expected events over the whole tree (indel_rate x tree
#: length x columns) times expected columns, since each event costs one pass
#: over the columns (measured: about 37 ns a column, so 2e9 is about a minute).
MAX_INDEL_WORK = 2e9

#: The numeric parameters, declared once: the library checks values against
#: them and the command line makes its option types from them (one range, one
#: message form; see :mod:`seqdist.core.params`).
PARAMETERS = {
    "taxa": Number(int, 3, MAX_TAXA),
    "columns": Number(int, 1, MAX_LENGTH),
    "kappa": POSITIVE,
    "gamma": POSITIVE,
    "gamma_categories": Number(int, 0, MAX_RATE_CATEGORIES),
    "branch_mean": Number(float, 0, MAX_SCALE, lo_open=True),
    "indel_rate": NONNEG,
    "indel_length": Number(float, 1),
    "gappy_fraction": Number(float, 0, 1, lo_open=True, hi_open=True),
    "saturate_length": Number(float, 0, MAX_SATURATE, lo_open=True),
    "misread_stretches": Number(int, 1, MAX_LENGTH),
    "misread_length": Number(int, 1, MAX_LENGTH),
    "contaminant_distance": Number(float, 0, MAX_SATURATE, lo_open=True),
    "stockholm_taxa": Number(int, 2),
}

#: Keyword arguments renamed in 0.x (old name -> new name). The old names are
#: still accepted for one release, with a :class:`RenamedWarning`; they lined
#: up one for one with another program's flags, the new ones are our own.
RENAMED = {
    "freqs": "frequencies", "alpha": "gamma",
    "rate_categories": "gamma_categories", "scale": "branch_mean", "clock": "ultrametric",
    "prefix": "label_prefix", "gap_rate": "indel_rate", "gap_length": "indel_length",
}


class RenamedWarning(SeqdistWarning, FutureWarning):
    """An old option or keyword name was used; it still works for one release (FutureWarning: shown to users)."""


def _take_renamed(where: str, given: dict, current: dict, defaults: dict) -> dict:
    """Move old keyword names in ``given`` onto their new names, warning once per name.

    ``current`` holds the new names' values as called and ``defaults`` their
    defaults; an old and a new name given together is a TypeError, as Python
    gives for a keyword passed twice.
    """
    from seqdist.core.console import warn

    out = dict(current)
    for old, value in given.items():
        new = RENAMED.get(old)
        if new is None or new not in current:
            raise TypeError(f"{where}() got an unexpected keyword argument '{old}'")
        if current[new] is not defaults[new] and current[new] != defaults[new]:
            raise TypeError(f"{where}() got both '{new}' and its old name '{old}'")
        warn(f"{where}(): '{old}' is now called '{new}'; the old name will be removed in the next release",
             RenamedWarning, stacklevel=3)
        out[new] = value
    return out

# Branch lengths are rounded to this many decimals when drawn, so the Newick
# file (written with the same number of decimals) states the simulated tree exactly.
BRANCH_DECIMALS = 6
_MIN_BRANCH = 10.0 ** -BRANCH_DECIMALS


# ----------------------------------------------------------------- models
@dataclass(frozen=True, eq=False)
class Model:
    """A time-reversible substitution model, scaled to one expected substitution per unit time.

    Attributes
    ----------
    name : str
        ``k80``, ``hky85``, ``poisson`` or ``poisson-f``.
    letters : str
        The states, in matrix order.
    Q : ndarray, shape (k, k)
        Rate matrix with ``-sum_i freqs[i] * Q[i, i] == 1``, so branch lengths
        are in expected substitutions per site.
    freqs : ndarray, shape (k,)
        Stationary frequencies (the root sequence is drawn from them).
    kappa : float or None
        Transition/transversion rate ratio (DNA models only).
    """

    name: str
    letters: str
    Q: np.ndarray
    freqs: np.ndarray
    kappa: float | None = None

    @property
    def alphabet(self) -> str:
        return "dna" if self.letters == DNA_LETTERS else "protein"

    def transition_matrices(self, t: float, rates: np.ndarray) -> np.ndarray:
        """``expm(Q * r * t)`` for each rate ``r``: shape (len(rates), k, k).

        Examples
        --------
        >>> m = k80(2.0)
        >>> P = m.transition_matrices(0.1, np.array([1.0]))
        >>> bool(np.allclose(P.sum(axis=2), 1.0))
        True
        """
        from scipy.linalg import expm

        # One batched call (scipy >= 1.9 takes stacks of matrices): much cheaper than one call per rate.
        scaled = np.asarray(rates, dtype=float).reshape(-1) * float(t)
        return expm(self.Q[None, :, :] * scaled[:, None, None])

    def transition_rows(self, t: float, site_rates: np.ndarray, parent_states: np.ndarray) -> np.ndarray:
        """Rows ``P_s(t)[parent_s, :]`` for per-site rates, vectorised over sites.

        Uses the eigendecomposition of the symmetrised rate matrix
        ``D^1/2 Q D^-1/2`` (valid because the model is reversible), so each
        site may have its own rate without one matrix exponential per site.
        Returns shape (len(site_rates), k); entries may be off by rounding
        (about 1e-15) and are clipped at 0.
        """
        root = np.sqrt(self.freqs)
        S = (root[:, None] * self.Q) / root[None, :]
        lam, V = np.linalg.eigh((S + S.T) / 2)
        # An irreducible rate matrix has one zero eigenvalue (the stationary
        # one, the largest) and the rest negative. Rounding leaves about
        # +-1e-16 there, which a very long branch blows up to inf or to 0 (nan
        # or all-zero rows): set it to exactly 0.
        lam = np.minimum(lam, 0.0)
        lam[-1] = 0.0
        left = V / root[:, None]           # D^-1/2 V
        right = V.T * root[None, :]        # V^T D^1/2
        decay = np.exp(np.outer(np.asarray(site_rates, dtype=float) * float(t), lam))
        rows = (left[parent_states] * decay) @ right
        return np.clip(rows, 0.0, None)


def _check_freqs(freqs, k: int, what: str) -> np.ndarray:
    f = np.asarray(freqs, dtype=float).reshape(-1)
    if f.size != k:
        raise InputError(f"{what}: expected {k} frequencies, got {f.size}")
    if not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise InputError(f"{what}: frequencies must be positive numbers")
    return f / f.sum()


def hky85(kappa: float = 2.0, frequencies: Sequence[float] | None = None, **renamed: Any) -> Model:
    """HKY85 (Hasegawa, Kishino & Yano 1985): ``q_ij = pi_j * kappa`` for transitions, ``pi_j`` otherwise.

    Parameters
    ----------
    kappa : float
        Transition/transversion rate ratio (> 0); 1 with equal frequencies is JC69.
    frequencies : sequence of 4 floats, optional
        Base frequencies in the order A, C, G, T (normalised to sum 1;
        default equal, which is K80). (Old name: ``freqs``.)

    Examples
    --------
    >>> m = hky85(4.0, [0.3, 0.2, 0.2, 0.3])
    >>> round(float(-(m.freqs * np.diag(m.Q)).sum()), 12)
    1.0
    """
    if renamed:
        frequencies = _take_renamed("hky85", renamed, {"frequencies": frequencies}, {"frequencies": None})[
            "frequencies"]
    freqs = frequencies
    kappa = PARAMETERS["kappa"].check("kappa", kappa)   # the range the command line's --kappa reads too
    pi = np.full(4, 0.25) if freqs is None else _check_freqs(freqs, 4, "base frequencies")
    # A<->G and C<->T are the transitions (purine-purine, pyrimidine-pyrimidine).
    ts = np.zeros((4, 4), dtype=bool)
    ts[0, 2] = ts[2, 0] = ts[1, 3] = ts[3, 1] = True
    Q = np.where(ts, kappa, 1.0) * pi[None, :]
    np.fill_diagonal(Q, 0.0)
    np.fill_diagonal(Q, -Q.sum(axis=1))
    Q /= -(pi * np.diag(Q)).sum()
    name = "k80" if freqs is None or np.allclose(pi, 0.25) else "hky85"
    return Model(name, DNA_LETTERS, Q, pi, kappa)


def k80(kappa: float = 2.0) -> Model:
    """K80 (Kimura 1980): HKY85 with equal base frequencies.

    Examples
    --------
    >>> float(k80(1.0).Q[0, 1])  # JC69: every off-diagonal rate 1/3
    0.3333333333333333
    """
    return hky85(kappa, None)


def protein_poisson(frequencies: Sequence[float] | str | None = None, **renamed: Any) -> Model:
    """Equal-rates protein model: ``q_ij = pi_j`` (the Poisson model when frequencies are equal).

    With ``frequencies`` (20 values in the order ``ACDEFGHIKLMNPQRSTVWY``) this is
    the equal-input ("F81-like") model, here called ``poisson-f``; pass
    ``frequencies="invented"`` for the project's own uneven composition.
    (Old name: ``freqs``.)

    Examples
    --------
    >>> m = protein_poisson()
    >>> round(float(m.Q[0, 1] * 19), 12)  # each of the 19 changes equally likely
    1.0
    """
    if renamed:
        frequencies = _take_renamed("protein_poisson", renamed, {"frequencies": frequencies},
                                    {"frequencies": None})["frequencies"]
    freqs = frequencies
    if isinstance(freqs, str):
        if freqs != "invented":
            raise InputError(f"unknown protein frequency set '{freqs}'")
        freqs = _INVENTED_PROTEIN_WEIGHTS
    pi = np.full(20, 0.05) if freqs is None else _check_freqs(freqs, 20, "amino-acid frequencies")
    Q = np.tile(pi, (20, 1))
    np.fill_diagonal(Q, 0.0)
    np.fill_diagonal(Q, -Q.sum(axis=1))
    Q /= -(pi * np.diag(Q)).sum()
    return Model("poisson" if freqs is None else "poisson-f", PROTEIN_LETTERS, Q, pi, None)


def make_model(alphabet: str = "dna", model: str | None = None, kappa: float = 2.0,
               frequencies: Sequence[float] | str | None = None, **renamed: Any) -> Model:
    """The model by name (``k80``, ``hky85``, ``poisson``, ``poisson-f``) with alphabet checks.

    Defaults: ``k80`` for DNA (``hky85`` when frequencies are given), ``poisson``
    for protein (``poisson-f`` when frequencies are given). ``poisson-f``
    without frequencies uses the invented composition. (Old keyword name of
    ``frequencies``: ``freqs``.)

    Examples
    --------
    >>> make_model("protein", "poisson-f").name
    'poisson-f'
    """
    if renamed:
        frequencies = _take_renamed("make_model", renamed, {"frequencies": frequencies},
                                    {"frequencies": None})["frequencies"]
    freqs = frequencies
    if alphabet not in ("dna", "protein"):
        raise InputError(f"unknown alphabet '{alphabet}' (choose dna or protein)")
    if alphabet == "dna":
        model = model or ("k80" if freqs is None else "hky85")
        if model not in DNA_MODELS:
            raise InputError(f"model '{model}' is not a DNA model (choose from {', '.join(DNA_MODELS)})")
        if model == "k80":
            if freqs is not None:
                raise InputError("model k80 has equal base frequencies; use hky85 to set them")
            return k80(kappa)
        if freqs is None:
            # HKY85 without explicit frequencies: a mildly AT-rich default of our own.
            freqs = (0.3, 0.2, 0.2, 0.3)
        m = hky85(kappa, freqs)
        return dataclasses.replace(m, name="hky85")
    model = model or ("poisson" if freqs is None else "poisson-f")
    if model not in PROTEIN_MODELS:
        raise InputError(f"model '{model}' is not a protein model (choose from {', '.join(PROTEIN_MODELS)})")
    if model == "poisson":
        if freqs is not None:
            raise InputError("model poisson has equal frequencies; use poisson-f to set them")
        return protein_poisson(None)
    return protein_poisson("invented" if freqs is None else freqs)


def gamma_rates(alpha: float, categories: int = 4) -> np.ndarray:
    """Mean rates of the equal-probability categories of a Gamma(alpha, 1/alpha) distribution.

    The discrete gamma of Yang (1994), "Maximum likelihood phylogenetic
    estimation from DNA sequences with variable rates over sites: approximate
    methods", J. Mol. Evol. 39:306-314: category boundaries at the quantiles
    ``i/K``, each category represented by its mean, so the rates average to 1.

    Examples
    --------
    >>> np.round(gamma_rates(0.5, 4), 4)
    array([0.0334, 0.2519, 0.8203, 2.8944])
    """
    from scipy.special import gammainc
    from scipy.stats import gamma

    alpha = float(alpha)
    if not np.isfinite(alpha) or alpha <= 0:
        raise InputError(f"gamma shape alpha must be a positive number (got {alpha})")
    if int(categories) < 1:
        raise InputError(f"rate categories must be at least 1 (got {categories})")
    k = int(categories)
    cuts = gamma.ppf(np.arange(1, k) / k, alpha, scale=1.0 / alpha)
    # E[r; r < b] for Gamma(alpha, rate alpha) is P(alpha + 1, alpha * b) (regularised lower incomplete gamma).
    cdf1 = np.concatenate([[0.0], gammainc(alpha + 1.0, alpha * cuts), [1.0]])
    rates = k * np.diff(cdf1)
    return rates / rates.mean()


# ------------------------------------------------------------------- tree
@dataclass(eq=False)
class TrueTree:
    """A rooted binary tree: leaves are nodes ``0..n-1``, internal nodes ``n..2n-2``, root last.

    A parent always has a larger index than its children, so descending index
    order visits parents before children.

    Attributes
    ----------
    labels : list of str
        Leaf labels (the alignment's ids).
    parent : ndarray of int, shape (2n-1,)
        Parent of each node; -1 for the root.
    length : ndarray of float, shape (2n-1,)
        Length of the branch above each node, in expected substitutions per
        site (0 for the root).
    children : ndarray of int, shape (n-1, 2)
        Children of internal node ``n + j`` in row ``j``.
    """

    labels: list
    parent: np.ndarray
    length: np.ndarray
    children: np.ndarray

    @property
    def n_leaves(self) -> int:
        return len(self.labels)

    @property
    def root(self) -> int:
        return 2 * self.n_leaves - 2

    def total_length(self) -> float:
        """Sum of all branch lengths."""
        return float(self.length.sum())

    def leaf_sets(self) -> np.ndarray:
        """Boolean (2n-1, n): which leaves lie below each node."""
        n = self.n_leaves
        below = np.zeros((2 * n - 1, n), dtype=bool)
        below[np.arange(n), np.arange(n)] = True
        for j, (a, b) in enumerate(self.children):
            below[n + j] = below[a] | below[b]
        return below

    def path_lengths(self) -> np.ndarray:
        """Patristic distances between leaves: (n, n), in expected substitutions per site.

        A branch lies on the path between two leaves exactly when it separates
        them, so ``D = A^T W (1 - A) + (1 - A)^T W A`` with ``A`` the
        branch-by-leaf membership and ``W`` the branch lengths.

        Examples
        --------
        >>> tr = random_tree(4, np.random.default_rng(0))
        >>> D = tr.path_lengths()
        >>> bool(np.allclose(D, D.T)) and bool(np.all(np.diag(D) == 0))
        True
        """
        A = self.leaf_sets()[:-1].astype(float)   # every node but the root has a branch above it
        W = self.length[:-1, None]
        D = A.T @ (W * (1.0 - A))
        return D + D.T

    def newick(self, decimals: int = BRANCH_DECIMALS) -> str:
        """The tree in Newick, rooted, with fixed-decimal branch lengths.

        Labels are plain (letters, digits, underscore) and written as they are.
        Built without recursion, so deep trees are fine.

        Examples
        --------
        >>> tr = random_tree(3, np.random.default_rng(0), branch_mean=0.1)
        >>> tr.newick().count(":")
        4
        """
        n = self.n_leaves
        fmt = f"{{:.{decimals}f}}"
        text: dict[int, str] = {i: self.labels[i] for i in range(n)}
        for j, (a, b) in enumerate(self.children):  # children before parents
            node = n + j
            text[node] = f"({text.pop(a)}:{fmt.format(self.length[a])},{text.pop(b)}:{fmt.format(self.length[b])})"
        return text[self.root] + ";\n"

    def with_lengths(self, length: np.ndarray) -> "TrueTree":
        return TrueTree(list(self.labels), self.parent.copy(), np.asarray(length, dtype=float).copy(),
                        self.children.copy())


def random_tree(n: int, rng: int | np.random.Generator | None, branch_mean: float = 0.05, ultrametric: bool = False,
                label_prefix: str = "t", **renamed: Any) -> TrueTree:
    """A random rooted binary tree with ``n`` leaves labelled ``{label_prefix}01..``.

    The topology is coalescent-like: lineages are joined two at a time,
    each pair chosen uniformly at random. Branch lengths (expected
    substitutions per site):

    * ``ultrametric=False`` (default): independent exponentials with mean ``branch_mean``;
    * ``ultrametric=True``: the Kingman coalescent's waiting times (exponential with
      rate ``k(k-1)/2`` while ``k`` lineages remain), rescaled so the mean
      branch length is exactly ``branch_mean``; the tree is ultrametric.

    Lengths are rounded to 6 decimals (at least 1e-6). Old keyword names
    (``scale``, ``clock``, ``prefix``) still work for one release, with a
    :class:`RenamedWarning`.

    Examples
    --------
    >>> tr = random_tree(6, np.random.default_rng(3))
    >>> tr.labels[:2], int(tr.parent[tr.root])
    (['t01', 't02'], -1)
    """
    if renamed:
        new = _take_renamed("random_tree", renamed,
                            {"branch_mean": branch_mean, "ultrametric": ultrametric, "label_prefix": label_prefix},
                            {"branch_mean": 0.05, "ultrametric": False, "label_prefix": "t"})
        branch_mean, ultrametric, label_prefix = new["branch_mean"], new["ultrametric"], new["label_prefix"]
    scale, clock, prefix = branch_mean, ultrametric, label_prefix
    rng = np.random.default_rng(rng)
    n = int(n)
    if n < 3:
        raise InputError(f"a tree needs at least 3 taxa (got {n})")
    scale = PARAMETERS["branch_mean"].check("branch_mean", scale)
    width = max(2, len(str(n)))
    labels = [f"{prefix}{i + 1:0{width}d}" for i in range(n)]
    n_nodes = 2 * n - 1
    parent = np.full(n_nodes, -1, dtype=np.int64)
    children = np.empty((n - 1, 2), dtype=np.int64)
    height = np.zeros(n_nodes)
    active = list(range(n))
    t = 0.0
    for j in range(n - 1):  # one step per join (n - 1 steps), not per site
        k = len(active)
        if clock:
            t += rng.exponential(2.0 / (k * (k - 1)))
        a, b = sorted(rng.choice(k, size=2, replace=False))
        ca, cb = active[a], active[b]
        node = n + j
        children[j] = (ca, cb)
        parent[ca] = parent[cb] = node
        height[node] = t
        del active[b]
        active[a] = node
    length = np.zeros(n_nodes)
    if clock:
        raw = height[parent[:-1]] - height[:-1]
        height *= scale / raw.mean()
        h = np.round(height, BRANCH_DECIMALS)
        for j in range(n - 1):  # heights must stay increasing after rounding
            node = n + j
            h[node] = max(h[node], max(h[children[j]]) + _MIN_BRANCH)
        length[:-1] = np.round(h[parent[:-1]] - h[:-1], BRANCH_DECIMALS)
    else:
        length[:-1] = np.maximum(np.round(rng.exponential(scale, size=n_nodes - 1), BRANCH_DECIMALS),
                                 _MIN_BRANCH)
    return TrueTree(labels, parent, length, children)


# ----------------------------------------------------------------- indels
def _indel_columns(tree: TrueTree, root_length: int, gap_rate: float, gap_length: float, rng):
    """Place insertion and deletion events on the branches.

    Returns ``(order, present)``: the alignment order of all column ids and
    a boolean (2n-1, M) array saying which node holds a residue in which column.

    Each branch gets Poisson(``gap_rate * length * residues of the parent``)
    events; each is an insertion or a deletion with probability 1/2 and has a
    geometric length with mean ``gap_length``. A deletion removes a run of
    consecutive residues of the child (and so of all its descendants); an
    insertion adds a run of new columns after a random residue, present only
    in the child's subtree. Cost: one small array operation per event.
    """
    n_nodes = 2 * tree.n_leaves - 1
    rows: list[np.ndarray | None] = [None] * n_nodes
    rows[tree.root] = np.ones(root_length, dtype=bool)
    order: list[int] = list(range(root_length))
    n_cols = root_length
    p_geom = 1.0 / float(gap_length)
    for node in range(n_nodes - 2, -1, -1):
        pres = rows[tree.parent[node]]
        pres = np.concatenate([pres, np.zeros(n_cols - pres.size, dtype=bool)])
        n_events = rng.poisson(gap_rate * tree.length[node] * max(int(pres.sum()), 1)) if gap_rate > 0 else 0
        for _ in range(n_events):
            go = np.asarray(order, dtype=np.int64)
            mine = go[pres[go]]                 # this node's residues, in alignment order
            k = int(rng.geometric(p_geom))
            if rng.random() < 0.5:              # deletion
                if mine.size == 0:
                    continue
                start = int(rng.integers(mine.size))
                pres[mine[start:start + k]] = False
            else:                               # insertion after residue `after` (-1: at the front)
                after = int(rng.integers(-1, mine.size))
                at = 0 if after < 0 else order.index(int(mine[after])) + 1
                if after < 0 and mine.size:
                    at = order.index(int(mine[0]))
                new = list(range(n_cols, n_cols + k))
                order[at:at] = new
                n_cols += k
                pres = np.concatenate([pres, np.ones(k, dtype=bool)])
        rows[node] = pres
    present = np.zeros((n_nodes, n_cols), dtype=bool)
    for node, r in enumerate(rows):
        present[node, :r.size] = r
    return np.asarray(order, dtype=np.int64), present


# -------------------------------------------------------------- simulation
@dataclass(eq=False)
class Simulation:
    """A simulated alignment with its true tree.

    Attributes
    ----------
    records : list of (str, str)
        ``(id, aligned sequence)`` in label order; ``-`` marks a gap.
    tree : TrueTree
        The tree the sequences evolved on (after any planted long branches).
    model : Model
        The substitution model.
    site_rates : ndarray, shape (L,)
        The rate multiplier of each alignment column.
    params : dict
        The options used (for the summary file).
    planted : list of dict
        What the ``plant_*`` functions changed, in order.
    """

    records: list
    tree: TrueTree
    model: Model
    site_rates: np.ndarray
    params: dict = field(default_factory=dict)
    planted: list = field(default_factory=list)

    @property
    def labels(self) -> list:
        return [r[0] for r in self.records]

    def index(self, label: str) -> int:
        for i, (lab, _) in enumerate(self.records):
            if lab == label:
                return i
        raise InputError(f"no taxon labelled '{label}' (labels run {self.records[0][0]}..{self.records[-1][0]})")

    def sequence(self, label: str) -> str:
        return self.records[self.index(label)][1]

    def replace(self, **changes: Any) -> "Simulation":
        return dataclasses.replace(self, **changes)


_SIMULATE_DEFAULTS = {"model": None, "kappa": 2.0, "frequencies": None, "gamma": None, "gamma_categories": 4,
                      "branch_mean": 0.05, "ultrametric": False, "indel_rate": 0.0, "indel_length": 3.0,
                      "label_prefix": "t"}


def simulate(taxa: int, columns: int, alphabet: str = "dna", seed: int | np.random.Generator = 0, *,
             model: str | None = None, kappa: float = 2.0, frequencies: Sequence[float] | str | None = None,
             gamma: float | None = None, gamma_categories: int = 4, branch_mean: float = 0.05,
             ultrametric: bool = False, indel_rate: float = 0.0, indel_length: float = 3.0, label_prefix: str = "t",
             **renamed: Any) -> Simulation:
    """Simulate an alignment of ``taxa`` sequences with exactly ``columns`` columns.

    The keyword names are those of the command line's options (``--gamma``,
    ``--branch-mean``, ...; docs/simulator.md). The old names (``alpha``,
    ``rate_categories``, ``scale``, ``clock``, ``gap_rate``, ``gap_length``,
    ``freqs``, ``prefix``; see :data:`RENAMED`) still work for one release,
    with a :class:`RenamedWarning`.

    Parameters
    ----------
    taxa : int
        Number of leaves (>= 3).
    columns : int
        Columns of the final alignment (>= 1). With indels, sequences are
        simulated from a root of ``columns`` residues; columns that no leaf
        holds are dropped and the alignment is cut to ``columns`` columns
        (a longer root is used if it came out short).
    alphabet : {"dna", "protein"}
    seed : int or numpy.random.Generator
        Everything random comes from ``numpy.random.default_rng(seed)``.
    model : str, optional
        ``k80`` / ``hky85`` (DNA), ``poisson`` / ``poisson-f`` (protein); see :func:`make_model`.
    kappa : float
        Transition/transversion rate ratio (DNA).
    frequencies : sequence of float, optional
        Stationary frequencies (A C G T, or the 20 amino acids in ``ACDEFGHIKLMNPQRSTVWY`` order).
    gamma : float, optional
        Shape of the gamma distribution of rates across sites (mean 1); None means equal rates.
    gamma_categories : int
        Discrete gamma with this many equal-probability categories (Yang 1994),
        or 0 for a continuous gamma rate drawn per site.
    branch_mean : float
        Mean branch length in expected substitutions per site (see :func:`random_tree`).
    ultrametric : bool
        Ultrametric coalescent branch lengths instead of independent exponentials.
    indel_rate : float
        Insertion and deletion events per residue per unit branch length (0: no gaps).
    indel_length : float
        Mean length of an inserted or deleted run (geometric, >= 1).
    label_prefix : str
        Labels are ``{label_prefix}01``, ``{label_prefix}02``, ...

    Returns
    -------
    Simulation

    Examples
    --------
    >>> sim = simulate(4, 30, "protein", seed=7, gamma=0.5)
    >>> sim.records[0][0], len(sim.records[0][1])
    ('t01', 30)
    """
    if renamed:
        current = {"model": model, "kappa": kappa, "frequencies": frequencies, "gamma": gamma,
                   "gamma_categories": gamma_categories, "branch_mean": branch_mean, "ultrametric": ultrametric,
                   "indel_rate": indel_rate, "indel_length": indel_length, "label_prefix": label_prefix}
        v = _take_renamed("simulate", renamed, current, _SIMULATE_DEFAULTS)
        frequencies, gamma, gamma_categories = v["frequencies"], v["gamma"], v["gamma_categories"]
        branch_mean, ultrametric, label_prefix = v["branch_mean"], v["ultrametric"], v["label_prefix"]
        indel_rate, indel_length = v["indel_rate"], v["indel_length"]
    # Short local names for the body below.
    n_taxa, length, freqs, alpha, rate_categories = taxa, columns, frequencies, gamma, gamma_categories
    scale, clock, prefix = branch_mean, ultrametric, label_prefix
    rng = np.random.default_rng(seed)
    n_taxa, length = int(n_taxa), int(length)
    check_size(n_taxa, length)
    if not prefix or not all(c.isascii() and (c.isalnum() or c == "_") for c in prefix):
        raise InputError(f"label prefix '{prefix}' must be letters, digits or underscores")
    gap_rate = PARAMETERS["indel_rate"].check("indel_rate", indel_rate)
    gap_length = PARAMETERS["indel_length"].check("indel_length", indel_length)
    PARAMETERS["branch_mean"].check("branch_mean", scale)
    if gap_rate > 0:
        # Expected events: rate x tree length (2n - 2 branches of mean `branch_mean`) x residues.
        events = gap_rate * (2 * n_taxa - 2) * float(scale) * length
        expected = length + 0.5 * events * gap_length   # columns: half the events insert a run
        if events * expected > MAX_INDEL_WORK:
            raise ParameterError.text(
                f"{{indel_rate}} {gap_rate:g} with {{indel_length}} {gap_length:g} means about {events:.3g} indel "
                f"events over about {expected:.3g} columns, more than the limit of {MAX_INDEL_WORK:.3g} (events x "
                "columns, about a minute); lower {indel_rate} or {indel_length}", "indel_rate", "indel_length")
        if n_taxa * expected > MAX_CELLS:
            raise ParameterError.text(
                f"{{indel_rate}} {gap_rate:g} with {{indel_length}} {gap_length:g} inserts about "
                f"{expected - length:.3g} columns; {n_taxa} taxa x {expected:.3g} columns is more than the limit of "
                f"{MAX_CELLS} cells; lower {{indel_rate}} or {{indel_length}}", "indel_rate", "indel_length")
    m = make_model(alphabet, model, kappa, freqs)
    cats = None
    if alpha is not None:
        alpha = PARAMETERS["gamma"].check("gamma", alpha)
        PARAMETERS["gamma_categories"].check("gamma_categories", rate_categories)
        if int(rate_categories) > 0:
            cats = gamma_rates(alpha, int(rate_categories))

    tree = random_tree(n_taxa, rng, branch_mean=scale, ultrametric=clock, label_prefix=prefix)
    n = n_taxa

    root_length = length
    while True:
        if gap_rate > 0:
            order, present = _indel_columns(tree, root_length, gap_rate, gap_length, rng)
        else:
            order, present = np.arange(root_length), np.ones((2 * n - 1, root_length), dtype=bool)
        keep = order[present[:n][:, order].any(axis=0)]   # columns some leaf holds, in alignment order
        if keep.size >= length:
            break
        root_length += (length - keep.size) + 8        # deletions won; try a longer root
        if root_length > 20 * length + 1000 or n_taxa * root_length > MAX_CELLS:
            raise ParameterError.text(
                f"deletions remove nearly every column ({{indel_rate}} {gap_rate:g}, {{indel_length}} "
                f"{gap_length:g}): lower {{indel_length}} or {{indel_rate}}", "indel_rate", "indel_length")
    n_cols = present.shape[1]

    # Site rates: a category per column (discrete gamma) or a rate per column (continuous).
    if alpha is None:
        cat = np.zeros(n_cols, dtype=np.int64)
        rate_values = np.ones(1)
        site_rate = np.ones(n_cols)
    elif cats is not None:
        cat = rng.integers(cats.size, size=n_cols)
        rate_values = cats
        site_rate = cats[cat]
    else:
        site_rate = rng.gamma(float(alpha), 1.0 / float(alpha), size=n_cols)
        cat = None
        rate_values = None

    k = len(m.letters)
    states = np.empty((2 * n - 1, n_cols), dtype=np.int8)
    states[tree.root] = rng.choice(k, size=n_cols, p=m.freqs)
    with _one_blas_thread():
        for node in range(2 * n - 3, -1, -1):  # parents before children; vectorised over sites
            par = states[tree.parent[node]]
            if cat is not None:
                P = m.transition_matrices(tree.length[node], rate_values)   # (categories, k, k)
                if not np.isfinite(P).all():  # guarded by MAX_SCALE; never draw from nan rows
                    raise InputError(f"branch length {tree.length[node]:g} is too long for the model "
                                     "(lower branch_mean, --branch-mean)")
                rows = P[cat, par]
            else:
                rows = m.transition_rows(tree.length[node], site_rate, par)
            states[node] = _draw(rows, rng)

    cols = keep[:length]
    letters = np.frombuffer(m.letters.encode("ascii"), dtype=np.uint8)
    leaf = letters[states[:n][:, cols]]
    leaf[~present[:n][:, cols]] = ord("-")
    records = [(tree.labels[i], leaf[i].tobytes().decode("ascii")) for i in range(n)]
    # The summary keeps its keys from before the options were renamed (the demo
    # .sim.json files are byte-identical); docs/simulator.md maps them to the options.
    params = {"taxa": n, "length": length, "alphabet": m.alphabet, "model": m.name,
              "kappa": m.kappa, "freqs": [round(float(f), 6) for f in m.freqs],
              "alpha": None if alpha is None else float(alpha),
              "rate_categories": None if alpha is None else int(rate_categories),
              "scale": float(scale), "clock": bool(clock), "gap_rate": gap_rate, "gap_length": gap_length}
    return Simulation(records, tree, m, site_rate[cols].copy(), params, [])


def check_size(taxa: int, columns: int) -> None:
    """Refuse alignment sizes beyond the documented limits (before any work).

    Limits: 3 to :data:`MAX_TAXA` taxa, 1 to :data:`MAX_LENGTH` columns and at
    most :data:`MAX_CELLS` cells (taxa x columns), so that a typo cannot ask for
    more memory than the machine has.

    Raises
    ------
    InputError
        Naming the option and the limit.

    Examples
    --------
    >>> check_size(30, 1200)
    >>> check_size(1000, 1000000)  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    seqdist.core.errors.ParameterError: parameter 'taxa' 1000 x parameter 'columns' 1000000 is ...
    """
    PARAMETERS["taxa"].check("taxa", taxa)
    PARAMETERS["columns"].check("columns", columns)
    if taxa * columns > MAX_CELLS:
        raise ParameterError.text(f"{{taxa}} {taxa} x {{columns}} {columns} is {taxa * columns} cells, more "
                                  f"than the limit of {MAX_CELLS} (about 0.5 GB of memory)", "taxa", "columns")


def _one_blas_thread():
    """Limit BLAS to one thread while exponentiating many tiny matrices.

    Measured here: ``expm`` of 4x4 matrices ran about 70x slower with
    OpenBLAS's two threads on a loaded 2-core machine than with one. Uses
    threadpoolctl when it is installed, else does nothing.
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - threadpoolctl is optional
        import contextlib

        return contextlib.nullcontext()
    return threadpool_limits(1)


def _draw(rows: np.ndarray, rng) -> np.ndarray:
    """One state per row from row-wise probabilities (inverse CDF, vectorised)."""
    cum = np.cumsum(rows, axis=1)
    u = rng.random(rows.shape[0]) * cum[:, -1]     # tolerate rows summing to 1 +- rounding
    return (u[:, None] >= cum[:, :-1]).sum(axis=1).astype(np.int8)


# ---------------------------------------------------------- planted trouble
def _free_labels(sim: Simulation) -> list:
    used = set()
    for note in sim.planted:
        used.update(note.get("labels", []))
    return [lab for lab in sim.labels if lab not in used]


def _set_sequence(sim: Simulation, label: str, seq: str) -> list:
    i = sim.index(label)
    recs = list(sim.records)
    recs[i] = (label, seq)
    return recs


def plant_gappy(sim: Simulation, label: str | None = None, fraction: float = 0.7, runs: int = 5,
                rng: int | np.random.Generator | None = None) -> Simulation:
    """Turn residues of one sequence into gaps, in ``runs`` blocks, until ``fraction`` of its columns are gaps.

    Parameters
    ----------
    label : str, optional
        The taxon (default: a random taxon not used by an earlier plant).
    fraction : float
        Target gap fraction of the row, in (0, 1); existing gaps count.
    runs : int
        Number of gap blocks added (fewer if the row is short).

    Examples
    --------
    >>> sim = plant_gappy(simulate(5, 100, seed=2), "t03", 0.7, rng=0)
    >>> sim.sequence("t03").count("-")
    70
    """
    rng = np.random.default_rng(rng)
    fraction = float(fraction)
    if not 0 < fraction < 1:
        raise InputError(f"gappy fraction must be between 0 and 1 (got {fraction})")
    if label is None:
        free = _free_labels(sim)
        label = free[int(rng.integers(len(free)))]
    seq = np.frombuffer(sim.sequence(label).encode("ascii"), dtype=np.uint8).copy()
    L = seq.size
    res = np.flatnonzero(seq != ord("-"))
    add = int(round(fraction * L)) - (L - res.size)
    if add > 0:
        keep = res.size - add
        m = max(1, min(int(runs), add, keep + 1))
        # A random composition: `add` gapped residues in m positive runs, the
        # `keep` residues around them in m + 1 non-negative runs.
        gap_parts = np.diff(np.concatenate([[0], np.sort(rng.choice(np.arange(1, add), m - 1, replace=False))
                                            if m > 1 else np.empty(0, dtype=np.int64), [add]]))
        bars = np.sort(rng.choice(keep + m, m, replace=False))
        keep_parts = np.diff(np.concatenate([[-1], bars, [keep + m]])) - 1
        is_gap = np.concatenate([np.concatenate([np.zeros(keep_parts[i], bool), np.ones(gap_parts[i], bool)])
                                 for i in range(m)] + [np.zeros(keep_parts[m], bool)])
        seq[res[is_gap]] = ord("-")
    new = seq.tobytes().decode("ascii")
    note = {"kind": "gappy", "labels": [label], "gap_fraction": round(new.count("-") / L, 6)}
    return sim.replace(records=_set_sequence(sim, label, new), planted=sim.planted + [note])


def plant_chimera(sim: Simulation, label: str | None = None, donor: str | None = None, split: float = 0.5,
                  rng: int | np.random.Generator | None = None) -> Simulation:
    """Replace the columns from ``split * L`` on of ``label`` with those of a distant ``donor``.

    The row then carries its own history in the first part and the donor's in
    the rest, as a misassembled or contaminated sequence would. The true tree
    is left as it was (it describes the first part of the row).

    Parameters
    ----------
    label : str, optional
        The chimera (default: a random taxon not used by an earlier plant).
    donor : str, optional
        Source of the second part (default: among the unused taxa, the one
        farthest from ``label`` on the true tree).
    split : float
        Fraction of the columns kept from ``label``.

    Examples
    --------
    >>> sim = plant_chimera(simulate(6, 50, seed=4), "t01", "t02")
    >>> sim.sequence("t01")[25:] == sim.sequence("t02")[25:]
    True
    """
    rng = np.random.default_rng(rng)
    split = float(split)
    if not 0 < split < 1:
        raise InputError(f"chimera split must be between 0 and 1 (got {split})")
    free = _free_labels(sim)
    if label is None:
        label = free[int(rng.integers(len(free)))]
    D = sim.tree.path_lengths()
    tree_pos = {lab: i for i, lab in enumerate(sim.tree.labels)}
    if donor is None:
        cands = [lab for lab in free if lab != label]
        if not cands:
            raise InputError("no taxon left to be the chimera's donor")
        donor = max(cands, key=lambda lab: (D[tree_pos[label], tree_pos[lab]], lab))
    if donor == label:
        raise InputError(f"a chimera needs two different taxa (got '{label}' twice)")
    a, b = sim.sequence(label), sim.sequence(donor)
    cut = int(round(split * len(a)))
    note = {"kind": "chimera", "labels": [label, donor], "label": label, "donor": donor,
            "first_donor_column": cut + 1, "path_length": round(float(D[tree_pos[label], tree_pos[donor]]), 6)}
    return sim.replace(records=_set_sequence(sim, label, a[:cut] + b[cut:]), planted=sim.planted + [note])


def plant_saturated_pair(sim: Simulation, pair: Sequence[str] | None = None, extra: float = 50.0,
                         rng: int | np.random.Generator | None = None) -> Simulation:
    """Put two taxa at the end of very long branches, so their pair is past saturation.

    Each residue of both taxa evolves ``extra`` more expected substitutions
    per site (times its site rate) under the simulation's model, and the
    terminal branches of the true tree grow by ``extra``: the tree still
    describes the data. With ``extra`` large the two rows are practically
    independent draws from the stationary frequencies, so their p-distance
    sits near ``1 - sum(freqs**2)`` (0.75 for DNA with equal frequencies) and
    JC69 / K80 corrections are undefined for many pairs involving them.

    Parameters
    ----------
    pair : two labels, optional
        Default: among the unused taxa, the pair farthest apart on the true tree.
    extra : float
        Added branch length (> 0).

    Examples
    --------
    >>> sim = plant_saturated_pair(simulate(6, 50, seed=4), ["t01", "t02"], rng=0)
    >>> sim.planted[-1]["labels"]
    ['t01', 't02']
    """
    rng = np.random.default_rng(rng)
    extra = float(extra)
    if not (0 < extra <= MAX_SATURATE):
        raise InputError(f"saturation branch length must be above 0 and at most {MAX_SATURATE:g} (got {extra})")
    tree_pos = {lab: i for i, lab in enumerate(sim.tree.labels)}
    if pair is None:
        free = _free_labels(sim)
        if len(free) < 2:
            raise InputError("not enough unused taxa for a saturated pair")
        D = sim.tree.path_lengths()
        idx = np.array([tree_pos[lab] for lab in free])
        sub = D[np.ix_(idx, idx)]
        i, j = np.unravel_index(int(np.argmax(sub)), sub.shape)
        pair = sorted([free[i], free[j]])
    pair = list(pair)
    if len(pair) != 2 or pair[0] == pair[1]:
        raise InputError(f"a saturated pair needs two different labels (got {', '.join(pair)})")
    m = sim.model
    letters = np.frombuffer(m.letters.encode("ascii"), dtype=np.uint8)
    lookup = np.full(256, -1, dtype=np.int64)
    lookup[letters] = np.arange(letters.size)
    recs = sim.records
    length = sim.tree.length.copy()
    for lab in pair:
        seq = np.frombuffer(dict(recs)[lab].encode("ascii"), dtype=np.uint8).copy()
        res = np.flatnonzero(seq != ord("-"))
        rows = m.transition_rows(extra, sim.site_rates[res], lookup[seq[res]])
        seq[res] = letters[_draw(rows, rng)]
        recs = _set_sequence(sim.replace(records=recs), lab, seq.tobytes().decode("ascii"))
        length[tree_pos[lab]] = np.round(length[tree_pos[lab]] + extra, BRANCH_DECIMALS)
    a, b = dict(recs)[pair[0]], dict(recs)[pair[1]]
    p, compared = _p_distance(a, b)
    note = {"kind": "saturated_pair", "labels": pair, "extra_length": extra,
            "p_distance": round(p, 6), "compared_columns": compared}
    return sim.replace(records=recs, tree=sim.tree.with_lengths(length), planted=sim.planted + [note])


MISREAD_HOWS = ("random", "shift")


def plant_misread(sim: Simulation, label: str | None = None, stretches: int = 3, stretch_length: int = 50,
                  how: str = "random", shift: int = 1, rng: int | np.random.Generator | None = None) -> Simulation:
    """Replace a few stretches of one row by misread residues.

    ``stretches`` non-overlapping stretches of ``stretch_length`` columns are
    placed at random in the row. Inside them:

    * ``how="random"`` (default), a base-calling error: every residue is
      replaced by a draw from the model's stationary frequencies, as a base
      caller reading a stretch of poor signal gives calls unrelated to the
      template (about 3/4 of them wrong for DNA with equal frequencies; the
      row's composition does not change). Gaps stay gaps.
    * ``how="shift"``, an alignment error: the stretch's columns hold the
      row's own content ``shift`` columns further on (wrapping round inside the
      stretch), as when an aligner misplaces an indel and a segment slides
      against its homologues. Gaps move with their residues.

    The true tree is left as it was: the stretches are wrong data, not history.

    Parameters
    ----------
    label : str, optional
        The misread row (default: a random taxon not used by an earlier plant).
    stretches : int
        Number of stretches (>= 1).
    stretch_length : int
        Columns per stretch (>= 1); all stretches together may cover at most
        half of the row.
    how : {"random", "shift"}
        Base-calling error or alignment error (see above).
    shift : int
        Columns the content slides by with ``how="shift"`` (1 to stretch_length - 1).

    Examples
    --------
    >>> sim = plant_misread(simulate(5, 200, seed=2), "t03", 2, 20, rng=0)
    >>> sim.planted[-1]["misread_columns"]
    40
    >>> sum(a != b for a, b in zip(sim.sequence("t03"), simulate(5, 200, seed=2).sequence("t03"))) > 20
    True
    """
    rng = np.random.default_rng(rng)
    if how not in MISREAD_HOWS:
        raise InputError(f"unknown misread kind '{how}' (choose {' or '.join(MISREAD_HOWS)})")
    stretches, stretch_length = int(stretches), int(stretch_length)
    if stretches < 1 or stretch_length < 1:
        raise InputError(f"misread stretches and their length must be at least 1 (got {stretches} x "
                         f"{stretch_length})")
    if label is None:
        free = _free_labels(sim)
        label = free[int(rng.integers(len(free)))]
    seq = np.frombuffer(sim.sequence(label).encode("ascii"), dtype=np.uint8).copy()
    L = seq.size
    covered = stretches * stretch_length
    if 2 * covered > L:
        raise InputError(f"misread stretches ({stretches} x {stretch_length} columns) would cover more than half "
                         f"of the {L} columns; use fewer or shorter stretches")
    if how == "shift" and stretch_length < 2:
        raise InputError(f"a shifted misread stretch needs at least 2 columns (got {stretch_length})")
    if how == "shift" and not 1 <= int(shift) < stretch_length:
        raise InputError(f"misread shift must be from 1 to {stretch_length - 1} columns (got {shift})")
    # Random non-overlapping placement: the L - covered untouched columns split into
    # stretches + 1 non-negative runs around the stretches (a random composition).
    bars = np.sort(rng.choice(L - covered + stretches, stretches, replace=False))
    starts = bars - np.arange(stretches) + np.arange(stretches) * stretch_length
    old = seq.copy()
    m = sim.model
    letters = np.frombuffer(m.letters.encode("ascii"), dtype=np.uint8)
    for a in starts:
        block = slice(int(a), int(a) + stretch_length)
        if how == "random":
            res = np.flatnonzero(seq[block] != ord("-")) + int(a)
            seq[res] = letters[rng.choice(letters.size, size=res.size, p=m.freqs)]
        else:
            seq[block] = np.roll(old[block], -int(shift))
    new = seq.tobytes().decode("ascii")
    note = {"kind": "misread", "labels": [label], "how": how,
            "stretches": [[int(a) + 1, int(a) + stretch_length] for a in starts],
            "misread_columns": covered, "changed_columns": int((seq != old).sum())}
    if how == "shift":
        note["shift"] = int(shift)
    return sim.replace(records=_set_sequence(sim, label, new), planted=sim.planted + [note])


def consensus(records: Sequence[tuple[str, str]], letters: str, rng: int | np.random.Generator | None = None) -> str:
    """The column-wise majority residue of an alignment (gaps ignored).

    Ties are broken at random (seeded), so no letter is favoured; a column
    with no residue at all gets a random letter.

    Examples
    --------
    >>> consensus([("a", "ACG-"), ("b", "ACT-"), ("c", "TCT-")], "ACGT", rng=0)[:3]
    'ACT'
    """
    rng = np.random.default_rng(rng)
    codes = np.frombuffer(letters.encode("ascii"), dtype=np.uint8)
    X = np.array([np.frombuffer(s.encode("ascii"), dtype=np.uint8) for _, s in records])
    counts = (X[None, :, :] == codes[:, None, None]).sum(axis=1).astype(float)   # (letters, columns)
    # A uniform draw below 1 added to integer counts breaks ties only.
    pick = np.argmax(counts + rng.random(counts.shape), axis=0)
    return codes[pick].tobytes().decode("ascii")


def plant_contaminant(sim: Simulation, label: str | None = None, distance: float = 0.5,
                      rng: int | np.random.Generator | None = None) -> Simulation:
    """Replace one row by a contaminant: the alignment's consensus mutated along a long branch.

    The column-wise consensus (:func:`consensus`) sits near the centre of the
    tree; each of its residues then evolves ``distance`` expected
    substitutions per site (times the column's rate) under the simulation's
    model. The result is a sequence of an organism that branched off near
    the root and evolved far on its own, as a contaminating sample or a
    wrongly labelled sequence would: related to every taxon about equally,
    to none closely. The row keeps its own gap pattern, so gap statistics do
    not give it away. The true tree keeps the taxon where it was: the row
    is wrong data for that taxon.

    Parameters
    ----------
    label : str, optional
        The replaced taxon (default: a random taxon not used by an earlier plant).
    distance : float
        Branch length from the consensus, expected substitutions per site (> 0).

    Examples
    --------
    >>> sim = plant_contaminant(simulate(8, 300, seed=3), "t05", 0.5, rng=0)
    >>> note = sim.planted[-1]
    >>> note["kind"], note["labels"], note["p_to_original"] > 0.2
    ('contaminant', ['t05'], True)
    """
    rng = np.random.default_rng(rng)
    distance = float(distance)
    if not (0 < distance <= MAX_SATURATE):
        raise InputError(f"contaminant distance must be above 0 and at most {MAX_SATURATE:g} (got {distance})")
    if label is None:
        free = _free_labels(sim)
        label = free[int(rng.integers(len(free)))]
    m = sim.model
    cons = consensus(sim.records, m.letters, rng)
    letters = np.frombuffer(m.letters.encode("ascii"), dtype=np.uint8)
    lookup = np.full(256, -1, dtype=np.int64)
    lookup[letters] = np.arange(letters.size)
    old = sim.sequence(label)
    seq = np.frombuffer(old.encode("ascii"), dtype=np.uint8).copy()
    res = np.flatnonzero(seq != ord("-"))
    c = np.frombuffer(cons.encode("ascii"), dtype=np.uint8)
    with _one_blas_thread():
        rows = m.transition_rows(distance, sim.site_rates[res], lookup[c[res]])
    seq[res] = letters[_draw(rows, rng)]
    new = seq.tobytes().decode("ascii")
    note = {"kind": "contaminant", "labels": [label], "distance": distance,
            "p_to_consensus": round(_p_distance(new, cons)[0], 6),
            "p_to_original": round(_p_distance(new, old)[0], 6)}
    return sim.replace(records=_set_sequence(sim, label, new), planted=sim.planted + [note])


def _p_distance(a: str, b: str) -> tuple[float, int]:
    x = np.frombuffer(a.encode("ascii"), dtype=np.uint8)
    y = np.frombuffer(b.encode("ascii"), dtype=np.uint8)
    both = (x != ord("-")) & (y != ord("-"))
    n = int(both.sum())
    return (float((x[both] != y[both]).sum()) / n if n else float("nan")), n


# ----------------------------------------------------------------- writers
def format_fasta(records: Sequence[tuple[str, str]], width: int = 60) -> str:
    """FASTA text: ``>id`` then the sequence in lines of ``width`` letters.

    Examples
    --------
    >>> format_fasta([("a", "ACGT"), ("b", "AC-T")], width=3)
    '>a\\nACG\\nT\\n>b\\nAC-\\nT\\n'
    """
    out = []
    for label, seq in records:
        out.append(f">{label}\n")
        out.extend(seq[i:i + width] + "\n" for i in range(0, len(seq), width))
    return "".join(out)


def format_stockholm(records: Sequence[tuple[str, str]], name: str = "seqdist_demo",
                     insert_above: float = 0.5) -> str:
    """Stockholm 1.0 text with insert columns marked the usual way.

    Columns where more than ``insert_above`` of the rows hold a gap are
    written as insert columns: residues in lower case and gaps as ``.``; the
    other (match) columns keep upper-case residues and ``-`` gaps. A
    ``#=GC RF`` line marks match columns ``x`` and insert columns ``.``.
    Columns that are gaps in every row are dropped.

    Examples
    --------
    >>> print(format_stockholm([("a", "AC-D"), ("b", "A--D"), ("c", "AC-E")], name="x"), end="")
    # STOCKHOLM 1.0
    #=GF ID x
    a       ACD
    b       A-D
    c       ACE
    #=GC RF xxx
    //
    """
    labels = [r[0] for r in records]
    arr = np.array([np.frombuffer(s.encode("ascii"), dtype=np.uint8) for _, s in records])
    gap = arr == ord("-")
    arr = arr[:, ~gap.all(axis=0)]
    gap = arr == ord("-")
    insert = gap.mean(axis=0) > insert_above
    out = arr.copy()
    ins = np.broadcast_to(insert, out.shape)
    low = ins & ~gap
    out[low] = np.frombuffer(bytes(out[low]).lower(), dtype=np.uint8)
    out[ins & gap] = ord(".")
    pad = max(len("#=GC RF"), max(len(x) for x in labels)) + 1
    lines = ["# STOCKHOLM 1.0", f"#=GF ID {name}"]
    lines += [f"{lab.ljust(pad)}{row.tobytes().decode('ascii')}" for lab, row in zip(labels, out)]
    lines.append("#=GC RF".ljust(pad) + "".join("." if i else "x" for i in insert))
    lines.append("//")
    return "\n".join(lines) + "\n"


def summary(sim: Simulation, seed: int | None = None) -> dict:
    """A JSON-ready description: options, tree length, gap fraction and what was planted."""
    L = len(sim.records[0][1])
    gaps = sum(s.count("-") for _, s in sim.records)
    out = {"seed": seed}
    out.update(sim.params)
    out["tree_length"] = round(sim.tree.total_length(), 6)
    out["gap_fraction"] = round(gaps / (L * len(sim.records)), 6)
    out["planted"] = sim.planted
    return out


__all__ = ["Model", "TrueTree", "Simulation", "hky85", "k80", "protein_poisson", "make_model", "gamma_rates",
           "random_tree", "simulate", "plant_gappy", "plant_chimera", "plant_saturated_pair", "plant_misread",
           "plant_contaminant", "consensus",
           "format_fasta", "format_stockholm", "summary", "check_size", "DNA_LETTERS", "PROTEIN_LETTERS",
           "MAX_TAXA", "MAX_LENGTH", "MAX_CELLS", "MAX_INDEL_WORK", "PARAMETERS", "RENAMED", "RenamedWarning"]
