# What each step's rule asks a scheduler for, from the size of its alignment (n taxa, L columns).
#
# Plain Python (no Snakemake names), so that tests/test_workflow_profile.py imports it as it is;
# steps.smk includes it. The coefficients are settings (workflows/config/config.yaml) fitted to
# measured peaks: docs/workflow.md, "Clusters"; workflows/profiles/measure.py re-measures them.
import functools
import math

#: n for the runtime's unit: runtime.STEP minutes cover one alignment of this many taxa.
RUNTIME_TAXA = 1000


@functools.lru_cache(maxsize=None)
def alignment_shape(path, alphabet="auto"):
    """(taxa, columns) of an alignment, or None when seqdist cannot read it (its rule then fails
    with seqdist's own one-line error, naming the file and the line)."""
    from seqdist.core.errors import InputError
    from seqdist.io.alignment import read_alignment

    try:
        return read_alignment(path, None, alphabet).codes.shape
    except (InputError, OSError):
        return None


def mem_mb(step, taxa, columns, attempt, config):
    """Memory (MB) of one step: the fitted peak (a fixed part, bytes per taxon pair, bytes per
    alignment cell) times the attempt, so that each retry after running out asks for more.

    >>> cfg = {"mem_mb": {"audit": 300}, "mem_bytes_per_pair": {"audit": 400}, "mem_bytes_per_cell": {"audit": 10}}
    >>> mem_mb("audit", 1000, 1000, 1, cfg), mem_mb("audit", 1000, 1000, 2, cfg)
    (710, 1420)
    """
    pairs, cells = taxa * taxa, taxa * columns
    first = config["mem_mb"][step] + (config["mem_bytes_per_pair"][step] * pairs
                                      + config["mem_bytes_per_cell"][step] * cells) / 1e6
    return int(math.ceil(first)) * int(attempt)


def runtime(step, taxa, attempt, config):
    """Minutes of one step: runtime.STEP for up to 1000 taxa, growing as n^3 beyond (the audit's
    triangles, the repair's shortest paths and the tree joins are cubic), times the attempt.

    >>> runtime("repair", 500, 1, {"runtime": {"repair": 10}}), runtime("repair", 2000, 2, {"runtime": {"repair": 10}})
    (10, 160)
    """
    scale = max(1.0, (taxa / RUNTIME_TAXA) ** 3)
    return int(math.ceil(config["runtime"][step] * scale)) * int(attempt)


def step_resources(step, shape, attempt, config):
    """{"mem_mb": ..., "runtime": ...} of one step for an alignment of shape (taxa, columns);
    an unreadable alignment (shape None) gets the fixed parts only."""
    taxa, columns = shape or (0, 0)
    return {"mem_mb": mem_mb(step, taxa, columns, attempt, config),
            "runtime": runtime(step, taxa, attempt, config)}
