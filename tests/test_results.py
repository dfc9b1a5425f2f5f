"""Typed results (issue 16, item 4): the repair and impact reports are dataclasses whose
``to_dict()`` is the JSON document as it was when they were dicts (same keys, same order,
same values), every field documented, and JSON -> record -> JSON gives the same bytes.

The key lists below are the contract's (../shared/CONTRACT.md, "JSON keys that must be
present") and, for the order, the documents as written before the reports were typed
(seqdist 0.1.0 at commit b4e0b6b, build_report and impact); a test here fails when a key is
renamed, dropped or moved.
"""

from __future__ import annotations

import dataclasses
import inspect
import json
import os
import re
import warnings

import numpy as np
import pytest

from seqdist.impact import result as impact_result
from seqdist.repair import result as repair_result

from conftest import EXAMPLES, run_cli

#: ../shared/CONTRACT.md, "JSON keys that must be present", repair --json.
CONTRACT_REPAIR = ["objective", "changed_entries", "l1_change", "l2_change", "max_change", "violated_before",
                   "violated_after", "objective_value", "lower_bound", "optimal", "seconds", "left_out_taxa"]
#: ../shared/CONTRACT.md, impact --json (the last two with --truth).
CONTRACT_IMPACT = ["rf", "rf_normalized", "branch_score", "splits_only_before", "splits_only_after",
                   "negative_branches_before", "negative_branches_after", "n_compared", "left_out_taxa"]
CONTRACT_IMPACT_TRUTH = ["rf_to_truth_before", "rf_to_truth_after"]

#: repair --json before the report was typed (commit b4e0b6b: engine.build_report, then run), without
#: the keys written only sometimes (violated_after_by, violated_before_leaving_out, leave_out_*).
REPAIR_ORDER = ["objective", "changed_entries", "l1_change", "l2_change", "max_change", "violated_before",
                "violated_after", "triangles", "checked_triangles_before", "objective_value", "lower_bound",
                "optimal", "seconds", "n", "entries", "observed_entries", "increased_entries", "decreased_entries",
                "filled_entries", "filled_by_path", "filled_without_evidence", "weighted_l1_change",
                "max_violation_before", "gap", "relative_gap", "tol", "time_limit", "locked_entries",
                "free_entries", "weights", "observed_groups", "between_groups_value", "seed", "details", "note",
                "n_input", "left_out_taxa", "left_out_reasons", "unmeasured_taxa", "kept_unmeasured", "leave_out"]
#: impact --json before the report was typed (commit b4e0b6b: compare.impact), with --truth.
IMPACT_ORDER = ["n", "n_compared", "left_out_taxa", "left_out_reasons", "n_tree_before", "n_tree_after", "method",
                "tol", "rf", "rf_normalized", "rf_max", "branch_score", "shared_splits", "splits_before",
                "splits_after", "splits_only_before", "splits_only_after", "negative_branches_before",
                "negative_branches_after", "clamped_branches_before", "clamped_branches_after",
                "tree_length_before", "tree_length_after", "cophenetic_before", "cophenetic_after",
                "violated_triangles_before", "violated_triangles_after", "max_violation_before",
                "max_violation_after", "triangles", "dropped_taxa", "dropped_taxa_after", "n_shared", "entries",
                "entries_measured", "entries_changed", "entries_increased", "entries_decreased", "entries_filled",
                "l1_change", "max_change", "largest_changes", "rf_to_truth_before", "rf_to_truth_after",
                "rf_to_truth_normalized_before", "rf_to_truth_normalized_after", "branch_score_to_truth_before",
                "branch_score_to_truth_after", "caution"]

RECORDS = [repair_result.RepairReport, impact_result.ImpactReport, impact_result.EntryChange,
           impact_result.SplitSupport, impact_result.BootstrapSupport, impact_result.RemedyRow,
           impact_result.RemedyTable]


def as_json(obj) -> str:
    """Exactly what OutputSet.add_json writes."""
    from seqdist.io.matrices import to_jsonable

    return json.dumps(to_jsonable(obj), indent=2, allow_nan=False) + "\n"


