"""Build the compiled kernels (Cython, with OpenMP for the coarse parallel loops).

Every ``.pyx`` file under ``seqdist/`` becomes an extension module of the same
dotted name; ``pip install .`` or ``pip install -e .`` compiles them, so no
kernel is compiled on first use. The flags are portable (``-O3``, no
``-march``): a wheel built here runs on any x86-64 machine of this kind.
``-ffp-contract=off`` keeps every a*b+c as two roundings, as written, so the
results do not depend on whether the machine has fused multiply-add.
"""

import compileall
import sys
from pathlib import Path

from Cython.Build import cythonize
from setuptools import Extension, setup
from setuptools.command.build_ext import build_ext


class BuildExt(build_ext):
    """Build the extensions; in an editable install also write the package's byte-code.

    ``pip install .`` byte-compiles what it installs, but an editable install
    (``pip install -e .``, the README's) runs the source tree and writes no
    byte-code, so the first command after it would spend a quarter of a second
    compiling modules (twice a warm start, measured by
    tests/benchmarks/bench_startup.py). Writing it here makes the first run a
    warm one; Python still checks each file's time stamp, so an edited module
    is recompiled as usual.
    """

    def run(self):
        super().run()
        if getattr(self, "editable_mode", False) or self.inplace:
            compileall.compile_dir("seqdist", quiet=1)

if sys.platform == "win32":  # MSVC spells the flags its own way
    COMPILE = ["/O2", "/openmp"]
    LINK = []
elif sys.platform == "darwin":  # Apple clang has no OpenMP by default: the kernels run on one thread
    COMPILE = ["-O3", "-ffp-contract=off"]
    LINK = []
else:
    COMPILE = ["-O3", "-fopenmp", "-ffp-contract=off"]
    LINK = ["-fopenmp"]

extensions = [
    Extension(".".join(p.with_suffix("").parts), [str(p)], extra_compile_args=COMPILE, extra_link_args=LINK)
    for p in sorted(Path("seqdist").rglob("*.pyx"))
]

setup(ext_modules=cythonize(extensions, compiler_directives={"language_level": 3}, quiet=True),
      cmdclass={"build_ext": BuildExt})
