"""Names of our own (issue 18): simulate's options, the gap-cost rule of pairscores, file names in examples.

* every ``--help`` example of simulate, distances, scores, pairscores, audit
  and repair runs as written, in a scratch folder holding the demo data;
* simulate's old option and keyword names still work for one release, with a
  warning naming the new one, and give the same bytes as the new names;
* ``pairscores`` states its gap-cost rule (a gap of k residues costs
  open + (k - 1) x extend) in ``--help``, docs/scores.md and ``--json``, and
  the rule holds: checked against Biopython's PairwiseAligner and by hand;
* no help text or docs page names a matrix file with a suite's habitual
  extension (``.phy``, ``.dis``, ``.mat``, ``.meg``).
"""

from __future__ import annotations

import json
import os
import re

import numpy as np
import pytest

from seqdist.scores.matrices import ScoreMatrix
from seqdist.scores.pairwise import GAP_COST_CONVENTION, gap_cost, score_distances
from seqdist.simulate import RENAMED, RenamedWarning, format_fasta, make_model, random_tree, simulate

from conftest import ROOT, help_example_commands, open_text, run_cli

#: The commands this part owns, in an order where each example finds the files
#: the earlier ones wrote (audit and repair read the dist.tsv that distances writes).
OWN_COMMANDS = ["simulate", "distances", "scores", "pairscores", "audit", "repair"]
OWN_DOCS = ["docs/simulator.md", "docs/scores.md", "example_sequences/README.md"]


# ------------------------------------------------------------- help examples
def _help(command: str) -> str:
    p = run_cli(command, "--help")
    assert p.returncode == 0, p.stderr
    return p.stdout


# ------------------------------------------------------------- simulate: old names
_OLD_TO_NEW = [
    # (old flags, new flags): the same settings under both names
    (["--length", "40"], ["--columns", "40"]),
    (["--columns", "40", "--alpha", "0.5", "--rate-categories", "8"], ["--columns", "40", "--gamma", "0.5/8"]),
    (["--columns", "40", "--alpha", "0.5", "--rate-categories", "0"],
     ["--columns", "40", "--gamma", "0.5/continuous"]),
    (["--columns", "40", "--gap-rate", "0.05", "--gap-length", "2"], ["--columns", "40", "--indels", "0.05/2"]),
    (["--columns", "40", "--scale", "0.2", "--clock", "--prefix", "q"],
     ["--columns", "40", "--branch-mean", "0.2", "--ultrametric", "--label-prefix", "q"]),
    (["--columns", "40", "--freqs", "1,2,3,4"], ["--columns", "40", "--frequencies", "1,2,3,4"]),
]


@pytest.mark.parametrize("old, new", _OLD_TO_NEW)
def test_old_simulate_options_warn_and_give_the_same_bytes(tmp_path, old, new):
    """Chosen: the old names stay hidden for one release, each with one warning naming its replacement."""
    outs = {}
    for kind, flags in (("old", old), ("new", new)):
        d = tmp_path / kind
        d.mkdir()
        p = run_cli("simulate", "-o", d / "a.fasta", "--tree-out", d / "t.nwk", "--summary-out", d / "s.json",
                    "--taxa", 6, "--seed", 4, *flags)
        assert p.returncode == 0, p.stderr
        outs[kind] = [(d / n).read_bytes() for n in ("a.fasta", "t.nwk", "s.json")]
        warnings = [ln for ln in p.stderr.splitlines() if ln.startswith("seqdist: warning:")]
        given_old = [f for f in flags if f in ("--length", "--alpha", "--rate-categories", "--gap-rate",
                                               "--gap-length", "--scale", "--clock", "--prefix", "--freqs")]
        assert len(warnings) == len(given_old), p.stderr
        for flag, line in zip(given_old, warnings):
            assert line.startswith(f"seqdist: warning: {flag} is renamed --") and "next release" in line
    assert outs["old"] == outs["new"]


def test_old_names_are_hidden_from_help_and_new_ones_shown():
    text = _help("simulate")
    shown = set(re.findall(r"(?m)^\s+(--[\w-]+)", text))
    assert {"--columns", "--frequencies", "--gamma", "--branch-mean", "--ultrametric", "--label-prefix",
            "--indels", "--kappa", "--model"} <= shown
    assert not shown & {"--length", "--alpha", "--rate-categories", "--gap-rate", "--gap-length", "--scale",
                        "--clock", "--prefix", "--freqs"}
    cmds = help_example_commands(text)
    assert cmds, "no example block"
    for cmd in cmds:
        assert not re.search(r"--(length|alpha|rate-categories|gap-rate|gap-length|scale|clock|prefix|freqs)\b", cmd)


