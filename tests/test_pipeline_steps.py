"""The job as one list of steps (issue 18): ``run_job`` and the steps run one by one give the same files.

``seqdist run`` runs :data:`seqdist.pipeline.STEPS` in one process; the Snakemake workflow runs
each step as a rule (``seqdist run --step NAME``) that reads its inputs from the folder. Checked
here without Snakemake: the files are the same either way (byte for byte; the manifest's times
apart), each step reads exactly the files it declares (the workflow's rule inputs), a missing
input names the step that writes it, and alignments are found in a folder by extension or
content with name collisions refused. Reference: the whole-job files themselves (common
practice for a refactoring: outputs before and after must not differ).
"""

from __future__ import annotations

import bz2
import gzip
import json
import os
import shutil
import warnings
from pathlib import Path

import pytest

from conftest import EXAMPLES, run_cli

TROUBLE = os.path.join(EXAMPLES, "dna_trouble.fasta")  # suspects, saturated pairs, a true tree beside it


def _run_job(alignment, outdir, **options):
    from seqdist.pipeline import run_job

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # suspects and unmeasured taxa are named in warnings
        return run_job(alignment, str(outdir), progress=False, workers=1, **options)


def _run_steps(alignment, outdir, **options):
    from seqdist.pipeline import STEP_NAMES, run_step

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for step in STEP_NAMES:
            run_step(alignment, str(outdir), step, progress=False, workers=1, **options)


def _same_files(a, b):
    names = sorted(os.listdir(a))
    assert names == sorted(os.listdir(b))
    for name in names:
        left, right = ((d / name).read_bytes() for d in (a, b))
        if name == "manifest.json":
            left, right = json.loads(left), json.loads(right)
            for doc in (left, right):
                del doc["seconds"], doc["step_times"]  # wall-clock times: the only difference allowed
        assert left == right, name


@pytest.mark.parametrize("options", [
    {},
    {"objective": "l2", "keep_suspects": True, "method": "bionj"},  # weights, the other tree without suspects
    {"keep_unmeasured": True, "bootstrap": 2, "objective": "fewest", "weighted": False},
], ids=["defaults", "l2-kept-bionj", "unmeasured-bootstrap-fewest"])
def test_steps_one_by_one_give_the_files_of_the_whole_job(tmp_path, options):
    _run_job(TROUBLE, tmp_path / "job", **options)
    _run_steps(TROUBLE, tmp_path / "steps", **options)
    _same_files(tmp_path / "job", tmp_path / "steps")
    manifest = json.loads((tmp_path / "steps" / "manifest.json").read_text())
    # the manifest lists every other file of the folder with its checksum
    assert sorted(manifest["outputs"]) == sorted(set(os.listdir(tmp_path / "steps")) - {"manifest.json"})


def test_each_step_reads_exactly_the_files_it_declares(tmp_path, monkeypatch):
    """Each step runs in a folder holding only its declared inputs (so it reads nothing else there),
    and the files it opens are exactly those it declares (so the workflow's rule inputs are right)."""
    from seqdist import pipeline

    options = {"objective": "l2", "keep_suspects": True, "bootstrap": 1}
    _run_job(TROUBLE, tmp_path / "whole", **options)
    opts = pipeline.job_options(TROUBLE, **options)
    opened = []
    real_text, real_matrix, real_sha = pipeline._Job.text, pipeline._Job.matrix, pipeline._file_sha256

    def seen(real, made):  # a file is read when the step did not make it itself
        def read(self, key):
            if key not in getattr(self, made):
                opened.append(self.path(key))
            return real(self, key)
        return read

    monkeypatch.setattr(pipeline._Job, "text", seen(real_text, "texts"))
    monkeypatch.setattr(pipeline._Job, "matrix", seen(real_matrix, "objects"))
    monkeypatch.setattr(pipeline, "_file_sha256", lambda path: opened.append(path) or real_sha(path))
    import seqdist.io.alignment as io_alignment
    real_read = io_alignment.read_alignment
    monkeypatch.setattr(io_alignment, "read_alignment", lambda path, *a: opened.append(path) or real_read(path, *a))
    import seqdist.io.newick as io_newick
    real_tree = io_newick.read_newick_file
    monkeypatch.setattr(io_newick, "read_newick_file",
                        lambda path, *a, **k: opened.append(path) or real_tree(path, *a, **k))
    for step in pipeline.STEPS:
        folder = tmp_path / step.name
        reads, writes = pipeline.step_files(step, TROUBLE, str(folder), opts)
        folder.mkdir()
        for path in reads:
            if os.path.dirname(path) == str(folder):
                shutil.copy(tmp_path / "whole" / os.path.basename(path), path)
        opened.clear()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            pipeline.run_step(TROUBLE, str(folder), step.name, progress=False, workers=1, **options)
        assert set(opened) == set(reads), step.name
        for path in writes:
            if not path.endswith("manifest.json"):
                assert Path(path).read_bytes() == (tmp_path / "whole" / os.path.basename(path)).read_bytes(), path


