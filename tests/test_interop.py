"""seqdist with the scientific Python stack (issue 18, "Python interop").

The checks compare seqdist's conversions with the outside libraries' own view
of the same data: numpy's ``__array__`` protocol (numpy 2 documentation,
"The __array__() method" and ``ndarray.__array__``: ``copy=None`` copies only
when needed, ``copy=True`` always, ``copy=False`` never, raising ValueError),
scipy's condensed form and average linkage, scikit-learn's precomputed
metric, Biopython's distance matrix, alignment, tree builders and trees, and
dendropy's trees, Robinson-Foulds distance and patristic distances. UPGMA is
average linkage (Sokal & Michener 1958); NJ recovers a tree exactly from its
own path lengths (Saitou & Nei 1987; Gascuel 1997, consistency of NJ).
"""

from __future__ import annotations

import doctest
import io
import os
import re
import subprocess
import sys

import numpy as np
import pytest

from seqdist.core import console
from seqdist.core.errors import DataWarning, InputError, SeqdistWarning
from seqdist.core.matrix import DistanceMatrix
from seqdist.core.tree import Node, Tree
from seqdist.io.alignment import Alignment, read_alignment
from seqdist.io.interop import (
    from_biopython_alignment,
    from_biopython_matrix,
    from_dendropy,
    from_phylo,
    to_biopython_alignment,
    to_biopython_matrix,
    to_dendropy,
    to_phylo,
)
from seqdist.io.newick import read_newick
from seqdist.trees.build import build_tree

from conftest import ROOT


# ------------------------------------------------------------------ helpers
def random_matrix(n: int, seed: int) -> DistanceMatrix:
    rng = np.random.default_rng(seed)
    a = rng.uniform(0.1, 1.0, (n, n))
    a = a + a.T
    np.fill_diagonal(a, 0.0)
    return DistanceMatrix.from_array(a, [f"s{i}" for i in range(n)])


def random_tree(n: int, seed: int, clock: bool = False) -> Tree:
    """A random binary tree on s0..s{n-1}; with ``clock`` every leaf is at the same depth (ultrametric)."""
    rng = np.random.default_rng(seed)
    nodes = [(Node(f"s{i}"), 0.0) for i in range(n)]  # (node, height)
    height = 0.0
    while len(nodes) > 1:
        i, j = sorted(rng.choice(len(nodes), 2, replace=False))
        (a, ha), (b, hb) = nodes[i], nodes[j]
        height += rng.uniform(0.05, 0.3)  # distinct merge heights: no ties
        parent = Node(children=[])
        for child, h in ((a, ha), (b, hb)):
            child.length = (height - h) if clock else rng.uniform(0.05, 0.5)
            parent.add_child(child)
        nodes = [x for k, x in enumerate(nodes) if k not in (i, j)] + [(parent, height)]
    return Tree(nodes[0][0], rooted=clock)


def tree_matrix(tree: Tree) -> DistanceMatrix:
    labels = sorted(tree.labels(), key=lambda s: int(s[1:]))
    return DistanceMatrix.from_array(tree.path_lengths(labels), labels)


def clusters_seqdist(tree: Tree) -> set:
    """Leaf sets below each internal node (rooted clusters), computed in the test."""
    out, below = set(), {}
    for node in tree.postorder():
        leaves = frozenset([node.name]) if node.is_leaf else frozenset().union(*(below[id(c)] for c in node.children))
        below[id(node)] = leaves
        if not node.is_leaf:
            out.add(leaves)
    return out


def clusters_phylo(tree) -> set:
    return {frozenset(t.name for t in c.get_terminals()) for c in tree.find_clades() if not c.is_terminal()}


def unrooted_splits(clusters: set, taxa: set) -> set:
    """Non-trivial splits, each as the side without the smallest label."""
    ref = min(taxa)
    out = set()
    for c in clusters:
        side = c if ref not in c else frozenset(taxa - c)
        if 1 < len(side) < len(taxa) - 1:
            out.add(side)
    return out


# ------------------------------------------------------------------ numpy's array protocol
def test_asarray_gives_the_read_only_values_without_a_copy():
    # numpy 2 "The __array__() method": np.asarray passes copy=None (copy only when needed).
    # Before this issue np.asarray(dm) raised TypeError.
    dm = random_matrix(5, 1)
    a = np.asarray(dm)
    assert a is dm.values and a.dtype == np.float64 and a.shape == (5, 5)
    assert not a.flags.writeable  # the matrix stays immutable
    with pytest.raises(ValueError):
        a[0, 1] = 9.0
    assert np.array(dm, copy=False) is dm.values  # copy=False: never a copy


