"""Every docstring example in the package runs as written (doctest, standard library).

The examples are part of the documentation (numpydoc "Examples" sections);
this keeps them true.
"""

from __future__ import annotations

import doctest
import importlib

import numpy as np
import pytest

from test_layers import MODULES


@pytest.mark.parametrize("name", sorted(m for m in MODULES if not m.endswith("__main__")))
def test_docstring_examples(name, monkeypatch, tmp_path):
    monkeypatch.chdir(tmp_path)  # an example that writes a file writes it here
    module = importlib.import_module(name)
    finder = doctest.DocTestFinder(exclude_empty=True)
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    tests = [t for t in finder.find(module, name, globs={"np": np, **vars(module)}) if t.examples]
    for t in tests:
        runner.run(t)
    result = runner.summarize(verbose=False)
    assert result.failed == 0, f"{result.failed} of {result.attempted} examples failed in {name}"
