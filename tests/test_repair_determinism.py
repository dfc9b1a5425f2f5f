"""Repairs are deterministic, time limits included: stopping decisions follow counted work.

House rule (DEVELOPERS.md, common practice for reproducible pipelines): the same
input and options give byte-identical output files; wall-clock times go to the
reports' ``seconds`` keys only. ``time_limit`` is a work budget in reference
seconds (docs/repair.md, "Time limits"), so a run that the limit stops early
must stop at the same point every time, on any machine and under any load.

A loaded machine cannot be simulated in CI, so the clock itself is made absurd
instead (every read jumps by hours): a solver that read it for a decision would
stop at once and answer differently. HiGHS is checked to get work limits only.
"""

from __future__ import annotations

import hashlib
import json
import time

import numpy as np
import pytest

from conftest import euclidean, write_tsv
from seqdist.metric import is_metric
from seqdist.repair import repair


def noisy(n, seed, sigma):
    """Euclidean distances with multiplicative noise (common practice for repair tests)."""
    rng = np.random.default_rng(seed)
    D = euclidean(n, seed=seed) * np.exp(rng.normal(0, sigma, (n, n)))
    D = np.triu(D, 1)
    return D + D.T


def without_seconds(obj):
    """The report with every ``seconds`` key removed (wall times are allowed to differ)."""
    if isinstance(obj, dict):
        return {k: without_seconds(v) for k, v in obj.items() if k != "seconds"}
    if isinstance(obj, list):
        return [without_seconds(v) for v in obj]
    return obj


def fingerprint(r):
    rep = json.dumps(without_seconds(r.report), sort_keys=True, default=repr)
    return hashlib.sha256(r.matrix.values.tobytes()).hexdigest(), rep


def stopped_early(r):
    d = r.report["details"]
    return not r.report["optimal"] and "time limit" in (d.get("status"), d.get("exact_status"))


# Each case stops early under its time limit (checked below) after some real work.
EARLY = {
    "l2": (noisy(60, 1, 0.3), dict(time_limit=0.05, gap_tol=1e-13)),
    "l1-projection": (noisy(40, 2, 0.3), dict(time_limit=0.05, method="projection", gap_tol=1e-13)),
    "l1-lp": (noisy(30, 3, 0.3), dict(time_limit=0.01, method="lp")),
    "fewest": (noisy(14, 4, 0.5), dict(time_limit=1.5, method="exact")),
    "grow": (noisy(12, 4, 0.5), dict(time_limit=0.3, method="exact")),
}


@pytest.mark.parametrize("case", sorted(EARLY))
def test_a_run_stopped_by_its_time_limit_repeats_exactly(case):
    D, kw = EARLY[case]
    obj = case.split("-")[0]
    a = repair(D, obj, progress=False, **kw)
    b = repair(D, obj, progress=False, **kw)
    assert stopped_early(a), a.report["details"]
    assert is_metric(a.matrix.values, a.report["tol"])
    assert a.report["lower_bound"] <= a.report["objective_value"]
    assert fingerprint(a) == fingerprint(b)
    # the stopping point is a work count, reported alongside (reference seconds, not wall time)
    assert a.report["details"]["work"] > 0


class _AbsurdClock:
    """A clock that jumps by three hours at every read."""

    def __init__(self):
        self.t = 1e6

    def __call__(self):
        self.t += 1e4
        return self.t


# Cases where reading the clock would change the answer: time limits that do not
# stop the run on counted work (they would stop it at once on this clock), and
# fewest's exact stage under method "auto" without a time limit (its own budget).
CLOCK = [
    ("l2", noisy(30, 5, 0.3), dict(time_limit=30.0)),
    ("l1", noisy(25, 6, 0.3), dict(time_limit=30.0)),
    ("l1", noisy(20, 6, 0.3), dict(time_limit=30.0, method="projection", gap_tol=1e-4)),
    ("fewest", noisy(14, 3, 0.3), dict()),
    ("fewest", noisy(14, 3, 0.3), dict(time_limit=30.0, method="exact")),
    ("grow", noisy(12, 4, 0.5), dict(time_limit=30.0)),
]


@pytest.mark.parametrize("obj,D,kw", CLOCK, ids=[f"{c[0]}-{i}" for i, c in enumerate(CLOCK)])
def test_no_solver_reads_the_clock_for_a_decision(monkeypatch, obj, D, kw):
    ref = repair(D, obj, progress=False, **kw)
    assert ref.report["optimal"]  # nothing stops these on counted work
    import scipy.optimize

    calls = []
    real_milp, real_linprog = scipy.optimize.milp, scipy.optimize.linprog

    def milp(*a, options=None, **k):
        calls.append(dict(options or {}))
        return real_milp(*a, options=options, **k)

    def linprog(*a, options=None, **k):
        calls.append(dict(options or {}))
        return real_linprog(*a, options=options, **k)

    monkeypatch.setattr(scipy.optimize, "milp", milp)
    monkeypatch.setattr(scipy.optimize, "linprog", linprog)
    for name in ("perf_counter", "time", "monotonic"):
        monkeypatch.setattr(time, name, _AbsurdClock())
    out = repair(D, obj, progress=False, **kw)
    assert fingerprint(out) == fingerprint(ref)
    # HiGHS gets work limits (nodes, iterations), never a time limit
    assert all("time_limit" not in o for o in calls)
    if obj in ("fewest", "l1") and kw.get("method") != "projection":
        assert calls  # the spies saw the solver calls


def test_command_line_time_limit_gives_identical_files(tmp_path, cli):
    D = noisy(60, 7, 0.3)
    m = tmp_path / "m.tsv"
    write_tsv(m, [f"t{i}" for i in range(60)], D)
    runs = []
    for k in range(2):
        out, js, ch = tmp_path / f"o{k}.tsv", tmp_path / f"r{k}.json", tmp_path / f"c{k}.tsv"
        p = cli("repair", m, "-o", out, "--objective", "l2", "--time-limit", "0.05", "--option", "gap_tol=1e-13",
                "--json", js, "--changes", ch)
        assert p.returncode == 0, p.stderr
        rep = json.load(open(js))
        runs.append((out.read_bytes(), ch.read_bytes(), without_seconds(rep)))
    assert runs[0][2]["optimal"] is False and runs[0][2]["details"]["status"] == "time limit"
    assert runs[0] == runs[1]