def test_array_copies_and_converts_as_numpy_documents():
    dm = random_matrix(4, 2)
    b = np.array(dm)  # copy=True: a new, writable array
    assert b.flags.writeable and not np.shares_memory(b, dm.values)
    b[0, 1] = 99.0
    assert dm.values[0, 1] != 99.0
    f = np.asarray(dm, dtype=np.float32)  # a dtype change needs a copy, allowed under copy=None
    assert f.dtype == np.float32 and np.allclose(f, dm.values)
    with pytest.raises(ValueError, match="copy=False"):
        np.array(dm, dtype=np.float32, copy=False)
    # what an array-like must allow: ufuncs, reductions, comparisons with arrays (common practice)
    assert np.allclose(np.exp(dm), np.exp(dm.values))
    assert float(np.max(dm)) == float(dm.values.max())
    assert (dm == dm.values).all()


def test_a_matrix_passed_as_values_keeps_its_labels():
    # with __array__, from_array(dm) reads the values; the labels must not silently become t0..
    dm = random_matrix(3, 8)
    assert DistanceMatrix.from_array(dm).labels == dm.labels
    assert DistanceMatrix.from_array(dm, ["x", "y", "z"]).labels == ("x", "y", "z")


def test_to_numpy_and_labels():
    dm = random_matrix(4, 3)
    a = dm.to_numpy()
    assert a.flags.writeable and np.array_equal(a, dm.values) and not np.shares_memory(a, dm.values)
    v = dm.to_numpy(copy=False)
    assert v is dm.values
    assert dm.to_numpy(dtype=np.float32).dtype == np.float32
    assert dm.labels == ("s0", "s1", "s2", "s3")
    nan = dm.with_values(np.where(np.eye(4)[::-1].astype(bool) & ~np.eye(4, dtype=bool), np.nan, dm.values))
    assert np.isnan(nan.to_numpy()).sum() == 4  # missing entries are NaN


def test_equality_is_identity_and_equals_compares_contents():
    # the documented decision (DistanceMatrix docstring): == between matrices is identity (hashable),
    # equals() compares labels, order and values
    a = random_matrix(4, 4)
    b = DistanceMatrix.from_array(np.array(a), a.labels)
    assert a == a and a != b and a.equals(b)
    assert len({a, b}) == 2  # still hashable
    c = a.subset(["s1", "s0", "s2", "s3"])
    assert not a.equals(c)  # same values in another order are another matrix
    assert np.allclose(a, b)


def test_pandas_aliases_round_trip():
    pd = pytest.importorskip("pandas")
    dm = random_matrix(5, 5)
    f = dm.to_pandas()
    assert isinstance(f, pd.DataFrame) and list(f.index) == list(dm.labels) == list(f.columns)
    assert f.equals(dm.to_frame())
    assert DistanceMatrix.from_pandas(f).equals(dm)
    with pytest.raises(InputError, match="row and column labels differ"):
        DistanceMatrix.from_pandas(f[list(reversed(f.columns))])


# ------------------------------------------------------------------ scipy
def test_condensed_is_scipys_form():
    from scipy.spatial.distance import squareform

    dm = random_matrix(7, 6)
    v = dm.condensed()
    assert np.array_equal(v, squareform(np.array(dm), checks=True))  # scipy's own condensed vector
    assert np.array_equal(squareform(v), dm.values)
    assert DistanceMatrix.from_condensed(v, dm.labels).equals(dm)


def test_condensed_refuses_missing_entries_clearly():
    dm = random_matrix(4, 7)
    a = np.array(dm)
    a[1, 3] = a[3, 1] = np.nan
    gappy = dm.with_values(a)
    with pytest.raises(InputError, match=r"1 missing entries \(first: \(s1, s3\)\).*fill them"):
        gappy.condensed()


