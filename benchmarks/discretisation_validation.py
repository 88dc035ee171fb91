"""Effectivity of the per-figure discretisation error bars: estimate / error against a refined solve.

For a few small cases (a mesa on hexahedra of order 1, a stripe cross-section, a disk on
tetrahedra of order 2) the case is run with the error estimate, and again with every element
size divided by ``--reference`` (default 3) without it. The "true" error of each figure is
|f_h - f_ref| (the reference still carries its own, smaller error); the effectivity is the
estimate divided by it. Prints one row per figure kind: the median and range of the
effectivities, and the ratio of the estimates at refine 1 and refine 1.5 (it should shrink).

    PYTHONPATH=src python benchmarks/discretisation_validation.py [--reference 3] [--quick]
"""

from __future__ import annotations

import argparse
import dataclasses
import sys
import time
import tomllib
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from mesastrain.case.parse import parse_case  # noqa: E402
from mesastrain.derived import PROVIDERS, headline  # noqa: E402
from mesastrain.derived.bow import (  # noqa: E402
    PLATE_ELEMENTS,
    SUBSTRATE_ELEMENTS,
    blanket_stack,
    free_plate_curvature,
)
from mesastrain.derived.discretisation import estimate  # noqa: E402
from mesastrain.physics.thinfilm import bow_height  # noqa: E402
from mesastrain.run.pipeline import run_case  # noqa: E402
from small_cases import SHAPE_CASES  # noqa: E402

#: name -> case text (our own scenarios, coarse meshes).
CASES = SHAPE_CASES


def with_refine(case, r: float):
    mesh = dataclasses.replace(case.mesh, refine=r, error_estimate=False)
    return dataclasses.replace(case, mesh=mesh)


def values(res) -> dict:
    return {f.name: f for f in headline.headline_figures(res)}


def providers():
    return tuple(p for p in PROVIDERS if p.__module__.split(".")[-1]
                 in ("device", "readouts", "bow"))


def bow_reference(res, reference: float) -> float:
    """Bow height (um) of the plate model with ``reference`` (at most 2) times more elements
    each way (the plate model is the same for every case of one stack: 2x keeps it cheap)."""
    reference = min(reference, 2.0)
    stiff, eig, zb, zt = blanket_stack(res)
    r = free_plate_curvature(stiff, eig, zb, zt, n_xy=int(round(PLATE_ELEMENTS * reference)),
                             n_sub=int(round(SUBSTRATE_ELEMENTS * reference)))
    return float(bow_height(r["mean"], res.case.readouts.wafer_diameter)) * 1e-3


def measure(text: str, reference: float) -> list:
    """Rows (case-free): (kind, name, value, estimate, true error, estimate at refine 1.5)."""
    case = parse_case(tomllib.loads(text))
    res = run_case(with_refine(case, 1.0), providers=providers())
    est = estimate(res)["figures"]
    res15 = run_case(with_refine(case, 1.5), providers=providers())
    est15 = estimate(res15)["figures"]
    ref = values(run_case(with_refine(case, reference), providers=providers(),
                          max_memory_gb=float("inf")))
    rows = []
    for f in headline.headline_figures(res):
        e = est.get(f.name) or {}
        if f.singular or "error" not in e or f.name not in ref:
            continue
        true = abs(f.value - (bow_reference(res, reference) if f.kind == "bow"
                              else ref[f.name].value))
        e15 = (est15.get(f.name) or {}).get("error")
        rows.append((f.kind, f.name, f.value, e["error"], true, e15))
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--reference", type=float, default=3.0)
    ap.add_argument("--cases", nargs="*", default=list(CASES))
    args = ap.parse_args(argv)
    print(f"reference solve: element sizes / {args.reference:g}")
    print(f"{'case':<14}{'figure':<52}{'value':>11}{'estimate':>11}{'true':>11}"
          f"{'effect.':>9}{'est 1.5/1':>10}")
    kinds = {}
    for name in args.cases:
        t = time.perf_counter()
        for kind, fig, v, est, true, e15 in measure(CASES[name], args.reference):
            eff = est / true if true > 0 else np.inf
            shrink = e15 / est if (e15 is not None and est > 0) else np.nan
            kinds.setdefault((name, kind), []).append(eff)
            print(f"{name:<14}{fig[:51]:<52}{v:>11.4g}{est:>11.3g}{true:>11.3g}{eff:>9.2f}"
                  f"{shrink:>10.2f}")
        print(f"  ({time.perf_counter() - t:.1f} s)")
    print("\neffectivity per case and figure kind: median [min, max]")
    for (name, kind), effs in kinds.items():
        e = np.array(effs)
        print(f"{name:<14}{kind:<12}{np.median(e):>8.2f}  [{e.min():.2f}, {e.max():.2f}]  n={e.size}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