def test_old_python_keywords_warn_and_give_the_same_result():
    new = simulate(6, 50, "dna", seed=3, gamma=0.5, gamma_categories=8, indel_rate=0.05, indel_length=2,
                   branch_mean=0.2, ultrametric=True, label_prefix="q", frequencies=[1, 2, 3, 4])
    with pytest.warns(RenamedWarning) as seen:
        old = simulate(6, 50, "dna", seed=3, alpha=0.5, rate_categories=8, gap_rate=0.05, gap_length=2,
                       scale=0.2, clock=True, prefix="q", freqs=[1, 2, 3, 4])
    assert len(seen) == 8 and all(str(w.message).startswith("simulate(): '") for w in seen)
    assert format_fasta(old.records) == format_fasta(new.records) and old.tree.newick() == new.tree.newick()
    with pytest.warns(RenamedWarning, match="'scale' is now called 'branch_mean'"):
        tr = random_tree(5, 1, scale=0.3)
    assert tr.newick() == random_tree(5, 1, branch_mean=0.3).newick()
    with pytest.warns(RenamedWarning, match="'freqs' is now called 'frequencies'"):
        assert make_model("dna", "hky85", freqs=[1, 1, 1, 2]).freqs[3] == pytest.approx(0.4)
    assert set(RENAMED.values()) <= set(simulate.__code__.co_varnames)


def test_python_keyword_mistakes_are_type_errors():
    with pytest.raises(TypeError, match="unexpected keyword argument 'gama'"):
        simulate(5, 10, seed=1, gama=0.5)
    with pytest.raises(TypeError, match="both 'gamma' and its old name 'alpha'"):
        simulate(5, 10, seed=1, gamma=0.5, alpha=0.7)


# ------------------------------------------------------------- pairscores: gap costs
# Match +2, mismatch -1 over A, C, G (hand computation).
ACG = ScoreMatrix.from_array([[2, -1, -1], [-1, 2, -1], [-1, -1, 2]], "ACG", name="acg")


@pytest.mark.parametrize("g, e", [(3.0, 1.0), (5.0, 0.5), (2.0, 2.0)])
def test_one_gap_of_three_costs_open_plus_two_extends(g, e):
    """AGGGC against AC: the best global alignment is AGGGC / A---C, two matches and one gap of 3.

    Hand computation: 2 + 2 - (G + 2 E). Under the other usual rules the score would be
    4 - (G + 3 E) (the first residue paying both) or 4 - 3 G (every residue paying open).
    """
    r = score_distances(["a", "b"], ["AGGGC", "AC"], ACG, gap_open=g, gap_extend=e, formula="cosine",
                        progress=False, processes=1)
    assert r.scores[0, 1] == pytest.approx(4 - (g + 2 * e), abs=1e-12)
    assert gap_cost(3, g, e) == g + 2 * e and gap_cost(1, g, e) == g


def _score_by_hand(rows: tuple[str, str], S: dict, g: float, e: float) -> float:
    """Sum of substitution scores minus open + (k - 1) extend for each maximal gap run in either row."""
    total, run = 0.0, [0, 0]
    for x, y in zip(*rows):
        for r, ch in enumerate((x, y)):
            run[r] = run[r] + 1 if ch == "-" else 0
            if run[r] == 1:
                total -= g
            elif run[r] > 1:
                total -= e
        if x != "-" and y != "-":
            total += S[x, y]
    return total


