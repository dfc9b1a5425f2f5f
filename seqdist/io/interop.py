"""Conversions between seqdist's types and those of Biopython and dendropy.

seqdist's own types already speak numpy, pandas and scipy
(:class:`~seqdist.core.matrix.DistanceMatrix`: ``np.asarray(dm)``,
:meth:`~seqdist.core.matrix.DistanceMatrix.to_pandas`,
:meth:`~seqdist.core.matrix.DistanceMatrix.condensed`; trees:
:meth:`~seqdist.core.tree.Tree.to_phylo`). This module adds the types of
two libraries whose users exchange matrices, alignments and trees:

* Biopython: the lower-triangular ``Bio.Phylo.TreeConstruction.DistanceMatrix``
  (:func:`to_biopython_matrix`, :func:`from_biopython_matrix`),
  ``Bio.Align.MultipleSeqAlignment`` (:func:`to_biopython_alignment`,
  :func:`from_biopython_alignment`) and ``Bio.Phylo`` trees
  (:func:`to_phylo`, :func:`from_phylo`);
* dendropy trees (:func:`to_dendropy`, :func:`from_dendropy`), through
  Newick text, with a shared ``TaxonNamespace`` when trees are compared.

Biopython and dendropy are imported inside the functions, so importing this
module costs nothing; dendropy is an optional dependency (in the ``test``
extra). Everything coming in is validated like a file (a bad value raises
:class:`~seqdist.core.errors.InputError` naming the label or pair).
docs/python.md shows every conversion at work.

Examples
--------
>>> dm = DistanceMatrix.from_array([[0, 1, 2], [1, 0, 3], [2, 3, 0]], ["a", "b", "c"])
>>> bm = to_biopython_matrix(dm)
>>> bm.names, bm["c", "a"], bm["a", "c"]
(['a', 'b', 'c'], 2.0, 2.0)
>>> from_biopython_matrix(bm).equals(dm)
True
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

from seqdist.core.errors import InputError
from seqdist.core.matrix import DistanceMatrix
from seqdist.core.tree import Tree, write_newick
from seqdist.io.alignment import DNA_AMBIGUITY, DNA_STATES, PROTEIN_AMBIGUITY, PROTEIN_STATES, Alignment
from seqdist.io.newick import read_newick

if TYPE_CHECKING:  # only for the annotations: the libraries are imported inside the functions
    import dendropy
    from Bio.Align import MultipleSeqAlignment
    from Bio.Phylo.BaseTree import Tree as PhyloTree
    from Bio.Phylo.TreeConstruction import DistanceMatrix as BioDistanceMatrix

__all__ = ["to_biopython_matrix", "from_biopython_matrix", "to_biopython_alignment", "from_biopython_alignment",
           "to_phylo", "from_phylo", "to_dendropy", "from_dendropy"]


# ----------------------------------------------------------------- distance matrices
def to_biopython_matrix(dm: DistanceMatrix) -> BioDistanceMatrix:
    """The matrix as Biopython's lower-triangular ``Bio.Phylo.TreeConstruction.DistanceMatrix``.

    Parameters
    ----------
    dm : DistanceMatrix
        A matrix without missing entries.

    Returns
    -------
    Bio.Phylo.TreeConstruction.DistanceMatrix
        ``names`` are the labels; row i of ``matrix`` holds the distances to
        taxa 0..i (the diagonal 0 last), as Biopython stores it. Its
        ``DistanceTreeConstructor`` builds trees from it.

    Raises
    ------
    InputError
        The matrix has missing entries: Biopython's type has no way to mark
        one, and its tree builders would treat NaN as a number. Fill them
        first (``seqdist.repair.repair``) or take a subset without them.

    Examples
    --------
    >>> dm = DistanceMatrix.from_array([[0, 1], [1, 0]], ["x", "y"])
    >>> to_biopython_matrix(dm)["x", "y"]
    1.0
    """
    from Bio.Phylo.TreeConstruction import DistanceMatrix as BioDistanceMatrix

    _refuse_missing(dm, "Biopython's DistanceMatrix")
    values = dm.values
    rows = [[float(x) for x in values[i, : i + 1]] for i in range(dm.n)]
    return BioDistanceMatrix(list(dm.labels), rows)


def from_biopython_matrix(matrix: BioDistanceMatrix, *, source: str | None = None) -> DistanceMatrix:
    """Build a :class:`DistanceMatrix` from Biopython's lower-triangular distance matrix.

    Parameters
    ----------
    matrix : Bio.Phylo.TreeConstruction.DistanceMatrix
        Any object with ``names`` and a lower-triangular ``matrix`` (row i
        holds i + 1 numbers, the diagonal last).
    source : str, optional
        Where it came from, for error messages (default "Biopython DistanceMatrix").

    Returns
    -------
    DistanceMatrix
        Validated like a file: non-negative, zero diagonal, unique printable
        labels. NaN (and None) entries become missing entries.

    Examples
    --------
    >>> from Bio.Phylo.TreeConstruction import DistanceMatrix as BioDM
    >>> from_biopython_matrix(BioDM(["p", "q"], [[0], [2.5, 0]]))["q", "p"]
    2.5
    """
    where = source or "Biopython DistanceMatrix"
    names = [str(x) for x in matrix.names]
    rows = matrix.matrix
    n = len(names)
    if len(rows) != n:
        raise InputError(f"{where}: {len(rows)} rows for {n} names")
    arr = np.full((n, n), np.nan)
    for i, row in enumerate(rows):
        if len(row) != i + 1:
            raise InputError(f"{where}: row {i + 1} ('{names[i]}') holds {len(row)} values; "
                             f"a lower-triangular row {i + 1} holds {i + 1}")
        try:
            vals = np.array([np.nan if x is None else x for x in row], dtype=np.float64)
        except (TypeError, ValueError):
            raise InputError(f"{where}: row {i + 1} ('{names[i]}') holds a value that is not a number") from None
        arr[i, : i + 1] = vals
        arr[: i + 1, i] = vals
    return DistanceMatrix.from_array(arr, names, source=where)


def _refuse_missing(dm: DistanceMatrix, target: str) -> None:
    if dm.has_missing:
        i, j = np.argwhere(np.isnan(dm.values))[0]
        a, b = dm.labels[min(i, j)], dm.labels[max(i, j)]
        raise InputError(f"the matrix has {dm.missing_count()} missing entries (first: ({a}, {b})), which "
                         f"{target} cannot hold: fill them first (seqdist.repair.repair fills them) or take a "
                         "subset without them")


# ----------------------------------------------------------------- alignments
def to_biopython_alignment(alignment: Alignment, *, missing: str = "-") -> MultipleSeqAlignment:
    """The alignment as Biopython's ``Bio.Align.MultipleSeqAlignment``.

    seqdist keeps one code per residue (see :mod:`seqdist.io.alignment`), so
    the sequences come back as seqdist reads them: upper case, ``U`` as
    ``T``, partial ambiguity codes kept, and every position that is never
    compared (gaps, ``N``, ``X``, ``?``...) written as ``missing``.

    Parameters
    ----------
    alignment : Alignment
    missing : str
        One character for the positions never compared (default ``-``).

    Returns
    -------
    Bio.Align.MultipleSeqAlignment
        One ``SeqRecord`` per sequence, ``id`` the record id, in order.

    Examples
    --------
    >>> aln = Alignment.from_sequences(["a", "b"], ["ACgu-", "ACRTN"], alphabet="dna")
    >>> [str(r.seq) for r in to_biopython_alignment(aln)]
    ['ACGT-', 'ACRT-']
    """
    from Bio.Align import MultipleSeqAlignment
    from Bio.Seq import Seq
    from Bio.SeqRecord import SeqRecord

    if not (isinstance(missing, str) and len(missing) == 1):
        raise InputError(f"missing must be one character, got {missing!r}")
    if alignment.alphabet == "dna":
        letters = DNA_STATES + "".join(DNA_AMBIGUITY)
    else:
        letters = PROTEIN_STATES + "".join(PROTEIN_AMBIGUITY)
    # one byte per code: a lookup table turns the (n, L) codes into text in one numpy step
    lut = np.full(256, ord(missing.encode("latin-1", "replace")[:1] or b"-"), dtype=np.uint8)
    lut[: len(letters)] = np.frombuffer(letters.encode("ascii"), dtype=np.uint8)
    text = lut[alignment.codes]
    records = [SeqRecord(Seq(text[i].tobytes().decode("latin-1")), id=label, description="")
               for i, label in enumerate(alignment.labels)]
    return MultipleSeqAlignment(records)


def from_biopython_alignment(alignment: MultipleSeqAlignment, alphabet: str = "auto", *,
                             source: str | None = None) -> Alignment:
    """Build a seqdist :class:`~seqdist.io.alignment.Alignment` from Biopython's alignment.

    Parameters
    ----------
    alignment : Bio.Align.MultipleSeqAlignment
        Or any iterable of ``SeqRecord``; each record's ``id`` becomes the label.
    alphabet : {"auto", "dna", "protein"}
        As in :func:`~seqdist.io.alignment.read_alignment`.
    source : str, optional
        Where it came from, for error messages (default "Biopython alignment").

    Returns
    -------
    Alignment
        Validated like a file (unique ids, equal lengths, allowed letters).

    Examples
    --------
    >>> from Bio.Align import MultipleSeqAlignment
    >>> from Bio.Seq import Seq
    >>> from Bio.SeqRecord import SeqRecord
    >>> msa = MultipleSeqAlignment([SeqRecord(Seq("ACGT"), id="a"), SeqRecord(Seq("AC-T"), id="b")])
    >>> from_biopython_alignment(msa).codes.tolist()
    [[0, 1, 2, 3], [0, 1, 255, 3]]
    """
    where = source or "Biopython alignment"
    labels, seqs = [], []
    for k, rec in enumerate(alignment):
        label = getattr(rec, "id", None)
        if label is None or str(label) == "" or str(label) == "<unknown id>":
            raise InputError(f"{where}: record {k + 1} has no id")
        labels.append(str(label))
        seqs.append(str(rec.seq))
    if not labels:
        raise InputError(f"{where}: no sequences")
    return Alignment.from_sequences(labels, seqs, alphabet=alphabet, source=where)


# ----------------------------------------------------------------- trees
def to_phylo(tree: Tree) -> PhyloTree:
    """The tree as a Biopython ``Bio.Phylo`` tree (the same as :meth:`Tree.to_phylo`).

    Examples
    --------
    >>> t = read_newick("((a:1,b:2):0.5,c:3);")
    >>> sorted(c.name for c in to_phylo(t).get_terminals())
    ['a', 'b', 'c']
    """
    return tree.to_phylo()


def from_phylo(tree: PhyloTree) -> Tree:
    """Build a seqdist tree from a Biopython ``Bio.Phylo`` tree (the same as :meth:`Tree.from_phylo`).

    Examples
    --------
    >>> from Bio import Phylo
    >>> from io import StringIO
    >>> from_phylo(Phylo.read(StringIO("((a:1,b:2):0.5,c:3);"), "newick")).labels()
    ['a', 'b', 'c']
    """
    return Tree.from_phylo(tree)


def to_dendropy(tree: Tree, taxon_namespace: dendropy.TaxonNamespace | None = None) -> dendropy.Tree:
    """The tree as a ``dendropy.Tree``, read from seqdist's Newick text.

    Parameters
    ----------
    tree : Tree
    taxon_namespace : dendropy.TaxonNamespace, optional
        The namespace its taxa join. Trees compared by dendropy (e.g.
        ``dendropy.calculate.treecompare.symmetric_difference``) must share
        one: pass the same namespace for each. Default: a new one.

    Returns
    -------
    dendropy.Tree
        Rooted when ``tree.rooted`` (UPGMA), unrooted otherwise; labels kept
        exactly (underscores are not turned into blanks), lengths as written
        (repr precision, so they read back to the same floats).

    Examples
    --------
    >>> d = to_dendropy(read_newick("((a_1:1,b:2):0.5,c:3);", rooted=False))
    >>> sorted(t.label for t in d.taxon_namespace), d.is_rooted
    (['a_1', 'b', 'c'], False)
    """
    import dendropy

    text = write_newick(tree)
    return dendropy.Tree.get(data=text, schema="newick", taxon_namespace=taxon_namespace,
                             rooting="force-rooted" if tree.rooted else "force-unrooted",
                             preserve_underscores=True)


def from_dendropy(tree: dendropy.Tree, *, source: str | None = None) -> Tree:
    """Build a seqdist tree from a ``dendropy.Tree`` (through Newick text).

    Parameters
    ----------
    tree : dendropy.Tree
    source : str, optional
        Where it came from, for error messages (default "dendropy tree").

    Returns
    -------
    Tree
        Leaves named by their taxon labels, ``rooted`` as dendropy says
        (``is_rooted``; an undecided rooting is read by seqdist's rule: a
        root with two children is rooted).

    Examples
    --------
    >>> import dendropy
    >>> d = dendropy.Tree.get(data="[&U] ((a:1,b:2):0.5,c:3);", schema="newick")
    >>> t = from_dendropy(d)
    >>> t.labels(), t.rooted
    (['a', 'b', 'c'], False)
    """
    text = _dendropy_newick(tree)
    rooted = tree.is_rooted if tree.is_rooted is not None else None
    return read_newick(text, source=source or "dendropy tree", rooted=rooted)


def _dendropy_newick(tree: Any) -> str:
    # blanks kept (not turned into underscores) and underscores quoted: labels read back exactly;
    # no rooting comment, because the rooting is passed on separately
    return tree.as_string(schema="newick", suppress_rooting=True, preserve_spaces=True,
                          unquoted_underscores=False, suppress_internal_node_labels=False).strip()
