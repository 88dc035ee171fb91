"""Extra cost of the material-data scatter ([uncertainty], default groups) on the demo mesa.

Usage::

    python benchmarks/uncertainty_cost.py                    # about 100k and 1M unknowns
    python benchmarks/uncertainty_cost.py --sizes 100e3      # chosen sizes
    python benchmarks/uncertainty_cost.py --tiny             # a quick check (seconds)

For each size the demo case (``cases/sige_stressor_mesa.toml``, trilinear
elements, ``mesh.refine`` chosen for the size) is run twice, each in its own
process: a plain run (``[uncertainty] enabled = false``) and the default run
(enabled, default groups). Both compute every standard derived quantity
(:data:`mesastrain.derived.PROVIDERS`), as ``mesastrain run`` does, without
writing a folder. Columns:

unknowns
    of the solved (quarter) model
plain s, default s
    wall time of run_case with the providers (mesh to headline figures)
ratio
    default / plain (the design target is at most 2)
groups
    constant groups varied (one extra right-hand side each)
solves s
    the extra right-hand sides (assembly of dK/dt, dF/dt and the solves)
figures s
    re-evaluating the headline figures on the varied states
peak GB plain / default
    peak resident memory of each process

Other processes on the machine change the timings; run it on an idle machine.
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from common import demo_case, peak_rss_gb, refine_for, run_child  # noqa: E402

SCRIPT = Path(__file__).resolve()
DEFAULT_SIZES = (100e3, 1e6)


def child(refine: float, enabled: bool) -> dict:
    from mesastrain.derived import PROVIDERS
    from mesastrain.run.pipeline import run_case

    case = demo_case(1, refine)
    case = dataclasses.replace(case, uncertainty=dataclasses.replace(case.uncertainty,
                                                                     enabled=enabled))
    t = time.perf_counter()
    res = run_case(case, providers=PROVIDERS)
    total = time.perf_counter() - t
    summary = {}
    for d in res.derived:
        summary.update(d.summary)
    ms = summary.get("material_scatter") or {}
    centre = next((f for f in summary["headline"] if f["name"].endswith("centre sxx")), None)
    return {"unknowns": res.solver.unknowns, "seconds": total, "peak_gb": peak_rss_gb(),
            "timings": res.timings, "groups": list(ms.get("groups", {})),
            "solves_s": (ms.get("seconds") or {}).get("solves", 0.0),
            "figures_s": (ms.get("seconds") or {}).get("figures", 0.0),
            "centre": centre}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", type=float, nargs="*", default=DEFAULT_SIZES)
    ap.add_argument("--tiny", action="store_true", help="one small size, for a quick check")
    ap.add_argument("--json", type=Path, help="also write the rows here")
    ap.add_argument("--child", nargs=2, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child:
        print(json.dumps(child(float(args.child[0]), args.child[1] == "on"), default=float))
        return 0
    sizes = (8e3,) if args.tiny else args.sizes
    rows = []
    print(f"{'unknowns':>10} {'plain s':>8} {'default s':>10} {'ratio':>6} {'groups':>6} "
          f"{'solves s':>9} {'figures s':>10} {'peak GB':>15}")
    for n in sizes:
        refine = refine_for(int(n))
        plain = run_child(SCRIPT, ["--child", refine, "off"])
        full = run_child(SCRIPT, ["--child", refine, "on"])
        row = {"target": n, "refine": refine, "plain": plain, "default": full}
        rows.append(row)
        if "error" in plain or "error" in full:
            print(f"{int(n):>10} failed: {plain.get('error') or full.get('error')}")
            continue
        ratio = full["seconds"] / plain["seconds"]
        row["ratio"] = ratio
        print(f"{plain['unknowns']:>10,} {plain['seconds']:>8.1f} {full['seconds']:>10.1f} "
              f"{ratio:>6.2f} {len(full['groups']):>6} {full['solves_s']:>9.1f} "
              f"{full['figures_s']:>10.1f} {plain['peak_gb']:>7.2f}/{full['peak_gb']:<7.2f}")
        c = (full.get("centre") or {}).get("material_scatter")
        if c:
            print(f"{'':>10} centre sxx {full['centre']['value']:.0f} +- {c['error']:.0f} MPa "
                  f"(mostly {c['dominant']}); groups: {', '.join(full['groups'])}")
    if args.json:
        args.json.write_text(json.dumps({"rows": rows}, indent=1, default=float))
    return 0


if __name__ == "__main__":
    sys.exit(main())