def test_gap_rule_agrees_with_biopythons_aligner():
    """Biopython's PairwiseAligner as the outside reference: it gives the first column of a gap the
    open gap score and each further column the extend gap score (Biopython Tutorial and Cookbook,
    chapter "Pairwise sequence alignment", the table of the score each column of an example alignment
    gets). Its optimal alignment, re-scored by hand under open + (k - 1) x extend, gives its score and ours."""
    from Bio.Align import PairwiseAligner, substitution_matrices

    rng = np.random.default_rng(5)
    letters = "ACGT"
    S = {(a, b): (5.0 if a == b else -4.0) for a in letters for b in letters}
    sub = substitution_matrices.Array(alphabet=letters, dims=2,
                                      data=np.array([[S[a, b] for b in letters] for a in letters]))
    seqs = ["".join(rng.choice(list(letters), size=n)) for n in (30, 22, 26, 15)]
    sm = ScoreMatrix.from_array([[S[a, b] for b in letters] for a in letters], letters, name="pm")
    checked = 0
    for g, e in [(11.0, 1.0), (6.0, 3.0), (4.0, 0.0)]:
        al = PairwiseAligner(mode="global", substitution_matrix=sub, open_gap_score=-g, extend_gap_score=-e)
        ours = score_distances(list("wxyz"), seqs, sm, gap_open=g, gap_extend=e, formula="cosine",
                               progress=False, processes=1).scores
        for i in range(len(seqs)):
            for j in range(i + 1, len(seqs)):
                aln = al.align(seqs[i], seqs[j])[0]
                by_hand = _score_by_hand((aln[0], aln[1]), S, g, e)
                assert by_hand == pytest.approx(aln.score, abs=1e-9)
                assert ours[i, j] == pytest.approx(by_hand, abs=1e-9)
                checked += "-" in aln[0] + aln[1]
    assert checked >= 10    # most of these alignments do have gaps


def test_gap_rule_in_help_docs_and_json(tmp_path):
    text = _help("pairscores")
    assert GAP_COST_CONVENTION == "a gap of k residues costs open + (k - 1) x extend"
    assert GAP_COST_CONVENTION in " ".join(text.split())
    assert "11 + 2 x 1 = 13" in " ".join(text.split())
    assert "open + (k - 1) x extend" in open_text(os.path.join(ROOT, "docs", "scores.md"))
    fa = tmp_path / "s.fasta"
    fa.write_text(">a\nACGTACGTAC\n>b\nACGTTAC\n>c\nACGAACGTAC\n")
    for extra, ends in (([], "same as internal gaps"), (["--free-end-gaps"], "free")):
        js = tmp_path / "s.json"
        p = run_cli("pairscores", fa, "-o", tmp_path / "d.tsv", "--json", js, "--gap-open", 7, "--gap-extend",
                    "0.5", "--processes", 1, "--quiet", *extra)
        assert p.returncode == 0, p.stderr
        doc = json.loads(open_text(js))
        assert doc["gap_cost"] == {"open": 7.0, "extend": 0.5, "formula": GAP_COST_CONVENTION, "end_gaps": ends}
        assert (doc["gap_open"], doc["gap_extend"]) == (7.0, 0.5)


# ------------------------------------------------------------- file names of our own
#: A suite's habitual extensions for distance matrices. (PHYLIP alignments keep
#: their trade extensions, listed bare as `.phy`; a file *name* with one is flagged.)
_HABITUAL = re.compile(r"[\w-]+\.(phy|dis|mat|meg)\b")


def _own_texts() -> dict:
    texts = {f"seqdist {c} --help": _help(c) for c in OWN_COMMANDS}
    texts.update({path: open_text(os.path.join(ROOT, path), encoding="utf-8") for path in OWN_DOCS})
    return texts


def test_own_help_and_docs_use_our_own_matrix_file_names():
    bad = {where: _HABITUAL.findall(text) for where, text in _own_texts().items() if _HABITUAL.search(text)}
    assert bad == {}


def test_no_help_or_docs_page_uses_habitual_matrix_file_names():
    """The same over every command's help, README.md and every docs page (other parts' files too)."""
    from seqdist.cli import COMMANDS

    texts = {f"seqdist {c} --help": _help(c) for c in COMMANDS}
    docs = ["README.md"] + [os.path.join("docs", f) for f in sorted(os.listdir(os.path.join(ROOT, "docs")))
                            if f.endswith(".md")]
    texts.update({path: open_text(os.path.join(ROOT, path), encoding="utf-8") for path in docs})
    bad = {where: [m.group(0) for m in _HABITUAL.finditer(text)] for where, text in texts.items()
           if _HABITUAL.search(text)}
    assert bad == {}


def test_the_pattern_catches_what_it_should():
    # the test above must be able to fail
    assert _HABITUAL.search("seqdist convert dist.tsv -o dist.phy --out-format square")
    assert _HABITUAL.search("-o tree-input.dis") and _HABITUAL.search("see m.mat")
    assert not _HABITUAL.search("| `phylip` | `.phy` `.phylip` `.ph` | yes |")
    assert not _HABITUAL.search("-o dist_square.txt --out-format square")
