"""The workflow's cluster profile, run locally (issue 19, "Many alignments beyond one machine").

workflows/profiles/cluster/config.yaml takes the workflow to a cluster through Snakemake's
executor plugins; workflows/profiles/local/config.yaml is the same profile with the local
executor. Each step's rule asks for memory and time from its alignment's size (n taxa, L
columns) and the attempt (workflows/rules/resources.py, coefficients in
workflows/config/config.yaml fitted to peaks measured with workflows/profiles/measure.py, the
figures in docs/workflow.md, "Clusters").

Before: every rule asked for a fixed mem_mb whatever the alignment, no runtime, and a retry
asked for the same again; no profile was shipped. Here one run of the local profile on a tiny
simulated alignment, with the audit made to fail once (a stand-in ``seqdist`` on PATH): the run
completes through the profile's retry, every rule got the formula's request, and the retry of
the audit asked for twice the memory and time. How Snakemake reads a profile, passes
``attempt`` to a resource function and retries failed jobs: Snakemake's documentation
("Profiles", "Resources"), common practice.
"""

from __future__ import annotations

import doctest
import importlib.util
import os
import re
import shutil
import stat
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

from conftest import ROOT

SNAKE = shutil.which("snakemake") or os.path.join(os.path.dirname(sys.executable), "snakemake")
SEQDIST = shutil.which("seqdist") or os.path.join(os.path.dirname(sys.executable), "seqdist")
WF = os.path.join(ROOT, "workflows")
STEPS = ("distances", "audit", "repair", "impact")
needs_snakemake = pytest.mark.skipif(not os.path.exists(SNAKE), reason="snakemake comes with the test extra")


def _resources_module():
    spec = importlib.util.spec_from_file_location("seqdist_workflow_resources", os.path.join(WF, "rules",
                                                                                             "resources.py"))
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _yaml(*parts):
    with open(os.path.join(WF, *parts)) as fh:
        return yaml.safe_load(fh)


def _jobs(text: str) -> list:
    """[(rule, {resource: value})] in the order Snakemake started the jobs."""
    jobs = []
    for rule, block in re.findall(r"^(?:local)?rule (\w+):\n((?:    .*\n)+)", text, re.M):
        line = re.search(r"^    resources: (.*)$", block, re.M)
        pairs = (item.split("=", 1) for item in line.group(1).split(", ")) if line else ()
        jobs.append((rule, dict(pairs)))
    return jobs


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """The local profile on an 8 x 200 alignment; the first audit fails as an out-of-memory kill would."""
    root = tmp_path_factory.mktemp("profile")
    data = root / "data"
    data.mkdir()
    subprocess.run([SEQDIST, "--quiet", "simulate", "--taxa", "8", "--columns", "200", "--seed", "4",
                    "-o", str(data / "tiny.fasta"), "--tree-out", str(root / "tiny_tree.nwk")], check=True, timeout=120)
    shim = root / "bin"
    shim.mkdir()
    (shim / "seqdist").write_text(
        "#!/bin/sh\n"
        f"case \" $* \" in *' --step audit '*) if [ ! -e '{root}/failed_once' ]; then\n"
        f"  : > '{root}/failed_once'; echo 'stand-in: killed for memory' >&2; exit 137; fi;; esac\n"
        f"exec '{SEQDIST}' \"$@\"\n")
    (shim / "seqdist").chmod((shim / "seqdist").stat().st_mode | stat.S_IEXEC)
    env = dict(os.environ)
    env["PATH"] = os.pathsep.join([str(shim), os.path.dirname(sys.executable), env.get("PATH", "")])
    cmd = [SNAKE, "-s", os.path.join(WF, "Snakefile"), "--profile", os.path.join(WF, "profiles", "local"),
           "--directory", str(root), "--config", f"input_dir={data}"]
    p = subprocess.run(cmd, capture_output=True, text=True, cwd=root, env=env, timeout=600)
    return root, p


@needs_snakemake
def test_the_local_profile_runs_the_workflow_through_a_retry(run):
    root, p = run
    assert p.returncode == 0, (p.stdout + p.stderr)[-3000:]
    assert "Using profile" in p.stderr + p.stdout
    assert (root / "failed_once").exists(), "the stand-in seqdist was not used"
    out = root / "results" / "workflow" / "tiny"
    for name in ("distances.tsv", "audit.json", "repaired.tsv", "tree_after.nwk", "impact.json", "manifest.json"):
        assert (out / name).stat().st_size > 0, name
    rules = [rule for rule, _ in _jobs(p.stdout + p.stderr)]
    assert rules.count("audit") == 2 and all(rules.count(s) == 1 for s in ("distances", "repair", "impact"))


