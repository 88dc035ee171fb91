"""Cost model: memory and time of mesh + assembly + solve + recovery, before solving.

The constants were measured with ``benchmarks/solver_scaling.py`` (demo mesa,
30k-1M unknowns) and ``benchmarks/time_to_accuracy.py`` (27-node elements) on a
2-core machine; see README "Performance". Every mesh kind turns its counts
into an :class:`Estimate` with :func:`estimate_from_counts` or, for the
structured grid, with :func:`count_unknowns`, :func:`pattern_nonzeros` and
:func:`resources`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.fem.solve import choose_method


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
    element_type: str = ""
    solved_nodes: int | None = None
    solved_elements: int | None = None
    symmetry: str = "full"
    #: seconds of mesh + assembly + solve + recovery (part of ``seconds``)
    solver_seconds: float = 0.0
    #: seconds of one more right-hand side on the same operator (iterations or substitution)
    rhs_seconds: float = 0.0

    def to_dict(self) -> dict:
        """The estimate as ``check --json`` prints it: the solved system and the exported body."""
        return {
            "solved": {"unknowns": self.solved_unknowns or self.unknowns,
                       "nodes": self.solved_nodes or self.nodes,
                       "elements": self.solved_elements or self.elements,
                       "element_type": self.element_type, "order": self.order,
                       "symmetry": self.symmetry},
            "exported": {"nodes": self.nodes, "elements": self.elements},
            "solver": self.method, "memory_gb": round(self.memory_gb, 3),
            "seconds": round(self.seconds, 1)}


#: Nodes per element by shape for element order 1 and 2 (27-node bricks, 10-node
#: tetrahedra, 9-node quadrilaterals, 6-node triangles).
ELEMENT_NODES = {"hexahedra": (8, 27), "tetrahedra": (4, 10), "quadrilaterals": (4, 9),
                 "triangles": (3, 6)}


def element_type(shape: str, order: int, section: bool = False) -> str:
    """The element type in words: ``"8-node hexahedra"``, ``"10-node tetrahedra"``, ...

    Parameters
    ----------
    shape : {"hexahedra", "tetrahedra", "quadrilaterals", "triangles"}
    order : int
        1 or 2.
    section : bool
        A 2-D x-z cross-section (generalized plane strain) rather than a 3-D body.
    """
    n = ELEMENT_NODES.get(shape, (0, 0))[0 if order == 1 else 1]
    text = f"{n}-node {shape}" if n else shape
    return text + (" of the x-z cross-section (generalized plane strain)" if section else "")



#: Peak memory: bytes per stored nonzero (the matrix 12, its single-precision triangles 8,
#: the coarse levels ~8 and the transient Galerkin products), per unknown, and the base.
BYTES_PER_NONZERO = 36.0
BYTES_PER_UNKNOWN = 60.0
BASE_BYTES = 1.8e8
#: Seconds per stored nonzero: assembly (symbolic pattern, element matrices, scatter).
ASSEMBLY_S_PER_NONZERO = 7.0e-8
#: Seconds per nonzero for the multigrid setup (Galerkin products, triangle split).
SETUP_S_PER_NONZERO = 1.2e-7
#: Seconds per nonzero and iteration, and iterations, per element order (geometric multigrid;
#: order 1 refitted on a quiet machine: 19 iterations of the 78M-nonzero demo mesa in 6.0 s).
ITERATION_S_PER_NONZERO = {1: 5.0e-9, 2: 5.0e-9}
ITERATIONS = {1: 16, 2: 80}
#: Smoothed aggregation (meshes that are not structured bricks): memory per nonzero,
#: setup seconds per nonzero, iterations (cost per iteration as for order 2).
AMG_BYTES_PER_NONZERO = 44.0
AMG_SETUP_S_PER_NONZERO = 2.5e-7
AMG_ITERATIONS = 40
#: p-multigrid (quadratic tetrahedra: the P2 level, E^T A E on P1, smoothed aggregation
#: below): set-up seconds per nonzero of the P2 matrix, iterations.
PMG_SETUP_S_PER_NONZERO = 6.0e-8
#: ... and peak bytes per nonzero of the P2 matrix (the matrix, E^T A E and the aggregation
#: below it; fitted quiet on the L pad at 131k-977k unknowns: 3.65 GB at 84M nonzeros).
PMG_BYTES_PER_NONZERO = 33.0
PMG_ITERATIONS = 24
#: Seconds per solved unknown (mesh, supports) and per unknown of the whole body
#: (unfolding a mirrored model, recovery, probes; recovery refitted quiet: 0.8-1.0 us per
#: unknown of the whole body from 100k to 1M solved unknowns).
MESH_S_PER_UNKNOWN = 1.2e-6
RECOVERY_S_PER_UNKNOWN = 1.0e-6
#: Everything after the solve that every run pays: start-up (imports), derived quantities
#: without the error bars, fields.vtu, tables, and (``pictures``) the pictures and
#: report.html. Seconds = OUTPUT_BASE_S + OUTPUT_S_PER_UNKNOWN n_whole, plus
#: PICTURES_BASE_S + PICTURES_S_PER_UNKNOWN n_whole when pictures are drawn
#: (benchmarks/end_to_end.py --plain: demo mesa at 100k, 300k and 1M unknowns, quiet machine).
OUTPUT_BASE_S = 2.0
OUTPUT_S_PER_UNKNOWN = 2.4e-6
#: (refitted 2026-12-03, evening: fields.vtu is written beside the pictures, so the smallest
#: runs' writing fell by about half a second; benchmarks/estimate_accuracy.py --all)
PICTURES_BASE_S = 1.8
PICTURES_S_PER_UNKNOWN = 8.0e-7
#: Peak memory of the derived quantities beyond the fields: the stage-0 providers run side
#: by side, each on blocks of at most about 100k elements (energy-norm patches, device
#: fields, readout profiles), so the extra peak grows with the elements up to one block:
#: bytes = DERIVED_BYTES_PER_ELEMENT x min(whole elements, DERIVED_BLOCK_ELEMENTS). Refitted
#: to benchmarks/estimate_accuracy.py --all after the Gauss-point recovery stopped building
#: a basis per point and vertex (2 kB per element of a block) and the device cell fields lost
#: their per-mode Raman detail: the demo mesa at 119k elements now peaks at the solve's
#: 0.46 GB (0.71 GB before); every case of the benchmark within 0.78-1.28 of its peak.
DERIVED_BYTES_PER_ELEMENT = 1.3e3
DERIVED_BLOCK_ELEMENTS = 100_000
#: The error bars of issue 17, counted by :func:`mesastrain.run.resources.estimate`:
#: discretisation error = ERROR_COARSE_SHARE of the solver stages (the coarser solve has
#: about 1/8 of the unknowns, plus its own mesh and readouts) + ERROR_S_PER_UNKNOWN per
#: unknown of the whole body (patch recovery at every Gauss point); material scatter = one
#: extra right-hand side (:func:`rhs_seconds`) per constant group that moves the
#: displacement. Fitted on the demo mesa, default minus plain run, at 100k-1M unknowns.
ERROR_COARSE_SHARE = 0.2
ERROR_S_PER_UNKNOWN = 1.4e-6
EXTRA_RHS_SHARE = 0.45
DIRECT_RHS_SHARE = 0.03
#: Tetrahedral meshes: peak bytes per element beyond the matrix and multigrid (the mesher's
#: own copy, the mesh's edges and facets; linear tetrahedra at 135k unknowns peaked at
#: 0.86 GB against 0.34 GB of matrix-based estimate, for about 250k elements).
TET_BYTES_PER_ELEMENT = 2.0e3
#: Direct solver on a 2-D cross-section (SuperLU, generalized plane strain): seconds =
#: DIRECT2D_S n^DIRECT2D_EXP, bytes = DIRECT2D_BYTES n^DIRECT2D_MEM_EXP.
DIRECT2D_S, DIRECT2D_EXP = 1.0e-6, 1.2
DIRECT2D_BYTES, DIRECT2D_MEM_EXP = 5.7e2, 1.1
#: Direct solver (SuperLU on the condensed system, 3-D elasticity, measured from 30k to
#: 127k unknowns): seconds = DIRECT_S n^DIRECT_EXP, bytes = DIRECT_BYTES n^DIRECT_MEM_EXP.
DIRECT_S, DIRECT_EXP = 2.4e-7, 1.73
DIRECT_BYTES, DIRECT_MEM_EXP = 2.3e3, 1.22


def count_unknowns(keep: np.ndarray, order: int) -> tuple[int, int, int]:
    """Exact node, element and unknown counts of a structured grid.

    Parameters
    ----------
    keep : ndarray of bool (nx, ny, nz)
        Cells of the grid that belong to the body.
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
    verts = count_unknowns(keep, 1)[0]
    scalar = count_unknowns(keep, 2)[2] // 3
    deficit = pairs / (27.0 * verts)
    return int(9 * 64 * scalar * deficit)



