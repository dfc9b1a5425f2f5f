"""The ``seqdist repair`` command: outputs, exit codes, bad input, locks (the contract)."""

from __future__ import annotations

import json

import numpy as np
import pytest

from seqdist.kernels.triangles import is_metric

from conftest import euclidean, open_text, write_tsv

OBJS = ["shrink", "fewest", "grow", "l1", "l2"]


def broken(n=8, seed=0):
    D = euclidean(n, seed=seed)
    D[0, 1] = D[1, 0] = D[0, 1] * 4 + 2
    D[2, 5] = D[5, 2] = D[2, 5] * 0.1
    return D


def labels(n):
    return [f"t{i}" for i in range(n)]


@pytest.fixture
def mfile(tmp_path):
    p = tmp_path / "m.tsv"
    write_tsv(p, labels(8), broken())
    return p


def read_out(path):
    rows = [ln.rstrip("\n").split("\t") for ln in open_text(path).splitlines() if ln.strip()]
    return np.array([[float(x) if x not in ("", "NA") else np.nan for x in r[1:]] for r in rows[1:]])


@pytest.mark.parametrize("obj", OBJS)
def test_outputs_and_report(tmp_path, cli, mfile, obj):
    out, js, ch = tmp_path / "o.tsv", tmp_path / "r.json", tmp_path / "c.tsv"
    p = cli("repair", mfile, "-o", out, "--objective", obj, "--json", js, "--changes", ch)
    assert p.returncode == 0, p.stderr
    r = json.loads(open_text(js))
    for k in ["objective", "changed_entries", "l1_change", "l2_change", "max_change", "violated_before",
              "violated_after", "objective_value", "lower_bound", "optimal", "seconds"]:
        assert k in r
    assert r["violated_after"] == 0 and r["lower_bound"] <= r["objective_value"]
    assert "altered data" in r["note"] and "altered data" in p.stderr
    lines = open_text(ch).splitlines()
    assert lines[0] == "label_a\tlabel_b\tbefore\tafter\tchange\thow"
    assert len(lines) - 1 == r["changed_entries"]
    X = read_out(out)
    D = broken()
    for ln in lines[1:]:
        a, b, before, after, change, how = ln.split("\t")
        i, j = int(a[1:]), int(b[1:])
        assert float(before) == D[i, j] and float(after) == X[i, j] and how == "changed"


def test_stdout_carries_only_the_matrix(tmp_path, cli, mfile):
    p = cli("repair", mfile, "-o", "-", "--objective", "shrink")
    assert p.returncode == 0
    assert p.stdout.splitlines()[0].split("\t")[1:] == labels(8)
    assert "repair (shrink)" in p.stderr and "repair" not in p.stdout


def test_unknown_objective_exits_2_and_keeps_output(tmp_path, cli, mfile):
    out = tmp_path / "o.tsv"
    out.write_text("precious\n")
    p = cli("repair", mfile, "-o", out, "--objective", "nonsense")
    assert p.returncode == 2 and p.stderr.startswith("seqdist: error: unknown objective 'nonsense'")
    assert out.read_text() == "precious\n"


@pytest.mark.parametrize("obj,lock,needle", [
    ("fewest", [("t0", "t2"), ("t2", "t3"), ("t0", "t3")], "locked entries conflict"),
    ("l1", [("t0", "t2"), ("t2", "t3"), ("t0", "t3")], "locked entries conflict"),
    ("l2", [("t0", "t2"), ("t2", "t3"), ("t0", "t3")], "locked entries conflict"),
    ("shrink", [("t0", "t1")], "shrink only decreases"),
    ("grow", [("t2", "t3"), ("t3", "t5")], "grow only increases"),
])
def test_infeasible_locks_exit_3_with_no_output(tmp_path, cli, obj, lock, needle):
    D = euclidean(8, seed=0)
    D[0, 1] = D[1, 0] = D[0, 1] * 4 + 2
    D[2, 5] = D[5, 2] = D[2, 3] + D[3, 5] + 3  # longer than the path 2-3-5
    D[0, 3] = D[3, 0] = D[0, 2] + D[2, 3] + 1  # a locked triangle that is broken
    m = tmp_path / "m.tsv"
    write_tsv(m, labels(8), D)
    lk = tmp_path / "lock.txt"
    lk.write_text("".join(f"{a}\t{b}\n" for a, b in lock))
    out, js = tmp_path / "o.tsv", tmp_path / "r.json"
    p = cli("repair", m, "-o", out, "--objective", obj, "--lock", lk, "--json", js)
    assert p.returncode == 3, p.stderr
    assert needle in p.stderr and "t" in p.stderr.split(":", 2)[-1]
    assert not out.exists() and not js.exists()
    assert sorted(x.name for x in tmp_path.iterdir()) == ["lock.txt", "m.tsv"]


