"""Tree files: NEXUS TREES blocks in and out, support on Newick trees, the command line.

The NEXUS format: Maddison, Swofford & Maddison 1997 ("NEXUS: an extensible file
format for systematic information", Syst. Biol. 46:590-621). Outside references:
dendropy's and Biopython's NEXUS writers (for our reader) and readers (for our writer).
"""

from __future__ import annotations

import io
import json

import numpy as np
import pytest

from seqdist import DistanceMatrix, InputError
from seqdist.io.newick import read_newick, read_newick_file
from seqdist.io.nexus_trees import read_nexus_trees, tree_format_for, write_nexus_trees
from seqdist.trees import build_tree

from conftest import write_tsv

LABELS = ["human", "chimp_1", "gor-illa", "it's", "o.rang", "gibbon 2", "macaque"]


def sample_tree(rooted=False):
    rng = np.random.default_rng(7)
    n = len(LABELS)
    X = rng.uniform(0, 1, (n, 2))
    D = np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1))
    t = build_tree(DistanceMatrix.from_array(D, LABELS), "upgma" if rooted else "nj")
    k = 0
    for node in t.preorder():
        if node.children and node is not t.root:
            k += 1
            node.support = [95.0, 50.0, 100.0, 33.3333, 80.0][k % 5]
    return t


def our_sides(tree):
    """{frozenset of the leaves below a non-root node: (branch length, support)} (rooted view)."""
    out, below = {}, {}
    for node in tree.postorder():
        side = frozenset([node.name]) if node.is_leaf else frozenset().union(*(below[id(c)] for c in node.children))
        below[id(node)] = side
        if node is not tree.root:
            out[side] = (node.length, node.support)
    return out


def unrooted_sides(side_map, labels):
    """The same keyed by the side without labels[0] (unrooted comparison)."""
    full = frozenset(labels)
    out = {}
    for side, v in side_map.items():
        key = full - side if labels[0] in side else side
        if key in out:  # the two branches below a bifurcating root are one branch unrooted
            length = (out[key][0] or 0.0) + (v[0] or 0.0)
            out[key] = (length, out[key][1] if out[key][1] is not None else v[1])
        else:
            out[key] = v
    return out


def dendropy_sides(dt):
    out = {}
    for nd in dt.postorder_node_iter():
        if nd.parent_node is None:
            continue
        below = frozenset(leaf.taxon.label for leaf in nd.leaf_iter())
        label = nd.label if not nd.is_leaf() else None
        out[below] = (nd.edge.length, float(label) if label is not None else None)
    return out


def phylo_sides(pt, strip_quotes=False):
    out = {}

    def name(c):
        return c.name.strip("'").replace("''", "'") if strip_quotes else c.name

    for clade in pt.find_clades(order="postorder"):
        if clade is pt.root:
            continue
        below = frozenset(name(c) for c in clade.get_terminals())
        out[below] = (clade.branch_length, clade.confidence if clade.clades else None)
    return out


# ----------------------------------------------------------------------------- reading others' NEXUS


@pytest.mark.parametrize("translate", [False, True])
@pytest.mark.parametrize("rooted", [False, True])
def test_reader_against_dendropy_writer(translate, rooted):
    # Outside reference: dendropy writes the NEXUS (TAXA block, TREES block, optional
    # TRANSLATE table, [&R]/[&U]); we must read the same labels, splits, lengths and support.
    import dendropy

    t = sample_tree(rooted)
    tns = dendropy.TaxonNamespace()
    dt = dendropy.Tree.get(data=("[&R] " if rooted else "[&U] ") + t.to_newick(), schema="newick",
                           taxon_namespace=tns, preserve_underscores=True)
    dl = dendropy.TreeList([dt, dt.clone(depth=1)], taxon_namespace=tns)
    text = dl.as_string(schema="nexus", translate_tree_taxa=translate)
    assert ("TRANSLATE" in text.upper()) == translate
    got = read_nexus_trees(text, source="d.nex")
    assert [name for name, _ in got] == ["1", "2"]
    back = got[0][1]
    assert back.rooted == rooted
    # dendropy writes the blank of 'gibbon 2' as a bare underscore (the standard's convention); we keep
    # bare underscores as written (docs/trees.md: ids carry underscores meant literally), so it reads
    # back as 'gibbon_2'. Every other label (quoted ones: 'chimp_1', 'it''s', 'gor-illa') is exact.
    assert sorted(back.labels()) == sorted(x.replace(" ", "_") for x in LABELS)

    def blank(sides):
        return {frozenset(x.replace(" ", "_") for x in k): v for k, v in sides.items()}

    assert our_sides(back) == blank(dendropy_sides(dt))
    assert read_nexus_trees(text, first_only=True)[0][1].to_newick() == back.to_newick()


