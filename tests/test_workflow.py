"""The Snakemake workflow gives the files of ``seqdist run`` (issue 18), run for real.

Measured before (issue 18): the workflow named its trees differently, wrote no manifest and no
distances.json, put timings and paths into repair.json and impact.json, made a report without
the "From alignment to metric" section, wrote into the folder ``seqdist run`` had filled (and so
skipped an alignment), took ``input_dir`` from the working directory, collapsed ``a.fasta`` and
``a.aln`` into one job and queued a NEXUS tree file as an alignment. Here: one snakemake run on
two small simulated alignments (one with a hostile file name, in folders whose names hold spaces
and quotes) must give, byte for byte, the files of ``seqdist run`` (the manifest's times apart);
a rerun has nothing to do; a changed setting reruns only the steps that use it. The reference
is ``seqdist run`` itself (the contract: "the same files as seqdist run").

Regenerate the table of settings in docs/workflow.md with ``python tests/test_workflow.py``.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from conftest import ROOT

SNAKE = shutil.which("snakemake") or os.path.join(os.path.dirname(sys.executable), "snakemake")
SNAKEFILE = os.path.join(ROOT, "workflows", "Snakefile")
SCHEMA = os.path.join(ROOT, "workflows", "schemas", "config.schema.yaml")
needs_snakemake = pytest.mark.skipif(not os.path.exists(SNAKE), reason="snakemake comes with the test extra")

HOSTILE = "odd 'n' $(touch INJECTED) \"z\""  # an alignment's name: quotes, a space, a command substitution


def snakemake(cwd, *args, config=(), timeout=600):
    env = dict(os.environ)
    env["PATH"] = os.path.dirname(sys.executable) + os.pathsep + env.get("PATH", "")
    cmd = [SNAKE, "-s", SNAKEFILE, "--cores", "2", "--directory", str(cwd), *args]
    if config:
        cmd += ["--config", *config]
    return subprocess.run(cmd, capture_output=True, text=True, cwd=cwd, env=env, timeout=timeout)


def planned(p) -> dict:
    """The jobs a dry run lists: {rule: count} from its 'Job stats' table."""
    assert p.returncode == 0, (p.stdout + p.stderr)[-3000:]
    out = p.stdout + p.stderr
    if "Nothing to be done" in out:
        return {}
    table = out.split("Job stats:")[1]
    jobs = {}
    for line in table.splitlines()[3:]:
        parts = line.split()
        if len(parts) != 2 or parts[0] == "total":
            break
        jobs[parts[0]] = int(parts[1])
    return jobs


def _alignment(folder, name, taxa, columns, seed, truth=False):
    from seqdist.simulate import format_fasta, simulate

    sim = simulate(taxa, columns, seed=seed)
    (folder / f"{name}.fasta").write_text(format_fasta(sim.records))
    if truth:
        (folder / f"{name}.true.nwk").write_text(sim.tree.newick())


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """One workflow run: data in a folder named with spaces and quotes, results in another."""
    root = tmp_path_factory.mktemp("wf")
    data = root / "da ta 'q' \"x\""
    data.mkdir()
    _alignment(data, "sim", 10, 300, seed=5, truth=True)
    _alignment(data, HOSTILE, 6, 120, seed=6)
    (data / "sim.nex").write_text("#NEXUS\nbegin trees;\n tree t = ((a,b),c);\nend;\n")  # not an alignment
    results = root / "res 'x' \"y\""
    # paths with quotes go in a config file (Snakemake's --config parser drops quotes)
    settings = root / "settings.yaml"
    settings.write_text(json.dumps({"input_dir": str(data), "results": str(results)}))  # JSON is YAML
    p = snakemake(root, "--configfile", str(settings))
    return root, data, results, p


@needs_snakemake
def test_the_workflow_gives_the_files_of_seqdist_run(run):
    root, data, results, p = run
    assert p.returncode == 0, (p.stdout + p.stderr)[-3000:]
    assert not list(root.rglob("INJECTED")), "a file name ran as a shell command"
    assert sorted(os.listdir(results)) == sorted([".seqdist-workflow", "benchmarks", "logs", "sim", HOSTILE])
    for name in ("sim", HOSTILE):
        mine = results / name
        theirs = root / f"run {name}"
        alignment = os.path.relpath(data / f"{name}.fasta", root)  # as the workflow names it: from its folder
        subprocess.run([sys.executable, "-m", "seqdist.cli", "--quiet", "run", alignment, "--outdir", str(theirs)],
                       cwd=root, check=True, timeout=600)
        assert sorted(os.listdir(mine)) == sorted(os.listdir(theirs))
        for f in os.listdir(theirs):
            a, b = (mine / f).read_bytes(), (theirs / f).read_bytes()
            if f == "manifest.json":
                a, b = json.loads(a), json.loads(b)
                for doc in (a, b):
                    del doc["seconds"], doc["step_times"]  # wall-clock times: the only difference allowed
            assert a == b, f"{name}/{f}"
        # data files hold neither times nor absolute paths
        for f in os.listdir(mine):
            text = (mine / f).read_text()
            assert str(root) not in text, f"{name}/{f} holds an absolute path"
            if f.endswith(".json") and f != "manifest.json":
                assert '"seconds"' not in text and '_seconds"' not in text, f"{name}/{f} holds times"
        import html

        page = html.unescape((mine / "report.html").read_text())
        assert "From alignment to metric" in page and f"<title>seqdist report: {name}.fasta</title>" in page
        for step in ("distances", "audit", "repair", "impact"):
            assert (results / "benchmarks" / name / f"{step}.tsv").stat().st_size > 0
    manifest = json.loads((results / "sim" / "manifest.json").read_text())
    assert manifest["options"]["truth"] == os.path.relpath(data / "sim.true.nwk", root)


@needs_snakemake
def test_a_rerun_has_nothing_to_do_and_a_changed_setting_reruns_only_its_steps(run):
    root, data, results, p = run
    assert p.returncode == 0
    base = ("--dry-run", "--configfile", str(root / "settings.yaml"))
    assert planned(snakemake(root, *base)) == {}
    # the objective is the repair's: the distances and the audit stay
    assert planned(snakemake(root, *base, config=["objective=l2"])) == {"repair": 2, "impact": 2, "all": 1}
    # the tree method only changes the last step
    assert planned(snakemake(root, *base, config=["method=upgma"])) == {"impact": 2, "all": 1}


@needs_snakemake
def test_a_folder_written_by_seqdist_run_is_refused(tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    _alignment(data, "aln", 5, 40, seed=1)
    (tmp_path / "results" / "workflow" / "aln").mkdir(parents=True)
    (tmp_path / "results" / "workflow" / "aln" / "manifest.json").write_text("{}\n")
    p = snakemake(tmp_path, "--dry-run", config=[f"input_dir={data}"])
    assert p.returncode != 0
    assert "written by 'seqdist run'" in p.stderr and "results/workflow/aln/manifest.json" in p.stderr


@needs_snakemake
def test_input_dir_is_taken_from_the_config_file_folder(tmp_path):
    """A relative input_dir is taken from the folder of the config file that sets it (the default one
    finds the demo data from any working directory); on the command line, from the working directory."""
    data = tmp_path / "cfg" / "data"
    data.mkdir(parents=True)
    _alignment(data, "mine", 5, 40, seed=1)
    (tmp_path / "cfg" / "my.yaml").write_text("input_dir: data\n")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    p = snakemake(elsewhere, "--dry-run", "--configfile", str(tmp_path / "cfg" / "my.yaml"))
    assert planned(p) == {"distances": 1, "audit": 1, "repair": 1, "impact": 1, "all": 1}
    assert "cfg/data/mine.fasta" in p.stdout
    p = snakemake(elsewhere, "--dry-run")  # the default config: ../../example_sequences from workflows/config/
    assert planned(p)["distances"] == len([f for f in os.listdir(os.path.join(ROOT, "example_sequences"))
                                           if f.endswith((".fasta", ".sto"))])
    p = snakemake(tmp_path / "cfg", "--dry-run", config=["input_dir=data"])
    assert planned(p)["distances"] == 1


@needs_snakemake
def test_name_collisions_are_refused_naming_both_files(tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    _alignment(data, "a", 5, 40, seed=1)
    shutil.copy(data / "a.fasta", data / "a.aln")
    p = snakemake(tmp_path, "--dry-run", config=[f"input_dir={data}"])
    assert p.returncode != 0
    assert f"{data / 'a.aln'} and {data / 'a.fasta'}" in p.stderr, p.stderr[-2000:]


def test_one_rule_per_step():
    from seqdist.pipeline import STEP_NAMES

    text = Path(os.path.join(ROOT, "workflows", "rules", "steps.smk")).read_text()
    assert "for _step in pipeline.STEPS:" in text and "--step {params.step:q}" in text
    assert STEP_NAMES == ("distances", "audit", "repair", "impact")


# ------------------------------------------------------------------ files of the layout
def _schema():
    import yaml

    with open(SCHEMA) as fh:
        return yaml.safe_load(fh)


def config_table() -> str:
    """The table of settings of docs/workflow.md, made from the schema."""
    schema = _schema()
    rows = ["| key | values | default | what |", "| --- | --- | --- | --- |"]
    for key, spec in schema["properties"].items():
        if "enum" in spec:
            values = ", ".join(str(v) for v in dict.fromkeys(str(v).lower() for v in spec["enum"]))
        elif spec.get("type") == "object":
            values = "one integer per step: " + ", ".join(spec["properties"])
        else:
            kind = spec["type"] if isinstance(spec["type"], str) else " or ".join(spec["type"])
            bounds = [f"{word} {spec[k]}" for k, word in (("minimum", ">="), ("exclusiveMinimum", ">"),
                                                          ("maximum", "<=")) if k in spec]
            values = kind + (f" ({', '.join(bounds)})" if bounds else "")
        if "default" in spec and spec.get("type") == "object":
            default = ", ".join(f"{k} {v['default']}" for k, v in spec["properties"].items())
        elif "default" in spec:
            default = json.dumps(spec["default"]).strip('"')
        else:
            default = "(required)"
        rows.append(f"| `{key}` | {values} | {default} | {' '.join(spec['description'].split())} |")
    return "\n".join(rows) + "\n"


def test_docs_list_every_setting_as_the_schema_has_it():
    doc = Path(os.path.join(ROOT, "docs", "workflow.md")).read_text()
    block = re.search(r"<!-- made from the schema: python tests/test_workflow.py -->\n(.*?)\n<!-- end -->", doc,
                      re.S)
    assert block, "docs/workflow.md lacks the table of settings"
    assert block.group(1) + "\n" == config_table()


def test_schema_choices_are_seqdists_and_the_defaults_are_the_config_files():
    import yaml

    from seqdist.models.registry import MODEL_NAMES
    from seqdist.pipeline import DEFAULT_OBJECTIVE, STEP_NAMES
    from seqdist.repair.registry import OBJECTIVES
    from seqdist.trees.build import METHODS

    props = _schema()["properties"]
    assert props["model"]["enum"] == ["auto", *MODEL_NAMES]
    assert props["objective"]["enum"] == list(OBJECTIVES) and props["objective"]["default"] == DEFAULT_OBJECTIVE
    assert props["method"]["enum"] == list(METHODS)
    assert list(props["threads"]["properties"]) == list(STEP_NAMES) == list(props["mem_mb"]["properties"])
    with open(os.path.join(ROOT, "workflows", "config", "config.yaml")) as fh:
        config = yaml.safe_load(fh)
    assert set(config) == set(props)
    for key, spec in props.items():
        if "default" in spec and spec.get("type") != "object":
            assert config[key] == spec["default"], key


def test_the_conda_environment_file():
    import yaml

    with open(os.path.join(ROOT, "workflows", "envs", "seqdist.yaml")) as fh:
        env = yaml.safe_load(fh)
    assert set(env) == {"channels", "dependencies"} and "conda-forge" in env["channels"]
    names = [d.split()[0] for d in env["dependencies"] if isinstance(d, str)]
    assert {"python", "c-compiler", "pip"} <= set(names)
    pip = [d["pip"] for d in env["dependencies"] if isinstance(d, dict)]
    assert pip and any(x.startswith("seqdist") for x in pip[0])
    text = Path(os.path.join(ROOT, "workflows", "rules", "steps.smk")).read_text()
    assert 'conda: "../envs/seqdist.yaml"' in text


if __name__ == "__main__":
    print(config_table(), end="")
