"""The Snakemake workflow never runs text from its config or from file names as shell code (issue 14).

Before: ``--config "objective=fewest; touch X"`` ran ``touch``; an alignment
named ``a$(touch Y).fasta`` ran ``touch`` too; a name with a space broke a
rule. Now every value put into a command is shell-quoted, and config values
are checked against the allowed choices before any rule runs. The workflow
is run for real with snakemake on tiny simulated alignments (5 taxa x 60
columns).
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys

import pytest

from conftest import ROOT

SNAKE = shutil.which("snakemake") or os.path.join(os.path.dirname(sys.executable), "snakemake")
pytestmark = pytest.mark.skipif(not os.path.exists(SNAKE), reason="snakemake is in the test extra")


def _alignment(folder, name: str, seed: int, truth: bool = False) -> None:
    from seqdist.simulate import format_fasta, simulate

    sim = simulate(5, 60, seed=seed)
    (folder / f"{name}.fasta").write_text(format_fasta(sim.records))
    if truth:
        (folder / f"{name}.true.nwk").write_text(sim.tree.newick())


def _snakemake(tmp_path, data, *config):
    env = dict(os.environ)
    env["PATH"] = os.path.dirname(sys.executable) + os.pathsep + env.get("PATH", "")
    cmd = [SNAKE, "-s", os.path.join(ROOT, "workflows", "Snakefile"), "--cores", "1", "--quiet",
           "--config", f"input_dir={data}", f"results={tmp_path / 'results'}", *config]
    return subprocess.run(cmd, capture_output=True, text=True, cwd=tmp_path, env=env, timeout=600)


@pytest.mark.parametrize("key, good", [("objective", "fewest"), ("method", "nj"), ("gaps", "pairwise"),
                                       ("model", "k80"), ("seed", "1")])
def test_config_values_cannot_run_commands(tmp_path, key, good):
    data = tmp_path / "data"
    data.mkdir()
    _alignment(data, "aln", seed=1)
    marker = tmp_path / "INJECTED"
    p = _snakemake(tmp_path, data, f"{key}={good}; touch {marker}")
    assert not marker.exists(), "a config value ran as a shell command"
    assert p.returncode != 0
    said = p.stdout + p.stderr
    assert f"seqdist workflow: config {key}=" in said and "touch" in said, said[-2000:]
    assert not (tmp_path / "results").exists() or not any((tmp_path / "results").rglob("*.tsv"))


def test_file_names_with_shell_characters_and_spaces(tmp_path):
    """One run over two alignments: 'a$(touch Y)' must not run touch, 'my aln' must go end to end
    (the true tree beside it is passed through --truth, quoted too)."""
    data = tmp_path / "data"
    data.mkdir()
    _alignment(data, "a$(touch Y)", seed=2)
    _alignment(data, "my aln", seed=3, truth=True)
    p = _snakemake(tmp_path, data)
    assert not (tmp_path / "Y").exists() and not list(tmp_path.rglob("Y")), "a file name ran as a shell command"
    assert p.returncode == 0, (p.stdout + p.stderr)[-3000:]
    for name in ("a$(touch Y)", "my aln"):
        res = tmp_path / "results" / name
        for f in ("distances.tsv", "audit.json", "audit.txt", "repaired.tsv", "tree_repaired.nwk",
                  "impact.json", "report.html"):
            assert (res / f).stat().st_size > 0, f"{name}/{f}"
    import json

    assert "rf_to_truth_after" in json.loads((tmp_path / "results" / "my aln" / "impact.json").read_text())
