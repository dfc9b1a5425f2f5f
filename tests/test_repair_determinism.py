"""Repairs are deterministic, time limits included; objective options are declared and checked.

House rule (DEVELOPERS.md, common practice for reproducible pipelines): the same
input and options give byte-identical output files; wall-clock times go to the
reports' ``seconds`` keys only. ``time_limit`` is a work budget in reference
seconds (docs/repair.md, "Time limits"), so a run that the limit stops early
must stop at the same point every time, on any machine and under any load.

A loaded machine cannot be simulated in CI, so the clock itself is made absurd
instead (every read jumps by hours): a solver that read it for a decision would
stop at once and answer differently. HiGHS is checked to get work limits only.

Options (second part): each objective module declares the options it reads
(``OPTIONS``); unknown or inapplicable options and bad values are input errors
with one message form, instead of being ignored.
"""

from __future__ import annotations

import hashlib
import json
import time

import numpy as np
import pytest

from seqdist.core.errors import InputError
from seqdist.kernels.triangles import is_metric
from seqdist.repair import OBJECTIVES, repair
from seqdist.repair.problem import Option, objective_options, validate_options

from conftest import euclidean, open_text, write_tsv


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
    rep = json.dumps(without_seconds(r.report.to_dict()), sort_keys=True, default=repr)
    return hashlib.sha256(r.matrix.values.tobytes()).hexdigest(), rep


def stopped_early(r):
    d = r.report.details
    return not r.report.optimal and "time limit" in (d.get("status"), d.get("exact_status"))


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
    assert stopped_early(a), a.report.details
    assert is_metric(a.matrix.values, a.report.tol)
    assert a.report.lower_bound <= a.report.objective_value
    assert fingerprint(a) == fingerprint(b)
    # the stopping point is a work count, reported alongside (reference seconds, not wall time)
    assert a.report.details["work"] > 0


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
    assert ref.report.optimal  # nothing stops these on counted work
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
        rep = json.loads(open_text(js))
        runs.append((out.read_bytes(), ch.read_bytes(), without_seconds(rep)))
    assert runs[0][2]["optimal"] is False and runs[0][2]["details"]["status"] == "time limit"
    assert runs[0] == runs[1]


# ------------------------------------------------------------------ options
def test_validate_options_messages_and_types():
    decl = {"method": Option("auto", choices=("auto", "exact", "heuristic")),
            "gap_tol": Option(1e-6, low=0.0, low_open=True), "max_rounds": Option(10, low=1),
            "polish": Option(False)}
    out = validate_options("fewest", decl, {"method": "EXACT", "gap_tol": "1e-3", "max_rounds": 5.0, "polish": "true"})
    assert out == {"method": "exact", "gap_tol": 1e-3, "max_rounds": 5, "polish": True}
    assert type(out["max_rounds"]) is int and type(out["gap_tol"]) is float
    assert validate_options("fewest", decl, out) == out  # validated options validate to themselves
    assert validate_options("fewest", decl, {"method": None}) == {"method": "auto", "gap_tol": 1e-6,
                                                                 "max_rounds": 10, "polish": False}
    bad = [
        ("shrink", {}, {"method": "exact"}, "objective 'shrink' has no option 'method' (its options: none)"),
        ("fewest", decl, {"meth": "exact"},
         "objective 'fewest' has no option 'meth' (its options: gap_tol, max_rounds, method, polish)"),
        ("fewest", decl, {"method": "fast"},
         "objective 'fewest' option 'method' must be one of auto, exact, heuristic, got 'fast'"),
        ("fewest", decl, {"gap_tol": 0.0}, "objective 'fewest' option 'gap_tol' must be a number > 0, got 0.0"),
        ("fewest", decl, {"gap_tol": float("nan")}, "option 'gap_tol' must be a number > 0, got nan"),
        ("fewest", decl, {"gap_tol": True}, "option 'gap_tol' must be a number > 0, got True"),
        ("fewest", decl, {"max_rounds": 2.5}, "option 'max_rounds' must be an integer >= 1, got 2.5"),
        ("fewest", decl, {"max_rounds": 0}, "option 'max_rounds' must be an integer >= 1, got 0"),
        ("fewest", decl, {"polish": "maybe"}, "option 'polish' must be true or false, got 'maybe'"),
    ]
    for obj, d, given, msg in bad:
        with pytest.raises(InputError) as e:
            validate_options(obj, d, given)
        assert msg in str(e.value)


