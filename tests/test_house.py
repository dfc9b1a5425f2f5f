"""The house (issue 16): one registry per family read by every layer, short reprs, typed views,
and the bugs found while reading the code, each reproduced.

The layers themselves are checked in test_layers.py; the docstring examples in test_doctests.py.
"""

from __future__ import annotations

import json
import os
import warnings

import numpy as np
import pytest

from conftest import EXAMPLES, run_cli

DEMO = os.path.join(EXAMPLES, "dna_trouble.fasta")


@pytest.fixture(scope="module")
def demo():
    from seqdist.audit import audit, find_suspects
    from seqdist.impact import impact
    from seqdist.io.alignment import read_alignment
    from seqdist.models.distances import pairwise_distances
    from seqdist.repair import repair

    aln = read_alignment(DEMO)
    res = pairwise_distances(aln, "k80", warn=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # x04 and x12 left out: said elsewhere
        fixed = repair(res.matrix, "shrink", progress=False)
    return {"distances": res, "audit": audit(res.matrix), "repair": fixed,
            "impact": impact(res.matrix, fixed.matrix, drop_incomplete=True),
            "suspects": find_suspects(res.matrix, alignment=aln)}


@pytest.mark.parametrize("what", ["distances", "audit", "repair", "impact", "suspects"])
def test_reprs_are_short_and_say_what_matters(demo, what):
    # the audit's repr was 13.6 KB for these 30 taxa, the suspects' 29 KB
    text = repr(demo[what])
    assert len(text) < 200 and "\n" not in text, text
    expected = {"distances": "undefined=57", "audit": "violated=12 of 3276", "repair": "objective='shrink'",
                "impact": "n_compared=28", "suspects": "'x19', 'x18'"}[what]
    assert expected in text


def test_changes_frame_matches_the_changes(demo):
    r = demo["repair"]
    df = r.changes_frame()
    assert list(df.columns) == ["label_a", "label_b", "before", "after", "change", "how"]
    assert len(df) == len(r.changes) == r.report.changed_entries + r.report.filled_entries
    assert df["how"].isin(["changed", "filled_by_path"]).all()
    changed = df[df["how"] == "changed"]
    assert np.allclose(changed["after"] - changed["before"], changed["change"])


def test_objective_registry_is_what_every_layer_reads():
    from seqdist.repair import registry
    from seqdist.repair.engine import check_options, load_objective

    assert registry.OBJECTIVES == ("shrink", "grow", "fewest", "l1", "l2")
    assert registry.WEIGHTED_OBJECTIVES == ("grow", "fewest", "l1", "l2")  # shrink's closure ignores weights
    for name, entry in registry.REGISTRY.items():
        assert entry.module == f"seqdist.repair.{name}"
        assert load_objective(name) is entry.solver()
        assert set(check_options(name, {})) == set(entry.options())  # the defaults, filled in
        assert isinstance(entry.options(), dict)
    # the command line's choices and help come from it
    help_text = " ".join(run_cli("repair", "--help").stdout.split())
    assert all(f"{o.name} {o.does}" in help_text for o in registry.REGISTRY.values())
    p = run_cli("run", DEMO, "--outdir", "unused", "--objective", "nope")
    assert p.returncode == 2 and p.stderr.count("\n") == 1
    assert "nope" in p.stderr and all(name in p.stderr for name in registry.OBJECTIVES)


def test_unknown_objective_is_one_message_everywhere():
    from seqdist.core.errors import InputError
    from seqdist.core.matrix import DistanceMatrix
    from seqdist.repair import repair
    from seqdist.repair.registry import get

    with pytest.raises(InputError) as a:
        get("nope")
    with pytest.raises(InputError) as b:
        repair(DistanceMatrix.from_array([[0, 1, 2], [1, 0, 1], [2, 1, 0]]), "nope", progress=False)
    assert str(a.value) == str(b.value) == "unknown objective 'nope' (choose from shrink, grow, fewest, l1, l2)"


def test_bootstrap_uses_the_alignment_as_read(tmp_path):
    # Reproduced bug: the support step re-read the alignment file with default settings, which
    # failed on a Stockholm protein alignment that the same run without --bootstrap handles.
    p = run_cli("run", os.path.join(EXAMPLES, "protein_small.sto"), "--outdir", tmp_path / "o", "--bootstrap", 3,
                "--workers", 1, "--quiet")
    assert p.returncode == 0, p.stderr
    with open(tmp_path / "o" / "impact.json") as f:
        sup = json.load(f)["support"]
    assert sup["replicates"] == 3 and sup["replicates_with_after_tree"] == 3 and sup["model"] == "poisson"


def test_report_names_the_taxa_most_involved(tmp_path):
    # Reproduced bug: the report read "label" where the audit writes "taxon", so this line was never printed.
    p = run_cli("run", DEMO, "--outdir", tmp_path / "o", "--quiet")
    assert p.returncode == 0
    page = (tmp_path / "o" / "report.html").read_text()
    assert "Taxa most involved: x19, x24, x18, x17, x11." in page


def test_parameter_errors_name_the_parameter_in_python_and_the_flag_on_the_command_line(tmp_path):
    from seqdist.core.errors import ParameterError
    from seqdist.simulate import simulate

    with pytest.raises(ParameterError) as err:
        simulate(2, 10, seed=1)
    assert str(err.value) == "parameter 'taxa' must be an integer from 3 to 20000, got 2"
    with pytest.raises(ParameterError) as err:
        simulate(5, 10, seed=1, indel_rate=1e6)
    assert str(err.value).startswith("parameter 'indel_rate' 1e+06 with parameter 'indel_length' 3 means about")
    p = run_cli("simulate", "--taxa", 5, "--columns", 10, "--indels", 1e6, "-o", tmp_path / "a.fasta",
                "--tree-out", tmp_path / "t.nwk")
    assert p.returncode == 2 and p.stderr.count("\n") == 1
    assert p.stderr.startswith("seqdist: error: --indels RATE 1e+06 with --indels MEAN_LENGTH 3 means about")
    assert p.stderr.rstrip().endswith("lower --indels RATE or --indels MEAN_LENGTH")
    assert "parameter '" not in p.stderr and not os.path.exists(tmp_path / "a.fasta")


@pytest.mark.parametrize("name, flag, value, call", [
    ("taxa", "--taxa", 2, lambda v: __import__("seqdist.simulate").simulate.simulate(v, 10, seed=1)),
    ("columns", "--columns", 0, lambda v: __import__("seqdist.simulate").simulate.simulate(5, v, seed=1)),
    ("branch_mean", "--branch-mean", 0,
     lambda v: __import__("seqdist.simulate").simulate.simulate(5, 10, seed=1, branch_mean=v)),
    ("kappa", "--kappa", -1, lambda v: __import__("seqdist.simulate").simulate.simulate(5, 10, kappa=v)),
])
def test_a_range_is_declared_once_and_refused_in_the_same_words(tmp_path, name, flag, value, call):
    # the library and the command line read one declaration (seqdist.core.params.Number), so the
    # sentence after the parameter's name is the same in both
    from seqdist.core.errors import ParameterError

    with pytest.raises(ParameterError) as err:
        call(value)
    library = str(err.value)
    assert library.startswith(f"parameter '{name}' must be ")
    args = {"taxa": 5, "columns": 10, name: value}
    argv = ["simulate", "--taxa", args["taxa"], "--columns", args["columns"], "-o", tmp_path / "a.fa",
            "--tree-out", tmp_path / "t.nwk"]
    if name not in ("taxa", "columns"):
        argv += [flag, value]
    else:
        argv[argv.index(flag) + 1] = value
    p = run_cli(*argv)
    assert p.returncode == 2 and p.stderr.count("\n") == 1
    assert p.stderr.startswith(f"seqdist: error: {flag} must be ")
    assert library.split(" must be ", 1)[1] in p.stderr


def test_tree_method_registry_is_what_every_layer_reads():
    from seqdist.core.errors import InputError
    from seqdist.core.matrix import DistanceMatrix
    from seqdist.trees.build import METHODS, REGISTRY, build_tree, neighbor_joining, upgma

    assert METHODS == tuple(REGISTRY) == ("nj", "bionj", "upgma")
    dm = DistanceMatrix.from_array([[0, 5, 9, 9], [5, 0, 10, 10], [9, 10, 0, 8], [9, 10, 8, 0]], list("abcd"))
    direct = {"nj": neighbor_joining(dm), "bionj": neighbor_joining(dm, bionj=True), "upgma": upgma(dm)}
    for name in METHODS:
        assert build_tree(dm, name).to_newick() == direct[name].to_newick()
    with pytest.raises(InputError, match=r"unknown tree method 'ml' \(choose from nj, bionj, upgma\)"):
        build_tree(dm, "ml")
    for command in ("tree", "impact", "run"):
        assert "--method {nj,bionj,upgma}" in run_cli(command, "--help").stdout
