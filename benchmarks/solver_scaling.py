"""Speed and memory of assembly, solve and recovery on the demo mesa, by size.

Usage::

    python benchmarks/solver_scaling.py                      # 125k, 250k, 500k, 1M unknowns
    python benchmarks/solver_scaling.py --sizes 30e3 125e3   # chosen sizes
    python benchmarks/solver_scaling.py --tiny               # a quick check (seconds)

Each size runs in its own process (peak memory is per size). The case is
``cases/sige_stressor_mesa.toml`` (a quarter model by symmetry) with trilinear
elements (``--order 2`` for 27-node ones) and ``mesh.refine`` chosen to give
the requested number of unknowns. Columns:

unknowns, nonzeros
    of the assembled stiffness matrix (before the fixed dofs are removed)
assembly s, setup s, solve s, its, recovery s
    wall times of the stages; setup = multigrid hierarchy (or factorisation),
    solve = conjugate-gradient iterations (or triangular solves), its =
    iterations to relative residual 1e-8 and estimated stress error 1e-4
total s
    assembly + setup + solve + recovery (the mesh is built before and not
    counted; its time is in the JSON output)
peak GB
    peak resident memory of the process
floor x
    solve time / (its x bytes of one matrix-vector product / bandwidth): how
    many times slower than the memory-bandwidth floor of the iteration is
    (bandwidth measured in this run by a STREAM-like numpy triad; bytes of the
    product of the assembled matrix in double precision with int32 indices)
V mv
    bytes one V-cycle moves (streaming model of ``Hierarchy.traffic``: every
    pass of the Gauss-Seidel sweeps, residual, restriction and prolongation
    on every level) in units of one double-precision matrix-vector product
sp %
    share of one whole iteration's bytes (product + V-cycle + vector updates)
    in single-precision arrays
iter x
    solve time / (its x bytes of one whole iteration / bandwidth): the floor
    of the iteration as it is built, V-cycle included; ``floor x`` divided by
    ``iter x`` is what the V-cycle costs in products
direct x
    scipy's direct solver (SuperLU, splu) on the same condensed system in its
    own process: its setup+solve time and peak memory divided by those of the
    iterative solve (">" when it ran out of time or memory)

Other processes on the machine change the timings; run it on an idle machine.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from common import (  # noqa: E402
    demo_case,
    limit_memory,
    matvec_bytes,
    peak_rss_gb,
    refine_for,
    run_child,
    run_stages,
    stream_bandwidth_gbs,
)

SCRIPT = Path(__file__).resolve()
DEFAULT_SIZES = (125e3, 250e3, 500e3, 1e6)


def child_iterative(refine: float, order: int) -> dict:
    case = demo_case(order, refine)
    return run_stages(case, "iterative")


def child_direct(refine: float, order: int) -> dict:
    """SuperLU on the condensed system of the same case (timed alone)."""
    import scipy.sparse.linalg as spla
    from common import build_model

    from mesastrain.fem.assembly import assemble
    from mesastrain.fem.constraints import support_dofs
    from mesastrain.fem.solve import condense

    case = demo_case(order, refine)
    layers, sm, disc = build_model(case)
    stiff = np.array([lm.stiffness_sample for lm in layers])
    eig = np.array([lm.eigenstrain_sample for lm in layers])
    K, f = assemble(disc, sm.region, stiff, eig)
    fixed = support_dofs(disc.doflocs, sm.boundary())
    free = np.ones(K.shape[0], dtype=bool)
    free[fixed] = False
    A = condense(K, free).tocsc()
    b = f[free]
    del K
    base = peak_rss_gb()
    t = time.perf_counter()
    lu = spla.splu(A, permc_spec="MMD_AT_PLUS_A")
    x = lu.solve(b)
    secs = time.perf_counter() - t
    res = float(np.linalg.norm(b - A @ x) / np.linalg.norm(b))
    return {"direct_s": secs, "direct_peak_gb": peak_rss_gb(), "before_gb": base,
            "residual": res, "unknowns": int(A.shape[0])}


def _total(r: dict) -> float:
    return r["assembly_s"] + r["setup_s"] + r["solve_s"] + r["recovery_s"]


def measure(target: float, order: int, direct_max: float, direct_timeout: float,
            direct_mem_gb: float, repeat: int = 1) -> dict:
    refine = refine_for(int(target), order)
    row = None
    for _ in range(max(1, repeat)):        # best of `repeat` runs (others share the machine)
        r = run_child(SCRIPT, ["--child", "iterative", "--refine", repr(refine),
                               "--order", str(order)])
        if "error" in r:
            row = row or r
            continue
        if row is None or "error" in row or _total(r) < _total(row):
            row = r
    row["refine"] = refine
    row["target"] = target
    if "error" not in row and row["unknowns"] <= direct_max:
        d = run_child(SCRIPT, ["--child", "direct", "--refine", repr(refine), "--order",
                               str(order), "--mem", str(direct_mem_gb)],
                      timeout=direct_timeout)
        row["direct"] = d
    return row


def fmt_row(r: dict, bw: float) -> str:
    if "error" in r:
        return f"{int(r['target']):>10,}  failed: {r['error']}"
    total = _total(r)
    floor = r["iterations"] * matvec_bytes(r["nonzeros"], r["unknowns"]) / (bw * 1e9)
    ratio = r["solve_s"] / floor if floor > 0 else float("nan")
    d = r.get("direct")
    if d is None:
        dtxt = "-"
    elif "error" in d:
        dtxt = f">{d['error'][:24]}"
    else:
        it = r["setup_s"] + r["solve_s"]
        dtxt = f"{d['direct_s'] / it:5.1f}x t, {d['direct_peak_gb'] / r['peak_gb']:.1f}x mem"
    mv = matvec_bytes(r["nonzeros"], r["unknowns"])
    it_bytes = r.get("iteration_bytes", 0)
    cycle_mv = r.get("cycle_bytes", 0) / mv
    full = (r["solve_s"] / (r["iterations"] * it_bytes / (bw * 1e9))
            if it_bytes and r["iterations"] else float("nan"))
    return (f"{r['unknowns']:>10,} {r['nonzeros']:>12,} {r['assembly_s']:>8.2f} "
            f"{r['setup_s']:>7.2f} {r['solve_s']:>7.2f} {r['iterations']:>4d} "
            f"{r['recovery_s']:>8.2f} {total:>8.2f} {r['peak_gb']:>7.2f} {ratio:>7.2f} "
            f"{cycle_mv:>6.2f} {100 * r.get('single_share', 0.0):>6.0f} {full:>7.2f}  {dtxt}")


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--sizes", nargs="+", type=float, help="target unknowns")
    p.add_argument("--order", type=int, default=1, choices=(1, 2))
    p.add_argument("--direct-max", type=float, default=60e3,
                   help="largest size also solved with SuperLU (default 60000)")
    p.add_argument("--direct-timeout", type=float, default=600.0)
    p.add_argument("--direct-mem", type=float, default=8.0,
                   help="address-space cap of the SuperLU process, GB")
    p.add_argument("--tiny", action="store_true", help="two small sizes, for a smoke test")
    p.add_argument("--repeat", type=int, default=1,
                   help="run each size this many times and keep the fastest (default 1)")
    p.add_argument("--json", help="also write the rows to this file")
    p.add_argument("--child", choices=("iterative", "direct"), help=argparse.SUPPRESS)
    p.add_argument("--refine", type=float, help=argparse.SUPPRESS)
    p.add_argument("--mem", type=float, help=argparse.SUPPRESS)
    a = p.parse_args(argv)
    if a.child:
        if a.mem:
            limit_memory(a.mem)
        fn = child_iterative if a.child == "iterative" else child_direct
        print(json.dumps(fn(a.refine, a.order)))
        return 0
    sizes = a.sizes or ((4e3, 8e3) if a.tiny else DEFAULT_SIZES)
    bw = stream_bandwidth_gbs(5_000_000 if a.tiny else 20_000_000)
    print(f"memory bandwidth (numpy STREAM-like): triad {bw['triad']:.1f} GB/s, "
          f"add {bw['add']:.1f} GB/s; floor uses {bw['floor']:.1f} GB/s")
    print(f"demo mesa, order {a.order}, quarter model; each size in its own process")
    head = (f"{'unknowns':>10} {'nonzeros':>12} {'assembly':>8} {'setup':>7} {'solve':>7} "
            f"{'its':>4} {'recovery':>8} {'total':>8} {'peak GB':>7} {'floor x':>7} "
            f"{'V mv':>6} {'sp %':>6} {'iter x':>7}  direct x")
    print(head)
    print("-" * len(head))
    rows = []
    for s in sizes:
        r = measure(s, a.order, a.direct_max, a.direct_timeout, a.direct_mem, a.repeat)
        rows.append(r)
        print(fmt_row(r, bw["floor"]), flush=True)
    ok = [r for r in rows if "error" not in r]
    if len(ok) >= 2:
        r0, r1 = ok[0], ok[-1]
        t0, t1 = _total(r0), _total(r1)
        print(f"growth {r0['unknowns']:,} -> {r1['unknowns']:,} unknowns "
              f"(x{r1['unknowns'] / r0['unknowns']:.1f}): time x{t1 / t0:.1f}")
    if a.json:
        Path(a.json).write_text(json.dumps({"bandwidth": bw, "order": a.order, "rows": rows},
                                           indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