def test_reader_against_biopython_writer():
    # Outside reference: Biopython (Bio.Phylo) writes NEXUS via Bio.Nexus. Its TAXLABELS are not
    # quoted, so the labels here hold no blanks or quotes (its limitation, not ours).
    from Bio import Phylo

    labels = ["human", "chimp_1", "gorilla", "orang", "gibbon", "macaque"]
    rng = np.random.default_rng(3)
    X = rng.uniform(0, 1, (6, 2))
    D = np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1))
    t = build_tree(DistanceMatrix.from_array(D, labels), "nj")
    pt = t.to_phylo()
    for c in pt.get_nonterminals():
        if c is not pt.root:
            c.confidence = 90.0
    buf = io.StringIO()
    Phylo.write(pt, buf, "nexus")
    (_, back), = read_nexus_trees(buf.getvalue(), source="b.nex")
    assert sorted(back.labels()) == sorted(labels)
    ours = our_sides(back)
    ref = phylo_sides(pt)
    assert set(ours) == set(ref)
    for side, (length, support) in ref.items():
        assert ours[side][0] == pytest.approx(length, rel=1e-5)  # Biopython writes 5-6 digits
        assert ours[side][1] == support


def test_reader_features_comments_translate_taxa_numbers(tmp_path):
    text = """#NEXUS
[a [nested] comment; with a semicolon]
BEGIN DATA; DIMENSIONS NTAX=3 NCHAR=2; MATRIX a AC b AG c AT; END;
begin taxa;
  dimensions ntax=4;
  taxlabels 'A one' b_two c d;
end;
BEGIN TREES;
  TRANSLATE 1 'A one', 2 b_two;
  TREE * first = [&U] ((1:0.5,2:0.25)[support]87:0.1,3:1,d:2);
  tree second = [&R] ((1,2),(3,4));
END;
"""
    trees = read_nexus_trees(text, source="t.nex")
    (n1, t1), (n2, t2) = trees
    assert (n1, n2) == ("first", "second")
    assert t1.labels() == ["A one", "b_two", "c", "d"]  # key, key, taxon number 3, taxon name
    assert t1.root.children[0].support == 87.0 and t1.root.children[0].length == 0.1 and not t1.rooted
    assert t2.labels() == ["A one", "b_two", "c", "d"] and t2.rooted  # 3 and 4 are taxon numbers
    p = tmp_path / "t.nex"
    p.write_text(text)
    assert read_newick_file(str(p)).to_newick() == t1.to_newick()  # the first tree by default


