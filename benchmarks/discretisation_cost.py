"""Extra cost of the default discretisation-error estimate against a plain run.

Usage::

    python benchmarks/discretisation_cost.py                 # the demo mesa at ~100k unknowns
    python benchmarks/discretisation_cost.py --sizes 1e6     # chosen sizes
    python benchmarks/discretisation_cost.py --tiny          # a quick check (seconds)

The case is ``cases/sige_stressor_mesa.toml`` with trilinear elements and ``mesh.refine``
chosen for the requested unknowns. Each size runs the standard providers once with
``mesh.error_estimate = true``; the plain run is everything but the estimate. Columns:

unknowns         of the run
run s            wall time of the whole run (mesh, assembly, solve, recovery, every provider)
plain s          run s minus the estimate
energy s         the recovery-based energy-norm integration over every element
coarse s         the extra solve with element sizes x2 (mesh, solve, readouts) and its unknowns
bow s            the coarsened plate model of the wafer bow
extra %          estimate / plain run
eta %            the global relative energy-norm error
"""

from __future__ import annotations

import argparse
import dataclasses
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from common import demo_case, refine_for  # noqa: E402


def one(target: float, order: int) -> dict:
    from mesastrain.derived import solve_and_derive

    case = demo_case(order, refine_for(int(target), order))
    case = dataclasses.replace(case, mesh=dataclasses.replace(case.mesh, error_estimate=True))
    t = time.perf_counter()
    res = solve_and_derive(case)
    total = time.perf_counter() - t
    de = next(d.summary["discretisation_error"] for d in res.derived
              if "discretisation_error" in d.summary)
    cs = de["coarse_solve"]
    return {"unknowns": int(res.u.size), "total": total, "estimate": de["seconds"],
            "energy": de["energy_norm"]["seconds"], "coarse": cs["seconds"],
            "coarse_unknowns": cs["unknowns"], "bow": cs["bow_seconds"],
            "eta": de["energy_norm"]["relative"]}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=float, nargs="*", default=[1e5])
    ap.add_argument("--order", type=int, default=1)
    ap.add_argument("--tiny", action="store_true", help="one small size (a quick check)")
    args = ap.parse_args(argv)
    sizes = [8e3] if args.tiny else args.sizes
    print(f"{'unknowns':>10}{'run s':>9}{'plain s':>9}{'energy s':>10}{'coarse s':>10}"
          f"{'(unknowns)':>12}{'bow s':>7}{'extra %':>9}{'eta %':>7}")
    for n in sizes:
        r = one(n, args.order)
        plain = r["total"] - r["estimate"]
        print(f"{r['unknowns']:>10,}{r['total']:>9.1f}{plain:>9.1f}{r['energy']:>10.1f}"
              f"{r['coarse']:>10.1f}{r['coarse_unknowns']:>12,}{r['bow']:>7.2f}"
              f"{100 * r['estimate'] / plain:>9.0f}{100 * r['eta']:>7.1f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