def test_conflict_message_names_entry_and_path(tmp_path, cli):
    D = euclidean(5, seed=1)
    D[0, 1] = D[1, 0] = D[0, 2] + D[2, 1] + 5
    m = tmp_path / "m.tsv"
    write_tsv(m, labels(5), D)
    lk = tmp_path / "lock.txt"
    lk.write_text("t0\tt1\nt0\tt2\nt2\tt1\n")
    p = cli("repair", m, "-o", tmp_path / "o.tsv", "--objective", "fewest", "--lock", lk)
    assert p.returncode == 3
    assert "(t0, t1)" in p.stderr and "t0 - t2 - t1" in p.stderr


def test_locks_never_move(tmp_path, cli, mfile):
    lk = tmp_path / "lock.txt"
    lk.write_text("t0\tt1\n")  # the planted broken entry itself: others must give way
    out = tmp_path / "o.tsv"
    for obj in ["fewest", "grow", "l1", "l2"]:
        p = cli("repair", mfile, "-o", out, "--objective", obj, "--lock", lk)
        assert p.returncode == 0, p.stderr
        assert read_out(out)[0, 1] == broken()[0, 1]


@pytest.mark.parametrize("extra,needle", [
    (["--lock", "LOCK_UNKNOWN"], "unknown label 'zz'"),
    (["--lock", "LOCK_BADLINE"], "expected 'label<TAB>label'"),
    (["--weights", "W_NEG"], "negative"),
    (["--weights", "W_LABELS"], "same labels"),
    (["--tol", "-1"], "--tol"),
    (["--time-limit", "0"], "--time-limit"),
    (["--option", "noequals"], "KEY=VALUE"),
    (["--lock", "absent.txt"], "no such"),
])
def test_bad_inputs_exit_2(tmp_path, cli, mfile, extra, needle):
    (tmp_path / "LOCK_UNKNOWN").write_text("t0\tzz\n")
    (tmp_path / "LOCK_BADLINE").write_text("t0 t1\n")
    W = np.ones((8, 8))
    np.fill_diagonal(W, 0)
    W2 = W.copy()
    W2[0, 1] = W2[1, 0] = -1
    write_tsv(tmp_path / "W_NEG", labels(8), W2)
    write_tsv(tmp_path / "W_LABELS", [f"x{i}" for i in range(8)], W)
    args = [str(tmp_path / a) if a.isupper() or a == "absent.txt" else a for a in extra]
    out = tmp_path / "o.tsv"
    p = cli("repair", mfile, "-o", out, "--objective", "shrink", *args)
    assert p.returncode == 2, p.stderr
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("seqdist: error: ") and needle in lines[0], lines
    assert not out.exists()


def test_lock_on_missing_entry_is_bad_input(tmp_path, cli):
    D = euclidean(5, seed=2)
    D[0, 1] = D[1, 0] = np.nan
    m = tmp_path / "m.tsv"
    write_tsv(m, labels(5), D)
    lk = tmp_path / "lock.txt"
    lk.write_text("t1\tt0\n")
    p = cli("repair", m, "-o", tmp_path / "o.tsv", "--objective", "shrink", "--lock", lk)
    assert p.returncode == 2 and "(t0, t1) is a missing entry" in p.stderr


def test_weights_zero_means_free(tmp_path, cli, mfile):
    # with the corrupted entries free, fewest changes them at no cost
    W = np.ones((8, 8))
    np.fill_diagonal(W, 0)
    W[0, 1] = W[1, 0] = 0
    W[2, 5] = W[5, 2] = 0
    wf = tmp_path / "w.tsv"
    write_tsv(wf, labels(8), W)
    js = tmp_path / "r.json"
    p = cli("repair", mfile, "-o", tmp_path / "o.tsv", "--objective", "fewest", "--weights", wf, "--json", js)
    assert p.returncode == 0, p.stderr
    r = json.loads(open_text(js))
    assert r["objective_value"] == 0 and r["lower_bound"] == 0 and r["free_entries"] == 2