def test_a_missing_input_names_the_step_that_writes_it(tmp_path):
    from seqdist.core.errors import InputError
    from seqdist.pipeline import run_step

    with pytest.raises(InputError, match=r"distances\.tsv: missing; step 'repair' reads it \(run step 'distances'"):
        run_step(TROUBLE, str(tmp_path), "repair", progress=False)
    p = run_cli("run", TROUBLE, "--outdir", tmp_path, "--step", "audit")
    assert p.returncode == 2 and p.stderr.strip().startswith("seqdist: error: ") and len(p.stderr.splitlines()) == 1
    assert not os.listdir(tmp_path)


def test_a_rerun_with_the_other_choice_leaves_no_stale_tree(tmp_path):
    """The other choice about suspects is written only when there are suspects: a rerun into the same
    folder removes the file of the earlier choice (the folder never mixes two runs)."""
    _run_job(TROUBLE, tmp_path, keep_suspects=True)
    assert (tmp_path / "tree_without_suspects.nwk").exists()
    _run_job(TROUBLE, tmp_path)
    assert (tmp_path / "tree_with_suspects.nwk").exists() and not (tmp_path / "tree_without_suspects.nwk").exists()


# ------------------------------------------------------------------ finding alignments
FASTA = ">a\nACGTACGT\n>b\nACGTACGA\n>c\nACGAACGA\n"
NEXUS_DATA = ("#NEXUS\nbegin taxa;\n dimensions ntax=3;\n taxlabels a b c;\nend;\nbegin data;\n"
              " dimensions ntax=3 nchar=4;\n format datatype=dna missing=? gap=-;\n matrix\n a ACGT\n b ACGA\n"
              " c ACGG\n ;\nend;\n")
NEXUS_TREES = "#NEXUS\nbegin trees;\n tree one = ((a,b),c);\nend;\n"


def test_alignments_are_found_by_extension_and_by_content(tmp_path):
    from seqdist.pipeline import find_alignments

    (tmp_path / "plain.fasta").write_text(FASTA)
    (tmp_path / "no_extension").write_text(FASTA)            # found by its first line
    (tmp_path / "odd.txt").write_text("CLUSTAL W\n\na ACGT\nb ACGA\n")
    (tmp_path / "chars.nex").write_text(NEXUS_DATA)
    (tmp_path / "trees.nex").write_text(NEXUS_TREES)         # a NEXUS file with TREES only: not an alignment
    (tmp_path / "treesonly").write_text(NEXUS_TREES)
    (tmp_path / "plain.true.nwk").write_text("((a,b),c);\n")
    (tmp_path / "notes.md").write_text("# notes\n")
    (tmp_path / ".hidden.fasta").write_text(FASTA)
    (tmp_path / "packed.fasta.gz").write_bytes(gzip.compress(FASTA.encode()))
    (tmp_path / "squeezed").write_bytes(bz2.compress(FASTA.encode()))  # compressed, no extension: by content
    (tmp_path / "folder.fasta").mkdir()
    found = find_alignments(str(tmp_path))
    assert found == {name: str(tmp_path / f) for name, f in [
        ("chars", "chars.nex"), ("no_extension", "no_extension"), ("odd", "odd.txt"), ("packed", "packed.fasta.gz"),
        ("plain", "plain.fasta"), ("squeezed", "squeezed")]}


def test_two_alignments_with_one_name_are_refused_naming_both(tmp_path):
    from seqdist.core.errors import InputError
    from seqdist.pipeline import find_alignments

    for f in ("a.fasta", "a.aln", "b.sto"):
        (tmp_path / f).write_text(FASTA)
    with pytest.raises(InputError) as err:
        find_alignments(str(tmp_path))
    assert str(tmp_path / "a.aln") in str(err.value) and str(tmp_path / "a.fasta") in str(err.value)
    assert "'a'" in str(err.value)