@pytest.mark.parametrize("text, needle", [
    ("#NEXUS\nBEGIN TAXA;\n TAXLABELS a b c;\nEND;\n", "no TREES block"),
    ("#NEXUS\nBEGIN TREES;\nEND;\n", "holds no TREE command"),
    ("#NEXUS\nBEGIN TREES;\n TRANSLATE 1 a, 2 b, 3 c;\n TREE t = (1,2,4);\nEND;\n",
     "line 4: tree 't': leaf '4' is neither a TRANSLATE key nor a taxon"),
    ("#NEXUS\nBEGIN TREES;\n TRANSLATE 1 a, 1 b;\n TREE t = (1,2,3);\nEND;\n",
     "line 3: TRANSLATE key '1' is given twice"),
    ("#NEXUS\nBEGIN TREES;\n TRANSLATE 1 a 2 b;\nEND;\n", "line 3: TRANSLATE entry '1 a 2 b' is not 'key label'"),
    ("#NEXUS\nBEGIN TAXA; TAXLABELS a b c; END;\nBEGIN TREES;\n TREE t = (a,b,x);\nEND;\n",
     "leaf 'x' is not a taxon of the TAXA block"),
    ("#NEXUS\nBEGIN TREES;\n\n TREE t = ((a,b),c;\nEND;\n", "line 4, tree 't': Newick: unclosed '('"),
    ("#NEXUS\nBEGIN TREES;\n TREE t (a,b,c);\nEND;\n", "line 3: TREE command is not 'TREE name = (...)'"),
    ("#NEXUS\nBEGIN TREES;\n TREE t = (a,b,c); [open\nEND;\n", "line 3: an unclosed comment"),
    ("#NEXUS\nBEGIN TREES;\n TREE 'bad = (a,b,c);\nEND;\n", "line 3: an unclosed quote"),
    ("#NEXUS\nBEGIN TREES;\n TREE t = (a,b,a);\nEND;\n", "leaf label 'a' occurs twice"),
    ("#NEXUS\nBEGIN TREES;\n TREE t = (a,b,c);\nEND\n", "does not end with ';'"),
    ("#NEXUS\nBEGIN TAXA;\n TAXLABELS a b c;\n", "the TAXA block opened at line 2 has no END"),
])
def test_reader_errors_name_file_and_line(text, needle):
    with pytest.raises(InputError) as e:
        read_nexus_trees(text, source="t.nex")
    msg = str(e.value)
    assert msg.startswith("t.nex: ") and needle in msg and "\n" not in msg, msg


# ----------------------------------------------------------------------------- our NEXUS read by others


@pytest.mark.parametrize("rooted", [False, True])
def test_writer_read_by_dendropy(rooted):
    # Outside reference: dendropy's strict NEXUS reader (quoting, TRANSLATE, [&R]/[&U]).
    import dendropy

    t = sample_tree(rooted)
    text = write_nexus_trees([("nj", t), ("again", t)])
    dl = dendropy.TreeList.get(data=text, schema="nexus")
    assert len(dl) == 2 and dl[0].label == "nj"
    dt = dl[0]
    assert sorted(x.label for x in dl.taxon_namespace) == sorted(LABELS)
    assert bool(dt.is_rooted) == rooted
    assert dendropy_sides(dt) == our_sides(t)  # same topology, labels, lengths (exact) and support


def test_writer_read_by_biopython():
    # Outside reference: Biopython's NEXUS reader (Bio.Phylo via Bio.Nexus). It keeps the quotes of
    # labels with blanks or quotes in the names (its limitation), so those are compared unquoted.
    from Bio import Phylo

    t = sample_tree()
    pt = Phylo.read(io.StringIO(write_nexus_trees([("nj", t)])), "nexus")
    assert sorted(c.name.strip("'").replace("''", "'") for c in pt.get_terminals()) == sorted(LABELS)
    ref = unrooted_sides(phylo_sides(pt, strip_quotes=True), sorted(LABELS))
    ours = unrooted_sides(our_sides(t), sorted(LABELS))
    assert set(ref) == set(ours)
    for side, (length, support) in ours.items():
        assert ref[side][0] == pytest.approx(length, rel=1e-12)
        assert ref[side][1] == support


def test_writer_round_trip_and_format_choice():
    t = sample_tree()
    text = write_nexus_trees(t)
    (name, back), = read_nexus_trees(text)
    assert name == "tree" and back.to_newick() == t.to_newick()  # lengths exact, support kept
    assert tree_format_for("x.nex") == tree_format_for("x.NXS") == "nexus"
    assert tree_format_for("x.tre") == tree_format_for("-") == "newick"
    assert tree_format_for("x.nex", "newick") == "newick"


