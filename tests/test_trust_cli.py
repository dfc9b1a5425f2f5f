"""Boundary checks of run, repair and impact, warnings, progress estimates: each a case that failed once.

Behaviour from the outside contract (../shared/CONTRACT.md): bad usage exits 2
with one line ``seqdist: error: ...`` and no output; warnings go through
Python's ``warnings`` module with the package's own classes.
"""

from __future__ import annotations

import json
import os
import warnings

import numpy as np
import pytest

from conftest import EXAMPLES, euclidean, run_cli, write_tsv

CLEAN = os.path.join(EXAMPLES, "dna_clean.fasta")
TROUBLE = os.path.join(EXAMPLES, "dna_trouble.fasta")


def one_line_error(p, *needles):
    assert p.returncode == 2, (p.returncode, p.stderr)
    assert p.stderr.startswith("seqdist: error:") and p.stderr.count("\n") == 1, p.stderr
    assert "Traceback" not in p.stderr
    for n in needles:
        assert n in p.stderr, (n, p.stderr)


@pytest.fixture
def mfile(tmp_path):
    m = tmp_path / "m.tsv"
    D = euclidean(8, seed=3)
    D[0, 1] = D[1, 0] = D[0, 1] * 3
    write_tsv(m, [f"t{i}" for i in range(8)], D)
    return m


# ------------------------------------------------------------- seeds and numbers
@pytest.mark.parametrize("args", [
    ("run", CLEAN, "--outdir", "OUT", "--seed", "-1"),
    ("run", CLEAN, "--outdir", "OUT", "--workers", "0"),
    ("run", CLEAN, "--outdir", "OUT", "--bootstrap", "-2"),
    ("run", CLEAN, "--outdir", "OUT", "--time-limit", "nan"),
    ("repair", "M", "-o", "OUT", "--objective", "fewest", "--seed", "-1"),
    ("repair", "M", "-o", "OUT", "--objective", "fewest", "--seed", "99999999999"),
    ("repair", "M", "-o", "OUT", "--objective", "fewest", "--tol", "inf"),
    ("repair", "M", "-o", "OUT", "--objective", "l1", "--time-limit", "-3"),
    ("impact", "M", "M", "--tol", "-1"),
    ("impact", "M", "M", "--tol", "nan"),
    ("impact", "M", "M", "--tol", "inf"),
    ("impact", "M", "M", "--alignment", CLEAN, "--bootstrap", "2", "--model", "k80", "--objective", "shrink",
     "--seed", "-1"),
    ("impact", "M", "M", "--alignment", CLEAN, "--bootstrap", "2", "--model", "k80", "--objective", "shrink",
     "--workers", "0"),
])
def test_bad_numbers_exit_2_before_any_work(tmp_path, mfile, args):
    out = tmp_path / "out"
    args = [str(out) if a == "OUT" else str(mfile) if a == "M" else a for a in args]
    p = run_cli(*args)
    one_line_error(p)
    assert not out.exists()


# ------------------------------------------------------------- output collisions
@pytest.mark.parametrize("args, clash", [
    (("repair", "M", "-o", "X", "--objective", "shrink", "--changes", "X"), "--out and --changes"),
    (("repair", "M", "-o", "a.tsv", "--objective", "shrink", "--changes", "X", "--json", "X"),
     "--changes and --json"),
    (("impact", "M", "M", "--json", "X", "--html", "X"), "--json and --html"),
    (("impact", "M", "M", "--html", "X", "--before-tree", "X"), "--html and --before-tree"),
])
def test_two_outputs_to_one_path_are_refused(tmp_path, mfile, args, clash):
    x = tmp_path / "x.out"
    x.write_text("precious\n")
    args = [str(x) if a == "X" else str(mfile) if a == "M" else str(tmp_path / a) if a.endswith(".tsv") else a
            for a in args]
    p = run_cli(*args)
    one_line_error(p, clash)
    assert x.read_text() == "precious\n"