def test_missing_entries_filled_in_output(tmp_path, cli):
    D = broken()
    D[3, 4] = D[4, 3] = np.nan
    m = tmp_path / "m.tsv"
    write_tsv(m, labels(8), D)
    out = tmp_path / "o.tsv"
    for obj in OBJS:
        p = cli("repair", m, "-o", out, "--objective", obj)
        assert p.returncode == 0, p.stderr
        assert np.isfinite(read_out(out)).all()


def test_solver_chatter_never_reaches_stdout(tmp_path, cli):
    # HiGHS may print from C to file descriptor 1; with -o - that would corrupt the matrix
    rng = np.random.default_rng(3)
    n = 20
    D = euclidean(n, seed=3) * np.exp(rng.normal(0, 0.3, (n, n)))
    D = np.triu(D, 1)
    D = D + D.T
    m = tmp_path / "m.tsv"
    write_tsv(m, labels(n), D)
    for obj in ("fewest", "grow", "l1"):
        p = cli("repair", m, "-o", "-", "--objective", obj, "--method", "exact", "--time-limit", "5")
        assert p.returncode == 0, p.stderr
        lines = p.stdout.splitlines()
        assert len(lines) == n + 1 and lines[0].split("\t")[1:] == labels(n)
        assert all(ln.split("\t")[0] == f"t{i}" for i, ln in enumerate(lines[1:]))


def noisy_file(tmp_path, n, seed, sigma=0.3):
    rng = np.random.default_rng(seed)
    D = euclidean(n, seed=seed) * np.exp(rng.normal(0, sigma, (n, n)))
    D = np.triu(D, 1)
    D = D + D.T
    m = tmp_path / f"noisy{n}.tsv"
    write_tsv(m, labels(n), D)
    return m, D


@pytest.mark.parametrize("obj", ["l1", "l2"])
def test_convex_objectives_report_a_certified_gap(tmp_path, cli, obj):
    m, D = noisy_file(tmp_path, 25, 1)
    out, js = tmp_path / "o.tsv", tmp_path / "r.json"
    p = cli("repair", m, "-o", out, "--objective", obj, "--json", js)
    assert p.returncode == 0, p.stderr
    r = json.loads(open_text(js))
    assert r["optimal"] and r["violated_after"] == 0
    assert 0 < r["lower_bound"] <= r["objective_value"]
    assert r["relative_gap"] <= 1e-6
    # the reported value is what the written matrix costs (unweighted here)
    X = read_out(out)
    iu = np.triu_indices(25, 1)
    dev = (X - D)[iu]
    want = np.abs(dev).sum() if obj == "l1" else (dev ** 2).sum()
    assert np.isclose(r["objective_value"], want, rtol=1e-9)


@pytest.mark.parametrize("obj", ["l1", "l2"])
def test_cli_time_limit_reports_a_gap(tmp_path, cli, obj):
    m, D = noisy_file(tmp_path, 300, 8)
    out, js = tmp_path / "o.tsv", tmp_path / "r.json"
    extra = ["--method", "heuristic"] if obj == "l1" else []
    # a gap no run reaches within a 1 s work budget, so the budget is what stops it
    p = cli("repair", m, "-o", out, "--objective", obj, "--json", js, "--time-limit", "1",
            "--option", "gap_tol=1e-13", *extra)
    assert p.returncode == 0, p.stderr
    r = json.loads(open_text(js))
    assert r["optimal"] is False and r["violated_after"] == 0 and r["details"]["status"] == "time limit"
    assert 0 <= r["lower_bound"] < r["objective_value"] and r["relative_gap"] > 1e-6
    assert is_metric(read_out(out), r["tol"])


@pytest.mark.parametrize("obj", ["l1", "l2"])
def test_same_input_gives_byte_identical_files(tmp_path, cli, obj):
    # the convex solvers' schedules follow work counts, not the clock
    m, _ = noisy_file(tmp_path, 40, 2)
    outs = []
    for k in range(2):
        out, ch = tmp_path / f"o{k}.tsv", tmp_path / f"c{k}.tsv"
        extra = ["--method", "heuristic"] if obj == "l1" else []
        p = cli("repair", m, "-o", out, "--objective", obj, "--changes", ch, *extra)
        assert p.returncode == 0, p.stderr
        outs.append((out.read_bytes(), ch.read_bytes()))
    assert outs[0] == outs[1]
