"""The Snakemake workflow never runs text from its settings or from file names as shell code (issues 14, 18).

Before (issue 14): ``--config "objective=fewest; touch X"`` ran ``touch``; an alignment named
``a$(touch Y).fasta`` ran ``touch`` too. Now every setting is checked against the schema
(workflows/schemas/config.schema.yaml) before any rule runs, and every value put into a command
is quoted for the shell. File names with quotes, spaces and ``$(...)`` are run end to end in
tests/test_workflow.py; here the hostile settings, each refused with one line naming the key.
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


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    from seqdist.simulate import format_fasta, simulate

    folder = tmp_path_factory.mktemp("data")
    (folder / "aln.fasta").write_text(format_fasta(simulate(5, 60, seed=1).records))
    return folder


@pytest.mark.parametrize("key, value, why", [
    ("objective", "shrink; rm -rf /", "is not one of"),
    ("model", "k80 $(touch {marker})", "is not one of"),
    ("seed", "1; touch {marker}", "is not of type 'integer'"),
    ("seed", "-1", "is less than the minimum of 0"),
    ("method", "nj; touch {marker}", "is not one of"),
    ("colour", "blue", "Additional properties are not allowed"),
])
def test_hostile_settings_are_refused_before_any_rule(tmp_path, data, key, value, why):
    marker = tmp_path / "INJECTED"
    env = dict(os.environ)
    env["PATH"] = os.path.dirname(sys.executable) + os.pathsep + env.get("PATH", "")
    cmd = [SNAKE, "-s", os.path.join(ROOT, "workflows", "Snakefile"), "--cores", "1", "--directory", str(tmp_path),
           "--config", f"input_dir={data}", f"{key}={value.format(marker=marker)}"]
    p = subprocess.run(cmd, capture_output=True, text=True, cwd=tmp_path, env=env, timeout=600)
    assert not marker.exists(), "a setting ran as a shell command"
    assert p.returncode != 0
    line = [x for x in p.stderr.splitlines() if x.startswith("seqdist workflow: error: config ")]
    assert line and why in line[0], p.stderr[-2000:]
    assert key in line[0] or "colour" in line[0]
    assert not (tmp_path / "results").exists()
