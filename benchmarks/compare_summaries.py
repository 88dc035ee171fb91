"""Compare the numbers in two sets of result folders (``summary.json``), leaf by leaf.

Used to show that a restructuring or a speed change leaves every result unchanged:

    python benchmarks/compare_summaries.py OLD_DIR NEW_DIR [--rtol 1e-6] [--atol 1e-9]

OLD_DIR and NEW_DIR each hold one result folder per case (as written by
``mesastrain run CASE --out DIR/<case name>``). Timings (``*_seconds``), versions,
paths and other run-dependent entries are skipped. Prints a table, one row per case:
the number of numeric values compared, the largest relative difference and where
it is; exits 1 if any value differs by more than the tolerances (or a key is
missing on one side).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

#: Keys whose values depend on the run, not on the physics.
SKIP = {"timings", "program", "seconds", "elapsed", "wall_seconds", "started", "finished",
        "host", "path", "source_file", "case_file", "version", "estimate", "setup_time",
        "solve_time"}


def leaves(obj, path=""):
    """(path, value) of every leaf of a JSON document."""
    if isinstance(obj, dict):
        for k, v in obj.items():
            if k in SKIP or k.endswith("_seconds"):
                continue
            yield from leaves(v, f"{path}.{k}" if path else k)
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            yield from leaves(v, f"{path}[{i}]")
    else:
        yield path, obj


def compare(old: dict, new: dict, rtol: float, atol: float):
    """(count, worst relative difference, its path, list of problems)."""
    a, b = dict(leaves(old)), dict(leaves(new))
    problems = [f"missing in new: {k}" for k in a.keys() - b.keys()]
    problems += [f"new only: {k}" for k in b.keys() - a.keys()]
    worst, where, count = 0.0, "", 0
    for k in sorted(a.keys() & b.keys()):
        x, y = a[k], b[k]
        if isinstance(x, bool) or isinstance(y, bool) or not (
                isinstance(x, (int, float)) and isinstance(y, (int, float))):
            if x != y:
                problems.append(f"{k}: {x!r} -> {y!r}")
            continue
        count += 1
        if math.isnan(x) and math.isnan(y):
            continue
        diff = abs(x - y)
        rel = diff / max(abs(x), abs(y), 1e-300)
        if diff > atol and rel > worst:
            worst, where = rel, k
        if diff > atol + rtol * max(abs(x), abs(y)):
            problems.append(f"{k}: {x!r} -> {y!r} (rel {rel:.2e})")
    return count, worst, where, problems


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("old", type=Path)
    p.add_argument("new", type=Path)
    p.add_argument("--rtol", type=float, default=1e-6)
    p.add_argument("--atol", type=float, default=1e-9)
    args = p.parse_args(argv)
    bad = 0
    print("| case | values compared | largest relative difference | where | verdict |")
    print("|---|---|---|---|---|")
    for folder in sorted(d for d in args.old.iterdir() if (d / "summary.json").exists()):
        other = args.new / folder.name / "summary.json"
        if not other.exists():
            print(f"| {folder.name} | - | - | no new result | FAIL |")
            bad += 1
            continue
        old = json.loads((folder / "summary.json").read_text())
        new = json.loads(other.read_text())
        count, worst, where, problems = compare(old, new, args.rtol, args.atol)
        verdict = "same" if not problems else f"FAIL ({len(problems)})"
        bad += bool(problems)
        print(f"| {folder.name} | {count} | {worst:.1e} | {where or '-'} | {verdict} |")
        for line in problems[:10]:
            print(f"    {line}", file=sys.stderr)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
