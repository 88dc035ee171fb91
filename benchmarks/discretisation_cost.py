"""Extra cost of the default discretisation-error estimate against a plain run.

Usage::

    python benchmarks/discretisation_cost.py                 # the demo mesa, ~100k solved unknowns
    python benchmarks/discretisation_cost.py --sizes 1e6     # chosen sizes
    python benchmarks/discretisation_cost.py --tiny          # a quick check (seconds)

The case is ``cases/sige_stressor_mesa.toml`` (a quarter model) with trilinear elements and
``mesh.refine`` chosen for the requested solved unknowns. The plain run is the standard run
(every provider) with ``mesh.error_estimate = false``; then the three parts of the estimate
are timed on its result. Times are CPU seconds of this process (``time.process_time``, all
threads), which a busy machine disturbs less than wall time; wall seconds in brackets.

solved       unknowns of the solved (quarter) model; whole = after unfolding
plain        the plain run
energy       the recovery-based energy norm (solved part of a mirrored model only)
coarse       the extra solve with element sizes x2 (mesh, assembly, solve, readouts)
bow          the wafer-bow plate model with half the elements through the substrate
extra %      (energy + coarse + bow) / plain
"""

from __future__ import annotations

import argparse
import dataclasses
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from common import demo_case, refine_for  # noqa: E402


def timed(fn, *args):
    w, c = time.perf_counter(), time.process_time()
    out = fn(*args)
    return out, time.process_time() - c, time.perf_counter() - w


def one(target: float, order: int) -> dict:
    from mesastrain.derived import discretisation as disc
    from mesastrain.derived import solve_and_derive

    case = demo_case(order, refine_for(int(target), order))
    case = dataclasses.replace(case, mesh=dataclasses.replace(case.mesh, error_estimate=False))
    res, plain, plain_w = timed(solve_and_derive, case)
    en, energy, energy_w = timed(disc.energy_norm, res)
    (_, _, info), coarse, coarse_w = timed(disc._coarse_values, res, disc.COARSENING)
    _, bow, bow_w = timed(disc._bow_values, res)
    return {"solved": int(res.solver.unknowns), "whole": int(res.u.size),
            "plain": (plain, plain_w), "energy": (energy, energy_w),
            "coarse": (coarse, coarse_w), "coarse_unknowns": info["unknowns"],
            "bow": (bow, bow_w), "eta": en["relative"]}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=float, nargs="*", default=[1e5])
    ap.add_argument("--order", type=int, default=1)
    ap.add_argument("--tiny", action="store_true", help="one small size (a quick check)")
    args = ap.parse_args(argv)
    sizes = [5e3] if args.tiny else args.sizes
    print("CPU seconds [wall seconds]")
    print(f"{'solved':>9}{'whole':>10}{'plain':>16}{'energy':>14}{'coarse':>14}{'(unknowns)':>11}"
          f"{'bow':>13}{'extra %':>9}{'eta %':>7}")

    def cw(x):
        return f"{x[0]:.1f} [{x[1]:.0f}]"

    for n in sizes:
        r = one(n, args.order)
        extra = r["energy"][0] + r["coarse"][0] + r["bow"][0]
        print(f"{r['solved']:>9,}{r['whole']:>10,}{cw(r['plain']):>16}{cw(r['energy']):>14}"
              f"{cw(r['coarse']):>14}{r['coarse_unknowns']:>11,}{cw(r['bow']):>13}"
              f"{100 * extra / r['plain'][0]:>9.0f}{100 * r['eta']:>7.1f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
