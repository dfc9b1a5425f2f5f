"""The house style, checked as part of the suite: ruff (pycodestyle, pyflakes, sorted imports) with the
settings in pyproject.toml. Skipped with the reason where ruff is not installed (it is in the test extra)."""

from __future__ import annotations

import shutil
import subprocess
import sys

import pytest

from conftest import ROOT


def ruff_command():
    exe = shutil.which("ruff")
    if exe:
        return [exe]
    try:
        import ruff  # noqa: F401

        return [sys.executable, "-m", "ruff"]
    except ImportError:
        return None


@pytest.mark.skipif(ruff_command() is None, reason="ruff is not installed (pip install -e '.[test]')")
def test_ruff_finds_nothing():
    p = subprocess.run(ruff_command() + ["check", "seqdist", "tests"], cwd=ROOT, capture_output=True, text=True)
    assert p.returncode == 0, p.stdout + p.stderr
