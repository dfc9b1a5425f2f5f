"""Peak memory and time of each workflow step against the alignment's size.

Simulates alignments of several sizes, runs ``seqdist run ALN --outdir DIR --step NAME`` for
each step in order (as the workflow's rules do, one process per step, ``--workers 1``) and
reads each process's own peak resident memory from ``os.wait4`` (the kernel's ``ru_maxrss``,
the figure ``/usr/bin/time -v`` prints as "Maximum resident set size"). Then fits, per step,

    peak MB = fixed + pair_bytes * n^2 / 1e6 + cell_bytes * n * L / 1e6

(n taxa, L columns) by least squares, and prints the table of docs/workflow.md ("Clusters").
The settings ``mem_mb``, ``mem_bytes_per_pair`` and ``mem_bytes_per_cell`` of
workflows/config/config.yaml come from that fit, rounded up with a margin.

    python workflows/profiles/measure.py                  # the sizes of docs/workflow.md
    python workflows/profiles/measure.py 200x500 800x500  # your own (TAXAxCOLUMNS)

About 50 seconds on a 2-core machine with the default sizes.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time

import numpy as np

STEPS = ("distances", "audit", "repair", "impact")
SIZES = ((250, 1000), (500, 1000), (500, 4000), (1500, 500))


def run_step(aln: str, outdir: str, step: str) -> tuple[float, float]:
    """(peak resident MB, wall seconds) of one step, run as its own process."""
    cmd = [sys.executable, "-m", "seqdist.cli", "--quiet", "run", aln, "--outdir", outdir, "--step", step,
           "--workers", "1"]
    env = {**os.environ, "OMP_NUM_THREADS": "1"}
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    seconds = time.perf_counter() - start
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        sys.exit(f"{' '.join(cmd)} failed: {proc.stderr.read().decode()}")
    return usage.ru_maxrss * 1024 / 1e6, seconds  # Linux: ru_maxrss in KiB; MB as Snakemake's mem_mb (1e6 bytes)


def main(sizes) -> None:
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n, length in sizes:
            aln = os.path.join(tmp, f"a{n}x{length}.fasta")
            subprocess.run([sys.executable, "-m", "seqdist.cli", "--quiet", "simulate", "-o", aln, "--tree-out",
                            aln + ".tree", "--taxa", str(n), "--columns", str(length), "--seed", "3"], check=True)
            os.remove(aln + ".tree")  # no reference tree: the job as most users run it
            outdir = os.path.join(tmp, f"out{n}x{length}")
            for step in STEPS:
                mb, sec = run_step(aln, outdir, step)
                rows.append((step, n, length, mb, sec))
                print(f"| {step} | {n} | {length} | {mb:.0f} | {sec:.1f} |", flush=True)
    print()
    print("| step | fixed MB | bytes per pair (n^2) | bytes per cell (n L) | largest residual MB |")
    print("| --- | --- | --- | --- | --- |")
    for step in STEPS:
        data = np.array([(1.0, n * n / 1e6, n * length / 1e6, mb) for s, n, length, mb, _ in rows if s == step])
        coef, *_ = np.linalg.lstsq(data[:, :3], data[:, 3], rcond=None)
        resid = np.abs(data[:, :3] @ coef - data[:, 3]).max()
        print(f"| {step} | {coef[0]:.0f} | {coef[1]:.1f} | {coef[2]:.2f} | {resid:.0f} |")


if __name__ == "__main__":
    print("| step | taxa | columns | peak MB | seconds |\n| --- | --- | --- | --- | --- |")
    main([tuple(int(x) for x in a.split("x")) for a in sys.argv[1:]] or SIZES)