# ----------------------------------------------------------------------------- support on Newick


def test_newick_support_read_and_written():
    # common practice: a support value is the number after an internal node's ')' (percent or fraction)
    t = read_newick("((a:1,b:1)95:0.5,(c:1,d:1)0.42:0.25,(e,f)clade_x:1);")
    a, c, e = t.root.children
    assert (a.support, c.support, e.support) == (95.0, 0.42, None) and e.name == "clade_x"
    assert t.to_newick() == "((a:1.0,b:1.0)95:0.5,(c:1.0,d:1.0)0.42:0.25,(e,f)'clade_x':1.0);\n"
    a.support = 200 / 3
    assert "66.6667:0.5" in t.to_newick()
    assert "66.6667" not in t.to_newick(support=False) and t.copy().root.children[0].support == 200 / 3
    # Biopython reads our support as the clade's confidence
    from Bio import Phylo

    pt = Phylo.read(io.StringIO(t.to_newick()), "newick")
    assert sorted(c.confidence for c in pt.root.clades if c.confidence is not None) == [0.42, 66.6667]


# ----------------------------------------------------------------------------- command line


@pytest.fixture(scope="module")
def matrices(tmp_path_factory):
    """A small alignment (the first 8 records, 300 columns of the simulated demo data), its
    distances with one planted error, and the repaired matrix."""
    from conftest import run_cli, small_alignment

    t = tmp_path_factory.mktemp("treefmt")
    aln = t / "aln.fasta"
    small_alignment(aln, rows=8, cols=300)
    before = t / "before.tsv"
    assert run_cli("distances", aln, "-o", before, "--model", "jc69").returncode == 0
    from seqdist.io.matrices import read_matrix

    dm = read_matrix(str(before))
    D = np.array(dm.values)
    D[0, 1] = D[1, 0] = D[0, 1] * 4
    write_tsv(before, list(dm.labels), D)
    after = t / "after.tsv"
    assert run_cli("repair", before, "-o", after, "--objective", "shrink").returncode == 0
    return t, aln, before, after, list(dm.labels)


def test_cli_tree_writes_nexus_by_extension_and_option(cli, matrices):
    import dendropy

    t, _, before, _, labels = matrices
    p = cli("tree", before, "-o", t / "t.nex")
    assert p.returncode == 0, p.stderr
    text = (t / "t.nex").read_text()
    assert text.startswith("#NEXUS\n") and "BEGIN TAXA;" in text and "TREE nj = [&U] (" in text
    dt = dendropy.Tree.get(path=str(t / "t.nex"), schema="nexus")
    assert sorted(x.taxon.label for x in dt.leaf_node_iter()) == sorted(labels)
    p2 = cli("tree", before, "-o", t / "t.nwk")
    assert read_newick_file(str(t / "t.nex")).to_newick() == (t / "t.nwk").read_text()
    p3 = cli("tree", before, "-o", "-", "--tree-format", "nexus")
    assert p2.returncode == p3.returncode == 0 and p3.stdout == text  # same bytes (deterministic)
    bad = cli("tree", before, "-o", t / "x.nex", "--tree-format", "phylip")
    assert bad.returncode == 2 and "invalid choice" in bad.stderr


def test_cli_truth_accepts_nexus(cli, matrices, tmp_path):
    t, _, before, after, labels = matrices
    truth = build_tree(DistanceMatrix.from_array(np.ones((8, 8)) - np.eye(8), labels), "nj")
    nwk, nex = tmp_path / "truth.nwk", tmp_path / "truth.nex"
    nwk.write_text(truth.to_newick())
    nex.write_text(write_nexus_trees([("truth", truth)]))
    out = {}
    for path in (nwk, nex):
        js = tmp_path / f"{path.suffix}.json"
        p = cli("impact", before, after, "--truth", path, "--json", js, "--quiet")
        assert p.returncode == 0, p.stderr
        out[path.suffix] = json.loads(js.read_text())
    assert out[".nwk"]["rf_to_truth_before"] == out[".nex"]["rf_to_truth_before"] is not None
    # a truth tree with non-numeric internal labels is fine: only its splits and lengths matter
    odd = tmp_path / "odd.nwk"
    odd.write_text(truth.to_newick().replace(")", ")node_x", 1))
    assert cli("impact", before, after, "--truth", odd, "--quiet").returncode == 0