def output_seconds(whole_unknowns: int, pictures: bool = True) -> float:
    """Seconds of start-up, derived quantities and writing (pictures when ``pictures``)."""
    n = float(whole_unknowns)
    secs = OUTPUT_BASE_S + OUTPUT_S_PER_UNKNOWN * n
    if pictures:
        secs += PICTURES_BASE_S + PICTURES_S_PER_UNKNOWN * n
    return secs


def rhs_seconds(unknowns: int, nonzeros: int, order: int, method: str,
                multigrid: str = "geometric", dimension: int = 3) -> float:
    """Seconds of one more right-hand side solved on an operator already set up.

    Iterative: the iterations of :func:`resources` times :data:`EXTRA_RHS_SHARE` (the
    extra solves stop at a looser tolerance: 8 iterations instead of 19 at 1M, and the
    right-hand side is built element by element; measured 2.9 s a group at 1M structured and
    4.8 s at 977k quadratic tetrahedral unknowns). Direct: a forward and backward
    substitution, :data:`DIRECT_RHS_SHARE` of the factorisation.
    """
    n, nnz = float(unknowns), float(nonzeros)
    per_it = ITERATION_S_PER_NONZERO.get(order, ITERATION_S_PER_NONZERO[2])
    if method == "direct":
        full = DIRECT2D_S * n ** DIRECT2D_EXP if dimension == 2 else DIRECT_S * n ** DIRECT_EXP
        return DIRECT_RHS_SHARE * full
    its = {"p": PMG_ITERATIONS, "geometric": ITERATIONS.get(order, ITERATIONS[2])}.get(
        multigrid, AMG_ITERATIONS)
    return EXTRA_RHS_SHARE * its * per_it * nnz