# ------------------------------------------------------------- the output folder
def test_run_outdir_under_a_file_fails_first(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    p = run_cli("run", CLEAN, "--outdir", blocker / "sub", "--quiet")
    one_line_error(p, "is not a folder")
    assert blocker.read_text() == "x"


def test_run_outdir_not_writable_fails_before_any_work(tmp_path, monkeypatch):
    # Tests run as root here, so a read-only folder is simulated at the check.
    from seqdist import pipeline
    from seqdist.core.errors import InputError

    ro = tmp_path / "ro"
    ro.mkdir()
    real = os.access
    monkeypatch.setattr(pipeline.os, "access",
                        lambda p, mode: False if os.path.abspath(p) == str(ro) else real(p, mode))
    called = []
    monkeypatch.setattr("seqdist.io.alignment.read_alignment", lambda *a, **k: called.append(1))
    with pytest.raises(InputError, match="cannot be made: .* is not writable"):
        pipeline.run_job(CLEAN, str(ro / "sub"), progress=False)
    assert not called and not (ro / "sub").exists()


def test_run_late_folder_failure_is_an_input_error(tmp_path, monkeypatch):
    from seqdist import pipeline
    from seqdist.core.errors import InputError

    target = str(tmp_path / "new")
    real = os.makedirs

    def refuse(path, *a, **k):
        if os.path.abspath(path) == target:
            raise PermissionError(13, "Permission denied")
        return real(path, *a, **k)

    monkeypatch.setattr(pipeline.os, "makedirs", refuse)
    with pytest.raises(InputError, match="cannot make the output folder"):
        pipeline.run_job(CLEAN, str(tmp_path / "new"), progress=False)


# ------------------------------------------------------------- weights and values
def test_weights_errors_name_the_file(tmp_path, mfile):
    w = tmp_path / "w.tsv"
    labels = [f"t{i}" for i in range(8)]
    W = np.ones((8, 8))
    np.fill_diagonal(W, 0)
    W[2, 3] = W[3, 2] = -1.0
    write_tsv(w, labels, W)
    p = run_cli("repair", mfile, "-o", tmp_path / "o.tsv", "--objective", "l1", "--weights", w)
    one_line_error(p, str(w), "negative", "(t2, t3)")
    write_tsv(w, labels[:7] + ["zz"], np.abs(W))
    p = run_cli("repair", mfile, "-o", tmp_path / "o.tsv", "--objective", "l1", "--weights", w)
    one_line_error(p, str(w), "zz")


@pytest.mark.parametrize("obj", ["grow", "l2", "l1", "fewest", "shrink"])
def test_values_whose_sums_overflow_are_refused(tmp_path, obj):
    m = tmp_path / "huge.tsv"
    D = euclidean(6, seed=1) * 1e307
    D[0, 1] = D[1, 0] = 1.5e308
    write_tsv(m, [f"t{i}" for i in range(6)], D)
    p = run_cli("repair", m, "-o", tmp_path / "o.tsv", "--objective", obj, "--json", tmp_path / "r.json")
    one_line_error(p, str(m), "too large", "rescale")
    assert not (tmp_path / "o.tsv").exists()


def test_large_but_safe_values_repair_with_finite_report(tmp_path):
    m = tmp_path / "big.tsv"
    D = euclidean(6, seed=2) * 1e100
    D[0, 1] = D[1, 0] = D[0, 1] * 4
    write_tsv(m, [f"t{i}" for i in range(6)], D)
    for obj in ("l2", "grow"):
        p = run_cli("repair", m, "-o", tmp_path / "o.tsv", "--objective", obj, "--json", tmp_path / "r.json")
        assert p.returncode == 0, p.stderr
        r = json.loads((tmp_path / "r.json").read_text())
        assert r["objective_value"] is not None and np.isfinite(r["objective_value"])


# ------------------------------------------------------------- warnings
def test_library_warnings_are_seqdist_warnings_that_can_be_errors():
    from seqdist.core.errors import DataWarning, SeqdistWarning
    from seqdist.io.alignment import read_alignment
    from seqdist.models.distances import pairwise_distances

    aln = read_alignment(TROUBLE)
    with warnings.catch_warnings():
        warnings.simplefilter("error", SeqdistWarning)
        with pytest.raises(DataWarning, match="57 pairs undefined"):
            pairwise_distances(aln, "k80", progress=False)


def test_cli_prints_each_warning_as_one_line_and_quiet_silences_them(tmp_path):
    p = run_cli("distances", TROUBLE, "-o", tmp_path / "d.tsv")
    lines = [ln for ln in p.stderr.splitlines() if "warning" in ln.lower()]
    assert p.returncode == 0 and lines and all(ln.startswith("seqdist: warning: ") for ln in lines)
    assert "Warning:" not in p.stderr and ".py:" not in p.stderr
    p = run_cli("--quiet", "distances", TROUBLE, "-o", tmp_path / "e.tsv")
    assert p.returncode == 0 and p.stderr == ""


def test_error_with_a_control_character_in_a_label_is_one_line(tmp_path):
    from seqdist.core.console import one_line

    assert one_line("label 'a\nb'") == "label 'a\\nb'"
    assert "\n" not in one_line("x\r\ny\tz\x1b")


# ------------------------------------------------------------- progress estimates
def test_progress_estimates_only_when_honest(monkeypatch):
    from seqdist.core import console

    clock = iter([0.0, 30.0, 31.0, 32.0, 33.0, 40.0])
    now = {"t": 0.0}

    def fake():
        return now["t"]

    monkeypatch.setattr(console.time, "perf_counter", fake)
    bar = console.Progress("work", total=10)
    now["t"] = next(clock)
    assert bar.eta() is None  # nothing done: no estimate
    now["t"] = next(clock)  # a slow start (e.g. worker processes) ...
    bar.update(1)
    assert bar.eta() is None  # one unit: no rate yet
    now["t"] = next(clock)
    bar.update(1)
    assert bar.eta() is None  # 20% done but one unit after the first: still none
    now["t"] = next(clock)
    bar.update(1)
    # ... is not extrapolated: 2 units in 2 s after the first, 7 left -> 7 s, not ~70 s
    assert bar.eta() == pytest.approx(7.0)
    phases = console.Progress("repair", total=1.0, estimate=False)
    phases.update(0.5)
    phases.update(0.2)
    assert phases.eta() is None and "left" not in phases._line()


def test_distances_outputs_to_one_path_are_refused(tmp_path):
    x = tmp_path / "x.tsv"
    x.write_text("precious\n")
    p = run_cli("distances", CLEAN, "-o", x, "--sites", x)
    one_line_error(p, "--out and --sites")
    assert x.read_text() == "precious\n"
    p = run_cli("distances", CLEAN, "-o", "-", "--json", "-")
    one_line_error(p, "--out and --json both write to standard output")


def test_alignment_ids_with_control_characters_are_refused(tmp_path):
    aln = tmp_path / "esc.fasta"
    aln.write_bytes(b">a\x1bb\nACGT\n>c\nACGA\n>d\nACCA\n")
    p = run_cli("distances", aln, "-o", tmp_path / "d.tsv")
    one_line_error(p, str(aln), "line 1", "control character")
    assert not (tmp_path / "d.tsv").exists()


def test_audit_lower_bound_never_reads_the_clock(monkeypatch):
    # The LP bound stops at an iteration count, so the same matrix gives the
    # same min_changes_lower_bound on any machine and under any load.
    import scipy.optimize

    from seqdist.audit.report import audit

    seen = []
    real = scipy.optimize.linprog

    def spy(*a, **k):
        seen.append(dict(k.get("options") or {}))
        return real(*a, **k)

    monkeypatch.setattr(scipy.optimize, "linprog", spy)
    D = euclidean(14, seed=5)
    rng = np.random.default_rng(5)
    for _ in range(12):
        i, j = rng.choice(14, 2, replace=False)
        D[i, j] = D[j, i] = D[i, j] * 4
    rep = audit(D)
    assert seen and all("time_limit" not in o and "maxiter" in o for o in seen)
    assert rep.to_dict()["min_changes_lower_bound"] >= 1


def test_pairscores_json_to_stdout_holds_the_json_alone(tmp_path):
    seqs = tmp_path / "s.fasta"
    seqs.write_text(">a\nMKVLAAGIVW\n>b\nMKVLSAGIVW\n>c\nMRVLSAGLVW\n")
    p = run_cli("pairscores", seqs, "-o", tmp_path / "d.tsv", "--json", "-")
    assert p.returncode == 0, p.stderr
    assert json.loads(p.stdout)["n"] == 3 and "3 sequences" in p.stderr