def documented(cls) -> list[tuple[str, str]]:
    """(name, description) of each entry of the numpydoc Attributes section."""
    lines = inspect.getdoc(cls).splitlines()
    start = lines.index("Attributes") + 2
    out = []
    for line in lines[start:]:
        if line in ("Examples", "Notes"):
            break
        m = re.match(r"^(\w+) : \S", line)
        if m:
            out.append([m.group(1), ""])
        elif line.startswith("    ") and out:
            out[-1][1] += line.strip() + " "
    return [(name, text.strip()) for name, text in out]


@pytest.mark.parametrize("cls", RECORDS, ids=lambda c: c.__name__)
def test_every_field_is_documented_in_order(cls):
    names = [f.name for f in dataclasses.fields(cls)]
    docs = documented(cls)
    assert [name for name, _ in docs] == names
    assert all(len(text) > 10 for _, text in docs), [name for name, text in docs if len(text) <= 10]


@pytest.fixture(scope="module")
def small():
    """A 6-taxon matrix with one broken triangle (a -- c too long)."""
    from seqdist.core.matrix import DistanceMatrix

    D = np.array([[0, 3, 9, 6, 7, 8], [3, 0, 5, 7, 8, 9], [9, 5, 0, 4, 5, 6], [6, 7, 4, 0, 3, 4],
                  [7, 8, 5, 3, 0, 3], [8, 9, 6, 4, 3, 0.]])
    return DistanceMatrix.from_array(D, list("abcdef"))


def test_repair_report_keys_are_the_contracts_in_the_old_order(small):
    from seqdist.repair import repair

    rep = repair(small, "l1", progress=False).report
    d = rep.to_dict()
    assert list(d) == REPAIR_ORDER
    assert set(CONTRACT_REPAIR) <= set(d)
    assert (d["changed_entries"], d["optimal"], d["left_out_taxa"]) == (rep.changed_entries, True, [])
    # the keys written only sometimes: absent here, present with leave_out="fewest", in the old places
    fewer = repair(small, "shrink", leave_out="fewest", progress=False).report.to_dict()
    assert list(fewer) == REPAIR_ORDER + ["violated_before_leaving_out", "leave_out_lower_bound",
                                          "leave_out_optimal", "leave_out_details"]
    assert fewer["leave_out_optimal"] is True and fewer["left_out_taxa"] == ["a"]


def test_repair_report_optional_key_above_1000_taxa_in_its_place(small):
    from seqdist.repair import repair

    rep = dataclasses.replace(repair(small, "shrink", progress=False).report,
                              violated_after_by="verified metric (every triangle within tol)")
    keys = list(rep.to_dict())
    assert keys[keys.index("note") + 1] == "violated_after_by"


def test_impact_report_keys_and_the_truth_group(small):
    from seqdist.impact import impact
    from seqdist.io.newick import read_newick
    from seqdist.repair import repair

    fixed = repair(small, "shrink", progress=False).matrix
    plain = impact(small, fixed).report.to_dict()
    assert list(plain) == [k for k in IMPACT_ORDER if "truth" not in k]
    assert set(CONTRACT_IMPACT) <= set(plain)
    with_lengths = impact(small, fixed, truth=read_newick("((a,b):1,c:1,(d,(e,f):1):1);")).report
    assert list(with_lengths.to_dict()) == IMPACT_ORDER and set(CONTRACT_IMPACT_TRUTH) <= set(IMPACT_ORDER)
    # a reference tree without branch lengths: the branch-score keys are written as null, not left out
    bare = impact(small, fixed, truth=read_newick("((a,b),c,(d,(e,f)));")).report
    d = bare.to_dict()
    assert list(d) == IMPACT_ORDER and d["branch_score_to_truth_before"] is None
    assert bare.has_truth and impact_result.ImpactReport.from_dict(d).to_dict() == d