@pytest.mark.parametrize("content, needle", [
    ("#NEXUS\nBEGIN TAXA;\n TAXLABELS a b;\nEND;\n", "no TREES block"),
    ("#NEXUS\nBEGIN TREES;\n TRANSLATE 1 a;\n TREE t = (1,2,3);\nEND;\n", "leaf '2' is neither a TRANSLATE key"),
    ("((a,b),c;", "Newick: unclosed '('"),
    ("#NEXUS\nBEGIN TREES;\n TREE t = ((a,b),c;\nEND;\n", "line 3, tree 't': Newick: unclosed '('"),
])
def test_cli_bad_truth_one_line_exit_2(cli, matrices, tmp_path, content, needle):
    _, _, before, after, _ = matrices
    bad = tmp_path / "bad.tree"
    bad.write_text(content)
    js = tmp_path / "never.json"
    p = cli("impact", before, after, "--truth", bad, "--json", js)
    assert p.returncode == 2
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"seqdist: error: {bad}") and needle in lines[0], p.stderr
    assert not js.exists()


def test_cli_bootstrap_support_on_trees_and_consensus(cli, matrices):
    t, aln, before, after, labels = matrices
    out = {k: t / f"{k}.{ext}" for k, ext in (("bt", "nwk"), ("at", "nex"), ("cb", "nwk"), ("ca", "nex"))}
    js = t / "boot.json"
    p = cli("impact", before, after, "--alignment", aln, "--bootstrap", 7, "--model", "jc69", "--objective",
            "shrink", "--seed", 2, "--workers", 1, "--json", js, "--before-tree", out["bt"], "--after-tree",
            out["at"], "--consensus-before", out["cb"], "--consensus-after", out["ca"], "--quiet")
    assert p.returncode == 0, p.stderr
    rep = json.loads(js.read_text())["support"]
    full = sorted(labels)
    # the support on each written tree is the JSON's support (fraction) in percent
    for key, which in (("bt", "before"), ("at", "after")):
        tree = read_newick_file(str(out[key]))
        sides = unrooted_sides(our_sides(tree), full)
        seen = 0
        for row in rep["splits"]:
            if row[f"in_{which}_tree"]:
                side = frozenset(row["taxa"])
                assert sides[side][1] == pytest.approx(100 * row[f"support_{which}"], abs=1e-3)
                seen += 1
        # every internal branch carries a support, and each is one of the report's rows
        assert seen == sum(1 for v in sides.values() if v[1] is not None) == len(full) - 3
    # the consensus holds exactly the splits of more than half the replicates; the main
    # tree's splits with support > 50% are among them, with the same support
    for key, which in (("cb", "before"), ("ca", "after")):
        con = read_newick_file(str(out[key]))
        assert sorted(con.labels()) == full and not con.rooted
        csides = {s: v[1] for s, v in unrooted_sides(our_sides(con), full).items() if v[1] is not None}
        assert all(v > 50 for v in csides.values())
        for row in rep["splits"]:
            if row[f"support_{which}"] > 0.5:
                assert csides[frozenset(row["taxa"])] == pytest.approx(100 * row[f"support_{which}"], abs=1e-3)
    assert (out["ca"]).read_text().startswith("#NEXUS")
    # without --bootstrap a consensus cannot be asked for
    p = cli("impact", before, after, "--consensus-after", t / "no.nwk")
    assert p.returncode == 2 and "--consensus-after needs --bootstrap" in p.stderr
