"""Shared pieces of the benchmarks: the demo mesa at a chosen size, stages of
the pipeline timed one by one, memory-bandwidth measurement, subprocesses.

Every benchmark measures each size in its own Python process, so that peak
memory (``resource.getrusage(...).ru_maxrss``) belongs to that size alone.
"""

from __future__ import annotations

import dataclasses
import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "cases" / "sige_stressor_mesa.toml"


def peak_rss_gb() -> float:
    """Peak resident memory of this process so far, GB.

    Linux: ``VmHWM`` from /proc/self/status (``ru_maxrss`` would carry over the
    parent's peak into a child across exec); elsewhere ``ru_maxrss``.
    """
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024 / 1e9
    except OSError:
        pass
    scale = 1 if sys.platform == "darwin" else 1024
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * scale / 1e9


def demo_case(order: int = 1, refine: float = 1.0, path: Path = DEMO):
    """The demo mesa case with the element order and the ``mesh.refine`` factor set."""
    from mesastrain.case.parse import load_case

    case = load_case(path)
    mesh = dataclasses.replace(case.mesh, order=int(order), refine=float(refine))
    return dataclasses.replace(case, mesh=mesh)


def unknowns_of(case) -> int:
    """Exact unknowns solved for a structured case (the mirrored part), counted without
    meshing."""
    from mesastrain.run.resources import estimate

    e = estimate(case)
    return e.unknowns if e.solved_unknowns is None else e.solved_unknowns


def refine_for(target: int, order: int = 1, path: Path = DEMO) -> float:
    """The ``mesh.refine`` factor that gives about ``target`` unknowns (bisection)."""
    lo, hi = 0.25, 16.0
    for _ in range(40):
        mid = (lo * hi) ** 0.5
        if unknowns_of(demo_case(order, mid, path)) < target:
            lo = mid
        else:
            hi = mid
        if hi / lo < 1.002:
            break
    n_lo = unknowns_of(demo_case(order, lo, path))
    n_hi = unknowns_of(demo_case(order, hi, path))
    return lo if abs(n_lo - target) <= abs(n_hi - target) else hi


def stream_bandwidth_gbs(n: int = 20_000_000, repeats: int = 5) -> dict:
    """Memory bandwidth from STREAM-like kernels in numpy, GB/s (best of ``repeats``).

    ``triad`` is a = b + s c done by numpy as two passes (c*s -> a, a + b -> a),
    counted as the 5 arrays of traffic it really moves; ``add`` is a = b + c in
    one pass (3 arrays). The larger of the two is used as the floor.
    """
    a = np.empty(n)
    b = np.random.default_rng(0).random(n)
    c = np.random.default_rng(1).random(n)
    best_t = best_a = np.inf
    for _ in range(repeats):
        t = time.perf_counter()
        np.multiply(c, 3.0, out=a)
        np.add(a, b, out=a)
        best_t = min(best_t, time.perf_counter() - t)
        t = time.perf_counter()
        np.add(b, c, out=a)
        best_a = min(best_a, time.perf_counter() - t)
    triad = 5 * 8 * n / best_t / 1e9
    add = 3 * 8 * n / best_a / 1e9
    return {"triad": triad, "add": add, "floor": max(triad, add)}


def matvec_bytes(nnz: int, n: int) -> int:
    """Least bytes one CSR matrix-vector product moves (float64 values, int32 indices).

    Values and column indices once (12 bytes per nonzero), row pointers, the
    input vector read once and the output written once (20 bytes per row).
    """
    return 12 * int(nnz) + 20 * int(n)


def build_model(case):
    """Layers, symmetry, mesh object and discretisation as :func:`pipeline.run_case` does."""
    from mesastrain.model.regions import build_layers
    from mesastrain.run.pipeline import build_model_mesh, decide_symmetry

    layers = build_layers(case)
    sym = decide_symmetry(case, layers)
    sm = build_model_mesh(case, layers, sym)
    disc = sm.discretise(case.mesh.order)
    return layers, sm, disc