@pytest.mark.parametrize("obj,options,msg", [
    ("shrink", {"method": "exact"}, "objective 'shrink' has no option 'method' (its options: none)"),
    ("l2", {"method": "exact"}, "objective 'l2' has no option 'method'"),
    ("l1", {"polish": True}, "objective 'l1' has no option 'polish'"),
    ("fewest", {"method": "fast"}, "objective 'fewest' option 'method' must be one of auto, exact, heuristic, got 'fast'"),  # noqa: E501 (the exact message)
    ("grow", {"exact_max_n": -1}, "objective 'grow' option 'exact_max_n' must be an integer >= 0, got -1"),
    ("l2", {"gap_tol": -1}, "objective 'l2' option 'gap_tol' must be a number > 0, got -1"),
])
def test_options_that_do_not_apply_are_input_errors(obj, options, msg):
    # these were silently ignored before (the run went on without them)
    D = noisy(6, 1, 0.5)
    with pytest.raises(InputError) as e:
        repair(D, obj, progress=False, **options)
    assert msg in str(e.value)


def test_command_line_rejects_an_option_the_objective_has_not(tmp_path, cli):
    m = tmp_path / "m.tsv"
    write_tsv(m, [f"t{i}" for i in range(6)], noisy(6, 1, 0.5))
    out = tmp_path / "o.tsv"
    p = cli("repair", m, "-o", out, "--objective", "shrink", "--method", "exact")
    assert p.returncode == 2 and not out.exists()
    assert p.stderr.startswith("seqdist: error: objective 'shrink' has no option 'method'"), p.stderr
    p = cli("repair", m, "-o", out, "--objective", "l2", "--option", "gap_tol=abc")
    assert p.returncode == 2 and "option 'gap_tol' must be a number > 0, got 'abc'" in p.stderr, p.stderr


def _valid_values(opt: Option):
    """Valid values to try: every choice, both truth values, the default and a neighbour in range."""
    if opt.choices:
        return list(opt.choices)
    if opt.type is bool:
        return [True, False]
    vals = [opt.default]
    if opt.type is int:
        vals.append(opt.default + 1 if opt.high is None or opt.default + 1 <= opt.high else opt.default)
    else:
        vals.append(opt.default * 1.5 if opt.high is None or opt.default * 1.5 < opt.high else opt.default * 0.9)
    return vals


class _Recording(dict):
    """The validated options, remembering which ones a solver read."""

    def __init__(self, data, seen):
        super().__init__(data)
        self.seen = seen

    def __getitem__(self, key):
        self.seen.add(key)
        return super().__getitem__(key)

    def get(self, key, default=None):
        self.seen.add(key)
        return super().get(key, default)


@pytest.mark.parametrize("obj", OBJECTIVES)
def test_every_declared_option_is_read_and_accepted(monkeypatch, obj, capsys):
    """Each objective runs with each declared option at valid values, and every option it
    reads is declared (a read of an undeclared key fails: the validated dict has no such key);
    every declared option is read on some path (no stale declarations)."""
    import seqdist.repair.problem as P

    decl = objective_options(obj)
    seen: set = set()
    real = P.validate_options

    def recording(objective, declared, given):
        return _Recording(real(objective, declared, given), seen)

    monkeypatch.setattr(P, "validate_options", recording)
    mod = __import__(f"seqdist.repair.{obj}", fromlist=["solve"])
    if hasattr(mod, "validate_options"):
        monkeypatch.setattr(mod, "validate_options", recording)
    # a matrix whose fewest and grow heuristics are not proven optimal, so the LP bound,
    # the LP-guided pass and the exact stage all run
    D = noisy(7, 0, 0.8)
    for tl in (None, 5.0):  # fewest and grow read exact_budget only without a time limit
        repair(D, obj, progress=False, time_limit=tl)
    for key, opt in decl.items():
        for value in _valid_values(opt):
            r = repair(D, obj, progress=False, **{key: value})
            assert is_metric(r.matrix.values, r.report.tol)
    capsys.readouterr()  # verbose logs
    assert seen == set(decl), (set(decl) - seen, seen - set(decl))