def resources(unknowns: int, nonzeros: int, elements: int, nloc: int, order: int,
              method: str, multigrid: str = "geometric",
              whole_unknowns: int | None = None, dimension: int = 3,
              whole_elements: int | None = None) -> tuple[float, float]:
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
    multigrid : {"geometric", "algebraic", "p"}
        Preconditioner of the iterative solve: geometric on structured brick
        meshes, p-multigrid on quadratic tetrahedra, smoothed aggregation on
        the others.
    whole_unknowns : int, optional
        Unknowns of the whole body when a mirrored part is solved (recovery
        works on the whole body).
    dimension : {2, 3}
        2 for a cross-section (the direct solver's fill-in grows more slowly).
    whole_elements : int, optional
        Elements of the whole body (default ``elements``): the derived quantities work on
        them in blocks, several providers at once (:data:`DERIVED_BYTES_PER_ELEMENT`).
    """
    n, nnz = float(unknowns), float(nonzeros)
    whole = float(whole_unknowns or unknowns)
    mem = BASE_BYTES + BYTES_PER_UNKNOWN * max(n, whole / 4.0)
    mem += DERIVED_BYTES_PER_ELEMENT * min(float(whole_elements or elements),
                                           DERIVED_BLOCK_ELEMENTS)
    secs = (ASSEMBLY_S_PER_NONZERO * nnz + MESH_S_PER_UNKNOWN * n
            + RECOVERY_S_PER_UNKNOWN * whole)
    per_it = ITERATION_S_PER_NONZERO.get(order, ITERATION_S_PER_NONZERO[2])
    if method == "direct" and dimension == 2:
        mem += 12.0 * nnz + DIRECT2D_BYTES * n ** DIRECT2D_MEM_EXP
        secs += DIRECT2D_S * n ** DIRECT2D_EXP
    elif method == "direct":
        mem += 12.0 * nnz + DIRECT_BYTES * n ** DIRECT_MEM_EXP
        secs += DIRECT_S * n ** DIRECT_EXP
    elif multigrid == "p":
        mem += PMG_BYTES_PER_NONZERO * nnz
        secs += (PMG_SETUP_S_PER_NONZERO + PMG_ITERATIONS * per_it) * nnz
    elif multigrid == "geometric":
        mem += BYTES_PER_NONZERO * nnz
        secs += (SETUP_S_PER_NONZERO + ITERATIONS.get(order, ITERATIONS[2]) * per_it) * nnz
    else:
        mem += AMG_BYTES_PER_NONZERO * nnz
        secs += (AMG_SETUP_S_PER_NONZERO + AMG_ITERATIONS * per_it) * nnz
    return mem / 1e9, secs



def estimate_from_counts(case, nodes: int, elements: int, scalar_dofs: int,
                         dofs_per_element: int, nnz_per_row: int,
                         mesh_seconds: float = 0.0, shape: str = "tetrahedra",
                         section: bool = False) -> Estimate:
    """An :class:`Estimate` from mesh counts, with the memory and time rules of :func:`resources`.

    Used for the meshes that are not structured hexahedra (cross-sections,
    tetrahedra), where the counts come from the mesher's own estimate.

    Parameters
    ----------
    case : Case
        Its ``solver`` and ``mesh.order`` settings are used.
    nodes, elements, scalar_dofs : int
    dofs_per_element : int
        Scalar dofs per element.
    nnz_per_row : int
        Typical stored nonzeros per matrix row.
    mesh_seconds : float
        Time of the mesher (gmsh) when the caller can predict it.
    shape, section
        The element shape and whether the mesh is a 2-D cross-section
        (:func:`element_type`); a cross-section is factorised directly for
        ``solver.method = "auto"`` (:func:`mesastrain.run.pipeline.run_case`).
    """
    dimension = 2 if section else 3
    n = 3 * int(scalar_dofs)
    nnz = n * nnz_per_row
    if dimension == 2 and case.solver.method == "auto":
        method = "direct"
    else:
        method = choose_method(case.solver.method, n, case.solver.direct_limit)
    order = case.mesh.order
    mg = "p" if (dimension == 3 and order == 2) else "algebraic"
    mem, secs = resources(n, nnz, int(elements), int(dofs_per_element), order, method,
                          multigrid=mg, dimension=dimension)
    solver = secs + mesh_seconds
    secs = solver + output_seconds(n, case.output.pictures and case.output.report)
    if dimension == 3:
        mem += TET_BYTES_PER_ELEMENT * int(elements) / 1e9
    return Estimate(int(nodes), int(elements), n, order, method, mem, secs,
                    element_type=element_type(shape, order, section), solver_seconds=solver,
                    rhs_seconds=rhs_seconds(n, nnz, order, method, mg, dimension))

