"""Modelled geometry, element sizes and a size/memory/time estimate before solving."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.case.types import Case
from mesastrain.mesh.structured import GridSpacing, StackGeometry, axis_coordinates
from mesastrain.fem.solve import choose_method

# geometry and mesh sizes
# --------------------------------------------------------------------------
def mesh_kind(case: Case) -> str:
    """Which mesher a case uses.

    Returns
    -------
    str
        ``"structured"`` (blanket stacks and rectangles, with or without
        sloped sidewalls: graded hexahedra), ``"section"`` (a stripe: the x-z
        cross-section in generalized plane strain), ``"gmsh"`` (disks,
        polygons, rectangles with rounded corners: tetrahedra) or ``"file"``
        (an imported mesh).
    """
    pat = case.pattern
    shape = pat.shape
    if shape == "stripe":
        return "section"
    if shape == "mesh":
        return "file"
    if shape in ("disk", "polygon"):
        return "gmsh"
    if shape == "rectangle" and getattr(pat, "corner_radius", None):
        return "gmsh"
    return "structured"


def pattern_taper(case: Case) -> float:
    """Horizontal offset of the feature's foot relative to its top edge, nm.

    ``etch_depth / tan(sidewall_angle)`` (:func:`mesastrain.case.outline.taper_of`):
    positive for sidewalls that slope outward toward the etch floor (angle
    < 90 degrees), negative for an undercut, 0 for vertical sidewalls.
    """
    from mesastrain.case.outline import taper_of

    return taper_of(case.pattern) if case.pattern.patterned else 0.0


def pattern_pitch(case: Case) -> tuple:
    """(px, py) of a periodic array in nm, None per axis for an isolated feature."""
    pitch = getattr(case.pattern, "pitch", None)
    if pitch is None:
        return (None, None)
    return tuple(pitch)


def auto_mirrors(case: Case) -> tuple:
    """Mirror axes chosen automatically (:func:`mesastrain.model.symmetry.decide`)."""
    from mesastrain.model.regions import build_layers
    from mesastrain.model.symmetry import decide

    return decide(case, build_layers(case)).mirrors


def refinement_of(case: Case) -> float:
    """The ``mesh.refine`` factor (1 when the case does not set it)."""
    return float(getattr(case.mesh, "refine", None) or 1.0)


def geometry_of(case: Case, mirrors: tuple | None = None) -> tuple[StackGeometry, GridSpacing]:
    """Modelled geometry and element sizes from the case and its defaults.

    Parameters
    ----------
    case : Case
    mirrors : tuple of int, optional
        Mirror axes of the model; None decides automatically
        (:mod:`mesastrain.model.symmetry`).

    Notes
    -----
    ``width``/``length`` are the feature's size at its top surface. With a
    sloped sidewall the grid is built for the foot at the etch floor, wider
    by ``2 * taper``. ``mesh.refine`` = r divides every element size and the
    grading slope (growth - 1), so the size h(x) at every point is divided
    by r: a uniform refinement, as a convergence study needs.
    """
    pat = case.pattern
    stack = case.stack_thickness
    thick = [lay.thickness for lay in case.layers]
    patterned = pat.shape != "none"
    order = case.mesh.order
    taper = pattern_taper(case)
    pitch = pattern_pitch(case)
    margin_y = None
    if patterned:
        W, L = pat.width, (pat.length if pat.length is not None else pat.width)
        etch = pat.etch_depth
        if etch > stack:                    # etched into the substrate
            thick.append(etch - stack)
        feature = max(W, L)
        margin = pat.margin if pat.margin is not None else max(0.5 * feature, 4.0 * etch)
        if pitch[0] is not None:
            margin = max(0.0, 0.5 * (pitch[0] - W) - taper)
            if pitch[1] is not None:
                margin_y = max(0.0, 0.5 * (pitch[1] - L) - taper)
        depth_default = max(1.5 * feature, 4.0 * etch)
        if pitch[0] is not None:
            depth_default = max(1.5 * max(q for q in pitch if q is not None), 4.0 * etch)
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
    refine = refinement_of(case)
    size, edge, lateral_cap = size / refine, edge / refine, lateral_cap / refine
    if patterned:
        if mirrors is None:
            mirrors = auto_mirrors(case)
        periodic = tuple(a for a in (0, 1) if pitch[a] is not None)
    else:
        mirrors, periodic = (), ()
        if refine != 1.0:   # the blanket column is two elements wide; refine it in z only
            lateral_cap = size
        if getattr(case, "dislocations", ()):
            # misfit dislocations in a blanket film: a periodic cell of whole line spacings
            from mesastrain.derived.misfit import blanket_cell

            (W, L), lateral_cap = blanket_cell(case, lateral_cap)
            size, edge = min(size, 2.0 * lateral_cap), min(edge, lateral_cap)
            margin, margin_y, periodic = 0.0, 0.0, (0, 1)
            depth = case.mesh.substrate_depth or min(case.substrate.thickness,
                                                     max(depth, 1.5 * max(W, L)))
    geom = StackGeometry(interfaces=tuple(case.interfaces), substrate_depth=float(depth),
                         half_width=None if W is None else W / 2.0 + taper,
                         half_length=None if L is None else L / 2.0 + taper,
                         etch_depth=float(etch), margin=float(margin),
                         margin_y=None if margin_y is None else float(margin_y),
                         mirrors=tuple(mirrors), periodic=periodic, taper=float(taper))
    return geom, GridSpacing(size=float(size), edge_size=float(edge),
                             growth=1.0 + (float(case.mesh.growth) - 1.0) / refine,
                             lateral_cap=float(lateral_cap), refine=refine)


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
    """Size, memory and time expected for a case before solving.

    ``unknowns`` counts the whole body of the result; ``solved_unknowns`` the
    part that is solved when a mirror-symmetric half or quarter stands for it
    (None: the same).
    """

    nodes: int
    elements: int
    unknowns: int
    order: int
    method: str
    memory_gb: float
    seconds: float
    solved_unknowns: int | None = None

    def to_dict(self) -> dict:
        out = {"nodes": self.nodes, "elements": self.elements, "unknowns": self.unknowns,
               "order": self.order, "solver": self.method,
               "memory_gb": round(self.memory_gb, 3), "seconds": round(self.seconds, 1)}
        if self.solved_unknowns is not None and self.solved_unknowns != self.unknowns:
            out["solved_unknowns"] = self.solved_unknowns
        return out


# resource model of mesh + assembly + solve + recovery, measured with
# benchmarks/solver_scaling.py (demo mesa, 30k-1M unknowns) and time_to_accuracy.py
# (27-node elements) on a 2-core machine; see README "Performance"
#: Peak memory: bytes per stored nonzero (the matrix 12, its single-precision triangles 8,
#: the coarse levels ~8 and the transient Galerkin products), per unknown, and the base.
BYTES_PER_NONZERO = 36.0
BYTES_PER_UNKNOWN = 60.0
BASE_BYTES = 1.0e8
#: Seconds per stored nonzero: assembly (symbolic pattern, element matrices, scatter).
ASSEMBLY_S_PER_NONZERO = 1.0e-7
#: Seconds per nonzero for the multigrid setup (Galerkin products, triangle split).
SETUP_S_PER_NONZERO = 1.2e-7
#: Seconds per nonzero and iteration, and iterations, per element order (geometric multigrid).
ITERATION_S_PER_NONZERO = {1: 8.0e-9, 2: 5.0e-9}
ITERATIONS = {1: 16, 2: 80}
#: Smoothed aggregation (meshes that are not structured bricks): memory per nonzero,
#: setup seconds per nonzero, iterations (cost per iteration as for order 2).
AMG_BYTES_PER_NONZERO = 44.0
AMG_SETUP_S_PER_NONZERO = 2.5e-7
AMG_ITERATIONS = 40
#: Seconds per solved unknown (mesh, supports) and per unknown of the whole body
#: (unfolding a mirrored model, recovery, probes).
MESH_S_PER_UNKNOWN = 1.2e-6
RECOVERY_S_PER_UNKNOWN = 1.5e-6
#: Direct solver (SuperLU on the condensed system, 3-D elasticity, measured from 30k to
#: 127k unknowns): seconds = DIRECT_S n^DIRECT_EXP, bytes = DIRECT_BYTES n^DIRECT_MEM_EXP.
DIRECT_S, DIRECT_EXP = 2.4e-7, 1.73
DIRECT_BYTES, DIRECT_MEM_EXP = 2.3e3, 1.22


def pattern_nonzeros(keep: np.ndarray, order: int) -> int:
    """Stored nonzeros of the vector stiffness matrix of a structured grid.

    Exact for order 1 (scalar dofs p, q are coupled when a kept cell holds
    both, counted over the 27 grid offsets); for order 2 the interior count of
    64 neighbours per scalar dof scaled by the boundary deficit of order 1.
    """
    nx, ny, nz = keep.shape
    k = np.zeros((nx + 2, ny + 2, nz + 2), dtype=bool)
    k[1:-1, 1:-1, 1:-1] = keep
    allowed = {0: (-1, 0), 1: (0,), -1: (-1,)}
    pairs = 0
    for dx in (-1, 0, 1):
        for dy in (-1, 0, 1):
            for dz in (-1, 0, 1):
                conn = np.zeros((nx + 1, ny + 1, nz + 1), dtype=bool)
                for cx in allowed[dx]:
                    for cy in allowed[dy]:
                        for cz in allowed[dz]:
                            conn |= k[cx + 1:cx + 2 + nx, cy + 1:cy + 2 + ny, cz + 1:cz + 2 + nz]
                if dx or dy or dz:
                    # q = p + d must be a grid point: shift the mask so both ends exist
                    sx = slice(max(0, -dx), nx + 1 - max(0, dx))
                    sy = slice(max(0, -dy), ny + 1 - max(0, dy))
                    sz = slice(max(0, -dz), nz + 1 - max(0, dz))
                    pairs += int(conn[sx, sy, sz].sum())
                else:
                    pairs += int(conn.sum())
    if order == 1:
        return 9 * pairs
    verts = count_unknowns(np.zeros(nx + 1), np.zeros(ny + 1), np.zeros(nz + 1), keep, 1)[0]
    scalar = count_unknowns(np.zeros(nx + 1), np.zeros(ny + 1), np.zeros(nz + 1), keep, 2)[2] // 3
    deficit = pairs / (27.0 * verts)
    return int(9 * 64 * scalar * deficit)


def resources(unknowns: int, nonzeros: int, elements: int, nloc: int, order: int,
              method: str, multigrid: str = "geometric",
              whole_unknowns: int | None = None) -> tuple[float, float]:
    """Peak memory (GB) and wall time (s) of mesh + assembly + solve + recovery.

    Parameters
    ----------
    unknowns, nonzeros : int
        Size and stored nonzeros of the stiffness matrix that is solved.
    elements, nloc : int
        Elements and scalar dofs per element (kept for callers; the measured
        per-nonzero rates already include the per-element work).
    order : int
    method : {"direct", "iterative"}
    multigrid : {"geometric", "algebraic"}
        Preconditioner of the iterative solve: geometric on structured brick
        meshes, smoothed aggregation on the others.
    whole_unknowns : int, optional
        Unknowns of the whole body when a mirrored part is solved (recovery
        works on the whole body).
    """
    n, nnz = float(unknowns), float(nonzeros)
    whole = float(whole_unknowns or unknowns)
    mem = BASE_BYTES + BYTES_PER_UNKNOWN * max(n, whole / 4.0)
    secs = (ASSEMBLY_S_PER_NONZERO * nnz + MESH_S_PER_UNKNOWN * n
            + RECOVERY_S_PER_UNKNOWN * whole)
    per_it = ITERATION_S_PER_NONZERO.get(order, ITERATION_S_PER_NONZERO[2])
    if method == "direct":
        mem += 12.0 * nnz + DIRECT_BYTES * n ** DIRECT_MEM_EXP
        secs += DIRECT_S * n ** DIRECT_EXP
    elif multigrid == "geometric":
        mem += BYTES_PER_NONZERO * nnz
        secs += (SETUP_S_PER_NONZERO + ITERATIONS.get(order, ITERATIONS[2]) * per_it) * nnz
    else:
        mem += AMG_BYTES_PER_NONZERO * nnz
        secs += (AMG_SETUP_S_PER_NONZERO + AMG_ITERATIONS * per_it) * nnz
    return mem / 1e9, secs


def estimate(case: Case) -> Estimate:
    """Estimate unknowns, peak memory and wall time without building the mesh.

    Unknowns and stored nonzeros are counted exactly on the structured grid
    the mesher will build (only the mirrored part is solved when symmetry is
    used). Memory and time follow :func:`resources`, whose constants were
    measured with ``benchmarks/solver_scaling.py`` on a 2-core machine: a guide
    within about 30 %, not a promise (other jobs on the machine slow it down).
    """
    kind = mesh_kind(case)
    if kind != "structured":
        return estimate_other_kind(case, kind)
    geom, spacing = geometry_of(case)
    xs, ys, zs = axis_coordinates(geom, spacing)
    order = case.mesh.order
    # the result holds the whole body (a half/quarter model is unfolded after the solve):
    # report its counts, but size memory and time by the part that is solved
    whole = count_unknowns(xs, ys, zs, keep_mask(geom, xs, ys, zs), order)
    if 0 in geom.mirrors:                    # only the non-negative side is meshed
        xs = xs[xs >= 0.0]
    if 1 in geom.mirrors:
        ys = ys[ys >= 0.0]
    keep = keep_mask(geom, xs, ys, zs)
    nodes, nel, n = count_unknowns(xs, ys, zs, keep, order)
    nnz = pattern_nonzeros(keep, order)
    method = choose_method(case.solver.method, n, getattr(case.solver, "direct_limit", None))
    mem, secs = resources(n, nnz, nel, 8 if order == 1 else 27, order, method,
                          whole_unknowns=whole[2])
    return Estimate(*whole, order, method, mem, secs, solved_unknowns=n)


def estimate_from_counts(case: Case, nodes: int, elements: int, scalar_dofs: int,
                         dofs_per_element: int, nnz_per_row: int) -> Estimate:
    """An :class:`Estimate` from mesh counts, with the memory and time rules of :func:`estimate`.

    Used for the meshes that are not structured hexahedra (cross-sections,
    tetrahedra), where the counts come from the mesher's own estimate.
    """
    n = 3 * int(scalar_dofs)
    nnz = n * nnz_per_row
    method = choose_method(case.solver.method, n, getattr(case.solver, "direct_limit", None))
    mem, secs = resources(n, nnz, int(elements), int(dofs_per_element), case.mesh.order, method,
                          multigrid="algebraic")
    return Estimate(int(nodes), int(elements), n, case.mesh.order, method, mem, secs)


def estimate_other_kind(case: Case, kind: str) -> Estimate:
    """Size estimate of a cross-section, gmsh or imported mesh (see :func:`mesh_kind`)."""
    if kind == "section":
        from mesastrain.mesh.section import estimate_section

        return estimate_section(case)
    if kind == "gmsh":
        from mesastrain.mesh.shapes import estimate_shape

        return estimate_shape(case)
    from mesastrain.mesh.imported import estimate_file

    return estimate_file(case)


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