@pytest.mark.parametrize("seed", range(4))
def test_scipy_average_linkage_equals_upgma(seed):
    # UPGMA is average linkage (Sokal & Michener 1958); scipy.cluster.hierarchy is the outside reference
    from scipy.cluster.hierarchy import linkage, to_tree

    dm = random_matrix(9, 10 + seed)
    Z = linkage(dm.condensed(), method="average")
    root = to_tree(Z)
    scipy_clusters = {frozenset(dm.labels[i] for i in node.pre_order()) for node in _scipy_nodes(root)
                      if not node.is_leaf()}
    tree = build_tree(dm, "upgma")
    assert clusters_seqdist(tree) == scipy_clusters
    # the root height too: half the last merge distance
    heights = {id(n): 0.0 for n in tree.leaves()}
    for n in tree.postorder():
        if not n.is_leaf:
            c = n.children[0]
            heights[id(n)] = heights[id(c)] + c.length
    assert heights[id(tree.root)] == pytest.approx(Z[-1, 2] / 2, rel=1e-12)


def _scipy_nodes(root):
    stack = [root]
    while stack:
        node = stack.pop()
        yield node
        if not node.is_leaf():
            stack.extend([node.get_left(), node.get_right()])


# ------------------------------------------------------------------ scikit-learn on a repaired matrix
def test_clustering_a_repaired_matrix_with_scikit_learn():
    sklearn_cluster = pytest.importorskip("sklearn.cluster")
    from seqdist.audit.report import audit
    from seqdist.repair import repair

    # two groups of five; one mismeasured entry breaks many triangles
    rng = np.random.default_rng(3)
    group = np.repeat([0, 1], 5)
    a = np.where(group[:, None] == group[None, :], 0.1, 0.8) + rng.uniform(0, 0.02, (10, 10))
    a = (a + a.T) / 2
    np.fill_diagonal(a, 0.0)
    a[0, 1] = a[1, 0] = 2.5
    dm = DistanceMatrix.from_array(a, [f"g{g}_{i}" for i, g in enumerate(group)])
    assert audit(dm).violated > 0
    fixed = repair(dm, "fewest").matrix
    assert audit(fixed).violated == 0
    X = np.asarray(fixed)  # the read-only array itself: scikit-learn accepts it
    agg = sklearn_cluster.AgglomerativeClustering(n_clusters=2, metric="precomputed", linkage="average").fit(X)
    db = sklearn_cluster.DBSCAN(eps=0.3, min_samples=2, metric="precomputed").fit(X)
    for found in (agg.labels_, db.labels_):
        # the planted groups, up to the naming of the clusters
        assert len(set(found)) == 2 and all((found == found[0]) == (group == group[0]))


# ------------------------------------------------------------------ Biopython
def test_biopython_distance_matrix_round_trip_and_its_own_view():
    dm = random_matrix(6, 20)
    bm = to_biopython_matrix(dm)
    assert bm.names == list(dm.labels)
    for i, a in enumerate(dm.labels):
        for j, b in enumerate(dm.labels):
            assert bm[a, b] == dm.values[i, j]  # Biopython's own lookup
    assert from_biopython_matrix(bm).equals(dm)


def test_biopython_matrix_refusals():
    from Bio.Phylo.TreeConstruction import DistanceMatrix as BioDM

    a = np.array(random_matrix(3, 21))
    a[0, 2] = a[2, 0] = np.nan
    with pytest.raises(InputError, match=r"missing entries \(first: \(s0, s2\)\).*Biopython"):
        to_biopython_matrix(DistanceMatrix.from_array(a, ["s0", "s1", "s2"]))
    bad = BioDM(["a", "b", "c"], [[0], [1, 0], [2, 3, 0]])
    bad.matrix[2][0] = -1.0
    with pytest.raises(InputError, match=r"Biopython DistanceMatrix: negative entry -1.0 at \(a, c\)"):
        from_biopython_matrix(bad)
    bad = BioDM(["a", "b"], [[0], [1, 0]])
    bad.names[1] = "a"  # Biopython refuses duplicates at construction, not afterwards
    with pytest.raises(InputError, match="duplicate label 'a'"):
        from_biopython_matrix(bad)


@pytest.mark.parametrize("seed", range(3))
def test_biopython_upgma_and_nj_agree_with_seqdist(seed):
    # Biopython's DistanceTreeConstructor is the outside reference. Its "upgma" merges the two
    # clusters' rows with equal weights (WPGMA, read in Bio/Phylo/TreeConstruction.py); on clock-like
    # (ultrametric) distances every average-linkage variant gives the same tree, so compare there.
    from Bio.Phylo.TreeConstruction import DistanceTreeConstructor

    clock = tree_matrix(random_tree(8, 30 + seed, clock=True))
    bio = DistanceTreeConstructor().upgma(to_biopython_matrix(clock))
    ours = build_tree(clock, "upgma")
    assert clusters_phylo(bio) == clusters_seqdist(ours) == clusters_seqdist(random_tree(8, 30 + seed, True))
    # NJ on an additive (tree) matrix: both recover the tree's unrooted splits (Saitou & Nei 1987)
    true = random_tree(9, 40 + seed)
    dm = tree_matrix(true)
    taxa = set(dm.labels)
    bio_nj = DistanceTreeConstructor().nj(to_biopython_matrix(dm))
    want = unrooted_splits(clusters_seqdist(true), taxa)
    assert unrooted_splits(clusters_phylo(bio_nj), taxa) == want
    assert unrooted_splits(clusters_seqdist(build_tree(dm, "nj")), taxa) == want


