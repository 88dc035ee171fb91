"""Modelled geometry, element sizes and a size/memory/time estimate before solving."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .casefile import Case
from .meshing import GridSpacing, StackGeometry, axis_coordinates
from .solve import choose_method

# geometry and mesh sizes
# --------------------------------------------------------------------------
def geometry_of(case: Case) -> tuple[StackGeometry, GridSpacing]:
    """Modelled geometry and element sizes from the case and its defaults."""
    pat = case.pattern
    stack = case.stack_thickness
    thick = [lay.thickness for lay in case.layers]
    patterned = pat.shape != "none"
    order = case.mesh.order
    if patterned:
        W, L = pat.width, pat.length
        etch = pat.etch_depth
        if etch > stack:                    # etched into the substrate
            thick.append(etch - stack)
        feature = max(W, L)
        margin = pat.margin if pat.margin is not None else max(0.5 * feature, 4.0 * etch)
        depth_default = max(1.5 * feature, 4.0 * etch)
    else:
        W = L = None
        etch = 0.0
        margin = max(stack, 1.0)
        depth_default = max(2.0 * stack, 10.0)
    depth = case.mesh.substrate_depth or min(case.substrate.thickness, depth_default)
    t_min = min(thick)
    per_layer = 4.0 if order == 1 else 2.0
    size = case.mesh.size or t_min * 2.0 / per_layer
    edge = case.mesh.edge_size or min(size, t_min / per_layer)
    if patterned:
        lateral_cap = case.mesh.size or max(size, min(W, L) / (16.0 if order == 1 else 8.0))
    else:
        lateral_cap = size
    geom = StackGeometry(interfaces=tuple(case.interfaces), substrate_depth=float(depth),
                         half_width=None if W is None else W / 2.0,
                         half_length=None if L is None else L / 2.0,
                         etch_depth=float(etch), margin=float(margin))
    return geom, GridSpacing(size=float(size), edge_size=float(edge),
                             growth=float(case.mesh.growth), lateral_cap=float(lateral_cap))


def count_unknowns(xs, ys, zs, keep: np.ndarray, order: int) -> tuple[int, int, int]:
    """Exact node, element and unknown counts of a structured grid.

    Parameters
    ----------
    xs, ys, zs : ndarray
        Grid coordinates.
    keep : ndarray of bool (nx-1, ny-1, nz-1)
        Cells that belong to the body.
    order : int
        1 or 2.

    Returns
    -------
    (nodes, elements, unknowns)
    """
    nx, ny, nz = keep.shape
    # on the doubled grid, a point belongs to the body if any adjacent cell does
    k2 = np.zeros((2 * nx + 1, 2 * ny + 1, 2 * nz + 1), dtype=bool)
    for dx in (0, 1, 2):
        for dy in (0, 1, 2):
            for dz in (0, 1, 2):
                k2[dx:dx + 2 * nx:2, dy:dy + 2 * ny:2, dz:dz + 2 * nz:2] |= keep
    vertices = int(k2[::2, ::2, ::2].sum())
    scalar = vertices if order == 1 else int(k2.sum())
    return vertices, int(keep.sum()), 3 * scalar


def keep_mask(geom: StackGeometry, xs, ys, zs) -> np.ndarray:
    """Cells of the full grid that belong to the body (not etched away)."""
    xm, ym, zm = (0.5 * (g[1:] + g[:-1]) for g in (xs, ys, zs))
    keep = np.ones((len(xm), len(ym), len(zm)), dtype=bool)
    if geom.patterned and geom.etch_depth > 0:
        outside = (np.abs(xm)[:, None] > geom.half_width) | (np.abs(ym)[None, :] > geom.half_length)
        keep &= ~(outside[:, :, None] & (zm > geom.etch_floor)[None, None, :])
    return keep


@dataclass(frozen=True)
class Estimate:
    """Size, memory and time expected for a case before solving."""

    nodes: int
    elements: int
    unknowns: int
    order: int
    method: str
    memory_gb: float
    seconds: float

    def to_dict(self) -> dict:
        return {"nodes": self.nodes, "elements": self.elements, "unknowns": self.unknowns,
                "order": self.order, "solver": self.method,
                "memory_gb": round(self.memory_gb, 3), "seconds": round(self.seconds, 1)}


def estimate(case: Case) -> Estimate:
    """Estimate unknowns, peak memory and wall time without building the mesh.

    Memory: the element-matrix array and its COO indices during assembly
    dominate (24 bytes per entry, held once more while summing), plus the
    matrix, its condensed copy and the multigrid hierarchy (about 40 bytes
    per stored nonzero). Time: rates measured on a 2-core machine
    (benchmarks/); a rough guide, not a promise.
    """
    geom, spacing = geometry_of(case)
    xs, ys, zs = axis_coordinates(geom, spacing)
    keep = keep_mask(geom, xs, ys, zs)
    order = case.mesh.order
    nodes, nel, n = count_unknowns(xs, ys, zs, keep, order)
    nd = 24 if order == 1 else 81
    entries = nel * nd * nd
    nnz_per_row = 81 if order == 1 else 200
    nnz = n * nnz_per_row
    mem = (entries * 24 * 1.6 + nnz * 40 + 2e8) / 1e9
    method = choose_method(case.solver.method, n)
    if method == "direct":
        secs = 1.0 + 2e-9 * n ** 1.8
    else:
        secs = 1.0 + n * (6e-5 if order == 1 else 2.5e-4)
    return Estimate(nodes, nel, n, order, method, mem, secs)


def available_memory_gb() -> float:
    """Memory the operating system reports as available, GB."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) / 1e6
    except OSError:
        pass
    return float("inf")
