"""Predicted (``mesastrain check``) versus measured (``mesastrain run``) time and peak memory.

Each case runs end to end in its own process (see ``tet_scaling.child``); the
child reports its wall time and its peak resident memory (VmHWM, the same number
``resource.getrusage(RUSAGE_SELF).ru_maxrss`` gives without the parent's share).
Targets (issue 16): time within a factor 1.5, memory within 1.3.

    python benchmarks/estimate_accuracy.py

Cases: the L-shaped pad on quadratic tetrahedra at three sizes and on linear
tetrahedra at one, the structured demo mesa at two refinements, the line-grating
cross-section. State the machine load when quoting the numbers.
"""

from __future__ import annotations

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


CASES = [
    ("L pad P2, size 19 nm", lambda: case_text(19.0)),
    ("L pad P2, size 11 nm", lambda: case_text(11.0)),
    ("L pad P2, size 6.8 nm", lambda: case_text(6.8)),
    ("L pad P1, size 6 nm", lambda: case_text(6.0, order=1)),
    ("structured demo mesa", lambda: refined(ROOT / "cases" / "sige_stressor_mesa.toml", 1.0)),
    ("structured demo mesa x2", lambda: refined(ROOT / "cases" / "sige_stressor_mesa.toml", 2.0)),
    ("section: line grating", lambda: (ROOT / "cases" / "sige_line_grating.toml").read_text()),
]


def main(names: list[str]) -> None:
    print(f"load average before: {os.getloadavg()}")
    print("| case | unknowns | check s | run s | ratio | check GB | peak GB | ratio |\n"
          "|---|---|---|---|---|---|---|---|")
    for label, make in CASES:
        if names and not any(n in label for n in names):
            continue
        r = measure(make())
        if "error" in r:
            print(f"| {label} | {r['error']} |", flush=True)
            continue
        print(f"| {label} | {r['unknowns']:,} | {r['est_s']:.1f} | {r['wall']:.1f} | "
              f"{r['est_s'] / r['wall']:.2f} | {r['est_gb']:.2f} | {r['peak_gb']:.2f} | "
              f"{r['est_gb'] / r['peak_gb']:.2f} |", flush=True)
    print(f"load average after: {os.getloadavg()}")


if __name__ == "__main__":
    main(sys.argv[1:])
