"""Shared test helpers: run the command line in-process or as a subprocess."""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
EXAMPLES = os.path.join(ROOT, "example_sequences")


def run_cli(*args, input=None, timeout=600):
    """Run ``seqdist`` as a user would (a separate process); returns CompletedProcess."""
    cmd = [sys.executable, "-m", "seqdist.cli", *map(str, args)]
    return subprocess.run(cmd, capture_output=True, text=True, input=input, timeout=timeout, cwd=ROOT)


@pytest.fixture
def cli():
    return run_cli


def write_tsv(path, labels, D):
    """A plain tsv writer independent of seqdist.io.matrices (for tests of the reader)."""
    with open(path, "w") as f:
        f.write("\t" + "\t".join(labels) + "\n")
        for lab, row in zip(labels, D):
            f.write(lab + "\t" + "\t".join("" if np.isnan(v) else repr(float(v)) for v in row) + "\n")


def euclidean(n, dim=2, seed=0):
    """Distances between random points in the plane: a metric (common practice)."""
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 10, (n, dim))
    return np.sqrt(((X[:, None] - X[None]) ** 2).sum(-1))


def open_text(path, encoding=None) -> str:
    """A file's text, closing the file at once (a bare ``open(p).read()`` leaves that to the collector)."""
    with open(path, encoding=encoding) as f:
        return f.read()


def small_alignment(path, rows=10, cols=400):
    """The first rows/columns of the simulated clean demo alignment (invented data)."""
    recs, name = [], None
    with open(os.path.join(EXAMPLES, "dna_clean.fasta")) as fh:
        for line in fh:
            if line.startswith(">"):
                name = line[1:].strip()
                recs.append([name, ""])
            elif name:
                recs[-1][1] += line.strip()
    with open(path, "w") as fh:
        for name, seq in recs[:rows]:
            fh.write(f">{name}\n{seq[:cols]}\n")
