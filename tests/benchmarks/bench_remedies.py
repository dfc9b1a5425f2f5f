#!/usr/bin/env python
"""The remedy study of issue 15: which remedy for bad sequences gives the tree closest to the truth.

For every scenario (clean, chimera, gappy, misread, contaminant, saturated)
and replicate, simulates 32 taxa x 1,000 columns under K80, computes K80
distances, applies every remedy (no repair, each repair objective with and
without inverse-variance weights, leaving taxa out by the audit, by the
suspects, by the fewest-taxa rule, and the planted taxa as an oracle),
builds NJ and BIONJ trees and scores each against the true tree with
dendropy's Robinson-Foulds distance, normalised by 2(n - 3) on the taxa the
tree holds. Prints one markdown table per tree method (rows: remedies;
columns: scenarios; cells: mean normalised RF; with --detail also the
replicates better/worse than no repair and the two-sided sign-test p), the
same on the taxa not planted (every tree pruned to them: does the remedy
protect the rest of the tree?), the suspect table and the issue's targets. The functions are in
remedy_study.py beside this file;
docs/remedies.md has the results and what they say.

Seeded and deterministic: the tables and the --json file depend only on the
options (not on --processes); run times go to standard error only.

Usage:
  python tests/benchmarks/bench_remedies.py [--replicates 12] [--scenarios clean,chimera,...]
      [--seed 1] [--processes N] [--quick] [--detail] [--json FILE] [--alpha A]
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

import remedy_study as rs  # noqa: E402


def _list(choices):
    def parse(text: str) -> list:
        items = [x.strip() for x in text.split(",") if x.strip()]
        bad = [x for x in items if x not in choices]
        if bad or not items:
            raise argparse.ArgumentTypeError(f"expected a comma-separated list from {', '.join(choices)}; "
                                             f"got '{text}'")
        return items
    return parse


def _positive_int(text: str) -> int:
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected an integer, got '{text}'") from None
    if v < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {v}")
    return v


def _setting(text: str):
    key, sep, value = text.partition("=")
    if not sep or key not in rs.SETTINGS:
        raise argparse.ArgumentTypeError(f"expected KEY=VALUE with KEY one of {', '.join(rs.SETTINGS)}; got '{text}'")
    try:
        parsed = json.loads(value)
    except ValueError:
        parsed = value
    return key, parsed


def targets(records: list, methods) -> list:
    """The issue's targets that these records can check, as (text, measured, met) rows."""
    import numpy as np

    out = []
    by = {s: [r for r in records if r["scenario"] == s] for s in rs.SCENARIOS}
    have = [r for r in records if "rank" in r.get("suspects", {})]
    if have:
        for s in rs.SUSPECT_TARGET_SCENARIOS:
            if by[s]:
                f = float(np.mean([r["suspects"]["planted_in_top3"] for r in by[s]]))
                out.append((f"{s}: all planted taxa in the top 3 of suspect_taxa in >= 80% of replicates",
                            f"{f:.0%}", f >= 0.8))
        if by["clean"]:
            f = float(np.mean([not r["suspects"]["suspect_taxa"] for r in by["clean"]]))
            out.append(("clean: suspect_taxa empty in >= 90% of replicates", f"{f:.0%}", f >= 0.9))
    for m in methods:
        tab = rs.table(records, m)
        for s in ("chimera", "contaminant"):
            a = tab.get("leave_out_suspects", {}).get(s)
            b = tab.get("leave_out_planted", {}).get(s)
            if a and b:
                d = a["mean"] - b["mean"]
                out.append((f"{m} {s}: leaving the suspects out within 0.02 of leaving the planted taxa out",
                            f"{a['mean']:.3f} vs {b['mean']:.3f} ({d:+.3f})", d <= 0.02))
        # run's default against no repair: the mean, scenario by scenario, on the taxa each tree keeps
        # and on the taxa not planted (like for like)
        for label, t in (("", tab), (", on the taxa not planted", rs.table(records, m, core=True))):
            a, b = t.get("run_default", {}), t.get("none", {})
            shared = [s for s in rs.SCENARIOS if a.get(s) and b.get(s)]
            if shared:
                worse = [s for s in shared if a[s]["mean"] > b[s]["mean"] + 1e-12]
                out.append((f"{m}: run's default never worse than no repair on average in any scenario{label}",
                            "worse in " + ", ".join(f"{s} ({a[s]['mean']:.3f} vs {b[s]['mean']:.3f})"
                                                    for s in worse) if worse else "never worse", not worse))
                if "saturated" in shared:
                    x, y = a["saturated"]["mean"], b["saturated"]["mean"]
                    out.append((f"{m}: run's default better than no repair under saturation{label}",
                                f"{x:.3f} vs {y:.3f}", x < y))
    return out


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--replicates", type=_positive_int, default=12, help="replicates per scenario (default 12)")
    p.add_argument("--scenarios", type=_list(rs.SCENARIOS), default=list(rs.SCENARIOS),
                   help="comma-separated (default: all)")
    p.add_argument("--remedies", type=_list(tuple(rs.REMEDIES)), default=None, help="comma-separated (default: all)")
    p.add_argument("--methods", type=_list(rs.METHODS), default=list(rs.METHODS), help="default: nj,bionj")
    p.add_argument("--seed", type=int, default=1, help="study seed (default 1)")
    p.add_argument("--processes", type=_positive_int, default=1,
                   help="replicates run in this many processes (results do not depend on it)")
    p.add_argument("--alpha", type=float, default=None,
                   help="gamma shape of rate variation, in the simulation and the K80 distance (default: none)")
    p.add_argument("--suspect-replicates", type=int, default=0,
                   help="bootstrap replicates passed to find_suspects (default 0)")
    p.add_argument("--set", type=_setting, action="append", default=[], metavar="KEY=VALUE",
                   help="override a simulation setting (e.g. saturate_length=2.0); repeatable")
    p.add_argument("--quick", action="store_true", help="3 replicates per scenario (a smoke run)")
    p.add_argument("--detail", action="store_true", help="cells add better/worse than none and the sign-test p")
    p.add_argument("--json", metavar="FILE", default=None, help="write every replicate's record as JSON")
    args = p.parse_args(argv)
    if not 0 <= args.seed <= 2**32 - 1:
        p.error(f"--seed must be from 0 to {2**32 - 1}")
    reps = 3 if args.quick else args.replicates

    total = len(args.scenarios) * reps
    t0 = time.perf_counter()

    def progress(done, n):
        print(f"\r{done}/{n} replicates, {time.perf_counter() - t0:.0f} s", end="", file=sys.stderr, flush=True)

    overrides = dict(args.set)
    records = rs.run_study(args.scenarios, reps, args.seed, args.processes, args.alpha, args.remedies,
                           args.methods, args.suspect_replicates, settings=overrides, progress=progress)
    seconds = time.perf_counter() - t0
    print(f"\r{total} replicates in {seconds:.1f} s ({args.processes} process"
          f"{'es' if args.processes > 1 else ''})", file=sys.stderr)

    settings = dict(rs.SETTINGS, **overrides)
    if args.alpha is not None:
        settings["alpha"] = args.alpha
    settings.update(seed=args.seed, replicates=reps, suspect_replicates=args.suspect_replicates)
    ver = rs.versions()
    print("# Remedy study (issue 15)\n")
    print("settings: " + ", ".join(f"{k} {v}" for k, v in settings.items()))
    print("versions: " + ", ".join(f"{k} {v}" for k, v in ver.items()))
    rng = rs.undefined_range(records)
    if rng:
        print(f"saturated: {rng[0]}-{rng[1]} undefined K80 pairs per replicate")
    for method in args.methods:
        print(f"\n## {method.upper()}: mean normalised Robinson-Foulds distance to the true tree\n")
        print(rs.markdown_table(records, method, args.detail))
    print("\nLeave-out rows are scored on the taxa left; 'mean' is over the scenarios shown."
          + (" Cells: mean (replicates better/worse than none, two-sided sign-test p)." if args.detail else ""))
    for method in args.methods:
        print(f"\n## {method.upper()}, scored on the taxa not planted (every tree pruned to them)\n")
        print(rs.markdown_table(records, method, args.detail, core=True))
    print("\n## Planted taxa among the suspects (with the alignment, as run has it)\n")
    print(rs.suspect_table(records))
    print("\n## Planted taxa among the suspects from the matrix alone (as repair and audit have it)\n")
    print(rs.suspect_table(records, "suspects_matrix"))
    checks = targets(records, args.methods)
    if checks:
        print("\n## Targets of issue 15\n")
        print("| target | measured | met |\n| --- | --- | --- |")
        for text, value, met in checks:
            print(f"| {text} | {value} | {'yes' if met else 'no'} |")
    notes = rs.skipped_notes(records)
    if notes:
        print("\nskipped: " + "; ".join(f"{k}: {v}" for k, v in notes.items()))
    print("\nremedies: " + "; ".join(f"{k}: {v}" for k, v in rs.DESCRIPTIONS.items()
                                      if args.remedies is None or k in args.remedies))
    if args.json:
        sys.path.insert(0, rs.ROOT)
        from seqdist.io.matrices import OutputSet

        doc = {"settings": settings, "versions": ver, "skipped": notes, "records": records,
               "tables": {m: rs.table(records, m) for m in args.methods},
               "tables_not_planted": {m: rs.table(records, m, core=True) for m in args.methods}}
        with OutputSet() as out:
            out.add_text(args.json, json.dumps(doc, indent=1, sort_keys=False) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
