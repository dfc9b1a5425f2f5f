"""Every example in the README and in ``--help`` runs as written, from the repository root.

Each test works in a scratch copy of the files the examples read
(``example_sequences/``, ``workflows/``), runs the examples in the order a
reader meets them, and checks the exit code each one promises (0, or 4 for
the audit gate the README says exits 4). Install lines (``python3 -m venv``,
``pip install``) are not run: CI runs them. Snakemake lines run with
``--dry-run`` added (the workflow itself runs for real in test_run.py).
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys

from conftest import ROOT, help_example_commands, open_text, shell_commands

HELP_ORDER = ["simulate", "distances", "scores", "pairscores", "audit", "repair", "tree", "impact", "convert", "run"]


def sandbox(tmp_path):
    for name in ("example_sequences", "workflows"):
        shutil.copytree(os.path.join(ROOT, name), tmp_path / name)
    return tmp_path


def readme_blocks():
    text = open_text(os.path.join(ROOT, "README.md"), encoding="utf-8")
    return [(m.group(1), m.group(2)) for m in re.finditer(r"```(\w*)\n(.*?)```", text, flags=re.S)]


def env():
    e = dict(os.environ)
    bindir = os.path.dirname(sys.executable)
    e["PATH"] = bindir + os.pathsep + e.get("PATH", "")
    return e


def run_shell(cmd: str, cwd) -> subprocess.CompletedProcess:
    return subprocess.run(["bash", "-c", "set -o pipefail; " + cmd], cwd=cwd, capture_output=True, text=True,
                          timeout=900, env=env())


def expected_code(cmd: str) -> int:
    m = re.search(r"exit (\d)", cmd)
    return int(m.group(1)) if m and "#" in cmd else 0


def test_readme_examples_run_as_written(tmp_path):
    box = sandbox(tmp_path)
    ran = 0
    for lang, block in readme_blocks():
        if lang == "python":
            p = subprocess.run([sys.executable, "-c", block], cwd=box, capture_output=True, text=True,
                               timeout=600, env=env())
            assert p.returncode == 0, (block, p.stderr)
            ran += 1
            continue
        if lang:
            continue
        for cmd in shell_commands(block):
            first = cmd.split()[0]
            if first == "python3" and "venv" in cmd:
                # the install lines: CI runs them; here only the part after the install
                cmd = cmd.split("&&")[-1].strip()
                if not cmd.startswith("seqdist"):
                    continue
            if first == "pip":
                continue  # an install line (the workflow extra): the test extra holds it already
            if first == "snakemake":
                cmd += " --dry-run"
            p = run_shell(cmd, box)
            want = expected_code(cmd)
            assert p.returncode == want, f"{cmd}\nexit {p.returncode}, expected {want}\n{p.stderr[-2000:]}"
            ran += 1
    assert ran >= 20


def help_examples(command: str) -> list[str]:
    p = subprocess.run([sys.executable, "-m", "seqdist.cli", command, "--help"], capture_output=True, text=True,
                       cwd=ROOT, env=env())
    assert p.returncode == 0, p.stderr
    cmds = help_example_commands(p.stdout)
    assert cmds is not None, f"'seqdist {command} --help' has no example"
    return cmds


def test_help_examples_run_as_written(tmp_path):
    box = sandbox(tmp_path)
    ran = 0
    for command in HELP_ORDER:
        cmds = help_examples(command)
        assert cmds, command
        for cmd in cmds:
            assert cmd.startswith("seqdist "), cmd
            p = run_shell(cmd, box)
            want = expected_code(cmd)
            assert p.returncode == want, f"{cmd}\nexit {p.returncode}, expected {want}\n{p.stderr[-2000:]}"
            ran += 1
    assert ran >= len(HELP_ORDER)
    # the outputs the examples name were written (not just a zero exit)
    for name in ("aln.fasta", "true.nwk", "dist.tsv", "dist_square.txt", "blosum62-dist.tsv", "protein-dist.tsv",
                 "fixed.tsv"):
        assert (box / name).stat().st_size > 0, name
    square = open_text(box / "dist_square.txt").splitlines()
    assert square[0].strip() == "10" and len(square) == 11  # the square layout: count, then one row per taxon
