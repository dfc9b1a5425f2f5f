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


def shell_commands(block: str) -> list[str]:
    """The commands of a code block: continuation lines joined, comments kept out."""
    lines, cur = [], ""
    for raw in block.splitlines():
        line = raw.rstrip()
        if cur:
            cur += " " + line.strip()
        else:
            cur = line.strip()
        if cur.endswith("\\"):
            cur = cur[:-1].rstrip()
            continue
        if cur and not cur.startswith("#"):
            lines.append(cur)
        cur = ""
    return lines


def help_example_commands(text: str) -> list[str] | None:
    """The commands of a ``--help`` text's ``example(s):`` block (None: it has none)."""
    import re

    m = re.search(r"\nexamples?:\n(.*?)(?:\n\S|\n\n(?!  )|\Z)", text, flags=re.S)
    if m is None:
        return None
    return shell_commands("\n".join(ln for ln in m.group(1).splitlines() if ln.startswith("  ")))