def test_biopython_alignment_round_trip_and_its_own_reading(tmp_path):
    from Bio import AlignIO

    path = tmp_path / "a.fasta"
    path.write_text(">x1 first\nACGTRYacgu-N\n>x_2\nACGTTTACG-AA\n>x.3\nAC--TTACGTAC\n")
    ours = read_alignment(str(path))
    msa = to_biopython_alignment(ours)
    theirs = AlignIO.read(str(path), "fasta")  # Biopython's own reading of the file
    assert [r.id for r in msa] == [r.id for r in theirs] == list(ours.labels)
    # the same letters where seqdist compares them; gaps and N come back as "-", lower case as upper
    assert [str(r.seq) for r in msa] == ["ACGTRYACGT--", "ACGTTTACG-AA", "AC--TTACGTAC"]
    back = from_biopython_alignment(msa)
    assert back.labels == ours.labels and back.alphabet == ours.alphabet
    assert np.array_equal(back.codes, ours.codes)
    assert np.array_equal(from_biopython_alignment(theirs).codes, ours.codes)
    assert [str(r.seq) for r in to_biopython_alignment(ours, missing="N")][0] == "ACGTRYACGTNN"
    prot = Alignment.from_sequences(["p", "q"], ["MKVBZX-", "MRVLLE*"])
    assert [str(r.seq) for r in to_biopython_alignment(prot)] == ["MKVBZ--", "MRVLLE-"]


def test_biopython_alignment_refusals():
    from Bio.Align import MultipleSeqAlignment
    from Bio.Seq import Seq
    from Bio.SeqRecord import SeqRecord

    dup = MultipleSeqAlignment([SeqRecord(Seq("ACGT"), id="a"), SeqRecord(Seq("ACGA"), id="a")])
    with pytest.raises(InputError, match="Biopython alignment"):
        from_biopython_alignment(dup)
    with pytest.raises(InputError, match="record 2 has no id"):
        from_biopython_alignment([SeqRecord(Seq("ACGT"), id="a"), SeqRecord(Seq("ACGA"))])
    with pytest.raises(InputError, match="no sequences"):
        from_biopython_alignment([])
    with pytest.raises(InputError, match="one character"):
        to_biopython_alignment(Alignment.from_sequences(["a"], ["ACGT"]), missing="--")


def test_phylo_trees_round_trip_and_biopythons_path_lengths():
    tree = random_tree(7, 50)
    ph = to_phylo(tree)
    labels = tree.labels()
    P = tree.path_lengths(labels)
    for i, a in enumerate(labels):
        for j, b in enumerate(labels[:i]):
            assert ph.distance(a, b) == pytest.approx(P[i, j], rel=1e-12)  # Biopython's own path length
    back = from_phylo(ph)
    assert back.to_newick() == tree.to_newick() and back.rooted == tree.rooted


# ------------------------------------------------------------------ dendropy
def test_dendropy_round_trip_with_awkward_labels():
    pytest.importorskip("dendropy")
    tree = read_newick(f"((a_1:{1 / 3},'b c':{0.1 + 0.2}):5e-17,'it''s':3,d:0.1);")
    d = to_dendropy(tree)
    assert sorted(t.label for t in d.taxon_namespace) == sorted(["a_1", "b c", "it's", "d"])
    assert d.is_rooted is False
    back = from_dendropy(d)
    assert back.to_newick() == tree.to_newick()  # labels and every float read back exactly
    rooted = build_tree(tree_matrix(random_tree(6, 51, clock=True)), "upgma")
    dr = to_dendropy(rooted)
    assert dr.is_rooted and from_dendropy(dr).rooted


