"""Time to accuracy on the demo mesa: trilinear versus 27-node elements.

Usage::

    python benchmarks/time_to_accuracy.py          # full ladder and a fine reference
    python benchmarks/time_to_accuracy.py --tiny   # a quick check (seconds)

For each element order the demo case (``cases/sige_stressor_mesa.toml``) is
solved on a ladder of uniform refinements (``mesh.refine``), each run in its own
process, and two stresses are compared with a much finer reference solution
(27-node elements on the finest mesh that fits):

* the film stress at the centre of the island, (0, 0, 15) nm, within 0.5 %;
* the stress at a 5 nm stand-off from the mesa edge, (295, 0, 15) nm, within 2 %.

The reference's own accuracy is shown by comparing it with the next coarser
27-node solution.

Errors are relative Frobenius norms of the stress tensor difference. The time
is what a user waits for: mesh + assembly + solve + recovery. The time to
accuracy of an order is the shortest run that meets both limits.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from common import demo_case, run_child, run_stages, unknowns_of  # noqa: E402

SCRIPT = Path(__file__).resolve()
POINTS = np.array([[0.0, 0.0, 15.0], [295.0, 0.0, 15.0]])
LIMITS = (0.005, 0.02)
LADDER = {1: (0.5, 0.7, 1.0, 1.4, 2.0), 2: (0.35, 0.5, 0.7, 1.0)}
REFERENCE = (2, 1.7)
REFERENCE_CHECK = (2, 1.4)
TINY_LADDER = {1: (0.4,), 2: (0.25,)}
TINY_REFERENCE = (2, 0.35)
TINY_REFERENCE_CHECK = (2, 0.3)


def child(order: int, refine: float) -> dict:
    r = run_stages(demo_case(order, refine), "auto", probes=POINTS)
    r["time_s"] = (r["mesh_s"] + r["assembly_s"] + r["solve_total_s"] + r["recovery_s"])
    return r


def errors(stress, ref) -> list:
    s, rf = np.asarray(stress), np.asarray(ref)
    return [float(np.linalg.norm(s[k] - rf[k]) / np.linalg.norm(rf[k])) for k in range(len(rf))]


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--tiny", action="store_true")
    p.add_argument("--json", help="also write the results to this file")
    p.add_argument("--child", type=int, help=argparse.SUPPRESS)
    p.add_argument("--refine", type=float, help=argparse.SUPPRESS)
    a = p.parse_args(argv)
    if a.child:
        print(json.dumps(child(a.child, a.refine)))
        return 0
    ladder = TINY_LADDER if a.tiny else LADDER
    ref_order, ref_refine = TINY_REFERENCE if a.tiny else REFERENCE
    print(f"reference: order {ref_order}, refine {ref_refine} "
          f"({unknowns_of(demo_case(ref_order, ref_refine)):,} unknowns)", flush=True)
    ref = run_child(SCRIPT, ["--child", ref_order, "--refine", ref_refine])
    if "error" in ref:
        print(f"reference failed: {ref['error']}")
        return 1
    sref = np.asarray(ref["probe_stress"])
    print(f"  centre sxx {sref[0][0][0]:.1f} MPa, stand-off sxx {sref[1][0][0]:.1f} "
          f"syy {sref[1][1][1]:.1f} szz {sref[1][2][2]:.1f} MPa; {ref['time_s']:.1f} s, "
          f"peak {ref['peak_gb']:.2f} GB", flush=True)
    chk_order, chk_refine = TINY_REFERENCE_CHECK if a.tiny else REFERENCE_CHECK
    chk = run_child(SCRIPT, ["--child", chk_order, "--refine", chk_refine])
    if "error" not in chk:
        e = errors(chk["probe_stress"], sref)
        print(f"  its own accuracy: order {chk_order}, refine {chk_refine} ({chk['unknowns']:,} "
              f"unknowns) differs by {100 * e[0]:.3f}% (centre) and {100 * e[1]:.3f}% "
              f"(stand-off)", flush=True)
        ref["check"] = {"order": chk_order, "refine": chk_refine, "errors": e,
                        "unknowns": chk["unknowns"]}
    head = (f"{'order':>5} {'refine':>6} {'unknowns':>10} {'time s':>7} {'centre err':>10} "
            f"{'edge err':>9}  ok")
    print(head)
    print("-" * len(head))
    results = {"reference": ref, "runs": [], "limits": LIMITS}
    best = {}
    for order, refines in ladder.items():
        for r in refines:
            row = run_child(SCRIPT, ["--child", order, "--refine", r])
            if "error" in row:
                print(f"{order:>5} {r:>6.2f} failed: {row['error']}")
                continue
            err = errors(row["probe_stress"], sref)
            ok = err[0] <= LIMITS[0] and err[1] <= LIMITS[1]
            row.update(order=order, refine=r, errors=err, ok=ok)
            results["runs"].append(row)
            print(f"{order:>5} {r:>6.2f} {row['unknowns']:>10,} {row['time_s']:>7.2f} "
                  f"{100 * err[0]:>9.3f}% {100 * err[1]:>8.3f}%  {'yes' if ok else 'no'}",
                  flush=True)
            if ok and (order not in best or row["time_s"] < best[order]["time_s"]):
                best[order] = row
    for order in ladder:
        if order in best:
            b = best[order]
            print(f"order {order}: centre within {100 * LIMITS[0]:g}% and stand-off within "
                  f"{100 * LIMITS[1]:g}% after {b['time_s']:.2f} s ({b['unknowns']:,} unknowns)")
        else:
            print(f"order {order}: accuracy not reached on the tested ladder")
    if len(best) == 2:
        fast = min(best, key=lambda o: best[o]["time_s"])
        print(f"faster to accuracy: order {fast}")
        results["faster_order"] = fast
    if a.json:
        Path(a.json).write_text(json.dumps(results, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