def run_stages(case, solver_method: str = "iterative", probes=None) -> dict:
    """Run mesh -> assembly -> solve -> recovery once, timing each stage.

    Returns a dict of sizes, seconds, solver statistics and the peak memory
    after each stage; ``probes`` (npts, 3) are evaluated exactly when given.
    """
    from mesastrain.fem.assembly import SymbolicCache, assemble, rigid_body_modes
    from mesastrain.fem.constraints import support_dofs
    from mesastrain.fem.fields import recover
    from mesastrain.fem.solve import solve_condensed

    out = {}
    t = time.perf_counter()
    layers, sm, disc = build_model(case)
    out["mesh_s"] = time.perf_counter() - t
    out["peak_mesh_gb"] = peak_rss_gb()
    stiff = np.array([lm.stiffness_sample for lm in layers])
    eig = np.array([lm.eigenstrain_sample for lm in layers])
    t = time.perf_counter()
    cache = SymbolicCache(disc)
    K, f = assemble(disc, sm.region, stiff, eig, cache=cache)
    out["assembly_s"] = time.perf_counter() - t
    out["peak_assembly_gb"] = peak_rss_gb()
    out["unknowns"] = int(K.shape[0])
    out["nonzeros"] = int(K.nnz)
    out["elements"] = int(sm.nelems)
    fixed = support_dofs(disc.doflocs, sm.boundary())
    t = time.perf_counter()
    u, rep = solve_condensed(K, f, fixed, rigid_body_modes(disc.doflocs),
                             method=solver_method, tol=case.solver.tolerance,
                             maxiter=case.solver.max_iterations,
                             spaces=cache.deferred_spaces(sm.region))
    out["solve_total_s"] = time.perf_counter() - t
    out["setup_s"] = rep.setup_seconds
    out["solve_s"] = rep.solve_seconds
    out["iterations"] = rep.iterations
    out["method"] = rep.method
    out["residual"] = rep.residual
    out["energy_error"] = rep.energy_error
    out["levels"] = rep.levels
    out["free_unknowns"] = rep.unknowns
    out["cycle_bytes"] = rep.cycle_bytes
    out["iteration_bytes"] = rep.iteration_bytes
    out["single_share"] = rep.single_share
    out["peak_solve_gb"] = peak_rss_gb()
    # one matrix-vector product with the assembled matrix, for reference
    x = np.random.default_rng(0).random(K.shape[0])
    best = np.inf
    for _ in range(3):
        t = time.perf_counter()
        K @ x
        best = min(best, time.perf_counter() - t)
    out["matvec_s"] = best
    del K, cache
    # recovery as pipeline.run_case does it: unfold a half/quarter model, recover, probes
    t = time.perf_counter()
    if sm.mirrors:
        from mesastrain.mesh.unfold import unfold_model

        sm, disc, u = unfold_model(sm, disc, u)
    fl = recover(disc, u, sm.region, stiff, eig, sm.solve_nnodes, sm.solve_mesh.t)
    if probes is not None:
        pts = np.asarray(probes, dtype=float)
        elems = sm.locate(pts)
        _, stress, _ = sm.evaluate(disc, u, elems, pts, sm.region, stiff, eig)
        out["probe_stress"] = stress.tolist()
    out["recovery_s"] = time.perf_counter() - t
    out["max_cell_stress"] = float(np.abs(fl.cell_stress).max())
    out["peak_gb"] = peak_rss_gb()
    return out


def run_child(script: Path, args: list, timeout: float | None = None,
              env: dict | None = None) -> dict:
    """Run ``python script args`` and parse the last stdout line as JSON.

    Returns ``{"error": ...}`` on a timeout or a failure (e.g. out of memory).
    """
    cmd = [sys.executable, str(script)] + [str(a) for a in args]
    full_env = dict(os.environ)
    full_env.setdefault("OPENBLAS_NUM_THREADS", "1")
    if env:
        full_env.update(env)
    try:
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout,
                              env=full_env)
    except subprocess.TimeoutExpired:
        return {"error": f"timeout after {timeout:.0f} s"}
    lines = [ln for ln in proc.stdout.splitlines() if ln.strip().startswith("{")]
    if proc.returncode != 0 or not lines:
        tail = (proc.stderr.strip().splitlines() or ["no output"])[-1]
        return {"error": f"exit {proc.returncode}: {tail[:120]}"}
    return json.loads(lines[-1])


def limit_memory(gb: float) -> None:
    """Cap this process's address space (a child that exceeds it fails instead of
    pushing the machine into swap or the out-of-memory killer)."""
    cap = int(gb * 1e9)
    resource.setrlimit(resource.RLIMIT_AS, (cap, cap))
