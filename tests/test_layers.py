"""The package's house rules, checked on its source (docs/contributing.md).

* Each family imports only the layers it may (the table below), counting
  imports inside functions too: a lazy import is still a dependency.
* No import cycle between modules at import time.
* No private name (``_x``) imported from another module.
* Every public module declares ``__all__``, and the top-level package's
  names resolve.

Read with :mod:`ast` (standard library), so nothing is imported to check it.
"""

from __future__ import annotations

import ast
import os

import pytest

from conftest import ROOT, open_text

PKG = os.path.join(ROOT, "seqdist")

#: family -> the families it may import (itself always allowed). "seqdist" is the top-level
#: package (``__version__``, the error types).
ALLOWED = {
    "core": set(),
    "io": {"core"},
    "kernels": {"core"},
    "models": {"core", "io", "kernels"},
    "scores": {"core", "io", "kernels"},
    "trees": {"core", "io", "kernels"},
    "simulate": {"core"},
    "audit": {"core", "io", "kernels", "models", "trees"},
    "repair": {"core", "io", "kernels", "audit"},
    "impact": {"core", "io", "kernels", "models", "trees", "repair"},
    "report": {"core", "io", "trees", "impact", "seqdist"},
    "pipeline": {"core", "io", "kernels", "models", "scores", "trees", "audit", "repair", "impact", "report",
                 "seqdist"},
    "cli": {"core", "io", "kernels", "models", "scores", "trees", "simulate", "audit", "repair", "impact",
            "report", "pipeline", "seqdist"},
    "__main__": {"cli"},
    "seqdist": {"core"},
}


def modules() -> dict:
    """``{dotted name: path}`` of every module of the package."""
    out = {}
    for dp, dirs, files in os.walk(PKG):
        dirs[:] = [d for d in dirs if d != "__pycache__"]
        for f in files:
            if f.endswith(".py"):
                p = os.path.join(dp, f)
                name = os.path.relpath(p, ROOT)[:-3].replace(os.sep, ".")
                out[name.removesuffix(".__init__")] = p
    return out


MODULES = modules()


def family(name: str) -> str:
    parts = name.split(".")
    return parts[1] if len(parts) > 1 else "seqdist"


def imports(path: str):
    """``(target module, imported name or None, at module level)`` for every seqdist import."""
    tree = ast.parse(open_text(path))
    top = set(map(id, tree.body))
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            assert node.level == 0, f"{path}: relative import (the house uses absolute imports)"
            if node.module and node.module.split(".")[0] == "seqdist":
                for a in node.names:
                    full = f"{node.module}.{a.name}"
                    yield (full if full in MODULES else node.module), a.name, id(node) in top
        elif isinstance(node, ast.Import):
            for a in node.names:
                if a.name.split(".")[0] == "seqdist":
                    yield a.name, None, id(node) in top


def test_the_layout_has_the_families():
    assert {family(m) for m in MODULES} == set(ALLOWED)


@pytest.mark.parametrize("name", sorted(MODULES))
def test_imports_follow_the_layers(name):
    fam = family(name)
    for target, _, _ in imports(MODULES[name]):
        other = family(target)
        assert other == fam or other in ALLOWED[fam], f"{name} imports {target}: {fam} may not import {other}"


def compiled_twin(module: str, target: str, name: str) -> bool:
    """``seqdist.kernels.kept_graph`` may import its compiled part ``seqdist.kernels._kept_graph``."""
    package, _, base = module.rpartition(".")
    return target == package and name == "_" + base


def test_no_private_name_crosses_modules():
    bad = [(m, t, n) for m, p in MODULES.items() for t, n, _ in imports(p)
           if n and n.startswith("_") and n != "__version__" and t != m and not compiled_twin(m, t, n)]
    assert not bad


def test_no_import_cycle_at_import_time():
    graph = {m: sorted({t for t, _, top in imports(p) if top and t in MODULES and t != m})
             for m, p in MODULES.items()}
    # a package imports its own __init__ first; edges to one's own package are how Python loads it
    state: dict = {}

    def visit(m, path):
        state[m] = 1
        for t in graph[m]:
            if m.startswith(t + "."):
                continue
            if state.get(t) == 1:
                raise AssertionError("import cycle: " + " -> ".join(path + [t]))
            if t not in state:
                visit(t, path + [t])
        state[m] = 2

    for m in sorted(graph):
        if m not in state:
            visit(m, [m])


@pytest.mark.parametrize("name", sorted(m for m in MODULES if not any(p.startswith("_") for p in m.split(".")[1:])
                                         and family(m) not in ("cli", "__main__")))
def test_public_modules_declare_all(name):
    tree = ast.parse(open_text(MODULES[name]))
    names = [t.id for node in tree.body if isinstance(node, (ast.Assign, ast.AnnAssign))
             for t in (node.targets if isinstance(node, ast.Assign) else [node.target]) if isinstance(t, ast.Name)]
    assert "__all__" in names, f"{name} has no __all__"


def test_top_level_names_resolve():
    import seqdist

    for name in seqdist.__all__:
        assert getattr(seqdist, name) is not None, name
    from seqdist.audit import audit
    from seqdist.impact import impact
    from seqdist.repair import repair

    assert callable(audit) and callable(repair) and callable(impact)
    assert seqdist.read_alignment.__module__ == "seqdist.io.alignment"