def test_to_dict_is_a_copy(small):
    from seqdist.repair import repair

    rep = repair(small, "shrink", leave_out=["f"], progress=False).report
    d = rep.to_dict()
    d["left_out_taxa"].append("x")
    d["details"]["method"] = "changed"
    assert rep.left_out_taxa == ["f"] and rep.details["method"] != "changed"


def test_unknown_or_missing_keys_are_refused(small):
    from seqdist.repair import repair

    d = repair(small, "shrink", progress=False).report.to_dict()
    with pytest.raises(ValueError, match="unknown key 'chnaged_entries'"):
        repair_result.RepairReport.from_dict({**d, "chnaged_entries": 1})
    del d["changed_entries"]
    with pytest.raises(ValueError, match="key 'changed_entries' is missing"):
        repair_result.RepairReport.from_dict(d)


def test_reprs_are_short(small):
    from seqdist.impact import impact
    from seqdist.repair import repair

    r = repair(small, "shrink", progress=False)
    for obj in (r.report, impact(small, r.matrix).report):
        assert len(repr(obj)) < 200 and "\n" not in repr(obj)


def test_repair_json_round_trip_gives_the_same_bytes(tmp_path, small):
    from seqdist.io.matrices import write_matrix

    m = tmp_path / "m.tsv"
    write_matrix(str(m), small)
    for k, args in enumerate((["--objective", "fewest", "--leave-out-fewest"], ["--objective", "l2"])):
        js = tmp_path / f"r{k}.json"
        p = run_cli("repair", m, "-o", tmp_path / f"o{k}.tsv", "--json", js, *args)
        assert p.returncode == 0, p.stderr
        text = js.read_text()
        doc = json.loads(text)
        source = doc.pop("input")  # added by the command line, not a field of the report
        again = repair_result.RepairReport.from_dict(doc)
        assert as_json({**again.to_dict(), "input": source}) == text


@pytest.fixture(scope="module")
def job(tmp_path_factory):
    """seqdist run on the demo data with truth, the suspects kept (so entries change; the remedies
    compared) and 2 bootstrap replicates."""
    from seqdist.pipeline import run_job

    out = tmp_path_factory.mktemp("job")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the suspects and unmeasured taxa are named in warnings
        return run_job(os.path.join(EXAMPLES, "dna_trouble.fasta"), str(out), keep_suspects=True, bootstrap=2,
                       workers=1, progress=False)


def test_job_result_holds_the_typed_results_its_files_are_made_from(job):
    from seqdist.audit.report import AuditReport
    from seqdist.impact.compare import ImpactResult
    from seqdist.models.distances import DistanceResult
    from seqdist.pipeline import FILES, split_times
    from seqdist.repair.engine import RepairResult

    assert isinstance(job.distances, DistanceResult) and isinstance(job.audit, AuditReport)
    assert isinstance(job.repair, RepairResult) and isinstance(job.impact, ImpactResult)

    def text(key):
        with open(job.files[key]) as f:
            return f.read()

    assert as_json(split_times(job.repair.report.to_dict())[0] | {"input": FILES["distances"]}) == text("repair_json")
    assert as_json(split_times(job.impact.report.to_dict())[0]) == text("impact_json")
    assert as_json(split_times(job.audit.to_dict())[0]) == text("audit_json")
    assert as_json(job.distances.summary()) == text("distances_json")
    assert len(repr(job)) < 200


def test_impact_json_round_trip_gives_the_same_bytes(job):
    # the run's impact.json holds every nested record: largest changes, remedies, bootstrap support
    with open(job.files["impact_json"]) as f:
        text = f.read()
    doc = json.loads(text)
    assert {"remedies", "support", "largest_changes", "rf_to_truth_before"} <= set(doc)
    again = impact_result.ImpactReport.from_dict(doc)
    assert isinstance(again.remedies, impact_result.RemedyTable)
    assert isinstance(again.support.splits[0], impact_result.SplitSupport)
    assert isinstance(again.largest_changes[0], impact_result.EntryChange)
    assert again.remedies.chosen == "repaired, suspects kept"
    assert as_json(again.to_dict()) == text