@needs_snakemake
def test_every_rule_asked_for_what_the_formula_gives(run):
    root, p = run
    res, config = _resources_module(), _yaml("config", "config.yaml")
    jobs = _jobs(p.stdout + p.stderr)
    attempts = {}
    for rule, got in jobs:
        if rule not in STEPS:
            continue
        attempts[rule] = attempts.get(rule, 0) + 1
        want = res.step_resources(rule, (8, 200), attempts[rule], config)
        assert int(got["mem_mb"]) == want["mem_mb"] and int(got["runtime"]) == want["runtime"], (rule, got)
    assert attempts == {"distances": 1, "audit": 2, "repair": 1, "impact": 1}
    # the retry asked for twice the first attempt's memory and time
    first, second = [got for rule, got in jobs if rule == "audit"]
    assert int(second["mem_mb"]) == 2 * int(first["mem_mb"]) > 0
    assert int(second["runtime"]) == 2 * int(first["runtime"]) > 0
    # what the jobs used stays under what they asked for (Snakemake's benchmark, max_rss in MB)
    for step in STEPS:
        bench = root / "results" / "workflow" / "benchmarks" / "tiny" / f"{step}.tsv"
        header, row = bench.read_text().split("\n")[:2]
        used = float(dict(zip(header.split("\t"), row.split("\t")))["max_rss"])
        assert used < res.step_resources(step, (8, 200), 1, config)["mem_mb"], step


def test_a_retry_raises_memory_and_time():
    res, config = _resources_module(), _yaml("config", "config.yaml")
    for step in STEPS:
        one, two, three = (res.step_resources(step, (2000, 500), k, config) for k in (1, 2, 3))
        assert two["mem_mb"] == 2 * one["mem_mb"] and three["mem_mb"] == 3 * one["mem_mb"]
        assert two["runtime"] == 2 * one["runtime"] > one["runtime"]
        # more taxa or more columns never ask for less
        assert res.step_resources(step, (4000, 500), 1, config)["mem_mb"] > one["mem_mb"]
        assert res.step_resources(step, (2000, 5000), 1, config)["mem_mb"] >= one["mem_mb"]
        assert res.step_resources(step, (8000, 500), 1, config)["runtime"] > one["runtime"]
    # an alignment seqdist cannot read gets the fixed part; its rule then fails with seqdist's error
    assert res.step_resources("audit", None, 1, config)["mem_mb"] == config["mem_mb"]["audit"]
    failures, _ = doctest.testmod(res)
    assert failures == 0


def test_the_request_covers_the_measured_peaks_in_the_docs():
    """Every peak of docs/workflow.md's table (measured in this project with
    workflows/profiles/measure.py) is below the default settings' first request."""
    res, config = _resources_module(), _yaml("config", "config.yaml")
    doc = Path(ROOT, "docs", "workflow.md").read_text()
    rows = re.findall(r"^\| (distances|audit|repair|impact) \| (\d+) \| (\d+) \| (\d+) \| [\d.]+ \|$", doc, re.M)
    assert len(rows) >= 16, "docs/workflow.md lacks the measured peaks"
    for step, taxa, columns, peak in rows:
        assert int(peak) < res.step_resources(step, (int(taxa), int(columns)), 1, config)["mem_mb"], (step, taxa)


def test_the_two_profiles_have_the_same_settings():
    cluster, local = _yaml("profiles", "cluster", "config.yaml"), _yaml("profiles", "local", "config.yaml")
    assert cluster.pop("executor") == "slurm" and local.pop("executor") == "local"
    assert cluster.pop("jobs") >= 1 and local.pop("cores") >= 1
    assert cluster == local
    assert cluster["retries"] >= 1 and cluster["latency-wait"] > 0


@needs_snakemake
def test_the_cluster_profile_loads_with_the_executor_overridden(run, tmp_path):
    """The cluster profile itself, with --executor local on the command line (the slurm plugin
    is not installed here): a dry run plans every step with the formula's request."""
    root, _ = run
    env = dict(os.environ)
    env["PATH"] = os.path.dirname(sys.executable) + os.pathsep + env.get("PATH", "")
    cmd = [SNAKE, "-s", os.path.join(WF, "Snakefile"), "--profile", os.path.join(WF, "profiles", "cluster"),
           "--executor", "local", "--cores", "2", "--dry-run", "--directory", str(tmp_path),
           "--config", f"input_dir={root / 'data'}"]
    p = subprocess.run(cmd, capture_output=True, text=True, cwd=tmp_path, env=env, timeout=600)
    assert p.returncode == 0, (p.stdout + p.stderr)[-3000:]
    res, config = _resources_module(), _yaml("config", "config.yaml")
    jobs = {rule: got for rule, got in _jobs(p.stdout + p.stderr) if rule in STEPS}
    assert sorted(jobs) == sorted(STEPS)
    for rule, got in jobs.items():
        assert int(got["mem_mb"]) == res.step_resources(rule, (8, 200), 1, config)["mem_mb"], rule
