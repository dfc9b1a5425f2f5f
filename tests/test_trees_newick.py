"""Newick writer and reader: odd labels, precision, other readers, errors."""

from __future__ import annotations

import io

import numpy as np
import pytest

from seqdist import DistanceMatrix, InputError
from seqdist.trees import Node, Tree, build_tree, read_newick, write_newick

ODD = ["plain", "with space", "it's", "par(en)s", "co:lon", "semi;colon", "com,ma", "sq[uare]", "under_score",
       "''", "tab\there", "ünïcode"]


def odd_tree():
    rng = np.random.default_rng(1)
    n = len(ODD)
    X = rng.uniform(0, 1, (n, 2))
    D = np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1))
    return build_tree(DistanceMatrix.from_array(D, ODD), "nj")


def test_round_trip_odd_labels_and_exact_lengths():
    t = odd_tree()
    text = write_newick(t)
    back = read_newick(text)
    assert back.labels() == t.labels()
    assert [n.length for n in back.branches()] == [n.length for n in t.branches()]  # repr: exact
    assert write_newick(back) == text


def test_biopython_reads_our_labels():
    from Bio import Phylo

    t = odd_tree()
    bt = Phylo.read(io.StringIO(write_newick(t)), "newick")
    names = sorted(c.name for c in bt.get_terminals())
    # Biopython 1.8x reads a label made only of quotes () as '' (its own
    # limitation; dendropy and our reader get it right); every other odd label survives.
    assert [x for x in names if x.strip("'")] == sorted(x for x in ODD if x.strip("'"))


def test_dendropy_reads_our_labels():
    # dendropy follows the Newick standard strictly (an unquoted underscore is
    # a blank), so it is a good check of our quoting.
    import dendropy

    dt = dendropy.Tree.get(data=write_newick(odd_tree()), schema="newick")
    assert sorted(x.label for x in dt.taxon_namespace) == sorted(ODD)


def test_precision_at_least_ten_digits():
    x = 0.12345678901234567
    t = Tree(Node(children=[Node("a", x), Node("b", 1 / 3), Node("c", 1e-7)]))
    text = write_newick(t)
    assert "0.12345678901234566" in text or "0.12345678901234568" in text or repr(x) in text
    back = read_newick(text)
    assert [n.length for n in back.leaves()] == [x, 1 / 3, 1e-7]


def test_negative_zero_written_as_zero_and_negatives_kept():
    t = Tree(Node(children=[Node("a", -0.0), Node("b", -0.5), Node("c", 1.0)]))
    assert write_newick(t) == "(a:0.0,b:-0.5,c:1.0);\n"


def test_reader_features():
    t = read_newick("[&U] ( 'a b':1 , [a comment] (c,d)90:0.5, e_f:2e-3 )root;")
    assert t.labels() == ["a b", "c", "d", "e_f"]  # bare underscores kept as written
    inner = t.root.children[1]
    assert inner.name == "90" and inner.length == 0.5 and t.root.name == "root" and not t.rooted
    assert read_newick("((a,b),(c,d));").rooted
    assert not read_newick("(a,b,(c,d));").rooted


def test_deep_caterpillar_no_recursion_limit():
    n = 5000
    text = "(" * (n - 1) + "t0" + "".join(f",t{k}:1)" for k in range(1, n - 1)) + f",t{n - 1});"
    t = read_newick(text)
    assert t.n_leaves == n
    assert read_newick(write_newick(t)).n_leaves == n


@pytest.mark.parametrize("text, needle", [
    ("((a,b),c;", "unclosed '('"),
    ("(a,b));", "unbalanced ')'"),
    ("(a,b,c)", "does not end with ';'"),
    ("(a:x,b,c);", "branch length 'x' is not a number"),
    ("(a:,b,c);", "':' without a branch length"),
    ("(a,,c);", "a leaf has no label"),
    ("", "no tree found"),
    ("(a,b [open", "unclosed comment"),
    ("(a b,c);", "unexpected label 'b'"),
])
def test_reader_errors(text, needle):
    with pytest.raises(InputError, match=needle.replace("(", r"\(").replace(")", r"\)")):
        read_newick(text, source="t.nwk")


def test_to_phylo_round_trip():
    t = odd_tree()
    back = Tree.from_phylo(t.to_phylo())
    assert write_newick(back) == write_newick(t)