def test_dendropy_agrees_on_rf_and_path_lengths():
    dendropy = pytest.importorskip("dendropy")
    from dendropy.calculate import treecompare

    from seqdist.trees.compare import robinson_foulds

    t1, t2 = random_tree(10, 60), random_tree(10, 61)
    ns = dendropy.TaxonNamespace()
    d1, d2 = to_dendropy(t1, taxon_namespace=ns), to_dendropy(t2, taxon_namespace=ns)
    assert len(ns) == 10  # one shared namespace
    rf = treecompare.symmetric_difference(d1, d2)  # dendropy's own Robinson-Foulds count
    assert rf == robinson_foulds(t1, t2) > 0
    pdm = d1.phylogenetic_distance_matrix()
    labels = t1.labels()
    P = t1.path_lengths(labels)
    by_label = {t.label: t for t in ns}
    for i, a in enumerate(labels):
        for j, b in enumerate(labels[:i]):
            assert pdm.patristic_distance(by_label[a], by_label[b]) == pytest.approx(P[i, j], rel=1e-12)


# ------------------------------------------------------------------ progress and warnings
@pytest.fixture
def console_state():
    yield
    console.set_progress(None)
    console.set_quiet(False)


def _draw(bar_stream, monkeypatch) -> str:
    monkeypatch.setattr(sys, "stderr", bar_stream)
    with console.Progress("work", total=4, min_seconds=0.0, log_every=0.0) as bar:
        for _ in range(4):
            bar.update(1)
    return bar_stream.getvalue()


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_is_silent_away_from_a_terminal(monkeypatch, console_state):
    console.set_progress(None)
    assert _draw(io.StringIO(), monkeypatch) == ""  # a pipe, a log, a notebook: nothing
    assert "\r" in _draw(_Terminal(), monkeypatch)  # a terminal: the bar is drawn


def test_progress_can_be_forced_on_or_off(monkeypatch, console_state):
    import seqdist

    seqdist.set_progress(True)
    out = _draw(io.StringIO(), monkeypatch)
    assert "seqdist: work [" in out and "\r" not in out  # whole lines for a log
    seqdist.set_progress(False)
    assert _draw(_Terminal(), monkeypatch) == ""
    seqdist.set_progress(True)
    console.set_quiet(True)  # --quiet wins
    assert _draw(io.StringIO(), monkeypatch) == ""
    with pytest.raises(TypeError):
        seqdist.set_progress("off")


def test_library_warnings_go_through_the_warnings_module(capfd):
    from seqdist.models.distances import pairwise_distances

    aln = Alignment.from_sequences(["a", "b", "c"], ["AAAAAAAA", "CCCCCCCC", "AAAAAAAC"], alphabet="dna")
    with pytest.warns(DataWarning, match="undefined") as seen:
        res = pairwise_distances(aln, "jc69")  # a and b differ at every site: jc69 is undefined
    assert issubclass(seen[0].category, SeqdistWarning) and res.undefined
    assert capfd.readouterr().err == ""  # nothing printed by the library itself


# ------------------------------------------------------------------ python -m seqdist
def test_python_m_seqdist_runs_the_command_line():
    env = {**os.environ, "PYTHONPATH": ROOT}
    p = subprocess.run([sys.executable, "-m", "seqdist", "--version"], capture_output=True, text=True, env=env)
    assert p.returncode == 0 and p.stdout.startswith("seqdist "), p.stderr
    # importing the module (documentation tools, test walkers) must not run the command line
    p = subprocess.run([sys.executable, "-c", "import seqdist.__main__"], capture_output=True, text=True, env=env)
    assert p.returncode == 0 and p.stdout == p.stderr == ""


# ------------------------------------------------------------------ docs/python.md runs as written
def test_python_page_examples_run():
    pytest.importorskip("dendropy")
    pytest.importorskip("sklearn")
    path = os.path.join(ROOT, "docs", "python.md")
    parser = doctest.DocTestParser()
    with open(path, encoding="utf-8") as fh:
        # the ```pycon blocks, in order, as one session (the fences are not part of the expected output)
        blocks = re.findall(r"^```pycon\n(.*?)^```", fh.read(), flags=re.M | re.S)
    test = parser.get_doctest("\n".join(blocks), {}, "docs/python.md", path, 0)
    assert len(test.examples) >= 20
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    old = os.getcwd()
    try:
        os.chdir(ROOT)  # the page reads the demo data by their paths from the repository root
        runner.run(test)
    finally:
        os.chdir(old)
        console.set_progress(None)
    result = runner.summarize(verbose=False)
    assert result.failed == 0, f"{result.failed} of {result.attempted} examples on docs/python.md failed"
