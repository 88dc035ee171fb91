"""Predicted (``mesastrain check``) versus measured (``mesastrain run``) time and peak memory.

Each case runs end to end in its own process (see ``tet_scaling.child``); the
child reports its wall time and its peak resident memory (VmHWM, the same number
``resource.getrusage(RUSAGE_SELF).ru_maxrss`` gives without the parent's share).
Targets (issue 16): time within a factor 1.5, memory within 1.3.

    python benchmarks/estimate_accuracy.py             # 10k-300k unknowns
    python benchmarks/estimate_accuracy.py --large     # the two cases of about 1M
    python benchmarks/estimate_accuracy.py --all --json rows.json

Cases: the structured demo mesa (quarter model) at four refinements, the
line-grating cross-section at two, the L-shaped pad on quadratic tetrahedra at
three sizes and on linear tetrahedra at one. *solved unknowns* are those of
the system solved (the mirrored part); *cpu s* is the CPU time of the run (all
threads), steadier than the wall time when other jobs share the machine. State
the machine load when quoting the numbers.
"""

from __future__ import annotations

import json
import os
import re
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from common import ROOT  # noqa: E402
from tet_scaling import case_text, measure  # noqa: E402


def refined(path: Path, refine: float) -> str:
    """A case file with ``mesh.refine`` set (added to its [mesh] table)."""
    text = path.read_text()
    text = re.sub(r"(?m)^refine\s*=.*$", "", text)
    if "[mesh]" in text:
        return text.replace("[mesh]", f"[mesh]\nrefine = {refine}", 1)
    return text + f"\n[mesh]\nrefine = {refine}\n"


DEMO_MESA = ROOT / "cases" / "sige_stressor_mesa.toml"
GRATING = ROOT / "cases" / "sige_line_grating.toml"

#: (label, case text, size class). Size classes: "s" small and medium (the default run),
#: "l" about a million unknowns (``--large``).
CASES = [
    ("structured mesa, refine 0.6", lambda: refined(DEMO_MESA, 0.6), "s"),
    ("structured mesa, refine 1", lambda: refined(DEMO_MESA, 1.0), "s"),
    ("structured mesa, refine 2", lambda: refined(DEMO_MESA, 2.0), "s"),
    ("structured mesa, refine 2.25", lambda: refined(DEMO_MESA, 2.25), "l"),
    ("section: line grating", lambda: GRATING.read_text(), "s"),
    ("section: line grating, refine 4", lambda: refined(GRATING, 4.0), "s"),
    ("L pad P2, size 19 nm", lambda: case_text(19.0), "s"),
    ("L pad P2, size 11 nm", lambda: case_text(11.0), "s"),
    ("L pad P1, size 6 nm", lambda: case_text(6.0, order=1), "s"),
    ("L pad P2, size 6 nm", lambda: case_text(6.0), "l"),
]


def main(argv: list[str]) -> None:
    large = "--large" in argv
    dump = None
    if "--json" in argv:
        dump = Path(argv[argv.index("--json") + 1])
        argv = [a for a in argv if a not in ("--json", str(dump))]
    names = [a for a in argv if not a.startswith("--")]
    print(f"load average before: {os.getloadavg()}")
    print("| case | solved unknowns | check s | run s | ratio | cpu s | check GB | peak GB | "
          "ratio |\n|---|---:|---:|---:|---:|---:|---:|---:|---:|")
    rows = []
    for label, make, size in CASES:
        if names and not any(n in label for n in names):
            continue
        if not names and (size == "l") != large and "--all" not in argv:
            continue
        r = measure(make())
        r["label"] = label
        rows.append(r)
        if "error" in r:
            print(f"| {label} | {r['error']} |", flush=True)
            continue
        print(f"| {label} | {r['solved']:,} | {r['est_s']:.1f} | {r['wall']:.1f} | "
              f"{r['est_s'] / r['wall']:.2f} | {r['cpu']:.1f} | {r['est_gb']:.2f} | "
              f"{r['peak_gb']:.2f} | {r['est_gb'] / r['peak_gb']:.2f} |", flush=True)
    print(f"load average after: {os.getloadavg()}")
    if dump:
        dump.write_text(json.dumps(rows, indent=1))


if __name__ == "__main__":
    main(sys.argv[1:])
